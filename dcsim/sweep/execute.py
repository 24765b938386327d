"""Running a sweep: batches of runs on a local process pool or a Dask cluster.

:func:`run_sweep` ties the parts together: the plan (:mod:`dcsim.sweep.plan`), the results
folder (:mod:`dcsim.sweep.store`), the executor, the progress bar and the report
(:mod:`dcsim.sweep.report`).

Execution
---------
Runs travel in batches (:func:`run_batch`: the base scenario, a list of ``(run, changes)`` and
the metric names), sized from the time of one run of the base scenario so that a batch takes
about :data:`TARGET_BATCH_S` and the per-task cost (pickling, a round trip) stays small. At
most two batches per worker are in flight, so memory does not grow with the number of runs.

- ``workers = 1``: the batches run in this process, one after the other.
- ``workers > 1``: a :class:`concurrent.futures.ProcessPoolExecutor`. On Linux, while this
  process runs no other thread, the workers are forked after the base scenario has run once
  here, so they start with the compiled kernels in memory; otherwise they are started fresh
  (forkserver or spawn) and load the kernels from numba's on-disk cache (``cache=True``), which
  every process of the checkout shares.
- ``scheduler = "tcp://HOST:PORT"``: the same batches go to a :mod:`dask.distributed`
  cluster through a :class:`distributed.Client` (its workers must be able to import dcsim).

Every run is :func:`dcsim.simulate` on ``base.with_changes(changes)``, so a row of the table is
exactly what that scenario gives when run alone. A run that raises is recorded with its error
text and the sweep goes on.
"""

from __future__ import annotations

import difflib
import math
import multiprocessing
import numbers
import os
import signal
import sys
import threading
import time
from collections.abc import Iterator, Sequence
from concurrent.futures import FIRST_COMPLETED, Future, ProcessPoolExecutor, wait
from concurrent.futures.process import BrokenProcessPool
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from dcsim.errors import DcsimError, ScenarioError, SimulationError
from dcsim.scenario.schema import Scenario
from dcsim.sweep.plan import Plan
from dcsim.sweep.spec import SweepSpec, load_sweep
from dcsim.sweep.store import ResultStore

__all__ = [
    "CONFIRM_ABOVE_RUNS",
    "ClusterError",
    "SweepOutcome",
    "metric_value",
    "run_batch",
    "run_sweep",
]

CONFIRM_ABOVE_RUNS = 10_000
"""A sweep of more runs than this needs ``confirm=True`` (``--yes`` on the command line)."""

TARGET_BATCH_S = 0.5
"""Wanted wall time of one batch [s]."""

MAX_BATCH = 256
"""Most runs in one batch."""

CONNECT_TIMEOUT_S = 10.0
"""How long to try to reach a Dask scheduler [s]."""

Item = tuple[int, dict[str, Any]]
Result = tuple[int, tuple[float, ...], str]


class ClusterError(DcsimError, RuntimeError):
    """The Dask scheduler cannot be reached, or the cluster lost a batch."""


# --------------------------------------------------------------------------------------------
# The work of one task
# --------------------------------------------------------------------------------------------


def metric_value(summary: Any, name: str) -> float:
    """A summary value as a float: numbers as they are, switches 0/1, a missing value NaN."""
    value = summary.get(name) if hasattr(summary, "get") else None
    if value is None:
        return math.nan
    if isinstance(value, bool | np.bool_):
        return 1.0 if value else 0.0
    if isinstance(value, numbers.Real):
        return float(value)
    return math.nan


def _error_text(exc: BaseException) -> str:
    text = " ".join(str(exc).split())
    if isinstance(exc, DcsimError):
        return text or type(exc).__name__
    return f"{type(exc).__name__}: {text}" if text else type(exc).__name__


