"""Fuse element: first-order heating model, its parameters, and the checks around them.

Model
-----
The simulation kernel integrates the heat fraction ``f`` of the fuse element (``f = 1`` is
melting) in the supply line::

    df/dt = (i^2 / I_min^2 - f) / tau,        tau = melting_i2t / I_min^2

This is a lumped (single time constant) thermal model of the element [1]_: heat in ``~ i^2``,
heat out ``~ f``. Its closed-form consequences under a constant current ``I`` from ``f0``::

    f(t)  = r + (f0 - r) exp(-t / tau),       r = I^2 / I_min^2
    t_melt = tau ln((r - f0) / (r - 1))       (r > 1; never melts for abs(I) <= I_min)

From a cold element (``f0 = 0``) this is ``t_melt = tau ln(I^2 / (I^2 - I_min^2))``; for short
pulses ``ln(1 / (1 - x)) -> x`` so ``I^2 t_melt -> I_min^2 tau = melting_i2t`` (the adiabatic
limit, where the pre-arcing I2t of the maker's data applies).

Parameters come from one of three places (:func:`fuse_model_from_keys`): the scenario's
``melting_i2t`` (and optional ``min_melting_current``), a least-squares fit to a maker's
time-current table (:func:`fit_time_current`), or a generic model that falls inside the
pre-arcing time gates of IEC 60127-2 for miniature fuse-links (:func:`generic_model`).

Everything here is a model. Simulation is not a substitute for the fuse maker's time-current
data, local electrical codes and licensed practice.

References
----------
.. [1] Lumped thermal model of a heated body: one heat capacity behind one thermal resistance
   gives a first-order response; e.g. F. P. Incropera et al., *Fundamentals of Heat and Mass
   Transfer*, 6th ed., Wiley (2007), sec. 5.1-5.3 (lumped capacitance method).
.. [2] IEC 60127-2, *Miniature fuses - Part 2: Cartridge fuse-links*, standard sheet 2
   (quick-acting, low breaking capacity) and standard sheet 3 (time-lag, low breaking capacity):
   pre-arcing time limits at 1.5, 2.1, 2.75, 4 and 10 times rated current. The sheet 2 values
   are confirmed from a faithful copy; the sheet 3 values are from memory.
"""

from __future__ import annotations

import math
import numbers
import os
import re
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from scipy import optimize

from dcsim.errors import ScenarioError

CAUTION = (
    "Simulation is not a substitute for the fuse maker's data, local electrical codes and "
    "licensed practice."
)

ORIGINS = ("parameters", "table fit", "generic quick-acting class", "generic time-lag class")

DEFAULT_MIN_MELTING_MULTIPLE = 2.1
"""``min_melting_current`` default, as a multiple of the rated current (scenario contract)."""

FIT_WARN_RATIO = 2.0
"""A fit whose worst point is off by more than this factor in time carries a warning.
Project choice (no source)."""

FIT_REFUSE_RATIO = 10.0
"""A fit whose worst point is off by more than this factor in time is refused: the first-order
model does not represent the table. Project choice (no source)."""


# --------------------------------------------------------------------------------------------
# Model
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class FuseModel:
    """Parameters of the first-order fuse heating model.

    Attributes
    ----------
    rated_current_A : float
        Rated current ``In`` of the fuse [A].
    melting_i2t_A2s : float
        Pre-arcing I2t of the adiabatic (short-pulse) region [A^2 s]; equals ``I_min^2 tau``.
    min_melting_current_A : float
        Minimum melting current ``I_min`` [A]: at or below it the model never melts. Must
        exceed ``rated_current_A`` (a fuse must carry its rating).
    origin : str
        Where the parameters came from: one of :data:`ORIGINS`.
    warning : str
        Text the user must see with any result based on this model ("" if none).
    """

    rated_current_A: float
    melting_i2t_A2s: float
    min_melting_current_A: float
    origin: str
    warning: str = ""

    def __post_init__(self) -> None:
        for name, value in (
            ("rated_current_A", self.rated_current_A),
            ("melting_i2t_A2s", self.melting_i2t_A2s),
            ("min_melting_current_A", self.min_melting_current_A),
        ):
            if not (_is_number(value) and math.isfinite(value) and value > 0.0):
                raise ScenarioError(
                    f"expected a finite number > 0, found {value!r}", key=f"FuseModel.{name}"
                )
        if self.min_melting_current_A <= self.rated_current_A:
            raise ScenarioError(
                f"expected a minimum melting current above the rated current "
                f"{self.rated_current_A:g} A (a fuse must carry its rating), "
                f"found {self.min_melting_current_A:g} A",
                key="FuseModel.min_melting_current_A",
            )
        if self.origin not in ORIGINS:
            raise ScenarioError(
                f"expected one of {', '.join(ORIGINS)}, found {self.origin!r}",
                key="FuseModel.origin",
            )

    @property
    def tau_s(self) -> float:
        """Thermal time constant ``tau = melting_i2t / I_min^2`` [s]."""
        return self.melting_i2t_A2s / self.min_melting_current_A**2


