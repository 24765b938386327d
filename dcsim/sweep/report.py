"""The report of a finished sweep: statistics, worst cases, histograms and scatter plots.

Worst case
----------
The worst run of a metric is the one with its highest value, or its lowest when the metric's
only criterion is a minimum, or when it has no criterion and its name starts with ``min_``
(``min_bus_voltage_V``). With both a minimum and a maximum, the side whose limit is nearer
to the values found (relative to the width of the band) is the worst. Failed runs take no
part.

Files
-----
``report.json``
    Per metric: count, mean, sample standard deviation (``ddof = 1``), minimum, maximum, and
    the worst run with the values of the varied keys that produced it; counts of failed and
    passing runs; the caution line.
``hist_<metric>.png``
    Histogram of the metric over the runs that finished (passing and failing runs stacked when
    there are criteria), with the criteria limits.
``scatter_<metric>.png``
    The metric against each varied key, one panel per key: samples, corners and nominal runs
    by shape, passing and failing runs by colour, the criteria limits dashed.
``traces/run-<n>/trace.csv`` and ``summary.json``
    For the runs named in ``traces`` (``"worst"``: the worst run of each metric), run again
    (``simulate`` is pure, so the trace is that of the run in the table).
"""

from __future__ import annotations

import json
import math
import re
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from dcsim.results.summary import CAUTION
from dcsim.scenario.load import key_spec
from dcsim.sweep.plan import KIND_CORNER, KIND_NOMINAL, KIND_SAMPLE, Plan
from dcsim.sweep.spec import SweepSpec, metric_unit
from dcsim.sweep.store import ResultsTable

__all__ = ["MetricReport", "SweepReport", "summarise", "write_report", "write_traces"]

REPORT_FILE = "report.json"
_MAX_PANELS = 12  # scatter panels per figure (keys beyond are left out)


@dataclass(frozen=True)
class MetricReport:
    """Statistics and the worst run of one metric (values in the metric's SI unit).

    Attributes
    ----------
    metric : str
    count : int
        Runs with a value.
    mean, std, minimum, maximum : float
        Over those runs (``std`` with ``ddof = 1``; NaN with fewer than two values).
    worst : str
        ``"high"`` or ``"low"``: which end is the worst.
    worst_value : float
    worst_run : int
        Run number (``-1`` when no run has a value).
    worst_kind : str
    worst_point : int
    worst_values : dict
        Value of each varied key in the worst run [SI].
    """

    metric: str
    count: int
    mean: float
    std: float
    minimum: float
    maximum: float
    worst: str
    worst_value: float
    worst_run: int
    worst_kind: str = ""
    worst_point: int = -1
    worst_values: dict[str, Any] = field(default_factory=dict)


@dataclass(frozen=True)
class SweepReport:
    """Summary of a finished sweep.

    Attributes
    ----------
    source : str
        The sweep file.
    plan : str
        The plan in words.
    runs, failed, passed : int
        Runs in the table, runs that raised, runs that met every criterion.
    metrics : dict of str to MetricReport
    """

    source: str
    plan: str
    runs: int
    failed: int
    passed: int
    metrics: dict[str, MetricReport]

    def as_dict(self) -> dict[str, Any]:
        """A JSON-ready dict (NaN written as ``None``)."""

        def clean(v: Any) -> Any:
            if isinstance(v, float):
                return v if math.isfinite(v) else None
            if isinstance(v, dict):
                return {k: clean(x) for k, x in v.items()}
            if isinstance(v, list | tuple):
                return [clean(x) for x in v]
            if isinstance(v, np.generic):
                return clean(v.item())
            return v

        data = {
            "sweep": self.source,
            "plan": self.plan,
            "runs": self.runs,
            "failed": self.failed,
            "passed": self.passed,
            "metrics": {k: asdict(m) for k, m in self.metrics.items()},
            "caution": CAUTION,
        }
        return clean(data)


