"""Scenario loading: unit conversion at the edge, validation messages, ``with_changes``.

The example is an invented coolant pump on a 24 V bus. Expected SI values are worked out by
hand from the definitions of the units, so each conversion is checked against arithmetic done
outside pint.
"""

from __future__ import annotations

import dataclasses
import math
import re
from pathlib import Path

import pytest

from dcsim.errors import DcsimError, ScenarioError
from dcsim.scenario import (
    KEYS,
    Event,
    KeySpec,
    Scenario,
    changeable_keys,
    load_scenario,
    load_scenario_text,
)
from dcsim.scenario import load as load_module
from dcsim.scenario.schema import CONTROLLED, CONTROLLED_UNITS, DERIVED_FIELDS
from dcsim.units import UnitError, describe_dimension, registry, to_si

PUMP = """\
[about]
title = "Coolant pump, 24 V"
description = "Centrifugal coolant pump on a 24 V bus: start, a clogged filter, a supply sag."

[simulation]
duration = "0.5 s"
record_interval = "100 us"
step = "2 us"

[motor]
resistance = "1.2 ohm"
inductance = "2 mH"
torque_constant = "0.05 N*m/A"
inertia = "1e-4 kg*m^2"
viscous_friction = "1e-5 N*m*s/rad"
coulomb_friction = "4 mN*m"

[load]
inertia = "25 g*cm^2"
torque = "0.01 N*m"
locked = false

[supply]
voltage = "24 V"
resistance = "50 mohm"
capacitance = "470 uF"
regenerative = false

[control]
mode = "voltage"
voltage = "24 V"

[[events]]
at = "0.3 s"
set = { "supply.voltage" = "18 V" }

[[events]]
at = "0.1 s"
set = { "load.torque" = "0.03 N*m", "load.locked" = false }
"""
"""A valid scenario; its events are deliberately not in time order."""

MINIMAL = """\
[simulation]
duration = 0.2

[motor]
resistance = 2.0
inductance = 0.004
torque_constant = 0.08
inertia = 3e-5

[supply]
voltage = 12
"""
"""The least a file must say; plain numbers are SI."""

PUMP_WITHOUT_EVENTS = PUMP.split("[[events]]")[0]


def edit(text: str, old: str, new: str) -> str:
    """Replace one exact, unique piece of ``text`` (so a typo in a test cannot go unnoticed)."""
    assert text.count(old) == 1, f"{old!r} occurs {text.count(old)} times"
    return text.replace(old, new)


def drop_table(text: str, table: str) -> str:
    """Remove ``[table]`` and its lines up to the next table header."""
    out, skipping = [], False
    for line in text.splitlines(keepends=True):
        if line.startswith("["):
            skipping = line.strip() == f"[{table}]"
        if not skipping:
            out.append(line)
    assert len(out) < len(text.splitlines()), f"no table [{table}]"
    return "".join(out)


def line_of(text: str, piece: str) -> int:
    """1-based number of the line holding ``piece``."""
    return next(i for i, line in enumerate(text.splitlines(), 1) if piece in line)


def write(tmp_path: Path, text: str, name: str = "coolant_pump.toml") -> Path:
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


# --------------------------------------------------------------------------------------------
# Units
# --------------------------------------------------------------------------------------------

