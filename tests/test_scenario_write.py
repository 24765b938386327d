"""Writing scenarios back to TOML: ``load(write(sc)) == sc`` for every table, key and event.

The reference for every check here is the loader itself (``dcsim.load_scenario_text``): a
written file is correct when it reads back to the scenario it was written from, bit for bit.
These are identities, not physics results; where a physical figure appears it is only data
of an invented drive (a parcel belt, a shuttle lift, a harbour winch). The TOML string rules
checked are those of the TOML v1.0.0 specification (toml.io/en/v1.0.0, "String"), read back
with the standard library's ``tomllib``.
"""

from __future__ import annotations

import dataclasses
import math
import os
import sys
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import dcsim
from dcsim.errors import ScenarioError
from dcsim.scenario import KEYS, REQUIRED, Scenario, load_scenario, load_scenario_text
from dcsim.scenario import write as write_module
from dcsim.scenario.schema import Fuse
from dcsim.scenario.write import scenario_to_toml, write_scenario

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover - Python 3.10
    import tomli as tomllib

REPO = Path(__file__).resolve().parents[1]
SCENARIO_DIR = REPO / "scenarios"
SCENARIOS = sorted(SCENARIO_DIR.glob("*.toml"))
TABLES = [f.name for f in dataclasses.fields(Scenario) if f.name not in ("events", "source")]


def round_trip(sc: Scenario, **kwargs) -> Scenario:
    """Write a scenario and read the text back."""
    return load_scenario_text(scenario_to_toml(sc, **kwargs), source="<written>")


def assert_same(back: Scenario, sc: Scenario) -> None:
    """Every table and the events equal (``source`` differs by design)."""
    for table in TABLES:
        # Source: identity of the round trip (the loader is the reference reader)
        assert getattr(back, table) == getattr(sc, table), table
    assert back.events == sc.events
    assert dataclasses.replace(back, source=sc.source) == sc


# --------------------------------------------------------------------------------------------
# Round trips
# --------------------------------------------------------------------------------------------


def test_the_examples_exist() -> None:
    assert len(SCENARIOS) >= 10  # the glob below must not pass on an empty folder


@pytest.mark.parametrize("path", SCENARIOS, ids=[p.stem for p in SCENARIOS])
def test_every_example_round_trips(path: Path) -> None:
    sc = load_scenario(path)
    text = scenario_to_toml(sc)
    assert_same(load_scenario_text(text), sc)
    # Written twice, the text is the same (nothing depends on the order of a set or a clock).
    assert scenario_to_toml(round_trip(sc)) == text


def test_loop_gains_changed_in_code_round_trip() -> None:
    belt = load_scenario(SCENARIO_DIR / "conveyor_speed_loop.toml")
    changed = belt.with_changes(
        {
            "control.current.kp": "8.8 V/A",
            "control.current.ki": "2900 V/(A*s)",
            "control.current.back_emf_feedforward": True,
            "control.speed.kp": "1.1 A*s/rad",
            "control.speed.ki": "80 A/rad",
            "control.speed.anti_windup": "back-calculation",
            "control.speed.tracking_time": "3 ms",
            "control.speed.discretisation": "tustin",
            "control.speed.setpoint_weight": 0.7,
        }
    )
    assert changed.control.speed.kp == 1.1 and changed.control.current.ki == 2900.0
    assert_same(round_trip(changed), changed)

    lift = load_scenario(SCENARIO_DIR / "shuttle_lift_position.toml")
    changed = lift.with_changes(
        {
            "control.position.kp": "41 1/s",
            "control.position.ki": "2 1/s^2",
            "control.speed.kd": "1e-4 A*s^2/rad",
            "control.speed.derivative_filter": "0.3 ms",
            "control.computation_delay": True,
            "control.voltage_fraction": 0.93,
            "sensors.current_noise": "0.02 A",
            "sensors.seed": 7,
        }
    )
    assert_same(round_trip(changed), changed)


