"""Least-squares identification of a permanent-magnet DC motor from a log of its voltage,
current and speed (or position).

Model
-----
The machine dcsim simulates (:mod:`dcsim.plant.machine`, :mod:`dcsim.plant.mechanics`), with
no load on the shaft::

    L di/dt = v - R i - K w
    J dw/dt = K i - B w - T_c sgn(w)        (held at w = 0 while abs(K i) <= T_c)
    dtheta/dt = w

with the voltage ``v`` held from each sample to the next (the log's value at ``t_k`` applies on
``[t_k, t_k+1)``), six parameters ``R [ohm], L [H], K [N*m/A], J [kg*m^2], B [N*m*s/rad], T_c
[N*m]``.

Method
------
1. *Equation error* (start values). The log is smoothed and differentiated with
   Savitzky-Golay filters (A. Savitzky and M. J. E. Golay, *Anal. Chem.* 36 (1964) 1627-1639;
   ``scipy.signal.savgol_filter``) and the two equations are solved as linear least-squares
   problems: ``v = R i + L di/dt + K w`` for ``R, L, K`` (the voltage smoothed by the same
   filter), then ``K i = J dw/dt + B w + T_c sgn(w)`` for ``J, B, T_c`` on the samples where
   the speed is clear of zero. Differentiated noise biases these (errors in the regressors),
   so they only start step 2 (L. Ljung, *System Identification: Theory for the User*, 2nd
   ed., Prentice Hall (1999), sec. 7.3 and 7.4: equation error against output error).
2. *Output error*. The model is simulated over the whole log (the exact discretisation of the
   linear equations for each friction regime, ``x_k+1 = e^(A h) x_k + Gamma u_k``, from one
   matrix exponential of the augmented matrix ``[[A, B], [0, 0]]``, C. Van Loan, *IEEE Trans.
   Autom. Control* 23 (1978) 395-404; a regime change inside a sample interval is located
   on a grid of 1/64 of it and the rest of that sub-interval taken by one Euler step) and
   ``scipy.optimize.least_squares`` minimises the measured minus simulated current and speed
   (or position), each divided by its noise level. The noise levels are first estimated
   from the filters' residuals and, after a first fit, replaced by the residuals' RMS, so that
   each channel is weighted by its own noise (the maximum-likelihood weighting of Gaussian
   channels, Ljung sec. 7.4), and the fit is repeated.
3. *Confidence intervals* from the linearised model at the solution (D. M. Bates and D. G.
   Watts, *Nonlinear Regression Analysis and Its Applications*, Wiley (1988), sec. 2.3):
   covariance ``s^2 (J^T J)^-1`` with ``J`` the Jacobian of the weighted residuals (central
   differences) and ``s^2 = sum(r^2) / (n - p)``; the 95 % interval is ``theta +- t_0.975,n-p
   * sqrt(C_jj)``. They hold when the residuals are white measurement noise and the model
   is right; coloured noise or a model error (a load the log had, a resistance that warmed)
   makes them too narrow.

What must be excited: ``L`` by fast current changes (voltage steps, sampled well inside
``L/R``), ``J`` by accelerations, ``B`` and ``T_c`` apart by steady running at two or more
speeds (a reversal helps ``T_c``), ``R`` and ``K`` by steady states at different currents.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from numba import njit
from scipy import linalg, optimize, signal, stats

from dcsim.errors import ScenarioError
from dcsim.identify.log import MotorLog

__all__ = [
    "PARAMETERS",
    "UNITS",
    "FitResult",
    "equation_error_start",
    "fit_motor",
    "simulate_log",
]

PARAMETERS = (
    "resistance",
    "inductance",
    "torque_constant",
    "inertia",
    "viscous_friction",
    "coulomb_friction",
)
"""The fitted parameters, named as the ``[motor]`` keys."""

UNITS = {
    "resistance": "ohm",
    "inductance": "H",
    "torque_constant": "N*m/A",
    "inertia": "kg*m^2",
    "viscous_friction": "N*m*s/rad",
    "coulomb_friction": "N*m",
}
"""SI unit of each parameter."""

SUBSTEPS = 64
"""A regime change (stick, slip, reversal) inside a sample interval is located on this grid."""

CONFIDENCE = 0.95
"""Level of the intervals."""

POORLY_EXCITED_PERCENT = 10.0
"""A parameter whose 95 % half-width exceeds this [%] of its value is reported as poorly
excited by the log (common practice, no source)."""

_REGIME_STUCK, _REGIME_FORWARD, _REGIME_BACKWARD = 0, 1, 2


# --------------------------------------------------------------------------------------------
# Simulation of the log
# --------------------------------------------------------------------------------------------


def _regime_matrices(p: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``A`` (3, 3, 3) and ``B`` (3, 3, 2) of the three friction regimes for ``x = [i, w,
    theta]``, inputs ``[v, 1]``: stuck, sliding forward, sliding backward."""
    r, ind, k, j, b, tc = p
    a = np.zeros((3, 3, 3))
    bb = np.zeros((3, 3, 2))
    for reg, s in ((_REGIME_FORWARD, 1.0), (_REGIME_BACKWARD, -1.0)):
        a[reg] = [[-r / ind, -k / ind, 0.0], [k / j, -b / j, 0.0], [0.0, 1.0, 0.0]]
        bb[reg] = [[1.0 / ind, 0.0], [0.0, -s * tc / j], [0.0, 0.0]]
    a[_REGIME_STUCK, 0, 0] = -r / ind
    bb[_REGIME_STUCK, 0, 0] = 1.0 / ind
    return a, bb


