"""Discrete PID controller with derivative filter, setpoint weighting and anti-windup.

Form
----
The parallel form, in SI units, as the scenario gives it::

    u(t) = kp (b r - y) + ki * integral((r - y) dt) + kd d/dt(-y)_filtered + u_ff

with the derivative acting on the measurement only (no derivative kick on a setpoint step)
through the first-order filter ``1 / (1 + s T_f)``, the proportional term on the weighted
setpoint ``b r`` (setpoint weighting), and a feed-forward ``u_ff`` added before the output
limit. The ideal (standard, non-interacting) form ``K (e + 1/T_i integral(e dt) + T_d de/dt)``
and the series (interacting) form ``K' (1 + 1/(s T_i')) (1 + s T_d')`` are converted to it when the
scenario is read (:func:`parallel_gains`).

Discretisation (sample time ``h``), after Astrom & Wittenmark, *Computer-Controlled
Systems*, 3rd ed. (1997), section 8.2 (approximations of ``s``) and Astrom & Hagglund,
*Advanced PID Control* (2006), the chapter on implementation (chapter from memory):

- integral, backward Euler (``s = (z - 1)/(z h)``): ``I_k = I_{k-1} + ki h e_k``;
- integral, forward Euler (``s = (z - 1)/h``): ``I_k = I_{k-1} + ki h e_{k-1}``;
- integral, Tustin (``s = 2 (z - 1)/(h (z + 1))``): ``I_k = I_{k-1} + ki h (e_k + e_{k-1})/2``;
- derivative, backward difference (with the backward and forward Euler integral)::

      D_k = T_f/(T_f + h) D_{k-1} - kd/(T_f + h) (y_k - y_{k-1})

  and Tustin::

      D_k = (2 T_f - h)/(2 T_f + h) D_{k-1} - 2 kd/(2 T_f + h) (y_k - y_{k-1}).

Anti-windup (Astrom & Hagglund, *PID Controllers: Theory, Design and Tuning*, 2nd ed. (1995),
section 3.5, "integrator windup"):

- clamping (conditional integration): the integral is not advanced at a sample where the
  output is at its limit and the error would drive it further into the limit; the two
  limits may differ (:func:`pid_step_bounded`), each acting as its own side's bound;
- back-calculation: the integral is also driven by ``(u - v)/T_t``, the difference between
  the limited and the unlimited output, with the tracking time ``T_t``
  (``I_{k+1} += h (u_k - v_k)/T_t``, taking effect at the next sample).

Bumpless start: when an initial output is given, the integral is set at the first sample so
that the output equals it; otherwise the integral starts at zero.
"""

from __future__ import annotations

import math

from numba import njit

from dcsim.controllers.layout import (
    AW_BACK,
    AW_CLAMP,
    DISC_BACKWARD,
    DISC_TUSTIN,
    L_AW,
    L_B,
    L_DISC,
    L_H,
    L_KD,
    L_KI,
    L_KP,
    L_TF,
    L_TT,
    L_U0,
    S_DER,
    S_EPREV,
    S_INT,
    S_OUT,
    S_RAW,
    S_REF,
    S_STARTED,
    S_YPREV,
)


@njit(cache=True, error_model="numpy")
def pid_step(cp, o, cs, s, r, y, u_ff, limit):
    """One sample of the loop with a symmetric output limit ``+-limit``
    (:func:`pid_step_bounded` with ``-limit, limit``)."""
    return pid_step_bounded(cp, o, cs, s, r, y, u_ff, -limit, limit)


