"""Speed and memory of the dcsim core, printed beside their targets.

Run on request; the default test run leaves this folder out (``--ignore=tests/benchmarks``)::

    python tests/benchmarks/bench_core.py            # the table; --json, --markdown
    python -m pytest tests/benchmarks -s             # the same table, through pytest

Figures
-------
(a) ``dcsim.simulate`` of a 2 s open-loop run recorded every 50 us, against a bare
    numba-compiled RK4 loop over the same two-state equations (4 RK4 sub-steps per record,
    rows stored into a preallocated array). Best of several runs, after a warm-up. Target:
    dcsim within 5x of the bare loop. The largest difference between the two traces is shown.
(b) The same run written "the plain way": a Python loop calling ``scipy.integrate.solve_ivp``
    (its default RK45) once per 50 us record interval, carrying the state, with the loosest
    rtol of a ladder (from solve_ivp's default 1e-3 down) that matches dcsim to <= 1e-6,
    timed over the whole run. Target: dcsim >= 300x faster.
(c) Wall time of the whole ``dcsim demo --out DIR`` process (start-up and imports included) on
    a second call, with the numba cache warm; best of 3. Target: under 3 s.
(d) Peak resident memory (``ru_maxrss``, the whole process, nothing subtracted) of a fresh
    process that runs 60 s recorded every 50 us, started through a small launcher so that the
    count is that process's own (see ``_LAUNCHER``). Target: under 300 MB.

The model, with a load-torque step at 1 s::

    L di/dt = v - R i - K w
    J dw/dt = K i - B w - T_load

The scenario is invented: the PM motor of a small coolant pump, whose impeller takes up
its load when a bypass valve closes at 1 s.

:func:`core_figures` returns every figure as a dict; :func:`format_report` prints it as a
table and :func:`format_markdown` as the README table (``--markdown``). Nothing here asserts
a time or a size: a missed target prints MISS with the figure as measured.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import platform
import shutil
import subprocess
import sys
import tempfile
import time
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

import numpy as np
from numba import njit

import dcsim

# --------------------------------------------------------------------------------------------
# The benchmark scenario: coolant pump motor (invented values)
# --------------------------------------------------------------------------------------------

PUMP = {
    "R": 1.2,  # armature resistance [ohm]
    "L": 2e-3,  # armature inductance [H]
    "K": 0.05,  # torque constant [N*m/A] = back-EMF constant [V*s/rad]
    "J": 1e-4,  # rotor + impeller inertia [kg*m^2]
    "B": 1e-5,  # viscous friction [N*m*s/rad]
    "V": 24.0,  # applied armature voltage [V]
    "T_before": 0.0,  # load torque before the valve closes [N*m]
    "T_after": 0.08,  # load torque once the impeller takes up its load [N*m]
    "t_step": 1.0,  # time of the load step [s]
}
"""Parameters of the benchmark drive [SI]."""

DURATION_S = 2.0
RECORD_S = 50e-6
RK4_SUBSTEPS = 4
MEMORY_DURATION_S = 60.0

TARGET_BARE_RATIO = 5.0  # dcsim time / bare loop time, at most
TARGET_PLAIN_SPEEDUP = 300.0  # plain-way time / dcsim time, at least
TARGET_CLI_S = 3.0  # dcsim demo wall time, below
TARGET_PEAK_MB = 300.0  # peak RSS [MB = 1e6 bytes], below
PLAIN_MATCH = 1e-6  # the plain way must match dcsim this closely (relative)
# rtol ladder for the plain way, loosest first, from solve_ivp's defaults (rtol 1e-3, atol 1e-6);
# atol = rtol * 1e-3 [A, rad/s]. The first that matches dcsim to PLAIN_MATCH is timed.
PLAIN_RTOLS = (1e-3, 1e-4, 1e-5, 1e-6, 1e-7, 1e-8, 1e-9, 1e-10)


def scenario_text(duration_s: float, record_s: float) -> str:
    """The coolant-pump scenario as TOML text, for ``dcsim.load_scenario_text``."""
    p = PUMP
    return f"""\
# Benchmark drive: the PM motor of a small coolant pump (invented values).
[simulation]
duration = "{duration_s!r} s"
record_interval = "{record_s * 1e6!r} us"

[motor]
resistance = "{p["R"]!r} ohm"
inductance = "{p["L"]!r} H"
torque_constant = "{p["K"]!r} N*m/A"
inertia = "{p["J"]!r} kg*m^2"
viscous_friction = "{p["B"]!r} N*m*s/rad"

