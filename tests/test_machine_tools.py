"""The other tools on machine-library scenarios: plots, the scenario writer, sweeps, the
design checks and report, and the tuner.

References:

- steady state of the separately excited machine with linear magnetics (derived):
  ``K = M V_f / R_f``; ``J dw/dt = K i - T_L = 0`` gives ``i = T_L / K`` and
  ``V = R i + K w`` gives ``w = (V - R T_L / K) / K`` (Hughes & Drury, *Electric Motors and
  Drives*, 4th ed., ch. 3, for the armature equations);
- the RMS of a current record, ``sqrt(int i^2 dt / T)`` (definition), computed here from the
  trace with numpy's trapezoidal rule;
- the loop figures of the separately excited machine against those of the permanent-magnet
  motor with the same ``R, L, K, J`` (its plants are checked against python-control in
  tests/test_tuning_plants.py), and the tuned loop's step against the linear model's
  (python-control), in the nonlinear simulation.
"""

from __future__ import annotations

import csv
import dataclasses
import json
import math

import numpy as np
import pytest

from dcsim import cli
from dcsim.checks.report import write_report
from dcsim.checks.session import run_checks
from dcsim.engine.run import simulate
from dcsim.errors import ScenarioError
from dcsim.results import plots
from dcsim.scenario import load_scenario, load_scenario_text
from dcsim.scenario.write import scenario_to_toml, write_scenario
from dcsim.sweep import run_sweep
from dcsim.tuning.tuner import check_in_simulation, tune

# separately excited bench machine, linear magnetics
R, LA, J, M, RF, LF = 0.5, 5e-3, 0.05, 1.0, 100.0, 20.0

SEP = f"""
[simulation]
duration = "{{duration}}"
[motor]
kind = "separately_excited"
resistance = {R}
inductance = {LA}
inertia = {J}
field_resistance = {RF}
field_inductance = {LF}
field_voltage = "100 V"
mutual_inductance = {M}
[load]
torque = "5 N*m"
[supply]
voltage = "100 V"
[control]
voltage = "100 V"
"""

SEP_SPEED = f"""
[simulation]
duration = "0.2 s"
[motor]
kind = "{{kind}}"
resistance = {R}
inductance = {LA}
inertia = {J}
{{field}}
[supply]
voltage = "220 V"
[control]
mode = "speed"
[control.current]
sample_time = "100 us"
kp = 3.0
ki = 300.0
limit = "220 V"
[control.speed]
sample_time = "1 ms"
kp = 2.0
ki = 20.0
limit = "50 A"
[control.reference]
kind = "step"
value = "50 rad/s"
at = "0.01 s"
"""
SEP_FIELD = f'field_resistance = {RF}\nfield_inductance = {LF}\nfield_voltage = "100 V"\n'
SEP_FIELD += f"mutual_inductance = {M}"

SERIES = """
[about]
title = "Series winch check"
[simulation]
duration = "{duration}"
[motor]
kind = "series"
resistance = "0.5 ohm"
inductance = "5 mH"
inertia = "0.2 kg*m^2"
field_resistance = "0.3 ohm"
field_inductance = "10 mH"
mutual_inductance = "30 mH"
viscous_friction = "0.01 N*m*s/rad"
[load]
torque = "20 N*m"
[supply]
voltage = "48 V"
[control]
mode = "voltage"
voltage = "48 V"
[checks]
continuous_current = "30 A"
peak_current = "80 A"
brown_out_voltage = "40 V"
"""

SHUNT = """
[simulation]
duration = "0.3 s"
[motor]
kind = "shunt"
resistance = "0.8 ohm"
inductance = "6 mH"
inertia = "0.1 kg*m^2"
field_resistance = "120 ohm"
field_inductance = "12 H"
mutual_inductance = "0.9 H"
[supply]
voltage = "120 V"
[control]
voltage = "120 V"
"""

