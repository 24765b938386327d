"""Writing and reading run results: trace CSV, summary JSON, and the atomic output set.

Every file is written under a temporary name in its own directory and then renamed over the
target (``os.replace``), so that a reader never sees a half-written file and a failed write
leaves the previous good file in place. :func:`write_outputs` extends this to the whole set of
outputs of a run: either all new files appear, or none of the old ones is replaced.

Number format
-------------
Trace values are written with Python's ``repr`` of the float64 value: the shortest decimal
string that reads back to the same binary value (correctly rounded, exact round trip for every
finite value, and ``nan`` / ``inf`` / ``-inf`` otherwise). ``'%.17g'`` would also round-trip
but prints noise such as ``0.10000000000000001``; ``'%.12e'`` or ``'%.10g'`` keep only 13 or
10 significant digits and would lose up to four decimal digits of a float64, which has 15.95.
"""

from __future__ import annotations

import errno
import io as _io
import json
import math
import os
import secrets
import shutil
import tempfile
from collections.abc import Callable, Mapping
from pathlib import Path
from typing import Any

import numpy as np

from dcsim.errors import DcsimError
from dcsim.results.summary import CAUTION
from dcsim.results.trace import TRACE_COLUMNS, SimulationResult, Trace

TRACE_FILE = "trace.csv"
SUMMARY_FILE = "summary.json"
CHOPS_FILE = "chops.csv"

_STAGING_PREFIX = ".dcsim-staging-"
_ROWS_PER_CHUNK = 4096
_FORBIDDEN_IN_NAMES = (",", '"', "\n", "\r")


class TraceFileError(DcsimError, ValueError):
    """A trace CSV file cannot be read: the message names the file, the place and the problem.

    Parameters
    ----------
    message : str
        What was expected and what was found.
    source : str
        The file.
    key : str
        The column or line concerned, e.g. ``"line 7"`` or ``"speed_rad_s"``.
    """

    def __init__(self, message: str, *, source: str = "", key: str = "") -> None:
        self.source = source
        self.key = key
        self.detail = message
        prefix = ": ".join(p for p in (source, key) if p)
        super().__init__(f"{prefix}: {message}" if prefix else message)


# --------------------------------------------------------------------------------------------
# Atomic single-file writes
# --------------------------------------------------------------------------------------------


def _temporary_name(path: Path) -> Path:
    """A fresh hidden name next to ``path`` that keeps its suffix (``.trace.1a2b.tmp.csv``)."""
    return path.with_name(f".{path.stem}.{secrets.token_hex(4)}.tmp{path.suffix}")


def _fsync_file(path: Path) -> None:
    with open(path, "rb+") as fh:
        os.fsync(fh.fileno())


def _fsync_dir(path: Path) -> None:
    """Make renames in ``path`` durable where the platform allows (POSIX)."""
    if os.name != "posix":
        return
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    except OSError:  # some file systems refuse fsync on directories; renames stay atomic
        pass
    finally:
        os.close(fd)


def atomic_write(path: str | Path, writer: Callable[[Path], object]) -> Path:
    """Write a file through a temporary name in the same directory, then rename it.

    Parameters
    ----------
    path : str or Path
        Target file. Its directory must exist.
    writer : callable
        ``writer(tmp_path)`` writes the complete content to ``tmp_path`` (which exists, empty,
        and keeps the target's suffix so that format detection by extension works).

    Returns
    -------
    Path
        The target path.

    Notes
    -----
    The content is flushed to disk (``fsync``) before ``os.replace`` moves it over the target,
    so the target is always either the old file or the complete new one. If ``writer`` raises
    (or the run is interrupted), the temporary file is removed, the exception propagates, and
    the target is untouched.
    """
    target = Path(path)
    for _ in range(8):
        tmp = _temporary_name(target)
        try:
            open(tmp, "xb").close()  # exclusive create; honours the umask, unlike mkstemp
            break
        except FileExistsError:
            continue
    else:  # pragma: no cover - eight 32-bit random collisions in a row
        raise FileExistsError(f"cannot find a free temporary name beside {target}")
    try:
        writer(tmp)
        _fsync_file(tmp)
        os.replace(tmp, target)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    _fsync_dir(target.parent)
    return target


# --------------------------------------------------------------------------------------------
# Trace CSV
# --------------------------------------------------------------------------------------------