def _is_number(value: object) -> bool:
    """A real number (Python or numpy), not a bool."""
    return isinstance(value, numbers.Real) and not isinstance(value, (bool, np.bool_))


def _scalar_or_array(x: np.ndarray) -> np.ndarray | float:
    return float(x) if x.ndim == 0 else x


def melting_time_s(
    model: FuseModel, current_A: float | np.ndarray, f0: float = 0.0
) -> np.ndarray | float:
    """Melting time under a constant current, from heat fraction ``f0``.

    ``t = tau ln((r - f0) / (r - 1))`` with ``r = I^2 / I_min^2``; for ``f0 = 0`` this is
    ``tau ln(I^2 / (I^2 - I_min^2))`` (closed-form solution of the model ODE, module
    docstring). Heating goes with ``i^2``, so the sign of the current does not matter.

    Parameters
    ----------
    model : FuseModel
        The fuse.
    current_A : float or array_like
        Constant current [A]; numpy broadcasting.
    f0 : float
        Heat fraction at the start, in [0, 1) (0 = cold element) [-].

    Returns
    -------
    float or numpy.ndarray
        Melting time [s]; ``inf`` at or below ``I_min``; 0 if ``f0 >= 1``.
    """
    _check_f0(f0)
    i = np.abs(np.asarray(current_A, dtype=float))
    r = (i / model.min_melting_current_A) ** 2
    with np.errstate(divide="ignore", invalid="ignore"):
        # ln((r - f0)/(r - 1)) = -log1p(-(1 - f0)/(r - f0)), accurate when r >> 1.
        t = -model.tau_s * np.log1p(-(1.0 - f0) / (r - f0))
    t = np.where(r > 1.0, t, np.inf)
    if f0 >= 1.0:
        t = np.zeros_like(t)
    return _scalar_or_array(t)


def heat_fraction(
    model: FuseModel, current_A: float | np.ndarray, t_s: float | np.ndarray, f0: float = 0.0
) -> np.ndarray | float:
    """Heat fraction after ``t_s`` of constant current, from ``f0``.

    ``f(t) = r + (f0 - r) exp(-t / tau)``, ``r = I^2 / I_min^2`` (closed-form solution of
    ``df/dt = (r - f) / tau``). The value is the model's, not clipped: ``f >= 1`` means the
    element has melted (the kernel opens the circuit at ``f = 1``).

    Parameters
    ----------
    model : FuseModel
        The fuse.
    current_A : float or array_like
        Constant current [A]; broadcasts with ``t_s``.
    t_s : float or array_like
        Time since the start [s], >= 0.
    f0 : float
        Heat fraction at ``t = 0`` [-], >= 0.

    Returns
    -------
    float or numpy.ndarray
        Heat fraction [-].
    """
    _check_f0(f0)
    t = np.asarray(t_s, dtype=float)
    if np.any(~np.isfinite(t)) or np.any(t < 0.0):
        raise ScenarioError(f"expected times >= 0 s, found {t_s!r}", key="t_s")
    r = (np.asarray(current_A, dtype=float) / model.min_melting_current_A) ** 2
    return _scalar_or_array(r + (f0 - r) * np.exp(-t / model.tau_s))


def adiabatic_melting_time_s(model: FuseModel, current_A: float | np.ndarray) -> np.ndarray | float:
    """Melting time of the adiabatic (short-pulse) limit, ``melting_i2t / I^2`` [s].

    Parameters
    ----------
    model : FuseModel
        The fuse.
    current_A : float or array_like
        Constant current [A]; ``inf`` at zero current.
    """
    i = np.asarray(current_A, dtype=float)
    with np.errstate(divide="ignore"):
        return _scalar_or_array(model.melting_i2t_A2s / (i * i))


def _check_f0(f0: float) -> None:
    """``f0 >= 1`` is allowed: the element has already melted."""
    ok = _is_number(f0) and math.isfinite(f0) and f0 >= 0.0
    if not ok:
        raise ScenarioError(f"expected a heat fraction >= 0, found {f0!r}", key="f0")


def _log_shape(multiple: np.ndarray, k: float) -> np.ndarray:
    """``ln(m^2 / (m^2 - k^2))`` = melting time / tau at ``m`` x In for ``I_min = k`` x In."""
    with np.errstate(divide="ignore", invalid="ignore"):
        g = -np.log1p(-((k / multiple) ** 2))
    return np.where(multiple > k, g, np.inf)


