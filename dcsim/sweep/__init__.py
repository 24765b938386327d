"""Sweeps: grids, Monte Carlo tolerances and worst-case corners over a base scenario.

::

    from dcsim.sweep import run_sweep, read_results
    outcome = run_sweep("scenarios/sweeps/pump_fuse_tolerance.toml", "out/pump_sweep")
    table = read_results("out/pump_sweep")        # numpy columns, one row per run
    outcome.report.metrics["peak_fuse_heat_fraction"].worst_values

The rooms: :mod:`~dcsim.sweep.spec` (the sweep file), :mod:`~dcsim.sweep.plan` (numbered runs
and their draws), :mod:`~dcsim.sweep.execute` (batches on a process pool or a Dask cluster),
:mod:`~dcsim.sweep.store` (the incremental, resumable table; CSV and Parquet) and
:mod:`~dcsim.sweep.report` (worst cases, statistics, plots). The names are imported lazily so
that reading a sweep file does not load the engine.
"""

from __future__ import annotations

from importlib import import_module
from typing import TYPE_CHECKING, Any

_LAZY = {
    "SweepSpec": "dcsim.sweep.spec",
    "load_sweep": "dcsim.sweep.spec",
    "load_sweep_text": "dcsim.sweep.spec",
    "Plan": "dcsim.sweep.plan",
    "run_sweep": "dcsim.sweep.execute",
    "SweepOutcome": "dcsim.sweep.execute",
    "CONFIRM_ABOVE_RUNS": "dcsim.sweep.execute",
    "read_results": "dcsim.sweep.store",
    "ResultsTable": "dcsim.sweep.store",
    "SweepReport": "dcsim.sweep.report",
}

__all__ = [
    "CONFIRM_ABOVE_RUNS",
    "Plan",
    "ResultsTable",
    "SweepOutcome",
    "SweepReport",
    "SweepSpec",
    "load_sweep",
    "load_sweep_text",
    "read_results",
    "run_sweep",
]

if TYPE_CHECKING:  # pragma: no cover
    from dcsim.sweep.execute import CONFIRM_ABOVE_RUNS, SweepOutcome, run_sweep
    from dcsim.sweep.plan import Plan
    from dcsim.sweep.report import SweepReport
    from dcsim.sweep.spec import SweepSpec, load_sweep, load_sweep_text
    from dcsim.sweep.store import ResultsTable, read_results


def __getattr__(name: str) -> Any:
    module = _LAZY.get(name)
    if module is None:
        raise AttributeError(f"module 'dcsim.sweep' has no attribute {name!r}")
    return getattr(import_module(module), name)


def __dir__() -> list[str]:
    return __all__
