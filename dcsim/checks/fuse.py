"""Fuse coordination: the fuse survives every start and still clears a stalled rotor.

Survives the start
    The peak heat fraction ``f`` of the fuse model (1 = melting; see :mod:`dcsim.power.fuse`)
    over the run, divided by ``derating^2`` (a derated fuse carries ``derating`` x its
    currents: heat fractions grow by ``1 / derating^2``), must stay at or below
    ``checks.fuse_margin`` (default 0.75, common practice: no source). Also at
    ``checks.supply_max`` when given.
Repeated starts
    With ``simulation.cycle_time`` ``T``, the run repeats every ``T`` with the supply off in
    between. The model is linear in the heat input ``i^2``, so the settled heat fraction is
    the superposition of the earlier starts, each decaying with ``tau`` after its end ``D``::

        f_rep(t) = f(t) + f(D) exp((D - t) / tau) q / (1 - q),      q = exp(-T / tau)

    (the sum of the geometric series of the earlier starts; exact for the first-order model
    below melting).
Clears a stall
    With the rotor locked from t = 0 (at ``checks.supply_min`` when given), the fuse (the
    nominal model: the cold fuse melts last) must melt within ``checks.stall_clear_time``.
    When the run ends first, the melting time is extended by the closed form of the model at
    the run's final supply current.
Time-current plot
    The model's melting time against current (nominal and derated), the IEC 60127-2 gates of
    the fuse's characteristic when given, and the run's supply current as equivalent pulses:
    for each duration ``d`` the largest RMS current over any window of length ``d``,
    ``I_eq(d) = max_t sqrt(int_t^{t+d} i^2 dt / d)``: a point left of the melting curve is a
    pulse the fuse carries (for a rectangular pulse this is exact; for other shapes it is the
    usual equivalent-rectangle reading of a time-current curve).
"""

from __future__ import annotations

import math

import numpy as np
from matplotlib.figure import Figure

from dcsim.checks.runs import CheckRuns
from dcsim.checks.verdict import Verdict, judged, not_applicable
from dcsim.power.fuse import CAUTION as FUSE_CAUTION
from dcsim.power.fuse import (
    IEC_60127_2_GATES,
    FuseModel,
    check_gates,
    derated,
    melting_time_s,
    scenario_fuse_model,
)
from dcsim.scenario.schema import Checks, Scenario

GROUP = "fuse"
PLOT_CURVE = "fuse_time_current"
PLOT_HEAT = "fuse_heat_fraction"


def repeated_start_heat(time_s: np.ndarray, heat: np.ndarray, cycle_time_s: float, tau_s: float):
    """Settled heat fraction of a start repeated every ``cycle_time_s`` (module docstring).

    Parameters
    ----------
    time_s : array_like
        Trace times from 0 to the run's end ``D`` [s].
    heat : array_like
        Heat fraction of one start from cold at those times [-].
    cycle_time_s : float
        Start interval ``T >= D`` [s].
    tau_s : float
        The fuse model's time constant [s].

    Returns
    -------
    numpy.ndarray
        ``f_rep`` at ``time_s`` [-].
    """
    t = np.asarray(time_s, dtype=float)
    f = np.asarray(heat, dtype=float)
    end = float(t[-1])
    q = math.exp(-cycle_time_s / tau_s)
    return f + f[-1] * np.exp((end - t) / tau_s) * q / -math.expm1(-cycle_time_s / tau_s)


def equivalent_pulses(time_s: np.ndarray, current_A: np.ndarray, durations_s: np.ndarray):
    """Largest RMS current over any window of each duration [A] (module docstring).

    ``int i^2 dt`` is the trapezoidal integral of the trace; windows start at every trace row
    and end inside the run.
    """
    t = np.asarray(time_s, dtype=float)
    i2 = np.asarray(current_A, dtype=float) ** 2
    energy = np.concatenate(([0.0], np.cumsum(0.5 * np.diff(t) * (i2[1:] + i2[:-1]))))
    out = np.full(len(durations_s), np.nan)
    for k, d in enumerate(durations_s):
        starts = t[t + d <= t[-1] + 1e-15]
        if starts.size == 0:
            continue
        heat = np.interp(starts + d, t, energy) - np.interp(starts, t, energy)
        out[k] = math.sqrt(max(float(np.max(heat)), 0.0) / d)
    return out


