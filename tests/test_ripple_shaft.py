"""Commutator torque ripple and the compliant shaft with backlash (machine-library kernel).

Setting (invented): the drive of a film-winding roller in a small packaging line, a brushed
permanent-magnet motor coupled to its roller through a flexible coupling with play.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

import dcsim
from dcsim.engine.machine_kernel import ripple_factor
from dcsim.errors import ScenarioError


def _pulses(n: int) -> int:
    return n if n % 2 == 0 else 2 * n


def _envelope(phi: np.ndarray, p: int) -> np.ndarray:
    """p-pulse rectified cosine with mean 1 (derived).

    A sum of N rectified sines displaced by 2 pi / N is, between consecutive zeros of its
    terms, a sum of plain sines with fixed signs: one sinusoid. The zeros fall at multiples of
    2 pi / p (p = N even, 2N odd), so the sum is a train of equal arcs cos(phi - phi_k) about
    the peaks phi_k = pi/p + 2 pi k / p; the mean of such an arc is (p/pi) sin(pi/p) of its
    peak, hence the factor (pi/p)/sin(pi/p) for mean 1.
    """
    return (
        (math.pi / p) / math.sin(math.pi / p) * np.cos(np.mod(phi, 2 * math.pi / p) - math.pi / p)
    )


# ------------------------------------------------------------------------------------------
# 1. the ripple factor
# ------------------------------------------------------------------------------------------


@pytest.mark.parametrize("n, percent", [(3, 13.4), (4, 29.3), (5, 4.9), (8, 7.6), (12, 3.4)])
def test_ripple_factor_peak_to_peak_and_mean(n, percent):
    p = _pulses(n)
    phi = np.linspace(0.0, 2 * math.pi, 120_001)
    r = np.array([ripple_factor(x, n) for x in phi])
    # Source: multiphase-rectifier identity, pk-pk / max = 1 - cos(pi/p) (e.g. Rashid, Power
    # Electronics, diode-rectifier chapter) applied to the commutator -- derived; CHECKS.md
    # values to the printed 0.1 %
    assert (r.max() - r.min()) / r.max() == pytest.approx(1 - math.cos(math.pi / p), abs=1e-8)
    assert 100 * (1 - math.cos(math.pi / p)) == pytest.approx(percent, abs=0.05)
    # Source: derived (the p-pulse envelope of _envelope, mean 1), pointwise
    assert np.max(np.abs(r - _envelope(phi, p))) < 1e-12
    # mean over one turn (trapezoid on a periodic function: exact to rounding for the
    # smooth arcs, the kinks cost O(h^2)) -- derived
    assert np.trapezoid(r, phi) / (2 * math.pi) == pytest.approx(1.0, abs=1e-8)


def test_one_coil_on_two_segments_touches_zero_twice_per_turn():
    # common practice (no source): one coil, two segments -> rectified sine, 100 % ripple
    phi = np.linspace(0.0, 2 * math.pi, 40_001)
    r = np.array([ripple_factor(x, 2) for x in phi])
    assert r.min() < 1e-12
    assert (r.max() - r.min()) / r.max() == pytest.approx(1.0, abs=1e-12)
    zeros = phi[r < 1e-9]
    assert len(np.unique(np.round(zeros[zeros < 2 * math.pi - 1e-9], 6))) == 2  # 0 and pi


# ------------------------------------------------------------------------------------------
# 2. ripple in a run
# ------------------------------------------------------------------------------------------

R, L, K, JM, JL, V, TL = 1.0, 1e-3, 0.2, 2e-4, 8e-4, 12.0, 0.1


def _ripple_text(nseg: int | None, pp: int = 1, duration: float = 0.4) -> str:
    seg = f"commutator_segments = {nseg}\npole_pairs = {pp}\n" if nseg else ""
    return f"""