def _column_order(trace: Mapping[str, Any]) -> list[str]:
    """TRACE_COLUMNS first (all required), then any further columns in the trace's order."""
    missing = [name for name in TRACE_COLUMNS if name not in trace]
    if missing:
        raise ValueError(f"trace lacks the required column(s) {', '.join(missing)}")
    extra = [name for name in trace if name not in TRACE_COLUMNS]
    for name in extra:
        if not isinstance(name, str) or not name or any(c in name for c in _FORBIDDEN_IN_NAMES):
            raise ValueError(
                f"trace column name {name!r} cannot go in a CSV header: expected a non-empty "
                "name without commas, quotes or line breaks"
            )
    return list(TRACE_COLUMNS) + extra


def _column_arrays(trace: Mapping[str, Any], names: list[str]) -> list[np.ndarray]:
    arrays = []
    for name in names:
        arr = np.asarray(trace[name])
        if arr.ndim != 1:
            raise ValueError(
                f"trace column {name!r}: expected a 1-D array, found shape {arr.shape}"
            )
        if arr.dtype.kind not in "biuf":
            raise ValueError(
                f"trace column {name!r}: expected real numbers, found dtype {arr.dtype}"
            )
        arrays.append(arr.astype(np.float64, copy=False))
    lengths = {len(a) for a in arrays}
    if len(lengths) > 1:
        found = ", ".join(f"{n}={len(a)}" for n, a in zip(names, arrays, strict=True))
        raise ValueError(f"trace columns differ in length: {found}")
    return arrays


def _write_csv_to(fh: _io.TextIOBase, names: list[str], arrays: list[np.ndarray]) -> None:
    fh.write(",".join(names) + "\n")
    table = np.column_stack(arrays)
    for start in range(0, table.shape[0], _ROWS_PER_CHUNK):
        rows = table[start : start + _ROWS_PER_CHUNK].tolist()  # Python floats -> exact repr
        fh.write("".join(",".join(map(repr, row)) + "\n" for row in rows))


def write_trace_csv(trace: Mapping[str, Any], path: str | Path) -> Path:
    """Write a trace as CSV, atomically.

    Parameters
    ----------
    trace : Trace or mapping of str to 1-D array
        Recorded columns, all the same length; must hold every column of
        :data:`~dcsim.results.trace.TRACE_COLUMNS` (names carry their SI unit).
    path : str or Path
        Target file; its directory must exist.

    Returns
    -------
    Path
        The file written.

    Raises
    ------
    ValueError
        A required column is missing, a column is not 1-D real numbers, lengths differ, or a
        column name cannot go in a CSV header.

    Notes
    -----
    Header row first (column names, TRACE_COLUMNS first then the others in the trace's order),
    then one row per recorded instant. Values are float64 written with ``repr``: the shortest
    string that reads back to the identical value (see the module notes).
    """
    names = _column_order(trace)
    arrays = _column_arrays(trace, names)

    def writer(tmp: Path) -> None:
        with open(tmp, "w", encoding="utf-8", newline="\n") as fh:
            _write_csv_to(fh, names, arrays)

    return atomic_write(path, writer)


def _first_bad_line(lines: list[str], ncols: int) -> tuple[int, str]:
    """1-based line number and a description of the first row that is not ``ncols`` numbers."""
    for number, line in enumerate(lines[1:], start=2):
        if not line.strip():
            continue
        fields = line.split(",")
        if len(fields) != ncols:
            return number, f"expected {ncols} comma-separated numbers, found {len(fields)}"
        for field in fields:
            try:
                float(field)
            except ValueError:
                return number, f"expected a number, found {field.strip()!r}"
    return 0, "expected rows of comma-separated numbers, found text that does not parse as such"


