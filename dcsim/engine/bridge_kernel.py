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

Switching instants come from the carrier and the duty, at their exact times inside each PWM
period; the kernel integrates period by period over the segments between them (and the fixed
grid of the nominal step). Each segment is advanced exactly by the matrix exponential of the
augmented matrix ``[[A, b], [0, 0]]`` (Moler & Van Loan), cached by regime and length (the
segments of a period repeat while the duty does). State events -- the current reaching zero,
the source diode blocking, the chopper comparator, the trip levels, stick/slip of the shaft,
the peak current limit, the battery table's breakpoints, the fuse melting -- are located
inside a segment by the Illinois method and the segment is split there.

The switching loss of each leg transition (a per-transition energy, or the switch's rise and
fall times: see :func:`switching_energy`) is taken from the bus capacitor at the transition
and booked apart from the conduction loss; the current's range over each PWM period (at the
segment ends, which hold every switching instant) gives the ripple of the last complete one.

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
    A_BRAKE,
    A_BRAKE_PEAK_W,
    A_BRIDGE,
    A_BUS_MAX,
    A_BUS_MIN,
    A_BYPASS_TIME,
    A_CACHE_MISSES,
    A_COPPER,
    A_COUPLING,
    A_ESR,
    A_FRICTION,
    A_FUSE_ARC,
    A_FUSE_HEAT,
    A_FUSE_MELT_TIME,
    A_FUSE_PEAK,
    A_I2T,
    A_LIMIT_EVENTS,
    A_LOAD,
    A_LOCK,
    A_PEAK_I,
    A_PEAK_I_TIME,
    A_PERIODS,
    A_PRECHARGE,
    A_RIPPLE_LAST,
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
    M_BRAKE,
    M_FSIGN,
    M_LEG_A,
    M_LEG_B,
    M_LIMITED,
    M_MELTED,
    M_OPEN,
    M_PRE,
    M_SEG,
    M_SIGMA,
    M_STUCK,
    M_TRIP,
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
    Q_BLANK,
    Q_BRAKE_OFF,
    Q_BRAKE_ON,
    Q_BRAKE_R,
    Q_C,
    Q_COUNTS,
    Q_EDGE,
    Q_ESR,
    Q_ESW,
    Q_ESW_I,
    Q_ESW_V,
    Q_FS,
    Q_FUSE,
    Q_FUSE_IMIN,
    Q_FUSE_TAU,
    Q_IPK,
    Q_J,
    Q_K,
    Q_L,
    Q_LOCK,
    Q_LS,
    Q_MINPULSE,
    Q_MOD,
    Q_OV,
    Q_PRE_R,
    Q_PRE_V,
    Q_R,
    Q_REGEN,
    Q_RESTART_DELAY,
    Q_RESTART_MARGIN,
    Q_RON,
    Q_RS,
    Q_SLOPE,
    Q_SWITCHING,
    Q_TC,
    Q_TD,
    Q_TF,
    Q_TL,
    Q_TR,
    Q_UNIPOLAR,
    Q_UV,
    Q_VCMD,
    Q_VD,
    Q_VNOM,
    R_ARMATURE_V,
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
    TRIP_BUS_COLLAPSE,
    TRIP_BYPASS,
    TRIP_FUSE,
    TRIP_OVER_VOLTAGE,
    TRIP_RESTART,
    TRIP_UNDER_VOLTAGE,
)
from dcsim.engine.expm import expm, matmul_small
from dcsim.plant.mechanics import fill_shaft_rows, friction_state, inertia_change