# Source: definition of the unit (SI Brochure, 9th ed., 2019, Tables 4, 7 and 8; the revolution
# is 2*pi rad and the minute 60 s). Expected values are the arithmetic done by hand.
# Tolerance: 1e-15 relative, a few roundings of a double, since pint multiplies by float factors.
CONVERSIONS = [
    ("2 mH", "H", 2e-3),
    ("3000 rpm", "rad/s", 3000 * 2 * math.pi / 60),
    ("60 rpm", "rad/s", 2 * math.pi),
    ("25 g*cm^2", "kg*m^2", 25e-3 * 1e-4),
    ("0.05 N*m/A", "N*m/A", 0.05),
    ("0.05 V*s/rad", "N*m/A", 0.05),  # back-EMF constant equals torque constant in SI
    ("1e-5 N*m*s/rad", "N*m*s/rad", 1e-5),
    ("20 kHz", "Hz", 20e3),
    ("470 uF", "F", 470e-6),
    ("470 µF", "F", 470e-6),
    ("50 us", "s", 50e-6),
    ("5 %", "", 0.05),
    ("1.5 kΩ", "ohm", 1500.0),
    ("50 mohm", "ohm", 0.05),
    ("-3 V", "V", -3.0),
    ("2 /s", "1/s", 2.0),
    ("1 kg·m²", "kg*m^2", 1.0),
    ("10.5 A", "A", 10.5),
    ("10 A^2*s", "A^2*s", 10.0),
    ("4 mN*m", "N*m", 4e-3),
    ("1.5 min", "s", 90.0),
    ("500 rpm/V", "rad/(V*s)", 500 * 2 * math.pi / 60),
]


@pytest.mark.parametrize(("text", "unit", "expected"), CONVERSIONS)
def test_unit_strings_convert_to_si(text, unit, expected):
    assert to_si(text, unit, noun="a value", example="1") == pytest.approx(expected, rel=1e-15)


@pytest.mark.parametrize(
    ("text", "expected"),
    [("100 us", 1e-4), ("0.3 ms", 3e-4), ("2 us", 2e-6), ("470 uF", 4.7e-4)],
)
def test_decimal_prefixes_give_the_nearest_double(text, expected):
    # Source: definition of the prefixes (SI Brochure, 9th ed., Table 7). Exact equality: a
    # written decimal scaled by a power of ten must round once, to the same double as the
    # literal (100 * 1e-6 would give 9.999999999999999e-05).
    unit = "F" if text.endswith("F") else "s"
    assert to_si(text, unit, noun="a value", example="1") == expected


def test_plain_numbers_are_si_and_bools_are_refused():
    assert to_si(0.002, "H", noun="an inductance", example="2 mH") == 0.002
    assert to_si(3, "V", noun="a voltage", example="24 V") == 3.0
    with pytest.raises(UnitError, match=r"found true \(a boolean\)"):
        to_si(True, "V", noun="a voltage", example="24 V")


@pytest.mark.parametrize(
    ("value", "found"),
    [
        ("2 ohm", "found '2 ohm' (a resistance)"),
        ("2 mHz z", "unknown unit 'z'"),
        ("abc", "not a number followed by a unit"),
        ("0.002", "(a plain number)"),
        ("inf H", "finite"),
        ("nan H", "finite"),
        ("1e999 H", "finite"),
        ("2 3 H", "not a number followed by a unit"),
        ("1 H^(10^10^10)", "chained power"),
        ("10**10**10 H", "chained power"),
        ("1 ((H^9)^9)^9", "too large"),
        ("2 m$H", "character '$'"),
        ({"value": 2}, "found a table"),
        ([2, "mH"], "found an array of 2 items"),
    ],
)
def test_bad_unit_values_say_what_was_expected_and_found(value, found):
    with pytest.raises(UnitError) as info:
        to_si(value, "H", noun="an inductance", example="2 mH")
    assert "expected an inductance" in str(info.value)
    assert found in str(info.value)


def test_wrong_dimension_message_matches_the_agreed_wording():
    with pytest.raises(UnitError) as info:
        to_si("2 ohm", "H", noun="an inductance", example="2 mH")
    assert info.value.detail == "expected an inductance (e.g. '2 mH'), found '2 ohm' (a resistance)"
    assert isinstance(info.value, ValueError)


@pytest.mark.parametrize(
    ("unit", "noun"),
    [
        ("ohm", "a resistance"),
        ("mH", "an inductance"),
        ("ms", "a time"),
        ("kV", "a voltage"),
        ("mA", "a current"),
        ("N*m", "a torque or an energy"),
        ("V*s/rad", "a torque constant"),
        ("rpm", "a frequency or an angular speed"),
        ("m^3", "[length] ** 3"),
        ("%", "a plain number"),
    ],
)
def test_describe_dimension_names_common_quantities(unit, noun):
    assert noun in describe_dimension(registry().parse_units(unit))