# --------------------------------------------------------------------------------------------
# IEC 60127-2 time gates
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Gate:
    """One pre-arcing time limit: at ``multiple`` x In, melt within [t_min_s, t_max_s].

    Attributes
    ----------
    multiple : float
        Test current as a multiple of the rated current [-].
    t_min_s : float
        Shortest allowed pre-arcing time [s] (0 if none).
    t_max_s : float
        Longest allowed pre-arcing time [s] (``inf`` if none).
    status : str
        "confirmed" (read in the standard or a faithful copy) or "from memory".
    """

    multiple: float
    t_min_s: float
    t_max_s: float
    status: str


_MIN = 60.0
_HOUR = 3600.0

IEC_60127_2_GATES: dict[str, tuple[Gate, ...]] = {
    # IEC 60127-2 standard sheet 2 (quick-acting F, low breaking) -- confirmed from a faithful
    # copy.
    "quick-acting": (
        Gate(1.5, 1.0 * _HOUR, math.inf, "confirmed"),
        Gate(2.1, 0.0, 30.0 * _MIN, "confirmed"),
        Gate(2.75, 0.050, 2.0, "confirmed"),
        Gate(4.0, 0.010, 0.300, "confirmed"),
        Gate(10.0, 0.0, 0.020, "confirmed"),
    ),
    # IEC 60127-2 standard sheet 3 (time-lag T, low breaking) -- from memory.
    "time-lag": (
        Gate(1.5, 1.0 * _HOUR, math.inf, "from memory"),
        Gate(2.1, 0.0, 2.0 * _MIN, "from memory"),
        Gate(2.75, 0.600, 10.0, "from memory"),
        Gate(4.0, 0.150, 3.0, "from memory"),
        Gate(10.0, 0.020, 0.150, "from memory"),
    ),
}
"""Pre-arcing time gates of IEC 60127-2 per fuse class (see [2]_ in the module docstring)."""

_CLASS_RATINGS_A: dict[str, tuple[float, float]] = {
    # Rated-current span the sheets cover, per CHECKS.md: sheet 2 125 mA - 10 A (confirmed),
    # sheet 3 125 mA and up (from memory).
    "quick-acting": (0.125, 10.0),
    "time-lag": (0.125, math.inf),
}

_CLASS_ALIASES = {
    "quick-acting": "quick-acting",
    "quick acting": "quick-acting",
    "f": "quick-acting",
    "time-lag": "time-lag",
    "time lag": "time-lag",
    "t": "time-lag",
}


def _normalise_class(fuse_class: object, *, source: str = "", key: str = "fuse.class") -> str:
    name = _CLASS_ALIASES.get(str(fuse_class).strip().lower()) if fuse_class else None
    if name is None:
        raise ScenarioError(
            'expected a fuse class "quick-acting" (or "F") or "time-lag" (or "T"), '
            f"found {fuse_class!r}",
            source=source,
            key=key,
        )
    return name


@dataclass(frozen=True)
class GateResult:
    """The model's melting time at one gate of a fuse class.

    Attributes
    ----------
    multiple : float
        Test current as a multiple of the rated current [-].
    current_A : float
        Test current [A].
    model_time_s : float
        Model melting time from cold [s] (``inf``: never melts).
    t_min_s, t_max_s : float
        The gate's limits [s].
    inside : bool
        ``t_min_s <= model_time_s <= t_max_s``.
    status : str
        The gate value's status: "confirmed" or "from memory".
    """

    multiple: float
    current_A: float
    model_time_s: float
    t_min_s: float
    t_max_s: float
    inside: bool
    status: str


def check_gates(model: FuseModel, fuse_class: str) -> list[GateResult]:
    """Model melting times at the IEC 60127-2 test currents of ``fuse_class``.

    Parameters
    ----------
    model : FuseModel
        The fuse.
    fuse_class : str
        "quick-acting" ("F") or "time-lag" ("T").

    Returns
    -------
    list of GateResult
        One per gate, in increasing current. A pass here says the model matches the standard's
        limits; simulation is not a substitute for the maker's data, local electrical codes and
        licensed practice.
    """
    name = _normalise_class(fuse_class)
    results = []
    for gate in IEC_60127_2_GATES[name]:
        current = gate.multiple * model.rated_current_A
        t = float(melting_time_s(model, current))
        results.append(
            GateResult(
                multiple=gate.multiple,
                current_A=current,
                model_time_s=t,
                t_min_s=gate.t_min_s,
                t_max_s=gate.t_max_s,
                inside=bool(gate.t_min_s <= t <= gate.t_max_s),
                status=gate.status,
            )
        )
    return results


