"""The compiled loop of the machine library: wound-field machines, commutator torque ripple
and the compliant shaft with backlash.

What it solves
--------------
Armature (``i_a``), optional field (``i_f``) and one or two rotating masses::

    L_arm di_a/dt = v_a - R_arm i_a - K(m, theta) w_1
    L_f   di_f/dt = v_f - R_f i_f                          (shunt, separate, compound field)
    J_1 dw_1/dt   = K(m, theta) i_a - T_shaft - B w_1 - T_dry sgn(w_1)
    J_2 dw_2/dt   = T_shaft - T_load                       (compliant shaft; rigid: one mass;
                                                            a gear's loss on J_1, see Method)
    T_shaft       = k_s D(theta_1 - theta_2) + c_s (w_1 - w_2)  outside the gap, 0 inside

with the flux constant ``K = Phi(m) r(theta)``: ``Phi`` the magnetisation curve at the field
m.m.f. ``m`` expressed in field amps (separate and shunt: ``i_f``; series: ``i_a``; compound:
``i_f +- n_se i_a``), linear ``M m`` without a curve [1]_ [2]_, and ``r`` the commutator
ripple factor (1 when smooth; :func:`ripple_factor`). ``D`` is the dead zone of the backlash
(half the play on each side) [4]_. The machines' connections [1]_: separately excited --
field from its own supply ``v_f``, weakened above the base speed; shunt -- field across the
armature terminals (``v_f = v_a``, the terminals carry ``i_a + i_f``); series -- one current
through armature and field (``R_arm = R_a + R_f``, ``L_arm = L_a + L_f``); compound -- long
shunt: the shunt field across the terminals, the series winding in the armature branch,
cumulative (``+``) or differential (``-``).

The bridge is the ideal averaged one of :mod:`dcsim.engine.kernel` without a bus capacitor:
it applies the command, or is fully on when the source (with its resistance) cannot give it.

Method
------
The products ``K(m) w`` and ``K(m) i`` make the equations non-linear, so the exact
exponential steps of the ideal kernel do not apply. Each step of the common grid (controller
samples, events, trace rows) is cut into sub-steps of at most a tenth of the fastest time
constant (``h_rk``, chosen by :func:`dcsim.engine.machine_run.machine_inputs`) and at least
eight per commutator pulse, and each sub-step is the classical fourth-order Runge-Kutta
method [3]_. The power integrands of the energy account are integrated with the same stages
(so they are fourth order too). Dry friction is switched at sub-step starts (stuck while the
net torque is within the breakaway level; a sliding shaft that reverses within a sub-step is
set to rest), which is first order at those instants only; the brushes' contact drop
(``2 V_b`` against the current, the current held at zero while ``|v_a - e| <= 2 V_b``) is
switched the same way (:func:`brush_regime`). The contact instants of the
backlash are not located either: RK4 is first order across a backlash contact instant when
the shaft has damping (the shaft torque jumps from 0 to ``c_s (w_1 - w_2)`` there), second
order without damping (the torque is continuous, its rate jumps).

A gear sits on the motor side of a compliant shaft (its inertia in ``J_1``): its loss
(:func:`dcsim.plant.mechanics.gear_torques`, the constant part and the Coulomb-like part)
acts on the motor-side mass, the load-side mass sees the load torque referred through the
loss-free ratio, ``T_L / N``, so the shaft carries ``T_L / N`` at rest or constant speed.

References
----------
.. [1] S. J. Chapman, *Electric Machinery Fundamentals*, 4th ed., McGraw-Hill (2005), ch. 9
   "DC motors and generators": equivalent circuits of the separately excited, shunt, series
   and compound machine, the magnetisation curve, ``E_A = K phi w`` and ``T = K phi I_A``
   (sections from memory).
.. [2] A. E. Fitzgerald, C. Kingsley Jr., S. D. Umans, *Electric Machinery*, 6th ed.,
   McGraw-Hill (2003), ch. 7: ``e = L_af i_f w`` for the field-armature mutual inductance,
   field weakening above base speed (sections from memory).
.. [3] E. Hairer, S. P. Norsett, G. Wanner, *Solving Ordinary Differential Equations I*,
   2nd ed., Springer (1993), sec. II.1 (the classical Runge-Kutta method).
.. [4] M. Nordin and P.-O. Gutman, "Controlling mechanical systems with backlash -- a
   survey", Automatica 38 (2002) 1633-1649, doi:10.1016/S0005-1098(02)00047-X (the dead-zone
   model of a shaft with backlash).
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from dcsim.controllers.cascade import control_sample, copy_record
from dcsim.engine.layout import (
    MACHINE_COMPOUND,
    MACHINE_PM,
    MACHINE_SEPARATE,
    MACHINE_SERIES,
    MACHINE_SHUNT,
    P_B,
    P_BE,
    P_C,
    P_CSH,
    P_GAP,
    P_GEAR_CONST,
    P_GEAR_COULOMB,
    P_J,
    P_J1,
    P_K,
    P_KIND,
    P_KSH,
    P_L,
    P_LF,
    P_LOCK,
    P_LSE,
    P_MAF,
    P_NSE,
    P_NSEG,
    P_POLES,
    P_R,
    P_REGEN,
    P_RF,
    P_RS,
    P_RSE,
    P_TBR,
    P_TC,
    P_TH,
    P_TL,
    P_TS,
    P_VBRUSH,
    P_VCMD,
    P_VF,
    P_VS,
    P_WBASE,
    P_WMAX,
    R_ARMATURE_V,
    R_BRIDGE_CURRENT,
    R_BUS_V,
    R_CURRENT,
    R_FRICTION_TORQUE,
    R_LOAD_TORQUE,
    R_MOTOR_TORQUE,
    R_POSITION,
    R_SPEED,
    R_SUPPLY_CURRENT,
    R_TIME,
    STATUS_NONFINITE,
    STATUS_OK,
    STATUS_OVERSPEED,
    STATUS_REGEN_NO_PATH,
)
from dcsim.engine.machine_layout import (
    M_BUS_MAX,
    M_BUS_MIN,
    M_COUPLING,
    M_LOCK,
    M_PEAK_FIELD,
    M_PEAK_I,
    M_PEAK_I_TIME,
    M_PEAK_SPEED,
    M_SUBSTEPS,
    N_MSTATE,
    N_POWER,
    R_FIELD_CURRENT,
    R_FLUX_CONSTANT,
    R_LOAD_POSITION,
    R_LOAD_SPEED,
    R_SHAFT_TORQUE,
    R_SHAFT_TWIST,
    W_BRUSH_DROP,
    W_BRUSH_FRICTION,
    W_COPPER,
    W_FIELD_COPPER,
    W_FIELD_SUPPLY,
    W_FRICTION,
    W_GEAR,
    W_I2,
    W_IRON,
    W_LOAD,
    W_SHAFT_DAMPING,
    W_SOURCE_LOSS,
    W_SUPPLY,
    X_BUS,
    X_CURRENT,
    X_FIELD,
    X_LOAD_POSITION,
    X_LOAD_SPEED,
    X_POSITION,
    X_SPEED,
)
from dcsim.plant.mechanics import dry_drag_levels, friction_state, inertia_change
from dcsim.power.bus import bus_without_capacitor

PULSE_SUBSTEPS = 8
"""Least Runge-Kutta sub-steps per commutator ripple pulse."""


@njit(cache=True, error_model="numpy", inline="always")
def table_lookup(a, xs, ys):
    """Linear interpolation of the table ``(xs, ys)`` at ``a`` (``xs`` strictly increasing,
    ``xs[0] <= a < xs[-1]``): a bisection written out, the scalar core of ``np.interp``
    without its array set-up (the lookup runs six times per Runge-Kutta sub-step)."""
    lo = 0
    hi = xs.shape[0] - 1
    while hi - lo > 1:
        mid = (lo + hi) >> 1
        if xs[mid] <= a:
            lo = mid
        else:
            hi = mid
    return ys[lo] + (ys[hi] - ys[lo]) * (a - xs[lo]) / (xs[hi] - xs[lo])


@njit(cache=True, error_model="numpy", inline="always")
def curve_flux(m, p, mag_i, mag_k):
    """Flux constant ``Phi(m)`` [V*s/rad] at field m.m.f. ``m`` [field amps], odd in ``m``.

    Linear interpolation in the magnetisation table ``(mag_i, mag_k)`` (``|m|`` against
    back-EMF per speed), continued past its last point along its last segment; without a
    table ``M m`` with the mutual inductance ``P_MAF`` [2]_.
    """
    a = abs(m)
    n = mag_i.shape[0]
    if n == 0:
        k = p[P_MAF] * a
    elif a >= mag_i[n - 1]:
        slope = (mag_k[n - 1] - mag_k[n - 2]) / (mag_i[n - 1] - mag_i[n - 2])
        k = mag_k[n - 1] + slope * (a - mag_i[n - 1])
    elif a <= mag_i[0]:
        k = mag_k[0]
    else:
        k = table_lookup(a, mag_i, mag_k)
    return k if m >= 0.0 else -k


@njit(cache=True, error_model="numpy", inline="always")
def curve_current(k, p, mag_i, mag_k):
    """Field m.m.f. [field amps] that gives flux constant ``k`` >= 0 (inverse of
    :func:`curve_flux`; the table is strictly increasing)."""
    n = mag_i.shape[0]
    if n == 0:
        return k / p[P_MAF]
    if k <= mag_k[0]:
        return mag_i[0]
    if k >= mag_k[n - 1]:
        slope = (mag_k[n - 1] - mag_k[n - 2]) / (mag_i[n - 1] - mag_i[n - 2])
        return mag_i[n - 1] + (k - mag_k[n - 1]) / slope
    return table_lookup(k, mag_k, mag_i)


@njit(cache=True, error_model="numpy", inline="always")
def ripple_factor(theta_e, n_seg):
    """Commutator ripple factor at electrical angle ``theta_e`` [rad], mean 1.

    The armature's e.m.f. is the sum of its ``N`` coils' rectified e.m.f.s, each coil's a
    sine displaced by ``2 pi / N`` that the commutator reverses as the coil passes the
    brushes: ``sum_j |sin(theta - 2 pi j / N)|``, divided by its mean ``2 N / pi``. That is
    a ``p``-pulse rectified sine with ``p = N`` for even and ``2 N`` for odd ``N``: peak to
    peak over maximum ``1 - cos(pi / p)`` (the multi-pulse rectifier identity, e.g. Rashid,
    *Power Electronics*, diode-rectifier chapter -- applied to the commutator). The same
    factor multiplies the torque, so the energy conversion stays exact.
    """
    s = 0.0
    for j in range(n_seg):
        s += abs(math.sin(theta_e - 2.0 * math.pi * j / n_seg))
    return s * math.pi / (2.0 * n_seg)


@njit(cache=True, error_model="numpy", inline="always")
def field_voltage(x, p, mag_i, mag_k, va):
    """Voltage across the shunt or separate field [V] (0 for the other kinds).

    Separately excited with a base speed ``w_b``: above it the field supply is set for the
    field current whose flux is ``Phi_rated w_b / |w|`` (constant back-EMF: field
    weakening [2]_), reached through the field's own time constant.
    """
    kind = int(p[P_KIND])
    if kind == MACHINE_SHUNT or kind == MACHINE_COMPOUND:
        return va
    if kind != MACHINE_SEPARATE:
        return 0.0
    vf = p[P_VF]
    wb = p[P_WBASE]
    w = abs(x[X_SPEED])
    if wb > 0.0 and w > wb:
        rated = curve_flux(vf / p[P_RF], p, mag_i, mag_k)
        want = curve_current(abs(rated) * wb / w, p, mag_i, mag_k)
        vf = p[P_RF] * want if vf >= 0.0 else -p[P_RF] * want
    return vf


@njit(cache=True, error_model="numpy", inline="always")
def bridge_point(x, p, it):
    """Bus voltage, armature voltage and bridge bus current at terminal current ``it``.

    The ideal averaged bridge (as in :mod:`dcsim.engine.kernel`): the command when the bus
    can give it, else fully on. Without a capacitor the bus is the source behind its
    resistance (fully on: the source resistance in the loop); with one the bus is the
    capacitor's voltage ``x[X_BUS]`` and the bridge draws ``v_a i / v_bus`` from it.
    """
    vc = p[P_VCMD]
    if p[P_C] > 0.0:
        vb = x[X_BUS]
        if abs(vc) <= vb:
            return vb, vc, (vc * it / vb if vb > 0.0 else 0.0)
        if vc > 0.0:
            return vb, vb, it
        return vb, -vb, -it
    vs = p[P_VS]
    rs = p[P_RS]
    full = vs - rs * it if vc > 0.0 else vs + rs * it
    disc = vs * vs - 4.0 * rs * vc * it
    if vc == 0.0 or (abs(vc) <= full and disc >= 0.0):
        vb, ib = bus_without_capacitor(vc * it, vs, rs)
        return vb, vc, ib
    if vc > 0.0:
        vb = vs - rs * it
        return vb, vb, it
    vb = vs + rs * it
    return vb, -vb, -it


@njit(cache=True, error_model="numpy", inline="always")
def source_current(x, p, ib):
    """Current from the source [A]: through its resistance into the bus capacitor, zero
    while a diode front end (``supply.regenerative = false``) blocks a bus above the source;
    without a capacitor the bridge's own bus current ``ib``."""
    if p[P_C] <= 0.0:
        return ib
    if p[P_REGEN] < 0.5 and x[X_BUS] > p[P_VS]:
        return 0.0
    return (p[P_VS] - x[X_BUS]) / p[P_RS]


