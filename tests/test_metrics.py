"""Closed-loop response metrics (dcsim.results.metrics) against a reference library and
closed forms.

The responses are those of invented drives: the speed loop of a coolant pump, the hoist of a
harbour winch, the position loop of a warehouse shuttle.
"""

from __future__ import annotations

import math
import re

import control
import numpy as np
import pytest

from dcsim.results.metrics import (
    disturbance_recovery,
    following_error,
    step_metrics,
    time_in_condition,
)

# Keys of step_metrics and the step_info keys they must equal on the same samples.
SAME_AS_STEP_INFO = {
    "rise_time_s": "RiseTime",
    "settling_time_s": "SettlingTime",
    "overshoot_percent": "Overshoot",
    "undershoot_percent": "Undershoot",
    "peak": "Peak",
    "peak_time_s": "PeakTime",
    "final_value": "SteadyStateValue",
}


def second_order(zeta: float, wn_rad_s: float) -> control.TransferFunction:
    """Standard second-order system wn^2 / (s^2 + 2 zeta wn s + wn^2)."""
    return control.tf([wn_rad_s**2], [1.0, 2.0 * zeta * wn_rad_s, wn_rad_s**2])


def sampled_step(sys: control.TransferFunction, t_end_s: float, n: int):
    t = np.linspace(0.0, t_end_s, n)
    resp = control.step_response(sys, t)
    return np.asarray(resp.time), np.asarray(resp.outputs).ravel()


# --------------------------------------------------------------------------------------------
# step_metrics against python-control's step_info, on the same samples
# --------------------------------------------------------------------------------------------

REFERENCE_SYSTEMS = {
    # coolant pump speed loop, first order with 50 ms time constant
    "first_order": (control.tf([1.0], [0.05, 1.0]), 0.6),
    "zeta_0.2": (second_order(0.2, 12.0), 4.0),
    "zeta_0.5": (second_order(0.5, 12.0), 2.0),
    "zeta_0.7": (second_order(0.7, 12.0), 1.5),
    # winch hoist with a left-half-plane zero at -4 rad/s: extra overshoot
    "lhp_zero": (control.tf([12.0**2 / 4.0, 12.0**2], [1.0, 2 * 0.6 * 12.0, 12.0**2]), 2.0),
    # right-half-plane zero: undershoot, but a peak larger than the undershoot
    "rhp_zero": (control.tf([-1.0, 1.0], [1.0, 1.0, 1.0]), 20.0),
}


@pytest.mark.parametrize("name", sorted(REFERENCE_SYSTEMS))
def test_step_metrics_equal_step_info(name):
    # Source: python-control 0.10 control.step_info (reference library), given the same time
    # series; its crossings are not interpolated, so the values must agree sample for sample.
    sys, t_end_s = REFERENCE_SYSTEMS[name]
    t, y = sampled_step(sys, t_end_s, 4001)
    ref = control.step_info(y, t)
    got = step_metrics(t, y)
    for ours, theirs in SAME_AS_STEP_INFO.items():
        assert got[ours] == pytest.approx(ref[theirs], rel=1e-9, abs=1e-12), ours
    assert got["steady_state_error"] is None


def test_step_metrics_nonzero_thresholds_equal_step_info():
    # Source: python-control 0.10 control.step_info with SettlingTimeThreshold and
    # RiseTimeLimits set (reference library).
    t, y = sampled_step(second_order(0.35, 8.0), 3.0, 3001)
    ref = control.step_info(y, t, SettlingTimeThreshold=0.05, RiseTimeLimits=(0.05, 0.95))
    got = step_metrics(t, y, settling_band=0.05, rise_limits=(0.05, 0.95))
    assert got["rise_time_s"] == pytest.approx(ref["RiseTime"], rel=1e-9)
    assert got["settling_time_s"] == pytest.approx(ref["SettlingTime"], rel=1e-9)


