"""The results table of a sweep: written as runs finish, resumable, then CSV and Parquet.

Files in the output folder
--------------------------
``sweep.json``
    The manifest: the plan's fingerprint, the number of runs, the columns and their types, and
    the state (``running`` or ``complete``). Written atomically.
``results.csv``
    One row per finished run. While the sweep runs, rows are appended (one write and flush per
    batch) in the order the runs finish, so an interrupted sweep keeps every finished run; a
    row cut short by a kill is the only damage possible and is dropped on ``--resume``. When
    every run is done the file is rewritten in run order (to a temporary name, then renamed),
    with ``pass`` and ``failed_criteria`` judged by the sweep file's current criteria.
``results.parquet``
    The same table, typed, written (atomically) when every run is done.

Columns: ``run, kind, point``, one per varied key (named as the key, SI), one per metric
(named as the summary key; empty when the run failed or the summary has no value), then
``pass``, ``failed_criteria`` and ``error``. Numbers are written with Python's ``repr`` (the
shortest text that reads back to the same double), so a value read back is bit-for-bit the one
that was run.
"""

from __future__ import annotations

import csv
import io
import json
import math
import os
from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from dcsim.errors import ScenarioError
from dcsim.results.io import atomic_write
from dcsim.sweep.plan import Plan
from dcsim.sweep.spec import Criterion

__all__ = [
    "MANIFEST_FILE",
    "RESULTS_CSV",
    "RESULTS_PARQUET",
    "ResultStore",
    "ResultsTable",
    "judge",
    "read_results",
]

RESULTS_CSV = "results.csv"
RESULTS_PARQUET = "results.parquet"
MANIFEST_FILE = "sweep.json"

_PARQUET_ROWS = 65_536  # rows per Parquet row group (bounded memory when writing)


def judge(
    criteria: Sequence[Criterion], metrics: Sequence[str], values: Sequence[float], error: str
) -> tuple[bool, str]:
    """``(pass, failed_criteria)`` of one run.

    A run passes when it finished without error and every criterion holds; a criterion on a
    metric the run has no value for fails (``"<metric> missing"``).
    """
    if error:
        return False, ""
    where = {m: k for k, m in enumerate(metrics)}
    failed = [c.failure(float(values[where[c.metric]])) for c in criteria]
    failed = [f for f in failed if f]
    return not failed, "; ".join(failed)


def _columns(plan: Plan) -> list[tuple[str, str]]:
    cols = [("run", "int"), ("kind", "str"), ("point", "int")]
    cols += list(zip(plan.keys, plan.key_kinds, strict=True))
    cols += [(m, "float") for m in plan.spec.metrics]
    cols += [("pass", "bool"), ("failed_criteria", "str"), ("error", "str")]
    return cols


def _text(value: Any, kind: str) -> str:
    if kind == "float":
        value = float(value)
        return "" if math.isnan(value) else repr(value)
    if kind == "bool":
        return "true" if value else "false"
    return str(value)


def _parse(text: str, kind: str) -> Any:
    if kind == "float":
        return float(text) if text else math.nan
    if kind == "int":
        return int(text)
    if kind == "bool":
        if text not in ("true", "false"):
            raise ValueError(f"expected true or false, found {text!r}")
        return text == "true"
    return text


def _one_line(text: str) -> str:
    return " ".join(part.strip() for part in str(text).splitlines() if part.strip())


