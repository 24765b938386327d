"""The PWM-frequency trade-off: switching and conduction losses, current ripple, audible band.

The rig is an invented locked-rotor bench on a stiff 24 V bus (1 F behind 1 mohm), so that the
armature is the R-L circuit of the textbooks and the current's periodic steady state has a
closed form. Steady-state figures are taken over a window between two runs of the same
scenario (the first 40 ms of the longer run are the shorter run, step for step): the energy
booked over the window divided by its length.
"""

from __future__ import annotations

import math
from functools import cache
from pathlib import Path

import numpy as np
import pytest

import dcsim
from dcsim import cli
from dcsim.errors import ScenarioError
from dcsim.sweep import load_sweep_text, read_results, run_sweep
from tests.reference import assert_energy_closes

REPO = Path(__file__).resolve().parents[1]
SWEEP_FILE = REPO / "scenarios" / "sweeps" / "pwm_frequency.toml"

V_BUS = 24.0
R_ARM = 0.5
L_ARM = 1e-3
F_PWM = 20e3
T_START = 0.04  # the window starts after 40 ms = 21 electrical time constants (1.9 ms)
T_END = 0.05  # ... and ends at 50 ms: whole PWM periods at 10, 20 and 40 kHz


def bench(
    *,
    pwm: str = "bipolar",
    volts: float = 12.0,
    duration: float = T_END,
    frequency: float = F_PWM,
    model: str = "switching",
    bridge_extra: str = "",
) -> str:
    """A locked-rotor bench on a stiff 24 V bus, as scenario text (16 rows per PWM period)."""
    record = "" if model == "averaged" else f'record_interval = "{1.0 / frequency / 16} s"'
    return f"""
[simulation]
duration = "{duration} s"
{record}
[motor]
resistance = "{R_ARM} ohm"
inductance = "{L_ARM} H"
torque_constant = "0.05 N*m/A"
inertia = "1e-4 kg*m^2"
[load]
locked = true
[supply]
voltage = "{V_BUS} V"
resistance = "1 mohm"
capacitance = "1 F"
[control]
voltage = "{volts} V"
[bridge]
model = "{model}"
pwm = "{pwm}"
frequency = "{frequency} Hz"
{bridge_extra}
"""


@cache
def run(text: str):
    sc = dcsim.load_scenario_text(text)
    res = dcsim.simulate(sc)
    # the 1 F bus holds C V^2 / 2 = 288 J (see assert_energy_closes)
    assert_energy_closes(res.summary, stored_J=0.5 * sc.supply.capacitance * sc.supply.voltage**2)
    return res


def window(**kw):
    """Steady-state figures over [T_START, T_END]: mean switching and conduction power [W],
    the mean bus voltage [V] and the run over the whole window."""
    short = run(bench(duration=T_START, **kw)).summary
    full = run(bench(duration=T_END, **kw))
    span = T_END - T_START
    p_sw = (full.summary["bridge_switching_loss_J"] - short["bridge_switching_loss_J"]) / span
    p_cond = (full.summary["bridge_conduction_loss_J"] - short["bridge_conduction_loss_J"]) / span
    t = full.trace["time_s"]
    sel = t >= T_START - 1e-12
    v_bus = np.trapezoid(full.trace["bus_voltage_V"][sel], t[sel]) / (t[sel][-1] - t[sel][0])
    return p_sw, p_cond, float(v_bus), full


