"""Read scenario files (TOML) into validated, immutable :class:`Scenario` objects.

This is the edge of dcsim: unit strings are converted to SI floats here and nowhere else, and
every problem a file can have becomes one :class:`~dcsim.errors.ScenarioError` naming the file,
the key (dotted, e.g. ``motor.inductance`` or ``events[2].set.load.torque``), what was expected
and what was found. The loader raises no other exception for any input.

Loading runs in two stages:

1. *reading* walks the TOML document in file order, rejects unknown tables and keys (with the
   closest valid name from :mod:`difflib`), and converts each value with its
   :class:`~dcsim.scenario.schema.KeySpec` (type, dimension, finiteness, sign);
2. *assembling* fills defaults, checks required tables and keys, the rules that tie keys
   together, and the events against the run; then it builds the frozen dataclasses.

:func:`apply_changes` (behind :meth:`Scenario.with_changes`) reuses both: it converts the
changed values like a file's, then re-assembles and so re-validates the whole scenario.

Events are numbered from 0 in file order: ``events[2]`` is the third ``[[events]]`` table.
"""

from __future__ import annotations

import difflib
import os
import re
import sys
from collections.abc import Callable, Iterator, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover - Python 3.10
    import tomli as tomllib

from dcsim.errors import ScenarioError
from dcsim.scenario import datasheet, machines
from dcsim.scenario.schema import (
    CONTROLLED,
    CONTROLLED_UNITS,
    KEYS,
    OPTIONAL_TABLES,
    POWER_STAGE_TABLES,
    REQUIRED,
    REQUIRED_TABLES,
    About,
    Battery,
    Brake,
    Bridge,
    Checks,
    Control,
    CurrentLoop,
    Event,
    Fuse,
    Gear,
    Hoist,
    KeySpec,
    Load,
    Motor,
    PositionLoop,
    Precharge,
    Protection,
    Reference,
    Scenario,
    Sensors,
    Shaft,
    Simulation,
    SpeedLoop,
    Supply,
    SupplyProfile,
    Thermal,
    changeable_keys,
    table_of,
)
from dcsim.units import UnitError, describe_value, to_si

__all__ = [
    "apply_changes",
    "convert_value",
    "key_spec",
    "load_scenario",
    "load_scenario_mapping",
    "load_scenario_text",
    "parse_toml",
    "read_toml_text",
    "unknown_key_error",
]

_TABLE_TYPES: dict[str, type] = {
    "simulation": Simulation,
    "motor": Motor,
    "load": Load,
    "supply": Supply,
    "control": Control,
    "about": About,
    "bridge": Bridge,
    "brake": Brake,
    "protection": Protection,
    "precharge": Precharge,
    "battery": Battery,
    "fuse": Fuse,
    "supply_profile": SupplyProfile,
    "control.current": CurrentLoop,
    "control.speed": SpeedLoop,
    "control.position": PositionLoop,
    "control.reference": Reference,
    "sensors": Sensors,
    "thermal": Thermal,
    "checks": Checks,
    "gear": Gear,
    "hoist": Hoist,
    "shaft": Shaft,
}
"""Dataclass of each table; its fields are the table's keys in :data:`KEYS`."""

_EVENTS = "events"
_EVENT_FIELDS = ("at", "set")

_PLANNED_KEYS: dict[str, str] = {}
"""Names the contract announces that this version does not read yet (for clearer messages)."""

_PLANNED_CHOICES: dict[str, tuple[str, ...]] = {}
"""Choices the contract announces that this version does not accept yet."""


def load_scenario(path: str | os.PathLike[str]) -> Scenario:
    """Read and validate a scenario file.

    Parameters
    ----------
    path : str or os.PathLike
        A TOML scenario file (UTF-8).

    Returns
    -------
    Scenario
        Validated, SI values; ``source`` is ``str(path)``.

    Raises
    ------
    ScenarioError
        The file cannot be read, is not valid TOML, or any value is not acceptable.
    """
    try:
        name = os.fsdecode(path)
    except TypeError:
        raise ScenarioError(
            f"expected a scenario file path, found {describe_value(path)}"
        ) from None
    return load_scenario_text(read_toml_text(name, "scenario file"), source=name)


def read_toml_text(name: str, what: str) -> str:
    """The UTF-8 text of a TOML file (a leading byte-order mark dropped).

    Parameters
    ----------
    name : str
        The file.
    what : str
        What it is, for the message (``"scenario file"``, ``"sweep file"``).

    Raises
    ------
    ScenarioError
        The file cannot be read or is not UTF-8 (one line naming the file).
    """
    try:
        data = Path(name).read_bytes()
    except (OSError, ValueError) as err:
        reason = getattr(err, "strerror", None) or str(err)
        raise ScenarioError(
            f"expected a readable {what}, found that it cannot be read ({reason})",
            source=name,
        ) from None
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as err:
        raise ScenarioError(
            f"expected UTF-8 text (as TOML requires), found the byte {data[err.start]:#04x} "
            f"at offset {err.start}, which is not UTF-8",
            source=name,
        ) from None
    return text.removeprefix("\ufeff")


def load_scenario_text(text: str, source: str = "<text>") -> Scenario:
    """Read and validate a scenario from TOML text.

    Parameters
    ----------
    text : str
        The TOML document.
    source : str
        Name used in messages and stored as ``Scenario.source``.

    Returns
    -------
    Scenario
        Validated, SI values.

    Raises
    ------
    ScenarioError
        The text is not valid TOML, or any value is not acceptable.
    """
    source = str(source)
    if not isinstance(text, str):
        raise ScenarioError(
            f"expected the text of a TOML file (a str), found {describe_value(text)}",
            source=source,
        )
    document = _parse_toml(text, source)
    return _assemble(_read_document(document, source), source, result_source=source)


def apply_changes(scenario: Scenario, changes: Mapping[str, Any]) -> Scenario:
    """Return a new scenario with some keys changed, re-validated as a whole.

    Parameters
    ----------
    scenario : Scenario
        The scenario to start from; it is not modified.
    changes : mapping
        ``{"motor.inductance": "3 mH", "load.torque": 0.02, ...}``: dotted keys (or nested
        tables, ``{"motor": {"inductance": "3 mH"}}``) with values as in a scenario file, i.e.
        SI numbers or unit strings. ``None`` resets a key whose default is automatic
        (``simulation.step``, ``simulation.record_interval``). Events are kept as they are
        (and set their keys at their times, over the changed initial values); in messages,
        ``events[i]`` counts ``scenario.events``, which are in time order.

    Returns
    -------
    Scenario
        A new scenario with the same ``source``.

    Raises
    ------
    ScenarioError
        Unknown key (with a suggestion), unacceptable value, or a scenario that is no longer
        consistent (an event now outside the run, a bus capacitor without source resistance...).
    """
    if not isinstance(scenario, Scenario):
        raise ScenarioError(f"expected a Scenario to change, found {describe_value(scenario)}")
    source = f"changes to {scenario.source}"
    if not isinstance(changes, Mapping):
        raise ScenarioError(
            "expected a mapping of dotted keys to values, e.g. {'motor.inductance': '3 mH'}, "
            f"found {describe_value(changes)}",
            source=source,
        )
    # The scenario's own values are checked again too: it may have been built in code.
    present = {t for t in KEYS if table_of(scenario, t) is not None}
    read = _Read(tables=present)
    mode = scenario.control.mode
    for name in _all_keys():
        table, _, key = name.rpartition(".")
        if table not in present:
            continue
        value = getattr(table_of(scenario, table), key)
        read.values[name] = _convert(name, _spec(name), value, key=name, source=source, mode=mode)
    read.events = [_recheck_event(i, ev, source) for i, ev in enumerate(scenario.events)]
    changed: dict[str, Any] = {}
    flat = list(_flatten(changes, where="", source=source))
    for name, value in flat:
        if name == "control.mode" and isinstance(value, str):
            mode = value
    for name, value in flat:
        spec = _spec(name)
        if spec is None and name == _EVENTS:
            raise ScenarioError(
                "expected a dotted key such as 'motor.inductance', found 'events'; events "
                "cannot be changed this way (write a scenario with the new [[events]])",
                source=source,
                key=name,
            )
        if spec is None:
            raise _unknown_key(name, source=source, key=name)
        changed[name] = _convert(name, spec, value, key=name, source=source, mode=mode)
        read.shown[name] = describe_value(value)
        read.tables.add(name.rpartition(".")[0])
    read.values.update(changed)
    # Keys count as written when changed now or when they differ from their default.
    read.given = set(changed) | {
        name for name, value in read.values.items() if value != _spec(name).default
    }
    if scenario.battery is not None and "supply.voltage" not in changed:
        read.values.pop("supply.voltage", None)  # follows the battery
        read.given.discard("supply.voltage")
    _release_derived_motor_keys(scenario, changed, read)
    return _assemble(read, source, result_source=scenario.source)