[simulation]
duration = "{duration} s"
record_interval = "10 us"
[motor]
resistance = "{R} ohm"
inductance = "{L} H"
torque_constant = "{K} N*m/A"
inertia = "{JM} kg*m^2"
{seg}
[supply]
voltage = "{V} V"
[control]
voltage = "{V} V"
[load]
torque = "{TL} N*m"
inertia = "{JL} kg*m^2"
"""


def _up_crossings(t: np.ndarray, x: np.ndarray) -> np.ndarray:
    k = np.nonzero((x[:-1] < 0) & (x[1:] >= 0))[0]
    return t[k] - x[k] * (t[k + 1] - t[k]) / (x[k + 1] - x[k])


@pytest.mark.parametrize("n, pp", [(5, 1), (12, 1), (5, 2), (3, 1)])
def test_ripple_in_a_run(n, pp):
    res = dcsim.simulate(dcsim.load_scenario_text(_ripple_text(n, pp)))
    tr, s = res.trace, res.summary
    p = _pulses(n)
    # the flux constant column is motor torque / current and the p-pulse envelope of the
    # rotor angle (derived, see _envelope)
    i = tr["current_A"]
    nz = np.abs(i) > 1e-6
    assert np.allclose(tr["motor_torque_Nm"][nz] / i[nz], tr["flux_constant_V_s_rad"][nz],
                       rtol=1e-12, atol=0)  # fmt: skip
    assert (
        np.max(np.abs(tr["flux_constant_V_s_rad"] - K * _envelope(pp * tr["position_rad"], p)))
        < 1e-12
    )
    win = tr["time_s"] >= 0.3  # > 10 mechanical time constants (R J / K^2 = 25 ms): settled
    t, kf, w, ia = (
        tr["time_s"][win],
        tr["flux_constant_V_s_rad"][win],
        tr["speed_rad_s"][win],
        i[win],
    )
    wm = float(np.mean(w))
    # Source: derived -- the sampled extremes of the envelope, 10 us apart (pulse phase step
    # pp w h), lie within (pp w h)^2/2 of the peak and sin(pi/p) pp w h of the cusp
    dphi = pp * w.max() * 10e-6
    tol = (math.sin(math.pi / p) * dphi + dphi**2) / (1 - math.cos(math.pi / p))
    assert (kf.max() - kf.min()) / kf.max() == pytest.approx(1 - math.cos(math.pi / p), rel=tol)
    # frequency from the upward zero crossings of the ripple: p pp pulses per turn x turns
    # per second -- derived; the speed varies by (w.max-w.min)/w within the window
    tz = _up_crossings(t, kf - kf.mean())
    f_meas = (len(tz) - 1) / (tz[-1] - tz[0])
    spread = (w.max() - w.min()) / wm
    assert f_meas == pytest.approx(p * pp * wm / (2 * math.pi), rel=max(spread, 1e-4))
    assert s["commutator_pulses_per_turn"] == p * pp
    assert s["commutator_ripple_pp_fraction"] == pytest.approx(1 - math.cos(math.pi / p), rel=1e-12)
    assert s["commutator_ripple_frequency_Hz"] == pytest.approx(
        abs(s["final_speed_rad_s"]) * p * pp / (2 * math.pi), rel=1e-12
    )
    assert s["commutator_ripple_frequency_Hz"] == pytest.approx(f_meas, rel=max(spread, 1e-4))
    # current ripple at the pulse frequency, to first order in the ripple (derived):
    # r = 1 + a1 cos(.) + ..., a1 = 2/(p^2 - 1) (Fourier series of the p-pulse envelope);
    # linearised L di + R i + K w r = V and J dw = K (I0 r + i) - T_L at w0, I0 = T_L/K:
    # (R + j om L + K^2/(j om J)) i1 = -K a1 (w0 + K I0/(j om J)). Neglected: second order
    # in the ripple, relative size a1^2.
    om = p * pp * wm
    a1 = 2.0 / (p * p - 1)
    j = JM + JL
    z = R + 1j * om * L + K * K / (1j * om * j)
    i1 = abs(K * a1 * (wm + K * (TL / K) / (1j * om * j)) / z)
    per = 2 * math.pi / om
    sel = t <= t[0] + int((t[-1] - t[0]) / per) * per
    a = np.column_stack([np.ones(sel.sum()), np.cos(om * t[sel]), np.sin(om * t[sel])])
    coef, *_ = np.linalg.lstsq(a, ia[sel], rcond=None)
    assert math.hypot(coef[1], coef[2]) == pytest.approx(i1, rel=a1**2)


def test_machine_kernel_without_ripple_equals_the_exact_ideal_kernel():
    from dcsim.engine.machine_run import simulate_machine

    sc = dcsim.load_scenario_text(_ripple_text(None, duration=0.2))
    a, b = dcsim.simulate(sc), simulate_machine(sc)
    # Source: the ideal kernel's exact exponential steps (reference); the machine kernel's
    # RK4 with h <= tau/10 errs by about (h/tau)^4/120 per unit time: 1e-7 bounds it
    for name in ("current_A", "speed_rad_s", "position_rad", "motor_torque_Nm", "supply_current_A"):
        x, y = a.trace[name], b.trace[name]
        assert np.max(np.abs(x - y)) <= 1e-7 * np.max(np.abs(x)), name
    for key in ("final_speed_rad_s", "final_current_A", "energy_from_supply_J",
                "energy_copper_loss_J", "energy_to_load_J", "kinetic_energy_change_J"):  # fmt: skip
        assert b.summary[key] == pytest.approx(a.summary[key], rel=1e-7), key


# ------------------------------------------------------------------------------------------
# 3. two-mass shaft
# ------------------------------------------------------------------------------------------

J1, J2, KS = 1e-4, 3e-4, 4.0
KM, LM, VM = 5e-4, 1e-3, 5.0  # a weak motor: its electrical damping K^2/R is negligible
JEQ = J1 * J2 / (J1 + J2)
WR = math.sqrt(KS * (J1 + J2) / (J1 * J2))  # Source: derived (CHECKS.md two-mass resonance)


def _shaft_text(c=0.0, b=0.0, duration=0.3, load=0.0, rec="10 us", lm=LM, events=""):
    return f"""