def read_trace_csv(path: str | Path) -> Trace:
    """Read a trace CSV written by :func:`write_trace_csv`.

    Parameters
    ----------
    path : str or Path
        The CSV file: a header row of column names, then rows of numbers.

    Returns
    -------
    Trace
        Columns as float64 arrays, in file order; values are bit-for-bit those written.

    Raises
    ------
    FileNotFoundError
        The file does not exist.
    TraceFileError
        The file is not UTF-8 text, lacks a header or a required column, repeats a column
        name, or a row is not the right count of numbers. The message names the file and the
        line or column.
    """
    src = str(path)
    try:
        text = Path(path).read_text(encoding="utf-8-sig")
    except UnicodeDecodeError as exc:
        raise TraceFileError(
            f"expected UTF-8 text, found byte {exc.object[exc.start]:#04x}",
            source=src,
            key=f"byte {exc.start}",
        ) from None
    lines = text.splitlines()
    if not lines or not lines[0].strip():
        raise TraceFileError(
            "expected a header row of column names, found an empty first line",
            source=src,
            key="line 1",
        )
    names = [name.strip() for name in lines[0].split(",")]
    seen: set[str] = set()
    for name in names:
        if not name:
            raise TraceFileError(
                "expected a column name, found an empty one in the header", source=src, key="line 1"
            )
        if name in seen:
            raise TraceFileError("expected each column once, found it twice", source=src, key=name)
        seen.add(name)
    missing = [name for name in TRACE_COLUMNS if name not in seen]
    if missing:
        raise TraceFileError(
            f"expected a trace column {missing[0]!r} in the header, found only {', '.join(names)}",
            source=src,
            key=missing[0],
        )

    if any(line.strip() for line in lines[1:]):
        try:
            table = np.loadtxt(
                _io.StringIO(text),
                delimiter=",",
                skiprows=1,
                ndmin=2,
                dtype=np.float64,
                comments=None,
            )
        except ValueError:
            number, problem = _first_bad_line(lines, len(names))
            raise TraceFileError(
                problem, source=src, key=f"line {number}" if number else ""
            ) from None
        if table.shape[1] != len(names):
            number, problem = _first_bad_line(lines, len(names))
            raise TraceFileError(problem, source=src, key=f"line {number}" if number else "")
    else:
        table = np.empty((0, len(names)), dtype=np.float64)
    columns = {name: np.ascontiguousarray(table[:, i]) for i, name in enumerate(names)}
    return Trace(columns=columns)


# --------------------------------------------------------------------------------------------
# Summary JSON
# --------------------------------------------------------------------------------------------


def _jsonable(value: Any, where: str) -> Any:
    """Plain JSON value: numpy scalars and arrays unwrapped, non-finite floats as null."""
    if value is None or isinstance(value, str | bool):
        return value
    if isinstance(value, np.bool_):
        return bool(value)
    if isinstance(value, int | np.integer):
        return int(value)
    if isinstance(value, float | np.floating):
        x = float(value)
        return x if math.isfinite(x) else None
    if isinstance(value, Path):
        return str(value)
    if isinstance(value, Mapping):
        return {str(k): _jsonable(v, f"{where}.{k}") for k, v in value.items()}
    if isinstance(value, list | tuple | np.ndarray):
        return [_jsonable(v, f"{where}[{i}]") for i, v in enumerate(value)]
    raise TypeError(f"summary key {where!r}: cannot write a {type(value).__name__} to JSON")


def summary_json_text(summary: Mapping[str, Any]) -> str:
    """The text :func:`write_summary_json` writes.

    Parameters
    ----------
    summary : mapping
        Scalar results (SI numbers), keyed as in ``summary.json``.

    Returns
    -------
    str
        Indented JSON object with sorted keys, a ``"caution"`` key, and a final newline.
    """
    data = {str(k): _jsonable(v, str(k)) for k, v in summary.items()}
    data["caution"] = CAUTION
    return json.dumps(data, sort_keys=True, indent=2, allow_nan=False, ensure_ascii=False) + "\n"


def write_summary_json(summary: Mapping[str, Any], path: str | Path) -> Path:
    """Write a run summary as JSON, atomically.

    Parameters
    ----------
    summary : mapping
        Scalar results keyed as in ``summary.json`` (SI numbers: ``peak_current_A`` [A],
        ``i2t_A2s`` [A^2*s], ``energy_*_J`` [J], ...). numpy scalars and arrays are accepted.
    path : str or Path
        Target file; its directory must exist.

    Returns
    -------
    Path
        The file written.

    Raises
    ------
    TypeError
        A value is not a number, text, bool, None, list or mapping of those.

    Notes
    -----
    Keys are sorted; a ``"caution"`` key carries :data:`~dcsim.results.summary.CAUTION`
    (replacing any given one). JSON has no NaN or infinity, so non-finite numbers are written as
    ``null``.
    """
    text = summary_json_text(summary)  # fails before any file is created
    return atomic_write(path, lambda tmp: tmp.write_text(text, encoding="utf-8"))