SERIES_WINCH = """
[about]
title = "Harbour winch, series-form speed loop"

[simulation]
duration = "0.2 s"

[motor]
resistance = "0.8 ohm"
inductance = "2.5 mH"
torque_constant = "0.09 N*m/A"
inertia = "2e-4 kg*m^2"

[supply]
voltage = "24 V"

[control]
mode = "speed"

[control.current]
form = "ideal"
gain = "6 V/A"
integral_time = "3 ms"
sample_time = "50 us"

[control.speed]
form = "series"
gain = "0.9 A*s/rad"
integral_time = "15 ms"
derivative_time = "0.2 ms"
sample_time = "250 us"
limit = "10 A"

[control.speed.reference]
kind = "ramp"
initial = "-20 rad/s"
value = "90 rad/s"
rate = "900 rad/s^2"
at = "5 ms"

[[events]]
at = "0.1 s"
set = { "load.torque" = "-0.05 N*m", "load.locked" = true }

[[events]]
at = "0.05 s"
set = { "load.torque" = "0.1 N*m" }

[[events]]
at = "0.1 s"
set = { "load.torque" = "0.07 N*m", "supply.regenerative" = false }
"""


def test_series_form_reference_under_the_loop_and_events_in_time_order() -> None:
    sc = load_scenario_text(SERIES_WINCH)
    text = scenario_to_toml(sc)
    assert_same(load_scenario_text(text), sc)
    doc = tomllib.loads(text)
    # Written as [control.reference], in time order; equal times keep their order, so the
    # later of the two changes of load.torque at 0.1 s still wins.
    assert "reference" in doc["control"] and "reference" not in doc["control"]["speed"]
    assert [e["at"] for e in doc["events"]] == ["0.05 s", "0.1 s", "0.1 s"]
    assert doc["events"][1]["set"] == {"load.torque": "-0.05 N*m", "load.locked": True}
    assert doc["events"][2]["set"]["load.torque"] == "0.07 N*m"
    assert sc.control.reference.initial == -20.0


BATTERY_SHUTTLE = """
[simulation]
duration = "0.5 s"
[motor]
resistance = "0.3 ohm"
inductance = "1 mH"
torque_constant = "0.03 N*m/A"
inertia = "1e-4 kg*m^2"
[load]
torque = "0.05 N*m"
[supply]
capacitance = "2.2 mF"
[control]
voltage = "12 V"
[bridge]
model = "averaged"
dead_time = "400 ns"
[battery]
open_circuit_voltage = [[0.0, "11.0 V"], [0.5, "12.2 V"], [1.0, "12.8 V"]]
resistance = "20 mohm"
capacity = "0.01 A*h"
initial_state_of_charge = 0.55
[protection]
under_voltage = "9 V"
restart = "auto"
[precharge]
resistance = "10 ohm"
bypass_voltage = "10 V"
"""


def test_battery_scenario_leaves_out_the_supply_voltage_it_sets() -> None:
    sc = load_scenario_text(BATTERY_SHUTTLE)
    text = scenario_to_toml(sc)
    # The loader refuses supply.voltage beside a [battery]: it follows the open-circuit
    # voltage; the pairs carry units on both members (state of charge is a pure number).
    assert "voltage" not in tomllib.loads(text)["supply"]
    assert tomllib.loads(text)["battery"]["open_circuit_voltage"][1] == [0.5, "12.2 V"]
    assert_same(load_scenario_text(text), sc)


def test_supply_profile_points_round_trip() -> None:
    text = BATTERY_SHUTTLE.split("[battery]")[0].replace(
        "[supply]", '[supply]\nvoltage = "12 V"\nresistance = "30 mohm"'
    )
    text += '[supply_profile]\nstart = "0.1 s"\npoints = [["0 ms", "12 V"], ["5 ms", "6.5 V"]]\n'
    sc = load_scenario_text(text)
    written = scenario_to_toml(sc)
    assert tomllib.loads(written)["supply_profile"]["points"] == [
        ["0.0 s", "12.0 V"],
        ["0.005 s", "6.5 V"],
    ]
    assert_same(load_scenario_text(written), sc)


def test_defaults_are_left_out_and_required_keys_kept() -> None:
    pump = load_scenario(SCENARIO_DIR / "coolant_pump_start.toml")
    bare = pump.with_changes(
        {"motor.viscous_friction": 0.0, "motor.coulomb_friction": 0.0, "load.inertia": 0.0}
    )
    bare = bare.with_changes({"load.torque": 0.0, "about.title": "", "about.description": ""})
    doc = tomllib.loads(scenario_to_toml(bare))
    for table in ("simulation", "motor", "supply"):
        for key, spec in KEYS[table].items():
            if spec.default is REQUIRED:
                assert key in doc[table], f"{table}.{key}"
            elif getattr(getattr(bare, table), key) == spec.default:
                assert key not in doc[table], f"{table}.{key}"
    assert "load" not in doc and "about" not in doc and "bridge" not in doc
    assert_same(round_trip(bare), bare)


