"""The published loop-tuning rules (dcsim.tuning.rules) against their published check values.

Settings (invented): the hoist drum of a harbour winch (speed loop by the symmetric optimum),
the armature of a coolant-pump motor (current loop by the modulus optimum and by IMC), the
level loop of a rainwater tank (SIMC) and a conveyor on a warehouse shuttle (Ziegler-Nichols).

References: the closed forms derived in the comments, the check values of the design's
"Control and tuning" table with their published sources, and python-control
(``stability_margins``, ``step_info``, ``minreal``, ``pade``) as the reference library. The
delay of the SIMC loops is taken exactly: ``L(jw)`` is computed by hand as the rational part
times ``e^{-j w theta}`` (phase ``-w theta``), with crossings and the sensitivity peak refined
by scipy; a high-order Pade model in python-control is a cross-check.
"""

from __future__ import annotations

import math

import control
import numpy as np
import pytest
from scipy.optimize import brentq, minimize_scalar

from dcsim.errors import ScenarioError
from dcsim.tuning.rules import (
    Gains,
    imc_first_order,
    modulus_optimum,
    simc,
    simc_integrating,
    symmetric_optimum,
    ultimate_from_loop,
    ziegler_nichols,
)

S = control.tf("s")


def _controller(g: Gains) -> control.TransferFunction:
    """The parallel PID ``kp + ki/s + kd s`` of the gains."""
    c = g.kp + g.ki / S
    if g.kd:
        c = c + g.kd * S
    return control.tf(c)


def _first_crossing(t: np.ndarray, y: np.ndarray, level: float) -> float:
    """First time ``y`` reaches ``level``, interpolated linearly between grid points [s]."""
    k = int(np.argmax(y >= level))
    assert k > 0 and y[k] >= level
    return float(t[k - 1] + (level - y[k - 1]) / (y[k] - y[k - 1]) * (t[k] - t[k - 1]))


# --------------------------------------------------------------------------------------------
# Symmetric optimum: the hoist drum of a harbour winch, speed from the current command
# K/(J s), the closed current loop as a lag Ts.

WINCH_K_NM_A = 0.9  # torque constant [N m/A]
WINCH_J_KGM2 = 0.45  # motor + drum inertia referred to the shaft [kg m^2]
WINCH_TS_S = 2e-3  # lumped small lag: closed current loop + speed filter + sampling [s]


def _winch_loop(a: float) -> tuple[Gains, control.TransferFunction]:
    k = WINCH_K_NM_A / WINCH_J_KGM2
    g = symmetric_optimum(k, WINCH_TS_S, a)
    plant = control.tf(k / (S * (1 + WINCH_TS_S * S)))
    return g, control.minreal(_controller(g) * plant, verbose=False)


@pytest.mark.parametrize(("a", "pm_printed_deg"), [(2.0, 36.87), (3.0, 53.13), (4.0, 61.93)])
def test_symmetric_optimum_phase_margin_and_crossover(a, pm_printed_deg):
    g, loop = _winch_loop(a)
    k = WINCH_K_NM_A / WINCH_J_KGM2
    # Source: Kessler 1958; Preitl & Precup, Automatica 35 (1999): kp = 1/(a k Ts), Ti = a^2 Ts
    assert g.kp == pytest.approx(1.0 / (a * k * WINCH_TS_S), rel=1e-12)
    assert g.kp / g.ki == pytest.approx(a * a * WINCH_TS_S, rel=1e-12)
    assert g.prefilter_time_s == pytest.approx(a * a * WINCH_TS_S, rel=1e-12)
    assert g.kd == 0.0 and g.method == "symmetric-optimum"
    _, pm_deg, _, _, wgc, _ = control.stability_margins(loop)  # reference library
    # Source: Preitl & Precup, Automatica 35 (1999): PM = arctan((a^2 - 1)/(2a)) (derived)
    assert pm_deg == pytest.approx(math.degrees(math.atan((a * a - 1) / (2 * a))), abs=1e-6)
    # Source: design check list "Control and tuning" (Kessler 1958 -- derived); printed to
    # 0.01 deg
    assert abs(pm_deg - pm_printed_deg) <= 0.005
    # Source: Kessler 1958: gain crossover at 1/(a Ts), the geometric mean of 1/(a^2 Ts) and
    # 1/Ts (derived: |L(j/(a Ts))| = 1 exactly)
    assert wgc == pytest.approx(1.0 / (a * WINCH_TS_S), rel=1e-9)


