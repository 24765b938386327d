"""The compiled kernel of the averaged and switching bridge models, with the DC-bus circuit.

Circuit
-------
An H-bridge of two legs (A to the armature's positive terminal, B to its negative one) on a DC
bus node; on the node: the bus capacitor behind its ESR, a brake chopper (resistor switched by
a hysteresis comparator on the bus voltage), and the supply branch: a source (a fixed or
ramped voltage, or a battery whose open-circuit voltage follows its state of charge) through
its resistance (plus a pre-charge resistor until it is bypassed), optional inductance, an
optional series diode (diode front end) and an optional fuse element.

With every switch, diode and comparator in a fixed state, the circuit is linear:
``x' = A x + b`` on the state of :mod:`dcsim.engine.bridge_layout`. Each leg is high, low or
off (both switches off: its freewheeling diodes conduct for the current's direction). With the
current ``i`` flowing from leg A through the armature into leg B (``sigma = sgn i``), the
armature sees ``v_a = g v_n - r_b i - v_drop`` and the bridge draws ``g i`` from the node,
where ``g = s_A - s_B`` (``s`` = 1 when a leg connects to the positive rail, through its
switch or, when off, through the diode the current direction selects), ``r_b`` is
on-resistance times the switches in the path and ``v_drop = n_d V_d sigma`` for ``n_d``
conducting diodes. When the current reaches zero with a diode in the path and neither
direction is driven (the back-EMF lies inside the window the diodes block), it stays at zero:
discontinuous conduction, with the armature open (``v_a`` = back-EMF).

The averaged model replaces the two legs by their cycle average: ``g = m - 2 t_d f_s sigma``
(``m`` the modulation, the dead time ``t_d`` costing ``2 t_d f_s v_n`` against the current,
the same for bipolar and unipolar PWM), ``r_b = 2 R_on (1 - 2 t_d f_s)`` and
``v_drop = 4 V_d t_d f_s sigma`` (two diodes conduct during the dead times).

A gearbox arrives as in the core kernel (:mod:`dcsim.engine.kernel`): its constant part in
``Q_TL``, its Coulomb-like part in ``Q_TC``, split off again (``Q_GEAR_CONST``,
``Q_GEAR_COULOMB``) only to book the gear's loss in ``A_GEAR``; exact for a load torque of
constant sign, with the power-flow direction from ``sgn(w) sgn(T_L)``.

Switching instants come from the carrier and the duty, at their exact times inside each PWM
period; the kernel integrates period by period over the segments between them (and the fixed
grid of the nominal step). Each segment is advanced exactly by the matrix exponential of the
augmented matrix ``[[A, b], [0, 0]]`` (Moler & Van Loan), cached by regime and length (the
segments of a period repeat while the duty does). State events -- the current reaching zero,
the source diode blocking, the chopper comparator, the trip levels, stick/slip of the shaft,
the peak current limit, the battery table's breakpoints, the fuse melting, the battery
disconnect's limits (charge and discharge current, the terminal voltage ``OCV - R_bat i``) and
its reclose level -- are located inside a segment by the Illinois method and the segment is
split there. An open disconnect opens the supply line as a melted fuse does.

The switching loss of each leg transition (a per-transition energy, or the switch's rise and
fall times: see :func:`switching_energy`) is taken from the bus capacitor at the transition
and booked apart from the conduction loss; the current's range over each PWM period (at the
segment ends, which hold every switching instant) gives the ripple of the last complete one.

Drive/decay PWM (``Q_DECAY``) drives one diagonal for the duty and lets the current decay in
the off-time: slow (both low-side or both high-side switches on), fast (every switch off, or
the opposite diagonal) or mixed. The current comparator (a trip level on the sensed current,
after a blanking time) opens the switches a comparator delay later, not before the minimum
on-time, and the legs then decay for the rest of the PWM period (cycle-by-cycle) or for a
fixed off-time (a decay window that may reach into later periods). These timed actions and
the over-current deglitch split a segment like an event (:func:`next_timer`,
:func:`fire_timers`); each decay is logged in ``chops``.

References
----------
.. [1] N. Mohan, T. M. Undeland and W. P. Robbins, *Power Electronics: Converters,
   Applications and Design*, 3rd ed., Wiley (2003), full-bridge dc-dc converter chapter
   (bipolar and unipolar PWM, ripple, blanking time) -- section from memory.
.. [2] C. Moler and C. Van Loan, SIAM Review 45(1) (2003) 3-49 (matrix exponential; the
   augmented matrix for the constant forcing term).
.. [3] M. Dowell and P. Jarratt, BIT 11 (1971) 168-174 (the Illinois method).
.. [4] L. F. Shampine and S. Thompson, Comput. Math. Appl. 39 (2000) 43-54 (event location).
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from dcsim.controllers.cascade import control_sample, copy_record
from dcsim.controllers.layout import GREC, K_V_MEAS
from dcsim.engine.bridge_layout import (
    A_BMS_OPEN_TIME,
    A_BRAKE,
    A_BRAKE_PEAK_W,
    A_BRIDGE,
    A_BRUSH_DROP,
    A_BRUSH_FRICTION,
    A_BUS_MAX,
    A_BUS_MIN,
    A_BUS_MIN_TIME,
    A_BUS_RIPPLE,
    A_BYPASS_TIME,
    A_CACHE_MISSES,
    A_CAP_RMS_PERIOD,
    A_CHOP_AT,
    A_COPPER,
    A_COUPLING,
    A_ESR,
    A_FORCE_END,
    A_FORCE_FAST,
    A_FORCE_START,
    A_FRICTION,
    A_FUSE_ARC,
    A_FUSE_HEAT,
    A_FUSE_MELT_TIME,
    A_FUSE_PEAK,
    A_GEAR,
    A_I2T,
    A_ICAP2,
    A_IRON,
    A_LIMIT_EVENTS,
    A_LOAD,
    A_LOCK,
    A_MARK_ICAP2,
    A_OCP_SINCE,
    A_PEAK_I,
    A_PEAK_I_TIME,
    A_PERIOD_BUS_MAX,
    A_PERIOD_BUS_MIN,
    A_PERIODS,
    A_PRECHARGE,
    A_PULSE_T0,
    A_RIPPLE_LAST,
    A_SENSE,
    A_SOURCE_LOSS,
    A_SPLITS,
    A_SUPPLY,
    A_SWITCH_LOSS,
    A_SWITCHINGS,
    A_TRIP_TIME,
    EV_BYPASS,
    EV_SOURCE_RAMP,
    EV_SOURCE_VOLTAGE,
    LEG_AVG,
    LEG_HIGH,
    LEG_LOW,
    LEG_OFF,
    M_BMS,
    M_BRAKE,
    M_CHOP,
    M_FSIGN,
    M_LEG_A,
    M_LEG_B,
    M_MELTED,
    M_OCP,
    M_OPEN,
    M_PRE,
    M_SEG,
    M_SIGMA,
    M_STUCK,
    M_TRIP,
    MAX_CHOPS,
    MAX_TRIPS,
    N_A,
    Q_AUTO_RESTART,
    Q_B,
    Q_BAT,
    Q_BAT_A,
    Q_BAT_B,
    Q_BAT_HI,
    Q_BAT_LO,
    Q_BAT_Q,
    Q_BAT_R,
    Q_BE,
    Q_BLANK,
    Q_BMS_ICHG,
    Q_BMS_IDIS,
    Q_BMS_TRECLOSE,
    Q_BMS_VFULL,
    Q_BMS_VRECLOSE,
    Q_BRAKE_OFF,
    Q_BRAKE_ON,
    Q_BRAKE_R,
    Q_C,
    Q_CHOP_FIXED,
    Q_COUNTS,
    Q_DECAY,
    Q_EDGE,
    Q_ESR,
    Q_ESW,
    Q_ESW_I,
    Q_ESW_V,
    Q_FAST_FRAC,
    Q_FAST_SYNC,
    Q_FS,
    Q_FUSE,
    Q_FUSE_IMIN,
    Q_FUSE_TAU,
    Q_GEAR_CONST,
    Q_GEAR_COULOMB,
    Q_IPK,
    Q_J,
    Q_K,
    Q_L,
    Q_LOCK,
    Q_LS,
    Q_MINPULSE,
    Q_MOD,
    Q_OCP,
    Q_OCP_DG,
    Q_OCP_RETRY,
    Q_OCP_RT,
    Q_OV,
    Q_PRE_R,
    Q_PRE_V,
    Q_R,
    Q_REGEN,
    Q_RESTART_DELAY,
    Q_RESTART_MARGIN,
    Q_RON,
    Q_RS,
    Q_RSENSE,
    Q_SENSE_BUS,
    Q_SLOPE,
    Q_SLOW_HIGH,
    Q_SWITCHING,
    Q_TBR,
    Q_TC,
    Q_TCD,
    Q_TD,
    Q_TF,
    Q_TH,
    Q_TL,
    Q_TOFF,
    Q_TONMIN,
    Q_TR,
    Q_TS,
    Q_UNIPOLAR,
    Q_UV,
    Q_VBRUSH,
    Q_VCMD,
    Q_VD,
    Q_VNOM,
    R_ARMATURE_V,
    R_BATTERY_CONNECTED,
    R_BRAKE_CURRENT,
    R_BRIDGE_CURRENT,
    R_BRIDGE_STATE,
    R_BUS_V,
    R_CAP_CURRENT,
    R_CURRENT,
    R_DUTY,
    R_ENABLED,
    R_FRICTION_TORQUE,
    R_FUSE_HEAT,
    R_LIMIT,
    R_LOAD_TORQUE,
    R_MOTOR_TORQUE,
    R_POSITION,
    R_SENSED,
    R_SOC,
    R_SOURCE_V,
    R_SPEED,
    R_SUPPLY_CURRENT,
    R_TIME,
    S_I,
    S_IS,
    S_ONE,
    S_SOC,
    S_TH,
    S_VC,
    S_VS,
    S_W,
    STATUS_BATTERY_EMPTY,
    STATUS_NONFINITE,
    STATUS_OK,
    TRIP_BMS_CHARGE,
    TRIP_BMS_DISCHARGE,
    TRIP_BMS_RECLOSE,
    TRIP_BMS_VOLTAGE,
    TRIP_BUS_COLLAPSE,
    TRIP_BYPASS,
    TRIP_FUSE,
    TRIP_OVER_CURRENT,
    TRIP_OVER_VOLTAGE,
    TRIP_RESTART,
    TRIP_UNDER_VOLTAGE,
)
from dcsim.engine.expm import expm, matmul_small
from dcsim.plant.mechanics import (
    dry_drag_levels,
    fill_shaft_rows,
    friction_state,
    inertia_change,
)

# linear forms over the augmented state (rows of `forms`)
F_VN = 0  # bus node voltage
F_IS = 1  # supply-line current
F_VSRC = 2  # source open-circuit voltage
F_ICAP = 3  # capacitor current
F_DPLUS = 4  # L di/dt at i = 0 if the bridge conducted for positive current
F_DMINUS = 5  # ... for negative current
F_G0 = 6  # first guard row: every guard of the regime is a linear form, >= 0 while it holds
MAX_G = 20
N_F = F_G0 + MAX_G + 2  # the last two: the peak current limit (while active)
# scalars of the present regime (`fsc`)
C_G = 0  # bridge gain g
C_RB = 1  # bridge series resistance [ohm]
C_VDROP = 2  # diode drop term [V], sign included
C_GBR = 3  # brake conductance [S]
C_SENS = 4  # 1 when the connection depends on the current direction
C_RSRC = 5  # supply-line resistance incl. pre-charge [ohm]
C_NG = 6  # number of guard rows (without the limit rows)
C_RSN = 7  # the part of C_RB in the current-sense resistor [ohm]
C_SGAIN = 8  # sensed current = C_SGAIN * i (1 in-line; the bridge gain g on the bus side)
C_VBRUSH = 9  # brush contact drop term 2 V_b sigma [V] (in the motor, not the bridge)
N_C = 10
N_WORK = 24  # values per point kept by `point_values`
CACHE_SLOTS = 4096
FORM_SLOTS = 256
MAX_BP = 64  # schedule breakpoints per period beyond the grid
STATUS_LIMIT = 100  # internal: the current reached the comparator's trip level
_ACC_OF_WORK = np.array(
    [A_I2T, A_SUPPLY, A_SOURCE_LOSS, A_COPPER, A_FRICTION, A_LOAD, A_BRIDGE, A_BRAKE, A_ESR,
     A_PRECHARGE],
    dtype=np.int64,
)  # fmt: skip


@njit(cache=True, error_model="numpy", inline="always")
def _dot(f, y):
    s = 0.0
    for j in range(N_A):
        s += f[j] * y[j]
    return s


@njit(cache=True, error_model="numpy")
def connection(leg_a, leg_b, sigma, q):
    """Bridge gain, series resistance, diode-drop term and direction sensitivity.

    ``sigma`` is the current direction (+1 or -1) the diodes of an off leg conduct for.
    Returns ``(g, r_b [ohm], v_drop [V], sensitive, r_sense [ohm])``; ``r_b`` includes the
    current-sense resistor ``r_sense`` where the current passes it: always when it is in line
    with the armature; on the bus side (low- or high-side) when exactly one leg connects to
    that rail, i.e. ``|g|`` times (a current recirculating through both low-side or both
    high-side switches does not pass it). The averaged model weights it by the fraction of
    the period the bus carries the current (``|m|`` unipolar, 1 bipolar).
    """
    if leg_a == LEG_AVG:
        delta = 2.0 * q[Q_TD] * q[Q_FS]  # fraction of the period each leg spends in dead time
        g = q[Q_MOD] - delta * sigma
        rsn = q[Q_RSENSE]
        if q[Q_SENSE_BUS] > 0.5 and q[Q_UNIPOLAR] > 0.5:
            rsn *= abs(q[Q_MOD])
        rb = 2.0 * q[Q_RON] * (1.0 - delta) + rsn
        vdrop = 2.0 * q[Q_VD] * delta * sigma
        return g, rb, vdrop, delta > 0.0, rsn
    n_sw = 0
    n_d = 0
    if leg_a == LEG_HIGH:
        sa = 1.0
        n_sw += 1
    elif leg_a == LEG_LOW:
        sa = 0.0
        n_sw += 1
    else:  # current out of A: lower diode; into A: upper diode
        sa = 0.0 if sigma > 0.0 else 1.0
        n_d += 1
    if leg_b == LEG_HIGH:
        sb = 1.0
        n_sw += 1
    elif leg_b == LEG_LOW:
        sb = 0.0
        n_sw += 1
    else:  # current into B: upper diode; out of B: lower diode
        sb = 1.0 if sigma > 0.0 else 0.0
        n_d += 1
    g = sa - sb
    rsn = q[Q_RSENSE] * (abs(g) if q[Q_SENSE_BUS] > 0.5 else 1.0)
    return g, n_sw * q[Q_RON] + rsn, n_d * q[Q_VD] * sigma, n_d > 0, rsn


@njit(cache=True, error_model="numpy", inline="always")
def bridge_enabled(md):
    return md[M_PRE] == 0 and md[M_TRIP] == 0


@njit(cache=True, error_model="numpy")
def compute_forms(md, q, forms, fsc):
    """Linear forms (node voltage, supply current, ...) and scalars of the present regime."""
    sigma = 1.0 if md[M_SIGMA] >= 0 else -1.0
    g, rb, vdrop, sens, rsn = connection(md[M_LEG_A], md[M_LEG_B], sigma, q)
    open_line = md[M_OPEN] == 1 or md[M_MELTED] == 1 or md[M_BMS] == 1
    rsrc = q[Q_RS] + (q[Q_PRE_R] if md[M_PRE] == 1 else 0.0)
    ls = q[Q_LS]
    esr = q[Q_ESR]
    gbr = 1.0 / q[Q_BRAKE_R] if md[M_BRAKE] == 1 else 0.0
    forms[:, :] = 0.0
    if q[Q_BAT] > 0.5:
        forms[F_VSRC, S_SOC] = q[Q_BAT_B]
        forms[F_VSRC, S_ONE] = q[Q_BAT_A]
    else:
        forms[F_VSRC, S_VS] = 1.0
    gs = 0.0 if (open_line or ls > 0.0) else 1.0 / rsrc
    if esr == 0.0:
        forms[F_VN, S_VC] = 1.0
    else:
        ge = 1.0 / esr
        if ls == 0.0:
            den = gs + ge + gbr
            for j in range(N_A):
                forms[F_VN, j] = gs * forms[F_VSRC, j] / den
        else:
            den = ge + gbr
            if not open_line:
                forms[F_VN, S_IS] = 1.0 / den
        forms[F_VN, S_VC] += ge / den
        forms[F_VN, S_I] -= g / den
    if ls > 0.0:
        if not open_line:
            forms[F_IS, S_IS] = 1.0
    else:
        for j in range(N_A):
            forms[F_IS, j] = gs * (forms[F_VSRC, j] - forms[F_VN, j])
    if esr > 0.0:
        for j in range(N_A):
            forms[F_ICAP, j] = forms[F_VN, j] / esr
        forms[F_ICAP, S_VC] -= 1.0 / esr
    else:
        for j in range(N_A):
            forms[F_ICAP, j] = forms[F_IS, j] - gbr * forms[F_VN, j]
        forms[F_ICAP, S_I] -= g
    gp, rbp, vdp, sp, _ = connection(md[M_LEG_A], md[M_LEG_B], 1.0, q)
    gn, rbn, vdn, sn, _ = connection(md[M_LEG_A], md[M_LEG_B], -1.0, q)
    for j in range(N_A):
        forms[F_DPLUS, j] = gp * forms[F_VN, j]
        forms[F_DMINUS, j] = gn * forms[F_VN, j]
    forms[F_DPLUS, S_W] -= q[Q_K]
    forms[F_DMINUS, S_W] -= q[Q_K]
    # the brushes: a drop of V_b each against the current, in series with the bridge's drops
    vbr = 2.0 * q[Q_VBRUSH]
    forms[F_DPLUS, S_ONE] -= vdp + vbr
    forms[F_DMINUS, S_ONE] -= vdn - vbr
    fsc[C_G] = g
    fsc[C_RB] = rb
    fsc[C_VDROP] = vdrop
    fsc[C_VBRUSH] = vbr * sigma
    fsc[C_GBR] = gbr
    fsc[C_SENS] = 1.0 if (sens or vbr > 0.0) else 0.0
    fsc[C_RSRC] = rsrc
    fsc[C_RSN] = rsn
    fsc[C_SGAIN] = g if q[Q_SENSE_BUS] > 0.5 else 1.0
    _guard_rows(md, q, forms, fsc)


@njit(cache=True, error_model="numpy")
def _guard_rows(md, q, forms, fsc):
    """The guards of the regime as linear forms (rows ``F_G0 ...``), each >= 0 while it holds:
    stick/slip, current direction or the zero-current window, the source diode, the brake
    comparator, the trip levels, bus above zero, the pre-charge bypass level, the battery
    table's breakpoints, the battery disconnect (closed: its charge current, discharge current
    and full-charge voltage; open: the bus above its reclose level); then the two rows of the
    peak current limit, ``I_pk -+ i``."""
    n = F_G0
    for r in range(F_G0, N_F):
        for j in range(N_A):
            forms[r, j] = 0.0
    sliding, ts = dry_drag_levels(q[Q_TC], q[Q_TS], q[Q_TBR], q[Q_TH])  # breakaway level
    if q[Q_LOCK] < 0.5 and ts > 0.0:
        if md[M_STUCK] == 1:  # T_s - |K i - T_L| >= 0 as two rows
            forms[n, S_I] = -q[Q_K]
            forms[n, S_ONE] = ts - q[Q_TL]
            forms[n + 1, S_I] = q[Q_K]
            forms[n + 1, S_ONE] = ts + q[Q_TL]
            n += 2
        elif md[M_FSIGN] != 0:
            forms[n, S_W] = md[M_FSIGN]
            n += 1
    if fsc[C_SENS] > 0.5:
        if md[M_SIGMA] != 0:
            forms[n, S_I] = md[M_SIGMA]
            n += 1
        else:
            for j in range(N_A):
                forms[n, j] = -forms[F_DPLUS, j]
                forms[n + 1, j] = forms[F_DMINUS, j]
            n += 2
    if q[Q_REGEN] < 0.5 and md[M_MELTED] == 0 and md[M_BMS] == 0:
        if md[M_OPEN] == 1:
            for j in range(N_A):
                forms[n, j] = forms[F_VN, j] - forms[F_VSRC, j]
        elif q[Q_LS] > 0.0:
            forms[n, S_IS] = 1.0
        else:
            for j in range(N_A):
                forms[n, j] = forms[F_IS, j]
        n += 1
    if q[Q_BRAKE_R] > 0.0:
        sign = 1.0 if md[M_BRAKE] == 1 else -1.0
        level = q[Q_BRAKE_OFF] if md[M_BRAKE] == 1 else q[Q_BRAKE_ON]
        for j in range(N_A):
            forms[n, j] = sign * forms[F_VN, j]
        forms[n, S_ONE] -= sign * level
        n += 1
    if bridge_enabled(md):
        if q[Q_OCP] > 0.0:
            sg = fsc[C_SGAIN]
            if md[M_OCP] == 0:  # I_ocp -+ sensed >= 0
                forms[n, S_I] = -sg
                forms[n, S_ONE] = q[Q_OCP]
                forms[n + 1, S_I] = sg
                forms[n + 1, S_ONE] = q[Q_OCP]
                n += 2
            elif md[M_OCP] != 2:  # above the level: sign * sensed - I_ocp >= 0
                forms[n, S_I] = md[M_OCP] * sg
                forms[n, S_ONE] = -q[Q_OCP]
                n += 1
        if q[Q_OV] > 0.0:
            for j in range(N_A):
                forms[n, j] = -forms[F_VN, j]
            forms[n, S_ONE] += q[Q_OV]
            n += 1
        if q[Q_UV] > 0.0:
            for j in range(N_A):
                forms[n, j] = forms[F_VN, j]
            forms[n, S_ONE] -= q[Q_UV]
            n += 1
        for j in range(N_A):
            forms[n, j] = forms[F_VN, j]
        n += 1
    if md[M_PRE] == 1 and q[Q_PRE_V] < math.inf:
        for j in range(N_A):
            forms[n, j] = -forms[F_VN, j]
        forms[n, S_ONE] += q[Q_PRE_V]
        n += 1
    if q[Q_BAT] > 0.5:
        forms[n, S_SOC] = 1.0
        forms[n, S_ONE] = -q[Q_BAT_LO]
        n += 1
        if q[Q_BAT_HI] < math.inf:
            forms[n, S_SOC] = -1.0
            forms[n, S_ONE] = q[Q_BAT_HI]
            n += 1
        if md[M_MELTED] == 0:
            n = _disconnect_rows(md, q, forms, n)
    fsc[C_NG] = n - F_G0
    lim = F_G0 + MAX_G
    forms[lim, S_I] = -1.0
    forms[lim, S_ONE] = q[Q_IPK]
    forms[lim + 1, S_I] = 1.0
    forms[lim + 1, S_ONE] = q[Q_IPK]


@njit(cache=True, error_model="numpy")
def _disconnect_rows(md, q, forms, n):
    """Guard rows of the battery disconnect from row ``n``; returns the next free row.

    Closed: ``I_chg + i_s >= 0``, ``I_dis - i_s >= 0`` and ``V_full - (OCV - R_bat i_s) >= 0``
    (the terminal voltage of the Thevenin battery, ``i_s`` the supply current, positive when
    the battery discharges). Open: ``v_bus - V_reclose >= 0``.
    """
    if md[M_BMS] == 0:
        if q[Q_BMS_ICHG] < math.inf:
            for j in range(N_A):
                forms[n, j] = forms[F_IS, j]
            forms[n, S_ONE] += q[Q_BMS_ICHG]
            n += 1
        if q[Q_BMS_IDIS] < math.inf:
            for j in range(N_A):
                forms[n, j] = -forms[F_IS, j]
            forms[n, S_ONE] += q[Q_BMS_IDIS]
            n += 1
        if q[Q_BMS_VFULL] < math.inf:
            for j in range(N_A):
                forms[n, j] = q[Q_BAT_R] * forms[F_IS, j] - forms[F_VSRC, j]
            forms[n, S_ONE] += q[Q_BMS_VFULL]
            n += 1
    elif q[Q_BMS_VRECLOSE] > -math.inf:
        for j in range(N_A):
            forms[n, j] = forms[F_VN, j]
        forms[n, S_ONE] -= q[Q_BMS_VRECLOSE]
        n += 1
    return n


@njit(cache=True, error_model="numpy")
def disconnect_cause(y, q, forms):
    """Why the closed battery disconnect must open at ``y`` (a ``TRIP_BMS_*`` kind), or 0."""
    isrc = _dot(forms[F_IS], y)
    if -isrc >= q[Q_BMS_ICHG]:
        return TRIP_BMS_CHARGE
    if isrc >= q[Q_BMS_IDIS]:
        return TRIP_BMS_DISCHARGE
    if _dot(forms[F_VSRC], y) - q[Q_BAT_R] * isrc >= q[Q_BMS_VFULL]:
        return TRIP_BMS_VOLTAGE
    return 0


@njit(cache=True, error_model="numpy")
def build_matrix(md, q, forms, fsc, m, bvec):
    """Augmented system matrix ``[[A, b], [0, 0]]`` of the present regime into ``m``."""
    m[:, :] = 0.0
    bvec[:] = 0.0
    ll = q[Q_L]
    if md[M_SIGMA] != 0:
        g = fsc[C_G]
        for j in range(N_A):
            m[S_I, j] = g * forms[F_VN, j] / ll
        m[S_I, S_I] -= (q[Q_R] + fsc[C_RB]) / ll
        m[S_I, S_W] -= q[Q_K] / ll
        m[S_I, S_ONE] -= (fsc[C_VDROP] + fsc[C_VBRUSH]) / ll
    stuck = md[M_STUCK] == 1
    sliding, breakaway = dry_drag_levels(q[Q_TC], q[Q_TS], q[Q_TBR], q[Q_TH])
    fill_shaft_rows(
        m, bvec, q[Q_K], q[Q_J], q[Q_B] + q[Q_BE], q[Q_TL] + sliding * md[M_FSIGN], stuck
    )
    m[S_W, S_ONE] = bvec[S_W]
    for j in range(N_A):
        m[S_VC, j] = forms[F_ICAP, j] / q[Q_C]
    open_line = md[M_OPEN] == 1 or md[M_MELTED] == 1 or md[M_BMS] == 1
    ls = q[Q_LS]
    if ls > 0.0 and not open_line:
        for j in range(N_A):
            m[S_IS, j] = (forms[F_VSRC, j] - forms[F_VN, j]) / ls
        m[S_IS, S_IS] -= fsc[C_RSRC] / ls
    if q[Q_BAT] > 0.5:
        for j in range(N_A):
            m[S_SOC, j] = -forms[F_IS, j] / q[Q_BAT_Q]
    else:
        m[S_VS, S_ONE] = q[Q_SLOPE]


@njit(cache=True, error_model="numpy", inline="always")
def mode_key(md):
    k = md[M_STUCK]
    k = k * 3 + md[M_FSIGN] + 1
    k = k * 3 + md[M_SIGMA] + 1
    k = k * 4 + md[M_LEG_A]
    k = k * 4 + md[M_LEG_B]
    k = k * 2 + (1 if (md[M_OPEN] == 1 or md[M_MELTED] == 1 or md[M_BMS] == 1) else 0)
    k = k * 2 + md[M_BRAKE]
    k = k * 2 + md[M_PRE]
    return k


@njit(cache=True, error_model="numpy", inline="always")
def propagators(md, q, forms, fsc, tau, cache_key, cache_tau, cache_gen, cache_e, gen, scratch,
                bvec, acc):  # fmt: skip
    """Slot of the cache holding ``exp(M tau/2)`` and ``exp(M tau)`` for the present regime.

    Direct-mapped on (regime, length, and for the averaged legs the modulation); an entry is
    valid for the generation ``gen`` of the parameters (events bump it). ``cache_tau`` holds
    the length in units of 1e-16 s and the modulation in units of 2^-53 (a closed loop
    changes the modulation every sample; a duty quantised to timer counts repeats).
    """
    key = mode_key(md)
    # lengths that differ only by rounding of the time stamps (about 1e-20 s) share an entry:
    # the length is compared in units of 1e-16 s
    tq = int(tau * 1e16)
    mq = int(q[Q_MOD] * 9007199254740992.0) if md[M_LEG_A] == LEG_AVG else 0
    h = ((key * 2654435761) ^ (tq * 40503) ^ (tq >> 13) ^ (mq * 97) ^ (mq >> 29)) & (
        CACHE_SLOTS - 1
    )
    if cache_key[h] == key and cache_tau[h, 0] == tq and cache_tau[h, 1] == mq:
        if cache_gen[h] == gen:
            return h
    _fill_slot(md, q, forms, fsc, tau, cache_key, cache_tau, cache_gen, cache_e, gen, scratch,
               bvec, acc, key, tq, mq, h)  # fmt: skip
    return h


@njit(cache=True, error_model="numpy")
def _fill_slot(md, q, forms, fsc, tau, cache_key, cache_tau, cache_gen, cache_e, gen, scratch,
               bvec, acc, key, tq, mq, h):  # fmt: skip
    build_matrix(md, q, forms, fsc, scratch, bvec)
    half = expm(scratch * (0.5 * tau))
    cache_e[h, 0] = half
    matmul_small(half, half, cache_e[h, 1])
    cache_key[h] = key
    cache_tau[h, 0] = tq
    cache_tau[h, 1] = mq
    cache_gen[h] = gen
    acc[A_CACHE_MISSES] += 1.0


@njit(cache=True, error_model="numpy", inline="always")
def _apply(cache_e, h, which, x, y):
    for i in range(N_A):
        s = 0.0
        for j in range(N_A):
            s += cache_e[h, which, i, j] * x[j]
        y[i] = s


@njit(cache=True, error_model="numpy", inline="always")
def point_values(y, md, q, forms, fsc, work, row):
    """Integrands and circuit quantities at the augmented state ``y`` into ``work[row]``."""
    i = y[S_I]
    w = y[S_W]
    vn = _dot(forms[F_VN], y)
    isrc = _dot(forms[F_IS], y)
    vsrc = _dot(forms[F_VSRC], y)
    icap = _dot(forms[F_ICAP], y)
    work[row, 0] = i * i
    work[row, 1] = vsrc * isrc
    work[row, 2] = q[Q_RS] * isrc * isrc
    work[row, 3] = q[Q_R] * i * i
    if md[M_STUCK] == 1:
        work[row, 4] = 0.0
        work[row, 21] = 0.0
        work[row, 22] = 0.0
    else:
        work[row, 4] = q[Q_B] * w * w + (q[Q_TC] - q[Q_GEAR_COULOMB]) * md[M_FSIGN] * w
        work[row, 21] = q[Q_TBR] * md[M_FSIGN] * w  # brush friction
        work[row, 22] = q[Q_TH] * md[M_FSIGN] * w + q[Q_BE] * w * w  # iron: hysteresis + eddy
    work[row, 5] = (q[Q_TL] - q[Q_GEAR_CONST]) * w  # Q_TC, Q_TL hold the gear's parts too
    work[row, 6] = (fsc[C_RB] - fsc[C_RSN]) * i * i + fsc[C_VDROP] * i
    work[row, 7] = fsc[C_GBR] * vn * vn
    work[row, 8] = q[Q_ESR] * icap * icap
    work[row, 9] = (fsc[C_RSRC] - q[Q_RS]) * isrc * isrc
    work[row, 10] = isrc * isrc
    work[row, 11] = vn
    if md[M_SIGMA] != 0:
        work[row, 12] = fsc[C_G] * vn - fsc[C_RB] * i - fsc[C_VDROP]
    else:
        work[row, 12] = q[Q_K] * w  # open armature: the terminals show the back-EMF
    work[row, 13] = fsc[C_G] * i
    work[row, 14] = icap
    work[row, 15] = isrc
    work[row, 16] = vsrc
    work[row, 17] = fsc[C_GBR] * vn
    work[row, 18] = fsc[C_RSN] * i * i
    work[row, 19] = icap * icap
    work[row, 20] = fsc[C_VBRUSH] * i if md[M_SIGMA] != 0 else 0.0  # brush drop 2 V_b |i|
    if md[M_STUCK] == 1:
        work[row, 23] = 0.0
    else:
        work[row, 23] = (q[Q_GEAR_COULOMB] * md[M_FSIGN] + q[Q_GEAR_CONST]) * w  # gear loss


@njit(cache=True, error_model="numpy", inline="always")
def fuse_heat_after(f0, tau, q, work):
    """Heat fraction after a (sub-)step from ``f0``: the first-order element model
    ``f' = (i^2 / I_min^2 - f) / tau_f`` with Simpson's rule on the exponentially weighted
    integrand (variation of constants)."""
    tf = q[Q_FUSE_TAU]
    a = tau / tf
    e1 = math.exp(-a)
    eh = math.exp(-0.5 * a)
    integral = tau / 6.0 * (e1 * work[0, 10] + 4.0 * eh * work[1, 10] + work[2, 10])
    return f0 * e1 + integral / (tf * q[Q_FUSE_IMIN] ** 2)


@njit(cache=True, error_model="numpy", inline="always")
def add_integrals(tau, t0, md, q, work, acc):
    """Simpson's rule over a (sub-)step on ``work`` rows 0 (start), 1 (middle), 2 (end)."""
    w0 = tau / 6.0
    wm = 4.0 * tau / 6.0
    for k in range(10):
        acc[_ACC_OF_WORK[k]] += w0 * (work[0, k] + work[2, k]) + wm * work[1, k]
    acc[A_SENSE] += w0 * (work[0, 18] + work[2, 18]) + wm * work[1, 18]
    acc[A_ICAP2] += w0 * (work[0, 19] + work[2, 19]) + wm * work[1, 19]
    acc[A_BRUSH_DROP] += w0 * (work[0, 20] + work[2, 20]) + wm * work[1, 20]
    acc[A_BRUSH_FRICTION] += w0 * (work[0, 21] + work[2, 21]) + wm * work[1, 21]
    acc[A_IRON] += w0 * (work[0, 22] + work[2, 22]) + wm * work[1, 22]
    acc[A_GEAR] += w0 * (work[0, 23] + work[2, 23]) + wm * work[1, 23]
    for r in range(1, 3):
        t = t0 + 0.5 * tau * r
        ia = math.sqrt(work[r, 0])
        if ia > acc[A_PEAK_I]:
            acc[A_PEAK_I] = ia
            acc[A_PEAK_I_TIME] = t
        acc[A_BUS_MAX] = max(acc[A_BUS_MAX], work[r, 11])
        if work[r, 11] < acc[A_BUS_MIN]:
            acc[A_BUS_MIN] = work[r, 11]
            acc[A_BUS_MIN_TIME] = t
        acc[A_BRAKE_PEAK_W] = max(acc[A_BRAKE_PEAK_W], work[r, 7])
    # the bus extremes of the present period (the start too: an ESR steps the node at edges)
    for r in range(3):
        acc[A_PERIOD_BUS_MAX] = max(acc[A_PERIOD_BUS_MAX], work[r, 11])
        acc[A_PERIOD_BUS_MIN] = min(acc[A_PERIOD_BUS_MIN], work[r, 11])
    # the chopper's power is largest just as it switches on, at the start of a sub-step
    acc[A_BRAKE_PEAK_W] = max(acc[A_BRAKE_PEAK_W], work[0, 7])


