"""Loop margins: each configured loop's gain and phase margins against the check limits.

The margins come from the tuning module's exact sampled model of the loop with the gains as
written (:func:`dcsim.tuning.tuner.tune` with ``method="scenario"``). The default limits, 45
deg and 6 dB, are common practice (no source).
"""

from __future__ import annotations

from dcsim.checks.verdict import Verdict, judged, not_applicable
from dcsim.errors import DcsimError
from dcsim.scenario.schema import Checks, Scenario

_ACTIVE = {
    "voltage": (),
    "current": ("current",),
    "speed": ("current", "speed"),
    "position": ("current", "speed", "position"),
}


def loop_checks(sc: Scenario) -> list[Verdict]:
    """Two verdicts (phase and gain margin) per active loop."""
    ck = sc.checks or Checks()
    loops = _ACTIVE[sc.control.mode]
    if not loops:
        return [
            not_applicable(
                "loops.margins",
                "loops",
                "Loop margins",
                "open-loop voltage control: no loop to check",
            )
        ]
    from dcsim.tuning.plants import machine_problem
    from dcsim.tuning.tuner import tune

    problem = machine_problem(sc)
    if problem is not None:
        return [
            not_applicable(
                "loops.margins",
                "loops",
                "Loop margins",
                f"the loops of this machine are not analysed: {problem}",
            )
        ]
    out = []
    for loop in loops:
        try:
            r = tune(sc, loop, "scenario")
        except DcsimError as err:
            out.append(
                Verdict(
                    f"loops.{loop}",
                    "loops",
                    f"{loop.capitalize()} loop margins",
                    "fail",
                    detail=f"the loop could not be analysed: {err}",
                )
            )
            continue
        f = r.figures
        common = (
            f"crossover {f.crossover_rad_s:.4g} rad/s, bandwidth {f.bandwidth_rad_s:.4g} "
            f"rad/s, Ms {f.ms:.3g} ({r.model} model, gains as written)"
        )
        values = {"crossover_rad_s": f.crossover_rad_s, "ms": f.ms, "stable": f.stable}
        pm = judged(
            f"loops.{loop}.phase_margin",
            "loops",
            f"{loop.capitalize()} loop phase margin",
            f.phase_margin_deg,
            ck.min_phase_margin,
            "deg",
            upper=False,
            detail=common,
            values=values,
        )
        gm = judged(
            f"loops.{loop}.gain_margin",
            "loops",
            f"{loop.capitalize()} loop gain margin",
            f.gain_margin_dB,
            ck.min_gain_margin,
            "dB",
            upper=False,
            detail=common,
            values=values,
        )
        if not f.stable:
            pm = Verdict(
                pm.name,
                "loops",
                pm.title,
                "fail",
                pm.figure,
                pm.limit,
                "deg",
                False,
                "the closed loop is unstable; " + common,
                values,
            )
        out.extend([pm, gm])
    return out