def _release_derived_motor_keys(
    scenario: Scenario, changed: Mapping[str, Any], read: _Read
) -> None:
    """Decide whether the model keys derived from catalogue data are derived again.

    - A change of a catalogue key, or of nothing in the motor's model: the keys that came from
      the catalogue are derived again from the (new) figures.
    - A change of a model key (``resistance``, ``torque_constant``, ``inertia``, either
      friction) and no catalogue key: the changed key takes its new value and the derived
      ones keep theirs, now as given values (changing R does not move the inertia that came
      from the mechanical time constant); the checks then show where the catalogue figures
      no longer agree.
    - A wound-field machine (``motor.kind`` not ``"permanent_magnet"``): its derived
      ``torque_constant`` is always derived again from the (changed) field and supply.
    """
    derived = [f"motor.{name}" for name, _ in getattr(scenario.motor, "derived", ())]
    if not derived:
        return
    if read.values.get("motor.kind", "permanent_magnet") != "permanent_magnet":
        # A wound-field machine's torque_constant follows its field, never a given value: it
        # is derived again whatever changed (a change of torque_constant itself is refused).
        for name in derived:
            if name not in changed:
                read.values.pop(name, None)
                read.given.discard(name)
        return
    catalogue = {f"motor.{k}" for k in datasheet.CATALOGUE_KEYS}
    model = {f"motor.{k}" for k in datasheet.MODEL_KEYS} - {"motor.inductance"}
    if any(n in catalogue for n in changed) or not any(n in model for n in changed):
        for name in derived:
            if name not in changed:
                read.values.pop(name, None)
                read.given.discard(name)


def _recheck_event(index: int, event: Event, source: str) -> _ReadEvent:
    """Check an :class:`Event` of an existing scenario the way a file's event is checked."""
    where = f"{_EVENTS}[{index}]"
    try:
        at = to_si(event.at, "s", noun="a time", example="0.5 s")
    except UnitError as err:
        raise ScenarioError(err.detail, source=source, key=f"{where}.at") from None
    changes = _read_event_changes(dict(event.changes), where=f"{where}.set", source=source)
    return _ReadEvent(
        index=index,
        at=at,
        at_shown=f"{at:g} s",
        changes=tuple((name, value) for name, value, _ in changes),
    )


# --------------------------------------------------------------------------------------------
# Stage 1: reading
# --------------------------------------------------------------------------------------------


@dataclass
class _ReadEvent:
    """One ``[[events]]`` table, converted to SI but not yet checked against the run."""

    index: int
    at: float
    at_shown: str
    changes: tuple[tuple[str, Any], ...]
    shown: dict[str, str] = field(default_factory=dict)


@dataclass
class _Read:
    """What stage 1 made of a document: SI values of the keys written, and how they looked."""

    tables: set[str] = field(default_factory=set)
    values: dict[str, Any] = field(default_factory=dict)
    shown: dict[str, str] = field(default_factory=dict)
    given: set[str] = field(default_factory=set)
    events: list[_ReadEvent] = field(default_factory=list)


def load_scenario_mapping(document: dict[str, Any], source: str) -> Scenario:
    """Validate a scenario given as an already parsed TOML document (e.g. a table inline in
    another file).

    Parameters
    ----------
    document : dict
        The tables of a scenario file, as ``tomllib`` returns them.
    source : str
        Where it came from, for messages (also the result's ``source``).
    """
    return _assemble(_read_document(document, source), source, result_source=source)


def parse_toml(text: str, source: str) -> dict[str, Any]:
    """``tomllib.loads`` with a decoding error turned into one :class:`ScenarioError` line
    that names ``source`` and the line."""
    return _parse_toml(text, source)


def convert_value(
    name: str, spec: KeySpec, value: Any, *, key: str, source: str, mode: Any = "voltage"
) -> Any:
    """The value of key ``name`` checked against its :class:`KeySpec` and converted to SI
    (``key`` is how messages name it; ``mode`` the control mode for controlled-quantity
    units)."""
    return _convert(name, spec, value, key=key, source=source, mode=mode)


def key_spec(name: str) -> KeySpec | None:
    """The :class:`KeySpec` of a dotted key (``"motor.resistance"``), or ``None``."""
    return _spec(name)


def unknown_key_error(
    name: str, *, source: str, key: str, candidates: list[str] | None = None
) -> ScenarioError:
    """The message for an unknown dotted key, naming the closest valid one."""
    return _unknown_key(name, source=source, key=key, candidates=candidates)


def _parse_toml(text: str, source: str) -> dict[str, Any]:
    """``tomllib.loads`` with its errors turned into messages that give the line."""
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        raise ScenarioError(_toml_message(str(err), text), source=source) from None
    except RecursionError:
        raise ScenarioError(
            "malformed TOML: expected arrays and tables nested a few levels deep, found "
            "nesting too deep to read",
            source=source,
        ) from None
    except ValueError as err:  # e.g. an integer longer than Python converts (4300 digits)
        raise ScenarioError(
            f"malformed TOML: expected numbers of ordinary length, found one that cannot be "
            f"read ({str(err).split(';')[0]})",
            source=source,
        ) from None


def _toml_message(message: str, text: str) -> str:
    """Rephrase a TOML decoding error as "malformed TOML at line N, column M: ..."."""
    match = re.search(r"\s*\(at line (\d+), column (\d+)\)\s*$", message)
    if match:
        what = message[: match.start()]
        line, column = int(match[1]), int(match[2])
        lines = text.split("\n")
        reads = ""
        if 1 <= line <= len(lines):
            reads = f"; the line reads {describe_value(lines[line - 1].strip())}"
        return f"malformed TOML at line {line}, column {column}: {_lower_first(what)}{reads}"
    match = re.search(r"\s*\(at end of document\)\s*$", message)
    if match:
        return f"malformed TOML at the end of the text: {_lower_first(message[: match.start()])}"
    return f"malformed TOML: {_lower_first(message)}"


def _lower_first(text: str) -> str:
    return text[:1].lower() + text[1:]


def _read_document(document: dict[str, Any], source: str) -> _Read:
    """Stage 1: check names and convert values, in file order."""
    read = _Read()
    control = document.get("control")
    mode = control.get("mode", "voltage") if isinstance(control, dict) else "voltage"
    for table, body in document.items():
        if table == _EVENTS:
            read.events = _read_events(body, source)
            continue
        if table not in KEYS:
            raise _unknown_top_level(table, body, source)
        _read_table(read, table, body, source, mode)
    return read


def _read_table(read: _Read, table: str, body: Any, source: str, mode: Any) -> None:
    """Read one table; sub-tables named in :data:`KEYS` (``[control.speed]``) recursively."""
    if not isinstance(body, dict):
        raise ScenarioError(
            f"expected a table [{table}], found {describe_value(body, with_kind=True)}",
            source=source,
            key=table,
        )
    read.tables.add(table)
    for key, value in body.items():
        name = f"{table}.{key}"
        spec = KEYS[table].get(key)
        if spec is None and key == "reference" and table in _LOOP_TABLES:
            _read_loop_reference(read, table, value, source, mode)
            continue
        if spec is None and name in KEYS:
            if name == "control.reference" and name in read.tables:
                raise ScenarioError(
                    "expected one reference, found both [control.reference] and a "
                    "reference under a loop ([control.<loop>.reference])",
                    source=source,
                    key=name,
                )
            _read_table(read, name, value, source, mode)
            continue
        if spec is None:
            raise _unknown_key(name, source=source, key=name)
        read.values[name] = _convert(name, spec, value, key=name, source=source, mode=mode)
        read.shown[name] = describe_value(value)
        read.given.add(name)


