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

One node, or two (winding -> housing -> ambient: :func:`network_matrices`), the rises over
the ambient obey ``theta' = A theta + b P``, integrated exactly for a loss linear between samples
(first-order hold, :func:`network_rise`). For one node with ``u = R_th P`` going from ``u0`` to
``u1`` over ``h`` (slope ``b = (u1 - u0)/h``) that is
``theta(h) = u1 - b tau + (theta0 - u0 + b tau) exp(-h/tau)``.

A duty cycle of length ``D`` repeated every ``T_c`` (the drive off in between) settles to a
periodic state: the response ``theta_z`` from zero over one cycle ends at
``theta_z(D) exp(-(T_c - D)/tau)``, so the periodic start is
``theta_0 = theta_z(D) exp(-(T_c - D)/tau) / (1 - exp(-T_c/tau))`` and the hottest cycle is
``theta(t) = theta_z(t) + theta_0 exp(-t/tau)`` (superposition; linear model; the network's
form is :func:`periodic_start_rises`).

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


def network_matrices(thermal) -> tuple[np.ndarray, np.ndarray]:
    """``A``, ``b`` of the thermal network ``theta' = A theta + b P`` (rises over ambient).

    One node: ``A = [[-1/tau]]``, ``b = [R_th/tau]``. Two nodes (winding, housing), with
    conductances ``G_wh = 1/R_wh``, ``G_ha = 1/R_ha`` and capacities ``C_w``, ``C_h``, the loss
    into the winding node (the nodal heat balance of a lumped network, [1]_ sec. 3.1 and
    5.1-5.3)::

        C_w theta_w' = P - G_wh (theta_w - theta_h)
        C_h theta_h' = G_wh (theta_w - theta_h) - G_ha theta_h

    Parameters
    ----------
    thermal : Thermal
        The scenario's ``[thermal]`` table (SI).
    """
    if not thermal.two_node:
        tau = float(thermal.time_constant)
        return np.array([[-1.0 / tau]]), np.array([float(thermal.resistance) / tau])
    g_wh = 1.0 / thermal.winding_to_housing
    g_ha = 1.0 / thermal.housing_to_ambient
    c_w, c_h = thermal.winding_capacity, thermal.housing_capacity
    a = np.array([[-g_wh / c_w, g_wh / c_w], [g_wh / c_h, -(g_wh + g_ha) / c_h]])
    return a, np.array([1.0 / c_w, 0.0])


def time_constants_s(a: np.ndarray) -> np.ndarray:
    """Time constants of the network ``theta' = A theta``, fastest first [s]: ``-1 / s_k`` of
    the eigenvalues (real and negative for a passive RC network)."""
    return np.sort(-1.0 / np.linalg.eigvals(a).real)


def _hold_blocks(a: np.ndarray, b: np.ndarray, h: float):
    """``Phi = e^{hA}``, ``G0``, ``G1`` with x(h) = Phi x0 + G0 u0 + G1 (u1 - u0) for an input
    linear over the step (first-order hold), from one exponential of an augmented matrix
    (Van Loan's block method; Higham, *Functions of Matrices*, SIAM 2008, sec. 10.7.4)."""
    from scipy.linalg import expm

    n = a.shape[0]
    m = np.zeros((n + 2, n + 2))
    m[:n, :n] = a * h
    m[:n, n] = b * h
    m[n, n + 1] = 1.0
    e = expm(m)
    return e[:n, :n], e[:n, n], e[:n, n + 1]


def network_rise(
    time_s: np.ndarray, power_W: np.ndarray, a: np.ndarray, b: np.ndarray, x0: np.ndarray
) -> np.ndarray:
    """Node rises over the ambient under a sampled loss (exact for a loss linear in between).

    Parameters
    ----------
    time_s : array_like
        Sample times, non-decreasing [s].
    power_W : array_like
        Loss at those times [W].
    a, b : numpy.ndarray
        The network (:func:`network_matrices`).
    x0 : array_like
        Rises at ``time_s[0]`` [K].

    Returns
    -------
    numpy.ndarray
        Shape ``(len(time_s), nodes)`` [K].
    """
    t = np.asarray(time_s, dtype=float)
    u = np.asarray(power_W, dtype=float)
    out = np.empty((t.size, a.shape[0]))
    if t.size == 0:
        return out
    x = np.asarray(x0, dtype=float).copy()
    out[0] = x
    cache: dict[float, tuple] = {}
    for k, h in enumerate(np.diff(t)):
        blocks = cache.get(float(h))
        if blocks is None:
            blocks = cache[float(h)] = _hold_blocks(a, b, float(h))
        phi, g0, g1 = blocks
        x = phi @ x + g0 * u[k] + g1 * (u[k + 1] - u[k])
        out[k + 1] = x
    return out


def periodic_start_rises(
    end_rise_from_zero_K: np.ndarray, a: np.ndarray, duration_s: float, cycle_time_s: float
) -> np.ndarray:
    """Node rises at the start of each cycle once a repeated duty cycle has settled [K].

    The network evolves freely for the rest ``T_c - D`` of each cycle, so the settled start
    solves ``x0 = e^{A (T_c - D)} (e^{A D} x0 + x_z(D))``:
    ``x0 = (I - e^{A T_c})^{-1} e^{A (T_c - D)} x_z(D)`` (superposition; the one-node case is
    ``theta_0 = theta_z(D) exp(-(T_c - D)/tau) / (1 - exp(-T_c/tau))``, module docstring).
    """
    from scipy.linalg import expm

    n = a.shape[0]
    rest = expm(a * (cycle_time_s - duration_s))
    whole = expm(a * cycle_time_s)
    return np.linalg.solve(np.eye(n) - whole, rest @ np.asarray(end_rise_from_zero_K))


def free_response(a: np.ndarray, x0: np.ndarray, time_s: np.ndarray) -> np.ndarray:
    """``e^{A (t - t0)} x0`` at each time, shape ``(len(time_s), nodes)`` [K].

    By the eigen-decomposition of ``A`` (a passive RC network has real, distinct, negative
    eigenvalues).
    """
    t = np.asarray(time_s, dtype=float)
    w, v = np.linalg.eig(a)
    c = np.linalg.solve(v, np.asarray(x0, dtype=float))
    modes = c * np.exp(np.outer(t - t[0], w))
    return np.real(modes @ v.T)


def torque_constant_at(
    torque_constant: float, magnet_K: float | np.ndarray, reference_K: float, coefficient: float
) -> float | np.ndarray:
    """Torque constant at a magnet temperature: ``K_ref (1 + c (T - T_ref))`` [N*m/A].

    The air-gap flux of a permanent-magnet machine follows the magnets' remanence, whose
    reversible change is linear in temperature with the material's coefficient ``c`` [1/K]
    (magnet makers' data; values in :data:`dcsim.scenario.schema.MAGNET_COEFFICIENTS_PER_K`).
    """
    return torque_constant * (1.0 + coefficient * (np.asarray(magnet_K, dtype=float) - reference_K))


def celsius(temperature_K: float | np.ndarray) -> float | np.ndarray:
    """Temperature in degC for display (t/degC = T/K - 273.15, SI Brochure, 9th ed., 2.3.1)."""
    return temperature_K - ZERO_CELSIUS_K