# --------------------------------------------------------------------------------------------
# Exact values and awkward text
# --------------------------------------------------------------------------------------------

AWKWARD = (
    'He said "stop" \\ then \'\'\' and """ too\n'
    "second line\twith a tab\r\n"
    "control \x00 \x1b \x7f characters, caf\u00e9 \u2126 \U0001f6a2\n"
    "ends in a backslash \\"
)


def test_awkward_text_round_trips() -> None:
    pump = load_scenario(SCENARIO_DIR / "coolant_pump_start.toml")
    sc = pump.with_changes({"about.title": 'Pump "A" \\ spare', "about.description": AWKWARD})
    back = round_trip(sc)
    assert back.about.description == AWKWARD
    assert back.about.title == 'Pump "A" \\ spare'
    assert_same(back, sc)
    for start in ("\nleading newline", "\n\n", "\r", '"', '""'):
        sc = pump.with_changes({"about.description": start})
        assert round_trip(sc).about.description == start


@settings(max_examples=150, suppress_health_check=[HealthCheck.too_slow], deadline=None)
@given(
    st.text(alphabet=st.characters(blacklist_categories=("Cs",)), max_size=80),
    st.text(alphabet=st.characters(blacklist_categories=("Cs",)), max_size=20),
)
def test_any_text_round_trips(description: str, title: str) -> None:
    pump = _pump()
    sc = pump.with_changes({"about.description": description, "about.title": title})
    back = round_trip(sc)
    assert back.about == sc.about


def _pump() -> Scenario:
    return load_scenario(SCENARIO_DIR / "coolant_pump_start.toml")


positive = st.floats(min_value=5e-324, max_value=1.7976931348623157e308, allow_nan=False)
finite = st.floats(allow_nan=False, allow_infinity=False)


@settings(max_examples=200, suppress_health_check=[HealthCheck.too_slow], deadline=None)
@given(positive, finite, positive)
def test_quantities_come_back_bit_for_bit(resistance: float, torque: float, inertia: float):
    sc = _pump().with_changes(
        {"motor.resistance": resistance, "load.torque": torque, "motor.inertia": inertia}
    )
    text = scenario_to_toml(sc)
    back = load_scenario_text(text)
    # Source: IEEE 754 round trip of the shortest repr (Python float.__repr__ documentation)
    assert back.motor.resistance == resistance
    assert back.load.torque == torque + 0.0
    assert math.copysign(1.0, back.load.torque) == math.copysign(1.0, sc.load.torque)
    assert back.motor.inertia == inertia
    assert f'resistance = "{resistance!r} ohm"' in text  # written with its unit


def test_a_unit_string_that_is_not_exact_falls_back_to_the_si_number(monkeypatch) -> None:
    real = write_module.to_si

    def one_ulp_off(value, unit, **kwargs):
        return math.nextafter(real(value, unit, **kwargs), math.inf)

    monkeypatch.setattr(write_module, "to_si", one_ulp_off)
    sc = _pump()
    text = scenario_to_toml(sc)
    doc = tomllib.loads(text)
    assert doc["motor"]["resistance"] == sc.motor.resistance  # a plain TOML float, SI
    assert isinstance(doc["motor"]["resistance"], float)
    monkeypatch.undo()
    assert_same(load_scenario_text(text), sc)


def test_header_is_a_comment_block_at_the_top() -> None:
    text = scenario_to_toml(_pump(), header="Coolant pump, copy\n\nmade by a sweep\x07")
    lines = text.splitlines()
    assert lines[:3] == ["# Coolant pump, copy", "#", "# made by a sweep\\u0007"]
    assert_same(load_scenario_text(text), _pump())


# --------------------------------------------------------------------------------------------
# File references
# --------------------------------------------------------------------------------------------