COMPOUND = """
[simulation]
duration = "0.5 s"
[motor]
kind = "compound"
compound = "differential"
resistance = "0.8 ohm"
inductance = "6 mH"
inertia = "0.1 kg*m^2"
field_resistance = "120 ohm"
field_inductance = "12 H"
magnetisation = [['0 A','0 V'], ['1 A','180 V']]
magnetisation_speed = "1500 rpm"
series_field_resistance = "0.05 ohm"
series_field_inductance = "1 mH"
series_turns_ratio = 0.02
max_speed = "3000 rpm"
[load]
torque = "2 N*m"
inertia = "0.3 kg*m^2"
[shaft]
stiffness = "2000 N*m/rad"
damping = "0.5 N*m*s/rad"
backlash = "1 deg"
[supply]
voltage = "120 V"
[control]
voltage = "120 V"
"""

PM_SHAFT = """
[simulation]
duration = "0.2 s"
[motor]
resistance = "1 ohm"
inductance = "1 mH"
torque_constant = "0.1 N*m/A"
inertia = "2e-4 kg*m^2"
{extra}
[load]
inertia = "6e-4 kg*m^2"
torque = "0.05 N*m"
{shaft}
[supply]
voltage = "24 V"
[control]
voltage = "12 V"
"""
SHAFT = '[shaft]\nstiffness = "40 N*m/rad"\ndamping = "0.002 N*m*s/rad"\nbacklash = "0.5 deg"'


def _labels(fig) -> list[str]:
    return [ax.get_ylabel() for ax in fig.axes]


def _line_labels(ax) -> list[str]:
    return [line.get_label() for line in ax.get_lines()]


# --------------------------------------------------------------------------------------------
# Plots
# --------------------------------------------------------------------------------------------

STANDARD = ["armature\ncurrent [A]", "speed [rad/s]", "voltage [V]", "torque [N·m]"]


def test_field_current_panel_for_a_shunt_machine(tmp_path):
    res = simulate(load_scenario_text(SHUNT))
    assert np.any(res.trace["field_current_A"] != 0.0)
    labels = _labels(plots.plot_overview(res))
    assert labels == [STANDARD[0], "field\ncurrent [A]", *STANDARD[1:]]
    names = [p.name for p in plots.save_plots(res, tmp_path)]
    assert "field_current.png" in names and "shaft_torque.png" not in names


def test_shaft_panel_and_load_speed_for_a_shaft(tmp_path):
    res = simulate(load_scenario_text(PM_SHAFT.format(extra="", shaft=SHAFT)))
    fig = plots.plot_overview(res)
    labels = _labels(fig)
    assert labels == [*STANDARD, "shaft\ntorque [N·m]"]  # a PM motor: no field panel
    speed_ax = fig.axes[1]
    assert _line_labels(speed_ax)[:2] == ["motor", "load side"]
    load_line = speed_ax.get_lines()[1]
    assert np.array_equal(load_line.get_ydata(), res.trace["load_speed_rad_s"])
    shaft_ax = fig.axes[-1]
    assert np.array_equal(shaft_ax.get_lines()[0].get_ydata(), res.trace["shaft_torque_Nm"])
    names = [p.name for p in plots.save_plots(res, tmp_path)]
    assert "shaft_torque.png" in names and "field_current.png" not in names


def test_plain_pm_and_ripple_only_keep_the_standard_panels(tmp_path):
    for extra in ("", "commutator_segments = 8"):  # the second runs on the machine kernel
        res = simulate(load_scenario_text(PM_SHAFT.format(extra=extra, shaft="")))
        fig = plots.plot_overview(res)
        assert _labels(fig) == STANDARD
        assert "load side" not in _line_labels(fig.axes[1])
        if extra:  # a field-current column that is zero throughout adds no panel
            assert not np.any(res.trace["field_current_A"])
    names = [p.name for p in plots.save_plots(res, tmp_path)]
    assert names == list(plots.PLOT_FILES)


# --------------------------------------------------------------------------------------------
# The scenario writer
# --------------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    "text",
    [COMPOUND, SEP.format(duration="1 s"), SERIES.format(duration="1 s"), SHUNT],
    ids=["compound+shaft", "separately_excited", "series", "shunt"],
)
def test_writer_round_trip(tmp_path, text):
    sc = load_scenario_text(text)
    back = load_scenario_text(scenario_to_toml(sc))
    assert back == sc
    path = write_scenario(sc, tmp_path / "again.toml")
    assert dataclasses.replace(load_scenario(path), source=sc.source) == sc


