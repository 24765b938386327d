"""Motion references for the closed-loop controller: steps, ramps, point-to-point moves, tables.

Every reference is a :class:`Profile` made of piecewise-cubic segments, so that one compiled
evaluator (:func:`evaluate`) serves all of them inside the kernels:

- :func:`step_profile`: a jump at a given time;
- :func:`ramp_profile`: a linear change at a given rate or over a given time;
- :func:`trapezoid_profile`: a rest-to-rest position move with limited speed and
  acceleration (trapezoidal speed, or triangular when the speed limit is not reached);
- :func:`s_curve_profile`: a rest-to-rest position move with limited speed, acceleration and
  jerk (the double-S profile);
- :func:`table_profile`: piecewise linear through given points, for instance read from a CSV
  file with :func:`read_reference_csv`.

The values are in SI units of the controlled quantity (rad for a position, rad/s for a speed,
A for a current, ...); times are in seconds.

References
----------
.. [1] L. Biagiotti and C. Melchiorri, *Trajectory Planning for Automatic Machines and
   Robots*, Springer (2008), sec. 3.2.2 (trajectory with trapezoidal velocity profile) and
   sec. 3.4 (trajectory with double S velocity profile).
"""

from __future__ import annotations

import math
import os
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from numba import njit

from dcsim.errors import ScenarioError
from dcsim.scenario.csvpairs import read_pairs

KINDS = ("step", "ramp", "trapezoid", "s-curve", "table")
"""Every accepted :attr:`Profile.kind`."""


@dataclass(frozen=True, eq=False)
class Profile:
    """A reference made of piecewise-cubic segments.

    Attributes
    ----------
    segments : (n, 5) float64 array, read-only
        Rows ``[t_start_s, c0, c1, c2, c3]``, ``n >= 1``, ``t_start_s`` non-decreasing. For
        ``t`` in ``[t_start_k, t_start_{k+1})`` the value is
        ``c0 + c1*tau + c2*tau**2 + c3*tau**3`` with ``tau = t - t_start_k`` [s]; the last row
        holds for ever; before row 0's ``t_start_s`` the value is row 0's ``c0`` with zero
        derivatives. For a position [rad]: ``c1`` is a speed [rad/s], ``2*c2`` an
        acceleration [rad/s^2] and ``6*c3`` a jerk [rad/s^3] at the segment's start.
    kind : str
        One of :data:`KINDS`.
    end_time_s : float
        Time after which the reference no longer changes [s].
    notes : str
        Which case of the construction applied (e.g. a triangular profile).

    Profiles compare by identity (``eq=False``): the segments are an array.

    Segment start times are absolute, so a phase of duration ``T`` that starts at time ``t``
    is stored to within about ``eps |t|`` (``eps`` = 2.2e-16): one cubic's end state and the
    next row's start differ by the derivative times that rounding (for a jerk phase of
    0.35 ms at 5e4 s, about 1e-8 of the acceleration limit), not by more.
    """

    segments: np.ndarray
    kind: str
    end_time_s: float
    notes: str = ""

    def __post_init__(self) -> None:
        seg = np.array(self.segments, dtype=np.float64, order="C", copy=True)
        if seg.ndim != 2 or seg.shape[0] < 1 or seg.shape[1] != 5:
            raise ScenarioError(
                f"expected Profile.segments of shape (n, 5) with n >= 1, found shape {seg.shape}"
            )
        if not np.all(np.isfinite(seg)):
            raise ScenarioError("expected finite Profile.segments, found NaN or infinity")
        if np.any(np.diff(seg[:, 0]) < 0.0):
            raise ScenarioError("expected non-decreasing segment start times, found one going back")
        if self.kind not in KINDS:
            raise ScenarioError(
                f"expected Profile.kind one of {', '.join(KINDS)}, found {self.kind!r}"
            )
        seg.flags.writeable = False
        object.__setattr__(self, "segments", seg)
        object.__setattr__(self, "end_time_s", float(self.end_time_s))


