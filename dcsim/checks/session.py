"""All design checks of a scenario: the runs they need, then every verdict, in one report."""

from __future__ import annotations

from collections.abc import Callable

from dcsim.checks.brownout import brown_out_checks
from dcsim.checks.duty import duty_checks
from dcsim.checks.fuse import fuse_checks
from dcsim.checks.loops import loop_checks
from dcsim.checks.regen import regen_checks
from dcsim.checks.runs import run_all
from dcsim.checks.verdict import CheckReport
from dcsim.scenario.schema import Scenario


def run_checks(sc: Scenario, progress: Callable[[str, float], None] | None = None) -> CheckReport:
    """Run the scenario and its check variants and judge every check.

    Parameters
    ----------
    sc : Scenario
        The drive; its ``[checks]`` table (optional) gives the limits and ratings.
    progress : callable, optional
        ``progress(run_name, fraction)`` during each run.

    Returns
    -------
    CheckReport
        Verdicts in the order fuse, regeneration, thermal, duty, loops, bus; the figures they name
        and an overview of the nominal run.
    """
    runs = run_all(sc, progress)
    verdicts = []
    figures = {}
    warnings: list[str] = []
    v, f, w = fuse_checks(sc, runs)
    verdicts += v
    figures |= f
    warnings += w
    v, f = regen_checks(sc, runs)
    verdicts += v
    figures |= f
    v, f = duty_checks(sc, runs)
    verdicts += v
    figures |= f
    verdicts += loop_checks(sc)
    verdicts += brown_out_checks(sc, runs)
    nominal = runs.result("nominal")
    if nominal is not None:
        from dcsim.results.plots import plot_overview

        figures["overview"] = plot_overview(nominal)
    warnings += [f"motor catalogue data: {w}" for w in sc.motor.catalogue_warnings]
    if sc.thermal is not None and not sc.thermal.coupled:
        warnings.append(
            "thermal.coupled = false: the armature resistance stays at its reference value; "
            "the winding temperature is computed from the run but does not act on it."
        )
    return CheckReport(
        scenario_source=sc.source,
        title=sc.about.title,
        verdicts=tuple(verdicts),
        figures=figures,
        runs={
            name: r.description + (f" -- {r.error}" if r.error else "")
            for name, r in runs.runs.items()
        },
        warnings=tuple(warnings),
    )