def test_writer_keeps_magnetisation_kind_compound_and_shaft():
    sc = load_scenario_text(COMPOUND)
    text = scenario_to_toml(sc)
    assert "[shaft]" in text and 'kind = "compound"' in text
    assert 'compound = "differential"' in text
    assert "torque_constant" not in text  # derived from the field again on loading
    back = load_scenario_text(text)
    assert back.motor.magnetisation == ((0.0, 0.0), (1.0, 180.0))
    assert back.shaft == sc.shaft and back.shaft.backlash == pytest.approx(math.radians(1.0))


def test_changed_model_key_derives_the_torque_constant_again():
    sc = load_scenario_text(SERIES.format(duration="1 s"))
    # Source: derived -- series machine, K = M V_s / (R_a + R_f) at the locked-rotor current
    assert sc.with_changes({"motor.resistance": 0.4}).motor.torque_constant == pytest.approx(
        0.03 * 48.0 / (0.4 + 0.3), rel=1e-12
    )
    assert sc.with_changes({"motor.inertia": 0.3}).motor.torque_constant == pytest.approx(
        0.03 * 48.0 / 0.8, rel=1e-12
    )
    with pytest.raises(ScenarioError, match="expected no torque_constant for a series"):
        sc.with_changes({"motor.torque_constant": 1.0})


# --------------------------------------------------------------------------------------------
# Sweep
# --------------------------------------------------------------------------------------------