def _read_events(body: Any, source: str) -> list[_ReadEvent]:
    """Convert the ``[[events]]`` array; times are checked against the run in stage 2."""
    if not isinstance(body, list):
        raise ScenarioError(
            "expected an array of tables ([[events]] blocks with 'at' and 'set'), found "
            f"{describe_value(body, with_kind=True)}",
            source=source,
            key=_EVENTS,
        )
    events = []
    for index, raw in enumerate(body):
        where = f"{_EVENTS}[{index}]"
        if not isinstance(raw, dict):
            raise ScenarioError(
                "expected a table with 'at' and 'set' (an [[events]] block), found "
                f"{describe_value(raw, with_kind=True)}",
                source=source,
                key=where,
            )
        for name in raw:
            if name not in _EVENT_FIELDS:
                close = difflib.get_close_matches(name, _EVENT_FIELDS, n=1, cutoff=0.5)
                hint = f"; did you mean '{close[0]}'?" if close else ""
                raise ScenarioError(
                    f"unknown key '{where}.{name}'{hint} (an event has 'at' and 'set')",
                    source=source,
                    key=f"{where}.{name}",
                )
        if "at" not in raw:
            raise ScenarioError(
                "missing key: expected the time of the event, e.g. at = \"0.5 s\", found no 'at'",
                source=source,
                key=f"{where}.at",
            )
        try:
            at = to_si(raw["at"], "s", noun="a time", example="0.5 s")
        except UnitError as err:
            raise ScenarioError(err.detail, source=source, key=f"{where}.at") from None
        if "set" not in raw:
            raise ScenarioError(
                "missing key: expected the keys the event changes, e.g. "
                'set = { "load.torque" = "0.02 N*m" }, found no \'set\'',
                source=source,
                key=f"{where}.set",
            )
        changes = _read_event_changes(raw["set"], where=f"{where}.set", source=source)
        events.append(
            _ReadEvent(
                index=index,
                at=at,
                at_shown=describe_value(raw["at"]),
                changes=tuple((name, value) for name, value, _ in changes),
                shown={name: shown for name, _, shown in changes},
            )
        )
    return events


def _read_event_changes(body: Any, *, where: str, source: str) -> list[tuple[str, Any, str]]:
    """``(dotted key, SI value, as written)`` for each change of one event."""
    if not isinstance(body, dict):
        raise ScenarioError(
            'expected a table of changes, e.g. set = { "load.torque" = "0.02 N*m" }, '
            f"found {describe_value(body, with_kind=True)}",
            source=source,
            key=where,
        )
    changes = []
    for name, value in _flatten(body, where=f"{where}.", source=source):
        key = f"{where}.{name}"
        spec = _spec(name)
        if spec is None:
            raise _unknown_key(name, source=source, key=key, candidates=changeable_keys())
        if not spec.changeable:
            raise ScenarioError(
                f"expected a key an event may change ({', '.join(changeable_keys())}), found "
                f"'{name}', which is fixed for the whole run",
                source=source,
                key=key,
            )
        converted = _convert(name, spec, value, key=key, source=source)
        changes.append((name, converted, describe_value(value)))
    if not changes:
        raise ScenarioError(
            'expected at least one change, e.g. set = { "load.torque" = "0.02 N*m" }, '
            "found an empty table",
            source=source,
            key=where,
        )
    return changes


def _flatten(body: Mapping[Any, Any], *, where: str, source: str) -> Iterator[tuple[str, Any]]:
    """Yield ``(dotted key, value)`` from ``{"load.torque": v}`` or ``{"load": {"torque": v}}``.

    Only a table name is descended into, so the result is at most ``table.key`` deep.
    """
    seen: set[str] = set()
    for first, value in body.items():
        if not isinstance(first, str):
            raise ScenarioError(
                f"expected a dotted key such as 'motor.inductance', found "
                f"{describe_value(first, with_kind=True)}",
                source=source,
                key=where.rstrip("."),
            )
        pairs = list(_descend(first, value))
        for name, item in pairs:
            if name in seen:
                raise ScenarioError(
                    f"expected each key once, found '{name}' twice",
                    source=source,
                    key=f"{where}{name}",
                )
            seen.add(name)
            yield name, item


_LOOP_TABLES = ("control.current", "control.speed", "control.position")
_OUTERMOST = {"current": "current", "speed": "speed", "position": "position"}


def _read_loop_reference(read: _Read, table: str, body: Any, source: str, mode: Any) -> None:
    """``[control.<loop>.reference]``: the reference written under the loop that follows it.

    Only the outermost loop of the mode follows a reference (the inner loops follow the loop
    around them), so this is another place to write ``[control.reference]``.
    """
    loop = table.rpartition(".")[2]
    name = f"{table}.reference"
    if _OUTERMOST.get(str(mode)) != loop:
        raise ScenarioError(
            f"expected the reference under the outermost loop of control mode "
            f"{describe_value(mode)} ([control.reference] or [control.{mode}.reference]; the "
            f"{loop} loop follows the loop around it), found [{name}]",
            source=source,
            key=name,
        )
    if "control.reference" in read.tables:
        raise ScenarioError(
            f"expected one reference, found both [control.reference] and [{name}]",
            source=source,
            key=name,
        )
    _read_table(read, "control.reference", body, source, mode)


def _descend(name: str, value: Any) -> Iterator[tuple[str, Any]]:
    """``(dotted key, value)`` pairs of a table given as a nested mapping."""
    if name in KEYS and isinstance(value, Mapping):
        for k, v in value.items():
            yield from _descend(f"{name}.{k}", v)
    else:
        yield name, value


def _convert(
    name: str, spec: KeySpec, value: Any, *, key: str, source: str, mode: Any = "voltage"
) -> Any:
    """Check the value of key ``name`` against its spec; return it in SI (or bool / str).

    ``key`` is how messages name the place (``events[1].set.load.torque``); ``mode`` (the
    control mode) gives the unit of reference values.
    """
    if spec.kind == "quantity":
        if value is None and spec.default is None:
            return None  # only reachable from Python: "let dcsim choose"
        unit = spec.unit
        if unit is not None and unit.startswith(CONTROLLED):
            if mode not in CONTROLLED_UNITS:
                raise ScenarioError(
                    "expected a [control.reference] only in a closed-loop control mode "
                    f"(current, speed or position), found control.mode = {describe_value(mode)}",
                    source=source,
                    key=key,
                )
            unit = CONTROLLED_UNITS[mode] + unit[len(CONTROLLED) :]
        try:
            si = to_si(value, unit, noun=spec.noun, example=_example(spec, mode))
        except UnitError as err:
            raise ScenarioError(err.detail, source=source, key=key) from None
        return _check_sign(spec, si, value, key=key, source=source)
    if spec.kind == "bool":
        if isinstance(value, bool):
            return value
        raise ScenarioError(
            f"expected true or false (e.g. {key.rpartition('.')[2]} = {spec.example}), found "
            f"{describe_value(value, with_kind=True)}",
            source=source,
            key=key,
        )
    if spec.kind == "choice":
        if value is None and spec.default is None:
            return None  # an optional choice left out (only reachable from Python)
        accepted = ", ".join(f"'{c}'" for c in spec.choices)
        if not isinstance(value, str):
            raise ScenarioError(
                f"expected {spec.noun}, one of {accepted}, found "
                f"{describe_value(value, with_kind=True)}",
                source=source,
                key=key,
            )
        if value in spec.choices:
            return value
        if value in _PLANNED_CHOICES.get(name, ()):
            raise ScenarioError(
                f"expected {spec.noun}, one of {accepted}, found {describe_value(value)}, which "
                "is not available yet in this version of dcsim",
                source=source,
                key=key,
            )
        close = difflib.get_close_matches(value, spec.choices, n=1)
        hint = f"; did you mean '{close[0]}'?" if close else ""
        raise ScenarioError(
            f"expected {spec.noun}, one of {accepted}, found {describe_value(value)}{hint}",
            source=source,
            key=key,
        )
    if spec.kind == "pairs":
        return _convert_pairs(spec, value, key=key, source=source)
    if spec.kind == "text":
        if value is None and spec.default is None:
            return None
        if isinstance(value, str):
            return value
        raise ScenarioError(
            f"expected {spec.noun} (a string, e.g. {spec.example}), found "
            f"{describe_value(value, with_kind=True)}",
            source=source,
            key=key,
        )
    raise TypeError(f"schema error: key {key!r} has unknown kind {spec.kind!r}")


