"""A tuning result as a table for the terminal and as Bode, Nyquist and step plots (PNG)."""

from __future__ import annotations

import math
from pathlib import Path

import control
import numpy as np

from dcsim.results.summary import CAUTION
from dcsim.tuning.analysis import _response, frequency_grid
from dcsim.tuning.tuner import UNITS, TuningResult

_INK = "#1f2a36"
_BLUE = "#1f5f99"
_ORANGE = "#d9822b"
_GREY = "#8a96a3"


def _n(x: float | None, unit: str = "", digits: int = 4) -> str:
    if x is None or (isinstance(x, float) and not math.isfinite(x)):
        return "n/a" if x is None or math.isnan(x) else "inf"
    return f"{x:.{digits}g} {unit}".rstrip()


def format_result(r: TuningResult) -> str:
    """The table ``dcsim tune`` prints."""
    y, u = UNITS[r.loop]
    f = r.figures
    rows = [
        ("loop", r.loop),
        ("method", r.method),
        ("kp", _n(r.kp, f"{u}/({y})", 6)),
        ("ki", _n(r.ki, f"{u}/({y}*s)", 6)),
    ]
    if r.kd:
        rows.append(("kd", _n(r.kd, f"{u}*s/({y})", 6)))
    if r.prefilter_time_s:
        rows.append(("reference prefilter", _n(r.prefilter_time_s, "s")))
    rows += [
        ("sample time", _n(r.sample_time_s, "s")),
        ("phase margin", _n(f.phase_margin_deg, "deg")),
        ("gain margin", _n(f.gain_margin_dB, "dB")),
        ("delay margin", _n(f.delay_margin_s, "s")),
        ("crossover", _n(f.crossover_rad_s, "rad/s")),
        ("closed-loop bandwidth", _n(f.bandwidth_rad_s, "rad/s")),
        ("Ms / Mt", f"{_n(f.ms)} / {_n(f.mt)}"),
        ("step: overshoot", _n(f.overshoot_percent, "%")),
        ("step: rise (10-90 %)", _n(f.rise_time_s, "s")),
        ("step: settling (2 %)", _n(f.settling_time_s, "s")),
        ("closed loop", "stable" if f.stable else "UNSTABLE"),
    ]
    c = r.discrete_coefficients()
    rows.append(("per sample (velocity form)", f"q0 = {c['q0']:.6g}, q1 = {c['q1']:.6g}"))
    if r.worst_case:
        for name in ("phase_margin_deg", "gain_margin_dB", "ms"):
            if name in r.worst_case:
                rows.append((f"worst corner: {name}", _n(r.worst_case[name]["value"])))
        if "unstable_corner" in r.worst_case:
            rows.append(("worst corner", "UNSTABLE at " + str(r.worst_case["unstable_corner"])))
    width = max(len(k) for k, _ in rows) + 2
    lines = [f"Tuning: {r.loop} loop by {r.method}"]
    lines += [f"  {k:<{width}}{v}" for k, v in rows]
    lines.append("  assumptions:")
    lines += [f"    - {a}" for a in r.assumptions]
    for caution in r.cautions:
        lines.append(f"  CAUTION: {caution}")
    lines += ["", CAUTION]
    return "\n".join(lines)