def generic_model(rated_current_A: float, fuse_class: str) -> FuseModel:
    """A first-order model that falls inside every IEC 60127-2 gate of ``fuse_class``.

    Feasible region. Write ``I_min = k In``; the melting time at ``m In`` is
    ``tau g(m, k)``, ``g = ln(m^2 / (m^2 - k^2))``, so every gate is a condition on ``(k, tau)``
    alone (the model scales with ``In``). A gate with no upper limit (1.5 In >= 60 min) holds
    for any ``tau`` if ``k >= 1.5`` (never melts there); for ``k < 1.5`` it needs
    ``1 - k^2/2.25 <= exp(-3600 s / tau)``, which with the sub-10 s ``tau`` the short-time gates
    allow lies within rounding of ``k = 1.5``. A gate with a finite upper limit at 2.1 In needs
    ``k < 2.1`` (else it never melts there). Hence ``k`` lies in ``[k_lo, k_hi) = [1.5, 2.1)``,
    and at each such ``k`` the other gates bound ``tau`` to
    ``[max t_min / g(m, k), min t_max / g(m, k)]`` (non-empty over the whole range for both
    classes: about [0.09, 0.62] s for quick-acting and [1.1, 4.7] s for time-lag at k = 1.775).

    Choice (closed form, reproducible). The log-width of the ``tau`` interval grows towards
    ``k = 2.1``, so maximising the log-time margin alone would put ``I_min`` on the 2.1 In test
    current, i.e. on the edge in current. Instead ``k = sqrt(k_lo k_hi)`` (the centre of
    ``[1.5, 2.1]`` in log current, ``k = 1.7748``: a factor 1.183 from both conventional test
    currents), then ``tau = sqrt(tau_lo tau_hi)`` (the centre of its feasible interval in log
    time: the same factor of margin to the nearest lower and upper time limit).
    ``melting_i2t = k^2 In^2 tau``.

    Parameters
    ----------
    rated_current_A : float
        Rated current ``In`` [A].
    fuse_class : str
        "quick-acting" ("F") or "time-lag" ("T").

    Returns
    -------
    FuseModel
        With ``origin`` "generic quick-acting class" or "generic time-lag class" and a warning
        that a generic class is no substitute for the maker's time-current curve.
    """
    name = _normalise_class(fuse_class)
    _check_positive(rated_current_A, source="", key="rated_current_A")
    gates = IEC_60127_2_GATES[name]
    k_lo = max(g.multiple for g in gates if math.isinf(g.t_max_s))
    k_hi = min(g.multiple for g in gates if math.isfinite(g.t_max_s))
    k = math.sqrt(k_lo * k_hi)
    multiples = np.array([g.multiple for g in gates])
    shape = _log_shape(multiples, k)
    t_min = np.array([g.t_min_s for g in gates])
    t_max = np.array([g.t_max_s for g in gates])
    melts = np.isfinite(shape)
    shape = np.where(melts, shape, 1.0)  # gates where the model never melts bound no tau
    tau_lo = float(np.max(np.where(melts & (t_min > 0.0), t_min / shape, 0.0)))
    tau_hi = float(np.min(np.where(melts & np.isfinite(t_max), t_max / shape, np.inf)))
    if not 0.0 < tau_lo < tau_hi < math.inf:  # the gate tables are constants of this module
        raise RuntimeError(f"no generic {name} model: tau interval [{tau_lo}, {tau_hi}] s")
    tau = math.sqrt(tau_lo * tau_hi)
    i_min = k * rated_current_A
    warning = (
        f"Generic {name} fuse model (I_min = {k:.4g} x In, tau = {tau:.4g} s) chosen inside the "
        f"IEC 60127-2 {name} time gates"
        + (" (gate values from memory)" if any(g.status != "confirmed" for g in gates) else "")
        + "; a generic class is no substitute for the maker's time-current curve: give "
        "fuse.table or fuse.melting_i2t from the maker's data sheet. "
    )
    lo, hi = _CLASS_RATINGS_A[name]
    if not lo <= rated_current_A <= hi:
        warning += (
            f"The rated current {rated_current_A:g} A lies outside the span the standard sheet "
            f"covers ({lo:g} A to {hi:g} A). "
        )
    return FuseModel(
        rated_current_A=float(rated_current_A),
        melting_i2t_A2s=i_min * i_min * tau,
        min_melting_current_A=i_min,
        origin=f"generic {name} class",
        warning=warning + CAUTION,
    )


# --------------------------------------------------------------------------------------------
# Fitting a time-current table
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class FitReport:
    """How well a fitted model reproduces a time-current table.

    Attributes
    ----------
    currents_A : tuple of float
        Table currents, increasing [A].
    given_times_s : tuple of float
        Table melting times [s].
    model_times_s : tuple of float
        Model melting times from cold at the same currents [s].
    ratios : tuple of float
        ``model / given`` per point [-].
    worst_ratio : float
        ``max(max(ratio, 1/ratio))`` over the points, >= 1 [-].
    worst_current_A : float
        Current of the worst point [A].
    rms_log10_error : float
        Root-mean-square of ``log10(model / given)`` [-].
    warning : str
        Text the user must see ("" if the fit is close).
    """

    currents_A: tuple[float, ...]
    given_times_s: tuple[float, ...]
    model_times_s: tuple[float, ...]
    ratios: tuple[float, ...]
    worst_ratio: float
    worst_current_A: float
    rms_log10_error: float
    warning: str = ""