# --------------------------------------------------------------------------------------------
# The output set of a run
# --------------------------------------------------------------------------------------------


def _summary_for_file(result: SimulationResult) -> dict[str, Any]:
    """The run summary plus how it was run (without overriding the engine's own keys)."""
    data = dict(result.summary)
    data.setdefault("step_s", result.step_s)
    data.setdefault("record_interval_s", result.record_interval_s)
    data.setdefault("event_times_s", list(result.event_times_s))
    data.setdefault("scenario_source", result.scenario.source)
    return data


def _commit(staged: list[Path], out: Path, staging: Path) -> list[Path]:
    """Rename every staged file into ``out``; on any failure put the previous files back."""
    targets = [out / p.name for p in staged]
    for target in targets:
        if target.is_dir():
            raise IsADirectoryError(
                errno.EISDIR, "is a directory, cannot replace it with a file", str(target)
            )

    # Keep the previous files (hard links: no copy, no moment without a file) for a rollback.
    backups = staging / ".previous"
    backups.mkdir()
    kept: dict[Path, Path] = {}
    for target in targets:
        if target.exists():
            keep = backups / target.name
            try:
                os.link(target, keep)
            except OSError:
                shutil.copy2(target, keep)
            kept[target] = keep

    done: list[Path] = []
    try:
        for new, target in zip(staged, targets, strict=True):
            os.replace(new, target)
            done.append(target)
    except BaseException:
        for target in reversed(done):
            try:
                if target in kept:
                    os.replace(kept[target], target)
                else:
                    target.unlink(missing_ok=True)
            except OSError:  # pragma: no cover - best effort; the first error is the one to show
                pass
        raise
    _fsync_dir(out)
    return targets


def write_chops_csv(chops: np.ndarray, path: str | Path) -> Path:
    """Write the current comparator's log (one row per decay) as CSV, atomically.

    Columns: ``decay_start_s, current_at_start_A, decay_end_s, current_at_end_A`` (an
    unfinished decay has empty end cells).
    """
    names = ["decay_start_s", "current_at_start_A", "decay_end_s", "current_at_end_A"]

    def write(tmp: Path) -> None:
        with open(tmp, "w", encoding="utf-8", newline="\n") as fh:
            fh.write(",".join(names) + "\n")
            for row in chops:
                fh.write(",".join("" if np.isnan(v) else repr(float(v)) for v in row) + "\n")

    return atomic_write(path, write)


def write_outputs(result: SimulationResult, out_dir: str | Path) -> list[Path]:
    """Write all outputs of a run into a directory, all or nothing.

    Files: ``trace.csv`` (:func:`write_trace_csv`), ``summary.json`` (:func:`write_summary_json`
    with ``step_s`` [s], ``record_interval_s`` [s], ``event_times_s`` [s] and
    ``scenario_source`` added unless the summary has them), ``chops.csv`` when the current
    comparator chopped (:func:`write_chops_csv`), and the PNG plots of
    :func:`dcsim.results.plots.save_plots`.

    Parameters
    ----------
    result : SimulationResult
        A finished run.
    out_dir : str or Path
        Output directory; created (with its parents) if missing.

    Returns
    -------
    list of Path
        The files written, in the order above.

    Notes
    -----
    Everything is first written into a hidden staging directory inside ``out_dir``, then each
    file is renamed over its target. Should a rename fail, the files already replaced are put
    back from hard links taken beforehand. On any failure the staging directory is removed, so
    ``out_dir`` holds exactly what it held before; on success it holds the complete new set.
    """
    from dcsim.results.plots import save_plots

    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    staging = Path(tempfile.mkdtemp(prefix=_STAGING_PREFIX, dir=out))
    try:
        staged = [
            write_trace_csv(result.trace, staging / TRACE_FILE),
            write_summary_json(_summary_for_file(result), staging / SUMMARY_FILE),
        ]
        if result.chops.shape[0]:
            staged.append(write_chops_csv(result.chops, staging / CHOPS_FILE))
        staged += save_plots(result, staging)
        return _commit(staged, out, staging)
    finally:
        shutil.rmtree(staging, ignore_errors=True)