def test_falling_response_from_zero_matches_step_info_except_peak_sign():
    # Source: python-control 0.10 control.step_info on the negated response (reference
    # library); its Peak is max|y| (positive), ours is the signed sample (documented).
    t, y = sampled_step(second_order(0.5, 12.0), 2.0, 4001)
    ref = control.step_info(-y, t)
    got = step_metrics(t, -y)
    for ours, theirs in SAME_AS_STEP_INFO.items():
        if ours == "peak":
            assert got[ours] == pytest.approx(-ref[theirs], rel=1e-9)
        else:
            assert got[ours] == pytest.approx(ref[theirs], rel=1e-9, abs=1e-12), ours


# --------------------------------------------------------------------------------------------
# step_metrics against the closed forms of the standard second-order system
# --------------------------------------------------------------------------------------------


@pytest.mark.parametrize("zeta", [0.2, 0.5, 0.7])
def test_second_order_overshoot_and_peak_time_closed_form(zeta):
    # Source: Ogata, Modern Control Engineering, 5th ed., sec. 5-3 (section from memory):
    # step response y = 1 - exp(-zeta wn t)/sqrt(1-zeta^2) sin(wd t + acos zeta),
    # wd = wn sqrt(1-zeta^2); peak time pi/wd; overshoot 100 exp(-zeta pi/sqrt(1-zeta^2)).
    wn_rad_s = 12.0
    dt_s = 1e-5
    t_end_s = 40.0 / (zeta * wn_rad_s)  # exp(-40) ~ 4e-18: the last sample is the final value
    t = np.arange(0.0, t_end_s, dt_s)
    root = math.sqrt(1.0 - zeta**2)
    wd = wn_rad_s * root
    y = 1.0 - np.exp(-zeta * wn_rad_s * t) / root * np.sin(wd * t + math.acos(zeta))
    got = step_metrics(t, y)

    tp_exact = math.pi / wd
    mp_exact = 100.0 * math.exp(-zeta * math.pi / root)
    # Sampling error bounds: the largest sample is one of the two neighbours of the true peak
    # (so within dt of it), and lies below the peak by at most |y''|max/2 * (dt/2)^2 with
    # |y''| <= wn^2/sqrt(1-zeta^2) (derivative of the closed form above).
    assert abs(got["peak_time_s"] - tp_exact) <= dt_s
    peak_drop = 0.5 * wn_rad_s**2 / root * (dt_s / 2.0) ** 2
    # (1e-12 allows for float64 rounding of y and of the final value, ~1e-16 each, times 100.)
    assert -1e-12 <= mp_exact - got["overshoot_percent"] <= 100.0 * peak_drop + 1e-12
    assert got["final_value"] == pytest.approx(1.0, abs=1e-15)


# --------------------------------------------------------------------------------------------
# step_metrics: shift, offset and direction do not change the metrics
# --------------------------------------------------------------------------------------------


def test_shifted_offset_inverted_response_gives_same_metrics():
    # Source: definition (metrics relative to y_start and t_step_s; invariance under
    # y -> a + b*y with b < 0 and t -> t + t0), checked against the unshifted response.
    t, y = sampled_step(second_order(0.5, 12.0), 2.0, 4001)
    dt_s = t[1] - t[0]
    base = step_metrics(t, y)

    t0_s, a, b = 0.75, 3.0, -2.0  # the shuttle speed falls from 3 to 1 m/s
    t_pre = np.linspace(0.0, t0_s, 301)[:-1]
    t_shift = np.concatenate([t_pre, t + t0_s])
    y_pre = np.full(t_pre.size, a)
    y_pre[100] = a + 50.0  # a spike before the step must be ignored
    y_pre[-1] = a  # the last sample before the step gives y_start
    y_shift = np.concatenate([y_pre, a + b * y])
    got = step_metrics(t_shift, y_shift, t_step_s=t0_s, target=1.0)

    for key in ("rise_time_s", "settling_time_s", "peak_time_s"):
        assert got[key] == pytest.approx(base[key], abs=dt_s), key
    for key in ("overshoot_percent", "undershoot_percent"):
        assert got[key] == pytest.approx(base[key], rel=1e-9, abs=1e-9), key
    assert got["peak"] == pytest.approx(a + b * base["peak"], rel=1e-12)
    assert got["final_value"] == pytest.approx(a + b * base["final_value"], rel=1e-12)
    assert got["steady_state_error"] == pytest.approx(1.0 - got["final_value"], abs=1e-15)

    # An explicit y_start gives the same as the default taken from the samples.
    assert step_metrics(t_shift, y_shift, t_step_s=t0_s, y_start=a, target=1.0) == got