class ResultStore:
    """The output folder of one sweep: manifest, incremental CSV, and the final table.

    Parameters
    ----------
    out_dir : str or Path
        Output folder (made if needed).
    plan : Plan
        The sweep's runs.
    resume : bool
        Continue the sweep already in ``out_dir`` (which must be the same plan); without it,
        ``out_dir`` must not hold a sweep yet.

    Raises
    ------
    ScenarioError
        ``out_dir`` holds a sweep and ``resume`` is false, or holds a different sweep.
    """

    def __init__(self, out_dir: str | Path, plan: Plan, *, resume: bool) -> None:
        self.out_dir = Path(out_dir)
        self.plan = plan
        self.columns = _columns(plan)
        self.names = [c for c, _ in self.columns]
        self.kinds = [k for _, k in self.columns]
        self.csv_path = self.out_dir / RESULTS_CSV
        self.manifest_path = self.out_dir / MANIFEST_FILE
        self.fingerprint = plan.fingerprint()
        self.done = np.zeros(len(plan), dtype=bool)
        self.out_dir.mkdir(parents=True, exist_ok=True)
        held = self.manifest_path.exists() or self.csv_path.exists()
        if held and not resume:
            raise ScenarioError(
                "expected a new output folder (or --resume to continue the sweep in it), "
                "found the results of a sweep there",
                source=str(self.out_dir),
            )
        if held:
            self._reopen()
        else:
            self._write_manifest("running")
            atomic_write(self.csv_path, lambda tmp: tmp.write_text(self._header(), "utf-8"))
        self._fh = open(self.csv_path, "a", encoding="utf-8", newline="")

    # ---------------------------------------------------------------------------- writing

    def _header(self) -> str:
        buf = io.StringIO()
        csv.writer(buf, lineterminator="\n").writerow(self.names)
        return buf.getvalue()

    def _write_manifest(self, status: str, **extra: Any) -> None:
        data = {
            "format": 1,
            "fingerprint": self.fingerprint,
            "sweep": self.plan.spec.source,
            "plan": self.plan.describe(),
            "runs": len(self.plan),
            "columns": [list(c) for c in self.columns],
            "status": status,
            **extra,
        }
        text = json.dumps(data, indent=2) + "\n"
        atomic_write(self.manifest_path, lambda tmp: tmp.write_text(text, "utf-8"))

    def row(self, run: int, metric_values: Sequence[float], error: str) -> list[str]:
        """The CSV fields of one finished run (its values come from the plan)."""
        spec = self.plan.run(run)
        error = _one_line(error)
        ok, failed = judge(self.plan.spec.criteria, self.plan.spec.metrics, metric_values, error)
        values = [run, spec.kind, spec.point, *spec.values, *metric_values, ok, failed, error]
        return [_text(v, k) for v, k in zip(values, self.kinds, strict=True)]

    def append(self, results: Sequence[tuple[int, Sequence[float], str]]) -> None:
        """Record finished runs ``(run, metric values, error text)``: one write, flushed."""
        buf = io.StringIO()
        writer = csv.writer(buf, lineterminator="\n")
        for run, values, error in results:
            if self.done[run]:
                continue  # never twice (a resent batch, say)
            writer.writerow(self.row(run, values, error))
            self.done[run] = True
        self._fh.write(buf.getvalue())
        self._fh.flush()

    def close(self) -> None:
        """Close the incremental file (rows stay as written)."""
        if not self._fh.closed:
            self._fh.close()

    # ---------------------------------------------------------------------------- resuming

    def _reopen(self) -> None:
        try:
            manifest = json.loads(self.manifest_path.read_text("utf-8"))
        except (OSError, ValueError):
            raise ScenarioError(
                f"expected a readable {MANIFEST_FILE} beside {RESULTS_CSV} to resume from, "
                "found none or a damaged one; use a new output folder",
                source=str(self.out_dir),
            ) from None
        if manifest.get("fingerprint") != self.fingerprint:
            raise ScenarioError(
                "expected the same sweep as the one in this folder to resume it, found a "
                f"different plan (the sweep file, its base scenario or its metrics changed "
                f"since {manifest.get('sweep', 'it')} was started there); use a new output folder",
                source=str(self.out_dir),
            )
        if not self.csv_path.exists():
            atomic_write(self.csv_path, lambda tmp: tmp.write_text(self._header(), "utf-8"))
            return
        # Keep the complete, readable rows, each run once; rewrite the file with just those.
        kept = []
        with open(self.csv_path, encoding="utf-8", newline="") as fh:
            header = fh.readline()
            if header != self._header():
                raise ScenarioError(
                    f"expected the columns of this sweep in {RESULTS_CSV}, found others; use a "
                    "new output folder",
                    source=str(self.out_dir),
                )
            for line in fh:
                fields = self._good_fields(line)
                if fields is None:
                    continue
                run = int(fields[0])
                if not self.done[run]:
                    self.done[run] = True
                    kept.append(line)

        def writer(tmp: Path) -> None:
            with open(tmp, "w", encoding="utf-8", newline="") as out:
                out.write(self._header())
                out.writelines(kept)

        atomic_write(self.csv_path, writer)
        self._write_manifest("running")

    def _good_fields(self, line: str) -> list[str] | None:
        """The fields of a complete row of this table, or ``None`` (torn or foreign)."""
        if not line.endswith("\n"):
            return None
        try:
            fields = next(csv.reader([line]))
        except (csv.Error, StopIteration):
            return None
        if len(fields) != len(self.names):
            return None
        try:
            for text, kind in zip(fields, self.kinds, strict=True):
                _parse(text, kind)
            run = int(fields[0])
        except ValueError:
            return None
        return fields if 0 <= run < len(self.plan) else None

    @property
    def pending(self) -> np.ndarray:
        """Run numbers not finished yet, in order."""
        return np.flatnonzero(~self.done)

    # ---------------------------------------------------------------------------- finishing

    def finish(self, **extra: Any) -> list[Path]:
        """Rewrite the table in run order with the current criteria; write the Parquet file.

        Returns
        -------
        list of Path
            ``results.csv``, ``results.parquet`` and ``sweep.json``.
        """
        self.close()
        offsets = np.full(len(self.plan), -1, dtype=np.int64)
        with open(self.csv_path, "rb") as fh:
            fh.readline()
            while True:
                at = fh.tell()
                line = fh.readline()
                if not line:
                    break
                fields = self._good_fields(line.decode("utf-8"))
                if fields is not None and offsets[int(fields[0])] < 0:
                    offsets[int(fields[0])] = at
        criteria, metrics = self.plan.spec.criteria, self.plan.spec.metrics
        first_metric = self.names.index("pass") - len(metrics)
        i_pass = self.names.index("pass")

        def rows() -> Iterator[list[str]]:
            with open(self.csv_path, "rb") as fh:
                for at in offsets[offsets >= 0]:
                    fh.seek(int(at))
                    fields = next(csv.reader([fh.readline().decode("utf-8")]))
                    values = [_parse(t, "float") for t in fields[first_metric:i_pass]]
                    ok, failed = judge(criteria, metrics, values, fields[-1])
                    fields[i_pass] = _text(ok, "bool")
                    fields[i_pass + 1] = failed
                    yield fields

        def write_csv(tmp: Path) -> None:
            with open(tmp, "w", encoding="utf-8", newline="") as out:
                writer = csv.writer(out, lineterminator="\n")
                writer.writerow(self.names)
                writer.writerows(rows())

        atomic_write(self.csv_path, write_csv)
        parquet = self.out_dir / RESULTS_PARQUET
        atomic_write(parquet, lambda tmp: _csv_to_parquet(self.csv_path, tmp, self.columns))
        self._write_manifest("complete", **extra)
        return [self.csv_path, parquet, self.manifest_path]


