"""Fuzzing the scenario edge: whatever the input, the loader raises only ScenarioError.

Random text, and a valid scenario (an invented harbour winch) mutated token by token, are fed
to the loader; random changes are fed to ``with_changes``. Each run either gives a scenario
that keeps the invariants of a validated one, or a ScenarioError with a one-line message that
names its source. Any other exception fails the test.
"""

from __future__ import annotations

import math
import re
import subprocess
import sys
from fractions import Fraction
from pathlib import Path

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from dcsim.errors import ScenarioError
from dcsim.scenario import KEYS, Scenario, changeable_keys, load_scenario_text
from dcsim.scenario.schema import table_of
from dcsim.units import to_si

WINCH = """\
[about]
title = "Harbour winch, 48 V"

[simulation]
duration = "2 s"
record_interval = "1 ms"

[motor]
resistance = "0.35 ohm"
inductance = "1.1 mH"
torque_constant = "0.12 V*s/rad"
inertia = "8e-4 kg*m^2"
viscous_friction = "2e-4 N*m*s/rad"
coulomb_friction = "0.05 N*m"

[load]
inertia = "0.02 kg*m^2"
torque = "1.5 N*m"

[supply]
voltage = "48 V"
resistance = "30 mohm"
capacitance = "2200 uF"
regenerative = true

[control]
mode = "voltage"
voltage = "40 V"

[[events]]
at = "0.8 s"
set = { "load.torque" = "-1.0 N*m" }

[[events]]
at = "1.5 s"
set = { "supply.voltage" = "42 V", "control.voltage" = "36 V" }
"""

SOURCE = "winch.toml"
REPO = Path(__file__).resolve().parents[1]

# Tokens of the valid file: quoted strings, [[ ]], names, numbers, spaces, single characters.
TOKEN = re.compile(r'"[^"\n]*"|\[\[|\]\]|[A-Za-z_][A-Za-z0-9_.]*|[-+]?[0-9][0-9.eE+-]*|\s+|.')
TOKENS = TOKEN.findall(WINCH)
assert "".join(TOKENS) == WINCH

UNITS = [
    "ohm",
    "mohm",
    "mH",
    "H",
    "N*m/A",
    "V*s/rad",
    "kg*m^2",
    "g*cm^2",
    "N*m*s/rad",
    "N*m",
    "V",
    "kV",
    "A",
    "s",
    "ms",
    "us",
    "F",
    "uF",
    "rpm",
    "Hz",
    "%",
    "rad",
    "m",
    "degC",
    "zz",
    "",
    "1/s",
    "m^(10^10^10)",
    "^^",
    "**",
    "()",
    "Ω",
    "µs",
    "m²",
    "s^-1",
    "/",
    "mHz z",
    "e",
]
NASTY = [
    '"2 ohm"',
    '"inf V"',
    "nan",
    "-inf",
    "inf",
    '"3000 rpm"',
    '"5 %"',
    '"abc"',
    '"2 mHz z"',
    "true",
    "false",
    '"1e999 H"',
    '"10**10**10 s"',
    '"1 m^(10^10^10)"',
    "[1, 2]",
    "{ a = 1 }",
    "{}",
    "[]",
    '"-1 s"',
    "0",
    "-0.0",
    "1e308",
    "9" * 30,
    '"0.6 s"',
    '"motor.inductance"',
    '"load.torqe"',
    "[[events]]",
    "[motor]",
    "[fuse]",
    "[control.speed]",
    "=",
    "\n",
    '"',
    "'",
    '"speed"',
    '"torque"',
    "1979-05-27T07:32:00Z",
    "07:32:00",
    '"""',
    "#",
    ".",
    ",",
    "set",
    "at",
    "events",
    "[events]",
    "\\",
    "\x00",
    '"\\u00e9"',
    "0x10",
    "1_000",
    "+",
    "1e-320",
]
POOL = sorted(set(TOKENS)) + NASTY


def toml_number(x: float) -> str:
    """A float as a TOML literal (TOML spells the non-finite values inf, -inf and nan)."""
    if math.isnan(x):
        return "nan"
    if math.isinf(x):
        return "inf" if x > 0 else "-inf"
    return repr(x)


values = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True).map(toml_number),
    st.integers(min_value=-(10**30), max_value=10**30).map(str),
    st.builds(
        lambda x, u: f'"{toml_number(x)} {u}"',
        st.floats(allow_nan=True, allow_infinity=True),
        st.sampled_from(UNITS),
    ),
    st.sampled_from(NASTY),
)


TOKEN_OPS = ["delete", "duplicate", "replace", "insert"]
VALUE_OPS = ["unit", "value"] * 5  # weighted: these mostly keep the TOML readable
LINE_OPS = ["delete line", "duplicate line", "move line"] * 2