def fit_time_current(
    currents_A: Sequence[float] | np.ndarray,
    times_s: Sequence[float] | np.ndarray,
    *,
    rated_current_A: float,
    source: str = "<scenario>",
    key: str = "fuse.table",
) -> tuple[FuseModel, FitReport]:
    """Fit ``(I_min, tau)`` to a melting time-current table by least squares on ``ln(time)``.

    Residuals ``ln t_i - ln(tau) - ln g(I_i)``, ``g = ln(I^2 / (I^2 - I_min^2))``. For a given
    ``I_min`` the best ``ln(tau)`` is the mean of ``ln t_i - ln g(I_i)`` (linear least
    squares), so the fit is a one-dimensional search over ``I_min`` in
    ``(rated_current_A, min I_i)``: a coarse grid, then ``scipy.optimize.minimize_scalar``
    (bounded) around the best grid point. ``I_min`` is mapped as
    ``I_min = In + (I_1 - In) / (1 + exp(-w))`` so both bounds stay open.

    Tables the model cannot represent are refused (ScenarioError naming ``source`` and
    ``key``): fewer than 2 points; non-finite or non-positive values; repeated currents; a
    current at or below the rated current (a fuse must carry its rating); melting times that
    do not fall as current rises; ``I^2 t`` at the highest current above that at the lowest
    (the model's ``I^2 t`` falls monotonically to ``melting_i2t``); or a best fit still off by
    more than :data:`FIT_REFUSE_RATIO` in time at some point.

    Parameters
    ----------
    currents_A : array_like
        Table currents [A] (any order).
    times_s : array_like
        Pre-arcing (melting) times from cold at those currents [s].
    rated_current_A : float
        Rated current of the fuse [A].
    source, key : str
        Scenario file and key, for error messages.

    Returns
    -------
    (FuseModel, FitReport)
        The model (``origin`` "table fit") and the per-point comparison.
    """
    _check_positive(rated_current_A, source=source, key=key.rsplit(".", 1)[0] + ".rated_current")
    i, t = _validate_table(currents_A, times_s, rated_current_A, source=source, key=key)
    log_t = np.log(t)
    span = i[0] - rated_current_A

    def i_min_of(w: float) -> float:
        return rated_current_A + span / (1.0 + math.exp(-w))

    def profile(w: float) -> tuple[float, float]:
        """Sum of squared log residuals and best ln(tau) at I_min(w)."""
        with np.errstate(divide="ignore", invalid="ignore"):
            lg = np.log(_log_shape(i, i_min_of(w)))
        if not np.all(np.isfinite(lg)):  # I_min rounded onto the lowest table current
            return math.inf, math.nan
        log_tau = float(np.mean(log_t - lg))
        res = log_t - log_tau - lg
        return float(res @ res), log_tau

    # w in [-30, 30]: I_min within exp(-30) ~ 1e-13 of either bound, relative to the span.
    grid = np.linspace(-30.0, 30.0, 241)
    ssr = np.array([profile(w)[0] for w in grid])
    j = int(np.argmin(ssr))
    lo, hi = grid[max(j - 1, 0)], grid[min(j + 1, grid.size - 1)]
    best = optimize.minimize_scalar(
        lambda w: profile(w)[0], bounds=(lo, hi), method="bounded", options={"xatol": 1e-12}
    )
    w_best = float(best.x) if best.fun <= ssr[j] else float(grid[j])
    _, log_tau = profile(w_best)
    i_min = i_min_of(w_best)
    tau = math.exp(log_tau)

    model = FuseModel(
        rated_current_A=float(rated_current_A),
        melting_i2t_A2s=i_min * i_min * tau,
        min_melting_current_A=i_min,
        origin="table fit",
    )
    t_model = np.asarray(melting_time_s(model, i), dtype=float)
    ratios = t_model / t
    spread = np.maximum(ratios, 1.0 / ratios)
    w = int(np.argmax(spread))
    worst = float(spread[w])
    if worst > FIT_REFUSE_RATIO:
        raise ScenarioError(
            f"expected a time-current table the first-order fuse model can follow within a "
            f"factor {FIT_REFUSE_RATIO:g} in time; found the best fit (I_min = {i_min:.4g} A, "
            f"tau = {tau:.4g} s) off by a factor {worst:.3g} at {i[w]:g} A "
            f"(table {t[w]:.4g} s, model {t_model[w]:.4g} s); give fewer, representative "
            f"points or fuse.melting_i2t from the maker's data",
            source=source,
            key=key,
        )
    warning = ""
    if worst > FIT_WARN_RATIO:
        warning = (
            f"The fitted fuse model is off by a factor {worst:.3g} in melting time at "
            f"{i[w]:g} A; compare its curve with the maker's before relying on it. "
        )
    if w_best <= grid[0] + 1e-9:
        warning += (
            "The fit put the minimum melting current at the rated current; the table "
            "suggests a fuse that does not carry its rating in this model. "
        )
    if warning:
        warning += CAUTION
        model = FuseModel(
            rated_current_A=model.rated_current_A,
            melting_i2t_A2s=model.melting_i2t_A2s,
            min_melting_current_A=model.min_melting_current_A,
            origin=model.origin,
            warning=warning,
        )
    report = FitReport(
        currents_A=tuple(float(x) for x in i),
        given_times_s=tuple(float(x) for x in t),
        model_times_s=tuple(float(x) for x in t_model),
        ratios=tuple(float(x) for x in ratios),
        worst_ratio=worst,
        worst_current_A=float(i[w]),
        rms_log10_error=float(np.sqrt(np.mean(np.log10(ratios) ** 2))),
        warning=warning,
    )
    return model, report