def test_hand_computed_step():
    # Source: definitions above, values computed by hand for this record.
    t = np.array([0.0, 1.0, 2.0, 3.0, 4.0, 5.0, 6.0])
    y = np.array([0.0, -0.1, 0.5, 0.95, 1.2, 0.99, 1.0])
    got = step_metrics(t, y, target=1.1)
    assert got["rise_time_s"] == 1.0  # first >= 0.1 at t=2, first >= 0.9 at t=3
    assert got["overshoot_percent"] == pytest.approx(20.0, rel=1e-12)
    assert got["undershoot_percent"] == pytest.approx(10.0, rel=1e-12)
    assert got["peak"] == 1.2
    assert got["peak_time_s"] == 4.0
    assert got["settling_time_s"] == 5.0  # last outside 2 % at t=4 (1.2), next sample t=5
    assert got["final_value"] == 1.0
    assert got["steady_state_error"] == pytest.approx(0.1, abs=1e-15)


def test_rise_levels_relative_to_y_start_and_full_rise():
    # Source: definitions above, values computed by hand for this record.
    t = np.array([0.0, 1.0, 2.0, 3.0])
    y = np.array([0.0, 0.5, 0.5, 1.0])
    assert step_metrics(t, y)["rise_time_s"] == 2.0  # 0.1 reached at t=1, 0.9 at t=3
    # Relative to y_start = -1 (change 2): level -0.8 reached at t=0, level 0.8 at t=3.
    assert step_metrics(t, y, y_start=-1.0)["rise_time_s"] == 3.0
    # A 0-100 % rise ends at the last sample even when y_start + 1.0*change rounds past the
    # final value (0.7 + (2.9 - 0.7) = 2.9000000000000004 in float64).
    t2 = np.array([0.0, 1.0, 2.0, 3.0])
    y2 = np.array([0.7, 1.5, 2.5, 2.9])
    assert 0.7 + (2.9 - 0.7) > 2.9  # the rounding this case is about
    assert step_metrics(t2, y2, rise_limits=(0.0, 1.0))["rise_time_s"] == 3.0
    # Source: definition of settling time: last sample outside the band is at t=2 (2.0 vs
    # final 1.0), so settled at the next sample, t=3.
    y_up_then_down = np.array([0.0, 2.0, 2.0, 1.0])
    assert step_metrics(t, y_up_then_down)["settling_time_s"] == 3.0


def test_settled_from_the_first_sample_gives_zero_settling_time():
    # Source: definition (never outside the band -> 0).
    t = np.array([0.0, 1.0, 2.0])
    y = np.array([1.0, 1.0, 1.0])
    assert step_metrics(t, y, y_start=0.0)["settling_time_s"] == 0.0


# --------------------------------------------------------------------------------------------
# disturbance_recovery
# --------------------------------------------------------------------------------------------


def _first_order_recovery(t, t0_s, y_ref, amplitude, tau_s):
    y = np.full(t.size, y_ref)
    after = t >= t0_s
    y[after] = y_ref - amplitude * np.exp(-(t[after] - t0_s) / tau_s)
    return y