[simulation]
duration = "{duration} s"
record_interval = "{rec}"
[motor]
resistance = "1 ohm"
inductance = "{lm} H"
torque_constant = "{KM} N*m/A"
inertia = "{J1} kg*m^2"
[supply]
voltage = "{VM} V"
[control]
voltage = "{VM} V"
[load]
inertia = "{J2} kg*m^2"
torque = "{load} N*m"
[shaft]
stiffness = "{KS} N*m/rad"
damping = "{c} N*m*s/rad"
backlash = "{b} rad"
{events}
"""


def _peaks(x: np.ndarray) -> np.ndarray:
    k = np.nonzero((x[1:-1] > x[:-2]) & (x[1:-1] >= x[2:]))[0] + 1
    y0, y1, y2 = x[k - 1], x[k], x[k + 1]
    return y1 - (y2 - y0) ** 2 / (8 * (y2 - 2 * y1 + y0))


def test_free_twist_oscillation_at_the_two_mass_resonance():
    res = dcsim.simulate(dcsim.load_scenario_text(_shaft_text()))
    tr = res.trace
    # Source: derived, J_eq d'' + k d = J_eq T/J1 with d = theta1 - theta2: the relative
    # speed oscillates at w_r. Neglected: the motor's electrical damping
    # zeta_e ~ K^2 J2 / (2 R w_r J1 (J1 + J2)) = 4e-6 (shift ~ zeta_e^2)
    tz = _up_crossings(tr["time_s"], tr["speed_rad_s"] - tr["load_speed_rad_s"])
    period = np.polyfit(np.arange(len(tz)), tz, 1)[0]
    assert len(tz) >= 10
    assert 2 * math.pi / period == pytest.approx(WR, rel=1e-4)
    assert res.summary["shaft_resonance_Hz"] == pytest.approx(WR / (2 * math.pi), rel=1e-12)


def test_shaft_damping_ratio():
    c = 2e-3
    zeta = c / (2 * math.sqrt(KS * JEQ))  # Source: derived, J_eq d'' + c d' + k d = f
    res = dcsim.simulate(dcsim.load_scenario_text(_shaft_text(c=c)))
    tr = res.trace
    dw = tr["speed_rad_s"] - tr["load_speed_rad_s"]
    pk = _peaks(dw)
    delta = -np.polyfit(np.arange(len(pk)), np.log(pk), 1)[0]  # logarithmic decrement
    z_meas = delta / math.sqrt(4 * math.pi**2 + delta**2)
    # Source: derived (log decrement of a damped oscillator); 5e-4 covers the electrical
    # damping zeta_e/zeta = 7e-5 and the 1 ms rise of the driving torque
    assert z_meas == pytest.approx(zeta, rel=5e-4)
    tz = _up_crossings(tr["time_s"], dw)
    period = np.polyfit(np.arange(len(tz)), tz, 1)[0]
    assert 2 * math.pi / period == pytest.approx(WR * math.sqrt(1 - zeta**2), rel=1e-4)


# ------------------------------------------------------------------------------------------
# 8. loader messages
# ------------------------------------------------------------------------------------------

_BASE = """
[simulation]
duration = "0.01 s"
[motor]
resistance = "1 ohm"
inductance = "1 mH"
torque_constant = "0.05 N*m/A"
inertia = "1e-4 kg*m^2"
{motor}
[supply]
voltage = "12 V"
{supply}
[control]
voltage = "12 V"
[load]
{load}
{rest}
"""
_SHAFT = '[shaft]\nstiffness = "5 N*m/rad"\n'
_EV = '[[events]]\nat = "1 ms"\nset = { "load.inertia" = "2e-4 kg*m^2" }\n'


@pytest.mark.parametrize(
    "parts, key, words",
    [
        (dict(motor="commutator_segments = 2.5"), "motor.commutator_segments", "whole number"),
        (dict(motor="commutator_segments = 1"), "motor.commutator_segments", "from 2"),
        (dict(load="torque = 0.01", rest=_SHAFT), "load.inertia", "load inertia > 0"),
        (
            dict(load="inertia = 1e-4", rest=_SHAFT + _EV),
            "events[0].set.load.inertia",
            "no event on load.inertia",
        ),  # fmt: skip
        (
            dict(load="inertia = 1e-4", rest=_SHAFT + "[gear]\nratio = 5\n" + _EV),
            "events[0].set.load.inertia",
            "no event on load.inertia",
        ),  # fmt: skip  (the gear-referred branch of the event loop checks it too)
        (
            dict(
                supply='capacitance = "1 mF"\nresistance = "0.05 ohm"',
                load="inertia = 1e-4",
                rest='[bridge]\nmodel = "averaged"\n' + _SHAFT,
            ),
            "bridge.model",
            "ideal",
        ),  # fmt: skip
    ],
)
def test_loader_messages(parts, key, words):
    text = _BASE.format(**{"motor": "", "supply": "", "load": "", "rest": "", **parts})
    with pytest.raises(ScenarioError) as err:
        dcsim.simulate(dcsim.load_scenario_text(text))
    assert err.value.key == key
    assert words in str(err.value)
