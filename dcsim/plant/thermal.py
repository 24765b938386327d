"""Winding temperature: a first-order thermal model and copper's resistance at temperature.

Model
-----
The armature winding is one lumped heat capacity ``C`` behind one thermal resistance ``R_th``
to the ambient (the lumped-capacitance method, [1]_)::

    C dT/dt = P(t) - (T - T_amb) / R_th,        tau = R_th C

so that a constant loss ``P`` settles at the rise ``P R_th`` with the time constant ``tau``.
The copper loss is ``P = R(T) i^2``, with the resistance of annealed copper at temperature
([2]_)::

    R(T) = R20 (1 + alpha20 (T - 20 degC)),      alpha20 = 0.00393 /K

The rise is integrated exactly for a loss that is linear between samples (first-order hold):
with ``u = R_th P`` going from ``u0`` to ``u1`` over ``h`` (slope ``b = (u1 - u0)/h``), the
rise ``theta = T - T_amb`` obeys ``theta' = (u - theta)/tau``, whose solution is
``theta(h) = u1 - b tau + (theta0 - u0 + b tau) exp(-h/tau)``.

A duty cycle of length ``D`` repeated every ``T_c`` (the drive off in between) settles to a
periodic state: the response ``theta_z`` from zero over one cycle ends at
``theta_z(D) exp(-(T_c - D)/tau)``, so the periodic start is
``theta_0 = theta_z(D) exp(-(T_c - D)/tau) / (1 - exp(-T_c/tau))`` and the hottest cycle is
``theta(t) = theta_z(t) + theta_0 exp(-t/tau)`` (superposition; linear model).

References
----------
.. [1] F. P. Incropera, D. P. DeWitt, T. L. Bergman, A. S. Lavine, *Fundamentals of Heat and
   Mass Transfer*, 6th ed., Wiley (2007), sec. 5.1-5.3 (lumped capacitance method).
.. [2] IEC 60028, *International standard of resistance for copper*: alpha20 = 0.00393 /K
   (annealed copper, resistivity 0.017241 ohm mm^2/m at 20 degC).
.. [3] IEC 60085, *Electrical insulation - Thermal evaluation and designation*: the thermal
   classes 105 (A), 120 (E), 130 (B), 155 (F), 180 (H), 200 (N), 220 (R) degC.
"""

from __future__ import annotations

import math

import numpy as np

ALPHA20_PER_K = 0.00393
"""Temperature coefficient of annealed copper's resistance at 20 degC [1/K] (IEC 60028)."""

T20_K = 293.15
"""20 degC [K]."""

ZERO_CELSIUS_K = 273.15
"""0 degC [K]."""


def resistance_at(
    resistance_ohm: float, temperature_K: float | np.ndarray, reference_K: float = T20_K
) -> float | np.ndarray:
    """Copper winding resistance at a temperature.

    ``R(T) = R20 (1 + alpha20 (T - 20 degC))`` with ``R20 = R_ref / (1 + alpha20 (T_ref -
    20 degC))`` (IEC 60028, alpha20 = 0.00393 /K).

    Parameters
    ----------
    resistance_ohm : float
        Resistance at ``reference_K`` [ohm].
    temperature_K : float or array_like
        Winding temperature [K].
    reference_K : float
        Temperature at which ``resistance_ohm`` holds [K].

    Returns
    -------
    float or numpy.ndarray
        Resistance [ohm].
    """
    r20 = resistance_ohm / (1.0 + ALPHA20_PER_K * (reference_K - T20_K))
    return r20 * (1.0 + ALPHA20_PER_K * (np.asarray(temperature_K, dtype=float) - T20_K))


def temperature_rise(
    time_s: np.ndarray,
    power_W: np.ndarray,
    thermal_resistance_K_W: float,
    time_constant_s: float,
    initial_rise_K: float = 0.0,
) -> np.ndarray:
    """Winding temperature rise over the ambient under a sampled loss (exact, first-order hold).

    Parameters
    ----------
    time_s : array_like
        Sample times, non-decreasing [s].
    power_W : array_like
        Loss at those times [W], linear in between.
    thermal_resistance_K_W : float
        Thermal resistance to the ambient [K/W].
    time_constant_s : float
        Thermal time constant [s].
    initial_rise_K : float
        Rise at ``time_s[0]`` [K].

    Returns
    -------
    numpy.ndarray
        The rise ``T - T_amb`` at each sample [K] (module docstring for the formula).
    """
    t = np.asarray(time_s, dtype=float)
    u = thermal_resistance_K_W * np.asarray(power_W, dtype=float)
    tau = float(time_constant_s)
    theta = np.empty_like(t)
    if t.size == 0:
        return theta
    theta[0] = initial_rise_K
    h = np.diff(t)
    decay = np.exp(-h / tau)
    with np.errstate(divide="ignore", invalid="ignore"):
        slope_tau = np.where(h > 0.0, (u[1:] - u[:-1]) / h * tau, 0.0)
    forced = u[1:] - slope_tau
    carry = -u[:-1] + slope_tau
    th = float(initial_rise_K)
    for k in range(h.size):  # a recursion: one multiply-add per sample
        th = forced[k] + (th + carry[k]) * decay[k]
        theta[k + 1] = th
    return theta


def periodic_start_rise(
    end_rise_from_zero_K: float, duration_s: float, cycle_time_s: float, time_constant_s: float
) -> float:
    """Rise at the start of each cycle once a repeated duty cycle has settled [K].

    ``theta_0 = theta_z(D) exp(-(T_c - D)/tau) / (1 - exp(-T_c/tau))`` (module docstring).

    Parameters
    ----------
    end_rise_from_zero_K : float
        Rise at the end of one cycle started from zero rise [K].
    duration_s : float
        Length ``D`` of the driven part of the cycle [s].
    cycle_time_s : float
        Cycle period ``T_c`` >= ``D`` [s]; the drive is off (no loss) for the rest.
    time_constant_s : float
        Thermal time constant [s].
    """
    tau = float(time_constant_s)
    rest = math.exp(-(cycle_time_s - duration_s) / tau)
    return end_rise_from_zero_K * rest / -math.expm1(-cycle_time_s / tau)


def celsius(temperature_K: float) -> float:
    """Temperature in degC for display."""
    return temperature_K - ZERO_CELSIUS_K