def periodic_rl(levels_V, lengths_s, r_ohm, l_H):
    """Periodic steady state of ``L di/dt + R i = v(t)``, ``v`` piecewise constant.

    Exact: on each interval ``i(s) = I + (i_0 - I) exp(-s/tau)`` with ``I = v/R`` and
    ``tau = L/R`` (the solution of the linear first-order equation, derived here from the
    exponentials); the start value of the pattern is the fixed point of the pattern's affine
    map. Returns ``(currents at the interval starts [A], i_min [A], i_max [A], mean of i^2
    [A^2])``.
    """
    tau = l_H / r_ohm
    # i_end = A i_0 + c over the pattern
    a_total, c = 1.0, 0.0
    for v, dt in zip(levels_V, lengths_s, strict=True):
        a = math.exp(-dt / tau)
        c = v / r_ohm + (c - v / r_ohm) * a
        a_total *= a
    i0 = c / (1.0 - a_total)
    starts, square, i = [], 0.0, i0
    for v, dt in zip(levels_V, lengths_s, strict=True):
        starts.append(i)
        big = v / r_ohm
        k = i - big
        e1, e2 = math.exp(-dt / tau), math.exp(-2.0 * dt / tau)
        square += big * big * dt + 2 * big * k * tau * (1 - e1) + k * k * tau / 2 * (1 - e2)
        i = big + k * e1
    return starts, min(starts), max(starts), square / sum(lengths_s)


def pattern(pwm: str, m: float, v_bus: float, f: float):
    """Armature voltage levels and lengths of one repeating pattern of the full bridge.

    Source: Mohan, Undeland & Robbins, *Power Electronics*, 3rd ed., Wiley 2003, full-bridge
    dc-dc converter chapter (section from memory): bipolar PWM applies +V for D T and -V for
    (1 - D) T with D = (1 + m)/2; unipolar PWM applies V (or 0) in two equal pulses, a
    pattern of T/2 with V for |m| T/2.
    """
    t = 1.0 / f
    if pwm == "bipolar":
        d = 0.5 * (1.0 + m)
        return [v_bus, -v_bus], [d * t, (1.0 - d) * t]
    return [math.copysign(v_bus, m), 0.0], [abs(m) * t / 2, (1.0 - abs(m)) * t / 2]


# --------------------------------------------------------------------------------------------
# Switching loss
# --------------------------------------------------------------------------------------------

T_RISE = 100e-9
T_FALL = 250e-9
TIMES = f'rise_time = "{T_RISE} s"\nfall_time = "{T_FALL} s"'


@pytest.mark.parametrize(
    ("pwm", "volts"), [("bipolar", 12.0), ("unipolar", 12.0), ("unipolar", -6.0)]
)
def test_switching_loss_from_the_transition_times(pwm, volts):
    # Source: Mohan, Undeland & Robbins, Power Electronics, 3rd ed., Wiley 2003, sec. 2-5,
    # eqs. (2-6)-(2-8) (from memory): a hard-switched inductive leg loses V I t_c(on) / 2 at
    # turn-on and V I t_c(off) / 2 at turn-off. In each period every leg turns its hard
    # switch on once (at the current's valley, where the pulse starts) and off once (at the
    # peak, where it ends), so the bridge's two legs lose V_bus (t_r i_min + t_f i_max) per
    # period; i_min, i_max from the exact R-L steady state.
    p_sw, p_cond, v_bus, full = window(pwm=pwm, volts=volts, bridge_extra=TIMES)
    levels, lengths = pattern(pwm, volts / V_BUS, v_bus, F_PWM)
    _, lo, hi, _ = periodic_rl(levels, lengths, R_ARM, L_ARM)
    i_valley, i_peak = (lo, hi) if volts > 0 else (-hi, -lo)  # |i| at turn-on and turn-off
    expected = v_bus * (T_RISE * i_valley + T_FALL * i_peak) * F_PWM
    # the bus moves by about I T / (C V) = 2e-5 of itself within a period and the closed form
    # takes it constant at its mean: 1e-4
    assert p_sw == pytest.approx(expected, rel=1e-4)
    # Mohan's constant-current figure, P = V I f (t_r + t_f) / 2 per leg, with I the mean
    # current: the ripple (0.5 A of 11 A here) moves it by (t_f - t_r) / (t_r + t_f) of
    # half the ripple over the current at most
    s = full.summary
    short = run(bench(pwm=pwm, volts=volts, duration=T_START, bridge_extra=TIMES)).summary
    periods = (T_END - T_START) * F_PWM
    per_period = (s["switching_events"] - short["switching_events"]) / periods
    assert per_period == pytest.approx(4.0, rel=1e-12)  # two transitions per leg and period
    i_mean = 0.5 * (lo + hi) if volts > 0 else -0.5 * (lo + hi)
    mohan = 0.5 * v_bus * i_mean * (T_RISE + T_FALL) * F_PWM * per_period / 2
    bound = (T_FALL - T_RISE) / (T_RISE + T_FALL) * 0.5 * (hi - lo) / i_mean
    assert abs(p_sw / mohan - 1.0) <= bound + 1e-4
    # no on-resistance, no diodes: the bridge loss is all switching, and the split adds up
    assert p_cond == pytest.approx(0.0, abs=1e-12)
    assert s["bridge_switching_loss_J"] + s["bridge_conduction_loss_J"] == pytest.approx(
        s["energy_bridge_loss_J"], rel=1e-12
    )
    assert s["bridge_switching_loss_W"] == pytest.approx(s["bridge_switching_loss_J"] / T_END)


