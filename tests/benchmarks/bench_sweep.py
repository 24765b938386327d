"""Speed of sweeps, printed beside their targets.

Run on request (the default test run leaves this folder out)::

    python tests/benchmarks/bench_sweep.py
    python -m pytest tests/benchmarks/bench_sweep.py -s

Figures
-------
(h) ``dcsim sweep`` in a fresh process, 1,000 runs of a 0.2 s start-up of an invented coolant
    pump (averaged bridge model, 470 uF bus capacitor, a fuse; 999 Monte Carlo samples of three
    tolerances plus the nominal run), on every CPU: wall time of the whole command (start-up,
    the probe run, the runs, results.csv / results.parquet, report.json and the ten PNGs).
    Target: under 10 s on the 2-core machine.
(i) The same 1,000 runs by ``run_sweep`` in a warm process (no report), on 1 and on 2 workers:
    runs per second, and the scaling efficiency ``T1 / (2 T2)``. Target: at least 80 %. Also
    the CPU time of each (this process and its workers): their ratio is the work that running
    in parallel adds, a figure that other load on the machine does not change much.
(j) Where the time of one run goes: ``with_changes``, the kernel, and ``simulate`` in all
    (the kernel, assembling, the summary), per run: means over 20 samples (the step, chosen
    from the winding's time constant, and so the number of steps differ from run to run).

The load average is printed with the figures: on a machine that other work shares, the
parallel figures mean little. Nothing here asserts a time: a missed target prints MISS.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

REPO = Path(__file__).resolve().parents[2]

RUNS = 1000

SWEEP = """
title = "Coolant pump start-up (benchmark)"
samples = 999
seed = 1
metrics = ["peak_current_A", "i2t_A2s", "min_bus_voltage_V", "final_speed_rad_s",
           "peak_fuse_heat_fraction"]

[base.simulation]
duration = "0.2 s"
[base.motor]
resistance = "0.45 ohm"
inductance = "0.25 mH"
torque_constant = "0.018 N*m/A"
inertia = "1.2e-5 kg*m^2"
viscous_friction = "2e-6 N*m*s/rad"
coulomb_friction = "4 mN*m"
[base.load]
inertia = "0.8e-5 kg*m^2"
torque = "30 mN*m"
[base.supply]
voltage = "12.6 V"
resistance = "60 mohm"
capacitance = "470 uF"
[base.bridge]
model = "averaged"
pwm = "unipolar"
frequency = "20 kHz"
on_resistance = "8 mohm"
diode_drop = "0.7 V"
[base.fuse]
rated_current = "7.5 A"
melting_i2t = "40 A^2*s"
[base.control]
voltage = "12.6 V"