def test_registry_is_made_once():
    assert registry() is registry()


# --------------------------------------------------------------------------------------------
# Good files
# --------------------------------------------------------------------------------------------


def test_pump_file_loads_with_si_values(tmp_path):
    path = write(tmp_path, PUMP)
    sc = load_scenario(path)
    # Source: definition of the unit (SI prefixes m, u, k, g*cm^2 = 1e-3 kg * 1e-4 m^2).
    # Tolerance: 1e-15 relative, the rounding of one or two float operations.
    approx = lambda x: pytest.approx(x, rel=1e-15)  # noqa: E731
    assert sc.source == str(path)
    assert sc.about.title == "Coolant pump, 24 V"
    assert sc.simulation.duration == 0.5
    assert sc.simulation.record_interval == approx(100e-6)
    assert sc.simulation.step == approx(2e-6)
    assert sc.motor.resistance == 1.2
    assert sc.motor.inductance == approx(2e-3)
    assert sc.motor.torque_constant == approx(0.05)
    assert sc.motor.inertia == approx(1e-4)
    assert sc.motor.viscous_friction == approx(1e-5)
    assert sc.motor.coulomb_friction == approx(4e-3)
    assert sc.motor.kind == "permanent_magnet"
    assert sc.load.inertia == approx(25e-3 * 1e-4)
    assert sc.load.torque == approx(0.01)
    assert sc.load.locked is False
    assert sc.supply.voltage == 24.0
    assert sc.supply.resistance == approx(0.05)
    assert sc.supply.capacitance == approx(470e-6)
    assert sc.supply.regenerative is False
    assert sc.control.mode == "voltage"
    assert sc.control.voltage == 24.0
    # Events are sorted by time; values are SI, booleans stay booleans.
    assert sc.events == (
        Event(at=approx(0.1), changes=(("load.torque", approx(0.03)), ("load.locked", False))),
        Event(at=approx(0.3), changes=(("supply.voltage", 18.0),)),
    )
    assert sc.events[0].changes[1][1] is False


def test_minimal_file_gets_the_defaults():
    sc = load_scenario_text(MINIMAL)
    assert sc.source == "<text>"
    assert sc.simulation.record_interval is None
    assert sc.simulation.step is None
    for table in ("load", "control", "about"):
        for key, spec in KEYS[table].items():
            assert getattr(getattr(sc, table), key) == spec.default
    assert sc.motor.viscous_friction == 0.0
    assert sc.supply.regenerative is True
    assert sc.events == ()


def test_scenario_is_frozen():
    sc = load_scenario_text(MINIMAL)
    with pytest.raises(dataclasses.FrozenInstanceError):
        sc.motor.resistance = 3.0  # type: ignore[misc]


def test_events_at_equal_times_keep_file_order():
    text = MINIMAL + "".join(
        f'\n[[events]]\nat = "{at}"\nset = {{ "load.torque" = "{tq} N*m" }}\n'
        for at, tq in [("0.1 s", 1), ("0.05 s", 2), ("0.1 s", 3), ("0 s", 4), ("0.2 s", 5)]
    )
    sc = load_scenario_text(text)
    assert [(e.at, e.changes[0][1]) for e in sc.events] == [
        (0.0, 4.0),
        (0.05, 2.0),
        (0.1, 1.0),
        (0.1, 3.0),
        (0.2, 5.0),
    ]


def test_event_changes_may_be_written_as_nested_tables():
    base = load_scenario_text(PUMP)
    nested = load_scenario_text(
        edit(
            PUMP,
            'set = { "load.torque" = "0.03 N*m", "load.locked" = false }',
            'set = { load = { torque = "0.03 N*m", locked = false } }',
        )
    )
    assert nested.events == base.events


def test_utf8_byte_order_mark_is_accepted(tmp_path):
    path = tmp_path / "bom.toml"
    path.write_bytes(b"\xef\xbb\xbf" + MINIMAL.encode())
    assert load_scenario(path).supply.voltage == 12.0