def test_sweep_over_field_voltage_and_load_torque(tmp_path):
    base = tmp_path / "sep.toml"
    base.write_text(SEP.format(duration="1 s"), encoding="utf-8")
    sweep = tmp_path / "sweep.toml"
    sweep.write_text(
        'base = "sep.toml"\nmetrics = ["final_speed_rad_s", "peak_current_A"]\n[grid]\n'
        '"motor.field_voltage" = ["80 V", "100 V"]\n"load.torque" = ["2 N*m", "5 N*m"]\n',
        encoding="utf-8",
    )
    outcome = run_sweep(sweep, tmp_path / "out", workers=1, report=False)
    assert outcome.runs == 4 and outcome.failed == 0
    with open(tmp_path / "out" / "results.csv", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    assert len(rows) == 4
    seen = set()
    for row in rows:
        vf = float(row["motor.field_voltage"])
        tl = float(row["load.torque"])
        k = M * vf / RF  # Source: derived -- linear magnetics, settled field V_f / R_f
        # Source: derived -- steady state (module docstring); the mechanical time constant
        # J R / K^2 <= 0.04 s, so 1 s is over 25 time constants
        w = (100.0 - R * tl / k) / k
        assert float(row["final_speed_rad_s"]) == pytest.approx(w, rel=1e-6)
        seen.add((vf, tl))
    assert seen == {(80.0, 2.0), (80.0, 5.0), (100.0, 2.0), (100.0, 5.0)}


# --------------------------------------------------------------------------------------------
# Checks and report
# --------------------------------------------------------------------------------------------


def test_check_and_report_on_a_series_machine(tmp_path, capsys):
    text = SERIES.format(duration="2 s")
    report = run_checks(load_scenario_text(text))
    v = {x.name: x for x in report.verdicts}
    res = simulate(load_scenario_text(text))
    i = res.trace["current_A"]
    t = res.trace["time_s"]
    peak = v["duty.peak_current"]
    assert peak.status == "pass"
    assert peak.figure == pytest.approx(float(np.max(np.abs(i))), rel=1e-9)
    # Source: derived -- from rest the series machine's current stays below the locked-rotor
    # current V / (R_a + R_f): its back-EMF is never negative and L di/dt = V - R i - e
    assert peak.figure < 48.0 / 0.8
    rms = v["duty.rms_current"]
    # Source: definition of the RMS, sqrt(int i^2 dt / T), trapezoidal rule on the trace
    assert rms.figure == pytest.approx(math.sqrt(np.trapezoid(i * i, t) / 2.0), rel=1e-3)
    assert v["loops.margins"].status == "n/a"
    assert not report.failed
    assert "overview" in report.figures
    assert "field\ncurrent [A]" in _labels(report.figures["overview"])
    files = write_report(report, tmp_path / "rep")
    names = {f.name for f in files}
    assert {"report.html", "verdicts.json", "overview.png"} <= names
    html = (tmp_path / "rep" / "report.html").read_text(encoding="utf-8")
    assert "Series winch check" in html and "RMS current" in html
    verdicts = json.loads((tmp_path / "rep" / "verdicts.json").read_text(encoding="utf-8"))
    assert verdicts  # the file is valid JSON; its content is the report above
    path = tmp_path / "series.toml"
    path.write_text(text, encoding="utf-8")
    assert cli.main(["check", str(path)]) == 0
    assert "RMS current" in capsys.readouterr().out


def test_loop_margins_not_analysed_for_a_series_machine():
    text = SEP_SPEED.format(kind="series", field=SERIES_FIELD)
    report = run_checks(load_scenario_text(text))
    (loops,) = [x for x in report.verdicts if x.group == "loops"]
    assert loops.status == "n/a" and "motor.kind = 'series'" in loops.detail


# --------------------------------------------------------------------------------------------
# Tuning
# --------------------------------------------------------------------------------------------

SERIES_FIELD = (
    'field_resistance = "0.3 ohm"\nfield_inductance = "10 mH"\nmutual_inductance = "30 mH"'
)
SHUNT_FIELD = 'field_resistance = "220 ohm"\nfield_inductance = "22 H"\nmutual_inductance = "1 H"'
COMPOUND_FIELD = SHUNT_FIELD + (
    '\nseries_field_resistance = "0.05 ohm"\nseries_field_inductance = "1 mH"\n'
    "series_turns_ratio = 0.02"
)


@pytest.mark.parametrize(
    ("kind", "field"),
    [("series", SERIES_FIELD), ("shunt", SHUNT_FIELD), ("compound", COMPOUND_FIELD)],
)
def test_tuning_refuses_machines_without_a_constant_flux(tmp_path, capsys, kind, field):
    sc = load_scenario_text(SEP_SPEED.format(kind=kind, field=field))
    for loop in ("current", "speed"):
        with pytest.raises(ScenarioError, match=f"motor.kind = '{kind}'") as err:
            tune(sc, loop, "imc")
        assert err.value.key == "motor.kind"
    path = tmp_path / "m.toml"
    path.write_text(SEP_SPEED.format(kind=kind, field=field), encoding="utf-8")
    assert cli.main(["tune", str(path), "--loop", "current", "--method", "imc"]) == 2
    assert "motor.kind" in capsys.readouterr().err


def _pm_twin(sc_text: str, k: float) -> str:
    """The same drive as a permanent-magnet motor of torque constant ``k``."""
    text = sc_text.replace('kind = "separately_excited"', 'kind = "permanent_magnet"')
    text = text.replace(SEP_FIELD, f"torque_constant = {k!r}")
    return text


@pytest.mark.parametrize(("loop", "method"), [("current", "imc"), ("speed", "symmetric-optimum")])
def test_separately_excited_tunes_as_its_permanent_magnet_twin(loop, method):
    text = SEP_SPEED.format(kind="separately_excited", field=SEP_FIELD)
    sc = load_scenario_text(text)
    k = M * 100.0 / RF  # Source: derived -- K = M V_f / R_f with the field settled
    assert sc.motor.torque_constant == pytest.approx(k, rel=1e-12)
    twin = load_scenario_text(_pm_twin(text, sc.motor.torque_constant))
    tol = {"motor.resistance": 0.1, "motor.torque_constant": 0.1}
    a = tune(sc, loop, method, tolerances=tol)
    b = tune(twin, loop, method, tolerances=tol)
    assert (a.kp, a.ki, a.kd) == pytest.approx((b.kp, b.ki, b.kd), rel=1e-12)
    assert a.figures.phase_margin_deg == pytest.approx(b.figures.phase_margin_deg, rel=1e-9)
    assert set(a.worst_case) == set(b.worst_case)
    for name, worst in b.worst_case.items():
        if isinstance(worst, dict) and "value" in worst:
            assert a.worst_case[name]["value"] == pytest.approx(
                worst["value"], rel=1e-9, nan_ok=True
            )
            assert a.worst_case[name]["corner"] == pytest.approx(worst["corner"], rel=1e-12)
    assert any("separately excited field settled" in s for s in a.assumptions)


def test_separately_excited_speed_loop_simulation_agrees_with_the_linear_model():
    sc = load_scenario_text(SEP_SPEED.format(kind="separately_excited", field=SEP_FIELD))
    result = tune(sc, "speed", "symmetric-optimum")
    check = check_in_simulation(sc, result)
    assert not check["saturated"]
    # Source: python-control's step of the sampled linear loop (the prediction) against the
    # nonlinear simulation; the field is settled and there is no load, so they should agree
    # to the sampling: 0.2 percentage points of overshoot, 5 % of the settling time (the
    # prediction is on the 1 ms grid of the speed loop; the rise time, quantised to it, is
    # not compared)
    p, q = check["predicted"], check["simulated"]
    assert q["overshoot_percent"] == pytest.approx(p["overshoot_percent"], abs=0.2)
    assert q["settling_time_s"] == pytest.approx(p["settling_time_s"], rel=0.05)


@pytest.mark.parametrize(
    "table",
    [
        '[grid]\n"motor.torque_constant" = [0.9, 1.1]',
        '[tolerance]\n"motor.torque_constant" = { normal = "5 %" }',
    ],
)
def test_sweep_refuses_the_derived_torque_constant(tmp_path, table):
    (tmp_path / "sep.toml").write_text(SEP.format(duration="0.3 s"), encoding="utf-8")
    sweep = tmp_path / "sweep.toml"
    sweep.write_text(f'base = "sep.toml"\nsamples = 2\n{table}\n', encoding="utf-8")
    with pytest.raises(ScenarioError, match=r"derives from its field") as err:
        run_sweep(sweep, tmp_path / "out", workers=1, report=False)
    assert err.value.key.endswith("motor.torque_constant")
    assert "motor.kind" in str(err.value)


@pytest.mark.parametrize(
    ("kind", "field", "switch"),
    [
        ("series", SERIES_FIELD, "control.speed.acceleration_feedforward"),
        ("shunt", SHUNT_FIELD, "control.current.back_emf_feedforward"),
        ("compound", COMPOUND_FIELD, "control.speed.friction_feedforward"),
        (
            "separately_excited",
            SEP_FIELD + '\nbase_speed = "300 rpm"',
            "control.current.back_emf_feedforward",
        ),
    ],  # fmt: skip
)
def test_feedforward_through_one_torque_constant_is_refused_where_the_flux_varies(
    kind, field, switch
):
    # The controllers' feed-forward scales by one torque constant (dcsim.controllers.cascade):
    # right only while the flux is constant (Chapman ch. 9, from memory: K phi is set by the
    # field current, which in these machines follows the currents or, weakened, the speed).
    table, key = switch.rsplit(".", 1)
    text = SEP_SPEED.format(kind=kind, field=field).replace(
        f"[{table}]\n", f"[{table}]\n{key} = true\n"
    )
    with pytest.raises(ScenarioError) as err:
        load_scenario_text(text, source="m.toml")
    assert err.value.key == switch
    assert "flux changes" in str(err.value)


def test_feedforward_is_accepted_on_a_separately_excited_machine_at_constant_field():
    text = SEP_SPEED.format(kind="separately_excited", field=SEP_FIELD).replace(
        "[control.current]\n", "[control.current]\nback_emf_feedforward = true\n"
    )
    assert load_scenario_text(text).control.current.back_emf_feedforward


@pytest.mark.parametrize("key, value", [("motor.field_voltage", "100 V"),
                                        ("motor.field_resistance", "90 ohm")])  # fmt: skip
def test_field_event_with_a_pwm_bridge_is_one_message(key, value):
    text = f"""
[simulation]
duration = "5 ms"
[motor]
resistance = "1 ohm"
inductance = "1 mH"
torque_constant = "0.05 N*m/A"
inertia = "1e-4 kg*m^2"
[supply]
voltage = "12 V"
resistance = "0.05 ohm"
capacitance = "470 uF"
[control]
voltage = "6 V"
[bridge]
model = "averaged"
frequency = "20 kHz"
[[events]]
at = "1 ms"
set = {{ "{key}" = "{value}" }}
"""
    with pytest.raises(ScenarioError) as err:
        simulate(load_scenario_text(text, source="pwm.toml"))
    assert err.value.key == f"events[0].set.{key}"
    assert "ideal bridge" in str(err.value)