@njit(cache=True, error_model="numpy", inline="always")
def operating_point(x, p, mag_i, mag_k):
    """``(K, i_terminal, v_bus, v_a, i_bus, v_f, R_arm, L_arm)`` at state ``x`` [SI]."""
    kind = int(p[P_KIND])
    ia = x[X_CURRENT]
    r_arm = p[P_R]
    l_arm = p[P_L]
    it = ia
    if kind == MACHINE_PM:
        k = p[P_K]
    elif kind == MACHINE_SERIES:
        k = curve_flux(ia, p, mag_i, mag_k)
        r_arm += p[P_RF]
        l_arm += p[P_LF]
    elif kind == MACHINE_COMPOUND:
        k = curve_flux(x[X_FIELD] + p[P_NSE] * ia, p, mag_i, mag_k)
        r_arm += p[P_RSE]
        l_arm += p[P_LSE]
        it += x[X_FIELD]
    else:
        k = curve_flux(x[X_FIELD], p, mag_i, mag_k)
        if kind == MACHINE_SHUNT:
            it += x[X_FIELD]
    n_seg = int(p[P_NSEG])
    if n_seg > 0:
        k *= ripple_factor(p[P_POLES] * x[X_POSITION], n_seg)
    vb, va, ib = bridge_point(x, p, it)
    vf = field_voltage(x, p, mag_i, mag_k, va)
    return k, it, vb, va, ib, vf, r_arm, l_arm