def test_keys_table_matches_the_dataclasses():
    # KEYS is the single source of truth; the loader builds each table's dataclass from it.
    for table, cls in load_module._TABLE_TYPES.items():
        derived = set(DERIVED_FIELDS.get(table, ()))
        assert set(KEYS[table]) == {f.name for f in dataclasses.fields(cls)} - derived, table
    assert set(KEYS) == set(load_module._TABLE_TYPES)


@pytest.mark.parametrize(
    "name", [f"{t}.{k}" for t, ks in KEYS.items() for k, s in ks.items() if s.kind == "quantity"]
)
def test_every_key_example_is_accepted_by_its_own_key(name):
    table, _, key = name.rpartition(".")
    spec: KeySpec = KEYS[table][key]
    unit = spec.unit
    if unit.startswith(CONTROLLED):  # reference values take the controlled quantity's unit
        unit = CONTROLLED_UNITS["speed"] + unit[len(CONTROLLED) :]
    value = to_si(spec.example, unit, noun=spec.noun, example=spec.example)
    assert {"positive": value > 0, "nonnegative": value >= 0, "any": True}[spec.constraint]


# --------------------------------------------------------------------------------------------
# Bad files: each message names the file, the key, the expectation and what was found
# --------------------------------------------------------------------------------------------


def error_of(tmp_path: Path, text: str) -> ScenarioError:
    path = write(tmp_path, text)
    with pytest.raises(ScenarioError) as info:
        load_scenario(path)
    err = info.value
    assert str(path) in str(err) and err.source == str(path)
    assert isinstance(err, ValueError) and isinstance(err, DcsimError)
    return err