def test_disturbance_recovery_first_order_closed_form():
    # Source: closed form of y = y_ref - A exp(-(t - t0)/tau): |y - y_ref| = band at
    # t - t0 = tau ln(A/band); the largest deviation -A is at t0.
    dt_s = 1e-4
    t = np.arange(0.0, 4.0, dt_s)
    t0_s, y_ref, amplitude, tau_s, band = 1.0, 150.0, 12.0, 0.2, 0.3  # pump speed, rad/s
    y = _first_order_recovery(t, t0_s, y_ref, amplitude, tau_s)
    got = disturbance_recovery(t, y, t_event_s=t0_s, y_reference=y_ref, band=band)
    exact = tau_s * math.log(amplitude / band)
    assert got["dip"] == pytest.approx(-amplitude, rel=1e-12)
    assert got["dip_time_s"] == pytest.approx(0.0, abs=dt_s)
    assert 0.0 <= got["recovery_time_s"] - exact <= dt_s * (1.0 + 1e-9)


def test_disturbance_recovery_window_sign_and_limits():
    # Source: closed form as above, with the load thrown off (deviation +A) and a later
    # excursion outside the window.
    dt_s = 1e-3
    t = np.arange(0.0, 6.0, dt_s)
    y = 2.0 * 150.0 - _first_order_recovery(t, 1.0, 150.0, 12.0, 0.2)
    y[t >= 5.0] += 5.0  # a second load step at 5 s, outside the window
    inside = disturbance_recovery(
        t, y, t_event_s=1.0, y_reference=150.0, band=0.3, window_end_s=4.5
    )
    assert inside["dip"] == pytest.approx(12.0, rel=1e-12)
    assert 0.0 <= inside["recovery_time_s"] - 0.2 * math.log(12.0 / 0.3) <= dt_s * (1 + 1e-9)
    # Source: definition: still outside the band at the end -> NaN.
    whole = disturbance_recovery(t, y, t_event_s=1.0, y_reference=150.0, band=0.3)
    assert math.isnan(whole["recovery_time_s"])
    # Source: definition: a dip smaller than the band never leaves it -> 0.
    small = disturbance_recovery(
        t, y, t_event_s=1.0, y_reference=150.0, band=20.0, window_end_s=4.5
    )
    assert small["recovery_time_s"] == 0.0


# --------------------------------------------------------------------------------------------
# following_error
# --------------------------------------------------------------------------------------------


def test_following_error_sine_closed_form():
    # Source: closed form: the mean of A^2 sin^2 over whole periods is A^2/2, so rms A/sqrt(2);
    # the trapezoidal rule on uniform samples is exact for it (more than 2 samples per period;
    # Trefethen & Weideman, "The exponentially convergent trapezoidal rule", SIAM Review 56
    # (2014), sec. 3; details from memory).
    amplitude_rad = 0.004  # shuttle position error
    freq_hz = 2.0
    n_per_period, periods = 400, 3
    t = np.linspace(0.0, periods / freq_hz, periods * n_per_period + 1)
    err = amplitude_rad * np.sin(2.0 * math.pi * freq_hz * t)
    got = following_error(t, err)
    assert got["rms_following_error"] == pytest.approx(amplitude_rad / math.sqrt(2.0), rel=1e-12)
    assert abs(got["peak_following_error"]) == pytest.approx(amplitude_rad, rel=1e-12)


def test_following_error_window_and_sign():
    # Source: definitions (hand-computed): peak is the signed sample of largest magnitude;
    # a constant error c has rms |c| on any sampling.
    t = np.array([0.0, 0.1, 0.25, 0.7, 1.0, 1.5, 2.0])
    err = np.array([9.0, 0.1, -0.4, 0.2, -0.4, 0.0, 9.0])
    got = following_error(t, err, t_start_s=0.05, t_end_s=1.6)
    assert got["peak_following_error"] == -0.4
    const = following_error(t, np.full(t.size, -0.25), t_start_s=0.05, t_end_s=1.6)
    assert const["rms_following_error"] == pytest.approx(0.25, rel=1e-12)
    # Source: trapezoidal rule by hand on [0.1, 0.25]: e^2 = 0.01, 0.16 -> integral
    # 0.15*(0.01+0.16)/2 = 0.01275, mean 0.085.
    two = following_error(t, err, t_start_s=0.1, t_end_s=0.25)
    assert two["rms_following_error"] == pytest.approx(math.sqrt(0.085), rel=1e-12)