def _convert_pairs(spec: KeySpec, value: Any, *, key: str, source: str) -> Any:
    """A list of ``[a, b]`` pairs, each member converted to SI; returned as a tuple of tuples."""
    if value is None:
        return None
    if not isinstance(value, list | tuple) or len(value) < 2:
        raise ScenarioError(
            f"expected {spec.noun} of at least two points, e.g. {spec.example}, found "
            f"{describe_value(value, with_kind=True)}",
            source=source,
            key=key,
        )
    out = []
    for n, pair in enumerate(value):
        if not isinstance(pair, list | tuple) or len(pair) != 2:
            raise ScenarioError(
                f"expected point {n} of {spec.noun} as a pair [a, b], e.g. {spec.example}, "
                f"found {describe_value(pair, with_kind=True)}",
                source=source,
                key=key,
            )
        members = []
        for unit, item in ((spec.unit, pair[0]), (spec.unit2, pair[1])):
            noun = "a number" if not unit else f"a quantity in {unit}"
            try:
                members.append(to_si(item, unit or "", noun=noun, example=spec.example))
            except UnitError as err:
                raise ScenarioError(f"point {n}: {err.detail}", source=source, key=key) from None
        out.append((members[0] + 0.0, members[1] + 0.0))
    return tuple(out)


def _check_sign(spec: KeySpec, si: float, value: Any, *, key: str, source: str) -> float:
    """Apply the spec's constraint (``positive``, ``nonnegative`` or ``any``) [SI]."""
    found = describe_value(value)
    if isinstance(value, str):
        found += f" = {si:g} {spec.unit}"
    if spec.constraint == "positive" and not si > 0:
        raise ScenarioError(
            f"expected {spec.noun} greater than 0 (e.g. '{spec.example}'), found {found}",
            source=source,
            key=key,
        )
    if spec.constraint == "nonnegative" and si < 0:
        raise ScenarioError(
            f"expected {spec.noun} of 0 or more (e.g. '{spec.example}'), found {found}",
            source=source,
            key=key,
        )
    return si + 0.0  # a written "-0" is stored as 0.0


# --------------------------------------------------------------------------------------------
# Names and suggestions
# --------------------------------------------------------------------------------------------


def _example(spec: KeySpec, mode: Any) -> str:
    """The spec's example, in the controlled quantity's unit for reference values."""
    if spec.unit is not None and spec.unit.startswith(CONTROLLED):
        per_s = spec.unit != CONTROLLED
        return {
            "current": "2 A/s" if per_s else "2 A",
            "speed": "2000 rad/s^2" if per_s else "200 rad/s",
            "position": "50 rad/s" if per_s else "10 rad",
        }.get(str(mode), spec.example)
    return spec.example


def _all_keys() -> list[str]:
    return [f"{table}.{key}" for table, keys in KEYS.items() for key in keys]


def _spec(name: str) -> KeySpec | None:
    table, _, key = name.rpartition(".")
    return KEYS.get(table, {}).get(key)


def _unknown_top_level(name: str, body: Any, source: str) -> ScenarioError:
    """Message for a top-level name that is neither a table nor ``events``."""
    if name in _PLANNED_KEYS:
        return ScenarioError(
            f"unknown table [{name}] ({_PLANNED_KEYS[name]}): not available yet in this version "
            "of dcsim",
            source=source,
            key=name,
        )
    if _spec(name) is not None:
        table, _, key = name.rpartition(".")
        return ScenarioError(
            f"unknown key '{name}' at the top level; write {key} inside [{table}], or "
            f"{name} without quotes",
            source=source,
            key=name,
        )
    as_key = [f"{t}.{name}" for t, keys in KEYS.items() if name in keys]
    if as_key:
        return ScenarioError(
            f"unknown key '{name}' at the top level; did you mean '{as_key[0]}' (key {name} "
            f"inside [{as_key[0].rpartition('.')[0]}])?",
            source=source,
            key=name,
        )
    names = [*KEYS, _EVENTS]
    close = difflib.get_close_matches(name, names, n=1)
    if isinstance(body, dict) or close:
        what = "table" if isinstance(body, dict) else "key"
        hint = f"did you mean '{close[0]}'?" if close else "the tables are " + ", ".join(names)
        return ScenarioError(f"unknown {what} '{name}'; {hint}", source=source, key=name)
    return ScenarioError(
        f"unknown key '{name}' at the top level; the top level holds only the tables "
        f"{', '.join(KEYS)} and [[events]]",
        source=source,
        key=name,
    )


def _unknown_key(
    name: str, *, source: str, key: str, candidates: list[str] | None = None
) -> ScenarioError:
    """Message for an unknown dotted key, with the closest valid one if there is one."""
    if name in _PLANNED_KEYS:
        return ScenarioError(
            f"unknown key '{name}' ({_PLANNED_KEYS[name]}): not available yet in this version "
            "of dcsim",
            source=source,
            key=key,
        )
    restricted = candidates is not None  # e.g. the keys events may change: list them all
    candidates = candidates if candidates is not None else _all_keys()
    table, _, short = name.rpartition(".")
    same_table = [c for c in candidates if c.rpartition(".")[0] == table]
    others = [c for c in candidates if c not in same_table]
    if table in KEYS:
        # A misspelt key of this table, else the same key written in the wrong table.
        by_short = {c.rpartition(".")[2]: c for c in reversed(others)}
        by_short.update({c.rpartition(".")[2]: c for c in same_table})
        close = difflib.get_close_matches(short, [c.rpartition(".")[2] for c in same_table])
        close = close or difflib.get_close_matches(short, list(by_short), cutoff=0.8)
        suggestion = by_short[close[0]] if close else ""
    else:  # a misspelt table name: compare whole dotted names
        close = difflib.get_close_matches(name, candidates, n=1)
        suggestion = close[0] if close else ""
    if suggestion:
        return ScenarioError(
            f"unknown key '{name}'; did you mean '{suggestion}'?", source=source, key=key
        )
    listed = candidates if restricted or not same_table else same_table
    return ScenarioError(
        f"unknown key '{name}'; expected one of {', '.join(listed)}",
        source=source,
        key=key,
    )


# --------------------------------------------------------------------------------------------
# Stage 2: assembling
# --------------------------------------------------------------------------------------------

_Show = Callable[[str], str]
_Problem = tuple[str, str] | None  # (dotted key, message) of a broken rule
_Rule = Callable[[dict[str, Any], set[str], _Show], _Problem]


def _rule_bus_needs_resistance(state: dict[str, Any], given: set[str], show: _Show) -> _Problem:
    """A bus capacitor is charged by the source through the source resistance."""
    damped = state.get("supply.inductance", 0.0) > 0 or state.get("battery.resistance", 0.0) > 0
    if state["supply.capacitance"] > 0 and not state["supply.resistance"] > 0 and not damped:
        return (
            "supply.resistance",
            "expected a resistance greater than 0 when supply.capacitance is "
            f"{show('supply.capacitance')} (the source charges the bus capacitor through it), "
            f"found {show('supply.resistance')}",
        )
    return None


def _rule_intervals_within_run(state: dict[str, Any], given: set[str], show: _Show) -> _Problem:
    """Recording interval and plant step cannot be longer than the run."""
    for name in ("simulation.record_interval", "simulation.step"):
        value = state[name]
        if value is not None and value > state["simulation.duration"]:
            return (
                name,
                f"expected a time no longer than simulation.duration "
                f"({show('simulation.duration')}), found {show(name)}",
            )
    return None


def _rule_voltage_only_open_loop(state: dict[str, Any], given: set[str], show: _Show) -> _Problem:
    """``control.voltage`` is the open-loop command; closed loops set the voltage themselves."""
    mode = state["control.mode"]
    if mode != "voltage" and "control.voltage" in given:
        return (
            "control.voltage",
            f"expected no control.voltage in control mode '{mode}' (it is used only in mode "
            f"'voltage'; the loops set the armature voltage), found {show('control.voltage')}",
        )
    return None


def _rule_static_above_coulomb(state: dict[str, Any], given: set[str], show: _Show) -> _Problem:
    """The breakaway (static) friction cannot be below the sliding (Coulomb) level."""
    ts = state.get("motor.static_friction")
    if ts is not None and ts < state["motor.coulomb_friction"]:
        if "motor.coulomb_friction" in given and "motor.static_friction" not in given:
            return (  # an event raised the Coulomb level above the breakaway torque
                "motor.coulomb_friction",
                "expected a Coulomb friction no greater than motor.static_friction "
                f"({show('motor.static_friction')}), found {show('motor.coulomb_friction')}",
            )
        return (
            "motor.static_friction",
            "expected a breakaway torque at least motor.coulomb_friction "
            f"({show('motor.coulomb_friction')}; leave static_friction out for no static "
            f"excess), found {show('motor.static_friction')}",
        )
    return None