# --------------------------------------------------------------------------------------------
# Compiled evaluator
# --------------------------------------------------------------------------------------------


@njit(cache=True, error_model="numpy")
def evaluate(segments: np.ndarray, t: float, hint: int) -> tuple[float, float, float, int]:
    """Value and first two time derivatives of a profile at time ``t``.

    Parameters
    ----------
    segments : (n, 5) float64 array
        :attr:`Profile.segments`.
    t : float
        Time [s].
    hint : int
        Segment index returned by the previous call. The search goes forward from it (calls
        come with rising ``t``); when ``t`` lies before that segment's start, or the hint is
        out of range, a bisection over all the segments is made instead.

    Returns
    -------
    value : float
        Reference value [unit of the quantity].
    d1 : float
        First time derivative [unit/s].
    d2 : float
        Second time derivative [unit/s^2].
    new_hint : int
        Index of the segment holding ``t``; pass it to the next call.

    Notes
    -----
    Horner evaluation of ``c0 + c1 tau + c2 tau^2 + c3 tau^3`` and of its derivatives
    ``c1 + 2 c2 tau + 3 c3 tau^2`` and ``2 c2 + 6 c3 tau``. No allocation.
    """
    n = segments.shape[0]
    if t < segments[0, 0]:
        return segments[0, 1], 0.0, 0.0, 0
    k = hint
    if k < 0 or k >= n or t < segments[k, 0]:
        # bisection: the last row whose start is <= t (row 0 qualifies, see above)
        lo = 0
        hi = n - 1
        while lo < hi:
            mid = (lo + hi + 1) // 2
            if segments[mid, 0] <= t:
                lo = mid
            else:
                hi = mid - 1
        k = lo
    else:
        while k + 1 < n and segments[k + 1, 0] <= t:
            k += 1
    tau = t - segments[k, 0]
    c0 = segments[k, 1]
    c1 = segments[k, 2]
    c2 = segments[k, 3]
    c3 = segments[k, 4]
    value = c0 + tau * (c1 + tau * (c2 + tau * c3))
    d1 = c1 + tau * (2.0 * c2 + tau * 3.0 * c3)
    d2 = 2.0 * c2 + 6.0 * c3 * tau
    return value, d1, d2, k