# linear forms over the augmented state (rows of `forms`)
F_VN = 0  # bus node voltage
F_IS = 1  # supply-line current
F_VSRC = 2  # source open-circuit voltage
F_ICAP = 3  # capacitor current
F_DPLUS = 4  # L di/dt at i = 0 if the bridge conducted for positive current
F_DMINUS = 5  # ... for negative current
F_G0 = 6  # first guard row: every guard of the regime is a linear form, >= 0 while it holds
MAX_G = 16
N_F = F_G0 + MAX_G + 2  # the last two: the peak current limit (while active)
# scalars of the present regime (`fsc`)
C_G = 0  # bridge gain g
C_RB = 1  # bridge series resistance [ohm]
C_VDROP = 2  # diode drop term [V], sign included
C_GBR = 3  # brake conductance [S]
C_SENS = 4  # 1 when the connection depends on the current direction
C_RSRC = 5  # supply-line resistance incl. pre-charge [ohm]
C_NG = 6  # number of guard rows (without the limit rows)
N_C = 7
N_WORK = 18  # values per point kept by `point_values`
CACHE_SLOTS = 4096
FORM_SLOTS = 256
MAX_BP = 64  # schedule breakpoints per period beyond the grid
STATUS_LIMIT = 100  # internal: the peak current limit ended the pulse
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
    Returns ``(g, r_b [ohm], v_drop [V], sensitive)``.
    """
    if leg_a == LEG_AVG:
        delta = 2.0 * q[Q_TD] * q[Q_FS]  # fraction of the period each leg spends in dead time
        g = q[Q_MOD] - delta * sigma
        rb = 2.0 * q[Q_RON] * (1.0 - delta)
        vdrop = 2.0 * q[Q_VD] * delta * sigma
        return g, rb, vdrop, delta > 0.0
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
    return sa - sb, n_sw * q[Q_RON], n_d * q[Q_VD] * sigma, n_d > 0


@njit(cache=True, error_model="numpy", inline="always")
def bridge_enabled(md):
    return md[M_PRE] == 0 and md[M_TRIP] == 0


@njit(cache=True, error_model="numpy")
def compute_forms(md, q, forms, fsc):
    """Linear forms (node voltage, supply current, ...) and scalars of the present regime."""
    sigma = 1.0 if md[M_SIGMA] >= 0 else -1.0
    g, rb, vdrop, sens = connection(md[M_LEG_A], md[M_LEG_B], sigma, q)
    open_line = md[M_OPEN] == 1 or md[M_MELTED] == 1
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
    gp, rbp, vdp, sp = connection(md[M_LEG_A], md[M_LEG_B], 1.0, q)
    gn, rbn, vdn, sn = connection(md[M_LEG_A], md[M_LEG_B], -1.0, q)
    for j in range(N_A):
        forms[F_DPLUS, j] = gp * forms[F_VN, j]
        forms[F_DMINUS, j] = gn * forms[F_VN, j]
    forms[F_DPLUS, S_W] -= q[Q_K]
    forms[F_DMINUS, S_W] -= q[Q_K]
    forms[F_DPLUS, S_ONE] -= vdp
    forms[F_DMINUS, S_ONE] -= vdn
    fsc[C_G] = g
    fsc[C_RB] = rb
    fsc[C_VDROP] = vdrop
    fsc[C_GBR] = gbr
    fsc[C_SENS] = 1.0 if sens else 0.0
    fsc[C_RSRC] = rsrc
    _guard_rows(md, q, forms, fsc)


@njit(cache=True, error_model="numpy")
def _guard_rows(md, q, forms, fsc):
    """The guards of the regime as linear forms (rows ``F_G0 ...``), each >= 0 while it holds:
    stick/slip, current direction or the zero-current window, the source diode, the brake
    comparator, the trip levels, bus above zero, the pre-charge bypass level, the battery
    table's breakpoints; then the two rows of the peak current limit, ``I_pk -+ i``."""
    n = F_G0
    for r in range(F_G0, N_F):
        for j in range(N_A):
            forms[r, j] = 0.0
    if q[Q_LOCK] < 0.5 and q[Q_TC] > 0.0:
        if md[M_STUCK] == 1:  # T_c - |K i - T_L| >= 0 as two rows
            forms[n, S_I] = -q[Q_K]
            forms[n, S_ONE] = q[Q_TC] - q[Q_TL]
            forms[n + 1, S_I] = q[Q_K]
            forms[n + 1, S_ONE] = q[Q_TC] + q[Q_TL]
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
    if q[Q_REGEN] < 0.5 and md[M_MELTED] == 0:
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
    fsc[C_NG] = n - F_G0
    lim = F_G0 + MAX_G
    forms[lim, S_I] = -1.0
    forms[lim, S_ONE] = q[Q_IPK]
    forms[lim + 1, S_I] = 1.0
    forms[lim + 1, S_ONE] = q[Q_IPK]


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
        m[S_I, S_ONE] -= fsc[C_VDROP] / ll
    stuck = md[M_STUCK] == 1
    fill_shaft_rows(m, bvec, q[Q_K], q[Q_J], q[Q_B], q[Q_TL] + q[Q_TC] * md[M_FSIGN], stuck)
    m[S_W, S_ONE] = bvec[S_W]
    for j in range(N_A):
        m[S_VC, j] = forms[F_ICAP, j] / q[Q_C]
    open_line = md[M_OPEN] == 1 or md[M_MELTED] == 1
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
    k = k * 2 + (1 if (md[M_OPEN] == 1 or md[M_MELTED] == 1) else 0)
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
    else:
        work[row, 4] = q[Q_B] * w * w + q[Q_TC] * md[M_FSIGN] * w
    work[row, 5] = q[Q_TL] * w
    work[row, 6] = fsc[C_RB] * i * i + fsc[C_VDROP] * i
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
    for r in range(1, 3):
        t = t0 + 0.5 * tau * r
        ia = math.sqrt(work[r, 0])
        if ia > acc[A_PEAK_I]:
            acc[A_PEAK_I] = ia
            acc[A_PEAK_I_TIME] = t
        acc[A_BUS_MAX] = max(acc[A_BUS_MAX], work[r, 11])
        acc[A_BUS_MIN] = min(acc[A_BUS_MIN], work[r, 11])
        acc[A_BRAKE_PEAK_W] = max(acc[A_BRAKE_PEAK_W], work[r, 7])
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
def update_modes(y, md, q, forms, fsc, t, acc, trips, ocv_soc, ocv_v):
    """Bring every discrete mode in line with the state ``y`` (after a located crossing, an
    event or a change of the legs); returns a status (bus collapse, empty battery)."""
    for _ in range(8):
        compute_forms(md, q, forms, fsc)
        changed = False
        i = y[S_I]
        stuck, fsign = friction_state(y[S_W], q[Q_K] * i - q[Q_TL], q[Q_TC], q[Q_LOCK] > 0.5)
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
        if q[Q_REGEN] < 0.5 and md[M_MELTED] == 0:
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
            if q[Q_OV] > 0.0 and vn >= q[Q_OV]:
                kind = TRIP_OVER_VOLTAGE
            elif q[Q_UV] > 0.0 and vn <= q[Q_UV]:
                kind = TRIP_UNDER_VOLTAGE
            elif vn < 0.0:
                # the bus capacitor is empty (a melted fuse, a blocked source): the bridge
                # cannot hold its duty; it turns off and its diodes clamp the bus
                kind = TRIP_BUS_COLLAPSE
            if kind != 0:
                md[M_TRIP] = 1
                md[M_LEG_A] = LEG_OFF
                md[M_LEG_B] = LEG_OFF
                acc[A_TRIP_TIME] = t
                log_trip(trips, acc, t, kind, vn)
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
    reached)``; ``STATUS_LIMIT`` when the peak current limit ended the pulse (the caller then
    switches the legs off for the rest of the period)."""
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
    than the minimum pulse dropped.
    """
    vnom = q[Q_VNOM]
    m = q[Q_VCMD] / vnom if vnom > 0.0 else 0.0
    m = min(1.0, max(-1.0, m))
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