@st.composite
def mutated_winch(draw) -> str:
    """The valid winch file with one to four mutations of its tokens, values or lines."""
    tokens = list(TOKENS)
    for _ in range(draw(st.integers(1, 4))):
        if not tokens:
            tokens.append(draw(st.sampled_from(POOL)))
        op = draw(st.sampled_from(TOKEN_OPS + VALUE_OPS + LINE_OPS))
        if op in LINE_OPS:
            lines = "".join(tokens).splitlines(keepends=True) or [""]
            i = draw(st.integers(0, len(lines) - 1))
            if op == "delete line":
                del lines[i]
            elif op == "duplicate line":
                lines.insert(i, lines[i])
            else:
                lines.insert(draw(st.integers(0, len(lines) - 1)), lines.pop(i))
            tokens = TOKEN.findall("".join(lines))
            continue
        i = draw(st.integers(0, len(tokens) - 1))
        if op == "delete":
            del tokens[i]
        elif op == "duplicate":
            tokens.insert(i, tokens[i])
        elif op == "replace":
            tokens[i] = draw(st.sampled_from(POOL))
        elif op == "insert":
            tokens.insert(i, draw(st.sampled_from(POOL)))
        else:
            quoted = [j for j, t in enumerate(tokens) if t.startswith('"') and " " in t]
            if not quoted:
                continue
            j = draw(st.sampled_from(quoted))
            if op == "unit":
                number = tokens[j][1:-1].split(" ", 1)[0]
                tokens[j] = f'"{number} {draw(st.sampled_from(UNITS))}"'
            else:
                tokens[j] = draw(values)
    return "".join(tokens)


def check_outcome(text: str) -> None:
    """Load ``text``: a valid scenario, or a one-line ScenarioError naming the source."""
    try:
        scenario = load_scenario_text(text, source=SOURCE)
    except ScenarioError as err:
        message = str(err)
        assert message.startswith(SOURCE + ":")
        assert err.detail and "\n" not in message and "Traceback" not in message
        return
    check_invariants(scenario)


def check_invariants(sc: Scenario) -> None:
    """What every validated scenario satisfies, whatever its file looked like."""
    assert isinstance(sc, Scenario)
    for table, specs in KEYS.items():
        if table_of(sc, table) is None:  # an optional part the file does not have
            continue
        for key, spec in specs.items():
            value = getattr(table_of(sc, table), key)
            if spec.kind == "quantity" and value is not None:
                assert isinstance(value, float) and math.isfinite(value), (table, key, value)
                if spec.constraint == "positive":
                    assert value > 0
                elif spec.constraint == "nonnegative":
                    assert value >= 0
            elif spec.kind == "bool":
                assert isinstance(value, bool)
            elif spec.kind == "choice":  # a choice without a default may be left unset
                assert value in spec.choices or (value is None and spec.default is None)
    times = [e.at for e in sc.events]
    assert times == sorted(times)
    assert all(0 <= t <= sc.simulation.duration for t in times)
    for event in sc.events:
        assert event.changes and all(name in changeable_keys() for name, _ in event.changes)
    if sc.supply.capacitance > 0:
        assert sc.supply.resistance > 0


def test_the_fuzzed_file_is_valid_to_begin_with():
    check_invariants(load_scenario_text(WINCH, source=SOURCE))


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.text(max_size=400))
def test_random_text_raises_only_scenario_error(text):
    check_outcome(text)


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(mutated_winch())
def test_mutated_scenario_raises_only_scenario_error(text):
    check_outcome(text)


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    st.sampled_from([f"{t}.{k}" for t, ks in KEYS.items() for k in ks] + ["motor", "x.y", ""]),
    st.one_of(
        st.none(),
        st.booleans(),
        st.integers(),
        st.floats(allow_nan=True, allow_infinity=True),
        st.text(max_size=30),
        st.builds(
            lambda x, u: f"{x!r} {u}",
            st.floats(allow_nan=True, allow_infinity=True),
            st.sampled_from(UNITS),
        ),
        st.lists(st.integers(), max_size=3),
        st.dictionaries(st.text(max_size=10), st.integers(), max_size=3),
        st.just(object()),
    ),
)
def test_random_changes_raise_only_scenario_error(name, value):
    base = load_scenario_text(WINCH, source=SOURCE)
    try:
        changed = base.with_changes({name: value})
    except ScenarioError as err:
        assert "winch.toml" in str(err) and "\n" not in str(err)
        return
    check_invariants(changed)
    assert base == load_scenario_text(WINCH, source=SOURCE)  # the original is unchanged


PREFIXES = {"k": 1000, "": 1, "m": Fraction(1, 1000), "u": Fraction(1, 10**6)}


@settings(max_examples=200, deadline=None)
@given(
    st.decimals(min_value=-1e6, max_value=1e6, allow_nan=False, places=6),
    st.sampled_from(sorted(PREFIXES)),
    st.sampled_from(["V", "A", "s", "ohm", "H", "F"]),
)
def test_prefixed_values_convert_exactly(number, prefix, unit):
    # Source: definition of the SI prefixes (SI Brochure, 9th ed., Table 7). The written decimal
    # times an exact prefix factor, rounded once, is the double nearest to the true value, so
    # the comparison is exact.
    text = f"{number} {prefix}{unit}"
    expected = float(Fraction(str(number)) * PREFIXES[prefix])
    assert to_si(text, unit, noun="a value", example="1") == expected


def test_huge_powers_are_refused_quickly():
    # pint evaluates integer powers exactly; without the guard in dcsim.units these strings
    # would run for hours. A separate process with a time limit keeps a regression visible.
    code = (
        "from dcsim.scenario import load_scenario_text\n"
        "from dcsim.errors import ScenarioError\n"
        "for v in ['1 m^(10^10^10)', '10**10**10 s', '1 ((kOhm^9)^9)^9', '2 s^99^99',\n"
        "          '1 (((Kim^99)^99)^99)^99', '" + "9" * 190 + " s']:\n"
        "    try:\n"
        "        load_scenario_text('[simulation]\\nduration = \"%s\"\\n' % v)\n"
        "    except ScenarioError:\n"
        "        pass\n"
        "print('ok')\n"
    )
    done = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, timeout=60, cwd=REPO
    )
    assert done.returncode == 0, done.stderr
    assert done.stdout.strip() == "ok"
