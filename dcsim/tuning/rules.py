"""Published loop-tuning rules as plain functions (SI units throughout).

Every rule returns :class:`Gains` in the parallel form::

    C(s) = kp + ki / s + kd s

together with the reference prefilter ``1 / (1 + s T)`` the method calls for, if any, the
method's name and a note of the plant form assumed and the published source.

Rules
-----
- :func:`imc_first_order` -- internal-model control of a first-order lag (pole-zero
  cancellation); for the armature current ``1/(R + s L)``: ``kp = alpha L``, ``ki = alpha R``
  (Harnefors & Nee, *IEEE Trans. Ind. Appl.* 34 (1998) -- from memory).
- :func:`modulus_optimum` -- the modulus (technical) optimum of Kessler (1955).
- :func:`symmetric_optimum` -- the symmetric optimum of Kessler (1958) with the parameter
  ``a`` of the extended form (Preitl & Precup, *Automatica* 35 (1999)).
- :func:`simc` and :func:`simc_integrating` -- Skogestad, "Simple analytic rules for model
  reduction and PID controller tuning", *J. Process Control* 13 (2003) 291-309.
- :func:`ziegler_nichols` -- the ultimate-cycle rule of Ziegler & Nichols, "Optimum settings
  for automatic controllers", *Trans. ASME* 64 (1942) 759-768; :func:`ultimate_from_loop`
  finds the ultimate gain and period of a loop model with python-control.

Bad input (a non-positive, non-finite or non-numeric parameter) raises
:class:`dcsim.errors.ScenarioError` (a ``ValueError``) whose key is the parameter's name and
whose message names the rule, what was expected and what was found.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import control

from dcsim.errors import ScenarioError

__all__ = [
    "Gains",
    "imc_first_order",
    "modulus_optimum",
    "simc",
    "simc_integrating",
    "symmetric_optimum",
    "ultimate_from_loop",
    "ziegler_nichols",
]


@dataclass(frozen=True)
class Gains:
    """PID gains in the parallel form ``kp + ki/s + kd s``.

    Attributes
    ----------
    kp : float
        Proportional gain [output unit / input unit].
    ki : float
        Integral gain [output unit / (input unit * s)].
    kd : float
        Derivative gain [output unit * s / input unit]; 0 for P and PI.
    prefilter_time_s : float or None
        Time constant ``T`` of the reference prefilter ``1/(1 + s T)`` the method calls for
        [s]; ``None`` when it calls for none.
    method : str
        ``"imc"``, ``"modulus-optimum"``, ``"symmetric-optimum"``, ``"simc"`` or
        ``"ziegler-nichols"``.
    notes : str
        The plant form assumed and the published source.
    """

    kp: float
    ki: float
    kd: float = 0.0
    prefilter_time_s: float | None = None
    method: str = ""
    notes: str = ""


def _number(rule: str, name: str, value: object, unit: str, *, allow_zero: bool) -> float:
    """``value`` as a float, or a ScenarioError if it is not a positive (or, with
    ``allow_zero``, non-negative) finite number."""
    wanted = "a non-negative" if allow_zero else "a positive"
    number = math.nan
    if not isinstance(value, (bool, str)):
        try:
            number = float(value)  # int, float, numpy scalar
        except (TypeError, ValueError):
            number = math.nan
    if not math.isfinite(number) or number < 0.0 or (number == 0.0 and not allow_zero):
        raise ScenarioError(
            f"{rule}: expected {name} {wanted} finite number [{unit}], "
            f"found {value!r} ({type(value).__name__})",
            key=name,
        )
    return number


def _positive(rule: str, name: str, value: object, unit: str) -> float:
    return _number(rule, name, value, unit, allow_zero=False)


def imc_first_order(gain: float, time_constant_s: float, bandwidth_rad_s: float) -> Gains:
    """PI by internal-model control of a first-order lag.

    Plant ``P(s) = k / (1 + s T1)``. The PI zero cancels the plant pole::

        kp = alpha T1 / k,    ki = alpha / k

    so that the loop is ``L(s) = alpha / s`` and the closed loop ``alpha / (s + alpha)``, a
    first-order lag of bandwidth ``alpha``. For the armature current of a DC motor,
    ``i/v = 1/(R + s L)`` (``k = 1/R``, ``T1 = L/R``), this is ``kp = alpha L``,
    ``ki = alpha R`` (Harnefors & Nee, "Model-based current control of AC machines using the
    internal model control method", *IEEE Trans. Ind. Appl.* 34 (1998) -- from memory).

    Parameters
    ----------
    gain : float
        Static gain ``k`` of the plant [plant output / controller output], e.g. ``1/R``
        [A/V] for the armature current.
    time_constant_s : float
        Plant time constant ``T1`` [s], e.g. ``L/R``.
    bandwidth_rad_s : float
        Wanted closed-loop bandwidth ``alpha`` [rad/s].

    Returns
    -------
    Gains
        ``kp`` [controller output / plant output], ``ki`` [the same per second].
    """
    rule = "imc_first_order"
    k = _positive(rule, "gain", gain, "plant output / controller output")
    t1 = _positive(rule, "time_constant_s", time_constant_s, "s")
    alpha = _positive(rule, "bandwidth_rad_s", bandwidth_rad_s, "rad/s")
    return Gains(
        kp=alpha * t1 / k,
        ki=alpha / k,
        method="imc",
        notes=(
            "plant k/(1 + s T1); PI zero cancels the pole, closed loop alpha/(s + alpha) "
            "(internal-model control; Harnefors & Nee, IEEE Trans. Ind. Appl. 34 (1998), "
            "from memory)"
        ),
    )


def modulus_optimum(gain: float, time_constant_s: float, small_time_constant_s: float) -> Gains:
    """PI by the modulus (technical) optimum.

    Plant ``P(s) = k / ((1 + s T1)(1 + s Ts))`` with a dominant lag ``T1`` and a small lag
    ``Ts`` (the sum of the small lags: sampling, computation delay, filters). The PI zero
    cancels ``T1``::

        Ti = T1,    kp = T1 / (2 k Ts),    ki = kp / Ti = 1 / (2 k Ts)

    giving the loop ``L(s) = 1 / (2 Ts s (1 + Ts s))`` and a second-order closed loop of
    damping ``1/sqrt(2)`` (Kessler 1955, the "Betragsoptimum", modulus or technical
    optimum). The rule presumes ``T1`` well above ``Ts``.

    Parameters
    ----------
    gain : float
        Static gain ``k`` of the plant [plant output / controller output].
    time_constant_s : float
        Dominant time constant ``T1`` [s].
    small_time_constant_s : float
        Small (lumped) time constant ``Ts`` [s].

    Returns
    -------
    Gains
    """
    rule = "modulus_optimum"
    k = _positive(rule, "gain", gain, "plant output / controller output")
    t1 = _positive(rule, "time_constant_s", time_constant_s, "s")
    ts = _positive(rule, "small_time_constant_s", small_time_constant_s, "s")
    kp = t1 / (2.0 * k * ts)
    return Gains(
        kp=kp,
        ki=kp / t1,
        method="modulus-optimum",
        notes=(
            "plant k/((1 + s T1)(1 + s Ts)); Ti = T1, open loop 1/(2 Ts s (1 + Ts s)), "
            "damping 1/sqrt(2) (modulus / technical optimum, Kessler 1955)"
        ),
    )


def symmetric_optimum(gain: float, small_time_constant_s: float, a: float = 2.0) -> Gains:
    """PI by the (extended) symmetric optimum, with its reference prefilter.

    Plant ``P(s) = k / (s (1 + s Ts))``: integrating, e.g. the speed from the current command,
    ``K/(J s)``, with the closed current loop as the lag ``Ts`` (``k = K/J``). Then::

        kp = 1 / (a k Ts),    Ti = a^2 Ts,    ki = kp / Ti

    The gain crossover is at ``1/(a Ts)``, the geometric mean of the PI zero ``1/(a^2 Ts)``
    and the plant pole ``1/Ts``, where the phase is highest: the phase margin is
    ``arctan((a^2 - 1) / (2 a))`` (36.87 deg at ``a = 2``). The PI zero makes the reference
    step overshoot (about 43 % at ``a = 2``); the method cancels it with the prefilter
    ``1/(1 + s a^2 Ts)`` on the reference. Kessler (1958), "das symmetrische Optimum" (the
    classic case ``a = 2``); Preitl & Precup, "An extension of tuning relations after
    symmetrical optimum method for PI and PID controllers", *Automatica* 35 (1999) (general
    ``a``; title from memory).

    Parameters
    ----------
    gain : float
        Gain ``k`` of the integrating plant ``k/s`` [plant output / (controller output * s)],
        e.g. ``K/J`` [rad/s^2 per A] for the speed from the current.
    small_time_constant_s : float
        Small (lumped) time constant ``Ts`` [s].
    a : float, optional
        Design parameter [-], greater than 1 (default 2). Larger ``a``: more phase margin,
        lower bandwidth.

    Returns
    -------
    Gains
        With ``prefilter_time_s = a^2 Ts``.
    """
    rule = "symmetric_optimum"
    k = _positive(rule, "gain", gain, "plant output / (controller output * s)")
    ts = _positive(rule, "small_time_constant_s", small_time_constant_s, "s")
    a_ = _positive(rule, "a", a, "-")
    if a_ <= 1.0:
        raise ScenarioError(
            f"{rule}: expected a greater than 1 (a = 1 leaves no phase margin), found {a_!r}",
            key="a",
        )
    kp = 1.0 / (a_ * k * ts)
    ti = a_ * a_ * ts
    return Gains(
        kp=kp,
        ki=kp / ti,
        prefilter_time_s=ti,
        method="symmetric-optimum",
        notes=(
            f"plant k/(s (1 + s Ts)); a = {a_:g}, Ti = a^2 Ts, crossover 1/(a Ts), phase "
            f"margin arctan((a^2-1)/(2a)) = {math.degrees(math.atan((a_**2 - 1) / (2 * a_))):.2f}"
            " deg, reference prefilter 1/(1 + s a^2 Ts) (symmetric optimum, Kessler 1958; "
            "extended form, Preitl & Precup, Automatica 35 (1999))"
        ),
    )


def _simc_tau_c(rule: str, delay_s: float, tau_c_s: float | None) -> tuple[float, float]:
    """Delay and closed-loop time constant of the SIMC rules, checked [s]."""
    if tau_c_s is None:
        theta = _number(rule, "delay_s", delay_s, "s", allow_zero=True)
        if theta == 0.0:
            raise ScenarioError(
                f"{rule}: expected delay_s positive when tau_c_s is not given (the default "
                f"tau_c = delay would give an infinite gain), found {delay_s!r}",
                key="delay_s",
            )
        return theta, theta
    tau_c = _positive(rule, "tau_c_s", tau_c_s, "s")
    return _number(rule, "delay_s", delay_s, "s", allow_zero=True), tau_c


def simc(
    gain: float, time_constant_s: float, delay_s: float, tau_c_s: float | None = None
) -> Gains:
    """PI by the SIMC rule for a first-order plant with delay.

    Plant ``P(s) = k e^{-theta s} / (tau1 s + 1)``. With the closed-loop time constant
    ``tau_c`` (default ``tau_c = theta``, the paper's recommendation for tight but robust
    control)::

        Kc = tau1 / (k (tau_c + theta)),    tau_I = min(tau1, 4 (tau_c + theta))

    in the paper's (ideal) form ``Kc (1 + 1/(tau_I s))``, here converted to the parallel form
    ``kp = Kc``, ``ki = Kc / tau_I``. Skogestad, *J. Process Control* 13 (2003) 291-309,
    the SIMC PI rule for a first-order plus delay plant.

    Parameters
    ----------
    gain : float
        Static gain ``k`` [plant output / controller output].
    time_constant_s : float
        Lag ``tau1`` [s].
    delay_s : float
        Delay ``theta`` [s]; may be 0 only when ``tau_c_s`` is given.
    tau_c_s : float, optional
        Wanted closed-loop time constant ``tau_c`` [s] (default ``theta``).

    Returns
    -------
    Gains
    """
    rule = "simc"
    k = _positive(rule, "gain", gain, "plant output / controller output")
    tau1 = _positive(rule, "time_constant_s", time_constant_s, "s")
    theta, tau_c = _simc_tau_c(rule, delay_s, tau_c_s)
    kc = tau1 / (k * (tau_c + theta))
    tau_i = min(tau1, 4.0 * (tau_c + theta))
    return Gains(
        kp=kc,
        ki=kc / tau_i,
        method="simc",
        notes=(
            f"plant k e^(-theta s)/(tau1 s + 1); tau_c = {tau_c:g} s, tau_I = {tau_i:g} s "
            "(SIMC, Skogestad, J. Process Control 13 (2003) 291-309)"
        ),
    )


def simc_integrating(gain: float, delay_s: float, tau_c_s: float | None = None) -> Gains:
    """PI by the SIMC rule for an integrating plant with delay.

    Plant ``P(s) = k e^{-theta s} / s`` (default ``tau_c = theta``)::

        Kc = 1 / (k (tau_c + theta)),    tau_I = 4 (tau_c + theta)

    converted to the parallel form ``kp = Kc``, ``ki = Kc / tau_I``. Skogestad,
    *J. Process Control* 13 (2003) 291-309, the SIMC PI rule for an integrating plant.

    Parameters
    ----------
    gain : float
        Gain ``k`` of ``k/s`` [plant output / (controller output * s)].
    delay_s : float
        Delay ``theta`` [s]; may be 0 only when ``tau_c_s`` is given.
    tau_c_s : float, optional
        Wanted closed-loop time constant ``tau_c`` [s] (default ``theta``).

    Returns
    -------
    Gains
    """
    rule = "simc_integrating"
    k = _positive(rule, "gain", gain, "plant output / (controller output * s)")
    theta, tau_c = _simc_tau_c(rule, delay_s, tau_c_s)
    kc = 1.0 / (k * (tau_c + theta))
    tau_i = 4.0 * (tau_c + theta)
    return Gains(
        kp=kc,
        ki=kc / tau_i,
        method="simc",
        notes=(
            f"plant k e^(-theta s)/s; tau_c = {tau_c:g} s, tau_I = {tau_i:g} s "
            "(SIMC for an integrating plant, Skogestad, J. Process Control 13 (2003) 291-309)"
        ),
    )


_ZN_KINDS = ("P", "PI", "PID")


def ziegler_nichols(ultimate_gain: float, ultimate_period_s: float, kind: str = "PI") -> Gains:
    """P, PI or PID by the Ziegler-Nichols ultimate-cycle rule.

    From the ultimate gain ``Ku`` (the proportional gain that brings the loop to a sustained
    oscillation) and its period ``Pu``::

        P:    K = 0.5 Ku
        PI:   K = 0.45 Ku,   Ti = Pu / 1.2
        PID:  K = 0.6 Ku,    Ti = Pu / 2,   Td = Pu / 8

    converted to the parallel form ``kp = K``, ``ki = K / Ti``, ``kd = K Td`` (no derivative
    filter: add one before use). Ziegler & Nichols, "Optimum settings for automatic
    controllers", *Trans. ASME* 64 (1942) 759-768. The rule aims at a quarter-amplitude
    decay: aggressive, with little phase margin, for a drive.

    Parameters
    ----------
    ultimate_gain : float
        ``Ku`` [controller output / plant output].
    ultimate_period_s : float
        ``Pu`` [s].
    kind : {"P", "PI", "PID"}, optional
        Controller type (default ``"PI"``).

    Returns
    -------
    Gains
    """
    rule = "ziegler_nichols"
    ku = _positive(rule, "ultimate_gain", ultimate_gain, "controller output / plant output")
    pu = _positive(rule, "ultimate_period_s", ultimate_period_s, "s")
    if not isinstance(kind, str) or kind.upper() not in _ZN_KINDS:
        raise ScenarioError(
            f"{rule}: expected kind one of {', '.join(_ZN_KINDS)}, found {kind!r}", key="kind"
        )
    kind = kind.upper()
    kd = 0.0
    if kind == "P":
        kp, ki = 0.5 * ku, 0.0
    elif kind == "PI":
        kp = 0.45 * ku
        ki = kp / (pu / 1.2)
    else:
        kp = 0.6 * ku
        ki = kp / (pu / 2.0)
        kd = kp * pu / 8.0
    return Gains(
        kp=kp,
        ki=ki,
        kd=kd,
        method="ziegler-nichols",
        notes=(
            f"{kind} from Ku = {ku:g}, Pu = {pu:g} s (ultimate-cycle rule, Ziegler & Nichols, "
            "Trans. ASME 64 (1942) 759-768). Caution: the rule aims at quarter-amplitude "
            "decay and is aggressive for a drive (little phase margin); check the margins"
            + ("; the derivative has no filter" if kd else "")
        ),
    )


def ultimate_from_loop(loop_tf) -> tuple[float, float]:
    """Ultimate gain and period of a loop model.

    ``Ku`` is the gain margin of the loop, ``Pu = 2 pi / w_pc`` with ``w_pc`` the
    phase-crossover frequency, both from ``control.stability_margins`` (the smallest gain
    margin when there are several crossings). For a discrete loop python-control gives
    ``w_pc`` in rad/s, so ``Pu`` is in seconds either way. ``Ku`` multiplies the loop as
    given: pass the plant with a unit proportional controller to get the gain the rule
    wants.

    Parameters
    ----------
    loop_tf : control.TransferFunction or control.StateSpace
        SISO open loop, continuous or discrete.

    Returns
    -------
    ultimate_gain : float
        ``Ku`` [-, relative to the loop given].
    ultimate_period_s : float
        ``Pu`` [s].
    """
    rule = "ultimate_from_loop"
    if not isinstance(loop_tf, control.LTI):
        raise ScenarioError(
            f"{rule}: expected loop_tf a python-control system, found {type(loop_tf).__name__}",
            key="loop_tf",
        )
    if loop_tf.ninputs != 1 or loop_tf.noutputs != 1:
        raise ScenarioError(
            f"{rule}: expected loop_tf single-input single-output, found "
            f"{loop_tf.ninputs} inputs and {loop_tf.noutputs} outputs",
            key="loop_tf",
        )
    gm, _, _, wpc, _, _ = control.stability_margins(loop_tf)
    gm, wpc = float(gm), float(wpc)
    if not (math.isfinite(gm) and gm > 0.0 and math.isfinite(wpc) and wpc > 0.0):
        raise ScenarioError(
            f"{rule}: expected a loop whose phase crosses -180 deg at a finite frequency "
            f"(a finite ultimate gain), found gain margin {gm!r} at {wpc!r} rad/s",
            key="loop_tf",
        )
    return gm, 2.0 * math.pi / wpc