def test_symmetric_optimum_step_overshoot_with_and_without_prefilter():
    g, loop = _winch_loop(2.0)
    closed = control.feedback(loop, 1)
    prefilter = control.tf([1.0], [g.prefilter_time_s, 1.0])
    t = np.linspace(0.0, 400 * WINCH_TS_S, 40_001)
    bare = control.step_info(closed, T=t)["Overshoot"]
    filtered = control.step_info(control.series(prefilter, closed), T=t)["Overshoot"]
    # Source: design check list "Control and tuning" (Kessler 1958; Preitl & Precup,
    # Automatica 35 (1999) -- derived): a = 2 -> 43.4 % without, 8.1 % with 1/(1 + a^2 Ts s);
    # tolerance half a unit of the last printed digit
    assert abs(bare - 43.4) <= 0.05
    assert abs(filtered - 8.1) <= 0.05


# --------------------------------------------------------------------------------------------
# Modulus optimum: the armature of a coolant-pump motor, i/v = (1/R)/(1 + s L/R), with the
# sampling and PWM lumped into a small lag Ts.

PUMP_R_OHM = 1.2
PUMP_L_H = 6e-3
PUMP_TS_S = 150e-6


def _pump_mo():
    g = modulus_optimum(1.0 / PUMP_R_OHM, PUMP_L_H / PUMP_R_OHM, PUMP_TS_S)
    plant = control.tf((1.0 / PUMP_R_OHM) / ((1 + PUMP_L_H / PUMP_R_OHM * S) * (1 + PUMP_TS_S * S)))
    loop = control.minreal(_controller(g) * plant, verbose=False)
    return g, loop


def test_modulus_optimum_gains_and_loop_shape():
    g, loop = _pump_mo()
    t1, k = PUMP_L_H / PUMP_R_OHM, 1.0 / PUMP_R_OHM
    # Source: Kessler 1955 (modulus / technical optimum): Ti = T1, kp = T1/(2 k Ts)
    assert g.kp == pytest.approx(t1 / (2 * k * PUMP_TS_S), rel=1e-12)
    assert g.kp / g.ki == pytest.approx(t1, rel=1e-12)
    assert g.prefilter_time_s is None and g.method == "modulus-optimum"
    # Source: Kessler 1955: the open loop becomes 1/(2 Ts s (1 + Ts s)) (python-control
    # frequency response of both, over four decades around the crossover)
    target = control.tf([1.0], [2 * PUMP_TS_S**2, 2 * PUMP_TS_S, 0.0])
    w = np.logspace(-2, 2, 401) / PUMP_TS_S
    got = loop(1j * w)
    want = target(1j * w)
    assert np.max(np.abs(got / want - 1.0)) < 1e-9


def test_modulus_optimum_closed_loop_figures():
    _, loop = _pump_mo()
    ts = PUMP_TS_S
    closed = control.minreal(control.feedback(loop, 1), verbose=False)
    # damping of the closed-loop poles (python-control damp)
    _, zeta, _ = control.damp(closed, doprint=False)
    # Source: Kessler 1955 (design check list "Control and tuning"): zeta = 1/sqrt(2)
    assert np.allclose(zeta, 1.0 / math.sqrt(2.0), rtol=0, atol=1e-9)
    t = np.linspace(0.0, 40 * ts, 40_001)  # step 1e-3 Ts
    info = control.step_info(closed, T=t)
    _, y = control.step_response(closed, T=t)
    rise_100 = _first_crossing(t, np.squeeze(y), 1.0)
    _, pm_deg, _, _, _, _ = control.stability_margins(loop)
    # Source: design check list "Control and tuning" (Kessler 1955 -- derived): overshoot
    # 4.32 %, rise to 100 % 4.71 Ts, 2 % settling 8.43 Ts, PM 65.5 deg; tolerances half a unit
    # of the last printed digit
    assert abs(info["Overshoot"] - 4.32) <= 0.005
    assert abs(rise_100 / ts - 4.71) <= 0.005
    assert abs(info["SettlingTime"] / ts - 8.43) <= 0.005
    assert abs(pm_deg - 65.5) <= 0.05
    # Source: closed forms of the second-order step response (e.g. Ogata, Modern Control
    # Engineering, 5th ed., sec. 5-3 -- section from memory): with zeta = 1/sqrt(2),
    # wn = 1/(sqrt(2) Ts): overshoot 100 exp(-pi) %, first time at 1:
    # (pi - acos(zeta))/(wn sqrt(1 - zeta^2)) = 3 pi Ts / 2
    assert info["Overshoot"] == pytest.approx(100 * math.exp(-math.pi), abs=1e-4)
    assert rise_100 == pytest.approx(1.5 * math.pi * ts, rel=1e-6)
    # Source: derived: |L(jw)| = 1 at (w Ts)^2 = (sqrt(2) - 1)/2, PM = 90 deg - atan(w Ts)
    x = math.sqrt((math.sqrt(2.0) - 1.0) / 2.0)
    assert pm_deg == pytest.approx(90.0 - math.degrees(math.atan(x)), abs=1e-6)