@njit(cache=True, error_model="numpy", inline="always")
def guard_min(y, md, q, forms, fsc, limit_active):
    """Smallest guard of the present regime at ``y``: all >= 0 while the regime holds."""
    g = math.inf
    n = F_G0 + int(fsc[C_NG])
    for r in range(F_G0, n):
        g = min(g, _dot(forms[r], y))
    if limit_active:
        lim = F_G0 + MAX_G
        g = min(g, _dot(forms[lim], y))
        g = min(g, _dot(forms[lim + 1], y))
    return g


@njit(cache=True, error_model="numpy")
def set_segment(md, q, seg, ocv_soc, ocv_v):
    """Use battery table segment ``seg``: OCV = A + B SOC between its breakpoints."""
    n = ocv_soc.shape[0]
    s0 = ocv_soc[seg]
    s1 = ocv_soc[seg + 1]
    b = (ocv_v[seg + 1] - ocv_v[seg]) / (s1 - s0)
    q[Q_BAT_B] = b
    q[Q_BAT_A] = ocv_v[seg] - b * s0
    q[Q_BAT_LO] = s0 if seg > 0 else 0.0
    q[Q_BAT_HI] = s1 if seg < n - 2 else math.inf
    md[M_SEG] = seg


@njit(cache=True, error_model="numpy")
def log_trip(trips, acc, t, kind, value):
    n = int(trips[0, 0])
    if n < MAX_TRIPS:
        trips[1 + n, 0] = t
        trips[1 + n, 1] = kind
        trips[1 + n, 2] = value
        trips[0, 0] = n + 1