def _direction(spec: SweepSpec, metric: str, values: np.ndarray) -> str:
    limits = [c for c in spec.criteria if c.metric == metric]
    lo = next((c.minimum for c in limits if c.minimum is not None), None)
    hi = next((c.maximum for c in limits if c.maximum is not None), None)
    if lo is not None and hi is not None and values.size:
        width = hi - lo if hi > lo else 1.0
        return "low" if (values.min() - lo) / width < (hi - values.max()) / width else "high"
    if lo is not None:
        return "low"
    if hi is not None:
        return "high"
    return "low" if metric.startswith("min_") else "high"


def summarise(table: ResultsTable, spec: SweepSpec, plan: Plan) -> SweepReport:
    """Statistics and worst cases of a sweep's table.

    Parameters
    ----------
    table : ResultsTable
        From :func:`~dcsim.sweep.store.read_results`.
    spec : SweepSpec
    plan : Plan

    Returns
    -------
    SweepReport
    """
    ok = table["error"] == ""
    reports = {}
    for metric in spec.metrics:
        values = np.asarray(table[metric], dtype=float)
        have = ok & np.isfinite(values)
        v = values[have]
        direction = _direction(spec, metric, v)
        if v.size:
            pick = np.flatnonzero(have)[np.argmax(v) if direction == "high" else np.argmin(v)]
            worst = dict(
                worst_value=float(values[pick]),
                worst_run=int(table["run"][pick]),
                worst_kind=str(table["kind"][pick]),
                worst_point=int(table["point"][pick]),
                worst_values={k: _plain(table[k][pick]) for k in plan.keys},
            )
        else:
            worst = dict(worst_value=math.nan, worst_run=-1)
        reports[metric] = MetricReport(
            metric=metric,
            count=int(v.size),
            mean=float(v.mean()) if v.size else math.nan,
            std=float(v.std(ddof=1)) if v.size > 1 else math.nan,
            minimum=float(v.min()) if v.size else math.nan,
            maximum=float(v.max()) if v.size else math.nan,
            worst=direction,
            **worst,
        )
    return SweepReport(
        source=spec.source,
        plan=plan.describe(),
        runs=table.rows,
        failed=int(np.count_nonzero(~ok)),
        passed=int(np.count_nonzero(table["pass"])),
        metrics=reports,
    )


def _plain(value: Any) -> Any:
    return value.item() if isinstance(value, np.generic) else value


def _file_stem(name: str) -> str:
    return re.sub(r"[^A-Za-z0-9_.-]", "_", name)


def write_report(
    report: SweepReport,
    table: ResultsTable,
    spec: SweepSpec,
    plan: Plan,
    out_dir: str | Path,
    *,
    workers: int = 1,
) -> list[Path]:
    """Write ``report.json`` and the PNG plots into ``out_dir`` (each file atomically).

    Parameters
    ----------
    report : SweepReport
    table : ResultsTable
    spec : SweepSpec
    plan : Plan
    out_dir : str or Path
    workers : int
        Processes drawing the plots (each reads the table from ``out_dir`` itself); 1 draws
        them here.

    Returns
    -------
    list of Path
        The files written.
    """
    from dcsim.results.io import atomic_write

    out = Path(out_dir)
    text = json.dumps(report.as_dict(), indent=2, allow_nan=False) + "\n"
    files = [atomic_write(out / REPORT_FILE, lambda tmp: tmp.write_text(text, "utf-8"))]
    jobs = [(kind, metric) for metric in spec.metrics for kind in ("hist", "scatter")]
    if workers > 1 and len(jobs) > 1:
        from concurrent.futures import ProcessPoolExecutor

        from dcsim.sweep.execute import _pool_context

        with ProcessPoolExecutor(min(workers, len(jobs)), mp_context=_pool_context()) as pool:
            done = list(pool.map(_plot_job, [(out, spec, None, k, m) for k, m in jobs]))
    else:
        done = [_plot_job((out, spec, (table, plan), k, m)) for k, m in jobs]
    return files + [f for f in done if f is not None]


def _plot_job(job) -> Path | None:
    """Draw and save one plot: ``(out_dir, spec, (table, plan) or None, kind, metric)``."""
    from dcsim.results.io import atomic_write
    from dcsim.sweep.store import read_results

    out, spec, given, kind, metric = job
    table, plan = given if given is not None else (read_results(out), Plan(spec))
    if kind == "hist":
        fig = plot_histogram(table, spec, metric)
    else:
        fig = plot_scatter(table, plan, metric)
    if fig is None:
        return None
    target = out / f"{kind}_{_file_stem(metric)}.png"
    return atomic_write(target, lambda tmp: fig.savefig(tmp, format="png"))