# --------------------------------------------------------------------------------------------
# SIMC: the level loop of a rainwater tank, a first-order lag with a transport delay (and the
# tank alone, integrating).


def test_simc_gains_from_the_formulas():
    k, theta = 2.5, 0.1
    # Source: Skogestad, J. Process Control 13 (2003) 291-309: Kc = tau1/(k (tau_c + theta)),
    # tau_I = min(tau1, 4 (tau_c + theta)), default tau_c = theta; hand-evaluated
    g = simc(k, 0.8, theta)  # Kc = 0.8/(2.5*0.2) = 1.6, tau_I = min(0.8, 0.8) = 0.8
    assert g.kp == pytest.approx(1.6, rel=1e-12)
    assert g.ki == pytest.approx(1.6 / 0.8, rel=1e-12)
    g = simc(k, 4.0, theta)  # Kc = 4/(2.5*0.2) = 8, tau_I = min(4, 0.8) = 0.8
    assert g.kp == pytest.approx(8.0, rel=1e-12)
    assert g.ki == pytest.approx(8.0 / 0.8, rel=1e-12)
    g = simc(k, 0.8, theta, tau_c_s=0.3)  # Kc = 0.8/(2.5*0.4) = 0.8, tau_I = min(0.8, 1.6)
    assert g.kp == pytest.approx(0.8, rel=1e-12)
    assert g.ki == pytest.approx(0.8 / 0.8, rel=1e-12)
    g = simc(k, 0.8, 0.0, tau_c_s=0.2)  # no delay: Kc = 0.8/(2.5*0.2) = 1.6, tau_I = 0.8
    assert g.kp == pytest.approx(1.6, rel=1e-12)
    assert g.ki == pytest.approx(2.0, rel=1e-12)
    assert g.kd == 0.0 and g.method == "simc"
    # Source: same paper, integrating plant: Kc = 1/(k (tau_c + theta)), tau_I = 4 (tau_c +
    # theta); k = 0.5, theta = 0.02: Kc = 1/(0.5*0.04) = 50, tau_I = 0.16
    g = simc_integrating(0.5, 0.02)
    assert g.kp == pytest.approx(50.0, rel=1e-12)
    assert g.ki == pytest.approx(50.0 / 0.16, rel=1e-12)
    g = simc_integrating(0.5, 0.02, tau_c_s=0.08)  # Kc = 1/(0.5*0.1) = 20, tau_I = 0.4
    assert g.kp == pytest.approx(20.0, rel=1e-12)
    assert g.ki == pytest.approx(20.0 / 0.4, rel=1e-12)


def _exact_margins(rational, theta: float, w_scale: float) -> tuple[float, float, float]:
    """GM [-], PM [deg] and Ms [-] of ``L(jw) = rational(jw) e^{-j w theta}``, the delay
    exact. ``rational`` is a list of python-control factors; the phase is the sum of their
    principal angles (each within (-pi, pi), so the sum is continuous) minus ``w theta``."""
    factors = list(rational)

    def l_jw(w):
        val = np.exp(-1j * w * theta)
        for f in factors:
            val = val * f(1j * w)
        return val

    def phase(w):
        return sum(np.angle(f(1j * w)) for f in factors) - w * theta

    w = np.logspace(-4, 3, 200_001) / w_scale
    mag = np.abs(l_jw(w))
    ph = phase(w)
    # gain crossover: the last fall through |L| = 1
    down = np.nonzero((mag[:-1] >= 1.0) & (mag[1:] < 1.0))[0]
    assert down.size == 1
    wc = brentq(lambda x: abs(l_jw(x)) - 1.0, w[down[0]], w[down[0] + 1], xtol=1e-14)
    pm_deg = math.degrees(phase(wc) + math.pi)
    # phase crossover: the first fall through -180 deg
    cross = np.nonzero((ph[:-1] > -math.pi) & (ph[1:] <= -math.pi))[0]
    wp = brentq(lambda x: phase(x) + math.pi, w[cross[0]], w[cross[0] + 1], xtol=1e-14)
    gm = 1.0 / abs(l_jw(wp))
    # sensitivity peak: grid maximum refined by a bounded scalar search
    sens = np.abs(1.0 / (1.0 + l_jw(w)))
    i = int(np.argmax(sens))
    res = minimize_scalar(
        lambda x: -abs(1.0 / (1.0 + l_jw(x))),
        bounds=(w[i - 1], w[i + 1]),
        method="bounded",
        options={"xatol": 1e-12 * w[i]},
    )
    return gm, pm_deg, float(-res.fun)