@njit(cache=True, error_model="numpy")
def trip_bridge(md, acc, trips, t, kind, value):
    """Disable the bridge (every switch off) after a trip of ``kind``; the comparator's
    decay and an over-current deglitch in progress end with it."""
    md[M_TRIP] = 1
    md[M_LEG_A] = LEG_OFF
    md[M_LEG_B] = LEG_OFF
    md[M_OCP] = 2 if kind == TRIP_OVER_CURRENT else 0
    md[M_CHOP] = 0
    acc[A_FORCE_START] = -math.inf
    acc[A_FORCE_FAST] = -math.inf
    acc[A_FORCE_END] = -math.inf
    acc[A_CHOP_AT] = math.inf
    acc[A_TRIP_TIME] = t
    log_trip(trips, acc, t, kind, value)


@njit(cache=True, error_model="numpy")
def update_modes(y, md, q, forms, fsc, t, acc, trips, ocv_soc, ocv_v):
    """Bring every discrete mode in line with the state ``y`` (after a located crossing, an
    event or a change of the legs); returns a status (bus collapse, empty battery)."""
    for _ in range(8):
        compute_forms(md, q, forms, fsc)
        changed = False
        i = y[S_I]
        sliding, breakaway = dry_drag_levels(q[Q_TC], q[Q_TS], q[Q_TBR], q[Q_TH])
        stuck, fsign = friction_state(
            y[S_W], q[Q_K] * i - q[Q_TL], sliding, breakaway, q[Q_LOCK] > 0.5
        )
        if (1 if stuck else 0) != md[M_STUCK] or int(fsign) != md[M_FSIGN]:
            md[M_STUCK] = 1 if stuck else 0
            md[M_FSIGN] = int(fsign)
            if stuck:
                y[S_W] = 0.0
            changed = True
        if fsc[C_SENS] > 0.5:
            sig = md[M_SIGMA]
            # a current left just past zero by a located crossing is zero; a current of the
            # other sign from a regime where the direction did not matter is kept
            if sig != 0 and sig * i <= 0.0 and abs(i) <= 1e-9 * (1.0 + acc[A_PEAK_I]):
                y[S_I] = 0.0
                i = 0.0
            if i > 0.0:
                new = 1
            elif i < 0.0:
                new = -1
            else:
                new = 0
                if _dot(forms[F_DPLUS], y) > 0.0:
                    new = 1
                elif _dot(forms[F_DMINUS], y) < 0.0:
                    new = -1
            if new != sig:
                md[M_SIGMA] = new
                changed = True
        else:
            new = 1 if i >= 0.0 else -1  # tracked, not guarded: it does not matter here
            if md[M_SIGMA] != new:
                md[M_SIGMA] = new
                changed = True
        if changed:
            continue
        vn = _dot(forms[F_VN], y)
        if q[Q_BAT] > 0.5 and md[M_MELTED] == 0:
            if md[M_BMS] == 0:
                kind = disconnect_cause(y, q, forms)
                if kind != 0:
                    md[M_BMS] = 1
                    acc[A_BMS_OPEN_TIME] = t
                    log_trip(trips, acc, t, kind, vn)
                    continue
            elif vn <= q[Q_BMS_VRECLOSE]:
                # reclose unless the closed line would open again at once (then it stays
                # open: the bus must fall further, or the reclose time comes)
                md[M_BMS] = 0
                compute_forms(md, q, forms, fsc)
                if disconnect_cause(y, q, forms) == 0:
                    log_trip(trips, acc, t, TRIP_BMS_RECLOSE, vn)
                    continue
                md[M_BMS] = 1
                compute_forms(md, q, forms, fsc)
        if q[Q_REGEN] < 0.5 and md[M_MELTED] == 0 and md[M_BMS] == 0:
            if md[M_OPEN] == 1:
                if vn < _dot(forms[F_VSRC], y):
                    md[M_OPEN] = 0
                    continue
            elif q[Q_LS] > 0.0:
                if y[S_IS] <= 0.0 and vn >= _dot(forms[F_VSRC], y):
                    y[S_IS] = 0.0
                    md[M_OPEN] = 1
                    continue
            elif _dot(forms[F_IS], y) < 0.0:
                md[M_OPEN] = 1
                continue
        if q[Q_BRAKE_R] > 0.0:
            if md[M_BRAKE] == 0 and vn >= q[Q_BRAKE_ON]:
                md[M_BRAKE] = 1
                continue
            if md[M_BRAKE] == 1 and vn <= q[Q_BRAKE_OFF]:
                md[M_BRAKE] = 0
                continue
        if bridge_enabled(md):
            kind = 0
            value = vn
            if q[Q_OCP] > 0.0:
                sensed = fsc[C_SGAIN] * i
                if md[M_OCP] == 0 and abs(sensed) >= q[Q_OCP]:
                    if q[Q_OCP_DG] > 0.0:
                        md[M_OCP] = 1 if sensed > 0.0 else -1
                        acc[A_OCP_SINCE] = t
                        continue
                    kind = TRIP_OVER_CURRENT
                    value = i
                elif md[M_OCP] in (1, -1) and md[M_OCP] * sensed < q[Q_OCP]:
                    md[M_OCP] = 0
                    continue
            if kind == 0:
                if q[Q_OV] > 0.0 and vn >= q[Q_OV]:
                    kind = TRIP_OVER_VOLTAGE
                elif q[Q_UV] > 0.0 and vn <= q[Q_UV]:
                    kind = TRIP_UNDER_VOLTAGE
                elif vn < 0.0:
                    # the bus capacitor is empty (a melted fuse, a blocked source): the
                    # bridge cannot hold its duty; it turns off and its diodes clamp the bus
                    kind = TRIP_BUS_COLLAPSE
            if kind != 0:
                trip_bridge(md, acc, trips, t, kind, value)
                continue
        if md[M_PRE] == 1 and vn >= q[Q_PRE_V]:
            md[M_PRE] = 0
            acc[A_BYPASS_TIME] = t
            log_trip(trips, acc, t, TRIP_BYPASS, vn)
            continue
        if q[Q_BAT] > 0.5:
            soc = y[S_SOC]
            seg = md[M_SEG]
            if soc < 0.0:
                return STATUS_BATTERY_EMPTY
            if soc < q[Q_BAT_LO] and seg > 0:
                set_segment(md, q, seg - 1, ocv_soc, ocv_v)
                return -1  # parameters changed: the caller drops its propagators
            if soc > q[Q_BAT_HI] and seg < ocv_soc.shape[0] - 2:
                set_segment(md, q, seg + 1, ocv_soc, ocv_v)
                return -1
        break
    compute_forms(md, q, forms, fsc)
    return STATUS_OK