def _propagators(a: np.ndarray, bb: np.ndarray, h: float) -> tuple[np.ndarray, np.ndarray]:
    """``e^(A h)`` and ``Gamma = int_0^h e^(A s) ds B`` of each regime, from one exponential
    of the augmented matrix ``[[A, B], [0, 0]] h`` (Van Loan 1978)."""
    phi = np.empty((3, 3, 3))
    gam = np.empty((3, 3, 2))
    m = np.zeros((5, 5))
    for reg in range(3):
        m[:3, :3] = a[reg] * h
        m[:3, 3:] = bb[reg] * h
        e = linalg.expm(m)
        phi[reg] = e[:3, :3]
        gam[reg] = e[:3, 3:]
    return phi, gam


@njit(cache=True)
def _step(phi: np.ndarray, gam: np.ndarray, x: np.ndarray, u: float, out: np.ndarray) -> None:
    for row in range(3):
        out[row] = (
            phi[row, 0] * x[0]
            + phi[row, 1] * x[1]
            + phi[row, 2] * x[2]
            + gam[row, 0] * u
            + gam[row, 1]
        )


@njit(cache=True)
def _guard(reg: int, x: np.ndarray, k: float, tc: float) -> float:
    """>= 0 while the regime holds: the speed in the sliding direction, or the margin of the
    friction over the armature torque while stuck."""
    if reg == _REGIME_STUCK:
        return tc - abs(k * x[0])
    if reg == _REGIME_FORWARD:
        return x[1]
    return -x[1]


@njit(cache=True)
def _regime_at_rest(i: float, k: float, tc: float) -> int:
    """Regime of a shaft at zero speed with armature current ``i`` (no load)."""
    torque = k * i
    if abs(torque) <= tc:
        return _REGIME_STUCK
    return _REGIME_FORWARD if torque > 0.0 else _REGIME_BACKWARD