[load]
torque = "{p["T_before"]!r} N*m"

[supply]
voltage = "{p["V"]!r} V"
resistance = "0 ohm"
capacitance = "0 F"

[control]
mode = "voltage"
voltage = "{p["V"]!r} V"

[[events]]
at = "{p["t_step"]!r} s"
set = {{ "load.torque" = "{p["T_after"]!r} N*m" }}   # the bypass valve closes
"""


# --------------------------------------------------------------------------------------------
# Helpers
# --------------------------------------------------------------------------------------------


def best_of(fn: Callable[[], object], repeats: int) -> tuple[float, list[float]]:
    """Best and all wall times [s] of ``repeats`` calls of ``fn``."""
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return min(times), times


def relative_difference(a: np.ndarray, b: np.ndarray) -> float:
    """max |a - b| / max |b| over the rows (relative to the column's largest magnitude)."""
    scale = float(np.max(np.abs(b)))
    return float(np.max(np.abs(a - b))) / scale if scale > 0.0 else float(np.max(np.abs(a)))


def _trace_difference(
    times: np.ndarray, current: np.ndarray, speed: np.ndarray, tr: Any, rows: int
) -> dict[str, float]:
    """Differences of (current, speed) against the first ``rows`` rows of a dcsim trace."""
    t_ref = np.asarray(tr["time_s"][:rows])
    if times.shape != t_ref.shape or float(np.max(np.abs(times - t_ref))) > 1e-9:
        raise RuntimeError("the compared traces are not on the same time grid")
    d_i = relative_difference(current, np.asarray(tr["current_A"][:rows]))
    d_w = relative_difference(speed, np.asarray(tr["speed_rad_s"][:rows]))
    return {"current": d_i, "speed": d_w, "max": max(d_i, d_w)}


def machine() -> dict[str, Any]:
    """CPU, core count and library versions of this machine."""
    model = ""
    physical: set[tuple[str, str]] = set()
    phys_id = ""
    try:
        with open("/proc/cpuinfo", encoding="utf-8", errors="replace") as fh:
            for line in fh:
                key, _, value = line.partition(":")
                key, value = key.strip().lower(), value.strip()
                if key == "model name" and not model:
                    model = value
                elif key == "physical id":
                    phys_id = value
                elif key == "core id":
                    physical.add((phys_id, value))
    except OSError:
        pass
    import numba
    import scipy

    try:
        usable = len(os.sched_getaffinity(0))
    except AttributeError:  # not on Linux
        usable = os.cpu_count() or 0
    return {
        "cpu": model or platform.processor() or platform.machine(),
        "logical_cpus": os.cpu_count(),
        "usable_cpus": usable,
        "physical_cores": len(physical) or None,
        "platform": platform.platform(),
        "python": platform.python_version(),
        "numpy": np.__version__,
        "numba": numba.__version__,
        "scipy": scipy.__version__,
        "dcsim": dcsim.__version__,
    }


def _verdict(ok: bool) -> str:
    return "PASS" if ok else "MISS"


# --------------------------------------------------------------------------------------------
# (a) dcsim against a bare compiled RK4 loop
# --------------------------------------------------------------------------------------------


@njit(cache=False)
def _bare_rk4(r, ind, k, j, b, v, t_before, t_after, n_step, h_rec, n_sub, out):
    """Classical RK4 over (i, w), ``n_sub`` steps per record; row = (t, i, w).

    Record interval ``row - 1 -> row`` uses ``t_after`` from interval ``n_step`` on, so the load
    step lands on the record instant ``n_step * h_rec``.
    """
    h = h_rec / n_sub
    i = 0.0
    w = 0.0
    out[0, 0] = 0.0
    out[0, 1] = i
    out[0, 2] = w
    for row in range(1, out.shape[0]):
        tl = t_after if row > n_step else t_before
        for _ in range(n_sub):
            k1i = (v - r * i - k * w) / ind
            k1w = (k * i - b * w - tl) / j
            i2 = i + 0.5 * h * k1i
            w2 = w + 0.5 * h * k1w
            k2i = (v - r * i2 - k * w2) / ind
            k2w = (k * i2 - b * w2 - tl) / j
            i3 = i + 0.5 * h * k2i
            w3 = w + 0.5 * h * k2w
            k3i = (v - r * i3 - k * w3) / ind
            k3w = (k * i3 - b * w3 - tl) / j
            i4 = i + h * k3i
            w4 = w + h * k3w
            k4i = (v - r * i4 - k * w4) / ind
            k4w = (k * i4 - b * w4 - tl) / j
            i += h / 6.0 * (k1i + 2.0 * k2i + 2.0 * k3i + k4i)
            w += h / 6.0 * (k1w + 2.0 * k2w + 2.0 * k3w + k4w)
        out[row, 0] = row * h_rec
        out[row, 1] = i
        out[row, 2] = w


def bare_run(duration_s: float = DURATION_S, record_s: float = RECORD_S) -> np.ndarray:
    """The bare loop's trace, shape (rows, 3): time [s], current [A], speed [rad/s]."""
    p = PUMP
    rows = round(duration_s / record_s) + 1
    out = np.empty((rows, 3))
    n_step = round(p["t_step"] / record_s)
    _bare_rk4(
        p["R"], p["L"], p["K"], p["J"], p["B"], p["V"], p["T_before"], p["T_after"],
        n_step, record_s, RK4_SUBSTEPS, out,
    )  # fmt: skip
    return out


def bench_engine_vs_bare(repeats: int = 15) -> tuple[dict[str, Any], Any]:
    """Figure (a); also returns the dcsim result for (b) to compare against."""
    sc = dcsim.load_scenario_text(scenario_text(DURATION_S, RECORD_S))
    t0 = time.perf_counter()
    res = dcsim.simulate(sc)  # warm-up: compiles, or loads numba's cache
    warm_dcsim = time.perf_counter() - t0
    t0 = time.perf_counter()
    bare = bare_run()
    warm_bare = time.perf_counter() - t0

    t_dcsim, all_dcsim = best_of(lambda: dcsim.simulate(sc), repeats)
    t_bare, all_bare = best_of(bare_run, repeats)

    rows = len(res.trace["time_s"])
    if rows != bare.shape[0]:
        raise RuntimeError(f"dcsim stored {rows} rows, the bare loop {bare.shape[0]}")
    diff = _trace_difference(bare[:, 0], bare[:, 1], bare[:, 2], res.trace, rows)
    ratio = t_dcsim / t_bare
    fig = {
        "figure": "dcsim.simulate vs bare numba RK4 loop (2 s, rows every 50 us)",
        "dcsim_s": t_dcsim,
        "bare_s": t_bare,
        "ratio": ratio,
        "target": f"ratio <= {TARGET_BARE_RATIO:g}",
        "pass": ratio <= TARGET_BARE_RATIO,
        "rows": rows,
        "dcsim_step_s": res.step_s,
        "dcsim_steps": int(res.summary["steps"]),
        "bare_step_s": RECORD_S / RK4_SUBSTEPS,
        "bare_steps": (rows - 1) * RK4_SUBSTEPS,
        "dcsim_columns": len(res.trace),
        "bare_columns": 3,
        "max_relative_difference": diff,
        "repeats": repeats,
        "dcsim_median_s": float(np.median(all_dcsim)),
        "bare_median_s": float(np.median(all_bare)),
        "first_call_dcsim_s": warm_dcsim,
        "first_call_bare_s": warm_bare,
    }
    return fig, res


# --------------------------------------------------------------------------------------------
# (b) dcsim against the plain way: solve_ivp once per record interval
# --------------------------------------------------------------------------------------------


def plain_run(span_s: float, rtol: float, atol: float, record_s: float = RECORD_S) -> np.ndarray:
    """The plain way: one ``solve_ivp`` call per record interval, carrying the state.

    Returns the trace, shape (rows, 3): time [s], current [A], speed [rad/s].
    """
    from scipy.integrate import solve_ivp

    p = PUMP
    r, ind, k_t, j, b, v = p["R"], p["L"], p["K"], p["J"], p["B"], p["V"]

    def rhs(t: float, y: np.ndarray, t_load: float) -> list[float]:
        i, w = y
        return [(v - r * i - k_t * w) / ind, (k_t * i - b * w - t_load) / j]

    n = round(span_s / record_s)
    n_step = round(p["t_step"] / record_s)
    out = np.empty((n + 1, 3))
    y = np.zeros(2)
    out[0] = (0.0, y[0], y[1])
    for k in range(n):
        t_load = p["T_after"] if k >= n_step else p["T_before"]
        t1 = (k + 1) * record_s
        sol = solve_ivp(rhs, (k * record_s, t1), y, rtol=rtol, atol=atol, args=(t_load,))
        y = sol.y[:, -1]
        out[k + 1] = (t1, y[0], y[1])
    return out


def bench_plain_scipy(res: Any, dcsim_s: float, span_s: float = DURATION_S) -> dict[str, Any]:
    """Figure (b): time of the plain way at the loosest rtol that matches dcsim to 1e-6.

    ``span_s`` below the full run times a slice from t = 0 and compares per simulated second.
    """
    span_s = min(span_s, DURATION_S)
    rows = round(span_s / RECORD_S) + 1
    plain_run(10 * RECORD_S, 1e-6, 1e-9)  # warm-up: imports scipy.integrate
    ladder = []
    chosen = None
    for rtol in PLAIN_RTOLS:
        atol = rtol * 1e-3
        t0 = time.perf_counter()
        out = plain_run(span_s, rtol, atol)
        elapsed = time.perf_counter() - t0
        diff = _trace_difference(out[:, 0], out[:, 1], out[:, 2], res.trace, rows)
        ladder.append({"rtol": rtol, "atol": atol, "time_s": elapsed, "match": diff["max"]})
        if diff["max"] <= PLAIN_MATCH:
            chosen = ladder[-1]
            break
    if chosen is None:
        chosen = min(ladder, key=lambda e: e["match"])  # report the closest, marked not matched
    # time the chosen tolerance once more; keep the better of the two
    t0 = time.perf_counter()
    plain_run(span_s, chosen["rtol"], chosen["atol"])
    plain_s = min(chosen["time_s"], time.perf_counter() - t0)

    plain_per_sim_s = plain_s / span_s
    dcsim_per_sim_s = dcsim_s / DURATION_S
    speedup = plain_per_sim_s / dcsim_per_sim_s
    matched = chosen["match"] <= PLAIN_MATCH
    full = math.isclose(span_s, DURATION_S)
    return {
        "figure": "dcsim.simulate vs per-interval solve_ivp loop",
        "plain_s": plain_s,
        "plain_span_s": span_s,
        "scaled": not full,
        "plain_per_simulated_s": plain_per_sim_s,
        "dcsim_per_simulated_s": dcsim_per_sim_s,
        "speedup": speedup,
        "target": f"speedup >= {TARGET_PLAIN_SPEEDUP:g}",
        "pass": speedup >= TARGET_PLAIN_SPEEDUP and matched,
        "method": "RK45 (solve_ivp default)",
        "rtol": chosen["rtol"],
        "atol": chosen["atol"],
        "match": chosen["match"],
        "match_target": PLAIN_MATCH,
        "matched": matched,
        "calls": rows - 1,
        "ladder": ladder,
    }


# --------------------------------------------------------------------------------------------
# (c) the command line: dcsim demo, second call
# --------------------------------------------------------------------------------------------


def _dcsim_command() -> list[str]:
    """The ``dcsim`` console script of this interpreter's environment."""
    beside = Path(sys.executable).with_name("dcsim")
    if beside.is_file() and os.access(beside, os.X_OK):
        return [str(beside)]
    found = shutil.which("dcsim")
    if found:
        return [found]
    return [sys.executable, "-m", "dcsim.cli"]


def bench_cli_demo(scratch: Path, repeats: int = 3) -> dict[str, Any]:
    """Figure (c): wall time of ``dcsim demo --out DIR`` as a whole process."""
    cmd = [*_dcsim_command(), "demo", "--out", str(scratch / "demo-out")]

    def once() -> None:
        done = subprocess.run(cmd, capture_output=True, text=True, timeout=300)
        if done.returncode != 0:
            raise RuntimeError(f"{' '.join(cmd)} exited {done.returncode}: {done.stderr.strip()}")

    first_s, _ = best_of(once, 1)  # the first call fills numba's cache if it is cold
    best, all_s = best_of(once, repeats)
    return {
        "figure": "dcsim demo --out DIR, whole process, 2nd+ call",
        "wall_s": best,
        "target": f"< {TARGET_CLI_S:g} s",
        "pass": best < TARGET_CLI_S,
        "command": " ".join(Path(cmd[0]).name if i == 0 else c for i, c in enumerate(cmd)),
        "runs_s": all_s,
        "first_call_s": first_s,
    }


# --------------------------------------------------------------------------------------------
# (d) peak memory of a 60 s run
# --------------------------------------------------------------------------------------------

_MEMORY_CHILD = """\
import json, resource, sys, time
import dcsim
from dcsim.engine.run import simulate  # imports numba, numpy, the engine
sc = dcsim.load_scenario_text(sys.argv[1])
base_kib = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
t0 = time.perf_counter()
res = simulate(sc)
run_s = time.perf_counter() - t0
peak_kib = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
nbytes = sum(res.trace[name].nbytes for name in res.trace)
hwm_kib = None
try:
    with open("/proc/self/status") as fh:
        hwm_kib = next(int(l.split()[1]) for l in fh if l.startswith("VmHWM:"))
except (OSError, StopIteration):
    pass
print(json.dumps({"peak_kib": peak_kib, "base_kib": base_kib, "hwm_kib": hwm_kib, "run_s": run_s,
                  "rows": len(res.trace["time_s"]), "columns": len(res.trace),
                  "trace_bytes": nbytes, "steps": res.summary["steps"]}))
"""

# On Linux a process's ru_maxrss starts from the peak of the process it was exec'd from, so a
# child started straight from this (large) benchmark process would report this process's peak.
# A small launcher process in between starts the measured child with a clean count.
_LAUNCHER = (
    "import subprocess, sys; sys.exit(subprocess.run([sys.executable, *sys.argv[1:]]).returncode)"
)


def bench_memory(duration_s: float = MEMORY_DURATION_S) -> dict[str, Any]:
    """Figure (d): peak RSS of a fresh process running ``duration_s`` at 50 us rows."""
    child = ["-c", _MEMORY_CHILD, scenario_text(duration_s, RECORD_S)]
    cmd = [sys.executable, "-c", _LAUNCHER, *child]
    done = subprocess.run(cmd, capture_output=True, text=True, timeout=600)
    if done.returncode != 0:
        raise RuntimeError(f"memory child exited {done.returncode}: {done.stderr.strip()}")
    got = json.loads(done.stdout.strip().splitlines()[-1])
    peak_mb = got["peak_kib"] * 1024 / 1e6  # Linux reports ru_maxrss in KiB
    return {
        "figure": f"peak RSS, fresh process, {duration_s:g} s run, rows every 50 us",
        "peak_rss_MB": peak_mb,
        "target": f"< {TARGET_PEAK_MB:g} MB",
        "pass": peak_mb < TARGET_PEAK_MB,
        "rss_before_run_MB": got["base_kib"] * 1024 / 1e6,
        "vm_hwm_MB": got["hwm_kib"] * 1024 / 1e6 if got["hwm_kib"] is not None else None,
        "trace_MB": got["trace_bytes"] / 1e6,
        "rows": got["rows"],
        "columns": got["columns"],
        "steps": got["steps"],
        "run_s": got["run_s"],
    }


# --------------------------------------------------------------------------------------------
# All figures
# --------------------------------------------------------------------------------------------


def core_figures(plain_span_s: float = DURATION_S) -> dict[str, Any]:
    """Run every core benchmark and return the figures.

    Parameters
    ----------
    plain_span_s : float
        Simulated time [s] the plain solve_ivp way is timed over, from t = 0 (default: the
        whole 2 s run; a shorter slice is compared per simulated second).

    Returns
    -------
    dict
        ``machine`` (CPU, cores, versions), ``load_average`` (1, 5, 15 min, at start and end),
        ``figures`` with keys ``engine_vs_bare``, ``engine_vs_plain``, ``cli_demo``,
        ``memory`` (each with its measured values, ``target`` and ``pass``), and
        ``elapsed_s``.
    """
    start = time.perf_counter()
    load_start = os.getloadavg()
    scratch = Path(tempfile.mkdtemp(prefix="bench-core-"))
    try:
        bare_fig, res = bench_engine_vs_bare()
        plain_fig = bench_plain_scipy(res, bare_fig["dcsim_s"], plain_span_s)
        cli_fig = bench_cli_demo(scratch)
        mem_fig = bench_memory()
    finally:
        shutil.rmtree(scratch, ignore_errors=True)
    return {
        "machine": machine(),
        "load_average": {"start": list(load_start), "end": list(os.getloadavg())},
        "figures": {
            "engine_vs_bare": bare_fig,
            "engine_vs_plain": plain_fig,
            "cli_demo": cli_fig,
            "memory": mem_fig,
        },
        "elapsed_s": time.perf_counter() - start,
    }


def _ms(x: float) -> str:
    return f"{x * 1e3:.2f} ms"


def format_report(figs: dict[str, Any]) -> str:
    """The figures as a plain-text table with the machine and load."""
    m, f = figs["machine"], figs["figures"]
    a, b, c, d = f["engine_vs_bare"], f["engine_vs_plain"], f["cli_demo"], f["memory"]
    ls, le = figs["load_average"]["start"], figs["load_average"]["end"]
    cores = f"{m['logical_cpus']} logical CPUs ({m['usable_cpus']} usable"
    cores += f", {m['physical_cores']} physical cores)" if m["physical_cores"] else ")"
    lines = [
        "dcsim core benchmarks",
        "=====================",
        f"CPU      : {m['cpu']}",
        f"cores    : {cores}",
        f"software : Python {m['python']}, numpy {m['numpy']}, numba {m['numba']}, "
        f"scipy {m['scipy']}, dcsim {m['dcsim']}",
        f"platform : {m['platform']}",
        "load avg : start {:.2f} {:.2f} {:.2f}, end {:.2f} {:.2f} {:.2f} (1/5/15 min)".format(
            *ls, *le
        ),
        "",
    ]
    rows = [
        (
            "(a) simulate 2 s / bare RK4 loop",
            f"{a['ratio']:.2f}x  ({_ms(a['dcsim_s'])} / {_ms(a['bare_s'])})",
            a["target"],
            _verdict(a["pass"]),
        ),
        (
            "(b) plain solve_ivp loop / simulate",
            f"{b['speedup']:.0f}x  ({b['plain_per_simulated_s']:.3g} s / "
            f"{b['dcsim_per_simulated_s'] * 1e3:.3g} ms per sim. s)",
            b["target"],
            _verdict(b["pass"]),
        ),
        (
            "(c) dcsim demo, whole process",
            f"{c['wall_s']:.2f} s",
            c["target"],
            _verdict(c["pass"]),
        ),
        (
            "(d) peak RSS, 60 s run",
            f"{d['peak_rss_MB']:.0f} MB  (trace {d['trace_MB']:.0f} MB)",
            d["target"],
            _verdict(d["pass"]),
        ),
    ]
    head = ("figure", "measured", "target", "")
    widths = [max(len(r[k]) for r in [head, *rows]) for k in range(4)]
    fmt = "  ".join(f"{{:<{w}}}" for w in widths)
    lines.append(fmt.format(*head).rstrip())
    lines.append("  ".join("-" * w for w in widths))
    lines += [fmt.format(*r) for r in rows]
    da = a["max_relative_difference"]
    lines += [
        "",
        "(a) dcsim.simulate only (scenario parsed beforehand); best of {n} after a warm-up "
        "(first call {first:.2f} s; medians {dm} / {bm}); {rows} rows of 2 s. dcsim: step "
        "{hs:g} us ({ns} steps, {nc} columns); bare loop: RK4 at {hb:g} us ({nb} steps, 3 "
        "columns: t, i, w).".format(
            n=a["repeats"],
            first=a["first_call_dcsim_s"],
            dm=_ms(a["dcsim_median_s"]),
            bm=_ms(a["bare_median_s"]),
            rows=a["rows"],
            hs=a["dcsim_step_s"] * 1e6,
            ns=a["dcsim_steps"],
            nc=a["dcsim_columns"],
            hb=a["bare_step_s"] * 1e6,
            nb=a["bare_steps"],
        ),
        "    max relative difference of the traces (max|a-b| / max|b| per column): "
        f"current {da['current']:.2e}, speed {da['speed']:.2e}",
        "(b) {span}; solve_ivp {meth}, one call per 50 us interval ({calls} calls), "
        "rtol {rt:g}, atol {at:g}: match to dcsim {mt:.2e} (needed <= {need:g}: {ok}).".format(
            span=(
                f"timed over a {b['plain_span_s']:g} s slice from t = 0, scaled per simulated s"
                if b["scaled"]
                else f"timed over the whole {b['plain_span_s']:g} s run (no scaling)"
            ),
            meth=b["method"],
            calls=b["calls"],
            rt=b["rtol"],
            at=b["atol"],
            mt=b["match"],
            need=b["match_target"],
            ok="met" if b["matched"] else "NOT met",
        ),
        "    rtol ladder (loosest first, stop at the first match): "
        + ", ".join(
            f"{e['rtol']:g} -> {e['match']:.1e} in {e['time_s']:.2f} s" for e in b["ladder"]
        ),
        "(c) `{cmd}`, best of {n}: {runs} s; first call {first:.2f} s.".format(
            cmd=c["command"],
            n=len(c["runs_s"]),
            runs=" / ".join(f"{x:.2f}" for x in c["runs_s"]),
            first=c["first_call_s"],
        ),
        "(d) ru_maxrss of the whole process (1 MB = 1e6 bytes; cross-check /proc VmHWM {hwm}); "
        "{rows} rows x {cols} columns; peak before the run (imports, scenario) {base:.0f} MB, "
        "trace {tr:.0f} MB, the rest (numba cache load, work arrays) {rest:.0f} MB; "
        "run {rs:.2f} s.".format(
            tr=d["trace_MB"],
            rest=d["peak_rss_MB"] - d["rss_before_run_MB"] - d["trace_MB"],
            hwm="n/a" if d["vm_hwm_MB"] is None else f"{d['vm_hwm_MB']:.0f} MB",
            rows=d["rows"],
            cols=d["columns"],
            base=d["rss_before_run_MB"],
            rs=d["run_s"],
        ),
        f"total benchmark time {figs['elapsed_s']:.0f} s. MISS figures are as measured.",
    ]
    return "\n".join(lines)


def format_markdown(figs: dict[str, Any]) -> str:
    """The four headline figures as a Markdown table, with the machine (for the README)."""
    m, f = figs["machine"], figs["figures"]
    a, b, c, d = f["engine_vs_bare"], f["engine_vs_plain"], f["cli_demo"], f["memory"]
    load = figs["load_average"]["start"][0]
    rows = [
        (
            "2 s run (50 us rows) vs a bare compiled RK4 loop",
            f"{a['ratio']:.1f}x slower ({_ms(a['dcsim_s'])} vs {_ms(a['bare_s'])})",
            f"within {TARGET_BARE_RATIO:g}x",
            a["pass"],
        ),
        (
            "vs a Python loop of `solve_ivp` calls, one per 50 us",
            f"{b['speedup']:.0f}x faster",
            f"{TARGET_PLAIN_SPEEDUP:g}x faster",
            b["pass"],
        ),
        ("`dcsim demo`, whole process, warm cache", f"{c['wall_s']:.1f} s", "< 3 s", c["pass"]),
        (
            "peak memory, 60 s run at 50 us rows",
            f"{d['peak_rss_MB']:.0f} MB (trace {d['trace_MB']:.0f} MB)",
            f"< {TARGET_PEAK_MB:g} MB",
            d["pass"],
        ),
    ]
    out = [
        "| figure | measured | target | |",
        "|---|---|---|---|",
        *(f"| {r[0]} | {r[1]} | {r[2]} | {_verdict(r[3])} |" for r in rows),
        "",
        f"Measured on {m['cpu']}, {m['logical_cpus']} CPUs, Python {m['python']}, numpy "
        f"{m['numpy']}, numba {m['numba']}, scipy {m['scipy']} (load average {load:.1f}).",
    ]
    return "\n".join(out)


def test_core_benchmarks(capsys: Any) -> None:
    """pytest entry: run the benchmarks and print the table (no time or size is asserted)."""
    figs = core_figures()
    with capsys.disabled():
        print("\n" + format_report(figs))
    # Sanity of the measurements themselves, not of the targets.
    f = figs["figures"]
    assert f["engine_vs_bare"]["rows"] == round(DURATION_S / RECORD_S) + 1
    assert math.isfinite(f["engine_vs_bare"]["ratio"])
    assert math.isfinite(f["engine_vs_plain"]["speedup"])


def main(argv: Sequence[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description="dcsim core speed and memory benchmarks")
    parser.add_argument("--json", action="store_true", help="print the figures as JSON instead")
    parser.add_argument(
        "--markdown", action="store_true", help="also print the README table (Markdown)"
    )
    parser.add_argument(
        "--plain-span",
        type=float,
        default=DURATION_S,
        metavar="SECONDS",
        help="simulated time the solve_ivp loop is timed over (default: the whole run)",
    )
    args = parser.parse_args(argv)
    figs = core_figures(plain_span_s=args.plain_span)
    print(json.dumps(figs, indent=2) if args.json else format_report(figs))
    if args.markdown:
        print("\n" + format_markdown(figs))
    return 0


if __name__ == "__main__":
    sys.exit(main())