@njit(cache=True, error_model="numpy")
def _trial(x, md, q, forms, fsc, tau, scratch, bvec, ym, y1, work, f0, use_fuse, limit_active):
    """Propagate ``x`` by ``tau`` without the cache; the combined guard at the end."""
    build_matrix(md, q, forms, fsc, scratch, bvec)
    half = expm(scratch * (0.5 * tau))
    full = np.empty((N_A, N_A))
    matmul_small(half, half, full)
    for i in range(N_A):
        s = 0.0
        s2 = 0.0
        for j in range(N_A):
            s += half[i, j] * x[j]
            s2 += full[i, j] * x[j]
        ym[i] = s
        y1[i] = s2
    gv = guard_min(y1, md, q, forms, fsc, limit_active)
    if use_fuse:
        point_values(ym, md, q, forms, fsc, work, 1)
        point_values(y1, md, q, forms, fsc, work, 2)
        gv = min(gv, 1.0 - fuse_heat_after(f0, tau, q, work))
    return gv


@njit(cache=True, error_model="numpy")
def advance_general(x, md, q, forms, fsc, tau, t0, h_nom, cache_key, cache_tau, cache_gen, cache_e,
            genbox, scratch, bvec, ym, y1, xt, xmt, work, carry, acc, trips, ocv_soc, ocv_v,
            limit_active):  # fmt: skip
    """Advance ``x`` by ``tau`` from ``t0`` with the regime changes located inside the step
    (Illinois) and the step split there, as often as needed (the common case, no change
    within the step, is inlined in :func:`run_periods`). Returns ``(status, time
    reached)``; ``STATUS_LIMIT`` when the current reached the comparator's trip level (the
    caller then schedules the decay after the comparator delay)."""
    remaining = tau
    t = t0
    splits = 0
    while remaining > 1e-13 * h_nom:
        step = remaining
        gen = genbox[0]
        slot = propagators(
            md, q, forms, fsc, step, cache_key, cache_tau, cache_gen, cache_e, gen, scratch,
            bvec, acc,
        )  # fmt: skip
        _apply(cache_e, slot, 0, x, ym)
        _apply(cache_e, slot, 1, x, y1)
        use_fuse = q[Q_FUSE] > 0.5 and md[M_MELTED] == 0
        if carry[0] == 1:
            for k in range(N_WORK):
                work[0, k] = work[2, k]
        else:
            point_values(x, md, q, forms, fsc, work, 0)
        gm = guard_min(ym, md, q, forms, fsc, limit_active)
        g1 = guard_min(y1, md, q, forms, fsc, limit_active)
        point_values(ym, md, q, forms, fsc, work, 1)
        point_values(y1, md, q, forms, fsc, work, 2)
        f0 = acc[A_FUSE_HEAT]
        f1 = fuse_heat_after(f0, step, q, work) if use_fuse else 0.0
        crossed = gm < 0.0 or g1 < 0.0 or f1 >= 1.0
        g0 = 0.0
        if crossed and splits < 256:
            g0 = guard_min(x, md, q, forms, fsc, limit_active)
            if g0 < 0.0:
                # the regime test and its guard disagree at x (rounding at a boundary)
                st = update_modes(x, md, q, forms, fsc, t, acc, trips, ocv_soc, ocv_v)
                if st == -1:
                    genbox[0] += 1
                elif st != STATUS_OK:
                    return st, t
                carry[0] = 0
                splits += 1
                if guard_min(x, md, q, forms, fsc, limit_active) < 0.0:
                    if limit_active and abs(x[S_I]) >= q[Q_IPK]:
                        return STATUS_LIMIT, t
                    crossed = False  # take the step whole
                else:
                    continue
        if crossed and splits < 256:
            # Illinois on the fraction s of the step
            lo = 0.0
            glo = min(g0, 1.0 - f0)
            if gm < 0.0 and not (g1 < 0.0 or f1 >= 1.0):
                hi = 0.5
                ghi = gm
            else:
                hi = 1.0
                ghi = min(g1, 1.0 - f1) if use_fuse else g1
            side = 0
            for _ in range(60):
                if (hi - lo) * step <= 1e-12 * h_nom:
                    break
                s = hi - ghi * (hi - lo) / (ghi - glo) if glo != ghi else 0.5 * (lo + hi)
                if not (lo < s < hi):
                    s = 0.5 * (lo + hi)
                gs = _trial(
                    x, md, q, forms, fsc, s * step, scratch, bvec, xmt, xt, work, f0, use_fuse,
                    limit_active,
                )  # fmt: skip
                if gs < 0.0:
                    hi = s
                    ghi = gs
                    if side == -1:
                        glo *= 0.5
                    side = -1
                else:
                    lo = s
                    glo = gs
                    if side == 1:
                        ghi *= 0.5
                    side = 1
            sub = hi * step
            _trial(
                x, md, q, forms, fsc, sub, scratch, bvec, ym, y1, work, f0, use_fuse,
                limit_active,
            )  # fmt: skip
            point_values(x, md, q, forms, fsc, work, 0)
            point_values(ym, md, q, forms, fsc, work, 1)
            point_values(y1, md, q, forms, fsc, work, 2)
            add_integrals(sub, t, md, q, work, acc)
            if use_fuse:
                f1 = fuse_heat_after(f0, sub, q, work)
                acc[A_FUSE_HEAT] = f1
                acc[A_FUSE_PEAK] = max(acc[A_FUSE_PEAK], min(f1, 1.0))
            for k in range(N_A):
                x[k] = y1[k]
            x[S_ONE] = 1.0
            if md[M_STUCK] == 0 and md[M_FSIGN] != 0 and x[S_W] * md[M_FSIGN] <= 0.0:
                # a sliding shaft reaches rest exactly here (the located crossing leaves it
                # a rounding step past zero, which would read as sliding back)
                x[S_W] = 0.0
            t += sub
            remaining -= sub
            splits += 1
            acc[A_SPLITS] += 1.0
            carry[0] = 0
            if use_fuse and acc[A_FUSE_HEAT] >= 1.0 - 1e-12:
                md[M_MELTED] = 1
                acc[A_FUSE_HEAT] = 1.0
                acc[A_FUSE_PEAK] = 1.0
                acc[A_FUSE_MELT_TIME] = t
                log_trip(trips, acc, t, TRIP_FUSE, x[S_IS] if q[Q_LS] > 0.0 else 0.0)
                if q[Q_LS] > 0.0:
                    acc[A_FUSE_ARC] += 0.5 * q[Q_LS] * x[S_IS] ** 2
                    x[S_IS] = 0.0
            if limit_active and abs(x[S_I]) >= q[Q_IPK] * (1.0 - 1e-12):
                compute_forms(md, q, forms, fsc)
                return STATUS_LIMIT, t
            st = update_modes(x, md, q, forms, fsc, t, acc, trips, ocv_soc, ocv_v)
            if st == -1:
                genbox[0] += 1
            elif st != STATUS_OK:
                return st, t
        else:
            add_integrals(step, t, md, q, work, acc)
            if use_fuse:
                acc[A_FUSE_HEAT] = f1
                acc[A_FUSE_PEAK] = max(acc[A_FUSE_PEAK], f1)
            for k in range(N_A):
                x[k] = y1[k]
            carry[0] = 1
            t += step
            remaining = 0.0
        for k in range(N_A):
            if not math.isfinite(x[k]):
                return STATUS_NONFINITE, t
    return STATUS_OK, t


