"""Write a :class:`~dcsim.scenario.schema.Scenario` back to a TOML scenario file.

:func:`scenario_to_toml` is the inverse of :func:`~dcsim.scenario.load.load_scenario_text`:
the text it returns loads back to an equal scenario (every table, key and event). Quantities
are written as ``"<value> <SI unit>"`` strings, the unit taken from :data:`KEYS`, with the
shortest decimal that gives the same double (``repr``); each written string is read back with
:func:`~dcsim.units.to_si` and, should that not give the same double bit for bit, the plain SI
number is written instead (which the loader takes as SI). Keys equal to their default are left
out, required keys never; optional tables that are absent are left out; the fields the loader
derives (:data:`DERIVED_FIELDS`) are not written, nor the motor's model keys that came from its
catalogue figures (``Motor.derived``): the figures are written and the loader derives the keys
from them again, to the same doubles.

:func:`write_scenario` puts the text in a file atomically and refuses to replace an existing
file unless asked to.

Strings follow the TOML v1.0.0 specification (toml.io/en/v1.0.0, "String"): basic strings with
the escapes ``\\\\ \\" \\b \\t \\n \\f \\r`` and ``\\uXXXX`` for the other control characters;
text with line breaks is written as a multi-line basic string.
"""

from __future__ import annotations

import math
import numbers
import os
import re
import secrets
from pathlib import Path
from typing import Any

from dcsim.errors import ScenarioError
from dcsim.scenario.schema import (
    CONTROLLED,
    CONTROLLED_UNITS,
    KEYS,
    OPTIONAL_TABLES,
    REQUIRED,
    KeySpec,
    Scenario,
    table_of,
)
from dcsim.units import UnitError, describe_value, to_si

__all__ = ["scenario_to_toml", "write_scenario"]

_TABLE_ORDER = (
    "about",
    "simulation",
    "motor",
    "load",
    "gear",
    "hoist",
    "shaft",
    "supply",
    "bridge",
    "brake",
    "protection",
    "precharge",
    "battery",
    "fuse",
    "supply_profile",
    "control",
    "control.current",
    "control.speed",
    "control.position",
    "control.reference",
    "sensors",
    "thermal",
    "checks",
)
"""Order of the tables in a written file (every table of :data:`KEYS` once)."""

_FILE_KEYS = frozenset({"fuse.table", "supply_profile.file", "control.reference.file"})
"""Text keys that name a file relative to the scenario's folder."""

_SHORT_ESCAPES = {
    "\\": "\\\\",
    '"': '\\"',
    "\b": "\\b",
    "\t": "\\t",
    "\n": "\\n",
    "\f": "\\f",
    "\r": "\\r",
}
_SINGLE_UNIT_IN_PARENS = re.compile(r"\(([A-Za-z_]+)\)")


def scenario_to_toml(
    sc: Scenario, *, header: str = "", relative_to: str | os.PathLike[str] | None = None
) -> str:
    """The TOML text of a scenario, which :func:`load_scenario_text` reads back to it.

    Parameters
    ----------
    sc : Scenario
        The scenario (SI values, as the loader or :meth:`Scenario.with_changes` made it).
    header : str
        Text put at the top as a comment block, each line prefixed ``"# "``.
    relative_to : str or path-like, optional
        Folder of the file the text will be saved in. File references (``fuse.table``,
        ``supply_profile.file``, ``control.reference.file``) are resolved against the folder
        of ``sc.source`` (when it is a file path) and written relative to this folder, or as
        absolute paths where no relative path exists (another drive). ``None``: written as
        absolute paths when ``sc.source`` is a file path, as given otherwise.

    Returns
    -------
    str
        A TOML document ending in a newline. Quantities are strings with their SI unit from
        :data:`KEYS` (``resistance = "1.2 ohm"``), or plain SI numbers where the unit string
        would not read back bit for bit; events are ``[[events]]`` blocks in time order.

    Raises
    ------
    ScenarioError
        A value cannot be written (not a number where a quantity is expected, not finite, a
        required key without a value, text that is not valid Unicode). Names ``sc.source``
        and the key.
    """
    if not isinstance(sc, Scenario):
        raise ScenarioError(f"expected a Scenario to write, found {describe_value(sc)}")
    if not isinstance(header, str):
        raise ScenarioError(
            f"expected the header as text (a str), found {describe_value(header, with_kind=True)}",
            source=str(sc.source),
            key="header",
        )
    writer = _Writer(sc, relative_to)
    blocks: list[str] = []
    if header:
        blocks.append(_comment(header, str(sc.source)))
    for table in _TABLE_ORDER:
        block = writer.table(table)
        if block:
            blocks.append(block)
    blocks.extend(writer.events())
    return "\n\n".join(blocks) + "\n"