@pytest.mark.parametrize("tau1_over_theta", [0.5, 1.0, 3.0, 8.0])
def test_simc_margins_with_exact_delay(tau1_over_theta):
    k, theta = 2.5, 0.1
    tau1 = tau1_over_theta * theta
    g = simc(k, tau1, theta)
    rational = [_controller(g), control.tf([k], [tau1, 1.0])]
    gm, pm_deg, ms = _exact_margins(rational, theta, theta)
    # Source: Skogestad, J. Process Control 13 (2003) 291-309 (design check list "Control
    # and tuning", confirmed): tau_c = theta, tau1 <= 8 theta -> GM 3.14, PM 61.4 deg,
    # Ms 1.59; tolerances half a unit of the last printed digit
    assert abs(gm - 3.14) <= 0.005
    assert abs(pm_deg - 61.4) <= 0.05
    assert abs(ms - 1.59) <= 0.005
    # Source: derived: tau_I = tau1 cancels the lag, L = e^{-theta s}/(2 theta s); phase
    # -pi/2 - w theta is -pi at w = pi/(2 theta), where |L| = 1/pi -> GM = pi; |L| = 1 at
    # w = 1/(2 theta) -> PM = 90 deg - (1/2 rad)
    assert gm == pytest.approx(math.pi, rel=1e-9)
    assert pm_deg == pytest.approx(90.0 - math.degrees(0.5), abs=1e-7)


def test_simc_margins_cross_checked_with_pade_in_python_control():
    k, theta, tau1 = 2.5, 0.1, 0.5
    g = simc(k, tau1, theta)
    num, den = control.pade(theta, 10)
    loop = _controller(g) * control.tf([k], [tau1, 1.0]) * control.tf(num, den)
    gm, pm_deg, _, _, _, _ = control.stability_margins(loop)
    # Source: python-control stability_margins on a 10th-order Pade model of the delay,
    # against the exact values pi and 90 deg - (1/2 rad) derived above; the Pade error at
    # w theta = pi/2 is far below the bounds used
    assert gm == pytest.approx(math.pi, rel=1e-6)
    assert pm_deg == pytest.approx(90.0 - math.degrees(0.5), abs=1e-6)


def test_simc_integrating_margins_with_exact_delay():
    k, theta = 0.5, 0.02
    g = simc_integrating(k, theta)
    rational = [_controller(g), control.tf([k], [1.0, 0.0])]
    gm, pm_deg, ms = _exact_margins(rational, theta, theta)
    # from memory: Skogestad, J. Process Control 13 (2003), the robustness table for the
    # integrating plant with tau_c = theta: GM 2.96, PM 46.9 deg, Ms 1.70 (half a unit of the
    # last printed digit)
    assert abs(gm - 2.96) <= 0.005
    assert abs(pm_deg - 46.9) <= 0.05
    assert abs(ms - 1.70) <= 0.005


# --------------------------------------------------------------------------------------------
# IMC: the coolant-pump armature again, 1/(R + s L).