def save_tuning_plots(r: TuningResult, loop_tf, closed_step, out_dir: str | Path) -> list[Path]:
    """Write ``bode.png``, ``nyquist.png`` and ``step.png`` (atomically) into ``out_dir``.

    ``loop_tf`` is the loop transfer ``C P`` the figures came from; ``closed_step`` a pair
    ``(t, y)`` of its closed-loop step response.
    """
    from matplotlib.figure import Figure

    from dcsim.results.io import atomic_write

    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    f = r.figures
    w = frequency_grid(loop_tf)
    lw = _response(loop_tf, w)
    mag_db = 20 * np.log10(np.abs(lw))
    phase = np.degrees(np.unwrap(np.angle(lw)))
    figs = {}

    fig = Figure(figsize=(7.5, 6.0), facecolor="white")
    ax1, ax2 = fig.subplots(2, 1, sharex=True)
    ax1.semilogx(w, mag_db, color=_BLUE, lw=1.3)
    ax1.axhline(0, color=_GREY, lw=0.8)
    ax1.set_ylabel("|L| [dB]", color=_INK)
    ax2.semilogx(w, phase, color=_BLUE, lw=1.3)
    ax2.axhline(-180, color=_GREY, lw=0.8)
    ax2.set_ylabel("phase of L [deg]", color=_INK)
    ax2.set_xlabel("frequency [rad/s]", color=_INK)
    if math.isfinite(f.crossover_rad_s) and f.crossover_rad_s > 0:
        for ax in (ax1, ax2):
            ax.axvline(f.crossover_rad_s, color=_ORANGE, lw=0.9, ls=(0, (3, 2)))
        ax2.annotate(
            f"PM {f.phase_margin_deg:.1f} deg",
            (f.crossover_rad_s, -180 + f.phase_margin_deg),
            xytext=(8, 8),
            textcoords="offset points",
            color=_ORANGE,
        )
        ax2.plot([f.crossover_rad_s] * 2, [-180, -180 + f.phase_margin_deg], color=_ORANGE, lw=2)
    if math.isfinite(f.phase_crossover_rad_s) and math.isfinite(f.gain_margin_dB):
        ax1.plot([f.phase_crossover_rad_s] * 2, [0, -f.gain_margin_dB], color=_ORANGE, lw=2)
        ax1.annotate(
            f"GM {f.gain_margin_dB:.1f} dB",
            (f.phase_crossover_rad_s, -f.gain_margin_dB),
            xytext=(8, -14),
            textcoords="offset points",
            color=_ORANGE,
        )
    for ax in (ax1, ax2):
        ax.grid(True, which="both", color="#e3e8ee", lw=0.6)
    figs["bode.png"] = fig

    fig = Figure(figsize=(6.5, 6.0), facecolor="white")
    ax = fig.subplots(1, 1)
    ax.plot(lw.real, lw.imag, color=_BLUE, lw=1.3, label="L(jw)")
    ax.plot(lw.real, -lw.imag, color=_BLUE, lw=0.8, ls=(0, (2, 2)))
    th = np.linspace(0, 2 * np.pi, 400)
    ax.plot(np.cos(th), np.sin(th), color=_GREY, lw=0.8, label="unit circle")
    ax.plot(-1 + np.cos(th) / f.ms, np.sin(th) / f.ms, color=_ORANGE, lw=1.0, label="1/Ms")
    ax.plot([-1], [0], "x", color="#b03030", ms=9)
    ax.set_xlim(-3, 1.5)
    ax.set_ylim(-2.5, 2.5)
    ax.set_aspect("equal")
    ax.set_xlabel("real", color=_INK)
    ax.set_ylabel("imaginary", color=_INK)
    ax.legend(frameon=False, loc="lower right")
    ax.grid(True, color="#e3e8ee", lw=0.6)
    figs["nyquist.png"] = fig

    fig = Figure(figsize=(7.5, 4.0), facecolor="white")
    ax = fig.subplots(1, 1)
    t, y = closed_step
    ax.plot(t, y, color=_BLUE, lw=1.3)
    ax.axhline(1.0, color=_GREY, lw=0.8)
    ax.set_xlabel("time [s]", color=_INK)
    ax.set_ylabel("closed-loop step response", color=_INK)
    ax.grid(True, color="#e3e8ee", lw=0.6)
    ax.set_title(
        f"overshoot {f.overshoot_percent:.1f} %, rise {f.rise_time_s:.3g} s, settling "
        f"{f.settling_time_s:.3g} s",
        color=_INK,
        fontsize=10,
    )
    figs["step.png"] = fig

    written = []
    for name, fig in figs.items():
        fig.suptitle(f"{r.loop} loop, {r.method} ({r.model} model)", color=_INK)
        fig.text(0.01, 0.005, CAUTION, fontsize=6, color=_GREY)
        target = out / name
        atomic_write(target, lambda tmp, fig=fig: fig.savefig(tmp, format="png", dpi=110))
        written.append(target)
    return written


def closed_loop_step(loop_tf, prefilter=None, n: int = 2000):
    """``(t, y)``: the closed loop's unit step response (python-control)."""
    closed = control.feedback(loop_tf, 1)
    ref = closed if prefilter is None else control.series(prefilter, closed)
    from dcsim.tuning.analysis import _settle_horizon

    wgc = float(control.stability_margins(loop_tf)[4])
    t_end = _settle_horizon(closed, wgc)
    if closed.isdtime():
        t = np.arange(max(50, int(t_end / closed.dt))) * closed.dt
    else:
        t = np.linspace(0, t_end, n)
    t, y = control.step_response(ref, T=t)
    return np.asarray(t), np.squeeze(np.asarray(y))
