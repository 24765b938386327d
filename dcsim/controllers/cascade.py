"""One base sample of the controller: sensors, reference, and the position -> speed -> current
cascade, compiled so that both kernels call it at every base sample.

Timing
------
The kernels stop the plant at every base sample ``t_k = k h`` (the fastest loop's sample
time) and call :func:`control_sample` with the true state there. Every measurement is sampled
and held there (sample-and-hold); a loop whose sample time is ``n`` base samples runs when
``k`` is a multiple of ``n``, outer loops first, each inner loop following the latest output
of the loop around it. The speed loop's current command is clamped at ``+-limit``, and a
braking command (opposite to the measured speed) at the regenerative limit when one is set
(``control.speed.regen_limit``), anti-windup acting at whichever bound holds. The armature
voltage command that results is applied from ``t_k`` (the computation takes no time), or from
``t_{k+1}`` with ``control.computation_delay``. The PWM bridge models turn it into a duty at
the start of the next PWM period.

Sensors
-------
- Current: ``(1 + gain error) i + offset + noise``, then an ADC of ``bits`` over
  ``+-range`` (mid-tread rounding, clipped to the codes).
- Bus voltage: ``v + noise``, then an ADC over ``0..range``.
- Angle: an incremental encoder of ``lines`` lines read in x4 quadrature (``4 lines``
  counts per turn), ``count = floor(theta counts / 2 pi)``; without an encoder the angle is
  read exactly (plus noise).
- Speed, at the speed loop's sample time ``T_s``:

  * ``"difference"``: counts since the last sample times ``2 pi / (counts T_s)``; its error
    against the mean speed over the sample is below one count per sample,
    ``2 pi / (counts T_s)`` (the quantisation of both angle readings);
  * ``"period"``: the time between encoder edges, stamped by a timer clock: with ``m``
    counts between the latest edge of this sample and the latest edge before it, the
    speed is ``m (2 pi / counts) / (t_edge - t_edge,prev)`` (the counts-per-elapsed-time
    form of the period method, good at low speed); while no edge comes, the estimate
    decays as ``(2 pi / counts) / (t - t_edge)`` when that is lower. Edge instants between
    two samples are placed by linear interpolation of the angle over the sample (exact for
    constant speed), then rounded down to the timer clock;
  * ``"exact"``: the true speed (plus noise);

  then an optional first-order low-pass, backward Euler.
- Noise: seeded white Gaussian noise (SplitMix64 generator, Box-Muller transform), one
  draw per sample of each measurement that has a standard deviation.

References
----------
.. [1] G. Steele, D. Lea and C. H. Flood, "Fast splittable pseudorandom number
   generators", OOPSLA 2014 (SplitMix64).
.. [2] G. E. P. Box and M. E. Muller, Ann. Math. Statist. 29 (1958) 610-611.
.. [3] R. Petrella, M. Tursini, L. Peretti and M. Zigliotto, "Speed measurement algorithms
   for low-resolution incremental encoder equipped drives: a comparative analysis", Proc.
   ACEMP 2007 (difference and period methods) -- from memory.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from dcsim.controllers.layout import (
    C_BUS_LIMIT,
    C_BV,
    C_DELAY,
    C_ENC,
    C_H,
    C_I_BITS,
    C_I_GAIN,
    C_I_NOISE,
    C_I_OFFSET,
    C_I_RANGE,
    C_J,
    C_K,
    C_MODE,
    C_SPEED_METHOD,
    C_SPEED_TF,
    C_TC,
    C_TH_NOISE,
    C_TIMER_F,
    C_V_BITS,
    C_V_NOISE,
    C_V_RANGE,
    C_VMAX_FRACTION,
    C_W_NOISE,
    G_COUNT,
    G_COUNT_SPEED,
    G_EDGE_COUNT,
    G_EDGE_DIR,
    G_EDGE_T,
    G_HINT,
    G_T_PREV,
    G_TH_PREV,
    G_VOUT,
    G_VPENDING,
    G_W_RAW,
    GREC,
    K_CUR_LIMITED,
    K_CURRENT_CMD,
    K_I_INT,
    K_I_MEAS,
    K_POS_CMD,
    K_POS_LIMITED,
    K_REF,
    K_REF_D1,
    K_REF_D2,
    K_SPD_LIMITED,
    K_SPEED_CMD,
    K_TH_INT,
    K_TH_MEAS,
    K_V_MEAS,
    K_VOLTAGE_CMD,
    K_W_INT,
    K_W_MEAS,
    L_ACTIVE,
    L_FF,
    L_FF2,
    L_H,
    L_LIMIT,
    L_RATIO,
    L_REGEN,
    LOOP_CURRENT,
    LOOP_POSITION,
    LOOP_SPEED,
    LP0,
    LS0,
    MODE_CURRENT,
    MODE_POSITION,
    MODE_SPEED,
    NLP,
    NLS,
    S_INT,
    S_OUT,
    SPEED_DIFFERENCE,
    SPEED_PERIOD,
)
from dcsim.controllers.motion import evaluate
from dcsim.controllers.pid import pid_step, pid_step_bounded

TWO_PI = 2.0 * math.pi


@njit(cache=True, error_model="numpy")
def _next_u64(rng):
    """SplitMix64: advance ``rng[0]`` (uint64) and return the next 64-bit output [1]_."""
    z = rng[0] + np.uint64(0x9E3779B97F4A7C15)
    rng[0] = z
    z = (z ^ (z >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
    z = (z ^ (z >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
    return z ^ (z >> np.uint64(31))


@njit(cache=True, error_model="numpy")
def normal(rng):
    """One standard normal draw (Box-Muller [2]_) from the generator state ``rng``."""
    u1 = ((_next_u64(rng) >> np.uint64(11)) + np.uint64(1)) * (1.0 / 9007199254740992.0)
    u2 = (_next_u64(rng) >> np.uint64(11)) * (1.0 / 9007199254740992.0)
    return math.sqrt(-2.0 * math.log(u1)) * math.cos(TWO_PI * u2)


@njit(cache=True, error_model="numpy", inline="always")
def _adc_bipolar(x, bits, full_scale):
    if bits > 0.0:
        lsb = 2.0 * full_scale / 2.0**bits
        half = 2.0 ** (bits - 1.0)
        code = min(half - 1.0, max(-half, math.floor(x / lsb + 0.5)))
        return code * lsb
    if full_scale > 0.0:
        return min(full_scale, max(-full_scale, x))
    return x


@njit(cache=True, error_model="numpy", inline="always")
def _adc_unipolar(x, bits, full_scale):
    if bits > 0.0:
        lsb = full_scale / 2.0**bits
        code = min(2.0**bits - 1.0, max(0.0, math.floor(x / lsb + 0.5)))
        return code * lsb
    if full_scale > 0.0:
        return min(full_scale, max(0.0, x))
    return x


@njit(cache=True, error_model="numpy")
def speed_estimate(t, th, w, cp, cs, h_speed, first):
    """Speed measurement at a speed-loop sample [rad/s] (before the low-pass), from the
    true speed ``w`` or the encoder count in ``cs`` (angle ``th`` [rad] at time ``t`` [s];
    ``h_speed`` the speed loop's sample time [s])."""
    method = int(cp[C_SPEED_METHOD])
    n = cp[C_ENC]
    if n <= 0.0 or (method != SPEED_DIFFERENCE and method != SPEED_PERIOD):
        return w
    count = cs[G_COUNT]
    step = TWO_PI / n
    if method == SPEED_DIFFERENCE:
        est = 0.0 if first else (count - cs[G_COUNT_SPEED]) * step / h_speed
        cs[G_COUNT_SPEED] = count
        return est
    # period method: stamp the latest edge crossed since the last sample
    est = cs[G_W_RAW]
    if first:
        cs[G_COUNT_SPEED] = count
        cs[G_EDGE_COUNT] = count
        cs[G_EDGE_DIR] = 0.0
        cs[G_TH_PREV] = th
        cs[G_T_PREV] = t
        return 0.0
    c_prev = cs[G_COUNT_SPEED]
    if count != c_prev:
        edge_angle = count * step if count > c_prev else (count + 1.0) * step
        th0 = cs[G_TH_PREV]
        t0 = cs[G_T_PREV]
        frac = (edge_angle - th0) / (th - th0) if th != th0 else 1.0
        frac = min(1.0, max(0.0, frac))
        t_edge = t0 + frac * (t - t0)
        f = cp[C_TIMER_F]
        if f > 0.0:
            t_edge = math.floor(t_edge * f) / f
        direction = 1.0 if count > c_prev else -1.0
        if cs[G_EDGE_DIR] == direction and t_edge > cs[G_EDGE_T]:
            est = (count - cs[G_EDGE_COUNT]) * step / (t_edge - cs[G_EDGE_T])
        else:
            est = 0.0  # first edge, or a reversal: no period to measure yet
        cs[G_EDGE_T] = t_edge
        cs[G_EDGE_COUNT] = count
        cs[G_EDGE_DIR] = direction
    elif cs[G_EDGE_DIR] != 0.0 and t > cs[G_EDGE_T]:
        bound = step / (t - cs[G_EDGE_T])
        if abs(est) > bound:
            est = math.copysign(bound, est)
    cs[G_COUNT_SPEED] = count
    cs[G_TH_PREV] = th
    cs[G_T_PREV] = t
    return est


@njit(cache=True, error_model="numpy")
def control_sample(k, t, i, w, th, vbus, cp, cs, rng, segs):
    """Run base sample ``k`` (at ``t`` [s]) on the true current [A], speed [rad/s], angle
    [rad] and bus voltage [V]; returns the armature voltage command to apply from now [V].
    """
    mode = int(cp[C_MODE])
    rec = GREC
    first = k == 0
    # --- sensors (sample and hold) ---
    i_m = (1.0 + cp[C_I_GAIN]) * i + cp[C_I_OFFSET]
    if cp[C_I_NOISE] > 0.0:
        i_m += cp[C_I_NOISE] * normal(rng)
    i_m = _adc_bipolar(i_m, cp[C_I_BITS], cp[C_I_RANGE])
    v_m = vbus
    if cp[C_V_NOISE] > 0.0:
        v_m += cp[C_V_NOISE] * normal(rng)
    v_m = _adc_unipolar(v_m, cp[C_V_BITS], cp[C_V_RANGE])
    th_n = th
    if cp[C_TH_NOISE] > 0.0:
        th_n += cp[C_TH_NOISE] * normal(rng)
    n_enc = cp[C_ENC]
    if n_enc > 0.0:
        count = math.floor(th_n * n_enc / TWO_PI)
        cs[G_COUNT] = count
        th_m = count * TWO_PI / n_enc
    else:
        th_m = th_n
    ps = LP0 + LOOP_SPEED * NLP
    speed_due = cp[ps + L_ACTIVE] > 0.5 and k % int(cp[ps + L_RATIO]) == 0
    if speed_due or cp[ps + L_ACTIVE] < 0.5:
        h_s = cp[ps + L_H] if cp[ps + L_ACTIVE] > 0.5 else cp[C_H]
        raw = speed_estimate(t, th_n, w, cp, cs, h_s, first)
        if cp[C_W_NOISE] > 0.0:
            raw += cp[C_W_NOISE] * normal(rng)
        tf = cp[C_SPEED_TF]
        if tf > 0.0 and not first:
            w_m = cs[rec + K_W_MEAS] + h_s / (tf + h_s) * (raw - cs[rec + K_W_MEAS])
        else:
            w_m = raw
        cs[G_W_RAW] = raw
        cs[rec + K_W_MEAS] = w_m
    w_m = cs[rec + K_W_MEAS]
    cs[rec + K_I_MEAS] = i_m
    cs[rec + K_V_MEAS] = v_m
    cs[rec + K_TH_MEAS] = th_m
    # --- reference ---
    r, r1, r2, hint = evaluate(segs, t, int(cs[G_HINT]))
    cs[G_HINT] = hint
    cs[rec + K_REF] = r
    cs[rec + K_REF_D1] = r1
    cs[rec + K_REF_D2] = r2
    # --- position loop: output is the speed command ---
    pp = LP0 + LOOP_POSITION * NLP
    sp = LS0 + LOOP_POSITION * NLS
    acc_ref = r1 if mode == MODE_SPEED else 0.0
    if mode == MODE_POSITION:
        acc_ref = r2
        if k % int(cp[pp + L_RATIO]) == 0:
            ff = r1 if cp[pp + L_FF] > 0.5 else 0.0
            lim = cp[pp + L_LIMIT]
            u = pid_step(cp, pp, cs, sp, r, th_m, ff, lim)
            cs[rec + K_POS_CMD] = r
            cs[rec + K_TH_INT] = cs[sp + S_INT]
            cs[rec + K_POS_LIMITED] = 1.0 if abs(u) >= lim else 0.0
        w_ref = cs[sp + S_OUT]
    else:
        w_ref = r
    # --- speed loop: output is the current command ---
    ss = LS0 + LOOP_SPEED * NLS
    if mode >= MODE_SPEED:
        if speed_due:
            kt = cp[C_K]
            ff = 0.0
            if cp[ps + L_FF] > 0.5:
                ff += cp[C_J] * acc_ref / kt
            if cp[ps + L_FF2] > 0.5:
                sgn = 1.0 if w_ref > 0.0 else (-1.0 if w_ref < 0.0 else 0.0)
                ff += (cp[C_BV] * w_ref + cp[C_TC] * sgn) / kt
            lim = cp[ps + L_LIMIT]
            # regenerative current limit: a braking command (opposing the measured speed)
            # is clamped at the smaller of the two limits
            brake = min(lim, cp[ps + L_REGEN])
            lo = -brake if w_m > 0.0 else -lim
            hi = brake if w_m < 0.0 else lim
            u = pid_step_bounded(cp, ps, cs, ss, w_ref, w_m, ff, lo, hi)
            cs[rec + K_SPEED_CMD] = w_ref
            cs[rec + K_W_INT] = cs[ss + S_INT]
            cs[rec + K_SPD_LIMITED] = 1.0 if u >= hi or u <= lo else 0.0
        i_ref = cs[ss + S_OUT]
    else:
        i_ref = r
    # --- current loop: output is the armature voltage command ---
    pc = LP0 + LOOP_CURRENT * NLP
    sc = LS0 + LOOP_CURRENT * NLS
    v_new = cs[G_VPENDING] if cp[C_DELAY] > 0.5 else cs[G_VOUT]
    if mode >= MODE_CURRENT and k % int(cp[pc + L_RATIO]) == 0:
        ff = cp[C_K] * w_m if cp[pc + L_FF] > 0.5 else 0.0
        lim = cp[pc + L_LIMIT]
        if cp[C_BUS_LIMIT] > 0.5:
            lim = min(lim, cp[C_VMAX_FRACTION] * max(v_m, 0.0))
        u = pid_step(cp, pc, cs, sc, i_ref, i_m, ff, lim)
        cs[rec + K_CURRENT_CMD] = i_ref
        cs[rec + K_I_INT] = cs[sc + S_INT]
        cs[rec + K_CUR_LIMITED] = 1.0 if abs(u) >= lim else 0.0
        v_new = u
    if cp[C_DELAY] > 0.5:
        applied = cs[G_VPENDING] if not first else 0.0
        cs[G_VPENDING] = v_new
    else:
        applied = v_new
    cs[G_VOUT] = applied
    cs[rec + K_VOLTAGE_CMD] = applied
    return applied


@njit(cache=True, error_model="numpy", inline="always")
def copy_record(cs, crec, row):
    """Copy the recorded controller values into trace row ``row`` of ``crec``."""
    for j in range(crec.shape[0]):
        crec[j, row] = cs[GREC + j]
