"""Bus capacitor stress (RMS current, ESR heating, ripple voltage) and the brown-out check.

The bench: a locked rotor with a large armature inductance behind a unipolar switching
bridge at duty m = 0.5, fed from a 48 V source through 10 ohm onto a 1 mF capacitor. The
armature current is then nearly constant, and so is the supply current (R_s C = 10 ms is 400
of the bridge's pulse periods), so the capacitor carries the pulsed part of the bridge's
current.

Closed form of the capacitor's RMS current (derived here). The bridge draws ``g i`` from the
bus, ``g`` = 1 while the legs apply the bus to the armature and 0 while they short it
(unipolar PWM: two such pulses per PWM period, each of ``m T / 2``, evenly spaced, so a
pulse train of duty ``D = m`` at ``2 f_s``). With ``i = I`` constant the bridge draws ``I``
for ``D T`` and nothing otherwise; the supply delivers the mean ``D I`` (the capacitor's
charge balance over a period); the capacitor carries the rest, ``I (1 - D)`` during the
pulse and ``-D I`` between pulses:

    I_C,rms^2 = D (I (1 - D))^2 + (1 - D) (D I)^2 = I^2 D (1 - D)   ->   I sqrt(D (1 - D)).

Source: N. Mohan, T. M. Undeland, W. P. Robbins, *Power Electronics*, 3rd ed., Wiley 2003,
the dc-side current of the full-bridge dc-dc converter (section from memory); the derivation
above is that of the input-capacitor current of a chopper.

Ripple voltage: between pulses the capacitor charges by ``D I (1 - D) T_p`` (``T_p`` the
pulse period), so ``dV = I D (1 - D) T_p / C`` (same source), ``T_p = 1 / (2 f_s)`` here. The
tests use the exact first-order form it is the limit of (the supply is a source behind
``R_s``, not an ideal current): during a pulse the bus relaxes towards ``V - R_s I`` with
``tau = R_s C``, between pulses towards ``V``; the periodic solution of these two
exponentials gives ``dV = R_s I (1 - e^-a)(1 - e^-b) / (1 - e^-(a+b))``, ``a = D T_p / tau``,
``b = (1 - D) T_p / tau``, which tends to ``I D (1 - D) T_p / C`` for ``T_p << tau``.
Source: first-order circuit response to a periodic square wave (e.g. any circuits text --
from memory); derived in :func:`rc_ripple`.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.linalg import expm

import dcsim
from dcsim.checks.brownout import brown_out_checks
from dcsim.checks.runs import run_all
from tests.reference import assert_energy_closes

V_S, R_S, C = 48.0, 10.0, 1e-3  # [V], [ohm], [F]
R_A, L_A = 4.0, 0.325  # [ohm], [H]
M = 0.5  # modulation: control.voltage / supply.voltage
F_S = 20e3  # [Hz]
T_P = 1.0 / (2.0 * F_S)  # unipolar: the bridge's pulses come at twice the PWM frequency [s]
# the armature current's time constant with the source resistance seen through the bridge:
# L di/dt = m v - R i, v = V - R_s m i  ->  tau = L / (R + m^2 R_s) = 50 ms
TAU_A = L_A / (R_A + M * M * R_S)

BENCH = """
[simulation]
duration = "{duration} s"
record_interval = "6.25 us"
[motor]
resistance = "{r_a} ohm"
inductance = "{l_a} H"
torque_constant = "0.05 N*m/A"
inertia = "1e-4 kg*m^2"
[load]
locked = true
[supply]
voltage = "{v_s} V"
resistance = "{r_s} ohm"
capacitance = "{c} F"
esr = "{esr} ohm"
[control]
voltage = "{v_cmd} V"
[bridge]
model = "{model}"
pwm = "unipolar"
frequency = "{f_s} Hz"
{extra}
"""


def bench(duration=0.4, esr=0.0, model="switching", extra=""):
    text = BENCH.format(
        duration=duration, r_a=R_A, l_a=L_A, v_s=V_S, r_s=R_S, c=C, esr=esr, v_cmd=M * V_S,
        model=model, f_s=F_S, extra=extra,
    )  # fmt: skip
    sc = dcsim.load_scenario_text(text)
    res = dcsim.simulate(sc)
    # Source: conservation of energy (first law); C V^2 / 2 is the stored scale
    assert_energy_closes(res.summary, stored_J=0.5 * C * V_S**2)
    return sc, res


def rc_ripple(current_A: float) -> float:
    """Peak-to-peak bus ripple of the RC supply under a pulse train of ``current_A`` [V].

    Periodic steady state: with ``v_hi`` at a pulse start and ``v_lo`` at its end,
    ``v_lo = V_on + (v_hi - V_on) e^-a`` (towards ``V_on = V - R_s I``) and
    ``v_hi = V + (v_lo - V) e^-b``; eliminating gives the module docstring's form.
    """
    tau = R_S * C
    a, b = M * T_P / tau, (1.0 - M) * T_P / tau
    ea, eb = math.exp(-a), math.exp(-b)
    return R_S * current_A * (1.0 - ea) * (1.0 - eb) / (1.0 - ea * eb)


def window(res, t_from):
    tr = res.trace
    sel = tr["time_s"] >= t_from - 1e-12
    return tr["current_A"][sel], tr["supply_current_A"][sel]


def rms_bound(res, t_from, current):
    """Bound on |I_C,rms - I sqrt(D(1-D))| from the departures of the actual currents from
    the ideal ones over the window: by Minkowski's inequality, |rms(a + b) - rms(a)| <=
    rms(b) <= max |b|, with b = g (i - I) - (i_s - D I). The rows (every T/8) fall on every
    switching instant at m = 0.5, where the piecewise-exponential currents take their
    extremes."""
    i, i_s = window(res, t_from)
    return float(np.max(np.abs(i - current)) + np.max(np.abs(i_s - M * current)))


def test_capacitor_rms_current_is_i_sqrt_d_one_minus_d():
    # the run's RMS over a window at the end: the same run cut at two durations, the
    # difference of its integrals (i_C^2 T) over the last 50 ms (the transient of 7 tau_a
    # before has decayed to e^-7 ~ 1e-3)
    t1, t2 = 0.35, 0.4
    _, a = bench(t1)
    _, b = bench(t2)
    ra, rb = a.summary["capacitor_rms_current_A"], b.summary["capacitor_rms_current_A"]
    rms_window = math.sqrt((rb**2 * t2 - ra**2 * t1) / (t2 - t1))
    current = b.summary["final_current_A"]
    expected = current * math.sqrt(M * (1.0 - M))
    bound = rms_bound(b, t1, current)
    assert bound < 2e-3 * expected  # the bench is close to the ideal one
    assert abs(rms_window - expected) <= bound
    # over the whole run, with the transient of the current, it is smaller
    assert rb < expected


def test_largest_rms_over_one_pwm_period():
    # The armature current rises monotonically to I, so the last periods carry the largest
    # RMS; the bound of the ideal waveform as above, over the last period, plus the largest
    # current's excess over the final one.
    _, res = bench()
    s = res.summary
    current = s["final_current_A"]
    expected = current * math.sqrt(M * (1.0 - M))
    bound = rms_bound(res, 0.4 - 1.0 / F_S, current) + (s["peak_current_A"] - current)
    assert abs(s["capacitor_max_period_rms_current_A"] - expected) <= bound
    assert bound < 1e-3 * expected


def test_bus_ripple_voltage_against_the_capacitor_charge_balance():
    _, res = bench()
    s = res.summary
    current = s["final_current_A"]
    exact = rc_ripple(current)
    simple = current * M * (1.0 - M) * T_P / C  # dV = I D (1 - D) / (C f_p)
    # the simple form is the limit: they differ by O((T_p / R_s C)^2) = 6e-6 here
    assert simple == pytest.approx(exact, rel=1e-5)
    # The largest peak-to-peak over a PWM period includes, during the start, the drift of the
    # mean bus, R_s m dI/dt T = 4 (R_s C / tau_a) dV e^-t/tau_a at most against the ripple
    # dV (1 - e^-t/tau_a) that grows meanwhile; with 4 R_s C / tau_a = 0.8 < 1 their sum
    # rises to dV, within (1 - 0.8) e^-8 dV = 7e-5 dV at the end. The armature current's
    # own ripple over the last period, max|i - I| / I, changes the charge balance by as much.
    i, _ = window(res, 0.4 - 1.0 / F_S)
    bound = exact * (math.exp(-0.4 / TAU_A) + float(np.max(np.abs(i - current))) / current)
    assert 4.0 * R_S * C / TAU_A < 1.0
    assert abs(s["bus_ripple_voltage_V"] - exact) <= bound
    assert bound < 1e-3 * exact


def test_esr_heating_is_esr_times_the_rms_current_squared():
    # Source: Joule's law, P = R I_rms^2 (mean power of a resistor carrying i(t)).
    esr = 0.01
    t1, t2 = 0.35, 0.4
    _, a = bench(t1, esr=esr)
    _, b = bench(t2, esr=esr)
    sb = b.summary
    # the same integral of i_C^2 behind both figures: equal to rounding
    assert sb["capacitor_esr_power_W"] == pytest.approx(
        esr * sb["capacitor_rms_current_A"] ** 2, rel=1e-12
    )
    assert sb["capacitor_esr_power_W"] * t2 == pytest.approx(sb["energy_capacitor_esr_J"])
    # and against the closed form over the window at the end: P = ESR I^2 D (1 - D), with
    # the RMS bound above (P ~ rms^2: twice the relative bound, plus its square)
    p_window = (sb["energy_capacitor_esr_J"] - a.summary["energy_capacitor_esr_J"]) / (t2 - t1)
    current = sb["final_current_A"]
    rms_ideal = current * math.sqrt(M * (1.0 - M))
    rel = rms_bound(b, t1, current) / rms_ideal
    assert rel < 3e-3
    assert p_window == pytest.approx(esr * rms_ideal**2, rel=2.0 * rel + rel * rel)


# --------------------------------------------------------------------------------------------
# Minimum bus voltage, its time, and the brown-out verdict
# --------------------------------------------------------------------------------------------

T_DIP, T_BACK, V_DIP = 0.05, 0.08, 36.0  # the source sags to 36 V from 50 ms to 80 ms
SAG = f"""
[[events]]
at = "{T_DIP} s"
set = {{ "supply.voltage" = "{V_DIP} V" }}
[[events]]
at = "{T_BACK} s"
set = {{ "supply.voltage" = "{V_S} V" }}
"""


def averaged_bus(t_end: float) -> float:
    """Bus voltage of the averaged bench at ``t_end`` [V] by the matrix exponential.

    State ``[i, v, 1]``: ``L di/dt = m v - R i`` (locked rotor, lossless averaged bridge),
    ``C dv/dt = (V_s(t) - v) / R_s - m i``; the source is piecewise constant, so each piece
    is ``expm`` of the augmented matrix. Source: scipy.linalg.expm (Al-Mohy & Higham) on the
    circuit's equations (Kirchhoff's laws).
    """

    def piece(x, v_s, h):
        a = np.array(
            [
                [-R_A / L_A, M / L_A, 0.0],
                [-M / C, -1.0 / (R_S * C), v_s / (R_S * C)],
                [0.0, 0.0, 0.0],
            ]
        )
        return expm(a * h) @ x

    x = np.array([0.0, V_S, 1.0])  # the bus starts charged to the source voltage
    x = piece(x, V_S, T_DIP)
    x = piece(x, V_DIP, min(t_end, T_BACK) - T_DIP)
    return float(x[1])


def test_minimum_bus_voltage_and_its_time_in_a_supply_sag():
    # The bus falls while the source is low and rises as soon as it is back (dv/dt jumps by
    # (48 - 36) V / (R_s C) > 0 at T_BACK): the minimum is at T_BACK (an event time, a step
    # boundary of the kernel), its value the linear circuit's exact solution there.
    _, res = bench(0.12, model="averaged", extra=SAG)
    s = res.summary
    assert s["min_bus_voltage_time_s"] == pytest.approx(T_BACK, abs=1e-12)
    # 1e-9: the kernel's exact exponential against scipy's, to rounding over 1e4 steps
    assert s["min_bus_voltage_V"] == pytest.approx(averaged_bus(T_BACK), rel=1e-9)


@pytest.mark.parametrize(("threshold", "status"), [(20.0, "pass"), (25.0, "fail")])
def test_brown_out_verdict_with_its_margin_and_time(threshold, status):
    extra = SAG + f'[checks]\nbrown_out_voltage = "{threshold} V"\n'
    sc, _ = bench(0.12, model="averaged", extra=extra)
    (verdict,) = brown_out_checks(sc, run_all(sc))
    v_min = averaged_bus(T_BACK)
    assert verdict.status == status
    assert verdict.figure == pytest.approx(v_min, rel=1e-9)
    assert verdict.limit == threshold and not verdict.upper
    assert verdict.margin == pytest.approx((v_min - threshold) / threshold, rel=1e-9)
    assert verdict.values["min_bus_voltage_time_s"] == pytest.approx(T_BACK, abs=1e-12)
    assert f"{T_BACK:.4g} s" in verdict.detail


def test_brown_out_check_without_its_threshold_is_not_applicable():
    sc, _ = bench(0.01, model="averaged")
    (verdict,) = brown_out_checks(sc, run_all(sc))
    assert verdict.status == "n/a"
    assert "checks.brown_out_voltage" in verdict.detail