def test_imc_current_loop_is_first_order_of_the_wanted_bandwidth():
    r, ind = 0.8, 2.4e-3
    alpha = 2 * math.pi * 500.0
    g = imc_first_order(1.0 / r, ind / r, alpha)
    # Source: Harnefors & Nee, IEEE Trans. Ind. Appl. 34 (1998) -- from memory (design check
    # list "Control and tuning"): kp = alpha L, ki = alpha R
    assert g.kp == pytest.approx(alpha * ind, rel=1e-12)
    assert g.ki == pytest.approx(alpha * r, rel=1e-12)
    assert g.method == "imc" and g.prefilter_time_s is None
    plant = control.tf([1.0], [ind, r])
    closed = control.minreal(control.feedback(_controller(g) * plant, 1), verbose=False)
    # Source: python-control minreal: the closed loop reduces to alpha/(s + alpha)
    assert control.poles(closed) == pytest.approx([-alpha], rel=1e-9)
    assert complex(closed.dcgain()).real == pytest.approx(1.0, rel=1e-12)
    w = np.logspace(-2, 2, 401) * alpha
    want = alpha / (1j * w + alpha)
    assert np.max(np.abs(closed(1j * w) / want - 1.0)) < 1e-9


def test_imc_general_first_order_plant():
    k, t1, alpha = 3.0, 0.4, 25.0
    g = imc_first_order(k, t1, alpha)
    # Source: internal-model control of k/(1 + s T1) (pole-zero cancellation): kp = alpha T1/k,
    # ki = alpha/k; the closed loop is alpha/(s + alpha) (python-control frequency response)
    assert g.kp == pytest.approx(alpha * t1 / k, rel=1e-12)
    assert g.ki == pytest.approx(alpha / k, rel=1e-12)
    closed = control.feedback(_controller(g) * control.tf([k], [t1, 1.0]), 1)
    w = np.logspace(-2, 2, 401) * alpha
    assert np.max(np.abs(closed(1j * w) / (alpha / (1j * w + alpha)) - 1.0)) < 1e-9


# --------------------------------------------------------------------------------------------
# Ziegler-Nichols: a conveyor on a warehouse shuttle.


def test_ziegler_nichols_table():
    ku, pu = 12.0, 0.05
    # Source: Ziegler & Nichols, Trans. ASME 64 (1942) 759-768, ultimate-cycle table:
    # P 0.5 Ku; PI 0.45 Ku, Ti = Pu/1.2; PID 0.6 Ku, Ti = Pu/2, Td = Pu/8 (parallel: ki = kp/Ti,
    # kd = kp Td); hand-evaluated
    p = ziegler_nichols(ku, pu, "P")
    assert (p.kp, p.ki, p.kd) == pytest.approx((6.0, 0.0, 0.0), rel=1e-12)
    pi = ziegler_nichols(ku, pu, "PI")
    assert (pi.kp, pi.ki, pi.kd) == pytest.approx((5.4, 5.4 * 1.2 / 0.05, 0.0), rel=1e-12)
    pid = ziegler_nichols(ku, pu, "PID")
    assert (pid.kp, pid.ki, pid.kd) == pytest.approx((7.2, 7.2 * 2 / 0.05, 7.2 * 0.05 / 8))
    assert ziegler_nichols(ku, pu).kp == pytest.approx(pi.kp)  # default is PI
    for g in (p, pi, pid):
        assert g.method == "ziegler-nichols"
        assert "quarter-amplitude" in g.notes and "aggressive" in g.notes


@pytest.mark.parametrize(("k", "tau_s"), [(1.0, 1.0), (2.0, 1.0), (0.5, 0.01)])
def test_ultimate_from_continuous_loop(k, tau_s):
    loop = control.tf([k], [tau_s**3, 3 * tau_s**2, 3 * tau_s, 1.0])  # k/(tau s + 1)^3
    ku, pu = ultimate_from_loop(loop)
    # Source: closed form: the phase -3 atan(w tau) is -180 deg at w tau = sqrt(3), where
    # |L| = k/8 -> Ku = 8/k, Pu = 2 pi tau/sqrt(3)
    assert ku == pytest.approx(8.0 / k, rel=1e-9)
    assert pu == pytest.approx(2 * math.pi * tau_s / math.sqrt(3.0), rel=1e-9)
    # Source: closed form: at Ku the closed loop has poles +-j sqrt(3)/tau (python-control)
    poles = control.poles(control.feedback(ku * loop, 1))
    assert np.min(np.abs(poles - 1j * math.sqrt(3.0) / tau_s)) < 1e-6 / tau_s