@njit(cache=True, error_model="numpy")
def modulation(q):
    """Leg duties ``(d_A, d_B)`` and the resulting modulation ``m = d_A - d_B``.

    The command is ``control.voltage / nominal supply voltage``, clipped to +-1, turned into
    leg duties (bipolar: ``d_A = (1 + m)/2``, ``d_B = 1 - d_A``; unipolar: ``d_A = (1 + m)/2``,
    ``d_B = (1 - m)/2``), quantised to the timer counts and with pulses (high or low) shorter
    than the minimum pulse dropped. Drive/decay PWM (``Q_DECAY``): the drive duty ``d = |m|``
    is returned as ``d_A`` (``d_B = 0``) and ``m = sgn(m) d``.
    """
    vnom = q[Q_VNOM]
    m = q[Q_VCMD] / vnom if vnom > 0.0 else 0.0
    m = min(1.0, max(-1.0, m))
    if q[Q_DECAY] > 0.5:
        d = _shape_duty(abs(m), q)
        return d, 0.0, (d if m >= 0.0 else -d)
    da = _shape_duty(0.5 * (1.0 + m), q)
    if q[Q_UNIPOLAR] > 0.5:
        db = _shape_duty(0.5 * (1.0 - m), q)
    else:
        db = 1.0 - da
    return da, db, da - db


@njit(cache=True, error_model="numpy")
def _shape_duty(d, q):
    n = q[Q_COUNTS]
    if n > 0.0:
        d = math.floor(d * n + 0.5) / n
    period = 1.0 / q[Q_FS]
    mp = q[Q_MINPULSE]
    if mp > 0.0:
        if 0.0 < d * period < mp:
            d = 0.0
        elif 0.0 < (1.0 - d) * period < mp:
            d = 1.0
    return d


@njit(cache=True, error_model="numpy", inline="always")
def drive_legs(m):
    """Legs of the driving diagonal for the sign of the modulation ``m``."""
    return (LEG_HIGH, LEG_LOW) if m >= 0.0 else (LEG_LOW, LEG_HIGH)


@njit(cache=True, error_model="numpy", inline="always")
def decay_legs(m, fast, q):
    """Legs of the decay after a pulse of sign ``m``: fast (every switch off, the diodes
    return the current to the bus; or the opposite diagonal) or slow (both low-side or both
    high-side switches on: the current recirculates through the armature)."""
    if fast:
        if q[Q_FAST_SYNC] > 0.5:
            return (LEG_LOW, LEG_HIGH) if m >= 0.0 else (LEG_HIGH, LEG_LOW)
        return LEG_OFF, LEG_OFF
    if q[Q_SLOW_HIGH] > 0.5:
        return LEG_HIGH, LEG_HIGH
    return LEG_LOW, LEG_LOW


@njit(cache=True, error_model="numpy", inline="always")
def _leg_high(tau, d, edge, period):
    if d >= 1.0:
        return True
    if d <= 0.0:
        return False
    if edge:
        return tau < d * period
    return 0.5 * (1.0 - d) * period <= tau < 0.5 * (1.0 + d) * period


@njit(cache=True, error_model="numpy")
def intended_legs(tau, q, da, db, m, period, fs, ff, fe):
    """Leg states the modulator asks for at local time ``tau`` (before the dead time).

    Inside the comparator's decay window ``[fs, fe)`` the decay legs (fast before ``ff``);
    otherwise the PWM scheme: unipolar / bipolar legs from their duties, or drive/decay PWM:
    the drive diagonal for ``d T`` (from the period start, or centred), then the off-time in
    fast decay for ``Q_FAST_FRAC`` of it and in slow decay for the rest.
    """
    if fs <= tau < fe:
        return decay_legs(m, tau < ff, q)
    edge = q[Q_EDGE] > 0.5
    if q[Q_DECAY] > 0.5:
        d = da
        if d >= 1.0:
            return drive_legs(m)
        if d <= 0.0:
            return decay_legs(m, q[Q_FAST_FRAC] >= 1.0, q)
        if edge:
            on = tau < d * period
            u = tau - d * period  # time since the pulse ended
        else:
            t_end = 0.5 * (1.0 + d) * period
            on = 0.5 * (1.0 - d) * period <= tau < t_end
            u = tau - t_end if tau >= t_end else tau + period - t_end
        if on:
            return drive_legs(m)
        return decay_legs(m, u < q[Q_FAST_FRAC] * (1.0 - d) * period, q)
    a = _leg_high(tau, da, edge, period)
    if q[Q_UNIPOLAR] > 0.5:
        b = _leg_high(tau, db, edge, period)
    else:
        b = not a
    return (LEG_HIGH if a else LEG_LOW), (LEG_HIGH if b else LEG_LOW)


@njit(cache=True, error_model="numpy")
def _insert_sorted(bt, nb, t, tol):
    """Insert ``t`` into the sorted breakpoints ``bt[:nb]`` unless one lies within ``tol``."""
    for k in range(nb):
        if abs(bt[k] - t) <= tol:
            return nb
    k = nb
    while k > 0 and bt[k - 1] > t:
        bt[k] = bt[k - 1]
        k -= 1
    bt[k] = t
    return nb + 1


@njit(cache=True, error_model="numpy", inline="always")
def _state_at(tau, start, ct, cs, n, tol):
    s = start
    for k in range(n):
        if ct[k] <= tau + tol:
            s = cs[k]
    return s


@njit(cache=True, error_model="numpy")
def _leg_timeline(cand, nc, sl, start, td, period, ct, cs, fl, tol):
    """Changes of one leg (times ``ct``, states ``cs``) from its intended states ``sl`` on
    the intervals ``[cand[k], cand[k+1])``, starting from ``start``. A change from one switch
    to the other turns the leg off for the dead time first (the incoming switch is delayed);
    a change from or to off is immediate. Every intended change is one switching edge
    (``fl = 1`` on its first entry). Returns the number of entries."""
    n = 0
    cur = start
    for k in range(nc - 1):
        s = sl[k]
        if s == cur:
            continue
        t = cand[k]
        fl[n] = 1
        # the next intended change of this leg (the dead time cannot outlast it)
        nxt = period
        for j in range(k + 1, nc - 1):
            if sl[j] != s:
                nxt = cand[j]
                break
        if td > 0.0 and cur != LEG_OFF and s != LEG_OFF:
            ct[n] = t
            cs[n] = LEG_OFF
            n += 1
            if t + td < nxt - tol:
                ct[n] = t + td
                cs[n] = s
                fl[n] = 0
                n += 1
        else:
            ct[n] = t
            cs[n] = s
            n += 1
        cur = s
    return n