def fuse_checks(
    sc: Scenario, runs: CheckRuns
) -> tuple[list[Verdict], dict[str, Figure], list[str]]:
    """The fuse's verdicts, its two figures and warnings (none without a ``[fuse]``)."""
    if sc.fuse is None:
        why = "the scenario has no [fuse] table"
        return (
            [
                not_applicable("fuse.survives_start", GROUP, "Fuse survives the start", why),
                not_applicable("fuse.clears_stall", GROUP, "Fuse clears a stalled rotor", why),
            ],
            {},
            [],
        )
    ck = sc.checks or Checks()
    model = scenario_fuse_model(sc.fuse, sc.source)
    hot = derated(model, ck.fuse_derating)
    warnings = [model.warning] if model.warning and model.warning != FUSE_CAUTION else []
    scale = 1.0 / ck.fuse_derating**2
    verdicts: list[Verdict] = []
    plots = (PLOT_HEAT, PLOT_CURVE)
    title = "Fuse survives the start"
    nominal = runs.get("nominal")
    for name, label in (("nominal", ""), ("high_supply", " at the highest supply")):
        run = runs.get(name)
        if run is None:
            continue
        key = "fuse.survives_start" + ("" if name == "nominal" else "_high_supply")
        verdicts.append(_survives(key, title + label, run, ck, scale, plots))
    verdicts.append(_repeated(sc, nominal, ck, scale, model, plots))
    verdicts.append(_clears(sc, runs.get("stall"), ck, model, plots))
    verdicts.extend(_gates(sc, model))
    figures = {
        PLOT_HEAT: heat_figure(sc, runs, ck, model),
        PLOT_CURVE: time_current_figure(sc, runs, model, hot),
    }
    return verdicts, figures, warnings


def _survives(key, title, run, ck: Checks, scale, plots) -> Verdict:
    if run.result is None:
        return Verdict(key, GROUP, title, "fail", detail=run.error, plots=plots)
    s = run.result.summary
    peak = float(s["peak_fuse_heat_fraction"])
    melted = bool(s["fuse_melted"])
    derate = "" if scale == 1.0 else f" (derated: {peak:.3g} x 1/{ck.fuse_derating:g}^2)"
    detail = f"peak heat fraction {peak * scale:.3g} of melting{derate} over {run.description}"
    if melted:
        detail = (
            f"the fuse melts at {s['fuse_melt_time_s']:.4g} s: a nuisance blow on a normal "
            f"start ({run.description})"
        )
    return judged(
        key,
        GROUP,
        title,
        1.0 * scale if melted else peak * scale,
        ck.fuse_margin,
        "-",
        detail=detail,
        values={"peak_heat_fraction": peak, "derating": ck.fuse_derating, "melted": melted},
        plots=plots,
    )


def _repeated(sc, run, ck: Checks, scale, model: FuseModel, plots) -> Verdict:
    key, title = "fuse.survives_repeated_starts", "Fuse survives repeated starts"
    cycle = sc.simulation.cycle_time
    if cycle is None:
        return not_applicable(key, GROUP, title, "give simulation.cycle_time (the start interval)")
    if run is None or run.result is None:
        return Verdict(key, GROUP, title, "fail", detail=run.error if run else "", plots=plots)
    tr = run.result.trace
    if run.result.summary["fuse_melted"]:
        return judged(
            key,
            GROUP,
            title,
            scale,
            ck.fuse_margin,
            "-",
            detail="the first start already melts the fuse",
            plots=plots,
        )
    f_rep = repeated_start_heat(tr["time_s"], tr["fuse_heat_fraction"], cycle, model.tau_s)
    # the earlier starts only add heat: never below the single start's exact (kernel) peak
    peak = max(float(np.max(f_rep)), float(run.result.summary["peak_fuse_heat_fraction"]))
    return judged(
        key,
        GROUP,
        title,
        peak * scale,
        ck.fuse_margin,
        "-",
        detail=(
            f"settled peak heat fraction {peak * scale:.3g} with a start every {cycle:g} s "
            f"(the element cools with tau = {model.tau_s:.3g} s between starts; the first "
            f"start alone {float(np.max(tr['fuse_heat_fraction'])) * scale:.3g})"
        ),
        values={"peak_heat_fraction": peak, "cycle_time_s": cycle, "tau_s": model.tau_s},
        plots=plots,
    )