@njit(cache=True, error_model="numpy")
def pid_step_bounded(cp, o, cs, s, r, y, u_ff, u_min, u_max):
    """One sample of the loop whose parameters start at ``cp[o]`` and state at ``cs[s]``.

    Parameters
    ----------
    cp, cs : float arrays
        Controller parameters and state (:mod:`dcsim.controllers.layout`).
    o, s : int
        Offsets of this loop's parameter and state blocks.
    r : float
        Reference [input unit].
    y : float
        Measurement [input unit].
    u_ff : float
        Feed-forward added before the limit [output unit].
    u_min, u_max : float
        Output limits, ``u_min < 0 < u_max`` (-inf / inf for none) [output unit]; they may
        differ (the speed loop's regenerative current limit). Anti-windup acts at either.

    Returns
    -------
    u : float
        Limited output [output unit]; the unlimited one is left in ``cs[s + S_RAW]``.
    """
    kp = cp[o + L_KP]
    ki = cp[o + L_KI]
    kd = cp[o + L_KD]
    h = cp[o + L_H]
    tf = cp[o + L_TF]
    disc = int(cp[o + L_DISC])
    aw = int(cp[o + L_AW])
    e = r - y
    p_term = kp * (cp[o + L_B] * r - y)
    started = cs[s + S_STARTED] > 0.5
    y_prev = cs[s + S_YPREV] if started else y
    # derivative on the measurement, first-order filter
    d_term = 0.0
    if kd != 0.0:
        if disc == DISC_TUSTIN:
            den = 2.0 * tf + h
            d_term = (2.0 * tf - h) / den * cs[s + S_DER] - 2.0 * kd / den * (y - y_prev)
        else:
            den = tf + h
            d_term = tf / den * cs[s + S_DER] - kd / den * (y - y_prev)
        if not started:
            d_term = 0.0
    # integral: the part of this sample's error that enters the output now
    if disc == DISC_BACKWARD:
        now = ki * h * e
    elif disc == DISC_TUSTIN:
        now = 0.5 * ki * h * (e + (cs[s + S_EPREV] if started else e))
        if not started:
            now = 0.0
    else:  # forward Euler: this sample's error enters at the next sample
        now = 0.0
    if not started:
        # bumpless start (an initial output given): the integral makes the first output the
        # initial output; otherwise the integral starts at zero
        u0 = cp[o + L_U0]
        i_prev = u0 - p_term - d_term - u_ff - now if ki != 0.0 and math.isfinite(u0) else 0.0
    else:
        i_prev = cs[s + S_INT]
    i_new = i_prev + now
    v = p_term + i_new + d_term + u_ff
    u = min(u_max, max(u_min, v))
    if aw == AW_CLAMP and u != v and (v - u) * e > 0.0 and started:
        # conditional integration: hold the integral where it is
        i_new = i_prev
        v = p_term + i_new + d_term + u_ff
        u = min(u_max, max(u_min, v))
    # what is carried to the next sample
    i_next = i_new
    if disc != DISC_BACKWARD and disc != DISC_TUSTIN:
        if not (aw == AW_CLAMP and u != v and (v - u) * e > 0.0):
            i_next = i_new + ki * h * e
    if aw == AW_BACK and (math.isfinite(u_min) or math.isfinite(u_max)):
        i_next += h / cp[o + L_TT] * (u - v)
    cs[s + S_INT] = i_next
    cs[s + S_DER] = d_term
    cs[s + S_YPREV] = y
    cs[s + S_EPREV] = e
    cs[s + S_OUT] = u
    cs[s + S_RAW] = v
    cs[s + S_REF] = r
    cs[s + S_STARTED] = 1.0
    return u


def parallel_gains(
    form: str, gain: float, integral_time: float | None, derivative_time: float | None
) -> tuple[float, float, float]:
    """Parallel-form gains ``(kp, ki, kd)`` of the ideal or series PID form.

    Parameters
    ----------
    form : {"ideal", "series"}
        ``"ideal"``: ``K (1 + 1/(s T_i) + s T_d)``; ``"series"`` (interacting):
        ``K' (1 + 1/(s T_i')) (1 + s T_d')``.
    gain : float
        ``K`` or ``K'`` [output unit / input unit].
    integral_time : float or None
        ``T_i`` or ``T_i'`` [s]; ``None`` for no integral action.
    derivative_time : float or None
        ``T_d`` or ``T_d'`` [s]; ``None`` or 0 for no derivative action.

    Notes
    -----
    Ideal: ``kp = K``, ``ki = K/T_i``, ``kd = K T_d``. Series: expanding the product,
    ``kp = K' (1 + T_d'/T_i')``, ``ki = K'/T_i'``, ``kd = K' T_d'`` (Astrom & Hagglund, *PID
    Controllers: Theory, Design and Tuning*, 2nd ed. (1995), section 3.4, "different
    representations").
    """
    td = derivative_time or 0.0
    if integral_time is None:
        return gain, 0.0, gain * td
    if form == "series":
        return gain * (1.0 + td / integral_time), gain / integral_time, gain * td
    return gain, gain / integral_time, gain * td