BAD = [
    # (name, edited text, key, [fragments of the message])
    (
        "wrong dimension",
        edit(PUMP, 'inductance = "2 mH"', 'inductance = "2 ohm"'),
        "motor.inductance",
        ["expected an inductance (e.g. '2 mH'), found '2 ohm' (a resistance)"],
    ),
    (
        "unknown key",
        edit(PUMP, "inductance =", "inductanse ="),
        "motor.inductanse",
        ["unknown key 'motor.inductanse'; did you mean 'motor.inductance'?"],
    ),
    (
        "unknown key, no close match",
        edit(PUMP, "inductance =", "paint_code ="),
        "motor.paint_code",
        ["unknown key 'motor.paint_code'; expected one of motor.kind, motor.resistance"],
    ),
    (
        "unknown table",
        edit(PUMP, "[motor]", "[motr]"),
        "motr",
        ["unknown table 'motr'; did you mean 'motor'?"],
    ),
    (
        "loop table without its sample time",
        PUMP + '\n[control.speed]\nkp = "0.05 A*s/rad"\n',
        "control.speed.sample_time",
        ["missing key: expected a time", "found no sample_time"],
    ),
    (
        "top-level key",
        'duration = "1 s"\n' + PUMP,
        "duration",
        ["unknown key 'duration'", "did you mean 'simulation.duration'"],
    ),
    (
        "quoted dotted key at the top level",
        '"motor.coulomb_friction" = "1 mN*m"\n' + PUMP,
        "motor.coulomb_friction",
        ["unknown key 'motor.coulomb_friction' at the top level", "inside [motor]"],
    ),
    (
        "missing key",
        edit(PUMP, 'inductance = "2 mH"\n', ""),
        "motor.inductance",
        ["missing key", "expected an inductance", 'inductance = "2 mH"', "found no inductance"],
    ),
    (
        "missing table",
        drop_table(PUMP, "supply"),
        "supply",
        ["missing table", "expected a [supply] table with voltage", "found none"],
    ),
    (
        "table where a value is expected",
        edit(PUMP, 'inductance = "2 mH"', "inductance = { value = 2, unit = 'mH' }"),
        "motor.inductance",
        ["expected an inductance", "found a table"],
    ),
    (
        "value where a table is expected",
        "load = 3\n" + drop_table(PUMP, "load"),
        "load",
        ["expected a table [load]", "found 3 (a number)"],
    ),
    (
        "string where a bool is expected",
        edit(PUMP, "regenerative = false", 'regenerative = "no"'),
        "supply.regenerative",
        ["expected true or false", "found 'no' (a string)"],
    ),
    (
        "number where a bool is expected",
        edit(PUMP, "locked = false", "locked = 0"),
        "load.locked",
        ["expected true or false", "found 0 (a number)"],
    ),
    (
        "TOML nan",
        edit(PUMP, 'voltage = "24 V"\nresistance', "voltage = nan\nresistance"),
        "supply.voltage",
        ["expected a voltage with a finite value", "found nan"],
    ),
    (
        "inf with a unit",
        edit(PUMP, 'torque = "0.01 N*m"', 'torque = "-inf N*m"'),
        "load.torque",
        ["expected a torque with a finite value", "found '-inf N*m'"],
    ),
    (
        "not positive",
        edit(PUMP, 'resistance = "1.2 ohm"', 'resistance = "-1.2 ohm"'),
        "motor.resistance",
        ["expected a resistance greater than 0", "found '-1.2 ohm' = -1.2 ohm"],
    ),
    (
        "zero where positive is required",
        edit(PUMP, 'inertia = "1e-4 kg*m^2"', "inertia = 0"),
        "motor.inertia",
        ["expected a moment of inertia greater than 0", "found 0"],
    ),
    (
        "negative where nonnegative is required",
        edit(PUMP, 'resistance = "50 mohm"', 'resistance = "-50 mohm"'),
        "supply.resistance",
        ["expected a resistance of 0 or more", "found '-50 mohm' = -0.05 ohm"],
    ),
    (
        "unknown choice",
        edit(PUMP, 'mode = "voltage"', 'mode = "torque"'),
        "control.mode",
        ["expected a control mode, one of 'voltage'", "found 'torque'"],
    ),
    (
        "choice close to a valid one",
        edit(PUMP, 'mode = "voltage"', 'mode = "Voltage"'),
        "control.mode",
        ["found 'Voltage'; did you mean 'voltage'?"],
    ),
    (
        "closed-loop mode without its loops",
        edit(PUMP, 'mode = "voltage"\nvoltage = "24 V"\n', 'mode = "speed"\n'),
        "control.speed",
        ["missing table: control mode 'speed' runs the loops speed -> current"],
    ),
    (
        "loop gain in the wrong unit",
        PUMP + '\n[control.speed]\nkp = "0.05 V/A"\nsample_time = "1 ms"\nlimit = "5 A"\n',
        "control.speed.kp",
        ["expected a proportional gain", "found '0.05 V/A'"],
    ),
    (
        "text expected",
        edit(PUMP, 'title = "Coolant pump, 24 V"', "title = 24"),
        "about.title",
        ["expected a text", "found 24 (a number)"],
    ),
    (
        "event outside the run",
        edit(PUMP, 'at = "0.3 s"', 'at = "0.6 s"'),
        "events[0].at",
        ["event outside the run", "expected a time from 0 s to simulation.duration", "'0.6 s'"],
    ),
    (
        "event before the run",
        edit(PUMP, 'at = "0.3 s"', "at = -0.1"),
        "events[0].at",
        ["event outside the run", "found -0.1"],
    ),
    (
        "event time with the wrong dimension",
        edit(PUMP, 'at = "0.3 s"', 'at = "0.3 V"'),
        "events[0].at",
        ["expected a time", "found '0.3 V' (a voltage)"],
    ),
    (
        "event without at",
        edit(PUMP, 'at = "0.3 s"\n', ""),
        "events[0].at",
        ["missing key", "expected the time of the event", "found no 'at'"],
    ),
    (
        "event without set",
        edit(PUMP, 'set = { "supply.voltage" = "18 V" }\n', ""),
        "events[0].set",
        ["missing key", "found no 'set'"],
    ),
    (
        "event with a misspelt field",
        edit(PUMP, 'at = "0.3 s"', 'at = "0.3 s"\nsett = 1'),
        "events[0].sett",
        ["unknown key 'events[0].sett'; did you mean 'set'?"],
    ),
    (
        "event set is not a table",
        edit(PUMP, 'set = { "supply.voltage" = "18 V" }', 'set = "supply.voltage = 18 V"'),
        "events[0].set",
        ["expected a table of changes", "found 'supply.voltage = 18 V' (a string)"],
    ),
    (
        "event with nothing to set",
        edit(PUMP, 'set = { "supply.voltage" = "18 V" }', "set = {}"),
        "events[0].set",
        ["expected at least one change", "found an empty table"],
    ),
    (
        "event value with the wrong dimension",
        edit(PUMP, '"load.torque" = "0.03 N*m"', '"load.torque" = "0.03 V"'),
        "events[1].set.load.torque",
        ["expected a torque (e.g. '0.02 N*m'), found '0.03 V' (a voltage)"],
    ),
    (
        "event value breaking the sign rule",
        edit(PUMP, '"supply.voltage" = "18 V"', '"supply.voltage" = "-18 V"'),
        "events[0].set.supply.voltage",
        ["expected a voltage of 0 or more", "found '-18 V'"],
    ),
    (
        "event key misspelt",
        edit(PUMP, '"load.torque" = "0.03 N*m"', '"load.torqe" = "0.03 N*m"'),
        "events[1].set.load.torqe",
        ["unknown key 'load.torqe'; did you mean 'load.torque'?"],
    ),
    (
        "event key that cannot change",
        edit(PUMP, '"supply.voltage" = "18 V"', '"motor.inductance" = "3 mH"'),
        "events[0].set.motor.inductance",
        ["expected a key an event may change", "load.torque", "found 'motor.inductance'"],
    ),
    (
        "event key given twice",
        edit(PUMP, '"supply.voltage" = "18 V"', '"supply.voltage" = "18 V", supply.voltage = 3'),
        "events[0].set.supply.voltage",
        ["expected each key once", "found 'supply.voltage' twice"],
    ),
    (
        "events not an array of tables",
        "events = 3\n" + PUMP_WITHOUT_EVENTS,
        "events",
        ["expected an array of tables", "found 3 (a number)"],
    ),
    (
        "bus capacitor without source resistance",
        edit(PUMP, 'resistance = "50 mohm"', 'resistance = "0 ohm"'),
        "supply.resistance",
        [
            "expected a resistance greater than 0 when supply.capacitance is '470 uF'",
            "charges the bus capacitor through it",
            "found '0 ohm'",
        ],
    ),
    (
        "bus capacitor with the default source resistance",
        edit(PUMP, 'resistance = "50 mohm"\n', ""),
        "supply.resistance",
        ["expected a resistance greater than 0", "found 0 ohm (the default)"],
    ),
    (
        "event removing the source resistance under a bus capacitor",
        edit(PUMP, '"supply.voltage" = "18 V"', '"supply.resistance" = 0'),
        "events[0].set.supply.resistance",
        ["expected a resistance greater than 0", "found 0 (set at '0.3 s')"],
    ),
    (
        "record interval longer than the run",
        edit(PUMP, 'record_interval = "100 us"', 'record_interval = "1 s"'),
        "simulation.record_interval",
        ["expected a time no longer than simulation.duration ('0.5 s')", "found '1 s'"],
    ),
    (
        "step longer than the run",
        edit(PUMP, 'step = "2 us"', 'step = "2 s"'),
        "simulation.step",
        ["expected a time no longer than simulation.duration", "found '2 s'"],
    ),
]