def write_scenario(
    sc: Scenario, path: str | os.PathLike[str], *, header: str = "", force: bool = False
) -> Path:
    """Write a scenario to a TOML file, atomically.

    The text (:func:`scenario_to_toml`, file references written as absolute paths) goes to a
    temporary name in the target's folder, is flushed to disk and then moved over the target
    with :func:`os.replace`, so the target is either absent, the old file or the whole new
    one. No temporary file is left behind, also when writing fails.

    Parameters
    ----------
    sc : Scenario
        The scenario to write.
    path : str or path-like
        The new file (UTF-8, ``\\n`` line ends). Its folder must exist.
    header : str
        Comment block for the top of the file.
    force : bool
        Replace ``path`` if it exists; otherwise an existing file is refused.

    Returns
    -------
    Path
        The file written.

    Raises
    ------
    ScenarioError
        ``path`` exists and ``force`` is false, the folder cannot be written, or a value
        cannot be written (see :func:`scenario_to_toml`).
    """
    try:
        target = Path(os.fsdecode(path))
    except TypeError:
        raise ScenarioError(
            f"expected a file path to write the scenario to, found {describe_value(path)}",
            source=str(getattr(sc, "source", "")),
        ) from None
    text = scenario_to_toml(sc, header=header)  # fails before any file is made
    name = str(target)
    if not force and (target.exists() or target.is_symlink()):
        raise ScenarioError(
            "expected a new file name (or force=True to replace the file), found an existing "
            f"{'folder' if target.is_dir() else 'file'}",
            source=name,
        )
    if target.is_dir():
        raise ScenarioError(
            "expected a file name to write the scenario to, found an existing folder",
            source=name,
        )
    data = text.encode("utf-8")
    tmp = target.with_name(f".{target.name}.{secrets.token_hex(4)}.tmp")
    try:
        with open(tmp, "xb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, target)
    except OSError as err:
        reason = err.strerror or str(err)
        raise ScenarioError(
            f"expected a folder the scenario file can be written in, found that writing "
            f"failed ({reason})",
            source=name,
        ) from None
    finally:
        if tmp.exists():
            tmp.unlink()
    return target


# --------------------------------------------------------------------------------------------
# Values
# --------------------------------------------------------------------------------------------


class _Writer:
    """Formats the tables and events of one scenario (messages name ``sc.source``)."""

    def __init__(self, sc: Scenario, relative_to: str | os.PathLike[str] | None) -> None:
        self.sc = sc
        self.source = str(sc.source)
        self.mode = sc.control.mode
        self.relative_to = None
        if relative_to is not None:
            try:
                self.relative_to = Path(os.fsdecode(relative_to))
            except TypeError:
                raise ScenarioError(
                    "expected the folder of the new file (a path) for relative_to, found "
                    f"{describe_value(relative_to, with_kind=True)}",
                    source=self.source,
                    key="relative_to",
                ) from None

    def table(self, table: str) -> str:
        """``[table]`` and its keys, or ``""`` when there is nothing to write."""
        part = table_of(self.sc, table)
        if part is None:
            return ""
        lines = []
        derived = {k for k, _ in getattr(part, "derived", ())} if table == "motor" else set()
        for key, spec in KEYS[table].items():
            name = f"{table}.{key}"
            value = getattr(part, key)
            if key in derived:
                continue  # derived from the catalogue keys written beside it, again on loading
            if spec.default is REQUIRED:
                if value is None:
                    raise ScenarioError(
                        f"expected a value for the required key {name}, found none (None)",
                        source=self.source,
                        key=name,
                    )
            elif _is_default(value, spec.default):
                continue
            if name == "supply.voltage" and self.sc.battery is not None:
                continue  # the loader sets it from the battery's open-circuit voltage
            lines.append(f"{key} = {self.value(name, spec, value, key=name)}")
        if not lines and table not in OPTIONAL_TABLES:
            return ""  # a table with only defaults reads the same when absent
        return "\n".join([f"[{table}]", *lines])

    def events(self) -> list[str]:
        """One ``[[events]]`` block per event, in time order (stable at equal times)."""
        blocks = []
        indexed = list(enumerate(self.sc.events))
        for index, event in sorted(indexed, key=lambda pair: _sort_time(pair[1].at)):
            where = f"events[{index}]"
            at = self.quantity(event.at, "s", key=f"{where}.at")
            changes = []
            for name, value in event.changes:
                table, _, key = str(name).rpartition(".")
                spec = KEYS.get(table, {}).get(key)
                if spec is None:
                    raise ScenarioError(
                        f"expected a dotted key of a scenario table, found {describe_value(name)}",
                        source=self.source,
                        key=f"{where}.set",
                    )
                text = self.value(name, spec, value, key=f"{where}.set.{name}")
                changes.append(f"{_string(name, self.source, where)} = {text}")
            blocks.append(f"[[events]]\nat = {at}\nset = {{ {', '.join(changes)} }}")
        return blocks

    def value(self, name: str, spec: KeySpec, value: Any, *, key: str) -> str:
        """The TOML text of one value of key ``name``."""
        if spec.kind == "quantity":
            return self.quantity(value, self.unit(spec.unit), key=key)
        if spec.kind == "bool":
            if not isinstance(value, bool):
                raise self.error(key, "true or false", value)
            return "true" if value else "false"
        if spec.kind == "choice":
            if not isinstance(value, str):
                raise self.error(key, f"one of {', '.join(spec.choices)}", value)
            return _string(value, self.source, key)
        if spec.kind == "text":
            if not isinstance(value, str):
                raise self.error(key, "a text (str)", value)
            if name in _FILE_KEYS:
                value = self.path(value)
            return _text(value, self.source, key)
        if spec.kind == "pairs":
            if not isinstance(value, list | tuple):
                raise self.error(key, "a sequence of (a, b) pairs", value)
            pairs = []
            for n, pair in enumerate(value):
                if not isinstance(pair, list | tuple) or len(pair) != 2:
                    raise self.error(f"{key}[{n}]", "a pair (a, b)", pair)
                first = self.quantity(pair[0], spec.unit or "", key=f"{key}[{n}][0]")
                second = self.quantity(pair[1], spec.unit2 or "", key=f"{key}[{n}][1]")
                pairs.append(f"[{first}, {second}]")
            return f"[{', '.join(pairs)}]"
        raise TypeError(f"schema error: key {name!r} has unknown kind {spec.kind!r}")

    def unit(self, unit: str | None) -> str:
        """The SI unit of a key, the controlled quantity's for reference values."""
        unit = unit or ""
        if unit.startswith(CONTROLLED):
            if self.mode not in CONTROLLED_UNITS:
                return ""  # plain SI number; the loader reports the open-loop reference
            unit = CONTROLLED_UNITS[self.mode] + unit[len(CONTROLLED) :]
        return unit

    def quantity(self, value: Any, unit: str, *, key: str) -> str:
        """``"<repr> <unit>"``, or the plain SI number if the string does not read back exactly.

        ``unit`` is the SI unit the loader converts to (``""`` for a pure number).
        """
        if isinstance(value, bool) or not isinstance(value, numbers.Real):
            raise self.error(key, f"a number in {unit or 'SI'}", value)
        si = float(value)
        if not math.isfinite(si):
            raise self.error(key, "a finite number", value)
        si += 0.0  # the loader stores a written "-0" as 0.0
        plain = repr(si)
        if not unit:
            return plain
        shown = _SINGLE_UNIT_IN_PARENS.sub(r"\1", unit)
        written = f"{plain} {shown}"
        try:
            back = to_si(written, unit, noun="a quantity", example=written)
        except UnitError:
            return plain
        return _string(written, self.source, key) if back == si else plain

    def path(self, name: str) -> str:
        """A file reference resolved against the scenario's folder (see ``relative_to``)."""
        path = Path(name)
        if not self.source.startswith("<") and not path.is_absolute():
            path = Path(self.source).parent / path
        if not path.is_absolute() and self.source.startswith("<"):
            return name  # no folder to resolve against: as given
        path = Path(os.path.abspath(path))
        if self.relative_to is None:
            return str(path)
        try:
            return os.path.relpath(path, os.path.abspath(self.relative_to))
        except ValueError:  # another drive (Windows): no relative path
            return str(path)

    def error(self, key: str, expected: str, found: Any) -> ScenarioError:
        return ScenarioError(
            f"expected {expected} to write, found {describe_value(found, with_kind=True)}",
            source=self.source,
            key=key,
        )


def _is_default(value: Any, default: Any) -> bool:
    """Whether a value equals its key's default (``True`` is not the number 1 here)."""
    if value is None or default is None:
        return value is default
    if isinstance(value, bool) or isinstance(default, bool):
        return isinstance(value, bool) and isinstance(default, bool) and value == default
    return value == default


def _sort_time(at: Any) -> float:
    """Sort key of an event time (non-numbers are reported when the event is written)."""
    if isinstance(at, numbers.Real) and not isinstance(at, bool) and math.isfinite(at):
        return float(at)
    return -math.inf


# --------------------------------------------------------------------------------------------
# TOML strings
# --------------------------------------------------------------------------------------------


def _escape(text: str, source: str, key: str, *, keep_newlines: bool = False) -> str:
    """Escape a text for a TOML basic string (TOML v1.0.0, "String")."""
    out = []
    for char in text:
        code = ord(char)
        if keep_newlines and char == "\n":
            out.append(char)
        elif char in _SHORT_ESCAPES:
            out.append(_SHORT_ESCAPES[char])
        elif code < 0x20 or code == 0x7F:
            out.append(f"\\u{code:04X}")
        elif 0xD800 <= code <= 0xDFFF:
            raise ScenarioError(
                "expected text of Unicode characters (it is written as UTF-8), found the lone "
                f"surrogate code point U+{code:04X}",
                source=source,
                key=key,
            )
        else:
            out.append(char)
    return "".join(out)


def _comment(text: str, source: str) -> str:
    """A comment block: each line prefixed ``"# "``; control characters shown as ``\\uXXXX``.

    TOML comments may hold any character but the control characters other than tab.
    """
    lines = []
    for line in text.splitlines():
        shown = "".join(
            f"\\u{ord(c):04X}" if (ord(c) < 0x20 and c != "\t") or ord(c) == 0x7F else c
            for c in line
        )
        _escape(shown, source, "header")  # refuses lone surrogates
        lines.append(f"# {shown}".rstrip())
    return "\n".join(lines)


def _string(text: str, source: str, key: str) -> str:
    """A one-line TOML basic string."""
    return f'"{_escape(text, source, key)}"'


def _text(text: str, source: str, key: str) -> str:
    """A TOML basic string; a multi-line one when the text has line breaks.

    The newline right after the opening ``\"\"\"`` is trimmed by TOML readers, so the text
    starts on the next line; quotes are escaped, so no ``\"\"\"`` can close it early.
    """
    if "\n" not in text:
        return _string(text, source, key)
    return f'"""\n{_escape(text, source, key, keep_newlines=True)}"""'
