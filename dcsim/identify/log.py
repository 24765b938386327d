"""Read a measured motor log (CSV) for parameter identification.

Format
------
One sample a line, columns separated by commas (or by semicolons, in which case a comma inside
a number is read as the decimal mark); ``#`` starts a comment; blank lines are skipped. The
first non-comment line is a header that names the columns and gives each unit in brackets::

    # bench run 3, vent actuator spare motor, 20 kHz logger
    time [ms], voltage [V], current [A], speed [rpm]
    0.00, 0.0, 0.000, 0.0
    0.05, 24.0, 0.021, 0.0
    ...

Columns are found by name (upper or lower case, in any order): ``time``, ``voltage``,
``current`` and ``speed`` or ``position`` (``angle`` is read as position); others are ignored.
Any unit pint reads is accepted if it has the right dimension (``ms``, ``mA``, ``rpm``,
``deg``, ``rev``...). The columns of a dcsim ``trace.csv`` (``time_s``, ``armature_voltage_V``,
``current_A``, ``speed_rad_s``, ``position_rad``) are read as they are, so a simulated run can
be fitted directly. Samples must be evenly spaced in time (the fit differentiates with
Savitzky-Golay filters and holds the voltage over each sample interval).

Every problem is one :class:`~dcsim.errors.ScenarioError` naming the file, the column or line,
what was expected and what was found.
"""

from __future__ import annotations

import math
import os
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from dcsim.errors import ScenarioError
from dcsim.units import UnitError, to_si

__all__ = ["MIN_SAMPLES", "MotorLog", "read_log_csv"]

MIN_SAMPLES = 100
"""Fewest samples a log may have (the filters need windows of a dozen samples or more)."""

SPACING_TOLERANCE = 0.01
"""Largest relative deviation of a sample interval from the median interval [-]."""

_UNIT = re.compile(r"^\s*([A-Za-z_ ]*?)\s*[\[(]\s*([^\])]*?)\s*[\])]\s*$")
_SI = {"time": "s", "voltage": "V", "current": "A", "speed": "rad/s", "position": "rad"}
_NOUNS = {
    "time": ("a time", "ms"),
    "voltage": ("a voltage", "V"),
    "current": ("a current", "A"),
    "speed": ("a speed", "rpm"),
    "position": ("an angle", "rad"),
}
_ALIASES = {
    "time": "time",
    "t": "time",
    "voltage": "voltage",
    "armature voltage": "voltage",
    "armature_voltage": "voltage",
    "current": "current",
    "armature current": "current",
    "speed": "speed",
    "position": "position",
    "angle": "position",
}
_TRACE_COLUMNS = {
    "time_s": "time",
    "armature_voltage_v": "voltage",
    "current_a": "current",
    "speed_rad_s": "speed",
    "position_rad": "position",
}
"""Columns of dcsim's own trace.csv (SI, no brackets)."""


@dataclass(frozen=True)
class MotorLog:
    """A measured (or simulated) record of one motor, SI units.

    Attributes
    ----------
    time_s : numpy.ndarray
        Sample instants [s], evenly spaced.
    voltage_V : numpy.ndarray
        Armature voltage [V]; taken as held from each sample to the next.
    current_A : numpy.ndarray
        Armature current [A].
    speed_rad_s : numpy.ndarray or None
        Shaft speed [rad/s], if logged.
    position_rad : numpy.ndarray or None
        Shaft angle [rad], if logged.
    source : str
        The file it was read from, for messages.
    """

    time_s: np.ndarray
    voltage_V: np.ndarray
    current_A: np.ndarray
    speed_rad_s: np.ndarray | None = None
    position_rad: np.ndarray | None = None
    source: str = "<log>"

    @property
    def sample_time_s(self) -> float:
        """Interval between samples [s] (the mean)."""
        return float((self.time_s[-1] - self.time_s[0]) / (len(self.time_s) - 1))

    @property
    def channel(self) -> str:
        """``"speed"`` when the speed is logged (it is then used), else ``"position"``."""
        return "speed" if self.speed_rad_s is not None else "position"