@njit(cache=True)
def _across(
    phi_m, gam_m, a, bb, x, u, reg, k, tc, h_sub, n_sub, out
) -> int:  # pragma: no cover - compiled
    """One sample interval on ``n_sub`` sub-steps, changing regime where a guard crosses."""
    xa = x.copy()
    xb = np.empty(3)
    for _ in range(n_sub):
        _step(phi_m[reg], gam_m[reg], xa, u, xb)
        ga = _guard(reg, xa, k, tc)
        gb = _guard(reg, xb, k, tc)
        if gb < 0.0:
            f = ga / (ga - gb) if ga > gb else 0.0
            f = min(max(f, 0.0), 1.0)
            xc = xa + f * (xb - xa)
            if reg == _REGIME_STUCK:
                xc[1] = 0.0
                reg = _REGIME_FORWARD if k * xc[0] > 0.0 else _REGIME_BACKWARD
            else:
                xc[1] = 0.0
                reg = _regime_at_rest(xc[0], k, tc)
            rest = (1.0 - f) * h_sub
            for row in range(3):
                d = bb[reg, row, 0] * u + bb[reg, row, 1]
                for col in range(3):
                    d += a[reg, row, col] * xc[col]
                xb[row] = xc[row] + rest * d
            if reg != _REGIME_STUCK and _guard(reg, xb, k, tc) < 0.0:
                xb[1] = 0.0
        xa[:] = xb
    out[:] = xa
    return reg


@njit(cache=True)
def _run(phi, gam, phi_m, gam_m, a, bb, volts, x0, k, tc, h_sub, n_sub, out):
    """Simulate the log: ``out[k] = [i, w, theta]`` at each sample (``out[0] = x0``)."""
    x = x0.copy()
    xn = np.empty(3)
    out[0, :] = x
    if x[1] > 0.0:
        reg = _REGIME_FORWARD
    elif x[1] < 0.0:
        reg = _REGIME_BACKWARD
    else:
        reg = _regime_at_rest(x[0], k, tc)
    for n in range(volts.shape[0] - 1):
        u = volts[n]
        _step(phi[reg], gam[reg], x, u, xn)
        if _guard(reg, xn, k, tc) < 0.0:
            reg = _across(phi_m, gam_m, a, bb, x, u, reg, k, tc, h_sub, n_sub, xn)
        x[:] = xn
        out[n + 1, :] = x


def simulate_log(
    params: Mapping[str, float] | np.ndarray,
    voltage_V: np.ndarray,
    sample_time_s: float,
    initial_state: tuple[float, float, float] = (0.0, 0.0, 0.0),
) -> np.ndarray:
    """The model's current, speed and angle at the log's samples.

    Parameters
    ----------
    params : mapping or array
        ``resistance`` [ohm], ``inductance`` [H], ``torque_constant`` [N*m/A], ``inertia``
        [kg*m^2], ``viscous_friction`` [N*m*s/rad], ``coulomb_friction`` [N*m] (a mapping with
        these keys, or an array in the order of :data:`PARAMETERS`).
    voltage_V : numpy.ndarray
        Armature voltage at each sample [V], held until the next.
    sample_time_s : float
        Sample interval [s].
    initial_state : (float, float, float)
        Current [A], speed [rad/s] and angle [rad] at the first sample.

    Returns
    -------
    numpy.ndarray
        Shape (n, 3): current [A], speed [rad/s], angle [rad] at each sample.

    Notes
    -----
    Exact for the linear equations between regime changes (Van Loan 1978); a regime change is
    placed by linear interpolation of its guard on a grid of ``1 / SUBSTEPS`` of the sample
    interval.
    """
    if isinstance(params, Mapping):
        p = np.array([float(params[name]) for name in PARAMETERS])
    else:
        p = np.asarray(params, dtype=float)
    a, bb = _regime_matrices(p)
    phi, gam = _propagators(a, bb, sample_time_s)
    h_sub = sample_time_s / SUBSTEPS
    phi_m, gam_m = _propagators(a, bb, h_sub)
    volts = np.ascontiguousarray(voltage_V, dtype=float)
    out = np.empty((volts.shape[0], 3))
    x0 = np.array(initial_state, dtype=float)
    _run(phi, gam, phi_m, gam_m, a, bb, volts, x0, p[2], p[5], h_sub, SUBSTEPS, out)
    return out


# --------------------------------------------------------------------------------------------
# Equation error: the start
# --------------------------------------------------------------------------------------------