@pytest.mark.parametrize(
    ("text", "key", "fragments"), [b[1:] for b in BAD], ids=[b[0] for b in BAD]
)
def test_bad_file_message_names_file_key_expectation_and_finding(tmp_path, text, key, fragments):
    err = error_of(tmp_path, text)
    assert err.key == key
    assert f": {key}: " in str(err)
    for fragment in fragments:
        assert fragment in str(err)


@pytest.mark.parametrize(
    ("old", "new", "piece"),
    [
        ('inductance = "2 mH"', 'inductance "2 mH"', 'inductance "2 mH"'),
        ('voltage = "24 V"\nresistance', 'voltage = "24 V\nresistance', 'voltage = "24 V'),
        ("[motor]", "[motor", "[motor"),
        ('inertia = "25 g*cm^2"', 'inertia = "25 g*cm^2"\ninertia = 0', "inertia = 0"),
    ],
)
def test_malformed_toml_gives_the_line(tmp_path, old, new, piece):
    text = edit(PUMP, old, new)
    err = error_of(tmp_path, text)
    assert f"malformed TOML at line {line_of(text, piece)}," in str(err)
    assert "the line reads" in str(err)


def test_malformed_toml_at_the_end(tmp_path):
    err = error_of(tmp_path, PUMP + "\nkey = ")
    assert "malformed TOML" in str(err)