def _rule_design_checks(state: dict[str, Any], given: set[str], show: _Show) -> _Problem:
    """The duty cycle, the thermal model and the check limits must make sense together."""
    cycle = state.get("simulation.cycle_time")
    if cycle is not None and cycle < state["simulation.duration"]:
        return (
            "simulation.cycle_time",
            f"expected a cycle time at least as long as the run (simulation.duration "
            f"{show('simulation.duration')}: the run is one cycle), found "
            f"{show('simulation.cycle_time')}",
        )
    if state.get("checks.fuse_margin", 0.0) > 1.0:
        return (
            "checks.fuse_margin",
            "expected a fraction of melting up to 1 (1 = the element melts), found "
            f"{show('checks.fuse_margin')}",
        )
    lo, hi = state.get("checks.supply_min"), state.get("checks.supply_max")
    if lo is not None and hi is not None and not lo < hi:
        return (
            "checks.supply_max",
            f"expected a supply corner above checks.supply_min ({show('checks.supply_min')}), "
            f"found {show('checks.supply_max')}",
        )
    if "thermal.coupled" in state:
        one = ("thermal.resistance", "thermal.time_constant")
        two = (
            "thermal.winding_to_housing",
            "thermal.housing_to_ambient",
            "thermal.winding_capacity",
            "thermal.housing_capacity",
        )
        has_one = [k for k in one if state[k] is not None]
        has_two = [k for k in two if state[k] is not None]
        if has_one and has_two:
            return (
                has_two[0],
                "expected either the one-node model (thermal.resistance, thermal.time_constant) "
                f"or the two-node model ({', '.join(two)}), found both",
            )
        missing = [k for k in (two if has_two else one) if state[k] is None]
        if missing:
            return (
                missing[0],
                f"missing key: expected {missing[0].split('.')[1]} in [thermal] (the "
                f"{'two' if has_two else 'one'}-node model needs "
                f"{', '.join(k.split('.')[1] for k in (two if has_two else one))}), found none",
            )
        magnets = state["thermal.magnet_material"] is not None
        if magnets and state["thermal.magnet_coefficient"] is not None:
            return (
                "thermal.magnet_coefficient",
                "expected thermal.magnet_material or thermal.magnet_coefficient, found both",
            )
        magnets = magnets or state["thermal.magnet_coefficient"] is not None
        if magnets and not has_two:
            return (
                "thermal.magnet_material"
                if state["thermal.magnet_material"] is not None
                else "thermal.magnet_coefficient",
                "expected the two-node model (winding_to_housing, housing_to_ambient, "
                "winding_capacity, housing_capacity) for the magnets' temperature (they sit at "
                "the housing node's), found the one-node model",
            )
        t0 = state.get("thermal.initial_temperature")
        for name in ("thermal.ambient", "thermal.reference_temperature"):
            if state[name] <= 0.0:
                return (name, f"expected a temperature above absolute zero, found {show(name)}")
        if t0 is not None and cycle is not None:
            return (
                "thermal.initial_temperature",
                "expected no initial winding temperature with simulation.cycle_time (a repeated "
                "duty cycle starts each cycle at its periodic steady state), found "
                f"{show('thermal.initial_temperature')}",
            )
    return None


def _rule_gear_and_hoist(state: dict[str, Any], given: set[str], show: _Show) -> _Problem:
    """Gear efficiencies are fractions; a hoist is the load torque, so not both."""
    if "gear.ratio" in state:
        for name, low in (("gear.forward_efficiency", "0 <"), ("gear.back_efficiency", "0 <=")):
            if state[name] > 1.0:
                return (
                    name,
                    f"expected an efficiency with {low} eta <= 1 (a fraction of the power "
                    f'passed on; 0.7 or "70 %"), found {show(name)}',
                )
    if "hoist.mass" in state and "load.torque" in given and state["load.torque"] != 0.0:
        return (
            "load.torque",
            "expected no load.torque with a [hoist] table (the hanging mass sets the load "
            f"torque, m g r), found {show('load.torque')}",
        )
    return None


_RULES: tuple[_Rule, ...] = (
    _rule_gear_and_hoist,
    _rule_design_checks,
    _rule_intervals_within_run,
    _rule_bus_needs_resistance,
    _rule_voltage_only_open_loop,
    _rule_static_above_coulomb,
)
"""Rules tying keys together, checked on the initial values and after each event time."""


def _assemble(read: _Read, source: str, *, result_source: str) -> Scenario:
    """Stage 2: defaults, required keys, rules, events; then the frozen scenario."""
    values = dict(read.values)
    for table in REQUIRED_TABLES:
        if table not in read.tables:
            raise _missing_table(table, source)
    if "battery" in read.tables:
        _battery_sets_supply_voltage(values, read, source)
    if values.get("motor.kind", "permanent_magnet") != "permanent_magnet":
        for key, spec in KEYS["motor"].items():
            values.setdefault(f"motor.{key}", None if spec.default is REQUIRED else spec.default)
        motor = machines.wound_field_derivation(values, read.given, source)
    else:
        motor = _derive_motor(values, read.given, source)
    for table, specs in KEYS.items():
        if table in OPTIONAL_TABLES and table not in read.tables:
            continue
        for key, spec in specs.items():
            name = f"{table}.{key}"
            if name in values:
                continue
            if spec.default is REQUIRED:
                if table not in read.tables:
                    raise _missing_table(table, source)
                raise ScenarioError(
                    f'missing key: expected {spec.noun}, e.g. {key} = "{spec.example}" in '
                    f"[{table}], found no {key}",
                    source=source,
                    key=name,
                )
            values[name] = spec.default

    def show(name: str) -> str:
        if name in read.shown:
            return read.shown[name]
        return _show_si(name, values[name], given=name in read.given)

    present = {t for t in OPTIONAL_TABLES if t in read.tables}
    problem = _power_stage_problem(values, present, read.given, show)
    problem = problem or machines.machine_problem(values, present, read.given, show)
    problem = problem or _first_problem(values, read.given, show)
    problem = problem or _control_problem(values, present, read.given, show)
    if problem is not None:
        raise ScenarioError(problem[1], source=source, key=problem[0])

    duration = values["simulation.duration"]
    for event in read.events:
        if not 0 <= event.at <= duration:
            raise ScenarioError(
                f"event outside the run: expected a time from 0 s to simulation.duration "
                f"({show('simulation.duration')}), found {event.at_shown}",
                source=source,
                key=f"{_EVENTS}[{event.index}].at",
            )
        for name, _ in event.changes:
            magnets = "thermal" in present and (
                values["thermal.magnet_material"] is not None
                or values["thermal.magnet_coefficient"] is not None
            )
            if name == "motor.torque_constant" and magnets and values["thermal.coupled"]:
                raise ScenarioError(
                    "expected no event on motor.torque_constant when [thermal] has magnets and "
                    "coupled = true (the magnets' temperature sets it), found one at "
                    f"{event.at_shown}",
                    source=source,
                    key=f"{_EVENTS}[{event.index}].set.motor.torque_constant",
                )
            if name == "motor.resistance" and "thermal" in present and values["thermal.coupled"]:
                raise ScenarioError(
                    "expected no event on motor.resistance when [thermal] coupled = true (the "
                    "winding temperature sets the resistance), found one at "
                    f"{event.at_shown}; set thermal.coupled = false to keep the events",
                    source=source,
                    key=f"{_EVENTS}[{event.index}].set.motor.resistance",
                )
            if name == "load.torque" and "hoist" in present:
                raise ScenarioError(
                    "expected no event on load.torque when the scenario has a [hoist] table "
                    f"(the hanging mass sets the load torque), found one at {event.at_shown}",
                    source=source,
                    key=f"{_EVENTS}[{event.index}].set.load.torque",
                )
            if name == "supply.voltage" and present & {"battery", "supply_profile"}:
                part = "battery" if "battery" in present else "supply_profile"
                raise ScenarioError(
                    f"expected no event on supply.voltage when the scenario has a [{part}] "
                    f"table (it sets the source voltage), found one at {event.at_shown}",
                    source=source,
                    key=f"{_EVENTS}[{event.index}].set.supply.voltage",
                )
    ordered = sorted(read.events, key=lambda e: e.at)  # stable: file order at equal times
    _check_events(values, ordered, source)

    tables: dict[str, Any] = {}
    for table, cls in _TABLE_TYPES.items():
        if table in OPTIONAL_TABLES and table not in present:
            tables[table] = None
            continue
        tables[table] = cls(**{key: values[f"{table}.{key}"] for key in KEYS[table]})
    import dataclasses

    tables["motor"] = dataclasses.replace(
        tables["motor"], derived=motor.derived, checks=motor.checks
    )
    _resolve_files(tables, source)

    for table in sorted((t for t in tables if "." in t), key=lambda t: -t.count(".")):
        parent, _, field_name = table.rpartition(".")
        tables[parent] = dataclasses.replace(tables[parent], **{field_name: tables.pop(table)})
    return Scenario(
        **tables,
        events=tuple(Event(at=e.at, changes=e.changes) for e in ordered),
        source=result_source,
    )