def run_batch(base: Scenario, items: Sequence[Item], metrics: Sequence[str]) -> list[Result]:
    """Run a batch of a sweep: ``simulate(base.with_changes(changes))`` for each item.

    Parameters
    ----------
    base : Scenario
        The sweep's base scenario (with its fixed changes applied).
    items : sequence of (int, dict)
        ``(run number, {dotted key: value [SI]})``.
    metrics : sequence of str
        Summary keys to return.

    Returns
    -------
    list of (int, tuple of float, str)
        ``(run, metric values, error text)`` per item; a run that raised has NaN values and
        its one-line error text, the others ``""``.
    """
    from dcsim.engine.run import simulate

    out: list[Result] = []
    for run, changes in items:
        try:
            scenario = base.with_changes(changes) if changes else base
            summary = simulate(scenario).summary
            out.append((run, tuple(metric_value(summary, m) for m in metrics), ""))
        except Exception as exc:  # noqa: BLE001 - recorded in the table; the sweep goes on
            out.append((run, (math.nan,) * len(metrics), _error_text(exc)))
    return out


# --------------------------------------------------------------------------------------------
# Executors: each yields the results of batches as they finish
# --------------------------------------------------------------------------------------------


def _worker_init() -> None:
    """In each pool worker: leave Ctrl-C to the parent, and exit if the parent dies."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    parent = os.getppid()

    def watch() -> None:
        while True:
            time.sleep(1.0)
            if os.getppid() != parent:
                os._exit(1)

    threading.Thread(target=watch, name="dcsim-sweep-parent-watch", daemon=True).start()


def _pool_context():
    """fork on Linux while this process runs one thread; else forkserver or spawn."""
    methods = multiprocessing.get_all_start_methods()
    linux = sys.platform.startswith("linux")
    if linux and "fork" in methods and threading.active_count() == 1:
        return multiprocessing.get_context("fork")
    if "forkserver" in methods:
        ctx = multiprocessing.get_context("forkserver")
        ctx.set_forkserver_preload(["dcsim.sweep.execute", "dcsim.engine.run_bridge"])
        return ctx
    return multiprocessing.get_context("spawn")


class _Inline:
    """Batches run one after the other in this process."""

    slots = 1

    def __init__(self, base: Scenario, metrics: Sequence[str]) -> None:
        self.base, self.metrics = base, tuple(metrics)

    def start(self, batches: Iterator[list[Item]]) -> None:
        self.batches = batches

    def results(self) -> Iterator[list[Result]]:
        for items in self.batches:
            yield run_batch(self.base, items, self.metrics)

    def close(self, *, abort: bool) -> None:
        pass


class _LocalPool:
    """A process pool with at most two batches per worker in flight."""

    def __init__(self, base: Scenario, metrics: Sequence[str], workers: int) -> None:
        self.base, self.metrics, self.slots = base, tuple(metrics), workers
        self.pool = ProcessPoolExecutor(
            max_workers=workers, mp_context=_pool_context(), initializer=_worker_init
        )
        self.in_flight: set[Future] = set()

    def _submit(self) -> bool:
        items = next(self.batches, None)
        if items is None:
            return False
        self.in_flight.add(self.pool.submit(run_batch, self.base, items, self.metrics))
        return True

    def start(self, batches: Iterator[list[Item]]) -> None:
        self.batches = batches
        while len(self.in_flight) < 2 * self.slots and self._submit():
            pass

    def results(self) -> Iterator[list[Result]]:
        while self.in_flight:
            done, self.in_flight = wait(self.in_flight, return_when=FIRST_COMPLETED)
            for fut in done:
                try:
                    result = fut.result()
                except BrokenProcessPool:
                    raise SimulationError(
                        "a worker process of the sweep stopped unexpectedly (out of memory, or "
                        "killed); the finished runs are kept, --resume runs the rest"
                    ) from None
                self._submit()
                yield result

    def close(self, *, abort: bool) -> None:
        if abort:
            for fut in self.in_flight:
                fut.cancel()
            for proc in list(getattr(self.pool, "_processes", {}).values()):
                proc.terminate()
        self.pool.shutdown(wait=True, cancel_futures=abort)


class _Dask:
    """The same batches on a dask.distributed cluster."""

    def __init__(self, base: Scenario, metrics: Sequence[str], address: str) -> None:
        try:
            from distributed import Client
        except ImportError:  # pragma: no cover - a declared dependency
            raise ClusterError(
                "--scheduler needs dask.distributed: pip install 'dask[distributed]'"
            ) from None
        try:
            self.client = Client(address, timeout=CONNECT_TIMEOUT_S, set_as_default=False)
        except (OSError, TimeoutError, ValueError) as err:
            raise ClusterError(
                f"cannot reach the Dask scheduler at {address!r} ({' '.join(str(err).split())})"
            ) from None
        self.metrics = tuple(metrics)
        self.slots = max(1, sum(self.client.nthreads().values()))
        self.base = self.client.scatter(base, broadcast=True)
        self.address = address

    def _submit(self) -> bool:
        items = next(self.batches, None)
        if items is None:
            return False
        fut = self.client.submit(run_batch, self.base, items, self.metrics, pure=False)
        if self.queue is None:
            self.first.append(fut)
        else:
            self.queue.add(fut)
        return True

    def start(self, batches: Iterator[list[Item]]) -> None:
        from distributed import as_completed

        self.batches = batches
        self.queue = None
        self.first: list = []
        while len(self.first) < 2 * self.slots and self._submit():
            pass
        # this client is not the default one: as_completed is given its event loop
        self.queue = as_completed(self.first, loop=self.client.loop)

    def results(self) -> Iterator[list[Result]]:
        for fut in self.queue:
            try:
                result = fut.result()
            except Exception as err:  # noqa: BLE001 - a lost worker, a failed transfer
                raise ClusterError(
                    f"the Dask cluster at {self.address!r} lost a batch ({type(err).__name__}: "
                    f"{' '.join(str(err).split())}); the finished runs are kept, --resume runs "
                    "the rest"
                ) from None
            fut.release()
            self._submit()
            yield result

    def close(self, *, abort: bool) -> None:
        try:
            if abort and getattr(self, "queue", None) is not None:
                self.client.cancel(list(self.queue.futures))
            elif abort and getattr(self, "first", None):
                self.client.cancel(self.first)
        finally:
            self.client.close()


# --------------------------------------------------------------------------------------------
# The sweep
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class SweepOutcome:
    """What :func:`run_sweep` did.

    Attributes
    ----------
    out_dir : Path
        The output folder.
    runs : int
        Runs in the plan.
    done_before : int
        Runs already in the folder when this call started (``resume``).
    executed : numpy.ndarray
        Run numbers executed by this call, in the order they were recorded.
    complete : bool
        Whether every run of the plan is now in the table (then the CSV is in run order and
        the Parquet file and the report are written).
    failed : int
        Runs in the table that raised an error.
    passed : int
        Runs in the table that finished and met every criterion.
    files : list of Path
        Files written (when complete).
    report : object
        The :class:`~dcsim.sweep.report.SweepReport` (when complete), else ``None``.
    plan : str
        The plan in words (``"3 grid points x (1 nominal + 8 corners) = 27 runs"``).
    """

    out_dir: Path
    runs: int
    done_before: int
    executed: np.ndarray
    complete: bool
    failed: int
    passed: int
    files: list[Path] = field(default_factory=list)
    report: Any = None
    plan: str = ""


def _default_workers() -> int:
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # pragma: no cover - not on Linux
        return max(1, os.cpu_count() or 1)


def _probe(spec: SweepSpec) -> float:
    """Run the base scenario once: check the metric names against its summary, and return the
    wall time of one run [s] (of a second run when the first also loaded the kernels)."""
    from dcsim.engine.run import simulate

    start = time.perf_counter()
    try:
        summary = simulate(spec.base).summary
    except SimulationError:
        return time.perf_counter() - start  # the base fails; the runs will say why
    elapsed = time.perf_counter() - start
    if elapsed < 1.0:
        start = time.perf_counter()
        simulate(spec.base)
        elapsed = time.perf_counter() - start
    check_metrics(spec, summary)
    return elapsed


def check_metrics(spec: SweepSpec, summary: Any) -> None:
    """Every metric of the sweep must be a number (or switch, or empty) in ``summary``.

    Raises
    ------
    ScenarioError
        Naming the sweep file and ``metrics[i]`` (or ``criteria.<name>``), with the closest
        summary key.
    """
    numeric = sorted(
        k for k, v in summary.items() if v is None or isinstance(v, bool | numbers.Real | np.bool_)
    )
    listed = list(spec.metrics)
    criteria = {c.metric for c in spec.criteria}
    for i, name in enumerate(listed):
        where = f"criteria.{name}" if name in criteria else f"metrics[{i}]"
        if name not in summary:
            close = difflib.get_close_matches(name, numeric, n=1)
            hint = f"did you mean '{close[0]}'?" if close else "keys are " + ", ".join(numeric)
            raise ScenarioError(
                f"unknown summary key '{name}' (not in the base scenario's summary); {hint}",
                source=spec.source,
                key=where,
            )
        if name not in numeric:
            raise ScenarioError(
                f"expected a summary key that holds a number, found '{name}', which holds "
                f"{type(summary[name]).__name__} values",
                source=spec.source,
                key=where,
            )


def _batches(plan: Plan, pending: np.ndarray, size: int) -> Iterator[list[Item]]:
    for start in range(0, len(pending), size):
        yield [(int(r), plan.changes(int(r))) for r in pending[start : start + size]]


def _batch_size(pending: int, run_s: float, slots: int) -> int:
    by_time = max(1, round(TARGET_BATCH_S / max(run_s, 1e-4)))
    by_balance = max(1, math.ceil(pending / (4 * slots)))
    return max(1, min(by_time, by_balance, MAX_BATCH))


def _progress_bar(total: int, initial: int, progress: bool | None, label: str):
    """A tqdm bar (rate and time left) on stderr; only on a terminal unless asked."""
    from tqdm import tqdm

    class Bar(tqdm):
        # No monitor thread: it would keep the plots' pool from forking (see _pool_context),
        # and the bar is updated after every batch anyway.
        monitor_interval = 0

    return Bar(
        total=total,
        initial=initial,
        unit="run",
        desc=label,
        file=sys.stderr,
        disable=None if progress is None else not progress,  # None: only on a terminal
        smoothing=0.1,
        mininterval=0.25,
        dynamic_ncols=True,
    )


def run_sweep(
    sweep: SweepSpec | str | os.PathLike[str],
    out_dir: str | os.PathLike[str],
    *,
    workers: int | None = None,
    scheduler: str | None = None,
    resume: bool = False,
    confirm: bool = False,
    progress: bool | None = None,
    max_runs: int | None = None,
    report: bool = True,
) -> SweepOutcome:
    """Run a sweep and write its table (and, when complete, its report).

    Parameters
    ----------
    sweep : SweepSpec or path
        A checked sweep, or a sweep file to read.
    out_dir : str or os.PathLike
        Output folder (see :mod:`dcsim.sweep.store` for its files).
    workers : int, optional
        Local processes (default: every CPU this process may use; 1 runs in this process).
    scheduler : str, optional
        Address of a Dask scheduler (``"tcp://HOST:8786"``); the batches go there instead.
    resume : bool
        Continue the sweep in ``out_dir``, running only the runs not in its table yet.
    confirm : bool
        Allow more than :data:`CONFIRM_ABOVE_RUNS` runs.
    progress : bool, optional
        Show a progress bar on stderr (default: only when stderr is a terminal).
    max_runs : int, optional
        Stop after this many runs (the rest can be run later with ``resume``).
    report : bool
        Write the report (worst cases, statistics, plots, traces) when the sweep is complete.

    Returns
    -------
    SweepOutcome

    Raises
    ------
    ScenarioError
        A bad sweep file or base scenario, a metric its summary lacks, too many runs without
        ``confirm``, or an output folder that holds another sweep.
    ClusterError
        The scheduler cannot be reached or lost a batch.
    SimulationError
        A worker process died (the finished runs are kept).
    """
    spec = sweep if isinstance(sweep, SweepSpec) else load_sweep(sweep)
    plan = Plan(spec)
    n = len(plan)
    if n > CONFIRM_ABOVE_RUNS and not confirm:
        raise ScenarioError(
            f"expected at most {CONFIRM_ABOVE_RUNS} runs without confirmation, found "
            f"{plan.describe()}; confirm with --yes (confirm=True in Python)",
            source=spec.source,
        )
    for i, item in enumerate(spec.traces):
        if isinstance(item, int) and item >= n:
            raise ScenarioError(
                f"expected a run number below {n} (the runs are numbered from 0), found {item}",
                source=spec.source,
                key=f"traces[{i}]",
            )
    if workers is not None and (isinstance(workers, bool) or workers < 1):
        raise ScenarioError(f"expected at least 1 worker, found {workers!r}", key="--workers")
    if max_runs is not None and max_runs < 0:
        raise ScenarioError(f"expected max_runs of 0 or more, found {max_runs}")
    _precheck_out_dir(Path(out_dir), resume)

    run_s = _probe(spec)  # in this process, before any worker is forked
    store = ResultStore(out_dir, plan, resume=resume)
    pending = store.pending
    done_before = n - len(pending)
    if max_runs is not None:
        pending = pending[:max_runs]

    n_workers = workers if workers is not None else _default_workers()
    if scheduler:
        executor: _Inline | _LocalPool | _Dask = _Dask(spec.base, spec.metrics, scheduler)
    elif n_workers == 1 or len(pending) <= 1:
        executor = _Inline(spec.base, spec.metrics)
    else:
        executor = _LocalPool(spec.base, spec.metrics, min(n_workers, len(pending)))
    size = _batch_size(len(pending), run_s, executor.slots)
    executed: list[int] = []
    abort = True
    bar = None
    try:
        executor.start(_batches(plan, pending, size))
        bar = _progress_bar(n, done_before, progress, Path(spec.source).name)
        for results in executor.results():
            store.append(results)
            executed.extend(r for r, _, _ in results)
            bar.update(len(results))
        abort = False
    finally:
        if bar is not None:
            bar.close()
        store.close()
        executor.close(abort=abort)

    complete = not store.pending.size
    files: list[Path] = []
    summary = None
    if complete:
        files = store.finish()
    from dcsim.sweep.store import read_results

    table = read_results(out_dir)
    failed = int(np.count_nonzero(table["error"] != ""))
    passed = int(np.count_nonzero(table["pass"]))
    if complete and report:
        from dcsim.sweep.report import summarise, write_report, write_traces

        summary = summarise(table, spec, plan)
        drawers = 1 if scheduler else n_workers  # the plots, drawn in parallel
        files += write_report(summary, table, spec, plan, out_dir, workers=drawers)
        files += write_traces(summary, spec, plan, out_dir)
    return SweepOutcome(
        out_dir=Path(out_dir),
        runs=n,
        done_before=done_before,
        executed=np.asarray(executed, dtype=np.int64),
        complete=complete,
        failed=failed,
        passed=passed,
        files=files,
        report=summary,
        plan=plan.describe(),
    )


def _precheck_out_dir(out_dir: Path, resume: bool) -> None:
    """Refuse early (before the probe run) a folder that holds a sweep when not resuming."""
    from dcsim.sweep.store import MANIFEST_FILE, RESULTS_CSV

    if out_dir.exists() and not out_dir.is_dir():
        raise ScenarioError(
            "expected an output folder, found a file", source=str(out_dir), key="--out"
        )
    held = (out_dir / MANIFEST_FILE).exists() or (out_dir / RESULTS_CSV).exists()
    if held and not resume:
        raise ScenarioError(
            "expected a new output folder (or --resume to continue the sweep in it), found "
            "the results of a sweep there",
            source=str(out_dir),
        )