@njit(cache=True, error_model="numpy")
def leg_changes(d, prev, edge_aligned, period, td, invert, ct, cs, et, es):
    """Changes of one leg's state over a period: times into ``ct``, states into ``cs``.

    The intended timeline comes from comparing the duty with the carrier (centre-aligned:
    high for ``d T`` centred in the period; edge-aligned: high from the period start);
    ``invert`` gives the complementary leg of bipolar PWM. Each edge turns the leg off for the
    dead time first (the incoming switch is delayed). ``prev`` is the leg's intended state at
    the end of the previous period. Returns ``(count, intended state at the period end,
    number of edges)``.
    """
    hi = LEG_LOW if invert else LEG_HIGH
    lo = LEG_HIGH if invert else LEG_LOW
    ne = 0
    if d >= 1.0:
        start = hi
        end = hi
    elif d <= 0.0:
        start = lo
        end = lo
    elif edge_aligned:
        start = hi
        end = lo
    else:
        start = lo
        end = lo
    if start != prev:
        et[ne] = 0.0
        es[ne] = start
        ne += 1
    if 0.0 < d < 1.0:
        if edge_aligned:
            et[ne] = d * period
            es[ne] = lo
            ne += 1
        else:
            et[ne] = 0.5 * (1.0 - d) * period
            es[ne] = hi
            ne += 1
            et[ne] = 0.5 * (1.0 + d) * period
            es[ne] = lo
            ne += 1
    n = 0
    for k in range(ne):
        nxt = et[k + 1] if k + 1 < ne else period
        if td > 0.0:
            ct[n] = et[k]
            cs[n] = LEG_OFF
            n += 1
            if et[k] + td < nxt:
                ct[n] = et[k] + td
                cs[n] = es[k]
                n += 1
        else:
            ct[n] = et[k]
            cs[n] = es[k]
            n += 1
    return n, end, ne