def _validate_table(
    currents_A: object, times_s: object, rated_current_A: float, *, source: str, key: str
) -> tuple[np.ndarray, np.ndarray]:
    try:
        i = np.asarray(currents_A, dtype=float).ravel()
        t = np.asarray(times_s, dtype=float).ravel()
    except (TypeError, ValueError):
        raise ScenarioError(
            f"expected numbers (current [A], melting time [s]), found {currents_A!r}, {times_s!r}",
            source=source,
            key=key,
        ) from None
    if i.size != t.size:
        raise ScenarioError(
            f"expected as many melting times as currents, found {i.size} currents and "
            f"{t.size} times",
            source=source,
            key=key,
        )
    if i.size < 2:
        raise ScenarioError(
            f"expected at least 2 (current, melting time) points, found {i.size}",
            source=source,
            key=key,
        )
    for name, arr, unit in (("current", i, "A"), ("melting time", t, "s")):
        bad = ~np.isfinite(arr) | (arr <= 0.0)
        if np.any(bad):
            n = int(np.argmax(bad))
            raise ScenarioError(
                f"expected each {name} finite and > 0 {unit}, found {arr[n]!r} at point {n + 1}",
                source=source,
                key=key,
            )
    order = np.argsort(i, kind="stable")
    i, t = i[order], t[order]
    if np.any(np.diff(i) == 0.0):
        n = int(np.argmax(np.diff(i) == 0.0))
        raise ScenarioError(
            f"expected each current once, found {i[n]:g} A twice", source=source, key=key
        )
    if i[0] <= rated_current_A:
        raise ScenarioError(
            f"expected every table current above the rated current {rated_current_A:g} A "
            f"(a fuse must carry its rating), found a melting time {t[0]:g} s at {i[0]:g} A",
            source=source,
            key=key,
        )
    rising = np.diff(t) >= 0.0
    if np.any(rising):
        n = int(np.argmax(rising))
        raise ScenarioError(
            f"expected melting times that fall as current rises (first-order fuse model), "
            f"found {t[n]:g} s at {i[n]:g} A but {t[n + 1]:g} s at {i[n + 1]:g} A",
            source=source,
            key=key,
        )
    i2t = i * i * t
    if i2t[-1] > i2t[0]:
        raise ScenarioError(
            f"expected I^2 t to fall towards the adiabatic melting I2t as current rises "
            f"(first-order fuse model), found {i2t[0]:.4g} A^2 s at {i[0]:g} A but "
            f"{i2t[-1]:.4g} A^2 s at {i[-1]:g} A",
            source=source,
            key=key,
        )
    return i, t


# --------------------------------------------------------------------------------------------
# CSV reading
# --------------------------------------------------------------------------------------------

_UNIT_IN_HEADER = re.compile(r"[\[(]\s*([^\])]*?)\s*[\])]")


