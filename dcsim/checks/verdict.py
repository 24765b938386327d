"""Verdicts: the answer of one design check, and the set of them for a scenario.

A check compares one figure of the simulated drive (a peak heat fraction, a bus voltage, a
winding temperature, a phase margin) with a limit and says ``pass``, ``fail`` or ``n/a`` (not
applicable: the scenario lacks the part or the rating the check needs; the detail says which
key to give). ``info`` rows carry sizing suggestions (a minimum capacitance, a resistor rating):
they are figures, not verdicts, and never fail a check.

The margin is signed and relative to the limit: ``(limit - figure) / limit`` for an upper
limit, ``(figure - limit) / limit`` for a lower one, so that a positive margin is inside the
limit and ``-0.1`` means 10 % beyond it.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

STATUSES = ("pass", "fail", "n/a", "info")

CAUTION = (
    "Caution: simulation is not a substitute for the component makers' data, local electrical "
    "codes and licensed practice; verify on hardware with protection in place."
)
"""Opens every check output and report."""


@dataclass(frozen=True)
class Verdict:
    """One check's answer.

    Attributes
    ----------
    name : str
        Stable identifier, e.g. ``"fuse.survives_start"`` (the key in ``verdicts.json``).
    group : str
        ``"fuse"``, ``"regeneration"``, ``"thermal"``, ``"duty"``, ``"loops"`` or ``"bus"``.
    title : str
        What is checked, in words.
    status : str
        One of :data:`STATUSES`.
    figure : float or None
        The figure behind the verdict [SI unit of ``unit``].
    limit : float or None
        The limit it is held against [same unit].
    unit : str
        Display unit of ``figure`` and ``limit`` (SI, e.g. ``"V"``, ``"K"``, ``"-"``).
    upper : bool
        True when ``figure`` must stay at or below ``limit``; False when at or above.
    detail : str
        The figure in words, how it was found, or why the check does not apply.
    values : dict
        Further SI numbers behind the verdict (for ``verdicts.json``).
    plots : tuple of str
        Names of the figures that show it (keys of :attr:`CheckReport.figures`).
    """

    name: str
    group: str
    title: str
    status: str
    figure: float | None = None
    limit: float | None = None
    unit: str = ""
    upper: bool = True
    detail: str = ""
    values: Mapping[str, Any] = field(default_factory=dict)
    plots: tuple[str, ...] = ()

    def __post_init__(self) -> None:
        if self.status not in STATUSES:
            raise ValueError(f"status {self.status!r} is not one of {STATUSES}")

    @property
    def margin(self) -> float | None:
        """Signed relative margin (positive: inside the limit) [-]; None without both numbers."""
        if self.figure is None or self.limit is None or self.limit == 0.0:
            return None
        if not (math.isfinite(self.figure) and math.isfinite(self.limit)):
            inside = self.figure <= self.limit if self.upper else self.figure >= self.limit
            return math.inf if inside else -math.inf
        if self.upper:
            return (self.limit - self.figure) / abs(self.limit)
        return (self.figure - self.limit) / abs(self.limit)

    def as_dict(self) -> dict[str, Any]:
        """JSON-ready dict (``null`` for a missing or infinite number)."""
        return {
            "name": self.name,
            "group": self.group,
            "title": self.title,
            "status": self.status,
            "figure": _json_number(self.figure),
            "limit": _json_number(self.limit),
            "unit": self.unit,
            "limit_kind": "max" if self.upper else "min",
            "margin": _json_number(self.margin),
            "detail": self.detail,
            "values": {k: _json_value(v) for k, v in self.values.items()},
            "plots": list(self.plots),
        }


def judged(
    name: str,
    group: str,
    title: str,
    figure: float,
    limit: float,
    unit: str,
    *,
    upper: bool = True,
    detail: str = "",
    values: Mapping[str, Any] | None = None,
    plots: tuple[str, ...] = (),
) -> Verdict:
    """A pass/fail verdict of ``figure`` against ``limit`` (at the limit counts as a pass)."""
    inside = figure <= limit if upper else figure >= limit
    return Verdict(
        name=name,
        group=group,
        title=title,
        status="pass" if inside else "fail",
        figure=float(figure),
        limit=float(limit),
        unit=unit,
        upper=upper,
        detail=detail,
        values=dict(values or {}),
        plots=plots,
    )


def not_applicable(name: str, group: str, title: str, why: str) -> Verdict:
    """A check that does not apply to this scenario; ``why`` names the missing key or part."""
    return Verdict(name=name, group=group, title=title, status="n/a", detail=why)


@dataclass(frozen=True)
class CheckReport:
    """Every verdict of a scenario, with what is needed to show them.

    Attributes
    ----------
    scenario_source : str
        The scenario file.
    title : str
        The scenario's ``about.title`` (may be empty).
    verdicts : tuple of Verdict
        In the order they are shown.
    figures : dict of str to matplotlib.figure.Figure
        Plots named by the verdicts' ``plots`` (and a few overview plots).
    runs : dict of str to str
        The simulations behind the verdicts: name -> one line saying what was changed.
    warnings : tuple of str
        Things the user must read with the verdicts (a generic fuse class, a model limit).
    """

    scenario_source: str
    title: str
    verdicts: tuple[Verdict, ...]
    figures: Mapping[str, Any] = field(default_factory=dict)
    runs: Mapping[str, str] = field(default_factory=dict)
    warnings: tuple[str, ...] = ()

    @property
    def failed(self) -> bool:
        """True when any verdict is ``fail``."""
        return any(v.status == "fail" for v in self.verdicts)

    def counts(self) -> dict[str, int]:
        """Number of verdicts per status."""
        return {s: sum(v.status == s for v in self.verdicts) for s in STATUSES}

    def as_dict(self) -> dict[str, Any]:
        """The content of ``verdicts.json``."""
        return {
            "caution": CAUTION,
            "scenario": self.scenario_source,
            "title": self.title,
            "all_pass": not self.failed,
            "counts": self.counts(),
            "runs": dict(self.runs),
            "warnings": list(self.warnings),
            "verdicts": [v.as_dict() for v in self.verdicts],
        }


def _json_number(x: float | None) -> float | None:
    if x is None or not math.isfinite(x):
        return None
    return float(x)


def _json_value(v: Any) -> Any:
    if isinstance(v, bool) or v is None or isinstance(v, str):
        return v
    if isinstance(v, (int, float)):
        return _json_number(float(v)) if isinstance(v, float) else v
    if isinstance(v, (list, tuple)):
        return [_json_value(x) for x in v]
    if isinstance(v, Mapping):
        return {str(k): _json_value(x) for k, x in v.items()}
    try:
        return _json_number(float(v))
    except (TypeError, ValueError):
        return str(v)