LOOPS = """
[control.current]
kp = "2 V/A"
ki = "1000 V/(A*s)"
sample_time = "100 us"

[control.speed]
kp = "0.05 A*s/rad"
ki = "1 A/rad"
sample_time = "1 ms"
limit = "5 A"
"""


def test_control_voltage_is_refused_outside_voltage_mode():
    closed_loop = edit(PUMP, 'mode = "voltage"', 'mode = "speed"') + LOOPS
    with pytest.raises(ScenarioError) as info:
        load_scenario_text(closed_loop)
    assert info.value.key == "control.voltage"
    assert "expected no control.voltage in control mode 'speed'" in str(info.value)
    assert "found '24 V'" in str(info.value)
    without_voltage = edit(closed_loop, 'voltage = "24 V"\n\n[[events]]', "\n[[events]]")
    assert load_scenario_text(without_voltage).control.mode == "speed"
    with pytest.raises(ScenarioError, match=r"events\[0\]\.set\.control\.voltage"):
        load_scenario_text(edit(without_voltage, '"supply.voltage"', '"control.voltage"'))


def test_missing_file(tmp_path):
    path = tmp_path / "no_such_pump.toml"
    with pytest.raises(ScenarioError) as info:
        load_scenario(path)
    assert str(path) in str(info.value)
    assert "expected a readable scenario file" in str(info.value)


def test_directory_instead_of_file(tmp_path):
    with pytest.raises(ScenarioError, match="cannot be read"):
        load_scenario(tmp_path)


def test_file_that_is_not_utf8(tmp_path):
    path = tmp_path / "latin1.toml"
    path.write_bytes(MINIMAL.encode() + b'\n[about]\ntitle = "K\xfchlmittelpumpe"\n')
    with pytest.raises(ScenarioError) as info:
        load_scenario(path)
    assert str(path) in str(info.value)
    assert "expected UTF-8 text" in str(info.value) and "0xfc" in str(info.value)


@pytest.mark.parametrize("bad", [None, 3, b"[simulation]"])
def test_text_that_is_not_a_str_gives_scenario_error(bad):
    with pytest.raises(ScenarioError, match="expected the text of a TOML file"):
        load_scenario_text(bad)  # type: ignore[arg-type]


@pytest.mark.parametrize("bad", [None, 3.5, "pump\0.toml"])
def test_path_that_is_not_a_path_gives_scenario_error(bad):
    with pytest.raises(ScenarioError, match="expected a"):
        load_scenario(bad)  # type: ignore[arg-type]


@pytest.mark.parametrize(
    "text",
    [
        "a = " + "[" * 5000,
        "a = " + "9" * 5000,
        MINIMAL + "\n[load]\n" + ".".join(["x"] * 3000) + " = 1\n",
        "[simulation]\nduration = '" + "9" * 300 + " s'\n",
    ],
    ids=["deep nesting", "huge integer", "deep dotted key", "long string"],
)
def test_pathological_documents_give_scenario_error(text):
    with pytest.raises(ScenarioError):
        load_scenario_text(text)


# --------------------------------------------------------------------------------------------
# with_changes
# --------------------------------------------------------------------------------------------