@njit(cache=True, error_model="numpy", inline="always")
def shaft_torque(x, p):
    """Torque the compliant shaft passes to the load and its twist beyond the play
    ``(T_shaft, twist)`` [N*m, rad]; zero inside the gap of the backlash [4]_. Without
    backlash the teeth are always in contact (also at zero twist, where the damping still
    acts)."""
    if p[P_KSH] <= 0.0:
        return 0.0, 0.0
    d = x[X_POSITION] - x[X_LOAD_POSITION]
    half = 0.5 * p[P_GAP]
    if half <= 0.0:
        tw = d
    elif d > half:
        tw = d - half
    elif d < -half:
        tw = d + half
    else:
        return 0.0, 0.0
    return p[P_KSH] * tw + p[P_CSH] * (x[X_SPEED] - x[X_LOAD_SPEED]), tw


@njit(cache=True, error_model="numpy", inline="always")
def motor_side_load(x, p, ts):
    """Torque opposing the motor-side mass apart from its friction [N*m].

    Compliant shaft: the shaft's torque plus the gear's constant loss part ``P_GEAR_CONST``
    (``T_const - T_L / N``): the gear sits on the motor side of the shaft (its inertia is in
    ``J_1``), so its loss acts there and the shaft carries the load's torque through a
    loss-free ratio, ``T_L / N``, to the load-side mass (:func:`load_side_load`). The
    gear's Coulomb-like part is in the motor's friction ``P_TC`` either way.
    """
    if p[P_KSH] > 0.0:
        return ts + p[P_GEAR_CONST]
    return p[P_TL]