def test_ultimate_from_discrete_loop():
    h, k = 1e-3, 200.0
    loop = control.tf([k * h], [1.0, -1.0, 0.0], h)  # k h / ((z - 1) z): integrator + delay
    ku, pu = ultimate_from_loop(loop)
    # Source: closed form: with z = e^{j w h}, arg = -pi/2 - 3 w h/2 is -pi at w h = pi/3,
    # where |L| = k h/(2 sin(w h/2)) = k h -> Ku = 1/(k h), Pu = 2 pi/w = 6 h [s]
    assert ku == pytest.approx(1.0 / (k * h), rel=1e-9)
    assert pu == pytest.approx(6 * h, rel=1e-9)
    # Source: closed form: z^2 - z + Ku k h = 0 has |z| = 1 at Ku (python-control poles)
    poles = control.poles(control.feedback(ku * loop, 1))
    assert np.abs(poles) == pytest.approx([1.0, 1.0], abs=1e-9)


def test_ziegler_nichols_from_ultimate_loop():
    loop = control.tf([2.0], [1.0, 3.0, 3.0, 1.0])  # 2/(s + 1)^3
    g = ziegler_nichols(*ultimate_from_loop(loop), kind="PID")
    # Source: Ziegler & Nichols (1942) table with the closed-form Ku = 4, Pu = 2 pi/sqrt(3)
    pu = 2 * math.pi / math.sqrt(3.0)
    assert g.kp == pytest.approx(0.6 * 4.0, rel=1e-9)
    assert g.ki == pytest.approx(0.6 * 4.0 / (pu / 2), rel=1e-9)
    assert g.kd == pytest.approx(0.6 * 4.0 * pu / 8, rel=1e-9)


# --------------------------------------------------------------------------------------------
# Bad input: one ScenarioError (a ValueError) naming the parameter, what was expected and
# what was found.

BAD = [
    (imc_first_order, (0.0, 0.1, 100.0), "gain"),
    (imc_first_order, (-1.0, 0.1, 100.0), "gain"),
    (imc_first_order, (1.0, math.nan, 100.0), "time_constant_s"),
    (imc_first_order, (1.0, 0.1, math.inf), "bandwidth_rad_s"),
    (imc_first_order, ("1", 0.1, 100.0), "gain"),
    (imc_first_order, (True, 0.1, 100.0), "gain"),
    (modulus_optimum, (1.0, 0.0, 1e-4), "time_constant_s"),
    (modulus_optimum, (1.0, 0.01, -1e-4), "small_time_constant_s"),
    (modulus_optimum, (None, 0.01, 1e-4), "gain"),
    (symmetric_optimum, (0.0, 1e-3), "gain"),
    (symmetric_optimum, (1.0, 0.0), "small_time_constant_s"),
    (symmetric_optimum, (1.0, 1e-3, 1.0), "a"),
    (symmetric_optimum, (1.0, 1e-3, 0.5), "a"),
    (symmetric_optimum, (1.0, 1e-3, -2.0), "a"),
    (simc, (1.0, 0.5, 0.0), "delay_s"),
    (simc, (1.0, 0.5, -0.1), "delay_s"),
    (simc, (1.0, 0.5, 0.1, 0.0), "tau_c_s"),
    (simc, (1.0, -0.5, 0.1), "time_constant_s"),
    (simc, (-1.0, 0.5, 0.1), "gain"),
    (simc_integrating, (0.0, 0.1), "gain"),
    (simc_integrating, (1.0, 0.0), "delay_s"),
    (simc_integrating, (1.0, 0.1, -1.0), "tau_c_s"),
    (ziegler_nichols, (0.0, 1.0), "ultimate_gain"),
    (ziegler_nichols, (1.0, -1.0), "ultimate_period_s"),
    (ziegler_nichols, (1.0, 1.0, "PD"), "kind"),
    (ultimate_from_loop, ("1/(s+1)",), "loop_tf"),
    (ultimate_from_loop, (control.tf([1.0], [1.0, 1.0]),), "loop_tf"),  # no phase crossover
    (ultimate_from_loop, (control.tf([[[1.0], [1.0]]], [[[1.0, 1.0], [1.0, 2.0]]]),), "loop_tf"),
]


@pytest.mark.parametrize(("rule", "args", "key"), BAD)
def test_bad_input_raises_one_clear_error(rule, args, key):
    with pytest.raises(ScenarioError) as err:
        rule(*args)
    assert isinstance(err.value, ValueError)
    assert err.value.key == key
    text = str(err.value)
    assert key in text and rule.__name__ in text and "expected" in text and "found" in text
