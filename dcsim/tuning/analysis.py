"""Margins, sensitivity peaks, bandwidth and step metrics of a loop (python-control).

For the loop transfer ``L = C P`` (continuous or discrete):

- gain and phase margins and their crossover frequencies: ``control.stability_margins``;
- delay margin: the extra delay the loop tolerates, ``PM / w_c`` (phase margin in rad over
  the gain-crossover frequency);
- ``Ms = max |1/(1 + L)|`` and ``Mt = max |L/(1 + L)|`` over frequency (Skogestad &
  Postlethwaite, *Multivariable Feedback Control*, 2nd ed. (2005), sec. 2.4.3), on a dense
  logarithmic grid up to the Nyquist frequency for a discrete loop;
- closed-loop bandwidth: the lowest frequency where ``|T|`` falls below ``|T(0)|/sqrt(2)``;
- step metrics of ``T`` (with the reference prefilter when the method has one):
  ``control.step_info``.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import control
import numpy as np


@dataclass(frozen=True)
class LoopFigures:
    """Figures of one loop.

    Attributes
    ----------
    gain_margin_dB, phase_margin_deg : float
        ``inf`` when the loop has no crossing.
    delay_margin_s : float
        [s]
    crossover_rad_s : float
        Gain-crossover frequency [rad/s].
    phase_crossover_rad_s : float
        [rad/s]
    ms, mt : float
        Peaks of the sensitivity and complementary sensitivity [-].
    bandwidth_rad_s : float
        Closed-loop -3 dB bandwidth [rad/s].
    overshoot_percent, rise_time_s, settling_time_s : float
        Step response of the closed loop (10-90 % rise, 2 % settling).
    stable : bool
        The closed loop is stable.
    """

    gain_margin_dB: float
    phase_margin_deg: float
    delay_margin_s: float
    crossover_rad_s: float
    phase_crossover_rad_s: float
    ms: float
    mt: float
    bandwidth_rad_s: float
    overshoot_percent: float
    rise_time_s: float
    settling_time_s: float
    stable: bool


def _response(sys, w: np.ndarray) -> np.ndarray:
    if sys.isdtime():
        return np.asarray(sys(np.exp(1j * w * sys.dt)), dtype=complex).reshape(-1)
    return np.asarray(sys(1j * w), dtype=complex).reshape(-1)


def frequency_grid(loop) -> np.ndarray:
    """A logarithmic grid wide enough for the loop [rad/s] (up to Nyquist when sampled)."""
    poles = np.abs(control.poles(loop))
    if loop.isdtime():
        hi = math.pi / loop.dt * 0.9999
        lo = hi * 1e-6
    else:
        finite = poles[(poles > 0) & np.isfinite(poles)]
        lo = (finite.min() if finite.size else 1.0) * 1e-3
        hi = (finite.max() if finite.size else 1.0) * 1e3
    return np.logspace(math.log10(lo), math.log10(hi), 4000)


def margins(loop) -> tuple[float, float, float, float]:
    """``(gain margin [-], phase margin [deg], gain crossover [rad/s], phase crossover
    [rad/s])`` of the loop, from ``control.stability_margins(loop, returnall=True)``.

    Of the crossings it returns, the ones the frequency response confirms are kept (its
    polynomial root finding can report spurious ones for a sampled loop with poles near
    ``z = 1``): the gain crossover is the highest frequency where ``|L| = 1``; the gain margin
    is taken at the first phase crossover above it (the margin against a gain increase, the
    classical definition; a loop with a double integrator also has a phase crossover below
    the crossover, which bounds a gain *decrease* and is not reported).
    """
    with warnings.catch_warnings():
        # its fallback to the frequency-response method is announced as a warning; the
        # crossings are confirmed on the frequency response below either way
        warnings.filterwarnings("ignore", message="stability_margins: Falling back")
        gms, pms, _, wpcs, wgcs, _ = control.stability_margins(loop, returnall=True)
    gms, pms = np.atleast_1d(gms), np.atleast_1d(pms)
    wpcs, wgcs = np.atleast_1d(wpcs), np.atleast_1d(wgcs)
    nyquist = math.pi / loop.dt if loop.isdtime() else math.inf
    ok_gc = [
        k
        for k, w in enumerate(wgcs)
        if 0 < w < nyquist and abs(abs(_response(loop, np.array([w]))[0]) - 1.0) < 1e-3
    ]
    if ok_gc:
        k = max(ok_gc, key=lambda k: wgcs[k])
        wgc, pm = float(wgcs[k]), float(pms[k])
    else:
        wgc, pm = math.nan, math.inf
    ok_pc = []
    for k, w in enumerate(wpcs):
        if not (0 < w <= nyquist * (1 + 1e-9)) or (math.isfinite(wgc) and w <= wgc):
            continue
        v = _response(loop, np.array([min(w, nyquist * (1 - 1e-12))]))[0]
        if v.real < 0 and abs(v.imag) <= 1e-3 * abs(v):
            ok_pc.append(k)
    if ok_pc:
        k = min(ok_pc, key=lambda k: wpcs[k])
        wpc, gm = float(wpcs[k]), float(gms[k])
    else:
        wpc, gm = math.nan, math.inf
    return gm, pm, wgc, wpc


CANCELLED_TOL = 1e-9
"""A closed-loop pole and zero closer than this (relative to ``max(1, |p|)``) cancel: the
mode cannot be seen from the reference to the output (numerical noise leaves an exactly
cancelled pair about 1e-16 apart) -- common practice (no source)."""


def _without_cancelled_modes(closed):
    """The SISO closed loop with exactly cancelled pole-zero pairs removed.

    A current loop around a motor without viscous friction is the case: the rotor's free
    integration (a plant pole at ``s = 0``, ``z = 1``) puts a zero at the same place in
    ``i / v`` (a constant current needs no voltage change once the back-EMF is matched by
    the integrator), so the closed loop keeps a pole exactly on the stability boundary that
    the current never shows; rounding puts it at ``|z| = 1 +- 1e-16`` and a plain pole test
    would call the loop unstable at random. The mode is the speed's, outside the loop's
    figures (the speed loop closes around it). Other poles are kept as they are, so a truly
    unstable loop stays unstable (Skogestad & Postlethwaite, *Multivariable Feedback
    Control*, sec. 4.7: internal stability and hidden modes -- from memory).
    """
    poles = list(control.poles(closed))
    zeros = list(control.zeros(closed))
    removed = False
    for pz in list(poles):
        for zz in zeros:
            if abs(pz - zz) <= CANCELLED_TOL * max(1.0, abs(pz)):
                poles.remove(pz)
                zeros.remove(zz)
                removed = True
                break
    if not removed:
        return closed
    # the gain from one point of the frequency response away from the cancelled pairs
    s0 = complex(0.3, 0.7) if closed.isctime() else complex(0.3, 0.4)
    shape = np.prod([s0 - zz for zz in zeros]) / np.prod([s0 - pp for pp in poles])
    gain = complex(closed(s0)) / shape
    dt = closed.dt if closed.isdtime() else 0
    return control.ss(control.zpk(zeros, poles, gain.real, dt=dt) if dt else
                      control.zpk(zeros, poles, gain.real))  # fmt: skip


def analyse(loop, *, prefilter=None, t_final_s: float | None = None) -> LoopFigures:
    """Figures of the loop transfer ``loop`` (a python-control system).

    Parameters
    ----------
    loop : control.TransferFunction
        ``C P``, continuous or discrete.
    prefilter : control.TransferFunction, optional
        Reference prefilter applied before the loop for the step metrics.
    t_final_s : float, optional
        Length of the step response [s] (default: from the slowest closed-loop pole).
    """
    gm, pm, wgc, wpc = margins(loop)
    gm_db = 20.0 * math.log10(gm) if gm > 0 and math.isfinite(gm) else math.inf
    dm = math.radians(pm) / wgc if wgc > 0 and math.isfinite(pm) else math.inf
    w = frequency_grid(loop)
    lw = _response(loop, w)
    s_mag = np.abs(1.0 / (1.0 + lw))
    t_mag = np.abs(lw / (1.0 + lw))
    closed = _without_cancelled_modes(control.feedback(loop, 1))
    poles = control.poles(closed)
    stable = bool(np.all(np.abs(poles) < 1.0)) if loop.isdtime() else bool(np.all(poles.real < 0))
    t0 = abs(complex(closed.dcgain())) if stable else math.nan
    below = np.nonzero(t_mag < t0 / math.sqrt(2.0))[0] if stable else np.array([])
    bw = float(w[below[0]]) if below.size else math.nan
    over = rise = settle = math.nan
    if stable:
        ref = closed if prefilter is None else control.series(prefilter, closed)
        if t_final_s is None:
            t_final_s = _settle_horizon(closed, wgc)
        if closed.isdtime():
            n = max(50, int(t_final_s / closed.dt))
            t = np.arange(n) * closed.dt
        else:
            t = np.linspace(0.0, t_final_s, 20001)
        _, y = control.step_response(ref, T=t)
        # the final value is the closed loop's static gain (a slow, nearly cancelled
        # pole-zero pair -- the back-EMF's mechanical mode in a current loop -- would
        # otherwise leave the last sample short of it)
        info = control.step_info(np.squeeze(y), T=t, yfinal=abs(complex(ref.dcgain())))
        over, rise, settle = info["Overshoot"], info["RiseTime"], info["SettlingTime"]
    return LoopFigures(
        gain_margin_dB=gm_db,
        phase_margin_deg=pm,
        delay_margin_s=dm,
        crossover_rad_s=wgc,
        phase_crossover_rad_s=float(wpc),
        ms=float(s_mag.max()),
        mt=float(t_mag.max()),
        bandwidth_rad_s=bw,
        overshoot_percent=float(over),
        rise_time_s=float(rise),
        settling_time_s=float(settle),
        stable=stable,
    )


def _settle_horizon(closed, crossover_rad_s: float = math.nan) -> float:
    """Length of the step response [s]: 60 / crossover (the loop's own dynamics; slow,
    nearly cancelled modes show as a small tail), else ten of the slowest closed-loop time
    constants."""
    if math.isfinite(crossover_rad_s) and crossover_rad_s > 0:
        return 60.0 / crossover_rad_s
    p = control.poles(closed)
    if closed.isdtime():
        mags = np.abs(p[np.abs(p) > 1e-12])
        slow = mags.max() if mags.size else 0.5
        tau = -closed.dt / math.log(min(max(slow, 1e-9), 1 - 1e-12))
    else:
        re = -p.real[p.real < 0]
        tau = 1.0 / re.min() if re.size else 1.0
    return float(min(10.0 * tau, 1e4 * tau))