def read_log_csv(path: str | os.PathLike[str]) -> MotorLog:
    """Read a motor log CSV (see the module notes for the format).

    Parameters
    ----------
    path : str or path-like
        The CSV file (UTF-8).

    Returns
    -------
    MotorLog
        The columns in SI units.

    Raises
    ------
    ScenarioError
        The file cannot be read; the header lacks a column or a unit, or has a unit of the
        wrong dimension; a line has the wrong number of values, a value that is not a finite
        number; times that do not rise evenly; fewer than :data:`MIN_SAMPLES` samples.
    """
    p = Path(os.fsdecode(path))
    where = str(p)

    def fail(message: str, *, line: int | None = None, key: str = "") -> ScenarioError:
        at = f"line {line}: " if line is not None else ""
        return ScenarioError(at + message, source=where, key=key)

    try:
        text = p.read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        raise fail("expected a CSV motor log, found no such file") from None
    except IsADirectoryError:
        raise fail("expected a CSV motor log, found a directory") from None
    except (OSError, UnicodeDecodeError) as exc:
        reason = getattr(exc, "strerror", None) or str(exc)
        raise fail(
            f"expected a readable UTF-8 CSV file, found that it cannot be read ({reason})"
        ) from None

    header: list[str] | None = None
    columns: dict[str, tuple[int, float, str]] = {}
    delimiter = ","
    rows: list[list[float]] = []
    lines: list[int] = []
    for line_no, raw in enumerate(text.splitlines(), start=1):
        line = raw.split("#", 1)[0].strip()
        if not line:
            continue
        if header is None:
            delimiter = ";" if ";" in line else ","
            header = [f.strip() for f in line.split(delimiter)]
            columns = _read_header(header, line_no, fail)
            continue
        fields = [f.strip() for f in line.split(delimiter)]
        if len(fields) != len(header):
            raise fail(
                f"expected {len(header)} values ({delimiter.join(header)}), found "
                f"{len(fields)}: {raw.strip()!r}",
                line=line_no,
            )
        row = []
        for name, (index, factor, label) in columns.items():
            cell = fields[index]
            number = cell.replace(",", ".") if delimiter == ";" else cell
            try:
                value = float(number)
            except ValueError:
                raise fail(
                    f"expected a number in column {label!r}, found {cell!r}", line=line_no, key=name
                ) from None
            if not math.isfinite(value):
                raise fail(
                    f"expected a finite number in column {label!r}, found {cell!r}",
                    line=line_no,
                    key=name,
                )
            row.append(value * factor)
        rows.append(row)
        lines.append(line_no)
    if header is None:
        raise fail(
            "expected a header line naming the columns, e.g. 'time [s], voltage [V], "
            "current [A], speed [rad/s]', found an empty file"
        )
    if len(rows) < MIN_SAMPLES:
        raise fail(f"expected at least {MIN_SAMPLES} samples, found {len(rows)}")
    data = np.array(rows, dtype=float).T
    values = dict(zip(columns, data, strict=True))
    t = values["time"]
    dt = np.diff(t)
    step = float(np.median(dt))
    if not np.all(dt > 0.0):
        bad = int(np.argmax(dt <= 0.0))
        raise fail(
            f"expected rising times, found {t[bad + 1]:g} s after {t[bad]:g} s",
            line=lines[bad + 1],
            key="time",
        )
    off = np.abs(dt - step) > SPACING_TOLERANCE * step
    if off.any():
        bad = int(np.argmax(off))
        raise fail(
            f"expected evenly spaced samples (every {step:g} s, within "
            f"{100 * SPACING_TOLERANCE:g} %), found {dt[bad]:g} s from {t[bad]:g} s to the "
            "next sample",
            line=lines[bad + 1],
            key="time",
        )
    return MotorLog(
        time_s=t,
        voltage_V=values["voltage"],
        current_A=values["current"],
        speed_rad_s=values.get("speed"),
        position_rad=values.get("position") if "speed" not in values else None,
        source=where,
    )


def _read_header(header: list[str], line_no: int, fail) -> dict[str, tuple[int, float, str]]:
    """``{quantity: (column index, factor to SI, header text)}`` of the columns used."""
    found: dict[str, tuple[int, float, str]] = {}
    for index, label in enumerate(header):
        trace = _TRACE_COLUMNS.get(label.lower())
        if trace is not None:
            quantity, factor = trace, 1.0
        else:
            m = _UNIT.match(label)
            name = (m.group(1) if m else label).strip().lower()
            quantity = _ALIASES.get(name)
            if quantity is None:
                continue  # a column the fit does not use
            if m is None or not m.group(2):
                noun, example = _NOUNS[quantity]
                raise fail(
                    f"expected the unit in brackets in the header, e.g. '{name} [{example}]', "
                    f"found {label!r}",
                    line=line_no,
                    key=quantity,
                )
            unit = m.group(2)
            noun, example = _NOUNS[quantity]
            try:
                factor = to_si(f"1 {unit}", _SI[quantity], noun=noun, example=f"1 {example}")
            except UnitError as err:
                raise fail(f"column {label!r}: {err.detail}", line=line_no, key=quantity) from None
        if quantity in found:
            raise fail(
                f"expected one {quantity} column, found {header[found[quantity][0]]!r} and "
                f"{label!r}",
                line=line_no,
                key=quantity,
            )
        found[quantity] = (index, factor, label)
    missing = [q for q in ("time", "voltage", "current") if q not in found]
    if "speed" not in found and "position" not in found:
        missing.append("speed or position")
    if missing:
        raise fail(
            "expected columns time, voltage, current and speed (or position), each with its "
            f"unit in brackets, e.g. 'time [s], voltage [V], current [A], speed [rpm]'; found "
            f"no {', '.join(missing)} in the header {', '.join(header)!r}",
            line=line_no,
            key="header",
        )
    if "speed" in found and "position" in found:
        del found["position"]  # the speed is used; the angle adds nothing the fit needs
    return found