@njit(cache=True, error_model="numpy", inline="always")
def load_side_load(p):
    """Torque opposing the load-side mass of a compliant shaft [N*m]: the load's torque
    referred through a loss-free gear, ``T_L / N`` (``P_TL - P_GEAR_CONST``)."""
    return p[P_TL] - p[P_GEAR_CONST]


@njit(cache=True, error_model="numpy")
def derivatives(x, p, mag_i, mag_k, stuck, fsign, csign, dx, pw):
    """Write ``dx/dt`` into ``dx`` and the power integrands into ``pw`` (friction regime
    ``stuck``, ``fsign`` and the brushes' current direction ``csign`` -- 0: current held at
    zero -- held over the sub-step)."""
    kind = int(p[P_KIND])
    k, it, vb, va, ib, vf, r_arm, l_arm = operating_point(x, p, mag_i, mag_k)
    ia = x[X_CURRENT]
    w1 = x[X_SPEED]
    compliant = p[P_KSH] > 0.0
    w2 = x[X_LOAD_SPEED] if compliant else w1
    drop = 2.0 * p[P_VBRUSH] * csign
    if p[P_VBRUSH] > 0.0 and csign == 0.0:
        dx[X_CURRENT] = 0.0  # the brushes block: |v_a - e| <= 2 V_b at zero current
    else:
        dx[X_CURRENT] = (va - r_arm * ia - k * w1 - drop) / l_arm
    isup = source_current(x, p, ib)
    dx[X_BUS] = (isup - ib) / p[P_C] if p[P_C] > 0.0 else 0.0
    if kind == MACHINE_SEPARATE or kind == MACHINE_SHUNT or kind == MACHINE_COMPOUND:
        dx[X_FIELD] = (vf - p[P_RF] * x[X_FIELD]) / p[P_LF]
    else:
        dx[X_FIELD] = 0.0
    ts, tw = shaft_torque(x, p)
    sliding, breakaway = dry_drag_levels(p[P_TC], p[P_TS], p[P_TBR], p[P_TH])
    b_visc = p[P_B] + p[P_BE]
    locked = p[P_LOCK] > 0.5
    if locked:
        dx[X_SPEED] = 0.0
        dx[X_POSITION] = 0.0
        dx[X_LOAD_SPEED] = 0.0
        dx[X_LOAD_POSITION] = 0.0
    else:
        j1 = p[P_J1] if compliant else p[P_J]
        if stuck:
            dx[X_SPEED] = 0.0
        else:
            load1 = motor_side_load(x, p, ts)
            dx[X_SPEED] = (k * ia - load1 - b_visc * w1 - sliding * fsign) / j1
        dx[X_POSITION] = w1
        if compliant:
            dx[X_LOAD_SPEED] = (ts - load_side_load(p)) / (p[P_J] - p[P_J1])
            dx[X_LOAD_POSITION] = w2
        else:
            dx[X_LOAD_SPEED] = dx[X_SPEED]
            dx[X_LOAD_POSITION] = dx[X_POSITION]
    pw[W_I2] = ia * ia
    pw[W_SUPPLY] = p[P_VS] * isup
    pw[W_SOURCE_LOSS] = p[P_RS] * isup * isup
    pw[W_COPPER] = p[P_R] * ia * ia
    pw[W_FRICTION] = p[P_B] * w1 * w1 + (p[P_TC] - p[P_GEAR_COULOMB]) * fsign * w1
    pw[W_LOAD] = (p[P_TL] - p[P_GEAR_CONST]) * w2
    pw[W_BRUSH_FRICTION] = p[P_TBR] * fsign * w1
    pw[W_IRON] = p[P_TH] * fsign * w1 + p[P_BE] * w1 * w1
    pw[W_GEAR] = p[P_GEAR_COULOMB] * fsign * w1 + p[P_GEAR_CONST] * w1  # motor side
    fc = 0.0
    if kind == MACHINE_SERIES:
        fc = p[P_RF] * ia * ia
    elif kind != MACHINE_PM:
        fc = p[P_RF] * x[X_FIELD] * x[X_FIELD]
        if kind == MACHINE_COMPOUND:
            fc += p[P_RSE] * ia * ia
    pw[W_FIELD_COPPER] = fc
    dw = w1 - w2
    contact = compliant and (tw != 0.0 or p[P_GAP] <= 0.0)
    pw[W_SHAFT_DAMPING] = p[P_CSH] * dw * dw if contact else 0.0
    pw[W_FIELD_SUPPLY] = vf * x[X_FIELD] if kind == MACHINE_SEPARATE else 0.0
    pw[W_BRUSH_DROP] = drop * ia
    if locked:  # no work is done on a held shaft
        pw[W_FRICTION] = 0.0
        pw[W_LOAD] = 0.0
        pw[W_BRUSH_FRICTION] = 0.0
        pw[W_IRON] = 0.0
        pw[W_GEAR] = 0.0
        pw[W_SHAFT_DAMPING] = 0.0