def read_time_current_csv(
    path: str | os.PathLike[str], *, source: str, key: str
) -> tuple[np.ndarray, np.ndarray]:
    """Read a melting time-current table from a CSV file.

    Format: one point a line, ``current [A], melting time [s]``; comma or semicolon between
    the two values (the first data line decides; with semicolons, a comma inside a number is
    read as the decimal mark); ``#`` starts a comment; blank lines are skipped; the first
    non-comment line may be a text header. A unit in brackets in the header (``current [A]``)
    must be ``A`` for the first column and ``s`` for the second.

    Parameters
    ----------
    path : str or PathLike
        The CSV file.
    source, key : str
        Scenario file and key that named the table, for error messages. Each problem is one
        ScenarioError naming the CSV file, the line, what was expected and what was found.

    Returns
    -------
    (numpy.ndarray, numpy.ndarray)
        Currents [A] and melting times [s], in file order (currents strictly increasing).
    """
    p = Path(path)
    where = str(p)

    def fail(line_no: int | None, message: str) -> ScenarioError:
        at = f"{where}, line {line_no}" if line_no is not None else where
        return ScenarioError(f"{at}: {message}", source=source or where, key=key)

    try:
        text = p.read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        raise fail(None, "expected a CSV time-current table, found no such file") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise fail(None, f"expected a readable UTF-8 CSV file, found {exc}") from None

    currents: list[float] = []
    times: list[float] = []
    delimiter: str | None = None
    seen_line = False
    for line_no, raw in enumerate(text.splitlines(), start=1):
        line = raw.split("#", 1)[0].strip()
        if not line:
            continue
        first = not seen_line
        seen_line = True
        if delimiter is None:
            delimiter = ";" if ";" in line else ","
        fields = [f.strip() for f in line.split(delimiter)]
        values = [_parse_number(f, delimiter) for f in fields]
        if first and any(v is None for v in values):
            _check_header(fields, line_no, fail)
            delimiter = None  # the data lines decide the separator
            continue
        if len(fields) != 2:
            raise fail(
                line_no,
                f"expected 2 values 'current [A]{delimiter} melting time [s]', "
                f"found {len(fields)}: {raw.strip()!r}",
            )
        for name, value, field, unit in (
            ("current", values[0], fields[0], "A"),
            ("melting time", values[1], fields[1], "s"),
        ):
            if value is None:
                raise fail(line_no, f"expected a number ({name} in {unit}), found {field!r}")
            if not (math.isfinite(value) and value > 0.0):
                raise fail(line_no, f"expected a {name} > 0 {unit}, found {field!r}")
        current, time = float(values[0] or 0.0), float(values[1] or 0.0)
        if currents and current <= currents[-1]:
            raise fail(
                line_no,
                f"expected currents in increasing order (above {currents[-1]:g} A on the "
                f"line before), found {current:g} A",
            )
        if times and time >= times[-1]:
            raise fail(
                line_no,
                f"expected melting times that fall as current rises (below {times[-1]:g} s "
                f"on the line before), found {time:g} s",
            )
        currents.append(current)
        times.append(time)
    if len(currents) < 2:
        raise fail(None, f"expected at least 2 data lines, found {len(currents)}")
    return np.array(currents), np.array(times)


def _parse_number(field: str, delimiter: str) -> float | None:
    text = field.replace(",", ".") if delimiter == ";" else field
    try:
        return float(text)
    except ValueError:
        return None


def _check_header(
    fields: list[str], line_no: int, fail: Callable[[int | None, str], ScenarioError]
) -> None:
    """A unit in brackets in the header must be A (column 1) or s (column 2)."""
    for n, (field, unit) in enumerate(zip(fields[:2], ("A", "s"), strict=False), start=1):
        m = _UNIT_IN_HEADER.search(field)
        if m and m.group(1).strip() != unit:
            raise fail(line_no, f"expected column {n} in {unit}, found the header {field!r}")


# --------------------------------------------------------------------------------------------
# From scenario keys
# --------------------------------------------------------------------------------------------


def _check_positive(value: object, *, source: str, key: str) -> float:
    ok = _is_number(value) and math.isfinite(value) and value > 0.0
    if not ok:
        raise ScenarioError(
            f"expected a finite number > 0, found {value!r}", source=source, key=key
        )
    return float(value)  # type: ignore[arg-type]  # a numbers.Real here


