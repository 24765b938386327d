"""Closed-loop response metrics computed from sampled traces.

Pure numpy functions: each takes a time vector in seconds and one sampled signal of the same
length, and returns plain Python numbers. Nothing here runs a simulation.

* :func:`step_metrics` - rise time, overshoot, undershoot, peak, settling time of a step
  response. Where its definitions overlap those of ``control.step_info`` (python-control 0.10)
  it gives the same numbers on the same samples for a response that starts at ``t = 0`` from
  ``0``; the differences are listed in its docstring.
* :func:`disturbance_recovery` - largest deviation and recovery time after a load step.
* :func:`following_error` - peak and RMS of a tracking error.
* :func:`time_in_condition` - how long a boolean flag (current limit active, ...) was set.

All metrics are *sampled*: no crossing time is interpolated between samples, so a time is
always one of the sample times (or a difference of two of them) and is exact to within one
sample interval.

Bad arguments raise :class:`ValueError` with a message naming the argument, what was expected
and what was found.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np
from numpy.typing import ArrayLike, NDArray

__all__ = [
    "disturbance_recovery",
    "following_error",
    "step_metrics",
    "time_in_condition",
]


# --------------------------------------------------------------------------------------------
# Input checks
# --------------------------------------------------------------------------------------------


def _check_traces(t_s: ArrayLike, *signals: tuple[str, ArrayLike]) -> list[NDArray[np.float64]]:
    """Return ``t_s`` and the signals as float arrays after checking shape, length and order.

    Raises
    ------
    ValueError
        If an array is not 1-D, the lengths differ, there are fewer than 2 samples, a value is
        not finite, or ``t_s`` is not strictly rising.
    """
    t = _as_1d_float("t_s", t_s)
    if t.size < 2:
        raise ValueError(f"t_s: expected at least 2 samples, found {t.size}")
    steps = np.diff(t)
    if not np.all(steps > 0.0):
        k = int(np.argmax(steps <= 0.0))
        raise ValueError(
            f"t_s: expected strictly rising times, found t_s[{k}] = {float(t[k])!r} followed by "
            f"t_s[{k + 1}] = {float(t[k + 1])!r}"
        )
    out = [t]
    for name, values in signals:
        v = _as_1d_float(name, values)
        if v.size != t.size:
            raise ValueError(
                f"{name}: expected the same length as t_s ({t.size} samples), found {v.size}"
            )
        out.append(v)
    return out


def _as_1d_float(name: str, values: ArrayLike) -> NDArray[np.float64]:
    try:
        a = np.asarray(values, dtype=float)
    except (TypeError, ValueError) as exc:
        raise ValueError(f"{name}: expected a 1-D array of numbers, found {values!r}") from exc
    if a.ndim != 1:
        raise ValueError(f"{name}: expected a 1-D array, found an array of shape {a.shape}")
    bad = ~np.isfinite(a)
    if np.any(bad):
        k = int(np.argmax(bad))
        raise ValueError(f"{name}: expected finite values, found {name}[{k}] = {float(a[k])!r}")
    return a


def _finite(name: str, value: float) -> float:
    try:
        x = float(value)
    except (TypeError, ValueError) as exc:
        raise ValueError(f"{name}: expected a finite number, found {value!r}") from exc
    if not math.isfinite(x):
        raise ValueError(f"{name}: expected a finite number, found {value!r}")
    return x


def _window(t: NDArray[np.float64], start: float, end: float, what: str) -> NDArray[np.bool_]:
    """Mask of the samples with ``start <= t <= end``; at least 2 are required."""
    mask = (t >= start) & (t <= end)
    n = int(np.count_nonzero(mask))
    if n < 2:
        raise ValueError(
            f"{what}: expected at least 2 samples in [{start!r}, {end!r}] s, found {n} "
            f"(t_s runs from {float(t[0])!r} to {float(t[-1])!r} s)"
        )
    return mask


# --------------------------------------------------------------------------------------------
# Step response
# --------------------------------------------------------------------------------------------


def step_metrics(
    t_s: ArrayLike,
    y: ArrayLike,
    *,
    t_step_s: float = 0.0,
    y_start: float | None = None,
    target: float | None = None,
    rise_limits: Sequence[float] = (0.1, 0.9),
    settling_band: float = 0.02,
) -> dict[str, float | None]:
    """Transient-response metrics of a sampled step response.

    Only the samples with ``t_s >= t_step_s`` are used. The final value is the last sample
    (as ``control.step_info`` takes it for time-series data), so the record must be long
    enough for the response to have settled. With ``y_start`` the value before the step,
    ``change = final_value - y_start`` and ``sign = sign(change)``, the response may rise or
    fall.

    Definitions follow the usual transient-response specifications (Ogata, *Modern Control
    Engineering*, 5th ed., sec. 5-3 "transient-response specifications"; section from memory)
    and, where they overlap, python-control's ``step_info``:

    * rise time: from the first sample at which ``sign*(y - (y_start + lo*change)) >= 0`` to the
      first sample at which ``sign*(y - (y_start + hi*change)) >= 0``;
    * settling time: the sample after the last one with
      ``|(y - y_start)/change - 1| >= settling_band``, measured from ``t_step_s``;
    * overshoot: ``100*sign*(peak - final_value)/|change|``, at least 0;
    * undershoot: ``100*(largest excursion from y_start against the direction of the
      change)/|change|``, at least 0.

    Parameters
    ----------
    t_s : array_like
        Sample times, s; 1-D, strictly rising.
    y : array_like
        Response samples, any unit (e.g. rad/s for a speed loop); same length as ``t_s``.
    t_step_s : float, optional
        Time at which the step was applied, s. Default 0.
    y_start : float, optional
        Value before the step, unit of ``y``. Default: the last sample at or before
        ``t_step_s``, or ``y[0]`` if there is none.
    target : float, optional
        Commanded final value, unit of ``y``; only used for ``steady_state_error``.
    rise_limits : (float, float), optional
        Lower and upper fraction of the change between which the rise time is taken,
        ``0 <= lo < hi <= 1``. Default (0.1, 0.9).
    settling_band : float, optional
        Half-width of the settling band as a fraction of ``|change|``, > 0. Default 0.02.

    Returns
    -------
    dict
        ``rise_time_s`` (s; always defined, see Notes), ``overshoot_percent`` (%), ``peak``
        (the sample furthest in the direction of the change, unit of ``y``, signed),
        ``peak_time_s`` (s after ``t_step_s``, first such sample), ``settling_time_s`` (s after
        ``t_step_s``; 0 if never outside the band), ``final_value`` (unit of ``y``),
        ``steady_state_error`` (``target - final_value`` or None), ``undershoot_percent`` (%).

    Raises
    ------
    ValueError
        On malformed traces, fewer than 2 samples at or after ``t_step_s``, bad limits or
        band, or a response with no net change (``final_value == y_start``).

    Notes
    -----
    Differences from ``control.step_info`` (python-control 0.10), all deliberate:

    * ``step_info`` measures every level from 0 and every time from the first sample; here
      levels are measured from ``y_start`` and times from ``t_step_s``. For a response that
      starts at ``t = 0`` from 0 the two agree sample for sample.
    * ``step_info`` reports ``Peak = max|y|`` (always positive) at the time of that sample; here
      ``peak`` is the signed sample furthest in the direction of the change. They differ for a
      falling response (sign) and for a response whose undershoot is larger than its peak.

    Because the final value is the last sample, every rise level up to 100 % is reached by the
    last sample at the latest, so the rise time is always defined (never NaN). With a nonzero
    ``y_start`` the level ``y_start + 1.0*change`` can round a hair beyond the final value
    (``0.7 + (2.9 - 0.7) > 2.9`` in float64); the last sample is counted as reaching it anyway.
    """
    t, yy = _check_traces(t_s, ("y", y))
    t_step = _finite("t_step_s", t_step_s)
    band = _finite("settling_band", settling_band)
    if band <= 0.0:
        raise ValueError(f"settling_band: expected a fraction > 0, found {settling_band!r}")
    try:
        lo, hi = (_finite("rise_limits", v) for v in rise_limits)
    except (TypeError, ValueError) as exc:
        raise ValueError(
            f"rise_limits: expected two numbers (lo, hi), found {rise_limits!r}"
        ) from exc
    if not 0.0 <= lo < hi <= 1.0:
        raise ValueError(f"rise_limits: expected 0 <= lo < hi <= 1, found {rise_limits!r}")

    if y_start is None:
        before = np.flatnonzero(t <= t_step)
        y0 = float(yy[before[-1]]) if before.size else float(yy[0])
    else:
        y0 = _finite("y_start", y_start)

    after = t >= t_step
    if np.count_nonzero(after) < 2:
        raise ValueError(
            f"t_step_s: expected at least 2 samples at or after the step ({t_step!r} s), found "
            f"{int(np.count_nonzero(after))} (t_s ends at {float(t[-1])!r} s)"
        )
    tw, yw = t[after], yy[after]
    y_final = float(yw[-1])
    change = y_final - y0
    if change == 0.0:
        raise ValueError(
            f"y: expected a net change between y_start ({y0!r}) and the last sample, found "
            f"none (both {y_final!r}); step metrics are undefined"
        )
    sign = 1.0 if change > 0.0 else -1.0
    span = abs(change)

    # Rise time: first sample at or beyond each limit (no interpolation, as step_info). The
    # last sample is the final value, so it reaches every level up to 100 % by definition; it
    # is counted as such even when rounding puts y_start + 1.0*change a hair beyond it.
    reached_lo = sign * (yw - (y0 + lo * change)) >= 0.0
    reached_hi = sign * (yw - (y0 + hi * change)) >= 0.0
    reached_lo[-1] = reached_hi[-1] = True
    rise_time = float(tw[int(np.argmax(reached_hi))] - tw[int(np.argmax(reached_lo))])

    # Settling time: the sample after the last one outside the band.
    outside = np.flatnonzero(np.abs((yw - y0) / change - 1.0) >= band)
    if outside.size == 0:
        settling_time = 0.0
    elif outside[-1] + 1 < tw.size:
        settling_time = float(tw[outside[-1] + 1] - t_step)
    else:  # cannot happen while the final value is the last sample; kept for safety
        settling_time = math.nan

    # Peak and overshoot, in the direction of the change.
    i_peak = int(np.argmax(sign * yw))
    peak = float(yw[i_peak])
    beyond = sign * (peak - y_final)
    overshoot = 100.0 * beyond / span if beyond > 0.0 else 0.0

    # Undershoot: excursion from y_start against the direction of the change.
    i_under = int(np.argmin(sign * yw))
    against = -sign * (float(yw[i_under]) - y0)
    undershoot = 100.0 * against / span if against > 0.0 else 0.0

    sse = None if target is None else _finite("target", target) - y_final
    return {
        "rise_time_s": rise_time,
        "overshoot_percent": float(overshoot),
        "peak": peak,
        "peak_time_s": float(tw[i_peak] - t_step),
        "settling_time_s": settling_time,
        "final_value": y_final,
        "steady_state_error": sse,
        "undershoot_percent": float(undershoot),
    }


# --------------------------------------------------------------------------------------------
# Load-step recovery
# --------------------------------------------------------------------------------------------


def disturbance_recovery(
    t_s: ArrayLike,
    y: ArrayLike,
    *,
    t_event_s: float,
    y_reference: float,
    band: float,
    window_end_s: float | None = None,
) -> dict[str, float]:
    """Largest deviation and recovery time of a regulated signal after a load step.

    Uses the samples with ``t_event_s <= t_s <= window_end_s``. The recovery time is the time
    from the event to the sample after the last one with ``|y - y_reference| > band``, the same
    sampled convention as the settling time of :func:`step_metrics` but with an absolute band
    around the reference (a definition chosen here; common practice, no source).

    Parameters
    ----------
    t_s : array_like
        Sample times, s; 1-D, strictly rising.
    y : array_like
        Regulated signal (e.g. speed in rad/s); same length as ``t_s``.
    t_event_s : float
        Time of the load step, s.
    y_reference : float
        Value the signal should hold, unit of ``y``.
    band : float
        Allowed absolute deviation from ``y_reference``, unit of ``y``; > 0.
    window_end_s : float, optional
        End of the window considered, s; default the last sample.

    Returns
    -------
    dict
        ``dip`` (``y - y_reference`` at the sample of largest ``|y - y_reference|``, signed,
        unit of ``y``), ``dip_time_s`` (s after the event, first such sample),
        ``recovery_time_s`` (s after the event; 0 if the signal never leaves the band, NaN if it
        is still outside at the end of the window).

    Raises
    ------
    ValueError
        On malformed traces, a band that is not > 0, or fewer than 2 samples in the window.
    """
    t, yy = _check_traces(t_s, ("y", y))
    t_event = _finite("t_event_s", t_event_s)
    y_ref = _finite("y_reference", y_reference)
    width = _finite("band", band)
    if width <= 0.0:
        raise ValueError(f"band: expected an absolute deviation > 0, found {band!r}")
    t_end = float(t[-1]) if window_end_s is None else _finite("window_end_s", window_end_s)
    if t_end <= t_event:
        raise ValueError(
            f"window_end_s: expected a time after t_event_s ({t_event!r} s), found {t_end!r}"
        )
    mask = _window(t, t_event, t_end, "t_event_s/window_end_s")
    tw, dev = t[mask], yy[mask] - y_ref

    i_dip = int(np.argmax(np.abs(dev)))
    outside = np.flatnonzero(np.abs(dev) > width)
    if outside.size == 0:
        recovery = 0.0
    elif outside[-1] + 1 < tw.size:
        recovery = float(tw[outside[-1] + 1] - t_event)
    else:
        recovery = math.nan
    return {
        "dip": float(dev[i_dip]),
        "dip_time_s": float(tw[i_dip] - t_event),
        "recovery_time_s": recovery,
    }


# --------------------------------------------------------------------------------------------
# Tracking error
# --------------------------------------------------------------------------------------------


def following_error(
    t_s: ArrayLike,
    error: ArrayLike,
    *,
    t_start_s: float | None = None,
    t_end_s: float | None = None,
) -> dict[str, float]:
    """Peak and RMS of a following (tracking) error over a time window.

    ``rms = sqrt( (1/(t_b - t_a)) * integral of error^2 dt )`` over the samples from ``t_a`` to
    ``t_b`` in the window, the integral taken by the trapezoidal rule (Burden & Faires,
    *Numerical Analysis*, 9th ed., sec. 4.3; section from memory).

    Parameters
    ----------
    t_s : array_like
        Sample times, s; 1-D, strictly rising.
    error : array_like
        Following error (e.g. position in rad); same length as ``t_s``.
    t_start_s, t_end_s : float, optional
        Window, s (both ends included); default the whole record.

    Returns
    -------
    dict
        ``peak_following_error`` (the signed sample of largest magnitude, first such sample,
        unit of ``error``) and ``rms_following_error`` (unit of ``error``).

    Raises
    ------
    ValueError
        On malformed traces or fewer than 2 samples in the window.
    """
    t, e = _check_traces(t_s, ("error", error))
    start = float(t[0]) if t_start_s is None else _finite("t_start_s", t_start_s)
    end = float(t[-1]) if t_end_s is None else _finite("t_end_s", t_end_s)
    mask = _window(t, start, end, "t_start_s/t_end_s")
    tw, ew = t[mask], e[mask]
    e2 = ew * ew
    integral = float(np.sum(0.5 * (e2[1:] + e2[:-1]) * np.diff(tw)))
    rms = math.sqrt(integral / float(tw[-1] - tw[0]))
    return {
        "peak_following_error": float(ew[int(np.argmax(np.abs(ew)))]),
        "rms_following_error": rms,
    }


# --------------------------------------------------------------------------------------------
# Flags
# --------------------------------------------------------------------------------------------


def time_in_condition(t_s: ArrayLike, flag: ArrayLike) -> float:
    """Total time a sampled boolean flag is true, s.

    Sample-and-hold: each interval ``[t_k, t_{k+1})`` counts when ``flag[k]`` is true; the value
    of the last sample starts no interval and is not counted.

    Parameters
    ----------
    t_s : array_like
        Sample times, s; 1-D, strictly rising.
    flag : array_like
        Booleans, or numbers that are each 0 or 1; same length as ``t_s``.

    Returns
    -------
    float
        Time with the flag set, s.

    Raises
    ------
    ValueError
        On malformed traces or a flag value other than 0/1/True/False.
    """
    t, f = _check_traces(t_s, ("flag", flag))
    not_binary = (f != 0.0) & (f != 1.0)
    if np.any(not_binary):
        k = int(np.argmax(not_binary))
        raise ValueError(f"flag: expected only 0/1 or booleans, found flag[{k}] = {float(f[k])!r}")
    return float(np.sum(np.diff(t)[f[:-1] == 1.0]))