@njit(cache=True, error_model="numpy", inline="always")
def friction_regime(x, p, mag_i, mag_k):
    """``(stuck, fsign)`` of the motor-side mass at ``x``
    (:func:`dcsim.plant.mechanics.friction_state`)."""
    k, it, vb, va, ib, vf, r_arm, l_arm = operating_point(x, p, mag_i, mag_k)
    ts, tw = shaft_torque(x, p)
    sliding, breakaway = dry_drag_levels(p[P_TC], p[P_TS], p[P_TBR], p[P_TH])
    drive = k * x[X_CURRENT] - motor_side_load(x, p, ts)
    return friction_state(x[X_SPEED], drive, sliding, breakaway, p[P_LOCK] > 0.5)


@njit(cache=True, error_model="numpy", inline="always")
def brush_regime(x, p, mag_i, mag_k):
    """Direction of the armature current through the brushes for the next sub-step: its
    sign, or, at zero current, the sign of the voltage that would drive it if that exceeds
    the pair's drop ``2 V_b``, else 0 (held at zero: the brush pair behaves as two diodes,
    as in the ideal kernel's brush regime). 1.0 when the machine has no brush drop."""
    if p[P_VBRUSH] <= 0.0:
        return 1.0
    ia = x[X_CURRENT]
    if ia > 0.0:
        return 1.0
    if ia < 0.0:
        return -1.0
    k, it, vb, va, ib, vf, r_arm, l_arm = operating_point(x, p, mag_i, mag_k)
    drive = va - k * x[X_SPEED]
    if drive > 2.0 * p[P_VBRUSH]:
        return 1.0
    if drive < -2.0 * p[P_VBRUSH]:
        return -1.0
    return 0.0


