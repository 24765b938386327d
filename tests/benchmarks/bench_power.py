"""Speed of the power-stage models, printed beside their targets.

Run on request (the default test run leaves this folder out)::

    python tests/benchmarks/bench_power.py           # the table
    python -m pytest tests/benchmarks/bench_power.py -s

Figures
-------
(e) The switching model at 20 kHz PWM, 1 s simulated, unipolar centre-aligned PWM with
    500 ns dead time, diodes and on-resistance, recorded every 6.25 us (8 rows per PWM
    period): wall time of the kernel run after a warm-up, best of 3. Target: under 150 ms.
(f) The same drive with the averaged model (default step and record interval), and the ratio
    switching / averaged.
(g) The same drive with the ideal bridge (the core kernel), against the averaged model:
    nanoseconds per nominal step of each (the averaged and ideal models should keep the
    core's speed).

The drive is invented: the wheel motor of a warehouse shuttle on a 36 V bus.
Nothing here asserts a time: a missed target prints MISS with the figure as measured.
"""

from __future__ import annotations

import sys
import time
from typing import Any

import dcsim
from dcsim.engine.assemble import assemble, assemble_bridge
from dcsim.engine.run import run_inputs
from dcsim.engine.run_bridge import run_bridge_inputs

SHUTTLE = """
[simulation]
duration = "1 s"
{record}
[motor]
resistance = "0.35 ohm"
inductance = "0.6 mH"
torque_constant = "0.045 N*m/A"
inertia = "6e-5 kg*m^2"
viscous_friction = "1e-5 N*m*s/rad"
[load]
inertia = "1.4e-4 kg*m^2"
torque = "0.05 N*m"
[supply]
voltage = "36 V"
resistance = "40 mohm"
capacitance = "1 mF"
[control]
voltage = "17.3 V"                   # a duty whose edges fall between the grid steps
{bridge}
[[events]]
at = "0.5 s"
set = {{ "load.torque" = "0.25 N*m" }}
"""

BRIDGE = """[bridge]
model = "{model}"
pwm = "unipolar"
frequency = "20 kHz"
dead_time = "500 ns"
on_resistance = "25 mohm"
diode_drop = "0.9 V"
"""


def _best(fn, repeats: int = 3) -> float:
    fn()  # warm-up (compiles on a cold cache)
    best = float("inf")
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t0)
    return best


def power_figures() -> dict[str, Any]:
    sw = dcsim.load_scenario_text(
        SHUTTLE.format(
            record='record_interval = "6.25 us"', bridge=BRIDGE.format(model="switching")
        )
    )
    av = dcsim.load_scenario_text(SHUTTLE.format(record="", bridge=BRIDGE.format(model="averaged")))
    ideal = dcsim.load_scenario_text(SHUTTLE.format(record="", bridge=""))
    bi_sw = assemble_bridge(sw)
    bi_av = assemble_bridge(av)
    ki = assemble(ideal)
    t_sw = _best(lambda: run_bridge_inputs(bi_sw))
    t_av = _best(lambda: run_bridge_inputs(bi_av))
    t_id = _best(lambda: run_inputs(ki))
    acc = run_bridge_inputs(bi_sw)[3]
    from dcsim.engine import bridge_layout as B

    return {
        "switching_s": t_sw,
        "averaged_s": t_av,
        "ideal_s": t_id,
        "ratio_switching_averaged": t_sw / t_av,
        "switching_segments_per_period": (acc[B.A_SPLITS] + bi_sw.n_grid * bi_sw.n_periods)
        / bi_sw.n_periods,
        "switching_steps": bi_sw.n_grid * bi_sw.n_periods,
        "averaged_ns_per_step": t_av / (bi_av.n_grid * bi_av.n_periods) * 1e9,
        "ideal_ns_per_step": t_id / ki.n_steps * 1e9,
        "averaged_step_s": bi_av.step_s,
        "ideal_step_s": ki.step_s,
        "cache_misses": float(acc[B.A_CACHE_MISSES]),
    }


def format_report(f: dict[str, Any]) -> str:
    ok = "ok" if f["switching_s"] < 0.150 else "MISS"
    lines = [
        "dcsim power-stage benchmarks",
        f"(e) switching model, 20 kHz, 1 s simulated: {f['switching_s'] * 1e3:.1f} ms "
        f"(target < 150 ms) {ok}; {f['switching_steps']} grid steps, "
        f"{f['cache_misses']:.0f} propagator cache misses",
        f"(f) averaged model, same drive: {f['averaged_s'] * 1e3:.1f} ms; switching / averaged "
        f"= {f['ratio_switching_averaged']:.1f}",
        f"(g) per nominal step: averaged {f['averaged_ns_per_step']:.0f} ns "
        f"(step {f['averaged_step_s'] * 1e6:.3g} us), ideal (core kernel) "
        f"{f['ideal_ns_per_step']:.0f} ns (step {f['ideal_step_s'] * 1e6:.3g} us); ideal run "
        f"{f['ideal_s'] * 1e3:.1f} ms",
    ]
    return "\n".join(lines)


def test_power_benchmarks(capsys: Any) -> None:
    """Print the figures (pytest -s); asserts only that they are figures."""
    f = power_figures()
    with capsys.disabled():
        print()
        print(format_report(f))
    assert all(v == v for v in f.values())  # every figure was measured (no NaN)


if __name__ == "__main__":
    print(format_report(power_figures()))
    sys.exit(0)