def write_traces(report: SweepReport, spec: SweepSpec, plan: Plan, out_dir: str | Path):
    """Run again the runs named in the sweep's ``traces`` and write their trace and summary.

    Returns
    -------
    list of Path
        The files written (runs that fail are left out; the table holds their error).
    """
    from dcsim.engine.run import simulate
    from dcsim.errors import DcsimError
    from dcsim.results.io import write_summary_json, write_trace_csv

    runs: list[int] = []
    for item in spec.traces:
        if item == "worst":
            runs += [m.worst_run for m in report.metrics.values() if m.worst_run >= 0]
        else:
            runs.append(int(item))
    files = []
    for run in sorted(set(runs)):
        try:
            result = simulate(spec.base.with_changes(plan.changes(run)))
        except DcsimError:
            continue
        folder = Path(out_dir) / "traces" / f"run-{run:06d}"
        folder.mkdir(parents=True, exist_ok=True)
        summary = dict(result.summary)
        summary["sweep_run"] = run
        files.append(write_trace_csv(result.trace, folder / "trace.csv"))
        files.append(write_summary_json(summary, folder / "summary.json"))
    return files


# --------------------------------------------------------------------------------------------
# Plots
# --------------------------------------------------------------------------------------------


def _figure(width_in: float, height_in: float):
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width_in, height_in), dpi=120, layout="constrained")
    fig.set_facecolor("white")
    return fig


def plot_histogram(table: ResultsTable, spec: SweepSpec, metric: str):
    """Histogram of a metric over the runs that finished; ``None`` when no run has a value.

    Parameters
    ----------
    table : ResultsTable
    spec : SweepSpec
    metric : str

    Returns
    -------
    matplotlib.figure.Figure or None
    """
    from dcsim.results.plots import _BLUE, _INK, _ORANGE, _PURPLE, _finish, _style

    values = np.asarray(table[metric], dtype=float)
    have = (table["error"] == "") & np.isfinite(values)
    if not have.any():
        return None
    v = values[have]
    passed = np.asarray(table["pass"], dtype=bool)[have]
    span = float(v.max() - v.min())
    bins = int(np.clip(np.ceil(np.sqrt(v.size)), 5, 60)) if span > 0 else 1
    edges = np.linspace(v.min(), v.max(), bins + 1) if span > 0 else bins
    fig = _figure(8.0, 4.2)
    ax = fig.subplots()
    if spec.criteria:
        ax.hist(
            [v[passed], v[~passed]],
            bins=edges,
            stacked=True,
            color=[_BLUE, _ORANGE],
            edgecolor="white",
            linewidth=0.5,
            label=[f"pass ({passed.sum()})", f"fail ({(~passed).sum()})"],
        )
    else:
        ax.hist(
            v, bins=edges, color=_BLUE, edgecolor="white", linewidth=0.5, label=f"runs ({v.size})"
        )
    for c in spec.criteria:
        if c.metric != metric:
            continue
        for side, limit in (("min", c.minimum), ("max", c.maximum)):
            if limit is not None:
                ax.axvline(
                    limit,
                    color=_PURPLE,
                    linestyle=(0, (4, 2)),
                    linewidth=1.2,
                    label=f"{side} {limit:.4g}",
                )
    _style(ax, "runs")
    ax.margins(x=0.02)
    ax.set_xlabel(_with_unit(metric, metric_unit(metric)), color=_INK)
    ax.legend(fontsize=8, frameon=False)
    title = spec.title or Path(spec.source).name
    _finish(fig, f"{title}: {metric} over {v.size} runs")
    return fig