def _derive_motor(values: dict[str, Any], given: set[str], source: str) -> datasheet.Derivation:
    """Fill the model keys of ``[motor]`` that catalogue figures give (in place).

    A model key counts as given when the file (or ``with_changes``) wrote it with a value;
    the friction keys, which default to 0, only when written.
    """
    catalogue = {k: values.get(f"motor.{k}") for k in datasheet.CATALOGUE_KEYS}
    model = {
        k: values.get(f"motor.{k}") if f"motor.{k}" in given else None for k in datasheet.MODEL_KEYS
    }
    result = datasheet.derive_motor(catalogue, model, source=source)
    for name, value in result.values.items():
        values[f"motor.{name}"] = value
    return result


def _battery_sets_supply_voltage(values: dict[str, Any], read: _Read, source: str) -> None:
    """With a [battery], the source voltage at t = 0 is its open-circuit voltage."""
    if "supply.voltage" in values and "supply.voltage" in read.given:
        raise ScenarioError(
            "expected no supply.voltage with a [battery] table (the battery's open-circuit "
            f"voltage is the source voltage), found {read.shown.get('supply.voltage', '')}",
            source=source,
            key="supply.voltage",
        )
    table = values.get("battery.open_circuit_voltage")
    if table is None:
        return  # reported as a missing key below
    _check_ocv_table(table, source)
    soc = values.get("battery.initial_state_of_charge", 1.0)
    if not 0.0 <= soc <= 1.0:
        raise ScenarioError(
            f"expected a state of charge from 0 to 1, found {soc:g}",
            source=source,
            key="battery.initial_state_of_charge",
        )
    values["supply.voltage"] = Battery(open_circuit_voltage=table, capacity=1.0).ocv_at(soc)


def _check_ocv_table(table: tuple[tuple[float, float], ...], source: str) -> None:
    key = "battery.open_circuit_voltage"
    for n, (soc, volts) in enumerate(table):
        if not 0.0 <= soc <= 1.0:
            raise ScenarioError(
                f"expected states of charge from 0 to 1, found {soc:g} at point {n}",
                source=source,
                key=key,
            )
        if not volts > 0.0:
            raise ScenarioError(
                f"expected open-circuit voltages above 0 V, found {volts:g} V at point {n}",
                source=source,
                key=key,
            )
        if n > 0 and not soc > table[n - 1][0]:
            raise ScenarioError(
                f"expected the state of charge to rise from point to point, found {soc:g} "
                f"after {table[n - 1][0]:g} at point {n}",
                source=source,
                key=key,
            )


def _power_stage_problem(
    state: dict[str, Any], present: set[str], given: set[str], show: _Show
) -> _Problem:
    """Rules of the power-stage parts (checked once, on the initial values)."""
    model = state["bridge.model"]
    if model == "ideal":
        extra = [f"[{t}]" for t in POWER_STAGE_TABLES if t in present]
        extra += [
            k
            for k in ("supply.inductance", "supply.esr", "supply.initial_bus_voltage")
            if state[k] not in (None, 0.0)
        ]
        extra += [f"bridge.{k}" for k in KEYS["bridge"] if k != "model" and f"bridge.{k}" in given]
        if extra:
            key = extra[0].strip("[]")
            return (
                key,
                f"expected bridge.model = 'averaged' or 'switching' for {', '.join(extra)} "
                "(the ideal bridge has no PWM, diodes or bus circuit to simulate them), "
                f"found bridge.model {show('bridge.model')}",
            )
        return None
    if not state["supply.capacitance"] > 0.0:
        return (
            "supply.capacitance",
            f"expected a bus capacitance greater than 0 with bridge.model '{model}' (every PWM "
            f"bridge needs a bus capacitor), found {show('supply.capacitance')}",
        )
    period = 1.0 / state["bridge.frequency"]
    td = state["bridge.dead_time"]
    if 2.0 * td >= period:
        return (
            "bridge.dead_time",
            f"expected a dead time shorter than half the PWM period ({period / 2:.3g} s), "
            f"found {show('bridge.dead_time')}",
        )
    if state["bridge.min_pulse"] * 2.0 >= period:
        return (
            "bridge.min_pulse",
            f"expected a minimum pulse shorter than half the PWM period ({period / 2:.3g} s), "
            f"found {show('bridge.min_pulse')}",
        )
    counts = state["bridge.duty_counts"]
    if counts != round(counts):
        return (
            "bridge.duty_counts",
            f"expected a whole number of timer counts, found {show('bridge.duty_counts')}",
        )
    timed = [f"bridge.{k}" for k in ("rise_time", "fall_time") if f"bridge.{k}" in given]
    if timed:
        energy = [
            f"bridge.{k}"
            for k in ("switching_energy", "switching_energy_voltage", "switching_energy_current")
            if f"bridge.{k}" in given
        ]
        if energy:
            return (
                timed[0],
                f"expected either the switching energy or the transition times (they give the "
                f"same loss two ways), found both {', '.join(energy)} and {', '.join(timed)}",
            )
        if model != "switching":
            return (
                timed[0],
                f"expected bridge.model = 'switching' for {', '.join(timed)} (the averaged "
                f"model has no transitions to time), found bridge.model {show('bridge.model')}",
            )
        if not state["bridge.rise_time"] + state["bridge.fall_time"] < period / 2:
            return (
                timed[-1],
                f"expected rise_time + fall_time shorter than half the PWM period "
                f"({period / 2:.3g} s), found {show('bridge.rise_time')} + "
                f"{show('bridge.fall_time')}",
            )
    if state["bridge.peak_current_limit"] > 0.0 and model != "switching":
        return (
            "bridge.peak_current_limit",
            "expected bridge.model = 'switching' for a cycle-by-cycle current limit (the "
            "averaged model has no pulses to end), found bridge.model "
            f"{show('bridge.model')}",
        )
    problem = _driver_problem(state, given, show)
    if problem is not None:
        return problem
    if "brake" in present and not state["brake.off_voltage"] < state["brake.on_voltage"]:
        return (
            "brake.off_voltage",
            f"expected a switch-off voltage below brake.on_voltage ({show('brake.on_voltage')}"
            f"), found {show('brake.off_voltage')}",
        )
    if "protection" in present:
        ov, uv = state["protection.over_voltage"], state["protection.under_voltage"]
        if ov == 0.0 and uv == 0.0 and state["protection.over_current"] == 0.0:
            return (
                "protection.over_voltage",
                "expected over_voltage, under_voltage or over_current in [protection], found "
                "none of them",
            )
        if ov > 0.0 and uv > 0.0 and not uv < ov:
            return (
                "protection.under_voltage",
                f"expected an under-voltage level below protection.over_voltage "
                f"({show('protection.over_voltage')}), found {show('protection.under_voltage')}",
            )
    if "precharge" in present:
        if state["precharge.bypass_time"] is None and state["precharge.bypass_voltage"] is None:
            return (
                "precharge.bypass_time",
                "expected bypass_time or bypass_voltage (or both) in [precharge], found neither",
            )
    if "supply_profile" in present:
        given_forms = [
            k for k in ("standard", "points", "file") if state[f"supply_profile.{k}"] is not None
        ]
        if len(given_forms) != 1:
            return (
                "supply_profile",
                "expected exactly one of standard, points or file in [supply_profile], found "
                + (", ".join(given_forms) if given_forms else "none"),
            )
        if "battery" in present:
            return (
                "supply_profile",
                "expected either a [battery] or a [supply_profile], found both (a battery's "
                "voltage follows its state of charge)",
            )
    if "battery" in present and state["battery.initial_state_of_charge"] > 1.0:
        return (
            "battery.initial_state_of_charge",
            f"expected a state of charge from 0 to 1, found "
            f"{show('battery.initial_state_of_charge')}",
        )
    if "battery" in present:
        return _disconnect_problem(state, show)
    return None