@njit(cache=True, error_model="numpy", inline="always")
def _state_at(tau, start, ct, cs, n, tol):
    s = start
    for k in range(n):
        if ct[k] <= tau + tol:
            s = cs[k]
    return s


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


@njit(cache=True, error_model="numpy")
def build_schedule(q, md, period, n_grid, tau_from, prev_a, prev_b, override_a, override_b,
                   la_now, lb_now, bt, ba, bb, blim, bgrid, bedges, sched, ssched):  # fmt: skip
    """Segments of one PWM period (from local time ``tau_from``): breakpoints ``bt`` with the
    leg states, the peak-limit flag, the grid index (or -1) and the leg edges at each.

    ``override_a >= 0`` builds the rest of a period after the peak limit ended the pulse: the
    legs go to the override states (through the dead time) from ``tau_from``.
    Returns ``(segments, intended end state of A, of B, modulation)``.
    """
    h = period / n_grid
    tol = 1e-9 * h
    cta = sched[0]
    ctb = sched[1]
    ea = sched[2]  # edge times (for switching energy)
    csa = ssched[0]
    csb = ssched[1]
    td = q[Q_TD]
    da, db, m = modulation(q)
    nea = 0
    if override_a >= 0:
        na = 0
        nb_ = 0
        start_a = la_now
        start_b = lb_now
        for leg in range(2):
            now = la_now if leg == 0 else lb_now
            tgt = override_a if leg == 0 else override_b
            ct = cta if leg == 0 else ctb
            cs = csa if leg == 0 else csb
            n = 0
            if now != tgt:
                ea[nea] = tau_from
                nea += 1
                if td > 0.0 and now != LEG_OFF:
                    ct[n] = tau_from
                    cs[n] = LEG_OFF
                    n += 1
                    if tau_from + td < period:
                        ct[n] = tau_from + td
                        cs[n] = tgt
                        n += 1
                else:
                    ct[n] = tau_from
                    cs[n] = tgt
                    n += 1
            if leg == 0:
                na = n
            else:
                nb_ = n
        end_a = override_a
        end_b = override_b
    else:
        bipolar = q[Q_UNIPOLAR] < 0.5
        edge = q[Q_EDGE] > 0.5
        et = sched[3]
        es = ssched[2]
        na, end_a, _ = leg_changes(da, prev_a, edge, period, td, False, cta, csa, et, es)
        if bipolar:
            nb_, end_b, _ = leg_changes(da, prev_b, edge, period, td, True, ctb, csb, et, es)
        else:
            nb_, end_b, _ = leg_changes(db, prev_b, edge, period, td, False, ctb, csb, et, es)
        start_a = prev_a
        start_b = prev_b
        for k in range(na):
            if csa[k] == LEG_OFF or td == 0.0:
                ea[nea] = cta[k]
                nea += 1
        for k in range(nb_):
            if csb[k] == LEG_OFF or td == 0.0:
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
    # peak limit: active in the driving state after the blanking time from each pulse start
    drive_a = LEG_HIGH if m >= 0.0 else LEG_LOW
    drive_b = LEG_LOW if m >= 0.0 else LEG_HIGH
    use_limit = q[Q_IPK] > 0.0 and override_a < 0
    if use_limit and q[Q_BLANK] > 0.0:
        was = False
        for k in range(nbp - 1):
            sa = _state_at(bt[k], start_a, cta, csa, na, tol)
            sb = _state_at(bt[k], start_b, ctb, csb, nb_, tol)
            drv = sa == drive_a and sb == drive_b
            if drv and not was and bt[k] + q[Q_BLANK] < period - tol:
                nbp = _insert_sorted(bt, nbp, bt[k] + q[Q_BLANK], tol)
            was = drv
    pulse_start = -1.0
    was = False
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
    rec[R_LOAD_TORQUE, row] = q[Q_TL]
    rec[R_SUPPLY_CURRENT, row] = work[0, 15]
    if q[Q_LOCK] > 0.5:
        fr = 0.0
    elif md[M_STUCK] == 1:
        fr = q[Q_K] * i - q[Q_TL]
    else:
        fr = q[Q_B] * x[S_W] + q[Q_TC] * md[M_FSIGN]
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
    acc[A_PEAK_I] = abs(x[S_I])
    acc[A_FUSE_MELT_TIME] = -1.0
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
                counters, rec, acc, trips, ocv_soc, ocv_v, legs, cache_key, cache_tau,
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
    sched = np.zeros((5, 8))
    ssched = np.zeros((4, 8), dtype=np.int64)
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
        # the current's range over the period (at every segment end: the switching instants
        # are segment ends, and between them the current of each linear circuit is monotone
        # for a locked rotor, nearly so on the scale of a period for a turning one)
        i_lo = x[S_I]
        i_hi = x[S_I]
        # auto-restart after a trip, checked at each period start
        if (
            md[M_TRIP] == 1
            and q[Q_AUTO_RESTART] > 0.5
            and t_p >= acc[A_TRIP_TIME] + q[Q_RESTART_DELAY] * (1.0 - 1e-12)
        ):
            vn = _dot(forms[F_VN], x)
            lo_ok = q[Q_UV] <= 0.0 or vn >= q[Q_UV] + q[Q_RESTART_MARGIN]
            hi_ok = q[Q_OV] <= 0.0 or vn <= q[Q_OV] - q[Q_RESTART_MARGIN]
            if lo_ok and hi_ok:
                md[M_TRIP] = 0
                log_trip(trips, acc, t_p, TRIP_RESTART, vn)
        enabled = bridge_enabled(md)
        if switching:
            if enabled:
                nseg, end_a, end_b, m = build_schedule(
                    q, md, period, n_grid, 0.0, legs[0], legs[1], -1, -1, md[M_LEG_A],
                    md[M_LEG_B], bt, ba, bb, blim, bgrid, bedges, sched, ssched,
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
        limited_now = False
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
                md[M_LEG_A] = la
                md[M_LEG_B] = lb
                carry[0] = 0
                # the forms of the new leg states, from a small cache (they repeat every
                # period); the other modes are still right if every guard holds at x
                fk = mode_key(md) * 4 + md[M_TRIP] * 2 + md[M_MELTED]
                fs_ = fk & (FORM_SLOTS - 1)
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
            lim = blim[k] == 1 and bridge_enabled(md) and not limited_now
            t = t0
            hit_limit = False
            while True:
                at_event = k_ev < n_ev and ev_t[k_ev] <= t1
                target = ev_t[k_ev] if at_event else t1
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
                # the comparator ends the pulse: legs to their off state for the rest of the
                # period (bipolar: the opposite diagonal; unipolar: both low, the current
                # recirculates)
                acc[A_LIMIT_EVENTS] += 1.0
                limited_now = True
                if q[Q_UNIPOLAR] > 0.5:
                    oa, ob = LEG_LOW, LEG_LOW
                elif q[Q_MOD] >= 0.0:
                    oa, ob = LEG_LOW, LEG_HIGH
                else:
                    oa, ob = LEG_HIGH, LEG_LOW
                tau_now = t - t_p
                nseg, end_a, end_b, m = build_schedule(
                    q, md, period, n_grid, tau_now, legs[0], legs[1], oa, ob, md[M_LEG_A],
                    md[M_LEG_B], bt, ba, bb, blim, bgrid, bedges, sched, ssched,
                )  # fmt: skip
                k = 0
                md[M_LIMITED] = 1
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
                    write_row(x, md, q, forms, fsc, t1, rec, row, acc, 1.0 * md[M_LIMITED], rowwork)
                    if n_cp > 0:
                        copy_record(cs, crec, row)
                    row += 1
            if at_end:
                break
            k += 1
        md[M_LIMITED] = 0
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