def _clears(sc, run, ck: Checks, model: FuseModel, plots) -> Verdict:
    key, title = "fuse.clears_stall", "Fuse clears a stalled rotor"
    if ck.stall_clear_time is None:
        return not_applicable(
            key, GROUP, title, "give checks.stall_clear_time (what the motor and wiring withstand)"
        )
    if run is None or run.result is None:
        return Verdict(key, GROUP, title, "fail", detail=run.error if run else "", plots=plots)
    s, tr = run.result.summary, run.result.trace
    limit = ck.stall_clear_time
    if s["fuse_melted"]:
        t_melt = float(s["fuse_melt_time_s"])
        how = "melts"
    else:
        i_end = float(tr["supply_current_A"][-1])
        f_end = float(tr["fuse_heat_fraction"][-1])
        t_melt = float(tr["time_s"][-1]) + float(melting_time_s(model, i_end, min(f_end, 0.999)))
        how = "would melt (closed form at the final current)" if math.isfinite(t_melt) else ""
        if not math.isfinite(t_melt):
            return judged(
                key,
                GROUP,
                title,
                math.inf,
                limit,
                "s",
                detail=(
                    f"never clears: the stalled drive draws {abs(i_end):.3g} A from the supply, "
                    f"below the fuse's minimum melting current {model.min_melting_current_A:.3g} "
                    f"A ({run.description}); a current limit, not this fuse, then has to "
                    "protect the stalled motor"
                ),
                values={"final_supply_current_A": i_end},
                plots=plots,
            )
    peak = float(s["peak_current_A"])
    return judged(
        key,
        GROUP,
        title,
        t_melt,
        limit,
        "s",
        detail=f"the fuse {how} at {t_melt:.4g} s; peak armature current {peak:.3g} A "
        f"({run.description})",
        values={"melting_time_s": t_melt, "peak_current_A": peak},
        plots=plots,
    )


def _characteristic(sc: Scenario) -> str | None:
    return sc.fuse.characteristic or sc.fuse.generic_class


def _gates(sc: Scenario, model: FuseModel) -> list[Verdict]:
    name = _characteristic(sc)
    key, title = "fuse.model_within_class", "Fuse model inside its IEC 60127-2 gates"
    if name is None:
        return []
    results = check_gates(model, name)
    worst = min(results, key=_gate_log_margin)
    outside = [g for g in results if not g.inside]
    hint = ""
    if any(not math.isfinite(g.model_time_s) and math.isfinite(g.t_max_s) for g in outside):
        hint = (
            f"; the model never melts at or below I_min = {model.min_melting_current_A:.3g} A: "
            "give fuse.min_melting_current (its default, 2.1 x In, sits on the 2.1 In gate)"
        )
    words = "; ".join(
        f"{g.multiple:g} In: {g.model_time_s:.3g} s in [{g.t_min_s:g}, {g.t_max_s:g}] s"
        for g in results
    )
    status = "fail" if outside else "pass"
    return [
        Verdict(
            key,
            GROUP,
            title,
            status,
            detail=f"{name} gates (IEC 60127-2): {words}"
            + (
                ""
                if not outside
                else f"; outside at {', '.join(f'{g.multiple:g} In' for g in outside)}"
            )
            + hint,
            values={"worst_gate_multiple": worst.multiple},
            plots=(PLOT_CURVE,),
        )
    ]


def _gate_log_margin(g) -> float:
    """Log-time distance of the model's melting time inside a gate (negative outside)."""
    lower = math.log(g.model_time_s / g.t_min_s) if g.t_min_s > 0 else math.inf
    if not math.isfinite(g.t_max_s):
        upper = math.inf
    elif not math.isfinite(g.model_time_s):
        upper = -math.inf  # never melts where the gate requires it to
    else:
        upper = math.log(g.t_max_s / g.model_time_s)
    return min(lower, upper)


def heat_figure(sc: Scenario, runs: CheckRuns, ck: Checks, model: FuseModel) -> Figure:
    """Heat fraction of the fuse against time, per run, with the margin and the clear limit."""
    fig = Figure(figsize=(8.0, 4.2), dpi=110, layout="constrained")
    ax = fig.add_subplot()
    scale = 1.0 / ck.fuse_derating**2
    colours = {"nominal": "#1f5f8b", "high_supply": "#d0731c", "stall": "#6b4c9a"}
    for name, run in runs.runs.items():
        if run.result is None or "fuse_heat_fraction" not in run.result.trace:
            continue
        tr = run.result.trace
        ax.plot(
            tr["time_s"],
            tr["fuse_heat_fraction"] * (scale if name != "stall" else 1.0),
            color=colours.get(name, "#22313f"),
            lw=1.4,
            label=f"{name}: {run.description}",
        )
        if name == "nominal" and sc.simulation.cycle_time is not None:
            rep = repeated_start_heat(
                tr["time_s"], tr["fuse_heat_fraction"], sc.simulation.cycle_time, model.tau_s
            )
            ax.plot(
                tr["time_s"],
                rep * scale,
                color="#1f5f8b",
                lw=1.0,
                ls="--",
                label=f"settled, a start every {sc.simulation.cycle_time:g} s",
            )
    ax.axhline(ck.fuse_margin, color="#b03a2e", lw=1.0, ls=":", label=f"margin {ck.fuse_margin:g}")
    ax.axhline(1.0, color="#22313f", lw=0.8, label="melting")
    if ck.stall_clear_time is not None and runs.get("stall") is not None:
        ax.axvline(
            ck.stall_clear_time,
            color="#6b4c9a",
            lw=1.0,
            ls=":",
            label=f"stall must clear by {ck.stall_clear_time:g} s",
        )
    ax.set_xlabel("time [s]")
    ax.set_ylabel("fuse heat fraction [-]")
    ax.set_ylim(0.0, 1.1)
    ax.grid(True, color="#dfe3e8")
    ax.legend(fontsize=7, loc="best")
    ax.set_title(
        "Fuse element heating (1 = melting)"
        + ("" if ck.fuse_derating == 1.0 else f"; start-up runs derated by {ck.fuse_derating:g}"),
        fontsize=9,
    )
    return fig


