"""Rigid shaft with viscous, Coulomb and static friction, and a locked-rotor condition.

Equations::

    J dw/dt = K i - B w - T_c sgn(w) - T_load       (free, sliding)
    dw/dt = 0, w = 0                                (stuck: |K i - T_load| <= T_s, or locked)
    dtheta/dt = w

Dry friction is modelled with true sticking (the Karnopp-type switch between a stuck and a
sliding state [1]_): at rest the friction torque balances the net driving torque up to the
static (breakaway) level ``T_s``, so the shaft stays exactly at zero speed; it breaks away
when the net torque exceeds ``T_s``. While it slides the friction is the Coulomb level
``T_c sgn(w)`` (plus the viscous ``B w``); it sticks again when the speed reaches zero with
``|K i - T_load| <= T_s``. With ``T_s > T_c`` the drop from the static to the Coulomb level
at breakaway is what lets integral action produce stick-slip limit cycles at low speed [2]_.
``T_s = T_c`` (the default) is the plain Coulomb model. Breakaway itself does no work; the
friction work while sliding is ``(B w + T_c sgn(w)) w``.

References
----------
.. [1] D. Karnopp, "Computer simulation of stick-slip friction in mechanical dynamic
   systems", J. Dyn. Sys., Meas., Control 107(1) (1985) 100-103, doi:10.1115/1.3140698.
.. [2] B. Armstrong-Helouvry, P. Dupont and C. Canudas de Wit, "A survey of models, analysis
   tools and compensation methods for the control of machines with friction", Automatica
   30(7) (1994) 1083-1138, doi:10.1016/0005-1098(94)90209-7 -- static + Coulomb + viscous
   model, stick-slip under integral control (sections from memory).
"""

from __future__ import annotations

import numpy as np
from numba import njit

from dcsim.engine.layout import X_CURRENT, X_POSITION, X_SPEED


@njit(cache=True, error_model="numpy", inline="always")
def friction_state(
    speed_rad_s: float, drive_torque_Nm: float, coulomb_Nm: float, static_Nm: float, locked: bool
) -> tuple[bool, float]:
    """Decide whether the shaft is stuck and which way sliding friction acts [1]_.

    Parameters
    ----------
    speed_rad_s : float
        Shaft speed [rad/s].
    drive_torque_Nm : float
        Net torque apart from friction, ``K i - T_load`` [N*m].
    coulomb_Nm : float
        Coulomb (sliding) friction torque ``T_c`` [N*m].
    static_Nm : float
        Static (breakaway) friction torque ``T_s`` [N*m]; the breakaway level is
        ``max(T_s, T_c)``, so 0 means "equal to the Coulomb level".
    locked : bool
        Rotor held by the load.

    Returns
    -------
    stuck : bool
        The shaft is held at exactly zero speed.
    sign : float
        Direction of the sliding friction torque (+1, -1, or 0 without dry friction). It is
        +-1 whenever there is a breakaway level, even with ``T_c = 0``, so that the kernels
        guard the speed's return to zero (where the shaft may stick).
    """
    if locked:
        return True, 0.0
    breakaway = max(static_Nm, coulomb_Nm)
    if breakaway <= 0.0:
        return False, 0.0
    if speed_rad_s == 0.0:
        if abs(drive_torque_Nm) <= breakaway:
            return True, 0.0
        return False, 1.0 if drive_torque_Nm > 0.0 else -1.0
    return False, 1.0 if speed_rad_s > 0.0 else -1.0


@njit(cache=True, error_model="numpy", inline="always")
def dry_drag_levels(
    coulomb_Nm: float, static_Nm: float, brush_Nm: float, hysteresis_Nm: float
) -> tuple[float, float]:
    """Sliding and breakaway levels of all the constant-magnitude drag torques on the shaft.

    Brush friction and the hysteresis part of the iron loss act like Coulomb friction: a
    torque of constant magnitude against the motion (hysteresis loss per revolution is fixed
    by the flux swing, so its power is proportional to speed; Steinmetz's split of the core
    loss, e.g. Fitzgerald, Kingsley & Umans, *Electric Machinery*, 6th ed., sec. 1.5 "AC
    excitation", core loss -- section from memory). At rest they hold the shaft like static
    friction, so they add to both levels.

    Parameters
    ----------
    coulomb_Nm : float
        Coulomb (bearing) friction ``T_c`` [N*m].
    static_Nm : float
        Static (breakaway) friction ``T_s`` [N*m] (0: equal to ``T_c``).
    brush_Nm : float
        Brush friction [N*m].
    hysteresis_Nm : float
        Hysteresis drag torque [N*m].

    Returns
    -------
    sliding_Nm : float
        ``T_c + T_brush + T_h`` [N*m].
    breakaway_Nm : float
        ``max(T_s, T_c) + T_brush + T_h`` [N*m].
    """
    extra = brush_Nm + hysteresis_Nm
    return coulomb_Nm + extra, max(static_Nm, coulomb_Nm) + extra