@njit(cache=True, error_model="numpy")
def substep_count(x, p, dt, h_rk):
    """Sub-steps for an interval ``dt``: ``dt / h_rk`` rounded up, and at least
    :data:`PULSE_SUBSTEPS` per commutator pulse at the present speed."""
    n = max(1, int(math.ceil(dt / h_rk - 1e-9)))
    n_seg = int(p[P_NSEG])
    if n_seg > 0:
        pulses = n_seg if n_seg % 2 == 0 else 2 * n_seg
        per_s = abs(x[X_SPEED]) * p[P_POLES] * pulses / (2.0 * math.pi)
        n = max(n, int(math.ceil(per_s * dt * PULSE_SUBSTEPS)))
    return n


@njit(cache=True, error_model="numpy", inline="always")
def track_peaks(x, p, mag_i, mag_k, t, acc):
    """Update the peak trackers (armature current and its time, bus voltage extremes, motor
    speed, field current) with the state ``x`` at time ``t``; returns the bridge's bus
    current there. Called at every sub-step end and after every event and controller
    sample, since the bus voltage jumps with a parameter or a new command."""
    k, it, vb, va, ib, vf, r_arm, l_arm = operating_point(x, p, mag_i, mag_k)
    ia = abs(x[X_CURRENT])
    if ia > acc[M_PEAK_I]:
        acc[M_PEAK_I] = ia
        acc[M_PEAK_I_TIME] = t
    acc[M_BUS_MAX] = max(acc[M_BUS_MAX], vb)
    acc[M_BUS_MIN] = min(acc[M_BUS_MIN], vb)
    acc[M_PEAK_SPEED] = max(acc[M_PEAK_SPEED], abs(x[X_SPEED]))
    acc[M_PEAK_FIELD] = max(acc[M_PEAK_FIELD], abs(x[X_FIELD]))
    return ib


@njit(cache=True, error_model="numpy")
def advance(x, p, mag_i, mag_k, dt, h_rk, t0, acc, s1, s2, s3, s4, q1, q2, q3, q4, xt):
    """Advance ``x`` by ``dt`` [s] in Runge-Kutta sub-steps; returns ``(status, time)``.

    ``s1..s4`` (state derivatives), ``q1..q4`` (power integrands) and ``xt`` are scratch.
    """
    n = substep_count(x, p, dt, h_rk)
    hs = dt / n
    t = t0
    compliant = p[P_KSH] > 0.0
    for _ in range(n):
        stuck, fsign = friction_regime(x, p, mag_i, mag_k)
        csign = brush_regime(x, p, mag_i, mag_k)
        derivatives(x, p, mag_i, mag_k, stuck, fsign, csign, s1, q1)
        for j in range(N_MSTATE):
            xt[j] = x[j] + 0.5 * hs * s1[j]
        derivatives(xt, p, mag_i, mag_k, stuck, fsign, csign, s2, q2)
        for j in range(N_MSTATE):
            xt[j] = x[j] + 0.5 * hs * s2[j]
        derivatives(xt, p, mag_i, mag_k, stuck, fsign, csign, s3, q3)
        for j in range(N_MSTATE):
            xt[j] = x[j] + hs * s3[j]
        derivatives(xt, p, mag_i, mag_k, stuck, fsign, csign, s4, q4)
        finite = True
        for j in range(N_MSTATE):
            x[j] += hs / 6.0 * (s1[j] + 2.0 * s2[j] + 2.0 * s3[j] + s4[j])
            finite = finite and math.isfinite(x[j])
        for j in range(N_POWER):
            acc[j] += hs / 6.0 * (q1[j] + 2.0 * q2[j] + 2.0 * q3[j] + q4[j])
        if (not stuck) and fsign != 0.0 and x[X_SPEED] * fsign < 0.0:
            x[X_SPEED] = 0.0  # the sliding shaft comes to rest in this sub-step
        if p[P_VBRUSH] > 0.0 and x[X_CURRENT] * csign < 0.0:
            x[X_CURRENT] = 0.0  # the current through the brushes dies in this sub-step
        if not compliant:
            x[X_LOAD_SPEED] = x[X_SPEED]
            x[X_LOAD_POSITION] = x[X_POSITION]
        t += hs
        acc[M_SUBSTEPS] += 1.0
        if not finite:
            return STATUS_NONFINITE, t
        ib = track_peaks(x, p, mag_i, mag_k, t, acc)
        ia = abs(x[X_CURRENT])
        if p[P_C] <= 0.0 and p[P_REGEN] < 0.5 and ib < -1e-9 * (1.0 + ia):
            return STATUS_REGEN_NO_PATH, t
        if p[P_WMAX] > 0.0 and abs(x[X_SPEED]) > p[P_WMAX]:
            return STATUS_OVERSPEED, t
    return STATUS_OK, t


