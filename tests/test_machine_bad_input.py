"""Bad input to the machine library gets one ScenarioError naming the key, what was expected
and what was found -- found by probing the wound-field kinds, the magnetisation table, events
and [shaft] through ``load_scenario_text`` + ``simulate`` and the CLI.

Setting (invented): a series-wound traverse motor of a harbour grab crane on a 48 V battery
and a shunt-wound belt-conveyor motor on a 220 V quay bus. No physics is asserted here (the
machines' physics is tested in tests/test_wound_field.py); only the refusals.
"""

from __future__ import annotations

import re
import subprocess
import sys
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from dcsim import load_scenario_text, simulate
from dcsim.errors import ScenarioError

REPO = Path(__file__).resolve().parents[1]


def _text(kind: str = "series", *, field_inductance: str | None = None, motor: str = "",
          tail: str = "", load: str = 'torque = "20 N*m"') -> str:  # fmt: skip
    m = (
        f'kind = "{kind}"\nresistance = "0.5 ohm"\ninductance = "5 mH"\n'
        'inertia = "0.02 kg*m^2"\nviscous_friction = "0.01 N*m*s/rad"\n'
    )
    if kind == "series":
        m += f'field_resistance = "0.3 ohm"\nfield_inductance = "{field_inductance or "10 mH"}"\n'
        m += 'mutual_inductance = "0.03 H"\n'
        volts = 48
    else:
        m += f'field_resistance = "110 ohm"\nfield_inductance = "{field_inductance or "11 H"}"\n'
        m += 'mutual_inductance = "1 H"\n'
        volts = 220
    return (
        f'[simulation]\nduration = "0.2 s"\n[motor]\n{m}{motor}\n[load]\n{load}\n'
        f'[supply]\nvoltage = "{volts} V"\n[control]\nmode = "voltage"\nvoltage = "{volts} V"\n'
        f"{tail}"
    )


def _refused(text: str, *, run: bool = False) -> ScenarioError:
    with pytest.raises(ScenarioError) as info:
        sc = load_scenario_text(text, source="quay.toml")
        if run:
            simulate(sc)
    err = info.value
    assert "\n" not in str(err)
    assert str(err).startswith("quay.toml: ")
    return err


def test_tiny_field_inductance_is_a_substep_budget_message_not_a_hang():
    # Was: L_f = 1e-12 H on a shunt field (L_f/R_f ~ 1e-14 s) set a 1e-15 s sub-step and the
    # compiled kernel ran ~2e14 sub-steps (hours) with no message.
    err = _refused(_text("shunt", field_inductance="1e-12 H"), run=True)
    assert err.key == "motor.field_inductance"
    msg = str(err)
    assert "expected at most 5e+08 sub-steps" in msg
    assert "field" in msg and "check motor.field_inductance" in msg


def test_tiny_field_inductance_refused_by_dcsim_validate(tmp_path):
    # Was: `validate` said ok (exit 0) while `run` refused; it promises to refuse what `run`
    # refuses (exit 2, one line on stderr).
    path = tmp_path / "quay.toml"
    path.write_text(_text("shunt", field_inductance="1e-12 H"), encoding="utf-8")
    out = subprocess.run(
        [sys.executable, "-m", "dcsim", "validate", str(path)],
        capture_output=True, text=True, cwd=REPO, check=False,
    )  # fmt: skip
    assert out.returncode == 2
    lines = out.stderr.strip().splitlines()
    assert len(lines) == 1
    assert "motor.field_inductance" in lines[0] and "sub-steps" in lines[0]


def test_event_on_torque_constant_of_a_wound_field_machine_is_refused():
    # Was: accepted and silently ignored (the kernel takes K from the field): the run's result
    # was identical to the run without the event.
    tail = '[[events]]\nat = "0.1 s"\nset = { "motor.torque_constant" = "0.1 N*m/A" }\n'
    err = _refused(_text("series", tail=tail), run=True)
    assert err.key == "events[0].set.motor.torque_constant"
    msg = str(err)
    assert "expected no event on motor.torque_constant" in msg
    assert "series machine" in msg and "derived" in msg and "found one" in msg


def test_magnetisation_speed_without_a_table_is_refused():
    # Was: silently ignored beside mutual_inductance.
    err = _refused(_text("series", motor='magnetisation_speed = "1000 rpm"\n'))
    assert err.key == "motor.magnetisation_speed"
    msg = str(err)
    assert "expected no magnetisation_speed without a magnetisation table" in msg
    assert "found magnetisation_speed written" in msg