@njit(cache=True, error_model="numpy")
def build_schedule(q, md, period, n_grid, tau_from, start_a, start_b, fs, ff, fe, pulse_t0,
                   bt, ba, bb, blim, bgrid, bedges, sched, ssched):  # fmt: skip
    """Segments of one PWM period from local time ``tau_from``: breakpoints ``bt`` with the
    leg states, the current comparator's flag, the grid index (or -1) and the leg edges at
    each.

    ``start_a``, ``start_b``: the legs' states at ``tau_from`` (at a period start, the
    intended states at the end of the previous period). ``[fs, fe)`` (local times, may reach
    outside the period): the comparator's decay window, fast before ``ff``. ``pulse_t0``:
    local start time of a drive pulse in progress at ``tau_from`` (for the blanking).
    Returns ``(segments, intended end state of A, of B, modulation)``.
    """
    h = period / n_grid
    tol = 1e-9 * h
    cand = sched[0]
    cta = sched[1]
    ctb = sched[2]
    ea = sched[3]  # edge times (for switching energy)
    csa = ssched[0]
    csb = ssched[1]
    sla = ssched[2]
    slb = ssched[3]
    fla = ssched[4]
    flb = ssched[5]
    td = q[Q_TD]
    da, db, m = modulation(q)
    # the instants where the modulator's intended legs may change
    nc = 0
    cand[nc] = tau_from
    nc += 1
    if q[Q_DECAY] > 0.5:
        d = da
        f_off = q[Q_FAST_FRAC] * (1.0 - d) * period
        if q[Q_EDGE] > 0.5:
            pts = (d * period, d * period + f_off, -1.0, -1.0)
        else:
            t_end = 0.5 * (1.0 + d) * period
            pts = (0.5 * (1.0 - d) * period, t_end, t_end + f_off, t_end + f_off - period)
    elif q[Q_EDGE] > 0.5:
        pts = (da * period, db * period, -1.0, -1.0)
    else:
        pts = (
            0.5 * (1.0 - da) * period,
            0.5 * (1.0 + da) * period,
            0.5 * (1.0 - db) * period,
            0.5 * (1.0 + db) * period,
        )
    for c in pts:
        if tau_from + tol < c < period - tol:
            nc = _insert_sorted(cand, nc, c, tol)
    for c in (fs, ff, fe):
        if tau_from + tol < c < period - tol:
            nc = _insert_sorted(cand, nc, c, tol)
    cand[nc] = period
    nc += 1
    for k in range(nc - 1):
        mid = 0.5 * (cand[k] + cand[k + 1])
        sla[k], slb[k] = intended_legs(mid, q, da, db, m, period, fs, ff, fe)
    end_a = sla[nc - 2]
    end_b = slb[nc - 2]
    na = _leg_timeline(cand, nc, sla, start_a, td, period, cta, csa, fla, tol)
    nb_ = _leg_timeline(cand, nc, slb, start_b, td, period, ctb, csb, flb, tol)
    nea = 0
    for k in range(na):
        if fla[k] == 1:
            ea[nea] = cta[k]
            nea += 1
    for k in range(nb_):
        if flb[k] == 1:
            ea[nea] = ctb[k]
            nea += 1
    # breakpoints: the grid from tau_from, the leg changes, the period end
    nbp = 0
    j0 = int(math.floor(tau_from / h + 1e-9))
    for j in range(j0, n_grid + 1):
        tj = j * h
        if tj >= tau_from - tol:
            bt[nbp] = tj if j < n_grid else period
            nbp += 1
    if bt[0] > tau_from + tol:
        nbp = _insert_sorted(bt, nbp, tau_from, tol)
    for k in range(na):
        if cta[k] >= tau_from - tol:
            nbp = _insert_sorted(bt, nbp, cta[k], tol)
    for k in range(nb_):
        if ctb[k] >= tau_from - tol:
            nbp = _insert_sorted(bt, nbp, ctb[k], tol)
    # the comparator: active in the driving state after the blanking time from each pulse
    # start (a pulse in progress at tau_from keeps its start)
    drive_a, drive_b = drive_legs(m)
    use_limit = q[Q_IPK] > 0.0
    was0 = start_a == drive_a and start_b == drive_b
    if use_limit and q[Q_BLANK] > 0.0:
        was = was0
        p0 = pulse_t0
        for k in range(nbp - 1):
            sa = _state_at(bt[k], start_a, cta, csa, na, tol)
            sb = _state_at(bt[k], start_b, ctb, csb, nb_, tol)
            drv = sa == drive_a and sb == drive_b
            if drv and not was:
                p0 = bt[k]
            if drv and tau_from - tol <= p0 + q[Q_BLANK] < period - tol:
                nbp = _insert_sorted(bt, nbp, p0 + q[Q_BLANK], tol)
            was = drv
    pulse_start = pulse_t0 if was0 else -math.inf
    was = was0
    for k in range(nbp):
        sa = _state_at(bt[k], start_a, cta, csa, na, tol)
        sb = _state_at(bt[k], start_b, ctb, csb, nb_, tol)
        ba[k] = sa
        bb[k] = sb
        drv = sa == drive_a and sb == drive_b
        if drv and not was:
            pulse_start = bt[k]
        was = drv
        blim[k] = 1 if (use_limit and drv and bt[k] >= pulse_start + q[Q_BLANK] - tol) else 0
        jj = bt[k] / h
        jr = math.floor(jj + 0.5)
        bgrid[k] = int(jr) if abs(jj - jr) * h <= tol else -1
        ne = 0
        for e in range(nea):
            if abs(ea[e] - bt[k]) <= tol:
                ne += 1
        bedges[k] = ne
    return nbp - 1, end_a, end_b, m


@njit(cache=True, error_model="numpy")
def grid_schedule(n_grid, period, leg, bt, ba, bb, blim, bgrid, bedges):
    """A period of ``n_grid`` nominal steps with both legs in state ``leg`` and no edges
    (the averaged model, or a disabled switching bridge); returns the number of segments."""
    h = period / n_grid
    for j in range(n_grid + 1):
        bt[j] = j * h if j < n_grid else period
        ba[j] = leg
        bb[j] = leg
        blim[j] = 0
        bgrid[j] = j
        bedges[j] = 0
    return n_grid


@njit(cache=True, error_model="numpy")
def switching_energy(x, md, q, forms, fsc, n_edges, acc, old_a, old_b):
    """Take the switching loss of the leg transitions at this instant from the bus capacitor.

    Two ways to give the loss (the loader accepts one):

    - a per-transition energy ``E_sw`` [J] (``Q_ESW``): ``n_edges E_sw``, scaled linearly
      with the bus voltage and the current when their reference values are given;
    - the switch's transition times (``Q_TR`` turn-on, ``Q_TF`` turn-off [s]): the linearised
      hard-switching figure of an inductive (clamped) leg, ``W_on = V_bus |i| t_r / 2`` for a
      switch turning on and ``W_off = V_bus |i| t_f / 2`` for one turning off, so that a
      leg's turn-on plus turn-off in each PWM period costs ``V_bus |i| (t_r + t_f) / 2``
      (Mohan, Undeland & Robbins, *Power Electronics*, 3rd ed., Wiley 2003, sec. 2-5,
      eqs. (2-6) to (2-8): ``P_s = V_d I_o f_s (t_c(on) + t_c(off)) / 2`` -- section and
      equation numbers from memory).

    How the times map onto a leg's transitions: every transition of a leg carrying current
    is one hard event. With the current flowing out of the leg into the armature (leg A for
    ``i > 0``, leg B for ``i < 0``) the upper switch conducts when the leg is high and the
    lower diode when it is low: low -> high turns the upper switch on against the diode
    (``t_r``), high -> low turns it off onto the diode (``t_f``). With the current flowing
    into the leg the lower switch is the hard one: low -> high turns it off (``t_f``),
    high -> low turns it on (``t_r``). The other switch of the leg changes state while its
    own diode carries the current (no loss). So a switch that carried the current and opens
    loses ``t_f``, one that takes the current over as it closes loses ``t_r``: with dead
    time, a turn-off is booked as the leg enters the dead time, a turn-on as it leaves it.

    Parameters
    ----------
    x : ndarray
        Augmented state; its capacitor voltage ``x[S_VC]`` [V] gives up the energy.
    md : ndarray
        Modes, holding the legs' new states.
    q : ndarray
        Parameters (``Q_ESW``, ``Q_ESW_V`` [V], ``Q_ESW_I`` [A], ``Q_TR``, ``Q_TF`` [s]).
    forms, fsc : ndarray
        Linear forms and scalars of the new regime (the bus node voltage ``V_bus`` [V]).
    n_edges : int
        Leg transitions at this instant (the per-transition energy; the transition times
        look at the legs' old and new states instead).
    acc : ndarray
        Accumulators: ``A_BRIDGE`` and ``A_SWITCH_LOSS`` [J] grow by the energy.
    old_a, old_b : int
        The legs' states before this instant.
    """
    e = 0.0
    if q[Q_ESW] > 0.0 and n_edges > 0:
        e = q[Q_ESW] * n_edges
        if q[Q_ESW_I] > 0.0:
            e *= abs(x[S_I]) / q[Q_ESW_I]
        if q[Q_ESW_V] > 0.0:
            e *= max(_dot(forms[F_VN], x), 0.0) / q[Q_ESW_V]
    elif q[Q_TR] > 0.0 or q[Q_TF] > 0.0:
        i = x[S_I]
        vi = 0.5 * max(_dot(forms[F_VN], x), 0.0) * abs(i)
        for leg in range(2):
            old = old_a if leg == 0 else old_b
            new = md[M_LEG_A] if leg == 0 else md[M_LEG_B]
            if old == new or new == LEG_AVG or old == LEG_AVG:
                continue
            # the switch that carries this current forward: the upper one (a high leg) when
            # the current flows out of the leg, the lower one when it flows in
            out_of_leg = i > 0.0 if leg == 0 else i < 0.0
            if old != LEG_OFF and (old == LEG_HIGH) == out_of_leg:
                e += vi * q[Q_TF]  # it opens: hard turn-off onto the opposite diode
            if new != LEG_OFF and (new == LEG_HIGH) == out_of_leg:
                e += vi * q[Q_TR]  # it closes: hard turn-on against the opposite diode
    if e <= 0.0:
        return
    stored = 0.5 * q[Q_C] * x[S_VC] ** 2
    e = min(e, stored)
    x[S_VC] = math.sqrt(max(x[S_VC] ** 2 - 2.0 * e / q[Q_C], 0.0))
    acc[A_BRIDGE] += e
    acc[A_SWITCH_LOSS] += e


@njit(cache=True, error_model="numpy")
def close_period(acc, length, vn):
    """End a period of ``length`` [s]: its RMS capacitor current and bus peak-to-peak into
    the largest so far; start the next one's at the node voltage ``vn`` [V]."""
    rms = math.sqrt(max(acc[A_ICAP2] - acc[A_MARK_ICAP2], 0.0) / length)
    acc[A_CAP_RMS_PERIOD] = max(acc[A_CAP_RMS_PERIOD], rms)
    acc[A_BUS_RIPPLE] = max(acc[A_BUS_RIPPLE], acc[A_PERIOD_BUS_MAX] - acc[A_PERIOD_BUS_MIN])
    acc[A_MARK_ICAP2] = acc[A_ICAP2]
    acc[A_PERIOD_BUS_MAX] = vn
    acc[A_PERIOD_BUS_MIN] = vn


@njit(cache=True, error_model="numpy")
def write_row(x, md, q, forms, fsc, t, rec, row, acc, limit_flag, work):
    """Store the trace columns at ``x`` (``work``: scratch, row 0 is overwritten)."""
    point_values(x, md, q, forms, fsc, work, 0)
    i = x[S_I]
    rec[R_TIME, row] = t
    rec[R_CURRENT, row] = i
    rec[R_SPEED, row] = x[S_W]
    rec[R_POSITION, row] = x[S_TH]
    rec[R_ARMATURE_V, row] = work[0, 12]
    rec[R_BUS_V, row] = work[0, 11]
    rec[R_MOTOR_TORQUE, row] = q[Q_K] * i
    rec[R_LOAD_TORQUE, row] = q[Q_TL] - q[Q_GEAR_CONST]  # through a loss-free gear
    rec[R_SUPPLY_CURRENT, row] = work[0, 15]
    if q[Q_LOCK] > 0.5:
        fr = 0.0
    elif md[M_STUCK] == 1:
        fr = q[Q_K] * i - q[Q_TL]
    else:
        sliding, breakaway = dry_drag_levels(q[Q_TC], q[Q_TS], q[Q_TBR], q[Q_TH])
        # with brush and iron drag; without the gear's part (booked as the gear's loss)
        fr = (q[Q_B] + q[Q_BE]) * x[S_W] + (sliding - q[Q_GEAR_COULOMB]) * md[M_FSIGN]
    rec[R_FRICTION_TORQUE, row] = fr
    rec[R_BRIDGE_CURRENT, row] = work[0, 13]
    rec[R_DUTY, row] = q[Q_MOD] if bridge_enabled(md) else 0.0
    la = md[M_LEG_A]
    rec[R_BRIDGE_STATE, row] = 9.0 if la == LEG_AVG else float(la * 3 + md[M_LEG_B])
    rec[R_CAP_CURRENT, row] = work[0, 14]
    rec[R_BRAKE_CURRENT, row] = work[0, 17]
    rec[R_SOURCE_V, row] = work[0, 16]
    rec[R_FUSE_HEAT, row] = acc[A_FUSE_HEAT]
    rec[R_SOC, row] = x[S_SOC]
    rec[R_LIMIT, row] = limit_flag
    rec[R_ENABLED, row] = 1.0 if bridge_enabled(md) else 0.0
    rec[R_SENSED, row] = fsc[C_SGAIN] * i
    rec[R_BATTERY_CONNECTED, row] = 1.0 if (q[Q_BAT] > 0.5 and md[M_BMS] == 0) else 0.0