def sample(
    profile: Profile, t_array: np.ndarray | Sequence[float] | float
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Evaluate a profile at many times (a Python loop over :func:`evaluate`).

    Parameters
    ----------
    profile : Profile
        The reference.
    t_array : array_like of float
        Times [s], any shape; rising times are the fastest.

    Returns
    -------
    value, d1, d2 : float arrays of the shape of ``t_array``
        Value [unit], first [unit/s] and second [unit/s^2] time derivatives.
    """
    t = np.asarray(t_array, dtype=np.float64)
    flat = t.ravel()
    value = np.empty_like(flat)
    d1 = np.empty_like(flat)
    d2 = np.empty_like(flat)
    seg = profile.segments
    hint = 0
    for i in range(flat.size):
        value[i], d1[i], d2[i], hint = evaluate(seg, float(flat[i]), hint)
    return value.reshape(t.shape), d1.reshape(t.shape), d2.reshape(t.shape)


# --------------------------------------------------------------------------------------------
# Argument checks
# --------------------------------------------------------------------------------------------


def _number(name: str, x: object, unit: str, source: str, key: str) -> float:
    """``x`` as a finite float, or a ScenarioError naming ``name``."""
    if isinstance(x, bool) or not isinstance(x, int | float | np.integer | np.floating):
        raise ScenarioError(
            f"expected {name} as a number [{unit}], found {x!r}", source=source, key=key
        )
    v = float(x)
    if not math.isfinite(v):
        raise ScenarioError(
            f"expected a finite {name} [{unit}], found {v!r}", source=source, key=key
        )
    return v


def _positive(name: str, x: object, unit: str, source: str, key: str) -> float:
    v = _number(name, x, unit, source, key)
    if v <= 0.0:
        raise ScenarioError(
            f"expected {name} > 0 {unit}, found {v:g} {unit}", source=source, key=key
        )
    return v


def _row(t0: float, c0: float, c1: float = 0.0, c2: float = 0.0, c3: float = 0.0) -> list[float]:
    return [t0, c0, c1, c2, c3]


# --------------------------------------------------------------------------------------------
# Step and ramp
# --------------------------------------------------------------------------------------------


def step_profile(
    value: float,
    *,
    at: float = 0.0,
    initial: float = 0.0,
    source: str = "",
    key: str = "",
) -> Profile:
    """A step from ``initial`` to ``value`` at time ``at``.

    Parameters
    ----------
    value : float
        Value from ``at`` on [unit of the quantity].
    at : float
        Time of the step [s].
    initial : float
        Value before ``at`` [unit].
    source, key : str
        Where the arguments were written (file, key), for error messages.

    Returns
    -------
    Profile
        Two rows (one when ``value == initial``); the derivative columns are zero, a step
        having no finite derivative.

    Raises
    ------
    ScenarioError
        A non-finite or non-numeric argument.
    """
    v = _number("value", value, "unit of the quantity", source, key)
    t0 = _number("at", at, "s", source, key)
    v0 = _number("initial", initial, "unit of the quantity", source, key)
    if v == v0:
        return Profile(np.array([_row(t0, v0)]), "step", t0, "value equals initial: constant")
    return Profile(np.array([_row(t0, v0), _row(t0, v)]), "step", t0)


def ramp_profile(
    value: float,
    *,
    at: float = 0.0,
    initial: float = 0.0,
    rate: float | None = None,
    ramp_time: float | None = None,
    source: str = "",
    key: str = "",
) -> Profile:
    """A linear change from ``initial`` to ``value`` starting at ``at``.

    Parameters
    ----------
    value : float
        Final value [unit of the quantity].
    at : float
        Start of the ramp [s].
    initial : float
        Value before ``at`` [unit].
    rate : float, optional
        Magnitude of the slope [unit/s], > 0; its sign follows from ``value - initial``.
    ramp_time : float, optional
        Duration of the ramp [s], >= 0 (0 gives a step). Exactly one of ``rate`` and
        ``ramp_time`` is given.
    source, key : str
        Where the arguments were written, for error messages.

    Returns
    -------
    Profile
        The ramp ends at ``at + |value - initial| / rate`` (or ``at + ramp_time``) and holds
        ``value`` afterwards.

    Raises
    ------
    ScenarioError
        Both or neither of ``rate`` and ``ramp_time``, ``rate <= 0``, ``ramp_time < 0``, a
        non-finite or non-numeric argument.
    """
    v = _number("value", value, "unit of the quantity", source, key)
    t0 = _number("at", at, "s", source, key)
    v0 = _number("initial", initial, "unit of the quantity", source, key)
    if (rate is None) == (ramp_time is None):
        found = "both" if rate is not None else "neither"
        raise ScenarioError(
            f"expected exactly one of rate [unit/s] and ramp_time [s], found {found}",
            source=source,
            key=key,
        )
    delta = v - v0
    if rate is not None:
        r = _positive("rate", rate, "unit/s", source, key)
        duration = abs(delta) / r
    else:
        duration = _number("ramp_time", ramp_time, "s", source, key)
        if duration < 0.0:
            raise ScenarioError(
                f"expected ramp_time >= 0 s, found {duration:g} s", source=source, key=key
            )
    if delta == 0.0:
        return Profile(np.array([_row(t0, v0)]), "ramp", t0, "value equals initial: constant")
    if duration == 0.0:
        return Profile(np.array([_row(t0, v0), _row(t0, v)]), "ramp", t0, "zero ramp time: a step")
    t1 = t0 + duration
    rows = [_row(t0, v0, delta / duration), _row(t1, v)]
    return Profile(np.array(rows), "ramp", t1)


# --------------------------------------------------------------------------------------------
# Point-to-point moves
# --------------------------------------------------------------------------------------------


def _phase_rows(
    t0: float,
    p0: float,
    phases: Sequence[tuple[float, float, float | None, float | None]],
    final: float,
) -> tuple[np.ndarray, float]:
    """Rows of a move from rest made of constant-jerk phases, then the rest at ``final``.

    Each phase is ``(duration_s, jerk, speed_at_end, accel_at_end)``; phases of zero duration
    are left out. The start state of each phase is the previous phase's end state, computed
    from the closed form of the cubic (``p + v T + a T^2/2 + j T^3/6``, ``v + a T + j T^2/2``,
    ``a + j T``); a speed or acceleration known exactly at a phase's end (``not None``) is
    taken as is instead, so that, e.g., the cruise has exactly the limit speed and zero
    acceleration.
    """
    rows: list[list[float]] = []
    t, p, v, a = t0, p0, 0.0, 0.0
    for duration, jerk, v_end, a_end in phases:
        if duration <= 0.0:
            continue
        rows.append(_row(t, p, v, a / 2.0, jerk / 6.0))
        T = duration
        p = p + v * T + a * T**2 / 2.0 + jerk * T**3 / 6.0
        v = v + a * T + jerk * T**2 / 2.0 if v_end is None else v_end
        a = a + jerk * T if a_end is None else a_end
        t = t + T
    rows.append(_row(t, final))
    return np.array(rows), t


def _move_args(
    distance: float, at: float, initial: float, source: str, key: str
) -> tuple[float, float, float]:
    d = _number("distance", distance, "rad", source, key)
    t0 = _number("at", at, "s", source, key)
    p0 = _number("initial", initial, "rad", source, key)
    return d, t0, p0


def trapezoid_profile(
    distance: float,
    *,
    speed: float,
    acceleration: float,
    deceleration: float | None = None,
    at: float = 0.0,
    initial: float = 0.0,
    source: str = "",
    key: str = "",
) -> Profile:
    r"""A rest-to-rest position move with trapezoidal speed (triangular when it must be).

    Parameters
    ----------
    distance : float
        Move [rad]; negative moves backwards (the profile is mirrored).
    speed : float
        Speed limit ``v`` [rad/s], > 0.
    acceleration : float
        Acceleration limit ``a`` [rad/s^2], > 0.
    deceleration : float, optional
        Deceleration limit ``d`` [rad/s^2], > 0; defaults to ``acceleration``.
    at : float
        Start of the move [s].
    initial : float
        Position before the move [rad].
    source, key : str
        Where the arguments were written, for error messages.

    Returns
    -------
    Profile
        Position segments (``c1`` the speed, ``2*c2`` the acceleration); the last row holds
        ``initial + distance``. A zero distance gives a constant profile.

    Raises
    ------
    ScenarioError
        A non-positive limit, a non-finite or non-numeric argument.

    Notes
    -----
    With ``D = |distance|`` (sec. 3.2.2 of [1]_, here derived for unequal limits): the
    acceleration and deceleration phases cover ``v^2/(2a)`` and ``v^2/(2d)``. If
    ``D >= v^2/(2a) + v^2/(2d)`` the limit speed is reached:
    ``T_a = v/a``, ``T_d = v/d``, cruise ``T_c = (D - v^2/(2a) - v^2/(2d)) / v``, so the
    total time is ``T = D/v + v/(2a) + v/(2d)`` (``D/v + v/a`` for ``d = a``). Otherwise
    the profile is triangular with peak speed ``v_p = sqrt(2 D a d / (a + d))`` from
    ``v_p^2/(2a) + v_p^2/(2d) = D``, ``T_a = v_p/a``, ``T_d = v_p/d``
    (``T = 2 sqrt(D/a)`` for ``d = a``).
    """
    dist, t0, p0 = _move_args(distance, at, initial, source, key)
    v = _positive("speed", speed, "rad/s", source, key)
    a = _positive("acceleration", acceleration, "rad/s^2", source, key)
    d = (
        a
        if deceleration is None
        else _positive("deceleration", deceleration, "rad/s^2", source, key)
    )
    if dist == 0.0:
        return Profile(np.array([_row(t0, p0)]), "trapezoid", t0, "zero distance: constant")
    s = 1.0 if dist > 0.0 else -1.0
    D = abs(dist)
    if D >= v * v / (2.0 * a) + v * v / (2.0 * d):
        vp = v
        t_cruise = (D - v * v / (2.0 * a) - v * v / (2.0 * d)) / v
        notes = "speed limit reached: trapezoidal profile"
    else:
        vp = math.sqrt(2.0 * D * a * d / (a + d))
        t_cruise = 0.0
        notes = f"speed limit not reached: triangular profile, peak {vp:.6g} rad/s"
    t_acc = vp / a
    t_dec = vp / d
    # a trapezoid is a cubic spline with zero jerk: the rows hold c2 = accel/2, c3 = 0
    rows: list[list[float]] = []
    t, p = t0, p0
    rows.append(_row(t, p, 0.0, s * a / 2.0))
    p = p + s * a * t_acc**2 / 2.0
    t = t + t_acc
    if t_cruise > 0.0:
        rows.append(_row(t, p, s * vp))
        p = p + s * vp * t_cruise
        t = t + t_cruise
    rows.append(_row(t, p, s * vp, -s * d / 2.0))
    t = t + t_dec
    rows.append(_row(t, p0 + dist))
    return Profile(np.array(rows), "trapezoid", t, notes)


def s_curve_profile(
    distance: float,
    *,
    speed: float,
    acceleration: float,
    jerk: float,
    at: float = 0.0,
    initial: float = 0.0,
    source: str = "",
    key: str = "",
) -> Profile:
    r"""A rest-to-rest, jerk-limited (double-S) position move, the same limits both ways.

    Parameters
    ----------
    distance : float
        Move [rad]; negative moves backwards (the profile is mirrored).
    speed : float
        Speed limit ``v`` [rad/s], > 0.
    acceleration : float
        Acceleration limit ``a`` [rad/s^2], > 0 (also the deceleration limit).
    jerk : float
        Jerk limit ``j`` [rad/s^3], > 0.
    at : float
        Start of the move [s].
    initial : float
        Position before the move [rad].
    source, key : str
        Where the arguments were written, for error messages.

    Returns
    -------
    Profile
        At most seven position segments (jerk ``+j, 0, -j``, cruise, ``-j, 0, +j``) and the
        rest at ``initial + distance``; phases of zero duration are left out. A zero distance
        gives a constant profile.

    Raises
    ------
    ScenarioError
        A non-positive limit, a non-finite or non-numeric argument.

    Notes
    -----
    The double-S profile of Biagiotti & Melchiorri [1]_, sec. 3.4, with zero speed and
    acceleration at both ends; the case formulas below are derived for that case.
    ``D = |distance|``, ``T_j`` the duration of each constant-jerk phase, ``a_p = j T_j``
    the peak acceleration, ``T_a`` the duration of the acceleration period (jerk ``+j`` for
    ``T_j``, ``a_p`` held for ``T_a - 2 T_j``, jerk ``-j`` for ``T_j``), ``v_p`` the peak
    speed and ``T_v`` the cruise. The speed gained over the acceleration period is
    ``v_p = a_p (T_a - T_j)``; by symmetry of the speed curve about its middle the distance
    covered is ``v_p T_a / 2``, so the whole move needs ``D = v_p T_a + v_p T_v`` and takes
    ``T = 2 T_a + T_v``.

    1. Speed limit reached (``v_p = v``), when ``D >= v T_a``:

       - acceleration limit reached if ``v j >= a^2``: ``T_j = a/j``, ``T_a = a/j + v/a``;
       - otherwise: ``T_j = sqrt(v/j)``, ``T_a = 2 T_j`` (``a_p = sqrt(v j) < a``);

       ``T_v = D/v - T_a``, so ``T = D/v + a/j + v/a`` or ``T = D/v + 2 sqrt(v/j)``.

    2. Speed limit not reached (``T_v = 0``, ``D = v_p T_a``):

       - acceleration limit reached if ``D >= 2 a^3 / j^2`` (the distance with
         ``v_p = a^2/j``, where the constant-acceleration phase vanishes): ``T_j = a/j``,
         ``T_a = a/j + v_p/a``, so ``v_p^2 + (a^2/j) v_p - a D = 0``, the quadratic with the
         positive root ``v_p = (-a^2/j + sqrt(a^4/j^2 + 4 a D)) / 2``, computed as
         ``2 a D / (a^2/j + sqrt(a^4/j^2 + 4 a D))``;
       - otherwise ``T_a = 2 T_j``, ``v_p = j T_j^2``, ``D = 2 j T_j^3``, so
         ``T_j = (D / (2 j))^(1/3)``, ``v_p = (j D^2 / 4)^(1/3)``, ``a_p = j T_j`` and
         ``T = 4 (D / (2 j))^(1/3)``.

    When ``v j < a^2`` case 2's first branch cannot occur (``D < 2 v^(3/2)/sqrt(j) <
    2 a^3/j^2``), so the two tests above decide every case.
    """
    dist, t0, p0 = _move_args(distance, at, initial, source, key)
    v = _positive("speed", speed, "rad/s", source, key)
    a = _positive("acceleration", acceleration, "rad/s^2", source, key)
    j = _positive("jerk", jerk, "rad/s^3", source, key)
    if dist == 0.0:
        return Profile(np.array([_row(t0, p0)]), "s-curve", t0, "zero distance: constant")
    s = 1.0 if dist > 0.0 else -1.0
    D = abs(dist)

    # acceleration period needed to reach the speed limit (case 1)
    if v * j >= a * a:
        acc_reached = True
        tj, ap, t_acc = a / j, a, a / j + v / a
    else:
        acc_reached = False
        tj = math.sqrt(v / j)
        ap, t_acc = j * tj, 2.0 * tj
    if D >= v * t_acc:
        vp = v
        t_cruise = D / v - t_acc
        notes = "speed limit reached; "
    elif D >= 2.0 * a**3 / j**2:
        acc_reached = True
        q = a * a / j
        vp = 2.0 * a * D / (q + math.sqrt(q * q + 4.0 * a * D))
        tj, ap, t_cruise = a / j, a, 0.0
        notes = f"speed limit not reached (peak {vp:.6g} rad/s); "
    else:
        acc_reached = False
        tj = (D / (2.0 * j)) ** (1.0 / 3.0)
        ap, vp, t_cruise = j * tj, j * tj * tj, 0.0
        notes = f"speed limit not reached (peak {vp:.6g} rad/s); "
    if acc_reached:
        notes += "acceleration limit reached"
        # constant-acceleration phase T_a - 2 T_j, from v_p = a (T_a - T_j)
        t_hold = max(vp / a - tj, 0.0)
    else:
        notes += f"acceleration limit not reached (peak {ap:.6g} rad/s^2)"
        t_hold = 0.0
    sj, sa, sv = s * j, s * ap, s * vp
    phases = (
        (tj, sj, None, sa),
        (t_hold, 0.0, None, sa),
        (tj, -sj, sv, 0.0),
        (t_cruise, 0.0, sv, 0.0),
        (tj, -sj, None, -sa),
        (t_hold, 0.0, None, -sa),
        (tj, sj, 0.0, 0.0),
    )
    rows, t_end = _phase_rows(t0, p0, phases, p0 + dist)
    return Profile(rows, "s-curve", t_end, notes)


# --------------------------------------------------------------------------------------------
# Tables
# --------------------------------------------------------------------------------------------


def table_profile(
    times_s: Sequence[float] | np.ndarray,
    values: Sequence[float] | np.ndarray,
    *,
    source: str = "",
    key: str = "",
) -> Profile:
    """Piecewise linear through ``(time, value)`` points.

    Parameters
    ----------
    times_s : sequence of float
        Point times [s], strictly rising, at least two.
    values : sequence of float
        Values at those times [unit of the quantity], as many as the times.
    source, key : str
        Where the points were written, for error messages.

    Returns
    -------
    Profile
        The first value before the first time, the last value after the last time
        (``end_time_s``), straight lines in between.

    Raises
    ------
    ScenarioError
        Fewer than two points, lengths that differ, non-finite or non-numeric values, times
        not strictly rising.
    """
    try:
        t = np.asarray(times_s, dtype=np.float64)
        y = np.asarray(values, dtype=np.float64)
    except (TypeError, ValueError):
        raise ScenarioError(
            f"expected sequences of numbers for times [s] and values, found {times_s!r} and "
            f"{values!r}",
            source=source,
            key=key,
        ) from None
    if t.ndim != 1 or y.ndim != 1 or t.shape != y.shape:
        raise ScenarioError(
            f"expected as many times as values, in two flat lists, found shapes {t.shape} and "
            f"{y.shape}",
            source=source,
            key=key,
        )
    if t.size < 2:
        raise ScenarioError(
            f"expected at least two (time, value) points, found {t.size}", source=source, key=key
        )
    bad = np.flatnonzero(~(np.isfinite(t) & np.isfinite(y)))
    if bad.size:
        n = int(bad[0])
        raise ScenarioError(
            f"expected finite numbers, found ({t[n]!r}, {y[n]!r}) at point {n}",
            source=source,
            key=key,
        )
    back = np.flatnonzero(np.diff(t) <= 0.0)
    if back.size:
        n = int(back[0]) + 1
        raise ScenarioError(
            f"expected strictly rising times, found {t[n]:g} s after {t[n - 1]:g} s at point {n}",
            source=source,
            key=key,
        )
    slopes = np.diff(y) / np.diff(t)
    rows = np.zeros((t.size, 5))
    rows[:, 0] = t
    rows[:, 1] = y
    rows[:-1, 2] = slopes
    return Profile(rows, "table", float(t[-1]), f"{t.size} points")


def read_reference_csv(
    path: str | os.PathLike[str], *, source: str, key: str
) -> tuple[np.ndarray, np.ndarray]:
    """Read a CSV of time [s] and value (SI unit of the controlled quantity).

    Comma or semicolon separated; an optional text header line; blank lines and lines
    starting with ``#`` are skipped.

    Parameters
    ----------
    path : str or path-like
        The CSV file.
    source, key : str
        The scenario file and key that name the CSV, for error messages.

    Returns
    -------
    times_s, values : float arrays
        Ready for :func:`table_profile`.

    Raises
    ------
    ScenarioError
        The file cannot be read, a line is not two finite numbers, fewer than two points,
        times not strictly rising; the message names the file and the line.
    """
    file = Path(path)
    rows = read_pairs(file, columns="time [s], value", source=source, key=key)
    for (t_prev, _, line_prev), (t, _, lineno) in zip(rows[:-1], rows[1:], strict=True):
        if t <= t_prev:
            raise ScenarioError(
                f"expected strictly rising times, found {t:g} s on line {lineno} of "
                f"{file} after {t_prev:g} s on line {line_prev}",
                source=source,
                key=key,
            )
    if len(rows) < 2:
        raise ScenarioError(
            f"expected at least two (time, value) lines in {file}, found {len(rows)}",
            source=source,
            key=key,
        )
    return np.array([r[0] for r in rows]), np.array([r[1] for r in rows])