FILE_BELT = """
[simulation]
duration = "0.3 s"
[motor]
resistance = "1.0 ohm"
inductance = "3 mH"
torque_constant = "0.1 N*m/A"
inertia = "1e-4 kg*m^2"
[supply]
voltage = "24 V"
resistance = "0.2 ohm"
capacitance = "2200 uF"
[bridge]
model = "averaged"
[supply_profile]
file = "sag.csv"
[control]
mode = "speed"
[control.current]
kp = "9.42 V/A"
ki = "3142 V/(A*s)"
sample_time = "50 us"
[control.speed]
kp = "1.257 A*s/rad"
ki = "98.7 A/rad"
sample_time = "200 us"
limit = "8 A"
[control.reference]
kind = "table"
file = "speeds.csv"
"""


@pytest.fixture
def belt_folder(tmp_path: Path) -> Path:
    folder = tmp_path / "belt"
    folder.mkdir()
    # Melting times from t = tau ln(I^2 / (I^2 - I_min^2)), tau = 0.42 s, I_min = 21 A
    # (invented curve; the first-order fuse model's own form, so the fit is exact).
    rows = [(i, 0.42 * math.log(i**2 / (i**2 - 21.0**2))) for i in (22.0, 30.0, 60.0)]
    (folder / "curve.csv").write_text("".join(f"{i!r},{t!r}\n" for i, t in rows), "utf-8")
    (folder / "sag.csv").write_text("0,24\n0.005,18\n0.05,24\n", encoding="utf-8")
    (folder / "speeds.csv").write_text("0,0\n0.1,80\n0.2,80\n", encoding="utf-8")
    (folder / "belt.toml").write_text(FILE_BELT, encoding="utf-8")
    return folder


def _without_paths(sc: Scenario) -> Scenario:
    return dataclasses.replace(
        sc,
        source="",
        supply_profile=dataclasses.replace(sc.supply_profile, file=None),
        control=dataclasses.replace(
            sc.control, reference=dataclasses.replace(sc.control.reference, file=None)
        ),
    )


def test_file_references_are_written_absolute_by_default(belt_folder: Path, tmp_path: Path):
    sc = load_scenario(belt_folder / "belt.toml")
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    path = write_scenario(sc, elsewhere / "copy.toml")
    back = load_scenario(path)
    doc = tomllib.loads(path.read_text("utf-8"))
    assert Path(doc["supply_profile"]["file"]) == (belt_folder / "sag.csv").resolve()
    assert Path(doc["control"]["reference"]["file"]) == (belt_folder / "speeds.csv").resolve()
    # What the files hold is read again from the same files.
    assert back.supply_profile.times_s == sc.supply_profile.times_s
    assert back.control.reference.values == sc.control.reference.values
    assert _without_paths(back) == _without_paths(sc)


def test_file_references_relative_to_the_new_folder(belt_folder: Path, tmp_path: Path):
    sc = load_scenario(belt_folder / "belt.toml")
    # Written for the scenario's own folder, the paths come back exactly as they were.
    same = scenario_to_toml(sc, relative_to=belt_folder)
    assert_same(load_scenario_text(same, source=str(belt_folder / "belt.toml")), sc)
    # Written for a sibling folder, they lead back into the original one.
    other = tmp_path / "other"
    other.mkdir()
    text = scenario_to_toml(sc, relative_to=other)
    assert tomllib.loads(text)["supply_profile"]["file"] == os.path.join("..", "belt", "sag.csv")
    back = load_scenario_text(text, source=str(other / "copy.toml"))
    assert _without_paths(back) == _without_paths(sc)


def test_file_references_of_text_scenarios_are_kept_as_given(belt_folder: Path) -> None:
    sc = load_scenario(belt_folder / "belt.toml")
    from_text = dataclasses.replace(sc, source="<text>")
    doc = tomllib.loads(scenario_to_toml(from_text))
    assert doc["supply_profile"]["file"] == "sag.csv"
    assert doc["control"]["reference"]["file"] == "speeds.csv"


def test_fuse_table_path_is_written_like_the_other_file_references(belt_folder: Path) -> None:
    sc = load_scenario(belt_folder / "belt.toml")
    with_table = dataclasses.replace(sc, fuse=Fuse(rated_current=10.0, table="curve.csv"))
    doc = tomllib.loads(scenario_to_toml(with_table))
    assert doc["fuse"] == {"rated_current": "10.0 A", "table": str(belt_folder / "curve.csv")}
    doc = tomllib.loads(scenario_to_toml(with_table, relative_to=belt_folder))
    assert doc["fuse"]["table"] == "curve.csv"