def test_with_dead_time_the_turn_on_comes_after_it():
    # Bipolar, i > 0, dead time t_d: at each edge both legs turn off first; the current then
    # flows through A's lower and B's upper diode (the armature sees -V) until the incoming
    # switches close. So the pulse is +V for D T - t_d and -V for the rest, the hard turn-ons
    # close at the valley of that waveform, the turn-offs open at its peak (the same
    # reasoning as above, Mohan, Undeland & Robbins sec. 2-5, from memory; the dead-time
    # waveform: their blanking-time discussion, full-bridge dc-dc converter chapter).
    t_d = 1e-6
    p_sw, _, v_bus, _ = window(bridge_extra=TIMES + f'\ndead_time = "{t_d} s"')
    d = 0.75
    t = 1.0 / F_PWM
    _, lo, hi, _ = periodic_rl([v_bus, -v_bus], [d * t - t_d, (1 - d) * t + t_d], R_ARM, L_ARM)
    # the bus moves by 2e-5 within a period (above): 1e-4. (Booking the turn-on as the dead
    # time starts, at a current (V + R i) t_d / L = 35 mA higher, would be 4.5e-4 off.)
    assert p_sw == pytest.approx(v_bus * (T_RISE * lo + T_FALL * hi) * F_PWM, rel=1e-4)


def test_switching_loss_is_proportional_to_the_frequency():
    # Same operating point, three PWM frequencies, equal rise and fall times: P = V t (i_min
    # + i_max) f. Source: Mohan, Undeland & Robbins (above), P_s proportional to f_s.
    t_sw = 150e-9
    extra = f'rise_time = "{t_sw} s"\nfall_time = "{t_sw} s"'
    per_hz = []
    predicted = []
    for f in (10e3, 20e3, 40e3):
        p_sw, _, v_bus, _ = window(frequency=f, bridge_extra=extra)
        per_hz.append(p_sw / f)
        _, lo, hi, _ = periodic_rl(*pattern("bipolar", 0.5, v_bus, f), R_ARM, L_ARM)
        predicted.append(v_bus * t_sw * (lo + hi))
    # the closed form itself: i_min + i_max changes with f only at second order in T/tau
    assert max(predicted) / min(predicted) - 1.0 < 2e-4
    # so the energy per period is the same at each frequency: to the closed form's 2e-4 and
    # the bus's 1e-4 (it moves by 4e-5 within a period at 10 kHz; see above)
    assert max(per_hz) / min(per_hz) - 1.0 < 3e-4
    for got, ref in zip(per_hz, predicted, strict=True):
        assert got == pytest.approx(ref, rel=1e-4)