def test_with_changes_returns_a_new_scenario_and_keeps_the_old():
    old = load_scenario_text(PUMP, source="pump.toml")
    new = old.with_changes({"motor.inductance": "3 mH", "load.torque": 0.02, "load.locked": True})
    # Source: definition of the unit (3 mH = 3e-3 H).
    assert new.motor.inductance == 3e-3
    assert new.load.torque == 0.02 and new.load.locked is True
    assert old.motor.inductance == 2e-3 and old.load.torque == 0.01 and old.load.locked is False
    assert new is not old and new != old
    assert new.source == old.source and new.events == old.events
    assert new.motor.resistance == old.motor.resistance
    assert old.with_changes({}) == old


def test_with_changes_accepts_nested_tables_and_resets_to_automatic():
    old = load_scenario_text(PUMP)
    new = old.with_changes({"motor": {"resistance": "1.5 ohm"}, "simulation.step": None})
    assert new.motor.resistance == 1.5
    assert new.simulation.step is None
    assert old.simulation.step == pytest.approx(2e-6, rel=1e-15)


@pytest.mark.parametrize(
    ("changes", "key", "fragment"),
    [
        ({"motor.inductanse": "3 mH"}, "motor.inductanse", "did you mean 'motor.inductance'?"),
        ({"motor.inductance": "3 ohm"}, "motor.inductance", "found '3 ohm' (a resistance)"),
        ({"motor.inductance": -1}, "motor.inductance", "greater than 0"),
        ({"supply.resistance": 0}, "supply.resistance", "charges the bus capacitor"),
        ({"simulation.duration": "0.2 s"}, "events[1].at", "event outside the run"),
        ({"simulation.duration": "50 us"}, "simulation.record_interval", "no longer than"),
        ({"control.mode": "position"}, "control.voltage", "expected no control.voltage"),
        ({"load.locked": "yes"}, "load.locked", "expected true or false"),
        ({"events": []}, "events", "events cannot be changed this way"),
        ({3: 1}, "", "expected a dotted key"),
    ],
)
def test_with_changes_revalidates(changes, key, fragment):
    old = load_scenario_text(PUMP, source="pump.toml")
    with pytest.raises(ScenarioError) as info:
        old.with_changes(changes)
    assert info.value.key == key
    assert fragment in str(info.value)
    assert "pump.toml" in str(info.value)


def test_with_changes_rejects_a_non_mapping():
    with pytest.raises(ScenarioError, match="expected a mapping"):
        load_scenario_text(PUMP).with_changes([("motor.inductance", "3 mH")])  # type: ignore


def test_with_changes_rechecks_a_scenario_built_in_code():
    sc = load_scenario_text(MINIMAL)
    broken = dataclasses.replace(sc, motor=dataclasses.replace(sc.motor, inductance=-1.0))
    with pytest.raises(ScenarioError, match="motor.inductance: expected an inductance greater"):
        broken.with_changes({"load.torque": 0.01})


@pytest.mark.parametrize("name", [f"{t}.{k}" for t, ks in KEYS.items() for k in ks])
def test_events_accept_exactly_the_changeable_keys(name):
    table, _, key = name.rpartition(".")
    spec = KEYS[table][key]
    # Examples of bool and text keys are TOML literals already; the others are strings.
    literal = spec.example if spec.kind in ("bool", "text") else f'"{spec.example}"'
    text = MINIMAL + f'\n[[events]]\nat = "0.1 s"\nset = {{ "{name}" = {literal} }}\n'
    if spec.changeable:
        assert name in changeable_keys()
        assert load_scenario_text(text).events[0].changes[0][0] == name
    else:
        assert name not in changeable_keys()
        with pytest.raises(ScenarioError, match="expected a key an event may change"):
            load_scenario_text(text)


def test_scenario_error_text_has_one_line_per_problem(tmp_path):
    err = error_of(tmp_path, edit(PUMP, 'inductance = "2 mH"', 'inductance = "2 ohm"'))
    assert "\n" not in str(err)
    assert re.fullmatch(r".+coolant_pump\.toml: motor\.inductance: expected .+, found .+", str(err))
    assert isinstance(load_scenario_text(PUMP), Scenario)
