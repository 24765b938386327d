"""Thermal and duty-cycle checks: the winding's temperature, the RMS and the peak current.

- Winding temperature: the peak of the first-order thermal model (:mod:`dcsim.plant.thermal`,
  the periodic steady state with ``simulation.cycle_time``) plus ``thermal.hot_spot_allowance``
  against the IEC 60085 limit of ``thermal.insulation_class``.
- RMS current over the duty cycle: ``sqrt(I2t / T_c)`` with ``T_c`` the cycle time (the run's
  duration without one; the drive is off for the rest of the cycle) against
  ``checks.continuous_current``.
- Peak current against ``checks.peak_current`` (the demagnetisation or brush limit), over every
  run the checks made (the locked rotor included: a stall is when magnets demagnetise).
"""

from __future__ import annotations

import math

from matplotlib.figure import Figure

from dcsim.checks.runs import CheckRuns
from dcsim.checks.verdict import Verdict, judged, not_applicable
from dcsim.plant.thermal import celsius
from dcsim.scenario.schema import INSULATION_CLASS_LIMITS_K, Checks, Scenario

PLOT_THERMAL = "winding_temperature"


def rms_over_cycle(i2t_A2s: float, cycle_time_s: float) -> float:
    """RMS current of a duty cycle [A]: ``sqrt(int i^2 dt / T_c)`` (definition of the RMS)."""
    return math.sqrt(i2t_A2s / cycle_time_s)


def duty_checks(sc: Scenario, runs: CheckRuns) -> tuple[list[Verdict], dict[str, Figure]]:
    """The thermal and duty-cycle verdicts, and the winding temperature figure."""
    ck = sc.checks or Checks()
    out: list[Verdict] = []
    figures: dict[str, Figure] = {}
    run = runs.get("nominal")
    res = run.result if run is not None else None
    title = "Winding inside its insulation class"
    th = sc.thermal
    if th is None:
        out.append(
            not_applicable(
                "thermal.winding_temperature",
                "thermal",
                title,
                "the scenario has no [thermal] table",
            )
        )
    elif th.insulation_class is None:
        out.append(
            not_applicable(
                "thermal.winding_temperature", "thermal", title, "give thermal.insulation_class"
            )
        )
    elif res is None:
        out.append(
            Verdict(
                "thermal.winding_temperature",
                "thermal",
                title,
                "fail",
                detail=run.error if run else "",
            )
        )
    else:
        peak = float(res.summary["peak_winding_temperature_K"])
        hot = peak + th.hot_spot_allowance
        limit = INSULATION_CLASS_LIMITS_K[th.insulation_class]
        cyc = sc.simulation.cycle_time
        how = f"settled cycle, a cycle every {cyc:g} s" if cyc is not None else "over the run"
        out.append(
            judged(
                "thermal.winding_temperature",
                "thermal",
                title,
                hot,
                limit,
                "K",
                detail=(
                    f"hottest spot {celsius(hot):.1f} degC = winding {celsius(peak):.1f} degC "
                    f"({how}; ambient {celsius(th.ambient):.1f} degC) + hot-spot allowance "
                    f"{th.hot_spot_allowance:g} K, against class {th.insulation_class} "
                    f"{celsius(limit):.0f} degC (IEC 60085)"
                    + ("" if th.coupled else "; resistance held at its reference value")
                ),
                values={
                    "winding_peak_K": peak,
                    "hot_spot_K": hot,
                    "passes": res.summary.get("thermal_passes"),
                },
                plots=(PLOT_THERMAL,),
            )
        )
        figures[PLOT_THERMAL] = thermal_figure(sc, res, limit)
    cycle = sc.simulation.cycle_time or sc.simulation.duration
    title = "RMS current within the continuous rating"
    if ck.continuous_current is None:
        out.append(
            not_applicable(
                "duty.rms_current",
                "duty",
                title,
                "give checks.continuous_current (the motor's rating)",
            )
        )
    elif res is None:
        out.append(
            Verdict("duty.rms_current", "duty", title, "fail", detail=run.error if run else "")
        )
    else:
        rms = rms_over_cycle(float(res.summary["i2t_A2s"]), cycle)
        out.append(
            judged(
                "duty.rms_current",
                "duty",
                title,
                rms,
                ck.continuous_current,
                "A",
                detail=f"sqrt(I2t / {cycle:g} s) with I2t = "
                f"{res.summary['i2t_A2s']:.4g} A^2 s"
                + ("" if sc.simulation.cycle_time else " (one run, no cycle time)"),
                values={"i2t_A2s": float(res.summary["i2t_A2s"]), "cycle_time_s": cycle},
            )
        )
    title = "Peak current within the motor's limit"
    if ck.peak_current is None:
        out.append(
            not_applicable(
                "duty.peak_current",
                "duty",
                title,
                "give checks.peak_current (the demagnetisation or brush limit)",
            )
        )
    else:
        done = [(n, r.result) for n, r in runs.runs.items() if r.result is not None]
        if not done:
            out.append(Verdict("duty.peak_current", "duty", title, "fail", detail="no run"))
        else:
            name, worst = max(done, key=lambda nr: nr[1].summary["peak_current_A"])
            peak = float(worst.summary["peak_current_A"])
            out.append(
                judged(
                    "duty.peak_current",
                    "duty",
                    title,
                    peak,
                    ck.peak_current,
                    "A",
                    detail=f"{peak:.4g} A at {worst.summary['peak_current_time_s']:.4g} s "
                    f"in the {name} run ({runs.get(name).description})",
                    values={"run": name},
                )
            )
    return out, figures


def thermal_figure(sc: Scenario, res, limit_K: float) -> Figure:
    """Winding temperature over the run with the class limit less the hot-spot allowance."""
    th = sc.thermal
    fig = Figure(figsize=(8.0, 3.8), dpi=110, layout="constrained")
    ax = fig.add_subplot()
    t = res.trace["time_s"]
    ax.plot(
        t,
        celsius(res.trace["winding_temperature_K"]),
        color="#b03a2e",
        lw=1.4,
        label="winding (average, model)",
    )
    if "housing_temperature_K" in res.trace:
        ax.plot(
            t,
            celsius(res.trace["housing_temperature_K"]),
            color="#8a5a2b",
            lw=1.2,
            label="housing (model)",
        )
    ax.axhline(
        celsius(limit_K - th.hot_spot_allowance),
        color="#22313f",
        ls="--",
        lw=1.0,
        label=f"class {th.insulation_class} limit less the hot-spot allowance",
    )
    ax.axhline(celsius(th.ambient), color="#8a8f96", ls=":", lw=1.0, label="ambient")
    ax.set_xlabel("time [s]")
    ax.set_ylabel("temperature [degC]")
    ax.grid(True, color="#dfe3e8")
    ax.legend(fontsize=7, loc="best")
    ax.set_title(
        "Winding temperature" + ("" if sc.simulation.cycle_time is None else " (settled cycle)"),
        fontsize=9,
    )
    return fig