MECHANICAL_WINDOW_FACTOR = 5
"""The mechanical equation's filter is this many times wider than the electrical one: the
speed changes more slowly than the current, and its second derivative of a noisy angle (or
first of a noisy speed) needs more smoothing (common practice, no source)."""


@dataclass(frozen=True)
class _Filtered:
    """The log smoothed and differentiated by Savitzky-Golay filters (the electrical
    quantities by the given window, the mechanical ones by a wider one)."""

    window: int
    voltage: np.ndarray
    current: np.ndarray
    current_rate: np.ndarray
    speed: np.ndarray
    acceleration: np.ndarray
    mech_speed: np.ndarray  # the speed by the mechanical (wider) filter
    mech_current: np.ndarray  # the current by the mechanical filter
    wide: int
    output: np.ndarray  # the measured channel, smoothed (speed or position)


def _window(n: int, window: int | None) -> int:
    w = 15 if window is None else int(window)
    w = min(w, n - 1 if n % 2 == 0 else n)
    return max(w | 1, 5)


def _filtered(log: MotorLog, window: int) -> _Filtered:
    h = log.sample_time_s
    n = len(log.time_s)
    wide = _window(n, min(MECHANICAL_WINDOW_FACTOR * window, n // 4))

    def sg(x: np.ndarray, deriv: int = 0, width: int = window) -> np.ndarray:
        return signal.savgol_filter(x, width, 3, deriv=deriv, delta=h, mode="interp")

    if log.speed_rad_s is not None:
        w = log.speed_rad_s
        speed, output = sg(w), sg(w)
        mech_speed, accel = sg(w, 0, wide), sg(w, 1, wide)
    else:
        pos = log.position_rad
        speed, output = sg(pos, 1), sg(pos)
        mech_speed, accel = sg(pos, 1, wide), sg(pos, 2, wide)
    return _Filtered(
        window=window,
        voltage=sg(log.voltage_V),
        current=sg(log.current_A),
        current_rate=sg(log.current_A, 1),
        speed=speed,
        acceleration=accel,
        mech_speed=mech_speed,
        mech_current=sg(log.current_A, 0, wide),
        output=output,
        wide=wide,
    )


def equation_error_start(log: MotorLog, window: int | None = None) -> dict[str, float]:
    """Start values of the six parameters by equation error (linear least squares).

    Parameters
    ----------
    log : MotorLog
        The measured log.
    window : int, optional
        Savitzky-Golay window [samples] (odd; default 15), cubic polynomials.

    Returns
    -------
    dict
        Parameter name -> SI value (see :data:`PARAMETERS`); frictions clipped at 0.

    Raises
    ------
    ScenarioError
        The log does not excite the motor enough for a positive ``R, L, K, J`` (no voltage
        change, no running).
    """
    f = _filtered(log, _window(len(log.time_s), window))
    regress = np.column_stack([f.current, f.current_rate, f.speed])
    (r, ind, k), *_ = np.linalg.lstsq(regress, f.voltage, rcond=None)
    ws = f.mech_speed
    moving = np.abs(ws) > 0.05 * max(float(np.max(np.abs(ws))), 1e-300)
    values = {"resistance": r, "inductance": ind, "torque_constant": k}
    if np.count_nonzero(moving) < 10 or not k > 0:
        _not_excited(log, values, "torque_constant")
    mech = np.column_stack([f.acceleration[moving], ws[moving], np.sign(ws[moving])])
    # non-negative least squares (Lawson & Hanson, Solving Least Squares Problems, 1974,
    # ch. 23): with running in one direction only, speed and sgn(speed) are nearly collinear
    # and the unconstrained solution trades a negative B for a huge T_c
    (j, b, tc), _ = optimize.nnls(mech, k * f.mech_current[moving])
    # a start the motor could not even turn from would leave the output error without a
    # gradient: keep T_c below half the largest armature torque of the log
    tc = min(tc, 0.5 * k * float(np.max(np.abs(f.mech_current))))
    values |= {"inertia": j, "viscous_friction": b, "coulomb_friction": tc}
    for name in ("resistance", "inductance", "torque_constant", "inertia"):
        if not (math.isfinite(values[name]) and values[name] > 0.0):
            _not_excited(log, values, name)
    return {name: max(float(values[name]), 0.0) for name in PARAMETERS}


def _not_excited(log: MotorLog, values: Mapping[str, float], name: str) -> None:
    raise ScenarioError(
        "expected a log that excites the motor (voltage steps that change the current, and "
        f"running at speed), found that the equation-error fit gives {name} = "
        f"{values.get(name, float('nan')):.4g} {UNITS[name]}",
        source=log.source,
        key=name,
    )


def _noise_level(x: np.ndarray, window: int) -> float:
    """Standard deviation of white noise on ``x``, from what a cubic Savitzky-Golay filter
    removes: ``var(x - F x) = sigma^2 (1 - c0)`` for a projection filter with centre weight
    ``c0`` (the filter's weights sum to 1 in squares as in value)."""
    c0 = signal.savgol_coeffs(window, 3)[window // 2]
    resid = x - signal.savgol_filter(x, window, 3, mode="interp")
    return float(np.std(resid) / math.sqrt(1.0 - c0))


# --------------------------------------------------------------------------------------------
# Output error and intervals
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class FitResult:
    """The fitted motor.

    Attributes
    ----------
    values : dict
        Parameter -> fitted value [SI] (:data:`PARAMETERS`, :data:`UNITS`).
    std_errors : dict
        Parameter -> standard error [SI] (linearised, Bates & Watts sec. 2.3).
    intervals : dict
        Parameter -> (low, high), the 95 % confidence interval [SI].
    start : dict
        Parameter -> equation-error start value [SI].
    correlation : numpy.ndarray
        (6, 6) correlation matrix of the estimates, in :data:`PARAMETERS` order.
    noise : dict
        ``current_A`` and ``speed_rad_s`` or ``position_rad``: the RMS of the output-error
        residuals (the noise level each channel was weighted by).
    channel : str
        ``"speed"`` or ``"position"``: the measured mechanical channel.
    n_samples : int
        Samples in the log.
    initial_state : tuple of float
        Current [A], speed [rad/s] and angle [rad] the simulation starts from.
    fitted : numpy.ndarray
        (n, 3) simulated current, speed and angle with the fitted values.
    log : MotorLog
        The log fitted.
    evaluations : int
        Simulations the output-error fit took.
    poorly_excited : tuple of str
        Parameters whose 95 % half-width exceeds :data:`POORLY_EXCITED_PERCENT` of the value.
    """

    values: dict[str, float]
    std_errors: dict[str, float]
    intervals: dict[str, tuple[float, float]]
    start: dict[str, float]
    correlation: np.ndarray
    noise: dict[str, float]
    channel: str
    n_samples: int
    initial_state: tuple[float, float, float]
    fitted: np.ndarray
    log: MotorLog
    evaluations: int
    poorly_excited: tuple[str, ...] = field(default=())

    def half_width_percent(self, name: str) -> float:
        """Half-width of the 95 % interval of ``name`` as a percentage of its value [%]."""
        lo, hi = self.intervals[name]
        value = self.values[name]
        return 100.0 * 0.5 * (hi - lo) / abs(value) if value else math.inf

    def as_dict(self) -> dict[str, Any]:
        """JSON-ready: per parameter value, unit, standard error, interval and start (``None``
        where not finite: a parameter the log does not determine); the noise levels, the
        sample count and what the log measured."""
        return {
            "source": self.log.source,
            "channel": self.channel,
            "n_samples": self.n_samples,
            "sample_time_s": self.log.sample_time_s,
            "confidence": CONFIDENCE,
            "parameters": {
                name: {
                    "value": _finite(self.values[name]),
                    "unit": UNITS[name],
                    "std_error": _finite(self.std_errors[name]),
                    "interval_95": [_finite(x) for x in self.intervals[name]],
                    "start": _finite(self.start[name]),
                }
                for name in PARAMETERS
            },
            "noise": {k: _finite(v) for k, v in self.noise.items()},
            "evaluations": self.evaluations,
            "poorly_excited": list(self.poorly_excited),
        }


def _covariance(jac: np.ndarray, s2: float) -> np.ndarray:
    """``s^2 (J^T J)^-1`` (Bates & Watts 1988, sec. 2.3), with infinite variance for the
    parameters in any direction the log does not determine.

    ``J^T J`` is scaled to unit diagonal first; eigenvalues below 1e-10 of the largest mark
    directions without information, and every parameter taking part in one (a component
    above 1e-3) gets an infinite variance rather than the zero a pseudo-inverse would give.
    """
    m = jac.T @ jac
    d = np.sqrt(np.diag(m))
    p = len(d)
    cov = np.full((p, p), np.inf)
    known = d > 0.0
    if not known.any():
        return cov
    sub = m[np.ix_(known, known)] / np.outer(d[known], d[known])
    lam, vec = np.linalg.eigh(sub)
    null = lam < 1e-10 * lam[-1]
    blind = np.zeros(p, dtype=bool)
    blind[~known] = True
    idx = np.flatnonzero(known)
    if null.any():
        blind[idx[np.any(np.abs(vec[:, null]) > 1e-3, axis=1)]] = True
    keep = np.flatnonzero(~blind)
    if keep.size:
        part = m[np.ix_(keep, keep)] / np.outer(d[keep], d[keep])
        inv = np.linalg.inv(part) / np.outer(d[keep], d[keep])
        cov[np.ix_(keep, keep)] = s2 * inv
    return cov


def _finite(x: float) -> float | None:
    """``x``, or ``None`` (JSON ``null``) when it is not finite (an undetermined interval)."""
    return float(x) if math.isfinite(x) else None


def fit_motor(log: MotorLog, *, window: int | None = None) -> FitResult:
    """Fit ``R, L, K, J, B, T_c`` to a log (equation error, then output error).

    Parameters
    ----------
    log : MotorLog
        Voltage [V], current [A] and speed [rad/s] or position [rad] at even intervals;
        the shaft carries no load but the motor's own friction.
    window : int, optional
        Savitzky-Golay window of the start and of the noise estimate [samples] (default 15).

    Returns
    -------
    FitResult
        Values, standard errors, 95 % intervals, correlations, noise levels and the fitted
        response.

    Raises
    ------
    ScenarioError
        The log does not excite the motor (see :func:`equation_error_start`), or the fit ends
        on a model that cannot be simulated.
    """
    n = len(log.time_s)
    w = _window(n, window)
    h = log.sample_time_s
    start = equation_error_start(log, w)
    f = _filtered(log, w)
    position = log.channel == "position"
    measured = log.position_rad if position else log.speed_rad_s
    column = 2 if position else 1

    sigma_i = max(_noise_level(log.current_A, w), 1e-9 * float(np.max(np.abs(log.current_A))))
    if position:
        # an angle's quantisation and noise: its filter residual, or one count of a fine encoder
        sigma_y = max(_noise_level(measured, w), 1e-6)
    else:
        sigma_y = max(_noise_level(measured, w), 1e-9 * float(np.max(np.abs(measured))))

    def edge(deriv: int) -> float:
        """Noise gain of the filter's value (or derivative) at the first sample."""
        c = signal.savgol_coeffs(w, 3, deriv=deriv, delta=h, pos=0, use="dot")
        return float(np.sqrt(c @ c))

    def at_rest(value: float, sigma: float) -> float:
        """The log starts at rest when its first smoothed value is within 3 sigma of 0."""
        return 0.0 if abs(value) < 3.0 * sigma else float(value)

    sigma_w0 = sigma_y * edge(1 if position else 0)
    x0 = (
        at_rest(float(f.current[0]), sigma_i * edge(0)),
        at_rest(float(f.speed[0]), sigma_w0),
        float(f.output[0]) if position else 0.0,
    )

    i_max = float(np.max(np.abs(log.current_A))) or 1.0
    w_max = float(np.max(np.abs(f.speed))) or 1.0
    k0 = start["torque_constant"]
    scale = np.array([start[name] for name in PARAMETERS])
    scale[4] = max(scale[4], 1e-2 * k0 * i_max / w_max)
    scale[5] = max(scale[5], 1e-2 * k0 * i_max)
    lower = np.array([1e-3, 1e-3, 1e-3, 1e-3, 0.0, 0.0])
    upper = np.full(6, 1e3)
    bad = np.full(2 * n, 1e6)
    count = [0]

    def residual(x: np.ndarray, si: float, sy: float) -> np.ndarray:
        count[0] += 1
        sim = simulate_log(x * scale, log.voltage_V, h, x0)
        r = np.concatenate([(sim[:, 0] - log.current_A) / si, (sim[:, column] - measured) / sy])
        return r if np.all(np.isfinite(r)) else bad

    x = np.clip(np.array([start[name] for name in PARAMETERS]) / scale, lower, upper)
    x = np.where(x > lower, x, lower + 1e-3)
    for _ in range(2):  # fit; re-weight each channel by its residual RMS; fit again
        sol = optimize.least_squares(
            residual, x, bounds=(lower, upper), args=(sigma_i, sigma_y), method="trf",
            x_scale=1.0, max_nfev=400,
        )  # fmt: skip
        x = sol.x
        sim = simulate_log(x * scale, log.voltage_V, h, x0)
        sigma_i = float(np.sqrt(np.mean((sim[:, 0] - log.current_A) ** 2))) or sigma_i
        sigma_y = float(np.sqrt(np.mean((sim[:, column] - measured) ** 2))) or sigma_y

    r0 = residual(x, sigma_i, sigma_y)
    if r0 is bad:
        raise ScenarioError(
            "expected a log the motor model can follow, found that the fit ends on a model "
            "that cannot be simulated",
            source=log.source,
            key="fit",
        )
    jac = np.empty((r0.size, 6))
    for col in range(6):
        step = 1e-5 * max(abs(x[col]), 1e-2)
        up, down = x.copy(), x.copy()
        up[col] += step
        down[col] -= step
        jac[:, col] = (residual(up, sigma_i, sigma_y) - residual(down, sigma_i, sigma_y)) / (
            2.0 * step
        )
    dof = r0.size - 6
    s2 = float(r0 @ r0) / dof
    cov = _covariance(jac, s2) * np.outer(scale, scale)
    std = np.sqrt(np.maximum(np.diag(cov), 0.0))
    t = float(stats.t.ppf(0.5 + CONFIDENCE / 2.0, dof))
    values = x * scale
    with np.errstate(invalid="ignore", divide="ignore"):
        corr = cov / np.outer(std, std)
    result_values = {name: float(values[j]) for j, name in enumerate(PARAMETERS)}
    intervals = {
        name: (float(values[j] - t * std[j]), float(values[j] + t * std[j]))
        for j, name in enumerate(PARAMETERS)
    }
    poorly = tuple(
        name
        for j, name in enumerate(PARAMETERS)
        if not t * std[j] <= POORLY_EXCITED_PERCENT / 100.0 * abs(values[j])
    )
    noise_key = "position_rad" if position else "speed_rad_s"
    return FitResult(
        values=result_values,
        std_errors={name: float(std[j]) for j, name in enumerate(PARAMETERS)},
        intervals=intervals,
        start=dict(start),
        correlation=corr,
        noise={"current_A": sigma_i, noise_key: sigma_y},
        channel=log.channel,
        n_samples=n,
        initial_state=x0,
        fitted=simulate_log(values, log.voltage_V, h, x0),
        log=log,
        evaluations=count[0],
        poorly_excited=poorly,
    )
