"""Permanent-magnet DC machine: armature circuit and electromagnetic torque.

Equations (SI units, motor sign convention)::

    L di/dt = v - R i - K w          (armature voltage balance)
    T_m     = K i                    (electromagnetic torque)
    e       = K w                    (back-EMF)

with ``K`` the torque constant [N*m/A], equal to the back-EMF constant [V*s/rad] by power
balance (``e i = T_m w``).

References
----------
.. [1] A. Hughes and B. Drury, *Electric Motors and Drives*, 4th ed., Newnes (2013), ch. 3
   ("Conventional d.c. motors"): armature equivalent circuit and ``T = k I``, ``E = k w``.
.. [2] N. Mohan, *Electric Drives: An Integrative Approach*, MNPERE (2003), ch. 7:
   DC-motor equations and the equality of the torque and back-EMF constants in SI.
.. [3] A. E. Fitzgerald, C. Kingsley Jr., S. D. Umans, *Electric Machinery*, 6th ed.,
   McGraw-Hill (2003): sec. 1.5 (core loss, its hysteresis part proportional to frequency and
   its eddy-current part to frequency squared, after Steinmetz) and ch. 7 (DC machines: the
   brush contact drop, about 1 V per brush for carbon brushes, nearly independent of the
   current) -- sections from memory.

Brush contact drop: the armature sees ``v - 2 V_b sgn(i)`` (two brushes, each a constant
drop ``V_b`` against the current [3]_); at zero current the brushes block while
``|v - K w| < 2 V_b``, like a pair of diodes. Iron loss at speed ``w``: the hysteresis drag
``T_h`` of constant magnitude and the eddy-current drag ``B_e w``, so the loss is
``T_h |w| + B_e w^2`` [3]_ (the field's frequency in the armature iron is proportional to
the speed).
"""

from __future__ import annotations

import numpy as np
from numba import njit

from dcsim.engine.layout import X_BUS, X_CURRENT, X_SPEED


@njit(cache=True, error_model="numpy")
def fill_armature_row(
    a: np.ndarray,
    b: np.ndarray,
    r_loop_ohm: float,
    l_H: float,
    k: float,
    v_fixed_V: float,
    bus_gain: float,
) -> None:
    """Write the armature equation as one row of ``x' = A x + b``.

    The armature sees ``v = v_fixed + bus_gain * v_bus`` where ``v_bus`` is the capacitor
    state: ``bus_gain`` is +1 / -1 for a bridge fully on in either direction across a bus
    capacitor, 0 otherwise.

    Parameters
    ----------
    a, b : float arrays
        System matrix [1/s] and forcing vector [state unit/s], row ``X_CURRENT`` written.
    r_loop_ohm : float
        Resistance of the current loop [ohm]: the armature, plus the source resistance when the
        bridge connects the armature straight to a source without capacitor.
    l_H : float
        Armature inductance [H].
    k : float
        Back-EMF constant [V*s/rad].
    v_fixed_V : float
        The part of the armature voltage that does not depend on the state [V].
    bus_gain : float
        Coupling to the bus capacitor voltage [-].
    """
    a[X_CURRENT, X_CURRENT] = -r_loop_ohm / l_H
    a[X_CURRENT, X_SPEED] = -k / l_H
    a[X_CURRENT, X_BUS] = bus_gain / l_H
    b[X_CURRENT] = v_fixed_V / l_H