@njit(cache=True, error_model="numpy")
def record_row(x, p, mag_i, mag_k, t, rec, row):
    """Write one trace row at time ``t``."""
    k, it, vb, va, ib, vf, r_arm, l_arm = operating_point(x, p, mag_i, mag_k)
    ts, tw = shaft_torque(x, p)
    ia = x[X_CURRENT]
    kind = int(p[P_KIND])
    rec[R_TIME, row] = t
    rec[R_CURRENT, row] = ia
    rec[R_SPEED, row] = x[X_SPEED]
    rec[R_POSITION, row] = x[X_POSITION]
    rec[R_ARMATURE_V, row] = va
    rec[R_BUS_V, row] = vb
    rec[R_MOTOR_TORQUE, row] = k * ia
    rec[R_LOAD_TORQUE, row] = p[P_TL] - p[P_GEAR_CONST]
    rec[R_SUPPLY_CURRENT, row] = source_current(x, p, ib)
    stuck, fsign = friction_regime(x, p, mag_i, mag_k)
    if p[P_LOCK] > 0.5:
        fr = 0.0
    elif stuck:
        fr = k * ia - motor_side_load(x, p, ts)
    else:
        sliding, breakaway = dry_drag_levels(p[P_TC], p[P_TS], p[P_TBR], p[P_TH])
        fr = (p[P_B] + p[P_BE]) * x[X_SPEED] + (sliding - p[P_GEAR_COULOMB]) * fsign
    rec[R_FRICTION_TORQUE, row] = fr
    rec[R_BRIDGE_CURRENT, row] = ib
    rec[R_FIELD_CURRENT, row] = ia if kind == MACHINE_SERIES else x[X_FIELD]
    rec[R_FLUX_CONSTANT, row] = k
    rec[R_LOAD_SPEED, row] = x[X_LOAD_SPEED]
    rec[R_LOAD_POSITION, row] = x[X_LOAD_POSITION]
    rec[R_SHAFT_TORQUE, row] = ts if p[P_KSH] > 0.0 else k * ia - fr
    rec[R_SHAFT_TWIST, row] = tw


@njit(cache=True, error_model="numpy")
def apply_event(x, p, index, value, acc):
    """Set parameter ``index`` to ``value`` with the energy a sudden change implies (as in
    :func:`dcsim.engine.kernel.apply_event`; a lock stops both masses of a compliant
    shaft, whose twist stays stored)."""
    compliant = p[P_KSH] > 0.0
    w = x[X_SPEED]
    if index == P_LOCK and value > 0.5:
        if compliant:
            j2 = p[P_J] - p[P_J1]
            w2 = x[X_LOAD_SPEED]
            acc[M_LOCK] += 0.5 * p[P_J1] * w * w + 0.5 * j2 * w2 * w2
        else:
            acc[M_LOCK] += 0.5 * p[P_J] * w * w
        x[X_SPEED] = 0.0
        x[X_LOAD_SPEED] = 0.0
    elif index == P_J and w != 0.0 and not compliant:
        x[X_SPEED], lost = inertia_change(w, p[P_J], value)
        x[X_LOAD_SPEED] = x[X_SPEED]
        acc[M_COUPLING] += lost
    p[index] = value