def _disconnect_problem(state: dict[str, Any], show: _Show) -> _Problem:
    """Rules of the battery-management disconnect's keys."""
    opening = [
        k
        for k in ("max_charge_current", "max_discharge_current", "full_voltage")
        if state[f"battery.{k}"] is not None
    ]
    reclosing = [
        k for k in ("reclose_voltage", "reclose_time") if state[f"battery.{k}"] is not None
    ]
    if reclosing and not opening:
        return (
            f"battery.{reclosing[0]}",
            "expected max_charge_current, max_discharge_current or full_voltage in [battery] "
            f"for a disconnect to reclose, found battery.{reclosing[0]} alone",
        )
    full, reclose = state["battery.full_voltage"], state["battery.reclose_voltage"]
    if full is not None and reclose is not None and not reclose < full:
        return (
            "battery.reclose_voltage",
            f"expected a reclose voltage below battery.full_voltage ({show('battery.full_voltage')}"
            f"), found {show('battery.reclose_voltage')}",
        )
    if opening and state["supply.inductance"] > 0.0:
        return (
            "supply.inductance",
            "expected supply.inductance = 0 with a battery disconnect (opening the line under "
            f"an inductor's current is not modelled), found {show('supply.inductance')}",
        )
    return None


def _driver_problem(state: dict[str, Any], given: set[str], show: _Show) -> _Problem:
    """Rules of the decay modes, the current-sense comparator and its regulation."""
    model = state["bridge.model"]
    decay = state["bridge.decay"]
    if decay is not None:
        if model != "switching":
            return (
                "bridge.decay",
                "expected bridge.model = 'switching' for a decay mode (the decay happens "
                f"within each PWM period), found bridge.model {show('bridge.model')}",
            )
        if "bridge.pwm" in given:
            return (
                "bridge.pwm",
                "expected either bridge.pwm or bridge.decay (a decay mode is its own PWM "
                f"scheme: one diagonal drives, the off-time decays), found both: "
                f"bridge.pwm {show('bridge.pwm')}, bridge.decay {show('bridge.decay')}",
            )
    frac = state["bridge.fast_decay_fraction"]
    if not 0.0 <= frac <= 1.0:
        return (
            "bridge.fast_decay_fraction",
            f"expected a fraction from 0 to 1, found {show('bridge.fast_decay_fraction')}",
        )
    for key in ("bridge.slow_decay", "bridge.fast_decay", "bridge.fast_decay_fraction"):
        if key in given and decay is None:
            return (
                key,
                f"expected bridge.decay ('slow', 'fast' or 'mixed') with {key}, found no "
                "bridge.decay",
            )
    vth, rs = state["bridge.sense_threshold"], state["bridge.sense_resistance"]
    if vth > 0.0 and not rs > 0.0:
        return (
            "bridge.sense_resistance",
            "expected a sense resistance greater than 0 with bridge.sense_threshold (the trip "
            f"current is threshold / resistance), found {show('bridge.sense_resistance')}",
        )
    if vth > 0.0 and state["bridge.peak_current_limit"] > 0.0:
        return (
            "bridge.sense_threshold",
            "expected either bridge.peak_current_limit or bridge.sense_threshold (both set "
            f"the trip current), found both: {show('bridge.peak_current_limit')} and "
            f"{show('bridge.sense_threshold')}",
        )
    if "bridge.sense_location" in given and not rs > 0.0:
        if state["protection.over_current"] == 0.0 and vth == 0.0:
            return (
                "bridge.sense_location",
                "expected bridge.sense_resistance (or a comparator that uses the sensed "
                "current) with bridge.sense_location, found neither",
            )
    trip = vth / rs if vth > 0.0 else state["bridge.peak_current_limit"]
    if vth > 0.0 and model != "switching":
        return (
            "bridge.sense_threshold",
            "expected bridge.model = 'switching' for the current comparator (the averaged "
            f"model has no pulses to end), found bridge.model {show('bridge.model')}",
        )
    fixed = state["bridge.current_regulation"] == "fixed-off-time"
    for key in ("bridge.comparator_delay", "bridge.min_on_time", "bridge.current_regulation"):
        if key in given and trip == 0.0:
            return (
                key,
                f"expected a trip current (bridge.peak_current_limit, or "
                f"bridge.sense_threshold with bridge.sense_resistance) with {key}, found none",
            )
    if fixed and state["bridge.off_time"] is None:
        return (
            "bridge.off_time",
            "expected an off-time with bridge.current_regulation = 'fixed-off-time', found none",
        )
    if state["bridge.off_time"] is not None and not fixed:
        return (
            "bridge.off_time",
            "expected bridge.current_regulation = 'fixed-off-time' with bridge.off_time, found "
            f"bridge.current_regulation {show('bridge.current_regulation')}",
        )
    period = 1.0 / state["bridge.frequency"]
    for key in ("bridge.comparator_delay", "bridge.min_on_time"):
        if state[key] >= period:
            return (
                key,
                f"expected a time shorter than the PWM period ({period:.3g} s), found {show(key)}",
            )
    return None


_LOOPS_OF_MODE = {
    "voltage": (),
    "current": ("current",),
    "speed": ("speed", "current"),
    "position": ("position", "speed", "current"),
}
_REFERENCE_KEYS = {
    "step": ({"value"}, {"initial", "at"}),
    "ramp": ({"value"}, {"initial", "at", "rate", "ramp_time"}),
    "trapezoid": ({"distance", "speed", "acceleration"}, {"initial", "at", "deceleration"}),
    "s-curve": ({"distance", "speed", "acceleration", "jerk"}, {"initial", "at"}),
    "table": ({"file"}, set()),
}
"""Required and allowed keys of each reference kind (besides ``kind``)."""


def _control_problem(
    state: dict[str, Any], present: set[str], given: set[str], show: _Show
) -> _Problem:
    """Rules of the closed-loop controller, its loops, reference and sensors."""
    mode = state["control.mode"]
    loops = _LOOPS_OF_MODE[mode]
    if "control.speed.regen_limit" in given and mode not in ("speed", "position"):
        return (
            "control.speed.regen_limit",
            "expected control.mode 'speed' or 'position' for a regenerative current limit (it "
            f"clamps the speed loop's current command), found mode '{mode}'",
        )
    if mode == "voltage":
        for table in ("control.reference", "sensors"):
            if table in present:
                return (
                    table,
                    f"expected no [{table}] in control mode 'voltage' (open loop: no controller "
                    "reads it); set control.mode to 'current', 'speed' or 'position', found "
                    f"[{table}]",
                )
        return None
    for loop in loops:
        if f"control.{loop}" not in present:
            return (
                f"control.{loop}",
                f"missing table: control mode '{mode}' runs the loops "
                f"{' -> '.join(loops)}; expected a [control.{loop}] table with kp, ki and "
                f"sample_time, found none",
            )
    times = {loop: state[f"control.{loop}.sample_time"] for loop in loops}
    fastest = min(times.values())
    for loop in loops:
        t = f"control.{loop}"
        problem = _loop_problem(t, state, given, show)
        if problem is not None:
            return problem
        ratio = times[loop] / fastest
        if abs(ratio - round(ratio)) > 1e-9 * ratio:
            return (
                f"{t}.sample_time",
                "expected a whole multiple of the fastest loop's sample time "
                f"({fastest:.6g} s), found {show(f'{t}.sample_time')}",
            )
    if state["bridge.model"] == "switching":
        per = fastest * state["bridge.frequency"]
        if per < 1.0 - 1e-9 or abs(per - round(per)) > 1e-9 * per:
            name = min(times, key=times.get)
            return (
                f"control.{name}.sample_time",
                "expected a whole number of PWM periods (bridge.frequency "
                f"{show('bridge.frequency')}: {1.0 / state['bridge.frequency']:.6g} s) for "
                "the fastest loop (the switching bridge samples at PWM period starts), "
                f"found {show(f'control.{name}.sample_time')}",
            )
    if not 0.0 < state["control.voltage_fraction"] <= 1.0:
        return (
            "control.voltage_fraction",
            f"expected a fraction above 0 and at most 1, found {show('control.voltage_fraction')}",
        )
    if "control.reference" in present:
        kind = state["control.reference.kind"]
        required, allowed = _REFERENCE_KEYS[kind]
        if kind in ("trapezoid", "s-curve") and mode != "position":
            return (
                "control.reference.kind",
                f"expected a reference kind for control mode '{mode}' (step, ramp or table; "
                f"'{kind}' is a position move), found '{kind}'",
            )
        for key in sorted(required):
            if state[f"control.reference.{key}"] is None:
                return (
                    f"control.reference.{key}",
                    f"missing key: a '{kind}' reference needs {', '.join(sorted(required))}; "
                    f"found no {key}",
                )
        for key in sorted(KEYS["control.reference"]):
            name = f"control.reference.{key}"
            if key != "kind" and key not in required | allowed and name in given:
                return (
                    name,
                    f"expected no {key} in a '{kind}' reference (it takes "
                    f"{', '.join(sorted(required | allowed))}), found {show(name)}",
                )
        if kind == "ramp":
            n = sum(state[f"control.reference.{k}"] is not None for k in ("rate", "ramp_time"))
            if n != 1:
                return (
                    "control.reference.rate",
                    "expected exactly one of rate and ramp_time for a 'ramp' reference, found "
                    f"{'both' if n == 2 else 'neither'}",
                )
    if "sensors" in present:
        problem = _sensors_problem(state, show)
        if problem is not None:
            return problem
    return None