# --------------------------------------------------------------------------------------------
# time_in_condition
# --------------------------------------------------------------------------------------------


def test_time_in_condition_known_pattern():
    # Source: definition (sample-and-hold), hand-computed: intervals 0.1 + 0.3 + 0.4.
    t = np.array([0.0, 0.1, 0.3, 0.6, 1.0, 1.5])
    flag = np.array([1, 0, 1, 1, 0, 1])
    assert time_in_condition(t, flag) == pytest.approx(0.8, rel=1e-12)
    assert time_in_condition(t, flag.astype(bool)) == pytest.approx(0.8, rel=1e-12)
    # The flag and its complement together cover the record.
    rest = time_in_condition(t, 1 - flag)
    assert rest + time_in_condition(t, flag) == pytest.approx(t[-1] - t[0], rel=1e-12)
    assert time_in_condition(t, np.zeros(t.size)) == 0.0


# --------------------------------------------------------------------------------------------
# Bad input
# --------------------------------------------------------------------------------------------

T3 = np.array([0.0, 1.0, 2.0])
Y3 = np.array([0.0, 1.0, 1.0])


@pytest.mark.parametrize(
    ("call", "words"),
    [
        (lambda: step_metrics(T3, Y3[:2]), "same length"),
        (lambda: step_metrics([0.0], [1.0]), "at least 2 samples"),
        (lambda: step_metrics([0.0, 1.0, 1.0], Y3), "strictly rising"),
        (lambda: step_metrics([0.0, 2.0, 1.0], Y3), "strictly rising"),
        (lambda: step_metrics(T3, [0.0, math.nan, 1.0]), "finite"),
        (lambda: step_metrics(T3, np.ones((3, 1))), "1-D"),
        (lambda: step_metrics(T3, ["a", "b", "c"]), "numbers"),
        (lambda: step_metrics(T3, Y3, t_step_s=1.5), "at least 2 samples"),
        (lambda: step_metrics(T3, [1.0, 2.0, 1.0]), "net change"),
        (lambda: step_metrics(T3, Y3, rise_limits=(0.9, 0.1)), "0 <= lo < hi <= 1"),
        (lambda: step_metrics(T3, Y3, rise_limits=(0.1,)), "rise_limits"),
        (lambda: step_metrics(T3, Y3, settling_band=0.0), "settling_band"),
        (lambda: step_metrics(T3, Y3, target=math.inf), "target"),
        (
            lambda: disturbance_recovery(T3, Y3, t_event_s=0.0, y_reference=1.0, band=-1.0),
            "band",
        ),
        (
            lambda: disturbance_recovery(
                T3, Y3, t_event_s=1.0, y_reference=1.0, band=0.1, window_end_s=0.5
            ),
            "window_end_s",
        ),
        (
            lambda: disturbance_recovery(T3, Y3, t_event_s=1.5, y_reference=1.0, band=0.1),
            "at least 2 samples",
        ),
        (lambda: following_error(T3, Y3, t_start_s=0.5, t_end_s=1.5), "at least 2 samples"),
        (lambda: time_in_condition(T3, [0, 2, 1]), "0/1"),
        (lambda: time_in_condition(T3, [0, 0.5, 1]), "0/1"),
    ],
)
def test_bad_input_raises_clear_value_error(call, words):
    # Source: dcsim's input rules (clear ValueError naming the argument), no physics.
    with pytest.raises(ValueError, match=re.escape(words)) as info:
        call()
    assert "\n" not in str(info.value)  # one line