def plot_scatter(table: ResultsTable, plan: Plan, metric: str):
    """A metric against each varied key (one panel per key); ``None`` without values or keys.

    Parameters
    ----------
    table : ResultsTable
    plan : Plan
    metric : str

    Returns
    -------
    matplotlib.figure.Figure or None
    """
    from dcsim.results.plots import _BLUE, _INK, _ORANGE, _PURPLE, _finish, _style

    keys = list(plan.keys)[:_MAX_PANELS]
    values = np.asarray(table[metric], dtype=float)
    have = (table["error"] == "") & np.isfinite(values)
    if not keys or not have.any():
        return None
    cols = min(3, len(keys))
    rows = math.ceil(len(keys) / cols)
    fig = _figure(4.0 * cols, 3.0 * rows + 0.8)
    axes = np.atleast_1d(fig.subplots(rows, cols, squeeze=False)).ravel()
    passed = np.asarray(table["pass"], dtype=bool)
    kind = table["kind"]
    shapes = (
        (KIND_SAMPLE, "o", 10, 0.6),
        (KIND_CORNER, "s", 16, 0.85),
        (KIND_NOMINAL, "D", 22, 1.0),
    )
    for ax, key in zip(axes, keys, strict=False):
        x_all = table[key]
        if plan.key_kinds[plan.keys.index(key)] != "float":
            labels = sorted({str(x) for x in x_all})
            x_all = np.array([labels.index(str(x)) for x in x_all], dtype=float)
            ax.set_xticks(range(len(labels)), labels)
        else:
            ax.locator_params(axis="x", nbins=5)
        x_all = np.asarray(x_all, dtype=float)
        for name, marker, size, alpha in shapes:
            for ok, colour, verdict in ((True, _BLUE, "pass"), (False, _ORANGE, "fail")):
                sel = have & (kind == name) & (passed == ok)
                if sel.any():
                    ax.scatter(
                        x_all[sel],
                        values[sel],
                        s=size,
                        c=colour,
                        marker=marker,
                        alpha=alpha,
                        linewidths=0,
                        label=f"{name}, {verdict}",
                    )
        for c in plan.spec.criteria:
            for limit in (c.minimum, c.maximum):
                if c.metric == metric and limit is not None:
                    ax.axhline(limit, color=_PURPLE, linestyle=(0, (4, 2)), linewidth=1.0)
        _style(ax, _with_unit(metric, metric_unit(metric)))
        ax.margins(x=0.05)
        ax.set_xlabel(_with_unit(key, _key_unit(key)), color=_INK)
    for ax in axes[len(keys) :]:
        ax.set_visible(False)
    axes[0].legend(fontsize=7, frameon=False)
    title = plan.spec.title or Path(plan.spec.source).name
    _finish(fig, f"{title}: {metric} against the varied keys")
    return fig


def _key_unit(key: str) -> str:
    spec = key_spec(key)
    return spec.unit if spec is not None and spec.unit and not spec.unit.startswith("<") else ""


def _with_unit(name: str, unit: str) -> str:
    return f"{name} [{unit}]" if unit and not name.endswith("_" + unit) else name


def format_report(report: SweepReport) -> str:
    """The report as text for the terminal: the caution, the counts, then the worst run of
    each metric."""
    lines = [
        CAUTION,
        "",
        f"{report.plan}: {report.failed} failed, {report.passed} of {report.runs} pass",
        "",
        "worst case of each metric (value, run, kind: the varied values):",
    ]
    width = max((len(m) for m in report.metrics), default=0)
    for m in report.metrics.values():
        if m.worst_run < 0:
            lines.append(f"  {m.metric:<{width}}  no run has a value")
            continue
        where = ", ".join(f"{k} = {_shown(v, _key_unit(k))}" for k, v in m.worst_values.items())
        value = _shown(m.worst_value, metric_unit(m.metric))
        lines.append(
            f"  {m.metric:<{width}}  {m.worst:>4} {value}, run {m.worst_run} ({m.worst_kind})"
            + (f": {where}" if where else "")
        )
    return "\n".join(lines)


def _shown(value: Any, unit: str = "") -> str:
    if isinstance(value, float):
        unit = {"A^2*s": "A²s", "N*m": "N·m", "percent": "%", "N*m/A": "N·m/A"}.get(unit, unit)
        return f"{value:.6g} {unit}".strip()
    return str(value)