[tolerance]
"motor.resistance" = { normal = "4 %" }
"motor.torque_constant" = { normal = "3 %" }
"supply.resistance" = { uniform = "20 %" }
"""


def _load() -> str:
    try:
        return " / ".join(f"{x:.2f}" for x in os.getloadavg())
    except OSError:  # pragma: no cover
        return "n/a"


def _cpu_s() -> float:
    """CPU time of this process and its finished children [s] (user + system)."""
    import resource

    own = resource.getrusage(resource.RUSAGE_SELF)
    kids = resource.getrusage(resource.RUSAGE_CHILDREN)
    return own.ru_utime + own.ru_stime + kids.ru_utime + kids.ru_stime


def sweep_figures() -> dict[str, Any]:
    from dcsim.engine.assemble import assemble_bridge
    from dcsim.engine.run import simulate
    from dcsim.engine.run_bridge import run_bridge_inputs
    from dcsim.sweep import load_sweep, run_sweep
    from dcsim.sweep.plan import Plan

    work = Path(tempfile.mkdtemp(prefix="dcsim-bench-sweep-"))
    try:
        sweep = work / "pump_start.toml"
        sweep.write_text(SWEEP, encoding="utf-8")
        spec = load_sweep(sweep)
        plan = Plan(spec)
        assert len(plan) == RUNS
        simulate(spec.base)  # the kernels in memory before anything is timed

        f: dict[str, Any] = {"load_before": _load()}
        # (h) the whole command, fresh process
        env = dict(os.environ)
        env["PYTHONPATH"] = os.pathsep.join(filter(None, [str(REPO), env.get("PYTHONPATH")]))
        start = time.perf_counter()
        done = subprocess.run(
            [sys.executable, "-m", "dcsim", "sweep", str(sweep), "--out", str(work / "cli")],
            env=env,
            capture_output=True,
            text=True,
        )
        f["command_s"] = time.perf_counter() - start
        f["command_rc"] = done.returncode

        # (i) warm, in-process, 1 and 2 workers
        for workers in (1, 2):
            out = work / f"w{workers}"
            cpu0 = _cpu_s()
            start = time.perf_counter()
            run_sweep(spec, out, workers=workers, report=False)
            f[f"w{workers}_s"] = time.perf_counter() - start
            f[f"w{workers}_cpu_s"] = _cpu_s() - cpu0
        f["efficiency"] = f["w1_s"] / (2 * f["w2_s"])
        f["cpu_ratio"] = f["w2_cpu_s"] / f["w1_cpu_s"]

        # (j) one run, taken apart (the mean over 20 different samples)
        changes = [plan.changes(k) for k in range(1, 21)]
        t_change, t_kernel, t_sim = [], [], []
        for c in changes:
            t0 = time.perf_counter()
            sc = spec.base.with_changes(c)
            t1 = time.perf_counter()
            bi = assemble_bridge(sc)
            t2 = time.perf_counter()
            run_bridge_inputs(bi)
            t3 = time.perf_counter()
            simulate(sc)
            t4 = time.perf_counter()
            t_change.append(t1 - t0)
            t_kernel.append(t3 - t2)
            t_sim.append(t4 - t3)
        f["with_changes_ms"] = 1e3 * sum(t_change) / len(t_change)
        f["kernel_ms"] = 1e3 * sum(t_kernel) / len(t_kernel)
        f["simulate_ms"] = 1e3 * sum(t_sim) / len(t_sim)
        f["steps"] = round(
            sum(simulate(spec.base.with_changes(c)).summary["steps"] for c in changes)
            / len(changes)
        )
        f["load_after"] = _load()
        return f
    finally:
        shutil.rmtree(work, ignore_errors=True)


def format_report(f: dict[str, Any]) -> str:
    ok_h = "ok" if f["command_s"] < 10.0 and f["command_rc"] in (0, 3) else "MISS"
    ok_i = "ok" if f["efficiency"] >= 0.8 else "MISS"
    lines = [
        "dcsim sweep benchmarks",
        f"(h) dcsim sweep, {RUNS} runs of a 0.2 s averaged-model start-up, whole command on all "
        f"CPUs ({os.cpu_count()}): {f['command_s']:.2f} s (target < 10 s) {ok_h}",
        f"(i) run_sweep in a warm process, no report: 1 worker {f['w1_s']:.2f} s "
        f"({RUNS / f['w1_s']:.0f} runs/s), 2 workers {f['w2_s']:.2f} s "
        f"({RUNS / f['w2_s']:.0f} runs/s); scaling efficiency T1 / (2 T2) = "
        f"{100 * f['efficiency']:.0f} % (target >= 80 %) {ok_i}; CPU time 1 worker "
        f"{f['w1_cpu_s']:.2f} s, 2 workers {f['w2_cpu_s']:.2f} s (x{f['cpu_ratio']:.2f}: what "
        "running in parallel costs in work, whatever else the machine runs)",
        f"(j) one run: with_changes {f['with_changes_ms']:.2f} ms, kernel {f['kernel_ms']:.2f} ms "
        f"({f['steps']} steps on average, {1e6 * f['kernel_ms'] / f['steps']:.0f} ns/step), "
        "simulate in all "
        f"{f['simulate_ms']:.2f} ms",
        f"load average (1/5/15 min) before {f['load_before']}, after {f['load_after']}",
    ]
    return "\n".join(lines)


def test_sweep_benchmarks(capsys: Any) -> None:
    """Print the figures (pytest -s); asserts only that they were measured."""
    f = sweep_figures()
    with capsys.disabled():
        print()
        print(format_report(f))
    assert f["command_rc"] in (0, 3)  # the command ran (3: some run failed a criterion)


if __name__ == "__main__":
    print(format_report(sweep_figures()))
    sys.exit(0)