def _loop_problem(t: str, state: dict[str, Any], given: set[str], show: _Show) -> _Problem:
    form = state[f"{t}.form"]
    parallel = ("kp", "ki", "kd")
    other = ("gain", "integral_time", "derivative_time")
    mine, theirs = (parallel, other) if form == "parallel" else (other, parallel)
    for key in theirs:
        if f"{t}.{key}" in given:
            return (
                f"{t}.{key}",
                f"expected {', '.join(mine)} for the '{form}' form of [{t}] (set {t}.form to "
                f"choose), found {key} = {show(f'{t}.{key}')}",
            )
    lead = mine[0]
    if state[f"{t}.{lead}"] is None:
        what = "the proportional gain" if lead == "kp" else "the controller gain"
        return (f"{t}.{lead}", f"missing key: expected {lead} in [{t}] ({what}), found no {lead}")
    if form == "parallel":
        ki = state[f"{t}.ki"]
    else:
        ti = state[f"{t}.integral_time"]
        ki = 0.0 if ti is None else 1.0
    if state[f"{t}.anti_windup"] == "back-calculation" and ki == 0.0:
        return (
            f"{t}.anti_windup",
            f"expected integral action (ki > 0) for back-calculation anti-windup in [{t}], "
            "found none",
        )
    if state[f"{t}.initial_output"] is not None and ki == 0.0:
        return (
            f"{t}.initial_output",
            f"expected integral action (ki > 0) to start from an initial output in [{t}] "
            f"(bumpless start sets the integral), found ki = 0",
        )
    return None


def _sensors_problem(state: dict[str, Any], show: _Show) -> _Problem:
    for key, top in (
        ("encoder_lines", 1e9),
        ("current_adc_bits", 32),
        ("bus_voltage_adc_bits", 32),
        ("seed", 2**63),
    ):
        name = f"sensors.{key}"
        value = state[name]
        if value != round(value) or value > top:
            return (name, f"expected a whole number from 0 to {top:g}, found {show(name)}")
    for bits, full in (
        ("current_adc_bits", "current_range"),
        ("bus_voltage_adc_bits", "bus_voltage_range"),
    ):
        if state[f"sensors.{bits}"] > 0 and not state[f"sensors.{full}"] > 0:
            return (
                f"sensors.{full}",
                f"expected the ADC's full scale when sensors.{bits} is "
                f"{show(f'sensors.{bits}')}, found {show(f'sensors.{full}')}",
            )
    return None


def _relative_to(source: str, name: str) -> Path:
    path = Path(name)
    if not path.is_absolute() and not source.startswith("<"):
        path = Path(source).parent / path
    return path


def _resolve_files(tables: dict[str, Any], source: str) -> None:
    """Read the CSV files a scenario names and resolve the supply profile (in place)."""
    import dataclasses

    fuse = tables.get("fuse")
    if fuse is not None:
        from dcsim.power import fuse as fuse_model

        points = fuse.table_points
        if fuse.table is not None and not points:
            currents, times = fuse_model.read_time_current_csv(
                _relative_to(source, fuse.table), source=source, key="fuse.table"
            )
            points = tuple((float(a), float(b)) for a, b in zip(currents, times, strict=True))
            fuse = dataclasses.replace(fuse, table_points=points)
        fuse_model.fuse_model_from_keys(
            fuse.rated_current,
            melting_i2t_A2s=fuse.melting_i2t,
            min_melting_current_A=fuse.min_melting_current,
            table=list(fuse.table_points) if fuse.table is not None else None,
            fuse_class=fuse.generic_class,
            source=source,
        )
        tables["fuse"] = fuse
    ref = tables.get("control.reference")
    if ref is not None and ref.kind == "table" and not ref.times_s:
        from dcsim.controllers.motion import read_reference_csv, table_profile

        key = "control.reference.file"
        times, vals = read_reference_csv(_relative_to(source, ref.file), source=source, key=key)
        table_profile(times, vals, source=source, key=key)  # checks the points
        tables["control.reference"] = dataclasses.replace(
            ref, times_s=tuple(float(t) for t in times), values=tuple(float(v) for v in vals)
        )
    prof = tables.get("supply_profile")
    if prof is not None and not prof.times_s:
        from dcsim.power import profiles

        key = "supply_profile"
        if prof.standard is not None:
            resolved = profiles.standard_profile(
                prof.standard, tables["supply"].voltage, source=source, key=f"{key}.standard"
            )
        elif prof.points is not None:
            resolved = profiles.profile_from_points(prof.points, source=source, key=f"{key}.points")
        else:
            resolved = profiles.read_profile_csv(
                _relative_to(source, prof.file), source=source, key=f"{key}.file"
            )
        notes = "; ".join(x for x in (resolved.source, resolved.notes) if x)
        tables["supply_profile"] = dataclasses.replace(
            prof,
            times_s=tuple(float(t) for t in resolved.times_s),
            voltages_V=tuple(float(v) for v in resolved.voltages_V),
            notes=notes,
        )


def _check_events(values: dict[str, Any], ordered: list[_ReadEvent], source: str) -> None:
    """Apply the events in time order and check the rules after each distinct time."""
    state = dict(values)
    i = 0
    while i < len(ordered):
        group = [e for e in ordered[i:] if e.at == ordered[i].at]
        i += len(group)
        written: dict[str, _ReadEvent] = {}
        for event in group:
            for name, value in event.changes:
                state[name] = value
                written[name] = event

        def show(name: str, written: dict[str, _ReadEvent] = written) -> str:
            event = written.get(name)
            if event is not None and name in event.shown:
                return f"{event.shown[name]} (set at {event.at_shown})"
            return _show_si(name, state[name], given=True)

        problem = _first_problem(state, set(written), show)
        if problem is not None:
            name, detail = problem
            event = written.get(name)
            key = f"{_EVENTS}[{event.index}].set.{name}" if event else name
            raise ScenarioError(detail, source=source, key=key)


def _first_problem(state: dict[str, Any], given: set[str], show: _Show) -> _Problem:
    for rule in _RULES:
        problem = rule(state, given, show)
        if problem is not None:
            return problem
    return None


def _show_si(name: str, value: Any, *, given: bool) -> str:
    """An SI value for messages, e.g. ``"0 ohm (the default)"``."""
    spec = _spec(name)
    if value is None:
        text = "automatic"
    elif isinstance(value, bool | str):
        text = describe_value(value)
    else:
        text = f"{value:g} {spec.unit}"
    return text if given else f"{text} (the default)"


def _missing_table(table: str, source: str) -> ScenarioError:
    needed = [k for k, spec in KEYS[table].items() if spec.default is REQUIRED]
    keys = f" with {', '.join(needed)}" if needed else ""
    return ScenarioError(
        f"missing table: expected a [{table}] table{keys}, found none",
        source=source,
        key=table,
    )
