"""Wound-field magnetics on the Python side: the magnetisation curve and the flux constant.

The compiled kernel (:mod:`dcsim.engine.machine_kernel`) has its own copy of
:func:`flux_constant` (``curve_flux``); this one serves the loader (the derived torque
constant), the assembly (over-speed default, field time constants) and the notebooks.

A magnetisation curve (open-circuit characteristic) is measured as the back-EMF ``E`` at a
stated speed ``w_m`` against the field current; the flux constant is ``K = E / w_m``
(``E = K phi w``: Chapman, *Electric Machinery Fundamentals*, 4th ed., ch. 9 -- from memory).
Below saturation ``K = M i_f`` with the field-armature mutual inductance ``M`` (Fitzgerald,
Kingsley & Umans, *Electric Machinery*, 6th ed., ch. 7 -- from memory).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

__all__ = ["curve_arrays", "flux_constant", "field_current_for"]


def curve_arrays(
    magnetisation: Sequence[tuple[float, float]] | None, speed_rad_s: float | None
) -> tuple[np.ndarray, np.ndarray]:
    """Field currents [A] and flux constants [V*s/rad] of a magnetisation table.

    Parameters
    ----------
    magnetisation : sequence of (current [A], back-EMF [V]) or None
        The table (None: no table, two empty arrays).
    speed_rad_s : float
        Speed at which the back-EMF was measured [rad/s].
    """
    if magnetisation is None:
        return np.zeros(0), np.zeros(0)
    pts = np.asarray(magnetisation, dtype=float)
    return pts[:, 0].copy(), pts[:, 1] / float(speed_rad_s)


def flux_constant(
    mmf_A: float, mag_i: np.ndarray, mag_k: np.ndarray, mutual_H: float | None
) -> float:
    """Flux constant [V*s/rad] at field m.m.f. ``mmf_A`` [field amps], odd in the m.m.f.

    Linear interpolation in the table, continued past its last point along the last
    segment; without a table ``M * mmf``.
    """
    a = abs(mmf_A)
    if mag_i.size == 0:
        k = float(mutual_H or 0.0) * a
    elif a >= mag_i[-1]:
        slope = (mag_k[-1] - mag_k[-2]) / (mag_i[-1] - mag_i[-2])
        k = mag_k[-1] + slope * (a - mag_i[-1])
    else:
        k = float(np.interp(a, mag_i, mag_k))
    return k if mmf_A >= 0 else -k


def field_current_for(
    k: float, mag_i: np.ndarray, mag_k: np.ndarray, mutual_H: float | None
) -> float:
    """Field current [A] that gives flux constant ``k`` >= 0 (inverse of
    :func:`flux_constant` on a strictly increasing table)."""
    if mag_i.size == 0:
        return k / float(mutual_H)
    if k <= mag_k[0]:
        return float(mag_i[0])
    if k >= mag_k[-1]:
        slope = (mag_k[-1] - mag_k[-2]) / (mag_i[-1] - mag_i[-2])
        return float(mag_i[-1] + (k - mag_k[-1]) / slope)
    return float(np.interp(k, mag_k, mag_i))
