"""Speed of the machine-library kernel (wound-field machines, ripple, compliant shaft).

Run on request; the default test run leaves this folder out::

    python tests/benchmarks/bench_machine.py
    python -m pytest tests/benchmarks/bench_machine.py -s

Figures
-------
(m1) Wall time of ``dcsim.simulate`` for the 4 s starts of the harbour hoist
     (``scenarios/harbour_hoist_{pm,shunt,series}_start.toml``) -- the permanent-magnet file
     runs in the exact ideal kernel, the shunt and series files in the machine kernel -- best
     of 3 after a warm-up, with the RK4 sub-steps taken and the time per sub-step.
(m2) The shunt start with 12 commutator segments (ripple on: at least eight sub-steps per
     commutator pulse) and with a compliant shaft with backlash.
(m3) A variant sweep: the series hoist start for 200 hook masses, one process, one after the
     other (``simulate`` per variant): variants per second.

No target is asserted; the figures are printed as measured.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path
from typing import Any

import numpy as np

import dcsim

ROOT = Path(__file__).resolve().parents[2]
KINDS = ("pm", "shunt", "series")


def _scenario(kind: str) -> dcsim.Scenario:
    return dcsim.load_scenario(ROOT / "scenarios" / f"harbour_hoist_{kind}_start.toml")


def _best(fn, repeats: int = 3) -> tuple[float, Any]:
    out = fn()  # warm-up (compiles on a cold cache)
    best = float("inf")
    for _ in range(repeats):
        t0 = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t0)
    return best, out


def machine_figures() -> dict[str, Any]:
    f: dict[str, Any] = {}
    for kind in KINDS:
        sc = _scenario(kind)
        t, res = _best(lambda sc=sc: dcsim.simulate(sc))
        f[f"{kind}_s"] = t
        f[f"{kind}_substeps"] = float(res.summary.get("substeps", np.nan))
    shunt = _scenario("shunt")
    ripple = shunt.with_changes({"motor.commutator_segments": 12})
    t, res = _best(lambda: dcsim.simulate(ripple))
    f["ripple_s"], f["ripple_substeps"] = t, float(res.summary["substeps"])
    shaft_text = (ROOT / "scenarios" / "harbour_hoist_shunt_start.toml").read_text()
    shaft_text += '\n[shaft]\nstiffness = "4000 N*m/rad"\ndamping = "2 N*m*s/rad"\n'
    shaft_text += 'backlash = "0.5 deg"\n'
    shaft = dcsim.load_scenario_text(shaft_text, source="hoist_shaft.toml")
    t, res = _best(lambda: dcsim.simulate(shaft))
    f["shaft_s"], f["shaft_substeps"] = t, float(res.summary["substeps"])
    series = _scenario("series")
    masses = np.linspace(300.0, 700.0, 200)
    t0 = time.perf_counter()
    for m in masses:
        dcsim.simulate(series.with_changes({"hoist.mass": f"{m} kg"}))
    f["sweep_variants_per_s"] = len(masses) / (time.perf_counter() - t0)
    return f


def format_report(f: dict[str, Any]) -> str:
    lines = ["dcsim machine-library benchmarks (4 s hoist starts)"]
    for kind in KINDS:
        n = f[f"{kind}_substeps"]
        per = f" ({n:.0f} RK4 sub-steps, {f[f'{kind}_s'] / n * 1e9:.0f} ns each)" if n == n else ""
        lines.append(f"(m1) {kind:6s}: {f[f'{kind}_s'] * 1e3:7.1f} ms{per}")
    for name, label in (("ripple", "shunt, 12 segments"), ("shaft", "shunt, [shaft]")):
        n = f[f"{name}_substeps"]
        lines.append(
            f"(m2) {label}: {f[f'{name}_s'] * 1e3:.1f} ms ({n:.0f} sub-steps, "
            f"{f[f'{name}_s'] / n * 1e9:.0f} ns each)"
        )
    lines.append(f"(m3) series hoist, 200 masses: {f['sweep_variants_per_s']:.1f} variants/s")
    return "\n".join(lines)


def test_machine_benchmarks(capsys: Any) -> None:
    """Print the figures (pytest -s); asserts only that the runs gave figures."""
    f = machine_figures()
    with capsys.disabled():
        print()
        print(format_report(f))
    assert f["series_s"] > 0.0 and f["sweep_variants_per_s"] > 0.0


if __name__ == "__main__":
    print(format_report(machine_figures()))
    sys.exit(0)