@njit(cache=True, error_model="numpy")
def apply_event(x, md, q, index, value, acc, trips, t):
    """Set parameter ``index`` (or do action ``index < 0``) with the energy it implies."""
    w = x[S_W]
    if index == EV_SOURCE_VOLTAGE:
        x[S_VS] = value
        q[Q_SLOPE] = 0.0
    elif index == EV_SOURCE_RAMP:
        x[S_VS] = value
    elif index == EV_BYPASS:
        if md[M_PRE] == 1:
            md[M_PRE] = 0
            acc[A_BYPASS_TIME] = t
            log_trip(trips, acc, t, TRIP_BYPASS, x[S_VC])
    else:
        if index == Q_LOCK and value > 0.5 and w != 0.0:
            acc[A_LOCK] += 0.5 * q[Q_J] * w * w
            x[S_W] = 0.0
        elif index == Q_J and w != 0.0:
            x[S_W], lost = inertia_change(w, q[Q_J], value)
            acc[A_COUPLING] += lost
        q[index] = value


@njit(cache=True, error_model="numpy", inline="always")
def next_timer(md, q, acc):
    """Time of the next timed action: the comparator's decay start or end, the end of an
    over-current deglitch (inf: none)."""
    t = acc[A_CHOP_AT] if md[M_CHOP] != 0 else math.inf
    if md[M_OCP] == 1 or md[M_OCP] == -1:
        t = min(t, acc[A_OCP_SINCE] + q[Q_OCP_DG])
    return t


@njit(cache=True, error_model="numpy")
def begin_decay(x, md, q, t, t_p, period, acc, chops):
    """The comparator's decay starts at ``t``: for the fixed off-time, or to the end of the
    PWM period (cycle-by-cycle); fast for ``Q_FAST_FRAC`` of it. Logged with the current."""
    md[M_CHOP] = 2
    fixed = q[Q_CHOP_FIXED] > 0.5
    end = t + q[Q_TOFF] if fixed else t_p + period
    acc[A_FORCE_START] = t
    acc[A_FORCE_FAST] = t + q[Q_FAST_FRAC] * (end - t)
    acc[A_FORCE_END] = end
    acc[A_CHOP_AT] = end if fixed else math.inf
    acc[A_LIMIT_EVENTS] += 1.0
    n = int(chops[0, 0])
    if n < MAX_CHOPS:
        chops[1 + n, 0] = t
        chops[1 + n, 1] = x[S_I]
        chops[1 + n, 2] = math.nan
        chops[1 + n, 3] = math.nan
        chops[0, 0] = n + 1


@njit(cache=True, error_model="numpy")
def end_decay(x, md, acc, chops, t):
    """The comparator's decay ends at ``t`` (the legs follow the modulator again)."""
    md[M_CHOP] = 0
    acc[A_FORCE_START] = -math.inf
    acc[A_FORCE_FAST] = -math.inf
    acc[A_FORCE_END] = -math.inf
    acc[A_CHOP_AT] = math.inf
    n = int(chops[0, 0])
    if n > 0 and math.isnan(chops[n, 2]):
        chops[n, 2] = t
        chops[n, 3] = x[S_I]


@njit(cache=True, error_model="numpy")
def fire_timers(x, md, q, t, t_p, period, acc, trips, chops):
    """Do the timed actions due at ``t``; returns 0 (none), 1 (the modes changed: an
    over-current trip) or 2 (the legs' schedule must be rebuilt from ``t``)."""
    tol = 1e-12 * period
    if (md[M_OCP] == 1 or md[M_OCP] == -1) and t >= acc[A_OCP_SINCE] + q[Q_OCP_DG] - tol:
        trip_bridge(md, acc, trips, t, TRIP_OVER_CURRENT, x[S_I])
        return 1
    if md[M_CHOP] == 1 and t >= acc[A_CHOP_AT] - tol:
        begin_decay(x, md, q, t, t_p, period, acc, chops)
        return 2
    if md[M_CHOP] == 2 and t >= acc[A_CHOP_AT] - tol:
        end_decay(x, md, acc, chops, t)
        return 2
    return 0


@njit(cache=True, error_model="numpy")
def start_run(x, md, q, ev_t, ev_i, ev_v, counters, rec, acc, trips, ocv_soc, ocv_v, legs,
              n_cp, cp, cs, rng, segs, crec):  # fmt: skip
    """Events at t = 0, the controller's first sample, the initial modes, peak trackers and
    trace row 0.

    ``counters`` (int64): next event, next row, next period, generation; ``legs`` (int64, 2):
    the legs' intended states at the end of the last period. ``n_cp``: kernel periods per
    controller base sample (0: open loop); ``cp``, ``cs``, ``rng``, ``segs``: the
    controller's arrays; ``crec`` its trace columns.
    """
    forms = np.zeros((N_F, N_A))
    fsc = np.zeros(N_C)
    n_ev = ev_t.shape[0]
    k_ev = 0
    while k_ev < n_ev and ev_t[k_ev] <= 0.0:
        apply_event(x, md, q, ev_i[k_ev], ev_v[k_ev], acc, trips, 0.0)
        k_ev += 1
    if q[Q_BAT] > 0.5:
        seg = 0
        while seg < ocv_soc.shape[0] - 2 and x[S_SOC] > ocv_soc[seg + 1]:
            seg += 1
        set_segment(md, q, seg, ocv_soc, ocv_v)
    if n_cp > 0:
        compute_forms(md, q, forms, fsc)
        vn = _dot(forms[F_VN], x)
        q[Q_VCMD] = control_sample(0, 0.0, x[S_I], x[S_W], x[S_TH], vn, cp, cs, rng, segs)
        q[Q_VNOM] = cs[GREC + K_V_MEAS]
    da, db, m = modulation(q)
    q[Q_MOD] = m
    if bridge_enabled(md):
        if q[Q_SWITCHING] > 0.5:
            md[M_LEG_A] = LEG_LOW
            md[M_LEG_B] = LEG_LOW
        else:
            md[M_LEG_A] = LEG_AVG
            md[M_LEG_B] = LEG_AVG
    else:
        md[M_LEG_A] = LEG_OFF
        md[M_LEG_B] = LEG_OFF
    legs[0] = md[M_LEG_A] if md[M_LEG_A] != LEG_OFF else LEG_LOW
    legs[1] = md[M_LEG_B] if md[M_LEG_B] != LEG_OFF else LEG_LOW
    md[M_SIGMA] = 1
    update_modes(x, md, q, forms, fsc, 0.0, acc, trips, ocv_soc, ocv_v)
    work = np.zeros((3, N_WORK))
    point_values(x, md, q, forms, fsc, work, 0)
    acc[A_BUS_MAX] = work[0, 11]
    acc[A_BUS_MIN] = work[0, 11]
    acc[A_BUS_MIN_TIME] = 0.0
    acc[A_PERIOD_BUS_MAX] = work[0, 11]
    acc[A_PERIOD_BUS_MIN] = work[0, 11]
    acc[A_BMS_OPEN_TIME] = -1.0
    acc[A_PEAK_I] = abs(x[S_I])
    acc[A_FUSE_MELT_TIME] = -1.0
    acc[A_FORCE_START] = -math.inf
    acc[A_FORCE_FAST] = -math.inf
    acc[A_FORCE_END] = -math.inf
    acc[A_CHOP_AT] = math.inf
    acc[A_PULSE_T0] = -math.inf
    acc[A_BYPASS_TIME] = -1.0 if md[M_PRE] == 1 else 0.0
    write_row(x, md, q, forms, fsc, 0.0, rec, 0, acc, 0.0, work)
    if n_cp > 0:
        copy_record(cs, crec, 0)
    counters[0] = k_ev
    counters[1] = 1
    counters[2] = 0
    counters[3] = 0