def time_current_figure(sc: Scenario, runs: CheckRuns, model: FuseModel, hot: FuseModel) -> Figure:
    """Log-log melting time against current, with the gates and the runs' equivalent pulses."""
    fig = Figure(figsize=(7.5, 5.5), dpi=110, layout="constrained")
    ax = fig.add_subplot()
    rated = model.rated_current_A
    points = []
    for name, run in runs.runs.items():
        if run.result is None:
            continue
        tr = run.result.trace
        t = tr["time_s"]
        span = float(t[-1] - t[0])
        step = float(np.min(np.diff(t))) if t.size > 1 else span
        if span <= 0.0:
            continue
        d = np.geomspace(max(step, span * 1e-5), span, 40)
        points.append((name, run.description, d, equivalent_pulses(t, tr["supply_current_A"], d)))
    i_top = max(
        [rated * 20.0] + [float(np.nanmax(p[3])) * 2.0 for p in points if np.any(np.isfinite(p[3]))]
    )
    current = np.geomspace(model.min_melting_current_A * 1.0005, i_top, 300)
    ax.loglog(
        current,
        melting_time_s(model, current),
        color="#22313f",
        lw=1.6,
        label=f"melting, model ({model.origin})",
    )
    if hot.min_melting_current_A != model.min_melting_current_A:
        c_hot = np.geomspace(hot.min_melting_current_A * 1.0005, i_top, 300)
        ax.loglog(
            c_hot,
            melting_time_s(hot, c_hot),
            color="#22313f",
            lw=1.0,
            ls="--",
            label="melting, derated",
        )
    if sc.fuse.table_points:
        pts = np.asarray(sc.fuse.table_points, dtype=float)
        ax.loglog(pts[:, 0], pts[:, 1], "D", ms=4, color="#22313f", label="maker's table (fitted)")
    name = _characteristic(sc)
    if name is not None:
        for g in IEC_60127_2_GATES[name]:
            lo = max(g.t_min_s, 1e-4)
            hi = g.t_max_s if math.isfinite(g.t_max_s) else 1e5
            ax.plot(
                [g.multiple * rated] * 2,
                [lo, hi],
                color="#8a8f96",
                lw=4,
                alpha=0.5,
                solid_capstyle="butt",
            )
        ax.plot([], [], color="#8a8f96", lw=4, alpha=0.5, label=f"IEC 60127-2 {name} gates")
    markers = {
        "nominal": ("o", "#1f5f8b"),
        "high_supply": ("s", "#d0731c"),
        "stall": ("^", "#6b4c9a"),
    }
    for name, _desc, d, ieq in points:
        m, c = markers.get(name, ("x", "#22313f"))
        ok = np.isfinite(ieq) & (ieq > 0)
        ax.loglog(
            ieq[ok], d[ok], m, ms=3.5, color=c, mfc="none", label=f"{name}: equivalent pulses"
        )
    ax.axvline(rated, color="#8a8f96", lw=0.8, ls=":")
    ax.text(rated, ax.get_ylim()[0], " In", fontsize=7, color="#8a8f96", va="bottom")
    ax.set_xlabel("current [A]")
    ax.set_ylabel("time [s]")
    ax.grid(True, which="both", color="#dfe3e8", lw=0.6)
    ax.legend(fontsize=7, loc="upper right")
    ax.set_title(
        f"Fuse time-current: In = {rated:g} A, I2t = {model.melting_i2t_A2s:.3g} A^2 s, "
        f"I_min = {model.min_melting_current_A:.3g} A",
        fontsize=9,
    )
    return fig
