"""Catalogue (datasheet) data in ``[motor]``: the derived model, the consistency checks, the
messages, ``with_changes`` and the scenario writer with catalogue keys, and ``dcsim motor``.

The datasheets here are built by hand from a known model with the textbook steady-state
relations of the permanent-magnet machine (written out again in this file, not taken from
the module under test): stall current ``V/R``, stall torque ``K V/R``, no-load speed
``(K V - R T_c)/(K^2 + R B)``, no-load current ``(B w0 + T_c)/K``, mechanical time constant
``J R/K^2`` (Hughes & Drury, *Electric Motors and Drives*, 4th ed., ch. 3; Mohan, *Electric
Drives*, ch. 7) and the speed constant ``Kt = 60/(2 pi Kv)`` (the project's check list,
derived). The motors are invented: a greenhouse vent actuator and a seed-drill metering drive.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import pytest

from dcsim import cli
from dcsim.errors import ScenarioError
from dcsim.scenario import datasheet as ds
from dcsim.scenario import load_scenario, load_scenario_text
from dcsim.scenario.write import scenario_to_toml

REPO = Path(__file__).resolve().parents[1]
VENT = REPO / "scenarios" / "greenhouse_vent_catalogue_motor.toml"
RPM = 2.0 * math.pi / 60.0  # rad/s per rpm, by the definition of the unit

# The known model of an invented seed-drill metering motor, 12 V.
V = 12.0
R = 1.5  # ohm
L = 0.9e-3  # H
K = 0.021  # N*m/A
J = 4.2e-6  # kg*m^2
B = 1.5e-6  # N*m*s/rad
TC = 1.8e-3  # N*m


def sheet(**figures: object) -> str:
    """A scenario whose [motor] table is the given keys (values written as TOML)."""
    body = "\n".join(f"{k} = {v!r}" if not isinstance(v, str) else f'{k} = "{v}"'
                     for k, v in figures.items())  # fmt: skip
    return (
        '[about]\ntitle = "Seed-drill metering drive"\n\n[simulation]\nduration = "0.1 s"\n\n'
        f"[motor]\n{body}\n\n[supply]\nvoltage = 12.0\n\n[control]\nvoltage = 12.0\n"
    )


def datasheet_of_model(b: float = 0.0, tc: float = TC) -> dict[str, float]:
    """Catalogue figures of the known model, SI, by the closed forms (see the module notes)."""
    w0 = (K * V - R * tc) / (K * K + R * b)
    return {
        "nominal_voltage": V,
        "no_load_speed": w0,
        "no_load_current": (b * w0 + tc) / K,
        "stall_torque": K * V / R,
        "stall_current": V / R,
        "speed_constant": 1.0 / K,  # rad/(V*s): no-load speed per volt of back-EMF
        "mechanical_time_constant": J * R / K**2,
    }


def three_figures(x: float) -> float:
    """Rounded to three significant figures, as a catalogue prints it."""
    return float(f"{x:.3g}")


# --------------------------------------------------------------------------------------------
# The speed-constant identity
# --------------------------------------------------------------------------------------------


def test_speed_constant_identity():
    for kv in (50.0, 200.0, 500.0, 1370.0):
        # Source: CHECKS.md "speed constant", Kt = 60 / (2 pi Kv) = 9.5493 / Kv (derived)
        assert ds.torque_constant_from_speed_constant(kv) == pytest.approx(
            60.0 / (2.0 * math.pi * kv), rel=1e-15
        )
        # 9.5493 is 60 / (2 pi) to five figures: agreement to 5e-6 is what it can show
        assert ds.torque_constant_from_speed_constant(kv) == pytest.approx(9.5493 / kv, rel=5e-6)
        # Source: the same identity, inverted
        assert ds.speed_constant_from_torque_constant(
            ds.torque_constant_from_speed_constant(kv)
        ) == pytest.approx(kv, rel=1e-15)


def test_speed_constant_key_in_place_of_torque_constant():
    sc = load_scenario_text(sheet(resistance=R, inductance=L, inertia=J,
                                  speed_constant="500 rpm/V"))  # fmt: skip
    # Source: CHECKS.md, Kt = 60 / (2 pi Kv): 60 / (2 pi 500) = 0.0190986 N*m/A (derived)
    assert sc.motor.torque_constant == pytest.approx(60.0 / (2.0 * math.pi * 500.0), rel=1e-15)
    assert sc.motor.speed_constant == pytest.approx(500.0 * RPM, rel=1e-15)
    assert dict(sc.motor.derived) == {"torque_constant": "1 / speed_constant"}


# --------------------------------------------------------------------------------------------
# A consistent datasheet derives back to its model
# --------------------------------------------------------------------------------------------


def test_consistent_datasheet_derives_back_to_the_model():
    figures = datasheet_of_model()
    sc = load_scenario_text(sheet(inductance=L, **figures))
    m = sc.motor
    # Source: the closed forms in the module notes, inverted: R = V/Is, K = 1/Kv,
    # J = tau_m K^2/R, T_c = K I0. Exact in real arithmetic; the tolerance allows the rounding
    # of the few floating-point operations on each side (a few ulp, 1e-16 each).
    assert m.resistance == pytest.approx(R, rel=1e-13)
    assert m.torque_constant == pytest.approx(K, rel=1e-13)
    assert m.inertia == pytest.approx(J, rel=1e-13)
    assert m.coulomb_friction == pytest.approx(TC, rel=1e-13)
    assert m.viscous_friction == 0.0 and m.inductance == L
    assert set(dict(m.derived)) == {"resistance", "torque_constant", "inertia", "coulomb_friction"}
    # every over-determined figure agrees with the model: no warning
    assert {c.key for c in m.checks} == set(figures) - {"nominal_voltage"}
    for c in m.checks:
        assert abs(c.difference_percent) < 1e-10 and c.status == "ok", c
    assert m.catalogue_warnings == ()


def test_datasheet_rounded_to_three_figures_derives_within_the_rounding():
    figures = {k: three_figures(v) for k, v in datasheet_of_model().items()}
    m = load_scenario_text(sheet(inductance=L, **figures)).motor
    # common practice (no source): three significant figures move each figure by at most
    # 0.5 %; R = V/Is and K = 1/Kv carry one rounding (0.5 %), T_c = K I0 two (1 %),
    # J = tau_m K^2/R four (2 %). The tolerances are those sums.
    assert m.resistance == pytest.approx(R, rel=0.005)
    assert m.torque_constant == pytest.approx(K, rel=0.005)
    assert m.coulomb_friction == pytest.approx(TC, rel=0.01)
    assert m.inertia == pytest.approx(J, rel=0.02)
    assert m.catalogue_warnings == ()


def test_datasheet_with_viscous_friction_given():
    figures = datasheet_of_model(b=B)
    m = load_scenario_text(
        sheet(inductance=L, viscous_friction=B, coulomb_friction=TC, **figures)
    ).motor
    # friction given: nothing derived from the no-load current, which becomes a check
    assert "coulomb_friction" not in dict(m.derived) and m.viscous_friction == B
    checks = {c.key: c for c in m.checks}
    # Source: steady state without load, w0 = (K V - R T_c)/(K^2 + R B), I0 = (B w0 + T_c)/K
    # (Hughes & Drury ch. 3); the model keys derived from the other figures reproduce them
    assert checks["no_load_speed"].model_value == pytest.approx(figures["no_load_speed"], 1e-12)
    assert checks["no_load_current"].model_value == pytest.approx(
        figures["no_load_current"], rel=1e-12
    )
    assert not checks["no_load_current"].used and m.catalogue_warnings == ()


@pytest.mark.parametrize(
    "given, derived",
    [
        # K from stall torque / stall current (R given)
        ({"resistance": R, "inertia": J, "stall_torque": K * V / R, "stall_current": V / R},
         {"torque_constant": K}),
        # K from the armature equation at no load, (V - R I0)/w0 (R given, friction derived)
        ({"resistance": R, "inertia": J, "no_load_speed": (K * V - R * TC) / K**2,
          "no_load_current": TC / K}, {"torque_constant": K, "coulomb_friction": TC}),
        # K from stall torque, V and R
        ({"resistance": R, "inertia": J, "stall_torque": K * V / R}, {"torque_constant": K}),
        # R from K V / Ts
        ({"torque_constant": K, "inertia": J, "stall_torque": K * V / R}, {"resistance": R}),
        # R from the mechanical time constant with K and J
        ({"torque_constant": K, "inertia": J, "mechanical_time_constant": J * R / K**2},
         {"resistance": R}),
    ],
)  # fmt: skip
def test_each_derivation_rule(given, derived):
    m = load_scenario_text(sheet(inductance=L, nominal_voltage=V, **given)).motor
    for name, value in derived.items():
        # Source: the closed forms of the module notes, inverted (see above); float rounding
        assert getattr(m, name) == pytest.approx(value, rel=1e-12), name
    assert set(dict(m.derived)) == set(derived)
    assert m.catalogue_warnings == ()


# --------------------------------------------------------------------------------------------
# Inconsistent data: warned, not refused
# --------------------------------------------------------------------------------------------


def test_inconsistent_datasheet_is_warned():
    figures = datasheet_of_model()
    figures["stall_torque"] *= 1.10  # a stall torque 10 % above K V / R
    figures["mechanical_time_constant"] *= 0.97  # 3 % off: inside the band
    sc = load_scenario_text(sheet(inductance=L, inertia=J, **figures))
    (warning,) = sc.motor.catalogue_warnings
    # Source: K V / R of the model = 0.021 * 12 / 1.5 = 0.168 N*m against 0.1848 N*m given:
    # (0.168 - 0.1848) / 0.1848 = -9.09 % (hand arithmetic); the message names the figure and
    # gives both values (in mN*m) and the difference
    assert "stall torque" in warning and "184.8 mN*m" in warning and "168 mN*m" in warning
    assert "-9.1 %" in warning and "more than 5 %" in warning
    checks = {c.key: c for c in sc.motor.checks}
    assert checks["stall_torque"].status == "WARN"
    # Source: J R / K^2 = 14.286 ms against 0.97 of it: 1/0.97 - 1 = +3.09 % (hand arithmetic)
    assert checks["mechanical_time_constant"].difference_percent == pytest.approx(3.0928, 1e-4)
    assert checks["mechanical_time_constant"].status == "ok"


def test_inconsistent_tau_m_warns():
    figures = datasheet_of_model()
    figures["mechanical_time_constant"] *= 1.08
    sc = load_scenario_text(sheet(inductance=L, inertia=J, **figures))
    (warning,) = sc.motor.catalogue_warnings
    # Source: J R / K^2 = 14.29 ms (hand arithmetic: 4.2e-6 * 1.5 / 0.021^2) against 15.43 ms
    # given: -7.4 %
    assert "mechanical time constant" in warning and "-7.4 %" in warning
    assert "15.43 ms" in warning and "14.29 ms" in warning


def test_warning_is_shown_by_run_validate_and_motor(tmp_path, capsys):
    figures = datasheet_of_model()
    figures["stall_torque"] *= 1.10
    text = sheet(inductance=L, **figures).replace('"0.1 s"', '"5 ms"')
    path = tmp_path / "drill.toml"
    path.write_text(text, encoding="utf-8")
    assert cli.main(["validate", str(path)]) == 0
    err = capsys.readouterr().err
    assert err.startswith("dcsim: warning: ") and "stall torque" in err and str(path) in err
    assert cli.main(["run", str(path), "--out", str(tmp_path / "out")]) == 0
    assert "dcsim: warning: " in capsys.readouterr().err
    assert cli.main(["motor", str(path)]) == 0
    out = capsys.readouterr().out
    assert "WARN" in out and "WARNING: catalogue stall torque" in out


# --------------------------------------------------------------------------------------------
# Contradictory or insufficient data: one ScenarioError naming file and key
# --------------------------------------------------------------------------------------------


def error_of(tmp_path: Path, text: str) -> ScenarioError:
    path = tmp_path / "drill.toml"
    path.write_text(text, encoding="utf-8")
    with pytest.raises(ScenarioError) as info:
        load_scenario(path)
    err = info.value
    assert str(path) in str(err) and err.source == str(path) and "\n" not in str(err)
    return err


@pytest.mark.parametrize(
    "figures, key, words",
    [
        ({"inductance": L, "resistance": R, "inertia": J, "nominal_voltage": V},
         "motor.torque_constant", ["missing key", "speed_constant", "found no torque_constant",
                                   "only nominal_voltage"]),
        ({"inductance": L, "resistance": R, "inertia": J},
         "motor.torque_constant", ["missing key", "no catalogue figures either"]),
        ({"inductance": L, "torque_constant": K, "resistance": R},
         "motor.inertia", ["missing key", "mechanical_time_constant", "found no inertia"]),
        ({"inductance": L, "torque_constant": K, "inertia": J, "nominal_voltage": V},
         "motor.resistance", ["missing key", "stall_current", "found no resistance"]),
        ({"inductance": L, "torque_constant": K, "speed_constant": 1.10 / K, "resistance": R,
          "inertia": J}, "motor.speed_constant", ["agree", "within 5 %", "9.1 % apart"]),
        ({"inductance": L, "speed_constant": 1.0 / K, "resistance": R, "inertia": J,
          "stall_torque": 0.168}, "motor.nominal_voltage", ["nominal voltage", "stall_torque"]),
        ({"inductance": L, "resistance": R, "inertia": J, "nominal_voltage": V,
          "no_load_speed": 500.0, "no_load_current": 9.0}, "motor.no_load_current",
         ["below nominal_voltage / resistance", "8 A", "found 9 A"]),
        ({"inductance": L, "resistance": R, "inertia": J, "speed_constant": "500 rpm"},
         "motor.speed_constant", ["expected a speed constant", "'500 rpm'"]),
        ({"inductance": L, "resistance": R, "inertia": J, "speed_constant": 47.6,
          "nominal_voltage": V, "stall_current": "-8 A"}, "motor.stall_current",
         ["greater than 0", "'-8 A'"]),
    ],
)  # fmt: skip
def test_bad_catalogue_data_names_the_key(tmp_path, figures, key, words):
    err = error_of(tmp_path, sheet(**figures))
    assert err.key == key, str(err)
    for word in words:
        assert word in err.detail, (word, err.detail)


def test_contradiction_within_five_percent_is_accepted():
    m = load_scenario_text(sheet(inductance=L, torque_constant=K, speed_constant=1.04 / K,
                                 resistance=R, inertia=J)).motor  # fmt: skip
    (check,) = m.checks
    # Source: the speed-constant identity, 1/K against 1.04/K: -3.85 % (hand arithmetic)
    assert check.difference_percent == pytest.approx(100.0 * (1.0 / 1.04 - 1.0), rel=1e-12)
    assert check.status == "ok" and m.torque_constant == K  # the given key is used as given


# --------------------------------------------------------------------------------------------
# with_changes, events and the writer with catalogue keys
# --------------------------------------------------------------------------------------------


def test_example_vent_motor_is_derived_and_consistent():
    sc = load_scenario(VENT)
    m = sc.motor
    # Source: R = V/Is = 24/6.0; K = 60/(2 pi 200) (CHECKS.md speed constant); T_c = K I0
    assert m.resistance == pytest.approx(4.0, rel=1e-15)
    assert m.torque_constant == pytest.approx(60.0 / (2.0 * math.pi * 200.0), rel=1e-15)
    assert m.coulomb_friction == pytest.approx(0.06 * 60.0 / (2.0 * math.pi * 200.0), 1e-15)
    assert m.inertia == pytest.approx(18e-7, rel=1e-15)  # 18 g*cm^2, given
    assert m.catalogue_warnings == () and len(m.checks) == 6


def test_with_changes_of_a_model_key_keeps_the_derived_values():
    sc = load_scenario(VENT)
    changed = sc.with_changes({"motor.resistance": "4.6 ohm"})
    m = changed.motor
    assert m.resistance == 4.6
    # the derived keys keep their values (now as given): the friction does not move with R
    assert m.torque_constant == sc.motor.torque_constant
    assert m.coulomb_friction == sc.motor.coulomb_friction and m.derived == ()
    # the checks see the change: stall current V/R = 24/4.6 = 5.22 A against 6.0 A, -13 %
    warned = " ".join(m.catalogue_warnings)
    assert "stall current" in warned and "-13.0 %" in warned
    # the written file reads back to the same scenario (all model keys are written now)
    assert load_scenario_text(scenario_to_toml(changed), source=changed.source) == changed


def test_with_changes_of_a_catalogue_key_derives_again():
    sc = load_scenario(VENT)
    changed = sc.with_changes({"motor.stall_current": "6.4 A"})
    # Source: R = V / Is = 24 / 6.4 = 3.75 ohm (hand arithmetic)
    assert changed.motor.resistance == pytest.approx(3.75, rel=1e-15)
    assert dict(changed.motor.derived) == dict(sc.motor.derived)
    assert load_scenario_text(scenario_to_toml(changed), source=changed.source) == changed
    # a change elsewhere leaves the motor as it was
    assert sc.with_changes({"load.torque": "80 mN*m"}).motor == sc.motor
    # None lets a model key be derived again
    given = load_scenario_text(sheet(inductance=L, resistance=2.0, **datasheet_of_model()))
    assert given.motor.resistance == 2.0
    assert given.with_changes({"motor.resistance": None}).motor.resistance == pytest.approx(
        R, rel=1e-13
    )


def test_writer_leaves_derived_keys_out_and_reads_back():
    sc = load_scenario(VENT)
    text = scenario_to_toml(sc)
    assert "speed_constant" in text and "stall_current" in text
    assert "\nresistance" not in text.split("[motor]")[1].split("[load]")[0]
    assert "torque_constant" not in text
    assert load_scenario_text(text, source=sc.source) == sc


def test_events_on_derived_keys_still_apply():
    text = VENT.read_text(encoding="utf-8") + (
        '\n[[events]]\nat = "0.2 s"\nset = { "motor.resistance" = "4.4 ohm" }\n'
    )
    sc = load_scenario_text(text, source="vent.toml")
    from dcsim.engine.assemble import assemble

    ki = assemble(sc)
    # Source: the event table carries the SI value written (identity)
    assert 4.4 in list(ki.event_value)


# --------------------------------------------------------------------------------------------
# dcsim motor
# --------------------------------------------------------------------------------------------


def test_dcsim_motor_prints_model_and_table(capsys):
    assert cli.main(["motor", str(VENT)]) == 0
    out = capsys.readouterr().out
    for text in (
        "resistance", "4 ohm", "from nominal_voltage / stall_current",
        "Kv 200 rpm/V", "18 g*cm^2", "3.158 ms",  # J R / K^2 = 1.8e-6 * 4 / 0.047746^2
        "stall torque", "K*V/R = 286.5 mN*m", "+0.17 %", "ok",
        "simulation is not a substitute",
    ):  # fmt: skip
        assert text in out, text
    assert "WARN" not in out.replace("WARN beyond", "")


def test_dcsim_motor_json(capsys):
    assert cli.main(["motor", str(VENT), "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    for key in ("resistance", "inductance", "torque_constant", "inertia", "viscous_friction",
                "coulomb_friction"):  # fmt: skip
        assert isinstance(data[key], float), key
    assert data["resistance"] == 4.0
    # Source: CHECKS.md speed constant, Kv = 60 / (2 pi K)
    assert data["speed_constant_rpm_per_V"] == pytest.approx(200.0, rel=1e-14)
    assert {c["key"] for c in data["checks"]} == {
        "speed_constant", "stall_current", "stall_torque", "no_load_speed", "no_load_current",
        "mechanical_time_constant",
    }  # fmt: skip
    for c in data["checks"]:
        assert set(c) >= {"catalogue_value", "model_value", "difference_percent", "status"}
        assert c["status"] == "ok"
    assert data["warnings"] == [] and data["derived"]["resistance"].startswith("nominal")


def test_dcsim_motor_exit_codes(tmp_path, capsys):
    assert cli.main(["motor", str(tmp_path / "none.toml")]) == 2
    assert "file not found" in capsys.readouterr().err
    bad = tmp_path / "bad.toml"
    bad.write_text(sheet(inductance=L, resistance=R, inertia=J), encoding="utf-8")
    assert cli.main(["motor", str(bad)]) == 2
    err = capsys.readouterr().err
    assert len(err.splitlines()) == 1 and "motor.torque_constant" in err
    # a scenario without catalogue data shows its model and says so
    plain = tmp_path / "plain.toml"
    plain.write_text(sheet(inductance=L, resistance=R, inertia=J, torque_constant=K), "utf-8")
    assert cli.main(["motor", str(plain)]) == 0
    assert "Catalogue data: none given" in capsys.readouterr().out