def test_backlash_of_a_turn_or_more_is_refused():
    # Was: 400 deg of play accepted (a slip of unit, e.g. "400 deg" for 400 mrad, ran).
    load = 'torque = "5 N*m"\ninertia = "0.05 kg*m^2"'
    tail = '[shaft]\nstiffness = "400 N*m/rad"\nbacklash = "400 deg"\n'
    err = _refused(_text("series", load=load, tail=tail))
    assert err.key == "shaft.backlash"
    msg = str(err)
    assert "expected a total play of less than one turn (360 deg)" in msg
    assert "found '400 deg'" in msg


# --------------------------------------------------------------------------------------------
# Fuzz: a wound-field scenario mutated token by token (the idea of tests/test_scenario_fuzz.py
# on the machine library's keys); the loader gives a scenario or one ScenarioError, nothing else
# --------------------------------------------------------------------------------------------

COMPOUND = _text("shunt").replace('kind = "shunt"', 'kind = "compound"')
COMPOUND = COMPOUND.replace(
    'mutual_inductance = "1 H"\n',
    "magnetisation = [['0 A', '0 V'], ['1 A', '150 V'], ['2 A', '250 V']]\n"
    'magnetisation_speed = "1000 rpm"\ncompound = "cumulative"\n'
    'series_field_resistance = "0.1 ohm"\nseries_field_inductance = "2 mH"\n'
    'series_turns_ratio = "0.02"\ncommutator_segments = 12\npole_pairs = 2\n'
    'max_speed = "3000 rpm"\n',
)
TOKEN = re.compile(
    r'"[^"\n]*"|\'[^\'\n]*\'|\[\[|\]\]|[A-Za-z_][A-Za-z0-9_.]*|[-+]?[0-9][0-9.eE+-]*|\s+|.'
)
TOKENS = TOKEN.findall(COMPOUND)
assert "".join(TOKENS) == COMPOUND
POOL = sorted(set(TOKENS)) + [
    '"0 A"', '"1 V"', '"1 rpm"', '"-1 A"', '"nan V"', '"1e-12 H"', '"1e12 ohm"', "'1 A'",
    '"series"', '"separately_excited"', '"permanent_magnet"', '"differential"', "0", "-1",
    "1e6", "[]", "[[]]", '[["0 A"]]', '"1e9 rpm"', "true", '"400 deg"', "[shaft]",
    'stiffness = "0 N*m/rad"', 'base_speed = "1000 rpm"', 'field_voltage = "0 V"',
]  # fmt: skip


@st.composite
def mutated_compound(draw) -> str:
    tokens = list(TOKENS)
    for _ in range(draw(st.integers(1, 3))):
        op = draw(st.sampled_from(["delete", "replace", "insert", "duplicate"]))
        i = draw(st.integers(0, len(tokens) - 1))
        if op == "delete":
            del tokens[i]
        elif op == "replace":
            tokens[i] = draw(st.sampled_from(POOL))
        elif op == "insert":
            tokens.insert(i, draw(st.sampled_from(POOL)))
        else:
            tokens.insert(i, tokens[i])
    return "".join(tokens)


def test_the_compound_fuzz_base_is_valid():
    sc = load_scenario_text(COMPOUND, source="quay.toml")
    assert sc.motor.kind == "compound"
    assert sc.motor.magnetisation is not None


@settings(max_examples=250, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(mutated_compound())
def test_mutated_wound_field_scenario_raises_only_scenario_error(text):
    try:
        sc = load_scenario_text(text, source="quay.toml")
    except ScenarioError as err:
        msg = str(err)
        assert "\n" not in msg and msg.startswith("quay.toml")
        return
    # accepted: what the machine library relies on holds
    m = sc.motor
    if m.kind != "permanent_magnet":
        assert m.torque_constant > 0.0
        assert (m.mutual_inductance is None) != (m.magnetisation is None)
        if m.magnetisation is not None:
            i = [p[0] for p in m.magnetisation]
            assert i[0] == 0.0 and all(b > a for a, b in zip(i, i[1:], strict=False))
            assert m.magnetisation_speed > 0.0


@pytest.mark.parametrize("kind", ["series", "shunt"])
def test_zero_supply_voltage_names_the_supply_not_the_magnetics(kind):
    # Was: "expected a field that makes flux ... (check the magnetisation table)" on
    # motor.mutual_inductance, though the field current is zero only because the supply is.
    text = _text(kind).replace('voltage = "48 V"', 'voltage = "0 V"')
    text = text.replace('voltage = "220 V"', 'voltage = "0 V"')
    err = _refused(text)
    assert err.key == "supply.voltage"
    msg = str(err)
    assert f"expected a supply voltage > 0 for a {kind} machine" in msg and "found 0 V" in msg