def test_the_per_transition_energy_is_booked_as_switching_loss():
    # The per-transition energy (the older way to give it) lands in the switching part.
    # Source: definition of the per-event energy.
    s = run(bench(duration=0.005, bridge_extra='switching_energy = "10 uJ"')).summary
    assert s["bridge_switching_loss_J"] == pytest.approx(10e-6 * s["switching_events"], rel=1e-9)
    assert s["bridge_conduction_loss_J"] == pytest.approx(0.0, abs=1e-12)


# --------------------------------------------------------------------------------------------
# Conduction loss
# --------------------------------------------------------------------------------------------


@pytest.mark.parametrize("pwm", ["bipolar", "unipolar"])
def test_conduction_loss_is_the_rms_current_squared_times_the_on_resistance_in_the_path(pwm):
    # Source: Joule's law, P = I_rms^2 R; without dead time each leg conducts through one of
    # its switches at every instant, so the path holds two: R_path = 2 R_on (Mohan, Undeland
    # & Robbins, full-bridge dc-dc converter chapter, from memory). Diode drops are off.
    r_on = 0.02
    extra = f'on_resistance = "{r_on} ohm"'
    p_sw, p_cond, v_bus, full = window(pwm=pwm, bridge_extra=extra)
    levels, lengths = pattern(pwm, 0.5, v_bus, F_PWM)
    _, _, _, mean_square = periodic_rl(levels, lengths, R_ARM + 2 * r_on, L_ARM)
    # the bus varies by 2e-5 within a period (above): 1e-4
    assert p_cond == pytest.approx(2 * r_on * mean_square, rel=1e-4)
    assert p_sw == 0.0
    s = full.summary
    # over the whole run (start-up included): the same integral as the run's I2t
    assert s["bridge_conduction_loss_J"] == pytest.approx(2 * r_on * s["i2t_A2s"], rel=1e-9)
    assert s["bridge_conduction_loss_W"] == pytest.approx(s["bridge_conduction_loss_J"] / T_END)


# --------------------------------------------------------------------------------------------
# Current ripple
# --------------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("pwm", "volts"), [("bipolar", 12.0), ("bipolar", 0.0), ("unipolar", 6.0), ("unipolar", 12.0)]
)
def test_current_ripple_against_the_exact_rl_steady_state(pwm, volts):
    # Source: the R-L circuit's periodic steady state, derived exactly from the exponentials
    # (periodic_rl); in the limit L/R >> T it is Mohan, Undeland & Robbins' full-bridge
    # ripple, bipolar 2 V D (1 - D) / (L f_s), unipolar V d (1 - d) / (2 L f_s), checked too.
    # The run ends 0.6 of a period into period 801: the ripple is the last complete one's.
    duration = T_START + 0.6 / F_PWM
    res = run(bench(pwm=pwm, volts=volts, duration=duration))
    t = res.trace["time_s"]
    sel = t >= t[-1] - 2.0 / F_PWM
    v_bus = float(np.mean(res.trace["bus_voltage_V"][sel]))
    _, lo, hi, _ = periodic_rl(*pattern(pwm, volts / V_BUS, v_bus, F_PWM), R_ARM, L_ARM)
    ripple = res.summary["current_ripple_A"]
    # the bus moves by 2e-5 within a period (above): 1e-4
    assert ripple == pytest.approx(hi - lo, rel=1e-4)
    m = volts / V_BUS
    if pwm == "bipolar":
        d = 0.5 * (1 + m)
        textbook = 2 * v_bus * d * (1 - d) / (L_ARM * F_PWM)
    else:
        textbook = v_bus * abs(m) * (1 - abs(m)) / (2 * L_ARM * F_PWM)
    # the linear-ripple formula neglects the exponential's curvature, of order T / tau = 2.5 %
    assert ripple == pytest.approx(textbook, rel=0.03)


def test_the_averaged_model_reports_no_ripple():
    # The averaged model has no ripple to show (its closed form is left out on purpose)
    s = run(bench(model="averaged", duration=0.01)).summary
    assert "current_ripple_A" not in s
    assert s["bridge_switching_loss_J"] == 0.0