@njit(cache=True, error_model="numpy")
def fill_shaft_rows(
    a: np.ndarray,
    b: np.ndarray,
    k: float,
    j_kgm2: float,
    b_visc: float,
    opposing_torque_Nm: float,
    stuck: bool,
) -> None:
    """Write the speed and position equations as rows of ``x' = A x + b``.

    Parameters
    ----------
    a, b : float arrays
        System matrix [1/s] and forcing vector; rows ``X_SPEED`` and ``X_POSITION`` written.
    k : float
        Torque constant [N*m/A].
    j_kgm2 : float
        Total inertia on the motor shaft [kg*m^2].
    b_visc : float
        Viscous friction [N*m*s/rad].
    opposing_torque_Nm : float
        Load torque plus sliding Coulomb torque, opposing positive rotation [N*m].
    stuck : bool
        Shaft held at zero speed: both rows are zero.
    """
    if stuck:
        a[X_SPEED, X_CURRENT] = 0.0
        a[X_SPEED, X_SPEED] = 0.0
        a[X_POSITION, X_SPEED] = 0.0
        b[X_SPEED] = 0.0
    else:
        a[X_SPEED, X_CURRENT] = k / j_kgm2
        a[X_SPEED, X_SPEED] = -b_visc / j_kgm2
        a[X_POSITION, X_SPEED] = 1.0
        b[X_SPEED] = -opposing_torque_Nm / j_kgm2
    b[X_POSITION] = 0.0


@njit(cache=True, error_model="numpy")
def inertia_change(speed_rad_s: float, j_old: float, j_new: float) -> tuple[float, float]:
    """Speed after the inertia on the shaft changes suddenly, and the energy that leaves.

    An engaging mass (at rest) shares the angular momentum, ``w' = J w / J'``, and the
    coupling dissipates ``J w^2 / 2 - J' w'^2 / 2``; a released mass keeps its speed and
    carries its kinetic energy ``(J - J') w^2 / 2`` away (conservation of angular momentum in
    a perfectly inelastic coupling; e.g. Meriam & Kraige, *Engineering Mechanics: Dynamics*,
    angular impulse and momentum -- chapter from memory).

    Parameters
    ----------
    speed_rad_s : float
        Shaft speed before [rad/s].
    j_old, j_new : float
        Total inertia before and after [kg*m^2].

    Returns
    -------
    speed_rad_s : float
        Shaft speed after [rad/s].
    energy_J : float
        Kinetic energy lost in the coupling or carried off [J] (>= 0).
    """
    w = speed_rad_s
    if j_new > j_old:
        w_new = j_old * w / j_new
        return w_new, 0.5 * j_old * w * w - 0.5 * j_new * w_new * w_new
    return w, 0.5 * (j_old - j_new) * w * w


@njit(cache=True, error_model="numpy")
def gear_torques(
    load_torque_Nm: float, ratio: float, forward_efficiency: float, back_efficiency: float
) -> tuple[float, float, float]:
    """A load torque of constant sign seen at the motor shaft through a lossy gear.

    The gear passes on the fraction ``eta_f`` of the power when the motor drives the load and
    ``eta_b`` when the load drives the motor (the usual efficiency model of a gear train with
    separate forward and back-driving efficiencies, e.g. Shigley's *Mechanical Engineering
    Design*, worm gearing: efficiency in each direction and self-locking when the
    back-driving efficiency is zero -- chapter from memory). With the load torque ``T_L`` at
    the load shaft and ``N`` motor turns per load turn the motor shaft sees::

        T_L / (N eta_f)   when sgn(w) sgn(T_L) > 0  (the motor drives the load)
        eta_b T_L / N     when sgn(w) sgn(T_L) < 0  (the load drives the motor)

    which is exactly ``T_const + T_gear sgn(w)`` with the constant part ``T_const = T_L
    (1/eta_f + eta_b) / (2N)`` and the Coulomb-like part ``T_gear = |T_L| (1/eta_f - eta_b)
    / (2N)``. So the kernels treat the gear as a constant torque plus dry friction: at rest
    the shaft holds while ``|K i - T_const| <= T_gear`` (plus the motor's own breakaway
    torque); with ``eta_b = 0`` the hanging load alone cannot turn the motor (self-locking).

    Limits of the model: the load torque must keep its sign while the shaft turns (gravity,
    a winch without springs); the direction of the power flow is taken from ``sgn(w)
    sgn(T_L)``, so the torque that accelerates the load's own inertia passes the gear without
    loss, and a gear without load torque has no loss at all (no churning or no-load loss).

    Parameters
    ----------
    load_torque_Nm : float
        Load torque at the load shaft, opposing positive rotation [N*m].
    ratio : float
        Motor turns per load turn ``N`` [-].
    forward_efficiency : float
        ``eta_f`` (motor drives the load) [-], ``0 < eta_f <= 1``.
    back_efficiency : float
        ``eta_b`` (load drives the motor) [-], ``0 <= eta_b <= 1``.

    Returns
    -------
    constant_Nm : float
        ``T_const`` at the motor shaft [N*m].
    coulomb_Nm : float
        ``T_gear`` at the motor shaft [N*m] (>= 0).
    ideal_Nm : float
        ``T_L / N``, the torque a loss-free gear would pass [N*m]; the load's power at the
        motor shaft is ``(T_L / N) w``, the gear's loss ``(T_const - T_L/N) w + T_gear |w|``.
    """
    driving = load_torque_Nm / (ratio * forward_efficiency)  # the motor drives the load
    driven = back_efficiency * load_torque_Nm / ratio  # the load drives the motor
    return 0.5 * (driving + driven), 0.5 * abs(driving - driven), load_torque_Nm / ratio