def test_fuse_table_from_a_csv_file_round_trips(belt_folder: Path) -> None:
    text = FILE_BELT.replace(
        "[control]", '[fuse]\nrated_current = "10 A"\ntable = "curve.csv"\n[control]'
    )
    (belt_folder / "fused.toml").write_text(text, encoding="utf-8")
    sc = load_scenario(belt_folder / "fused.toml")
    back = load_scenario_text(scenario_to_toml(sc), source="<written>")
    assert back.fuse.table_points == sc.fuse.table_points


# --------------------------------------------------------------------------------------------
# write_scenario
# --------------------------------------------------------------------------------------------


def test_write_refuses_to_overwrite_unless_forced(tmp_path: Path) -> None:
    sc = _pump()
    target = tmp_path / "pump_copy.toml"
    assert write_scenario(sc, target, header="first") == target
    assert target.read_text("utf-8").startswith("# first\n")
    with pytest.raises(ScenarioError) as info:
        write_scenario(sc, target, header="second")
    err = info.value
    assert err.source == str(target)
    assert "expected a new file name (or force=True" in str(err)
    assert "found an existing file" in str(err)
    assert target.read_text("utf-8").startswith("# first\n")  # untouched
    changed = sc.with_changes({"motor.resistance": "1.5 ohm"})
    write_scenario(changed, target, header="second", force=True)
    assert target.read_text("utf-8").startswith("# second\n")
    assert load_scenario(target).motor.resistance == 1.5
    assert sorted(p.name for p in tmp_path.iterdir()) == ["pump_copy.toml"]  # no temp file


def test_write_errors_are_scenario_errors(tmp_path: Path, monkeypatch) -> None:
    sc = _pump()
    with pytest.raises(ScenarioError, match="expected a folder the scenario file can be"):
        write_scenario(sc, tmp_path / "no_such_folder" / "x.toml")
    with pytest.raises(ScenarioError, match="found an existing folder"):
        write_scenario(sc, tmp_path, force=True)

    def failing_replace(src, dst):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(write_module.os, "replace", failing_replace)
    with pytest.raises(ScenarioError, match="No space left on device"):
        write_scenario(sc, tmp_path / "full.toml")
    monkeypatch.undo()
    assert list(tmp_path.iterdir()) == []  # the temporary file is gone


def test_unwritable_values_name_the_key() -> None:
    sc = _pump()
    bad = dataclasses.replace(sc, motor=dataclasses.replace(sc.motor, resistance="1.2 ohm"))
    with pytest.raises(ScenarioError) as info:
        scenario_to_toml(bad)
    assert info.value.key == "motor.resistance" and info.value.source == sc.source
    assert "expected a number in ohm to write, found '1.2 ohm' (a string)" in str(info.value)
    bad = dataclasses.replace(sc, load=dataclasses.replace(sc.load, torque=math.inf))
    with pytest.raises(ScenarioError, match="load.torque: expected a finite number"):
        scenario_to_toml(bad)
    bad = dataclasses.replace(sc, about=dataclasses.replace(sc.about, title="a\udc80b"))
    with pytest.raises(ScenarioError, match="about.title: .*lone surrogate"):
        scenario_to_toml(bad)
    with pytest.raises(ScenarioError, match="expected a Scenario to write"):
        scenario_to_toml({"motor": {}})


# --------------------------------------------------------------------------------------------
# Runs
# --------------------------------------------------------------------------------------------


@pytest.mark.parametrize("name", ["shuttle_lift_position", "conveyor_speed_loop"])
def test_written_closed_loop_scenario_runs_the_same(name: str) -> None:
    sc = load_scenario(SCENARIO_DIR / f"{name}.toml")
    original = dcsim.simulate(sc).summary
    copy = dcsim.simulate(round_trip(sc)).summary
    # Source: identity (simulate is a pure function of the scenario, and the scenarios are
    # equal), so the summaries agree exactly, not within a tolerance.
    for key in (
        "peak_current_A",
        "i2t_A2s",
        "final_speed_rad_s",
        "final_position_rad",
        "min_bus_voltage_V",
        "energy_from_supply_J",
        "steps",
    ):
        assert copy[key] == original[key], key
    assert dict(copy) == dict(original)