@njit(cache=True, error_model="numpy")
def run_periods(x, md, q, period, n_grid, n_sub, duration, p_first, p_last, ev_t, ev_i, ev_v,
                counters, rec, acc, trips, chops, ocv_soc, ocv_v, legs, cache_key, cache_tau,
                cache_gen, cache_e, n_cp, cp, cs, rng, segs, crec):  # fmt: skip
    """Advance the run over periods ``p_first .. p_last`` (0-based) of length ``period``.

    For the switching model a period is one PWM period; for the averaged model it is one
    trace row, or one controller base sample in closed loop. ``n_grid`` nominal steps make a
    period; a trace row every ``n_sub`` steps (and at the end). With ``n_cp > 0`` the
    controller runs at the start of every ``n_cp``-th period (taken at the end of the period
    before, ahead of the trace row written there), on the node voltage as the bus
    measurement, and its voltage command becomes the duty ``command / measured bus voltage``
    from that period on. Returns ``(status, time reached)``.
    """
    forms = np.zeros((N_F, N_A))
    fsc = np.zeros(N_C)
    scratch = np.zeros((N_A, N_A))
    bvec = np.zeros(N_A)
    ym = np.zeros(N_A)
    y1 = np.zeros(N_A)
    xt = np.zeros(N_A)
    xmt = np.zeros(N_A)
    work = np.zeros((3, N_WORK))
    rowwork = np.zeros((3, N_WORK))
    fcache = np.zeros((FORM_SLOTS, N_F, N_A))
    fcache_sc = np.zeros((FORM_SLOTS, N_C))
    fcache_key = np.full(FORM_SLOTS, -1, dtype=np.int64)
    fcache_gen = np.zeros(FORM_SLOTS, dtype=np.int64)
    sched = np.zeros((4, 32))
    ssched = np.zeros((6, 32), dtype=np.int64)
    carry = np.zeros(1, dtype=np.int64)
    genbox = np.zeros(1, dtype=np.int64)
    genbox[0] = counters[3]
    nmax = n_grid + MAX_BP
    bt = np.zeros(nmax + 1)
    ba = np.zeros(nmax + 1, dtype=np.int64)
    bb = np.zeros(nmax + 1, dtype=np.int64)
    blim = np.zeros(nmax + 1, dtype=np.int64)
    bgrid = np.zeros(nmax + 1, dtype=np.int64)
    bedges = np.zeros(nmax + 1, dtype=np.int64)
    n_ev = ev_t.shape[0]
    k_ev = counters[0]
    row = counters[1]
    h = period / n_grid
    switching = q[Q_SWITCHING] > 0.5
    timed = q[Q_TR] > 0.0 or q[Q_TF] > 0.0  # transition-time losses: every leg change counts
    status = STATUS_OK
    t = p_first * period
    compute_forms(md, q, forms, fsc)
    nseg = 0
    end_a = LEG_LOW
    end_b = LEG_LOW
    for p in range(p_first, p_last + 1):
        t_p = p * period
        if t_p >= duration * (1.0 - 1e-15):
            break
        acc[A_PERIODS] += 1.0
        if p > 0:
            close_period(acc, period, _dot(forms[F_VN], x))
        # the battery disconnect recloses by time, checked at each period start
        if (
            md[M_BMS] == 1
            and q[Q_BMS_TRECLOSE] < math.inf
            and t_p >= acc[A_BMS_OPEN_TIME] + q[Q_BMS_TRECLOSE] * (1.0 - 1e-12)
        ):
            md[M_BMS] = 0
            carry[0] = 0
            compute_forms(md, q, forms, fsc)
            log_trip(trips, acc, t_p, TRIP_BMS_RECLOSE, _dot(forms[F_VN], x))
            st = update_modes(x, md, q, forms, fsc, t_p, acc, trips, ocv_soc, ocv_v)
            if st == -1:
                genbox[0] += 1
            elif st != STATUS_OK:
                status = st
                break
        # the current's range over the period (at every segment end: the switching instants
        # are segment ends, and between them the current of each linear circuit is monotone
        # for a locked rotor, nearly so on the scale of a period for a turning one)
        i_lo = x[S_I]
        i_hi = x[S_I]
        # auto-restart after a trip, checked at each period start
        if (
            md[M_TRIP] == 1
            and md[M_OCP] == 2
            and q[Q_OCP_RETRY] > 0.5
            and t_p >= acc[A_TRIP_TIME] + q[Q_OCP_RT] * (1.0 - 1e-12)
        ):
            md[M_TRIP] = 0
            md[M_OCP] = 0
            log_trip(trips, acc, t_p, TRIP_RESTART, _dot(forms[F_VN], x))
        if (
            md[M_TRIP] == 1
            and md[M_OCP] != 2
            and q[Q_AUTO_RESTART] > 0.5
            and t_p >= acc[A_TRIP_TIME] + q[Q_RESTART_DELAY] * (1.0 - 1e-12)
        ):
            vn = _dot(forms[F_VN], x)
            lo_ok = q[Q_UV] <= 0.0 or vn >= q[Q_UV] + q[Q_RESTART_MARGIN]
            hi_ok = q[Q_OV] <= 0.0 or vn <= q[Q_OV] - q[Q_RESTART_MARGIN]
            if lo_ok and hi_ok:
                md[M_TRIP] = 0
                log_trip(trips, acc, t_p, TRIP_RESTART, vn)
        if md[M_CHOP] == 2 and q[Q_CHOP_FIXED] < 0.5:
            end_decay(x, md, acc, chops, t_p)  # cycle-by-cycle: the decay ends with the period
        enabled = bridge_enabled(md)
        if switching:
            if enabled:
                nseg, end_a, end_b, m = build_schedule(
                    q, md, period, n_grid, 0.0, legs[0], legs[1], acc[A_FORCE_START] - t_p,
                    acc[A_FORCE_FAST] - t_p, acc[A_FORCE_END] - t_p, acc[A_PULSE_T0] - t_p,
                    bt, ba, bb, blim, bgrid, bedges, sched, ssched,
                )  # fmt: skip
                q[Q_MOD] = m
            else:
                nseg = grid_schedule(n_grid, period, LEG_OFF, bt, ba, bb, blim, bgrid, bedges)
                end_a = LEG_LOW
                end_b = LEG_LOW
        elif p == p_first:
            # averaged: a period is n_grid nominal steps (one trace row), the same every time
            nseg = grid_schedule(n_grid, period, LEG_AVG, bt, ba, bb, blim, bgrid, bedges)
            end_a = LEG_AVG
            end_b = LEG_AVG
        k = 0
        while k < nseg:
            tau0 = bt[k]
            tau1 = bt[k + 1]
            t0 = t_p + tau0
            t1 = min(t_p + tau1, duration)
            if t1 <= t0:
                break
            # legs of this segment (a disabled bridge has every switch off)
            if bridge_enabled(md):
                la, lb = ba[k], bb[k]
            else:
                la, lb = LEG_OFF, LEG_OFF
            if la != md[M_LEG_A] or lb != md[M_LEG_B]:
                old_a = md[M_LEG_A]
                old_b = md[M_LEG_B]
                dra, drb = drive_legs(q[Q_MOD])
                if la == dra and lb == drb:
                    acc[A_PULSE_T0] = t0  # a drive pulse starts (for blanking, min on-time)
                md[M_LEG_A] = la
                md[M_LEG_B] = lb
                carry[0] = 0
                # the forms of the new leg states, from a small cache (they repeat every
                # period); the other modes are still right if every guard holds at x
                fk = (((mode_key(md) * 4 + md[M_OCP] + 1) * 2 + md[M_TRIP]) * 2 + md[M_MELTED]) * 2
                fk += md[M_BMS]
                fs_ = (fk ^ (fk >> 7) ^ (fk >> 14)) & (FORM_SLOTS - 1)
                # (averaged legs depend on the modulation, which a closed loop changes)
                if fcache_key[fs_] == fk and fcache_gen[fs_] == genbox[0] and la != LEG_AVG:
                    for r_ in range(N_F):
                        for j_ in range(N_A):
                            forms[r_, j_] = fcache[fs_, r_, j_]
                    for j_ in range(N_C):
                        fsc[j_] = fcache_sc[fs_, j_]
                else:
                    compute_forms(md, q, forms, fsc)
                    fcache[fs_] = forms
                    fcache_sc[fs_] = fsc
                    fcache_key[fs_] = fk
                    fcache_gen[fs_] = genbox[0]
                if switching and (bedges[k] > 0 or timed):
                    switching_energy(x, md, q, forms, fsc, bedges[k], acc, old_a, old_b)
                    acc[A_SWITCHINGS] += bedges[k]
                held = md[M_SIGMA] == 0 and fsc[C_SENS] < 0.5  # no longer held at zero
                if held or guard_min(x, md, q, forms, fsc, False) < 0.0:
                    st = update_modes(x, md, q, forms, fsc, t0, acc, trips, ocv_soc, ocv_v)
                    if st == -1:
                        genbox[0] += 1
                    elif st != STATUS_OK:
                        status = st
                        break
            lim = blim[k] == 1 and bridge_enabled(md) and md[M_CHOP] == 0
            t = t0
            hit_limit = False
            rebuild = False
            while True:
                at_event = k_ev < n_ev and ev_t[k_ev] <= t1
                target = ev_t[k_ev] if at_event else t1
                t_tm = next_timer(md, q, acc)
                at_timer = t_tm <= target
                if at_timer:
                    target = max(t_tm, t)
                    at_event = at_event and ev_t[k_ev] <= target
                if target > t:
                    # local lengths (not t differences) so that a period's segments repeat
                    tau = tau1 - tau0 if (t == t0 and target == t_p + tau1) else target - t
                    # the common case inline (no calls with array arguments in the hot
                    # loop): no guard crosses, the fuse does not melt
                    done = False
                    slot = propagators(
                        md, q, forms, fsc, tau, cache_key, cache_tau, cache_gen, cache_e,
                        genbox[0], scratch, bvec, acc,
                    )  # fmt: skip
                    _apply(cache_e, slot, 0, x, ym)
                    _apply(cache_e, slot, 1, x, y1)
                    if min(guard_min(ym, md, q, forms, fsc, lim),
                           guard_min(y1, md, q, forms, fsc, lim)) >= 0.0:  # fmt: skip
                        if carry[0] == 1:
                            for kk in range(N_WORK):
                                work[0, kk] = work[2, kk]
                        else:
                            point_values(x, md, q, forms, fsc, work, 0)
                        point_values(ym, md, q, forms, fsc, work, 1)
                        point_values(y1, md, q, forms, fsc, work, 2)
                        use_fuse = q[Q_FUSE] > 0.5 and md[M_MELTED] == 0
                        f1 = fuse_heat_after(acc[A_FUSE_HEAT], tau, q, work) if use_fuse else 0.0
                        if f1 < 1.0:
                            add_integrals(tau, t, md, q, work, acc)
                            if use_fuse:
                                acc[A_FUSE_HEAT] = f1
                                acc[A_FUSE_PEAK] = max(acc[A_FUSE_PEAK], f1)
                            finite = True
                            for kk in range(N_A):
                                x[kk] = y1[kk]
                                finite = finite and math.isfinite(y1[kk])
                            carry[0] = 1
                            t = t + tau
                            st = STATUS_OK if finite else STATUS_NONFINITE
                            done = True
                    if not done:
                        st, t = advance_general(
                            x, md, q, forms, fsc, tau, t, h, cache_key, cache_tau, cache_gen,
                            cache_e, genbox, scratch, bvec, ym, y1, xt, xmt, work, carry, acc,
                            trips, ocv_soc, ocv_v, lim,
                        )  # fmt: skip
                    if st == STATUS_LIMIT:
                        hit_limit = True
                        break
                    if st != STATUS_OK:
                        status = st
                        break
                    t = target
                if at_timer:
                    act = fire_timers(x, md, q, t, t_p, period, acc, trips, chops)
                    carry[0] = 0
                    if act == 2:
                        rebuild = True
                        break
                    if act == 1:
                        st = update_modes(x, md, q, forms, fsc, t, acc, trips, ocv_soc, ocv_v)
                        if st == -1:
                            genbox[0] += 1
                        elif st != STATUS_OK:
                            status = st
                            break
                        lim = lim and bridge_enabled(md)
                    if not at_event:
                        if t >= t1:
                            break
                        continue
                if not at_event:
                    break
                while k_ev < n_ev and ev_t[k_ev] == target:
                    apply_event(x, md, q, ev_i[k_ev], ev_v[k_ev], acc, trips, target)
                    k_ev += 1
                if not switching:
                    da, db, m = modulation(q)
                    q[Q_MOD] = m
                genbox[0] += 1
                carry[0] = 0
                st = update_modes(x, md, q, forms, fsc, target, acc, trips, ocv_soc, ocv_v)
                if st == -1:
                    genbox[0] += 1
                elif st != STATUS_OK:
                    status = st
                    break
                lim = lim and bridge_enabled(md)
            i_lo = min(i_lo, x[S_I])
            i_hi = max(i_hi, x[S_I])
            if status != STATUS_OK:
                break
            if hit_limit:
                # the comparator trips: the switches turn off after its delay (and not before
                # the minimum on-time), then the legs decay for the off-time or the rest of
                # the period (cycle-by-cycle: unipolar PWM recirculates through both low-side
                # switches, bipolar turns on the opposite diagonal; decay PWM: its decay mode)
                md[M_CHOP] = 1
                acc[A_CHOP_AT] = max(t + q[Q_TCD], acc[A_PULSE_T0] + q[Q_TONMIN])
                if acc[A_CHOP_AT] <= t + 1e-12 * period:
                    begin_decay(x, md, q, t, t_p, period, acc, chops)
                rebuild = True
            if rebuild:
                tau_now = t - t_p
                nseg, end_a, end_b, m = build_schedule(
                    q, md, period, n_grid, tau_now, md[M_LEG_A], md[M_LEG_B],
                    acc[A_FORCE_START] - t_p, acc[A_FORCE_FAST] - t_p, acc[A_FORCE_END] - t_p,
                    acc[A_PULSE_T0] - t_p, bt, ba, bb, blim, bgrid, bedges, sched, ssched,
                )  # fmt: skip
                k = 0
                continue
            at_end = t1 >= duration * (1.0 - 1e-15)
            if n_cp > 0 and k == nseg - 1 and (p + 1) % n_cp == 0 and not at_end:
                # the controller's sample at the end of this period (the start of the next),
                # before the trace row there, so that the row shows the values after it
                t_s = (p + 1) * period
                vn = _dot(forms[F_VN], x)
                q[Q_VCMD] = control_sample(
                    (p + 1) // n_cp, t_s, x[S_I], x[S_W], x[S_TH], vn, cp, cs, rng, segs
                )
                q[Q_VNOM] = cs[GREC + K_V_MEAS]
                if not switching:
                    da, db, m = modulation(q)
                    if m != q[Q_MOD]:
                        # the propagators are keyed by the modulation (no generation bump)
                        q[Q_MOD] = m
                        carry[0] = 0
                        compute_forms(md, q, forms, fsc)
                        st = update_modes(x, md, q, forms, fsc, t_s, acc, trips, ocv_soc, ocv_v)
                        if st == -1:
                            genbox[0] += 1
                        elif st != STATUS_OK:
                            status = st
                            break
            # trace row at grid points
            jg = bgrid[k + 1]
            if (jg >= 0 and (p * n_grid + jg) % n_sub == 0) or at_end:
                if row < rec.shape[1]:
                    flag = 1.0 if md[M_CHOP] == 2 else 0.0
                    write_row(x, md, q, forms, fsc, t1, rec, row, acc, flag, rowwork)
                    if n_cp > 0:
                        copy_record(cs, crec, row)
                    row += 1
            if at_end:
                break
            k += 1
        if switching and status == STATUS_OK and t >= t_p + period * (1.0 - 1e-9):
            acc[A_RIPPLE_LAST] = i_hi - i_lo  # a complete period (not cut by the run's end)
        legs[0] = end_a
        legs[1] = end_b
        if status != STATUS_OK:
            break
    if status != STATUS_OK and row < rec.shape[1]:
        write_row(x, md, q, forms, fsc, t, rec, row, acc, 0.0, rowwork)
        if n_cp > 0:
            copy_record(cs, crec, row)
        row += 1
    counters[0] = k_ev
    counters[1] = row
    counters[3] = genbox[0]
    return status, t


__all__ = ["CACHE_SLOTS", "start_run", "run_periods"]