# --------------------------------------------------------------------------------------------
# Audible band
# --------------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("frequency", "model", "warned"),
    [
        (16e3, "switching", True),
        (19.9e3, "switching", True),
        (20e3, "switching", False),
        (25e3, "switching", False),
        (16e3, "averaged", False),  # the warning is the switching model's (as the key reads)
    ],
)
def test_audible_band_warning(frequency, model, warned, tmp_path, capsys):
    # The audible band ends at 20 kHz: common practice (no source)
    text = bench(frequency=frequency, model=model, duration=0.002)
    path = tmp_path / "rig.toml"
    path.write_text(text, encoding="utf-8")
    assert cli.main(["validate", str(path)]) == 0
    err = capsys.readouterr().err
    summary = run(text).summary
    if warned:
        shown = f"{frequency / 1e3:.4g} kHz"
        assert err.startswith(f"dcsim: warning: {path}: bridge.frequency = {shown}")
        assert "audible" in err and err.count("\n") == 1
        assert summary["pwm_warning"] == err.split(f"{path}: ", 1)[1].strip()
    else:
        assert err == ""
        assert "pwm_warning" not in summary


# --------------------------------------------------------------------------------------------
# Bad input
# --------------------------------------------------------------------------------------------

BAD = [
    (
        bench(bridge_extra=TIMES + '\nswitching_energy = "10 uJ"'),
        "bridge.rise_time",
        "found both bridge.switching_energy and bridge.rise_time, bridge.fall_time",
    ),
    (
        bench(model="averaged", bridge_extra='fall_time = "100 ns"'),
        "bridge.fall_time",
        "expected bridge.model = 'switching' for bridge.fall_time",
    ),
    (
        bench(bridge_extra='rise_time = "20 us"\nfall_time = "6 us"'),
        "bridge.fall_time",
        "shorter than half the PWM period",
    ),
    (
        bench(bridge_extra='rise_time = "20 V"'),
        "bridge.rise_time",
        "time",
    ),
]


@pytest.mark.parametrize(("text", "key", "fragment"), BAD)
def test_bad_transition_times_get_one_clear_message(text, key, fragment):
    with pytest.raises(ScenarioError) as info:
        dcsim.load_scenario_text(text, source="rig.toml")
    err = info.value
    assert err.key == key, str(err)
    assert fragment in str(err), str(err)
    assert str(err).startswith("rig.toml")


# --------------------------------------------------------------------------------------------
# The example sweep
# --------------------------------------------------------------------------------------------


def test_the_pwm_frequency_sweep_runs_and_its_switching_loss_grows_with_frequency(tmp_path):
    # The example sweep file on a small grid (three of its frequencies) and a short run.
    # Source: Mohan, Undeland & Robbins (above): P_s proportional to f_s; the ripple falls
    # as 1 / f_s (full-bridge ripple formulas).
    text = SWEEP_FILE.read_text(encoding="utf-8")
    grid_at = text.index("[grid]")
    small = text[:grid_at] + '[set]\n"simulation.duration" = "0.05 s"\n\n'
    small += '[grid]\n"bridge.frequency" = ["10 kHz", "20 kHz", "40 kHz"]\n'
    spec = load_sweep_text(small, source=str(SWEEP_FILE))
    for metric in ("bridge_switching_loss_W", "bridge_conduction_loss_W", "current_ripple_A"):
        assert metric in spec.metrics
    run_sweep(spec, tmp_path / "out", workers=1, report=False)
    table = read_results(tmp_path / "out")
    order = np.argsort(table["bridge.frequency"])
    f = table["bridge.frequency"][order]
    p_sw = table["bridge_switching_loss_W"][order]
    ripple = table["current_ripple_A"][order]
    assert list(f) == [10e3, 20e3, 40e3]
    assert np.all(np.diff(p_sw) > 0.0)
    assert np.all(np.diff(ripple) < 0.0)
