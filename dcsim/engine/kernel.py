"""The compiled fixed-step hybrid loop.

Method
------
Between regime changes the drive equations are linear, ``x' = A_r x + b_r`` with ``A_r``
fixed by the regime ``r`` (shaft free or stuck; bridge in control or fully on either way;
diode conducting or blocked). The kernel advances that linear part *exactly* with the matrix
exponential (:mod:`dcsim.engine.expm`), so a very stiff armature (electrical time constant
below a microsecond beside a mechanical one of tens of milliseconds) is stable and exact at
any step. The only non-linear term, the bus current ``v_a i / v`` of the bridge in control
with a bus capacitor, is predicted by the ETD2RK scheme of Cox & Matthews and corrected once
with the term quadratic over the step, integrated exactly with phi1..phi3 (third order).

Regime changes are located inside the step: each regime has a guard function (speed for a
sliding shaft, breakaway margin for a stuck one, bus headroom for the bridge, the diode's
forward voltage; with a brush drop ``V_b`` the current for a current of either sign, and
``2 V_b - |v_a - K w|`` for a current held at zero by the blocking brushes) and a sign
change of the guard over the step is found by the Illinois method, the step is split there
and continued in the new regime. Scenario events land at
their exact instants by splitting the step at the event time.

The integrals of the summary (I^2 t and every energy term) are accumulated at full rate with
Simpson's rule on the exact states at the start, middle and end of each (sub-)step.

A gearbox (``[gear]``, :func:`dcsim.plant.mechanics.gear_torques`) reaches the kernel as a
constant torque in ``P_TL`` and a Coulomb-like torque in ``P_TC``, which is exact for a load
torque of constant sign with the power-flow direction taken from ``sgn(w) sgn(T_L)``; the
kernel only splits them off again (``P_GEAR_CONST``, ``P_GEAR_COULOMB``) to book the gear's
loss in ``A_GEAR`` apart from the friction and the load's work. A load torque that changes
sign by itself (a spring), the gear's no-load loss and the loss on the torque that
accelerates the load's inertia are outside this model.

References
----------
.. [1] S. M. Cox and P. C. Matthews, J. Comput. Phys. 176 (2002) 430-455,
   doi:10.1006/jcph.2002.6995 (ETD and ETD2RK).
.. [2] M. Hochbruck and A. Ostermann, "Exponential integrators", Acta Numerica 19 (2010)
   209-286, doi:10.1017/S0962492910000048 (exactness for linear problems, stiff order).
.. [3] M. Dowell and P. Jarratt, "A modified regula falsi method for computing the root of
   an equation", BIT 11 (1971) 168-174 (the Illinois method).
.. [4] L. F. Shampine and S. Thompson, "Event location for ordinary differential equations",
   Comput. Math. Appl. 39 (2000) 43-54 (locating state events inside a step).
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from dcsim.controllers.cascade import control_sample, copy_record
from dcsim.engine.expm import phi_blocks
from dcsim.engine.layout import (
    A_BRUSH_DROP,
    A_BRUSH_FRICTION,
    A_BUS_MAX,
    A_BUS_MIN,
    A_COPPER,
    A_COUPLING,
    A_FRICTION,
    A_GEAR,
    A_I2T,
    A_IRON,
    A_LOAD,
    A_LOCK,
    A_PEAK_I,
    A_PEAK_I_TIME,
    A_SOURCE_LOSS,
    A_SPLITS,
    A_SUPPLY,
    N_STATE,
    P_B,
    P_BE,
    P_C,
    P_GEAR_CONST,
    P_GEAR_COULOMB,
    P_J,
    P_K,
    P_L,
    P_LOCK,
    P_R,
    P_REGEN,
    P_RS,
    P_TBR,
    P_TC,
    P_TH,
    P_TL,
    P_TS,
    P_VBRUSH,
    P_VCMD,
    P_VS,
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
    STATUS_BUS_NEGATIVE,
    STATUS_NONFINITE,
    STATUS_OK,
    STATUS_REGEN_NO_PATH,
    X_BUS,
    X_CURRENT,
    X_POSITION,
    X_SPEED,
)
from dcsim.plant.machine import fill_armature_row
from dcsim.plant.mechanics import (
    dry_drag_levels,
    fill_shaft_rows,
    friction_state,
    inertia_change,
)
from dcsim.power.bus import bus_without_capacitor, fill_bus_row

N_REGIME = 36  # 2 shaft states x 3 bridge states x 2 source states x 3 current states
N_WORK = 14  # values per point kept by `powers`
BRIDGE_CONTROL = 0
BRIDGE_FULL_POS = 1
BRIDGE_FULL_NEG = 2
CURRENT_POS = 0  # current >= 0 (or its direction does not matter: no brush drop)
CURRENT_NEG = 1
CURRENT_HELD = 2  # held at exactly zero: the brushes block


@njit(cache=True, error_model="numpy", inline="always")
def current_sign(r):
    """Direction the brush drop opposes in regime ``r``: +1, -1, or 0 while held at zero."""
    c = r // 12
    if c == CURRENT_POS:
        return 1.0
    if c == CURRENT_NEG:
        return -1.0
    return 0.0


@njit(cache=True, error_model="numpy", inline="always")
def _bridge_state(x, p, has_cap):
    """0: bridge applies the command; 1 / 2: fully on, positive / negative."""
    vc = p[P_VCMD]
    if vc == 0.0:
        return BRIDGE_CONTROL
    if has_cap:
        if abs(vc) <= x[X_BUS]:
            return BRIDGE_CONTROL
    else:
        i = x[X_CURRENT]
        vs = p[P_VS]
        rs = p[P_RS]
        full = vs - rs * i if vc > 0.0 else vs + rs * i
        disc = vs * vs - 4.0 * rs * vc * i
        if abs(vc) <= full and disc >= 0.0:
            return BRIDGE_CONTROL
    return BRIDGE_FULL_POS if vc > 0.0 else BRIDGE_FULL_NEG


@njit(cache=True, error_model="numpy", inline="always")
def regime_of(x, p, has_cap):
    """Regime code and Coulomb friction sign at state ``x``.

    With a brush drop ``V_b`` the current's regime is its sign, or held at zero while the
    armature voltage less the back-EMF stays within ``+-2 V_b`` (the brushes block).
    """
    sliding, breakaway = dry_drag_levels(p[P_TC], p[P_TS], p[P_TBR], p[P_TH])
    stuck, fsign = friction_state(
        x[X_SPEED], p[P_K] * x[X_CURRENT] - p[P_TL], sliding, breakaway, p[P_LOCK] > 0.5
    )
    bridge = _bridge_state(x, p, has_cap)
    blocked = has_cap and p[P_REGEN] < 0.5 and x[X_BUS] > p[P_VS]
    r = (1 if stuck else 0) + 2 * bridge + (6 if blocked else 0)
    if p[P_VBRUSH] > 0.0:
        i = x[X_CURRENT]
        if i < 0.0:
            r += 12 * CURRENT_NEG
        elif i == 0.0:
            vb, va, ib, isup = bus_state(x, p, has_cap, r)
            drive = va - p[P_K] * x[X_SPEED]
            if drive < -2.0 * p[P_VBRUSH]:
                r += 12 * CURRENT_NEG
            elif drive <= 2.0 * p[P_VBRUSH]:
                r += 12 * CURRENT_HELD
    return r, fsign


@njit(cache=True, error_model="numpy", inline="always")
def bus_state(x, p, has_cap, r):
    """Bus voltage, armature voltage, bridge bus current and supply current [V, V, A, A]."""
    bridge = (r // 2) % 3
    blocked = (r % 12) >= 6
    i = x[X_CURRENT]
    vc = p[P_VCMD]
    vs = p[P_VS]
    rs = p[P_RS]
    if has_cap:
        vb = x[X_BUS]
        if bridge == BRIDGE_CONTROL:
            va = vc
            ib = vc * i / vb if vb > 0.0 else 0.0
        elif bridge == BRIDGE_FULL_POS:
            va = vb
            ib = i
        else:
            va = -vb
            ib = -i
        isup = 0.0 if blocked else (vs - vb) / rs
    else:
        if bridge == BRIDGE_CONTROL:
            va = vc
            vb, ib = bus_without_capacitor(vc * i, vs, rs)
        elif bridge == BRIDGE_FULL_POS:
            vb = vs - rs * i
            va = vb
            ib = i
        else:
            vb = vs + rs * i
            va = -vb
            ib = -i
        isup = ib
    return vb, va, ib, isup


@njit(cache=True, error_model="numpy")
def system_matrix(r, p, has_cap, a):
    """Fill ``A_r`` (``a`` is zeroed first). Runs only when a propagator is (re)built."""
    a[:, :] = 0.0
    stuck = (r % 2) == 1
    bridge = (r // 2) % 3
    blocked = (r % 12) >= 6
    rs = p[P_RS]
    if has_cap:
        gain = 0.0
        if bridge == BRIDGE_FULL_POS:
            gain = 1.0
        elif bridge == BRIDGE_FULL_NEG:
            gain = -1.0
        fill_armature_row(a, np.zeros(N_STATE), p[P_R], p[P_L], p[P_K], 0.0, gain)
        fill_bus_row(a, np.zeros(N_STATE), p[P_VS], rs, p[P_C], not blocked, gain)
    else:
        r_loop = p[P_R] if bridge == BRIDGE_CONTROL else p[P_R] + rs
        fill_armature_row(a, np.zeros(N_STATE), r_loop, p[P_L], p[P_K], 0.0, 0.0)
    fill_shaft_rows(a, np.zeros(N_STATE), p[P_K], p[P_J], p[P_B] + p[P_BE], 0.0, stuck)
    if r // 12 == CURRENT_HELD:
        for j in range(N_STATE):
            a[X_CURRENT, j] = 0.0


@njit(cache=True, error_model="numpy")
def forcing(r, fsign, p, has_cap, b, dummy):
    """Fill the constant forcing ``b_r`` of the step (``dummy``: a scratch matrix)."""
    b[:] = 0.0
    stuck = (r % 2) == 1
    bridge = (r // 2) % 3
    blocked = (r % 12) >= 6
    vfix = 0.0
    if bridge == BRIDGE_CONTROL:
        vfix = p[P_VCMD]
    elif not has_cap:
        vfix = p[P_VS] if bridge == BRIDGE_FULL_POS else -p[P_VS]
    vfix -= 2.0 * p[P_VBRUSH] * current_sign(r)  # the brushes' drop against the current
    fill_armature_row(dummy, b, p[P_R], p[P_L], p[P_K], vfix, 0.0)
    sliding, breakaway = dry_drag_levels(p[P_TC], p[P_TS], p[P_TBR], p[P_TH])
    fill_shaft_rows(dummy, b, p[P_K], p[P_J], p[P_B] + p[P_BE], p[P_TL] + sliding * fsign, stuck)
    if has_cap:
        fill_bus_row(dummy, b, p[P_VS], p[P_RS], p[P_C], not blocked, 0.0)
    if r // 12 == CURRENT_HELD:
        b[X_CURRENT] = 0.0


@njit(cache=True, error_model="numpy", inline="always")
def guard(x, p, has_cap, r, fsign):
    """Smallest guard of regime ``r`` at ``x``: >= 0 while the regime holds."""
    g = math.inf
    stuck = (r % 2) == 1
    bridge = (r // 2) % 3
    blocked = (r % 12) >= 6
    sliding, ts = dry_drag_levels(p[P_TC], p[P_TS], p[P_TBR], p[P_TH])  # breakaway level
    if p[P_LOCK] < 0.5 and ts > 0.0:
        if stuck:
            g = min(g, ts - abs(p[P_K] * x[X_CURRENT] - p[P_TL]))
        elif fsign != 0.0:
            g = min(g, x[X_SPEED] * fsign)
    vc = p[P_VCMD]
    if vc != 0.0:
        if has_cap:
            head = x[X_BUS]
        else:
            i = x[X_CURRENT]
            head = p[P_VS] - p[P_RS] * i if vc > 0.0 else p[P_VS] + p[P_RS] * i
        if bridge == BRIDGE_CONTROL:
            g = min(g, head - abs(vc))
        else:
            g = min(g, abs(vc) - head)
            g = min(g, head)  # the bus of a fully-on bridge must not go below zero
    if has_cap and p[P_REGEN] < 0.5:
        if blocked:
            g = min(g, x[X_BUS] - p[P_VS])
        else:
            g = min(g, p[P_VS] - x[X_BUS])
    if (not has_cap) and p[P_REGEN] < 0.5:
        vb, va, ib, isup = bus_state(x, p, has_cap, r)
        g = min(g, ib)
    if p[P_VBRUSH] > 0.0:
        cs = current_sign(r)
        if cs != 0.0:
            g = min(g, x[X_CURRENT] * cs)
        else:  # held: |v_a - K w| <= 2 V_b
            vb, va, ib, isup = bus_state(x, p, has_cap, r)
            drive = va - p[P_K] * x[X_SPEED]
            g = min(g, 2.0 * p[P_VBRUSH] - abs(drive))
    return g


@njit(cache=True, error_model="numpy", inline="always")
def _matvec_add(cache, slot, which, v, out, scale):
    """``out += scale * cache[slot, which] @ v``, indexing in place.

    Fixed trip counts (N_STATE is a compile-time constant) let LLVM unroll the products, and
    indexing the cache instead of taking views keeps reference counting out of the loop.
    """
    for i in range(N_STATE):
        s = 0.0
        for j in range(N_STATE):
            s += cache[slot, which, i, j] * v[j]
        out[i] += scale * s


@njit(cache=True, error_model="numpy")
def propagate(x, b, cache, slot, nl_coef, x1, xm, force, dg_vec):
    """Advance one (sub-)step: exact for the linear part, a polynomial correction for the
    bus term.

    ``cache[slot]`` holds ``e, f1, f2`` of the step, ``eh, f1h, f2h`` of its half and
    ``f3, f3h`` (see :func:`store_propagators`). ``nl_coef`` is ``-v_cmd / C``: with the
    bridge in control across a capacitor the bus row gets ``g = nl_coef * i / v``.

    For that term the step is predicted with ``g`` linear in time (ETD2RK, Cox & Matthews
    2002), then corrected once with ``g`` quadratic through its values at the start, middle and
    end of the step, integrated exactly against the exponential (:func:`phi_blocks`). Writes
    the end state into ``x1`` and the mid-step state into ``xm``; ``force`` and ``dg_vec``
    are scratch.
    """
    for k in range(N_STATE):
        force[k] = b[k]
        x1[k] = 0.0
        xm[k] = 0.0
    g0 = 0.0
    if nl_coef != 0.0:
        g0 = nl_coef * x[X_CURRENT] / max(x[X_BUS], 1e-12)
        force[X_BUS] += g0
    _matvec_add(cache, slot, 0, x, x1, 1.0)
    _matvec_add(cache, slot, 1, force, x1, 1.0)
    _matvec_add(cache, slot, 3, x, xm, 1.0)
    _matvec_add(cache, slot, 4, force, xm, 1.0)
    if nl_coef != 0.0:
        # the linear-part solution (kept in force) is shared by predictor and corrector
        for k in range(N_STATE):
            force[k] = x1[k]
            dg_vec[k] = xm[k]
        # predictor: g linear from g0 to g(x1)
        ga = nl_coef * x1[X_CURRENT] / max(x1[X_BUS], 1e-12)
        d = ga - g0
        for k in range(N_STATE):
            x1[k] += cache[slot, 2, k, X_BUS] * d
            xm[k] += 0.5 * cache[slot, 5, k, X_BUS] * d
        # corrector: g quadratic through g0, g(xm), g(x1)
        gm = nl_coef * xm[X_CURRENT] / max(xm[X_BUS], 1e-12)
        g1 = nl_coef * x1[X_CURRENT] / max(x1[X_BUS], 1e-12)
        c1h = 4.0 * gm - 3.0 * g0 - g1  # h * c1
        c2h2 = 2.0 * (g1 - 2.0 * gm + g0)  # h^2 * c2
        for k in range(N_STATE):
            x1[k] = (
                force[k] + cache[slot, 2, k, X_BUS] * c1h + 2.0 * cache[slot, 6, k, X_BUS] * c2h2
            )
            xm[k] = (
                dg_vec[k]
                + 0.5 * cache[slot, 5, k, X_BUS] * c1h
                + 0.5 * cache[slot, 7, k, X_BUS] * c2h2
            )


@njit(cache=True, error_model="numpy", inline="always")
def powers(x, p, has_cap, r, fsign, work, row):
    """Integrands at ``x`` into ``work[row]``: i^2, source power, source and copper loss,
    friction, load; then bus voltage, armature voltage, bridge and supply current; then brush
    friction and iron loss (hysteresis ``T_h |w|`` + eddy current ``B_e w^2``), the brush drop,
    and the gear loss (``P_TC`` and ``P_TL`` hold the gear's parts too: they are split off
    here)."""
    vb, va, ib, isup = bus_state(x, p, has_cap, r)
    i = x[X_CURRENT]
    w = x[X_SPEED]
    work[row, 0] = i * i
    work[row, 1] = p[P_VS] * isup
    work[row, 2] = p[P_RS] * isup * isup
    work[row, 3] = p[P_R] * i * i
    work[row, 4] = p[P_B] * w * w + (p[P_TC] - p[P_GEAR_COULOMB]) * fsign * w
    work[row, 5] = (p[P_TL] - p[P_GEAR_CONST]) * w
    work[row, 6] = vb
    work[row, 7] = va
    work[row, 8] = ib
    work[row, 9] = isup
    work[row, 10] = p[P_TBR] * fsign * w
    work[row, 11] = p[P_TH] * fsign * w + p[P_BE] * w * w
    work[row, 12] = 2.0 * p[P_VBRUSH] * current_sign(r) * i
    work[row, 13] = (p[P_GEAR_COULOMB] * fsign + p[P_GEAR_CONST]) * w


@njit(cache=True, error_model="numpy")
def accumulate(x0, xm, x1, hh, t0, p, has_cap, r, fsign, acc, work, reuse_start):
    """Add Simpson's-rule integrals over a (sub-)step and update peaks.

    With ``reuse_start`` the integrands at ``x0`` are the previous step's end values, still
    in ``work[2]`` (same regime, no event between).
    """
    w0 = hh / 6.0
    wm = 4.0 * hh / 6.0
    if reuse_start:
        for k in range(N_WORK):
            work[0, k] = work[2, k]
    else:
        powers(x0, p, has_cap, r, fsign, work, 0)
    powers(xm, p, has_cap, r, fsign, work, 1)
    powers(x1, p, has_cap, r, fsign, work, 2)
    acc[A_I2T] += w0 * (work[0, 0] + work[2, 0]) + wm * work[1, 0]
    acc[A_SUPPLY] += w0 * (work[0, 1] + work[2, 1]) + wm * work[1, 1]
    acc[A_SOURCE_LOSS] += w0 * (work[0, 2] + work[2, 2]) + wm * work[1, 2]
    acc[A_COPPER] += w0 * (work[0, 3] + work[2, 3]) + wm * work[1, 3]
    acc[A_FRICTION] += w0 * (work[0, 4] + work[2, 4]) + wm * work[1, 4]
    acc[A_LOAD] += w0 * (work[0, 5] + work[2, 5]) + wm * work[1, 5]
    acc[A_BRUSH_FRICTION] += w0 * (work[0, 10] + work[2, 10]) + wm * work[1, 10]
    acc[A_IRON] += w0 * (work[0, 11] + work[2, 11]) + wm * work[1, 11]
    acc[A_BRUSH_DROP] += w0 * (work[0, 12] + work[2, 12]) + wm * work[1, 12]
    acc[A_GEAR] += w0 * (work[0, 13] + work[2, 13]) + wm * work[1, 13]
    _peaks(xm, t0 + 0.5 * hh, work[1, 6], acc)
    _peaks(x1, t0 + hh, work[2, 6], acc)


@njit(cache=True, error_model="numpy", inline="always")
def _peaks(x, t, bus_V, acc):
    ia = abs(x[X_CURRENT])
    if ia > acc[A_PEAK_I]:
        acc[A_PEAK_I] = ia
        acc[A_PEAK_I_TIME] = t
    acc[A_BUS_MAX] = max(acc[A_BUS_MAX], bus_V)
    acc[A_BUS_MIN] = min(acc[A_BUS_MIN], bus_V)


@njit(cache=True, error_model="numpy")
def store_propagators(r, p, has_cap, hh, a, cache, slot):
    """Build ``A_r`` and store the propagators of steps ``hh`` and ``hh/2`` in ``cache[slot]``."""
    system_matrix(r, p, has_cap, a)
    e, f1, f2, f3 = phi_blocks(a, hh)
    eh, f1h, f2h, f3h = phi_blocks(a, 0.5 * hh)
    cache[slot, 0] = e
    cache[slot, 1] = f1
    cache[slot, 2] = f2
    cache[slot, 3] = eh
    cache[slot, 4] = f1h
    cache[slot, 5] = f2h
    cache[slot, 6] = f3
    cache[slot, 7] = f3h


@njit(cache=True, error_model="numpy")
def locate_crossing(
    x, p, has_cap, r, fsign, step, h_nom, gm, g1, b, nl, cache, a, x1, xm, xt, xmt, force, dgv
):
    """Find where the guard of regime ``r`` first changes sign inside a step (Illinois).

    Returns the length of the sub-step that ends just past the crossing [s] and leaves the
    state there in ``x1`` (mid-sub-step state in ``xm``). Kept out of line: it runs only at
    regime changes.
    """
    scratch = N_REGIME
    g0 = guard(x, p, has_cap, r, fsign)
    lo = 0.0
    glo = g0
    if gm < 0.0:
        hi = 0.5
        ghi = gm
    else:
        hi = 1.0
        ghi = g1
    side = 0
    for _ in range(60):
        if (hi - lo) * step <= 1e-12 * h_nom:
            break
        if glo != ghi:
            s = hi - ghi * (hi - lo) / (ghi - glo)
        else:
            s = 0.5 * (lo + hi)
        if not (lo < s < hi):
            s = 0.5 * (lo + hi)
        store_propagators(r, p, has_cap, s * step, a, cache, scratch)
        propagate(x, b, cache, scratch, nl, xt, xmt, force, dgv)
        gs = guard(xt, p, has_cap, r, fsign)
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
    store_propagators(r, p, has_cap, sub, a, cache, scratch)
    propagate(x, b, cache, scratch, nl, x1, xm, force, dgv)
    return sub


@njit(cache=True, error_model="numpy")
def advance(
    x, p, has_cap, hh, h_nom, t0, cache, bcache, valid, acc, work, carry,
    b, x1, xm, xt, xmt, force, dgv, a,
):  # fmt: skip
    """Advance ``x`` by ``hh`` seconds, locating regime changes; returns (status, time).

    ``cache[r]`` holds the propagators of the nominal step for regime ``r`` (built on first
    use, dropped by events); slot ``N_REGIME`` is scratch for shortened steps. ``bcache[r,
    f]`` holds the forcing for friction direction ``f - 1``; ``valid[0, r]`` and
    ``valid[1 + f, r]`` say which entries are built. ``b`` ...
    ``dgv`` (vectors) and ``a`` (matrix) are scratch too, so a step on cached propagators
    allocates nothing.
    """
    scratch = N_REGIME
    remaining = hh
    t = t0
    splits = 0
    check_regen = (not has_cap) and p[P_REGEN] < 0.5
    while remaining > 1e-13 * h_nom:
        r, fsign = regime_of(x, p, has_cap)
        if (r // 2) % 3 != BRIDGE_CONTROL:
            vb, va, ib, isup = bus_state(x, p, has_cap, r)
            if vb < 0.0:
                return STATUS_BUS_NEGATIVE, t
        if check_regen:
            vb, va, ib, isup = bus_state(x, p, has_cap, r)
            if ib < -1e-12 * (1.0 + abs(x[X_CURRENT])):
                return STATUS_REGEN_NO_PATH, t
        step = remaining
        # A step that differs from the nominal one only by rounding of the time stamps
        # (k h - (k-1) h) uses the cached propagators of the nominal step.
        if abs(step - h_nom) <= 1e-7 * h_nom:
            step = h_nom
            if not valid[0, r]:
                store_propagators(r, p, has_cap, h_nom, a, cache, r)
                valid[0, r] = True
            slot = r
        else:
            store_propagators(r, p, has_cap, step, a, cache, scratch)
            slot = scratch
        fi = int(fsign) + 1
        if not valid[1 + fi, r]:
            forcing(r, fsign, p, has_cap, b, a)
            for k in range(N_STATE):
                bcache[r, fi, k] = b[k]
            valid[1 + fi, r] = True
        else:
            for k in range(N_STATE):
                b[k] = bcache[r, fi, k]
        nl = 0.0
        if has_cap and (r // 2) % 3 == BRIDGE_CONTROL:
            nl = -p[P_VCMD] / p[P_C]
        propagate(x, b, cache, slot, nl, x1, xm, force, dgv)
        gm = guard(xm, p, has_cap, r, fsign)
        g1 = guard(x1, p, has_cap, r, fsign)
        crossed = gm < 0.0 or g1 < 0.0
        if crossed:
            # g0 < 0 means the regime test and its guard disagree at x (rounding at the
            # boundary): take the step whole rather than split at its start forever
            crossed = guard(x, p, has_cap, r, fsign) >= 0.0 and splits < 64
        if crossed:
            sub = locate_crossing(
                x,
                p,
                has_cap,
                r,
                fsign,
                step,
                h_nom,
                gm,
                g1,
                b,
                nl,
                cache,
                a,
                x1,
                xm,
                xt,
                xmt,
                force,
                dgv,
            )
            if fsign != 0.0 and (r % 2) == 0 and x1[X_SPEED] * fsign <= 0.0:
                x1[X_SPEED] = 0.0  # the shaft reaches rest exactly here
            if p[P_VBRUSH] > 0.0 and x1[X_CURRENT] * current_sign(r) < 0.0:
                x1[X_CURRENT] = 0.0  # the current reaches zero exactly here
            accumulate(x, xm, x1, sub, t, p, has_cap, r, fsign, acc, work, False)
            carry[0] = 0
            for k in range(N_STATE):
                x[k] = x1[k]
            remaining -= sub
            t += sub
            splits += 1
            acc[A_SPLITS] += 1.0
            if check_regen:
                vb, va, ib, isup = bus_state(x, p, has_cap, r)
                r_new, fs_new = regime_of(x, p, has_cap)
                held = r_new // 12 == CURRENT_HELD  # the brushes block: no current to return
                if ib <= 0.0 and p[P_VCMD] != 0.0 and not held:
                    return STATUS_REGEN_NO_PATH, t
        else:
            accumulate(
                x, xm, x1, step, t, p, has_cap, r, fsign, acc, work, carry[0] == 1 and carry[1] == r
            )
            carry[0] = 1
            carry[1] = r
            for k in range(N_STATE):
                x[k] = x1[k]
            t += step
            remaining = 0.0
        for k in range(N_STATE):
            if not math.isfinite(x[k]):
                return STATUS_NONFINITE, t
    return STATUS_OK, t


@njit(cache=True, error_model="numpy")
def record_row(x, p, has_cap, t, rec, row):
    """Write one trace row at time ``t``."""
    r, fsign = regime_of(x, p, has_cap)
    vb, va, ib, isup = bus_state(x, p, has_cap, r)
    write_row(x, p, r, fsign, t, vb, va, ib, isup, rec, row)


@njit(cache=True, error_model="numpy", inline="always")
def write_row(x, p, r, fsign, t, vb, va, ib, isup, rec, row):
    """Store the trace columns of state ``x`` in regime ``r`` with its bus quantities."""
    i = x[X_CURRENT]
    rec[R_TIME, row] = t
    rec[R_CURRENT, row] = i
    rec[R_SPEED, row] = x[X_SPEED]
    rec[R_POSITION, row] = x[X_POSITION]
    rec[R_ARMATURE_V, row] = va
    rec[R_BUS_V, row] = vb
    rec[R_MOTOR_TORQUE, row] = p[P_K] * i
    rec[R_LOAD_TORQUE, row] = p[P_TL] - p[P_GEAR_CONST]  # through a loss-free gear
    rec[R_SUPPLY_CURRENT, row] = isup
    if p[P_LOCK] > 0.5:
        fr = 0.0
    elif (r % 2) == 1:
        fr = p[P_K] * i - p[P_TL]  # static friction balances the drive torque
    else:
        sliding, breakaway = dry_drag_levels(p[P_TC], p[P_TS], p[P_TBR], p[P_TH])
        # with brush and iron drag; without the gear's part (booked as the gear's loss)
        fr = (p[P_B] + p[P_BE]) * x[X_SPEED] + (sliding - p[P_GEAR_COULOMB]) * fsign
    rec[R_FRICTION_TORQUE, row] = fr
    rec[R_BRIDGE_CURRENT, row] = ib


@njit(cache=True, error_model="numpy")
def apply_event(x, p, index, value, acc):
    """Set parameter ``index`` to ``value``, with the energy a sudden change implies.

    Locking a turning rotor removes its kinetic energy (``A_LOCK``). A change of the inertia
    on the shaft is a load mass engaging or being released
    (:func:`~dcsim.plant.mechanics.inertia_change`); the energy goes to ``A_COUPLING``.
    """
    w = x[X_SPEED]
    if index == P_LOCK and value > 0.5 and w != 0.0:
        acc[A_LOCK] += 0.5 * p[P_J] * w * w
        x[X_SPEED] = 0.0
    elif index == P_J and w != 0.0:
        x[X_SPEED], lost = inertia_change(w, p[P_J], value)
        acc[A_COUPLING] += lost
    p[index] = value


@njit(cache=True, error_model="numpy")
def control_now(k_base, t, x, p, has_cap, vb, cp, cs, rng, segs, bcache, valid, carry, b, amat):
    """Run the controller's base sample ``k_base`` at ``t`` on the state ``x`` (bus voltage
    ``vb`` [V]) and apply its voltage command; returns True when the command changed.

    The forcing cached for every regime is rebuilt for the new command.
    """
    v = control_sample(k_base, t, x[X_CURRENT], x[X_SPEED], x[X_POSITION], vb, cp, cs, rng, segs)
    if v == p[P_VCMD]:
        return False
    p[P_VCMD] = v
    for r in range(N_REGIME):
        for fi in range(3):
            if valid[1 + fi, r]:
                forcing(r, fi - 1.0, p, has_cap, b, amat)
                for q in range(N_STATE):
                    bcache[r, fi, q] = b[q]
    carry[0] = 0
    return True


@njit(cache=True, error_model="numpy")
def fast_steps(
    k, k_last, x, p, has_cap, h, n_steps, n_sub, duration, ev_t, k_ev, t,
    cache, bcache, valid, acc, work, carry, b, x1, xm, force, dgv, rec, row,
    n_ctl, cp, cs, rng, segs, crec, amat,
):  # fmt: skip
    """Take steps ``k, k+1, ...`` while each is the common case: a whole nominal step on
    cached propagators, with no event and no regime change in it.

    Kept small so that its loop compiles tight; returns at the first step that needs the
    general path (:func:`advance`), leaving the state as it was before that step.

    Returns
    -------
    k : int
        The first step not taken.
    status : int
        ``STATUS_NONFINITE`` if the state stopped being finite, else ``STATUS_OK``.
    t : float
        Time reached [s].
    row : int
        Next trace row.
    """
    n_ev = ev_t.shape[0]
    if (not has_cap) and p[P_REGEN] < 0.5:
        return k, STATUS_OK, t, row  # the diode check without capacitor needs the general path
    while k <= k_last:
        t_end = min(k * h, duration)
        if abs(t_end - t - h) > 1e-7 * h or (k_ev < n_ev and ev_t[k_ev] <= t_end):
            break
        r, fsign = regime_of(x, p, has_cap)
        fi = int(fsign) + 1
        if not (valid[0, r] and valid[1 + fi, r]):
            break
        for q in range(N_STATE):
            b[q] = bcache[r, fi, q]
        nl = 0.0
        if has_cap and (r // 2) % 3 == BRIDGE_CONTROL:
            nl = -p[P_VCMD] / p[P_C]
        propagate(x, b, cache, r, nl, x1, xm, force, dgv)
        if guard(xm, p, has_cap, r, fsign) < 0.0 or guard(x1, p, has_cap, r, fsign) < 0.0:
            break
        accumulate(
            x, xm, x1, h, t, p, has_cap, r, fsign, acc, work, carry[0] == 1 and carry[1] == r
        )
        carry[0] = 1
        carry[1] = r
        finite = True
        for q in range(N_STATE):
            x[q] = x1[q]
            finite = finite and math.isfinite(x1[q])
        t = t_end
        if not finite:
            return k, STATUS_NONFINITE, t, row
        changed = False
        if n_ctl > 0 and k % n_ctl == 0:
            changed = control_now(
                k // n_ctl, t, x, p, has_cap, work[2, 6], cp, cs, rng, segs, bcache, valid,
                carry, b, amat,
            )  # fmt: skip
        if k % n_sub == 0 or k == n_steps:
            if changed:
                record_row(x, p, has_cap, t, rec, row)
            else:
                # the end point's bus quantities are in work[2] (same regime: no guard crossed)
                write_row(
                    x, p, r, fsign, t, work[2, 6], work[2, 7], work[2, 8], work[2, 9], rec, row
                )
            if n_ctl > 0:
                copy_record(cs, crec, row)
            row += 1
        k += 1
    return k, STATUS_OK, t, row


@njit(cache=True, error_model="numpy")
def start_run(p, x, has_cap, ev_t, ev_i, ev_v, counters, rec, acc, n_ctl, cp, cs, rng, segs, crec):
    """Apply the events at t = 0, run the controller's first sample, set the peak trackers
    and write trace row 0.

    ``p`` and ``x`` are the run's working parameter and state vectors (changed in place);
    ``counters`` (int64, 2) holds the next event and the next trace row between calls.
    ``n_ctl`` is the number of steps per controller base sample (0: open loop); ``cp``,
    ``cs``, ``rng``, ``segs`` the controller's arrays and ``crec`` its trace columns.
    """
    n_ev = ev_t.shape[0]
    k_ev = 0
    while k_ev < n_ev and ev_t[k_ev] <= 0.0:
        apply_event(x, p, ev_i[k_ev], ev_v[k_ev], acc)
        k_ev += 1
    if n_ctl > 0:
        r0, fs0 = regime_of(x, p, has_cap)
        vb0, va0, ib0, is0 = bus_state(x, p, has_cap, r0)
        p[P_VCMD] = control_sample(
            0, 0.0, x[X_CURRENT], x[X_SPEED], x[X_POSITION], vb0, cp, cs, rng, segs
        )
        copy_record(cs, crec, 0)
    r0, fs0 = regime_of(x, p, has_cap)
    vb0, va0, ib0, is0 = bus_state(x, p, has_cap, r0)
    acc[A_BUS_MAX] = vb0
    acc[A_BUS_MIN] = vb0
    acc[A_PEAK_I] = abs(x[X_CURRENT])
    record_row(x, p, has_cap, 0.0, rec, 0)
    counters[0] = k_ev
    counters[1] = 1


@njit(cache=True, error_model="numpy")
def run_steps(
    p,
    x,
    has_cap,
    h,
    k_first,
    k_last,
    n_steps,
    n_sub,
    duration,
    ev_t,
    ev_i,
    ev_v,
    counters,
    rec,
    acc,
    n_ctl,
    cp,
    cs,
    rng,
    segs,
    crec,
):
    """Advance the run over steps ``k_first .. k_last`` (1-based, inclusive).

    A run is :func:`start_run` followed by any number of calls covering ``1 .. n_steps`` in
    order, so that the caller can report progress between them; the state lives in ``p``,
    ``x``, ``counters``, ``rec`` and ``acc``.

    Parameters
    ----------
    p : float array (N_PARAM,)
        Working parameters [SI], changed by events.
    x : float array (N_STATE,)
        State [A, rad/s, rad, V], advanced in place.
    has_cap : bool
        A bus capacitor is present (state ``X_BUS`` is live).
    h : float
        Nominal step [s]; step ``k`` ends at ``min(k h, duration)``.
    k_first, k_last : int
        Steps to take.
    n_steps, n_sub : int
        Steps in the run; a trace row every ``n_sub`` steps and after the last.
    duration : float
        End time [s].
    ev_t, ev_i, ev_v : arrays
        Event times [s] (sorted), parameter indices and new values [SI].
    counters : int64 array (2,)
        Next event index and next trace row.
    rec : float array (N_REC, rows)
        Trace columns.
    acc : float array (N_ACC,)
        Integrals and peaks.
    n_ctl, cp, cs, rng, segs, crec
        Steps per controller base sample (0: open loop) and the controller's arrays
        (:mod:`dcsim.controllers.layout`); the controller runs at the end of every
        ``n_ctl``-th step.

    Returns
    -------
    status : int
        ``STATUS_OK`` or the reason the run stopped.
    t : float
        Time reached [s].
    """
    cache = np.zeros((N_REGIME + 1, 8, N_STATE, N_STATE))
    bcache = np.zeros((N_REGIME, 3, N_STATE))
    valid = np.zeros((4, N_REGIME), dtype=np.bool_)
    work = np.zeros((3, N_WORK))
    carry = np.zeros(2, dtype=np.int64)  # work[2] valid at x (1/0), for regime carry[1]
    b = np.zeros(N_STATE)
    x1 = np.zeros(N_STATE)
    xm = np.zeros(N_STATE)
    xt = np.zeros(N_STATE)
    xmt = np.zeros(N_STATE)
    force = np.zeros(N_STATE)
    dgv = np.zeros(N_STATE)
    amat = np.zeros((N_STATE, N_STATE))
    n_ev = ev_t.shape[0]
    k_ev = counters[0]
    row = counters[1]
    t = min((k_first - 1) * h, duration)
    status = STATUS_OK
    k = k_first
    while k <= k_last:
        k, status, t, row = fast_steps(
            k, k_last, x, p, has_cap, h, n_steps, n_sub, duration, ev_t, k_ev, t,
            cache, bcache, valid, acc, work, carry, b, x1, xm, force, dgv, rec, row,
            n_ctl, cp, cs, rng, segs, crec, amat,
        )  # fmt: skip
        if status != STATUS_OK or k > k_last:
            break
        # the general path for step k: advance up to each event in it, then to its end
        t_end = min(k * h, duration)
        while True:
            at_event = k_ev < n_ev and ev_t[k_ev] <= t_end
            target = ev_t[k_ev] if at_event else t_end
            if target > t:
                status, t = advance(
                    x, p, has_cap, target - t, h, t, cache, bcache, valid, acc, work, carry,
                    b, x1, xm, xt, xmt, force, dgv, amat,
                )  # fmt: skip
                if status != STATUS_OK:
                    break
                t = target
            if not at_event:
                break
            while k_ev < n_ev and ev_t[k_ev] == target:
                apply_event(x, p, ev_i[k_ev], ev_v[k_ev], acc)
                k_ev += 1
            valid[:, :] = False
            carry[0] = 0
        if status != STATUS_OK:
            break
        t = t_end
        if n_ctl > 0 and k % n_ctl == 0:
            r, fsign = regime_of(x, p, has_cap)
            vb, va, ib, isup = bus_state(x, p, has_cap, r)
            control_now(
                k // n_ctl, t, x, p, has_cap, vb, cp, cs, rng, segs, bcache, valid, carry, b,
                amat,
            )  # fmt: skip
        if k % n_sub == 0 or k == n_steps:
            record_row(x, p, has_cap, t, rec, row)
            if n_ctl > 0:
                copy_record(cs, crec, row)
            row += 1
        k += 1
    if status != STATUS_OK and row < rec.shape[1]:
        record_row(x, p, has_cap, t, rec, row)
        if n_ctl > 0:
            copy_record(cs, crec, row)
        row += 1
    counters[0] = k_ev
    counters[1] = row
    return status, t


__all__ = ["start_run", "run_steps"]
