"""DC supply, bus capacitor and the ideal bridge's view of them.

Supply: an ideal source ``V_s`` behind a series resistance ``R_s``; optionally a bus
capacitor ``C``; a regenerative source takes current back, a diode front end does not
(``i_s >= 0``)::

    C dv/dt = i_s - i_b,   i_s = (V_s - v) / R_s   (conducting)   or 0 (diode blocked)

Ideal bridge (lossless, duty ``d`` in [-1, 1]): armature voltage ``v_a = d v``, bus current
``i_b = d i``, so ``v_a i = v i_b`` (power balance). The bridge applies the commanded voltage
when the bus can give it; otherwise it is fully on (``d = +-1``).

Without a capacitor the bus voltage is algebraic. With the command ``v_a`` applied, the
source must deliver the power ``P = v_a i``: ``V_s i_s - R_s i_s^2 = P``, whose physical
root is ``v = (V_s + sqrt(V_s^2 - 4 R_s P)) / 2``, ``i_s = P / v``.

References
----------
.. [1] N. Mohan, T. M. Undeland and W. P. Robbins, *Power Electronics: Converters,
   Applications and Design*, 3rd ed., Wiley (2003), ch. 7 (full-bridge dc-dc converter:
   average output ``V_o = d V_d``, input current ``I_d = d I_o`` for the lossless bridge).
.. [2] C. K. Alexander and M. N. O. Sadiku, *Fundamentals of Electric Circuits*, 5th ed.,
   McGraw-Hill (2013), ch. 4 (maximum power transfer from a source with internal resistance).
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from dcsim.engine.layout import X_BUS, X_CURRENT


@njit(cache=True, error_model="numpy", inline="always")
def bus_without_capacitor(
    power_W: float, source_V: float, source_ohm: float
) -> tuple[float, float]:
    """Bus voltage and source current when a load takes ``power_W`` from ``V_s, R_s`` [2]_.

    Parameters
    ----------
    power_W : float
        Power into the bridge [W]; negative when regenerating.
    source_V : float
        Source open-circuit voltage [V].
    source_ohm : float
        Source resistance [ohm].

    Returns
    -------
    bus_V : float
        Bus voltage, the high root (the stable operating point) [V].
    supply_A : float
        Source current [A].
    """
    if power_W == 0.0 or source_ohm == 0.0:
        if source_V > 0.0:
            return source_V, power_W / source_V
        return source_V, 0.0
    disc = source_V * source_V - 4.0 * source_ohm * power_W
    if disc < 0.0:
        disc = 0.0
    bus = 0.5 * (source_V + math.sqrt(disc))
    if bus <= 0.0:
        return 0.0, 0.0
    return bus, power_W / bus


@njit(cache=True, error_model="numpy")
def fill_bus_row(
    a: np.ndarray,
    b: np.ndarray,
    source_V: float,
    source_ohm: float,
    cap_F: float,
    conducting: bool,
    bridge_gain: float,
) -> None:
    """Write the capacitor equation as row ``X_BUS`` of ``x' = A x + b`` [1]_.

    Parameters
    ----------
    a, b : float arrays
        System matrix [1/s] and forcing vector [V/s].
    source_V, source_ohm : float
        Source voltage [V] and resistance [ohm].
    cap_F : float
        Bus capacitance [F] (> 0).
    conducting : bool
        The source (or its diode) conducts.
    bridge_gain : float
        Duty of a fully-on bridge (+1 / -1): the bridge draws ``bridge_gain * i``. For the
        bridge in control (0 here) the non-linear bus current ``v_a i / v`` is handled by the
        kernel's polynomial correction (see :func:`dcsim.engine.kernel.propagate`).
    """
    if conducting:
        a[X_BUS, X_BUS] = -1.0 / (source_ohm * cap_F)
        b[X_BUS] = source_V / (source_ohm * cap_F)
    else:
        a[X_BUS, X_BUS] = 0.0
        b[X_BUS] = 0.0
    a[X_BUS, X_CURRENT] = -bridge_gain / cap_F