# --------------------------------------------------------------------------------------------
# Parquet and reading back
# --------------------------------------------------------------------------------------------


def _arrow_types(columns: Sequence[tuple[str, str]]):
    import pyarrow as pa

    kinds = {"int": pa.int64(), "float": pa.float64(), "bool": pa.bool_(), "str": pa.string()}
    return pa.schema([(name, kinds[kind]) for name, kind in columns])


def _csv_to_parquet(csv_path: Path, target: Path, columns: Sequence[tuple[str, str]]) -> None:
    """Stream a results CSV into a Parquet file, a row group at a time."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    schema = _arrow_types(columns)
    kinds = [k for _, k in columns]
    with (
        open(csv_path, encoding="utf-8", newline="") as fh,
        pq.ParquetWriter(target, schema) as writer,
    ):
        reader = csv.reader(fh)
        next(reader)
        chunk: list[list[Any]] = [[] for _ in columns]

        def flush() -> None:
            arrays = [pa.array(c, type=schema.field(i).type) for i, c in enumerate(chunk)]
            writer.write_table(pa.Table.from_arrays(arrays, schema=schema))
            for c in chunk:
                c.clear()

        for fields in reader:
            for c, text, kind in zip(chunk, fields, kinds, strict=True):
                c.append(_parse(text, kind))
            if len(chunk[0]) >= _PARQUET_ROWS:
                flush()
        if chunk[0]:
            flush()


@dataclass(frozen=True)
class ResultsTable(Mapping):
    """A sweep's table as numpy columns (a read-only mapping ``name -> array``).

    Float columns are float64 (NaN where a run has no value), ``run``/``point`` int64,
    ``pass`` and switch keys bool, text columns object arrays of str.

    Attributes
    ----------
    columns : dict of str to numpy.ndarray
    kinds : dict of str to str
        ``"int"``, ``"float"``, ``"bool"`` or ``"str"`` per column.
    """

    columns: Mapping[str, np.ndarray]
    kinds: Mapping[str, str]

    def __getitem__(self, name: str) -> np.ndarray:
        try:
            return self.columns[name]
        except KeyError:
            raise KeyError(f"no column {name!r}; columns are {list(self.columns)}") from None

    def __iter__(self):
        return iter(self.columns)

    def __len__(self) -> int:
        return len(self.columns)

    @property
    def rows(self) -> int:
        """Number of runs in the table."""
        return len(self.columns["run"])


_NUMPY = {"int": np.int64, "float": np.float64, "bool": bool, "str": object}


def read_results(out_dir: str | os.PathLike[str]) -> ResultsTable:
    """Read a sweep's table from its output folder (Parquet when written, else the CSV).

    Parameters
    ----------
    out_dir : str or os.PathLike
        The folder given to ``dcsim sweep --out``.

    Returns
    -------
    ResultsTable

    Raises
    ------
    ScenarioError
        The folder holds no sweep (no ``sweep.json``), or its files cannot be read.
    """
    folder = Path(out_dir)
    try:
        manifest = json.loads((folder / MANIFEST_FILE).read_text("utf-8"))
        columns = [(str(n), str(k)) for n, k in manifest["columns"]]
    except (OSError, ValueError, KeyError, TypeError):
        raise ScenarioError(
            f"expected a sweep output folder with a readable {MANIFEST_FILE}, found none",
            source=str(folder),
        ) from None
    kinds = dict(columns)
    parquet = folder / RESULTS_PARQUET
    if manifest.get("status") == "complete" and parquet.exists():
        import pyarrow.parquet as pq

        table = pq.read_table(parquet)
        data = {}
        for name, kind in columns:
            col = table.column(name)
            if kind == "str":
                data[name] = np.array(col.to_pylist(), dtype=object)
            else:
                data[name] = np.asarray(col.to_numpy(zero_copy_only=False), dtype=_NUMPY[kind])
        return ResultsTable(data, kinds)
    lists: list[list[Any]] = [[] for _ in columns]
    seen: set[int] = set()
    with open(folder / RESULTS_CSV, encoding="utf-8", newline="") as fh:
        reader = csv.reader(fh)
        next(reader, None)
        for fields in reader:
            if len(fields) != len(columns):
                continue  # a row cut short by a kill
            try:
                parsed = [_parse(t, k) for t, (_, k) in zip(fields, columns, strict=True)]
            except ValueError:
                continue
            if parsed[0] in seen:
                continue
            seen.add(parsed[0])
            for c, v in zip(lists, parsed, strict=True):
                c.append(v)
    order = np.argsort(np.asarray(lists[0], dtype=np.int64), kind="stable")
    data = {}
    for (name, kind), values in zip(columns, lists, strict=True):
        arr = np.array(values, dtype=_NUMPY[kind]) if values else np.array([], _NUMPY[kind])
        data[name] = arr[order]
    return ResultsTable(data, kinds)