def fuse_model_from_keys(
    rated_current_A: float,
    melting_i2t_A2s: float | None = None,
    min_melting_current_A: float | None = None,
    table: str | os.PathLike[str] | Sequence[Sequence[float]] | None = None,
    fuse_class: str | None = None,
    *,
    source: str,
    key_prefix: str = "fuse",
) -> FuseModel:
    """Build the fuse model from the scenario's ``[fuse]`` keys (values already in SI).

    Exactly one of ``melting_i2t`` (with optional ``min_melting_current``, default
    2.1 x ``rated_current``), ``table`` (fitted by :func:`fit_time_current`) or ``class``
    (:func:`generic_model`) must be given.

    Parameters
    ----------
    rated_current_A : float
        ``fuse.rated_current`` [A].
    melting_i2t_A2s : float, optional
        ``fuse.melting_i2t`` [A^2 s].
    min_melting_current_A : float, optional
        ``fuse.min_melting_current`` [A]; only with ``melting_i2t``; must exceed the rating.
    table : path or sequence of (current [A], time [s]) pairs, optional
        ``fuse.table``: a CSV file (see :func:`read_time_current_csv`; a relative path is taken
        relative to the scenario file's directory) or the points themselves.
    fuse_class : str, optional
        ``fuse.class``: "quick-acting" ("F") or "time-lag" ("T").
    source : str
        Scenario file, for error messages.
    key_prefix : str
        Table name of the keys (default "fuse").

    Returns
    -------
    FuseModel
    """

    def k(name: str) -> str:
        return f"{key_prefix}.{name}"

    rated = _check_positive(rated_current_A, source=source, key=k("rated_current"))
    given = [
        name
        for name, value in (
            ("melting_i2t", melting_i2t_A2s),
            ("table", table),
            ("class", fuse_class),
        )
        if value is not None
    ]
    if len(given) != 1:
        found = "none" if not given else ", ".join(k(g) for g in given)
        raise ScenarioError(
            f"expected exactly one of {k('melting_i2t')}, {k('table')}, {k('class')}; "
            f"found {found}",
            source=source,
            key=key_prefix if not given else k(given[-1]),
        )
    if min_melting_current_A is not None and given[0] != "melting_i2t":
        raise ScenarioError(
            f"expected {k('min_melting_current')} only with {k('melting_i2t')} (the "
            f"{k(given[0])} sets it), found both",
            source=source,
            key=k("min_melting_current"),
        )

    if given[0] == "melting_i2t":
        i2t = _check_positive(melting_i2t_A2s, source=source, key=k("melting_i2t"))
        if min_melting_current_A is None:
            i_min = DEFAULT_MIN_MELTING_MULTIPLE * rated
        else:
            i_min = _check_positive(
                min_melting_current_A, source=source, key=k("min_melting_current")
            )
        if i_min <= rated:
            raise ScenarioError(
                f"expected a minimum melting current above the rated current {rated:g} A "
                f"(a fuse must carry its rating), found {i_min:g} A",
                source=source,
                key=k("min_melting_current"),
            )
        return FuseModel(rated, i2t, i_min, origin="parameters", warning=CAUTION)

    if given[0] == "class":
        name = _normalise_class(fuse_class, source=source, key=k("class"))
        return generic_model(rated, name)

    if isinstance(table, (str, os.PathLike)):
        path = Path(table)
        if not path.is_absolute() and source and not source.startswith("<"):
            path = Path(source).parent / path
        currents, times = read_time_current_csv(path, source=source, key=k("table"))
    else:
        currents, times = _table_from_pairs(table, source=source, key=k("table"))
    model, _report = fit_time_current(
        currents, times, rated_current_A=rated, source=source, key=k("table")
    )
    if not model.warning:
        model = FuseModel(
            model.rated_current_A,
            model.melting_i2t_A2s,
            model.min_melting_current_A,
            origin=model.origin,
            warning=CAUTION,
        )
    return model


def scenario_fuse_model(fuse, source: str) -> FuseModel:
    """The model of a scenario's ``[fuse]`` table (a :class:`dcsim.scenario.schema.Fuse`).

    Parameters
    ----------
    fuse : Fuse
        The loaded table (SI values; a CSV table already read into ``table_points``).
    source : str
        Scenario file, for messages.
    """
    table = None
    if fuse.table is not None:
        table = ([p[0] for p in fuse.table_points], [p[1] for p in fuse.table_points])
    return fuse_model_from_keys(
        fuse.rated_current,
        melting_i2t_A2s=fuse.melting_i2t,
        min_melting_current_A=fuse.min_melting_current,
        table=table,
        fuse_class=fuse.generic_class,
        source=source,
    )


def derated(model: FuseModel, factor: float) -> FuseModel:
    """The model of a fuse whose current rating is derated by ``factor`` (hot ambient).

    Every current of the time-current curve scales by ``factor`` at the same time: ``In``
    and ``I_min`` by ``factor``, the I2t by ``factor^2``; ``tau`` is unchanged. Heat fractions
    under a given current grow by ``1 / factor^2``.

    Parameters
    ----------
    model : FuseModel
    factor : float
        Derating factor [-] (e.g. 0.9 at the enclosure's temperature, from the maker's
        derating curve).
    """
    return FuseModel(
        rated_current_A=model.rated_current_A * factor,
        melting_i2t_A2s=model.melting_i2t_A2s * factor * factor,
        min_melting_current_A=model.min_melting_current_A * factor,
        origin=model.origin,
        warning=model.warning,
    )


def _table_from_pairs(table: object, *, source: str, key: str) -> tuple[np.ndarray, np.ndarray]:
    rows = list(table) if isinstance(table, (list, tuple)) else None
    if rows is None:
        raise ScenarioError(
            f"expected a CSV file name or a list of [current A, melting time s] pairs, "
            f"found {table!r}",
            source=source,
            key=key,
        )
    currents, times = [], []
    for n, row in enumerate(rows, start=1):
        ok = isinstance(row, (list, tuple)) and len(row) == 2 and all(_is_number(v) for v in row)
        if not ok:
            raise ScenarioError(
                f"expected entry {n} to be a pair [current A, melting time s], found {row!r}",
                source=source,
                key=key,
            )
        currents.append(float(row[0]))
        times.append(float(row[1]))
    return np.array(currents), np.array(times)