@njit(cache=True, error_model="numpy")
def start_run(p, x, mag_i, mag_k, ev_t, ev_i, ev_v, counters, rec, acc, n_ctl, cp, cs, rng,
              segs, crec):  # fmt: skip
    """Apply the events at t = 0, run the controller's first sample and write row 0
    (the machine-kernel twin of :func:`dcsim.engine.kernel.start_run`)."""
    n_ev = ev_t.shape[0]
    k_ev = 0
    while k_ev < n_ev and ev_t[k_ev] <= 0.0:
        apply_event(x, p, ev_i[k_ev], ev_v[k_ev], acc)
        k_ev += 1
    if n_ctl > 0:
        k, it, vb, va, ib, vf, r_arm, l_arm = operating_point(x, p, mag_i, mag_k)
        p[P_VCMD] = control_sample(
            0, 0.0, x[X_CURRENT], x[X_SPEED], x[X_POSITION], vb, cp, cs, rng, segs
        )
        copy_record(cs, crec, 0)
    k, it, vb, va, ib, vf, r_arm, l_arm = operating_point(x, p, mag_i, mag_k)
    acc[M_BUS_MAX] = vb
    acc[M_BUS_MIN] = vb
    acc[M_PEAK_I] = abs(x[X_CURRENT])
    track_peaks(x, p, mag_i, mag_k, 0.0, acc)
    record_row(x, p, mag_i, mag_k, 0.0, rec, 0)
    counters[0] = k_ev
    counters[1] = 1


@njit(cache=True, error_model="numpy")
def run_steps(p, x, mag_i, mag_k, h, h_rk, k_first, k_last, n_steps, n_sub, duration, ev_t,
              ev_i, ev_v, counters, rec, acc, n_ctl, cp, cs, rng, segs, crec):  # fmt: skip
    """Advance the run over steps ``k_first .. k_last`` (1-based, inclusive).

    As :func:`dcsim.engine.kernel.run_steps`, with the magnetisation table ``mag_i`` [A],
    ``mag_k`` [V*s/rad] (empty: linear) and the largest Runge-Kutta sub-step ``h_rk`` [s].
    Returns ``(status, time reached)``.
    """
    s1 = np.zeros(N_MSTATE)
    s2 = np.zeros(N_MSTATE)
    s3 = np.zeros(N_MSTATE)
    s4 = np.zeros(N_MSTATE)
    xt = np.zeros(N_MSTATE)
    q1 = np.zeros(N_POWER)
    q2 = np.zeros(N_POWER)
    q3 = np.zeros(N_POWER)
    q4 = np.zeros(N_POWER)
    n_ev = ev_t.shape[0]
    k_ev = counters[0]
    row = counters[1]
    t = min((k_first - 1) * h, duration)
    status = STATUS_OK
    for k in range(k_first, k_last + 1):
        t_end = min(k * h, duration)
        while True:
            at_event = k_ev < n_ev and ev_t[k_ev] <= t_end
            target = ev_t[k_ev] if at_event else t_end
            if target > t:
                status, t = advance(
                    x, p, mag_i, mag_k, target - t, h_rk, t, acc, s1, s2, s3, s4, q1, q2,
                    q3, q4, xt,
                )  # fmt: skip
                if status != STATUS_OK:
                    break
                t = target
            if not at_event:
                break
            while k_ev < n_ev and ev_t[k_ev] == target:
                apply_event(x, p, ev_i[k_ev], ev_v[k_ev], acc)
                k_ev += 1
            if not (n_ctl > 0 and k % n_ctl == 0 and target == t_end):
                # (a sample at the same instant replaces the command at once: the
                # state between the two lasts no time and is tracked after the sample)
                track_peaks(x, p, mag_i, mag_k, t, acc)
        if status != STATUS_OK:
            break
        t = t_end
        if n_ctl > 0 and k % n_ctl == 0:
            kk, it, vb, va, ib, vf, r_arm, l_arm = operating_point(x, p, mag_i, mag_k)
            p[P_VCMD] = control_sample(
                k // n_ctl, t, x[X_CURRENT], x[X_SPEED], x[X_POSITION], vb, cp, cs, rng, segs
            )
            track_peaks(x, p, mag_i, mag_k, t, acc)
        if k % n_sub == 0 or k == n_steps:
            record_row(x, p, mag_i, mag_k, t, rec, row)
            if n_ctl > 0:
                copy_record(cs, crec, row)
            row += 1
    if status != STATUS_OK and row < rec.shape[1]:
        record_row(x, p, mag_i, mag_k, t, rec, row)
        if n_ctl > 0:
            copy_record(cs, crec, row)
        row += 1
    counters[0] = k_ev
    counters[1] = row
    return status, t


__all__ = ["start_run", "run_steps", "ripple_factor", "curve_flux"]
