"""The controller's sensors: encoder speed by the period method, ADC quantisation, noise.

The difference method's one-count bound and the closed loops are in test_control_loops.py.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

import dcsim
from dcsim.controllers import layout as C
from dcsim.controllers.cascade import normal, speed_estimate

TWO_PI = 2.0 * math.pi


def _period_setup(counts: float, timer_hz: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    cp = np.zeros(C.N_CP)
    cp[C.C_ENC] = counts
    cp[C.C_SPEED_METHOD] = C.SPEED_PERIOD
    cp[C.C_TIMER_F] = timer_hz
    return cp, np.zeros(C.N_CS), np.zeros(1, dtype=np.uint64)


def _run_period_method(w0, counts, timer_hz, h, n, theta0=0.123):
    """Feed a constant-speed angle to the estimator sample by sample; return the estimates."""
    cp, cs, rng = _period_setup(counts, timer_hz)
    est = []
    for k in range(n):
        t = k * h
        th = theta0 + w0 * t
        cs[C.G_COUNT] = math.floor(th * counts / TWO_PI)
        w = speed_estimate(t, th, w0, cp, cs, h, k == 0)
        cs[C.G_W_RAW] = w
        est.append(w)
    return np.array(est)


@pytest.mark.parametrize("w0", [2.0, 15.0, 180.0, -40.0])
def test_period_method_is_exact_at_constant_speed(w0):
    # Source: the period (M/T) method divides the angle between encoder edges by the time
    # between them (Petrella, Tursini, Peretti & Zigliotto, ACEMP 2007 -- from memory); at
    # constant speed the edges are exactly 2 pi / counts apart in angle and the linear
    # interpolation of the angle between samples places them exactly, so once two edges
    # have been seen the estimate is the speed (to rounding).
    counts, h = 1024.0, 200e-6
    est = _run_period_method(w0, counts, 0.0, h, 400)
    # the first estimate needs two edges in the same direction
    edge_dt = TWO_PI / counts / abs(w0)
    settled = np.arange(400) * h > 2.5 * edge_dt + 2 * h
    assert np.allclose(est[settled], w0, rtol=1e-9)


def test_period_method_with_timer_clock_error_bound():
    # Source: a timer of frequency f stamps each edge to within 1/f (rounded down), so the
    # measured interval between edges m counts apart is off by less than 1/f; the relative
    # speed error is below (1/f) / (m * 2 pi / (counts w)) -- the standard period-method
    # resolution (from memory, as above).
    counts, h, f, w0 = 1024.0, 200e-6, 1e6, 60.0
    est = _run_period_method(w0, counts, f, h, 400)
    edge_dt = TWO_PI / counts / w0
    m_per_sample = h / edge_dt
    bound = (1.0 / f) / (math.floor(m_per_sample) * edge_dt)
    settled = np.arange(400) >= 5
    rel = np.abs(est[settled] / w0 - 1.0)
    assert rel.max() < bound
    assert rel.max() > 0.0  # the clock does quantise


def test_period_method_resolves_a_speed_below_one_count_per_sample():
    # At 0.5 rad/s with 1024 counts an edge comes every 12.3 ms, i.e. every 61 samples of
    # 200 us: the difference method reads 0 or one count (31.4 rad/s) per sample; the period
    # method gives the speed at each edge (exact at constant speed, see above) and in between
    # decays only when that bound goes below it.
    counts, h, w0 = 1024.0, 200e-6, 0.5
    n = 400
    est = _run_period_method(w0, counts, 0.0, h, n)
    edge_dt = TWO_PI / counts / w0
    t = np.arange(n) * h
    after_two_edges = t > 2.5 * edge_dt
    assert np.all(est[after_two_edges] <= w0 * (1 + 1e-9))
    # Source: between edges the estimate is min(last, (2 pi / counts) / (t - t_edge)); just
    # after an edge that is the last value, the exact speed.
    assert np.isclose(est[after_two_edges].max(), w0, rtol=1e-9)
    one_count_per_sample = TWO_PI / counts / h
    assert one_count_per_sample > 60 * w0


def test_noise_generator_is_standard_normal_and_seeded():
    # Source: Box & Muller, Ann. Math. Statist. 29 (1958) 610: two uniforms give a standard
    # normal. The sample mean of n draws has standard error 1/sqrt(n) and the sample variance
    # sqrt(2/n); 5 standard errors leave a false alarm below 1e-6.
    n = 200_000
    rng = np.array([12345], dtype=np.uint64)
    x = np.array([normal(rng) for _ in range(n)])
    assert abs(x.mean()) < 5.0 / math.sqrt(n)
    assert abs(x.var() - 1.0) < 5.0 * math.sqrt(2.0 / n)
    # fourth moment 3 (kurtosis of a normal); its standard error sqrt(96/n)
    assert abs(np.mean(x**4) - 3.0) < 5.0 * math.sqrt(96.0 / n)
    rng2 = np.array([12345], dtype=np.uint64)
    assert normal(rng2) == x[0]


SPEED_LOOP = """
[simulation]
duration = "0.2 s"
record_interval = "100 us"
[motor]
resistance = "0.8 ohm"
inductance = "1.2 mH"
torque_constant = "0.06 N*m/A"
inertia = "2e-4 kg*m^2"
[supply]
voltage = "48 V"
[control]
mode = "speed"
[control.current]
kp = "6.03 V/A"
ki = "4021 V/(A*s)"
sample_time = "100 us"
[control.speed]
kp = "0.5 A*s/rad"
ki = "63 A/rad"
sample_time = "100 us"
limit = "12 A"
[control.reference]
kind = "step"
value = "100 rad/s"
at = "5 ms"
[sensors]
current_adc_bits = 10
current_range = "16 A"
current_noise = "{noise}"
current_offset = "{offset}"
current_gain_error = "{gain}"
seed = {seed}
"""


def _run(noise="0 A", offset="0 A", gain=0.0, seed=1):
    text = SPEED_LOOP.format(noise=noise, offset=offset, gain=gain, seed=seed)
    return dcsim.simulate(dcsim.load_scenario_text(text)).trace


def test_current_adc_error_is_at_most_half_a_code():
    # Source: a rounding (mid-tread) quantiser with step q = 2 * range / 2^bits errs by at
    # most q/2 inside its range (e.g. Oppenheim & Schafer, Discrete-Time Signal Processing,
    # quantisation of samples -- from memory).
    tr = _run()
    q = 2 * 16.0 / 2**10
    err = tr["measured_current_A"] - tr["current_A"]
    assert np.max(np.abs(err)) <= q / 2 * (1 + 1e-12)
    codes = tr["measured_current_A"] / q
    assert np.allclose(codes, np.round(codes), atol=1e-9)


def test_gain_error_and_offset_shift_the_reading():
    # measured = (1 + g) i + offset before the ADC (the sensor model's definition); the
    # reading minus that line is within half a code.
    tr = _run(offset="0.1 A", gain=0.02)
    q = 2 * 16.0 / 2**10
    err = tr["measured_current_A"] - (1.02 * tr["current_A"] + 0.1)
    assert np.max(np.abs(err)) <= q / 2 * (1 + 1e-12)


def test_seeded_noise_repeats_and_has_its_standard_deviation():
    a = _run(noise="0.2 A", seed=3)
    b = _run(noise="0.2 A", seed=3)
    c = _run(noise="0.2 A", seed=4)
    assert np.array_equal(a["measured_current_A"], b["measured_current_A"])
    assert not np.array_equal(a["measured_current_A"], c["measured_current_A"])
    # the reading's error is noise (sigma 0.2 A) plus quantisation (uniform, variance q^2/12);
    # Source: variances of independent errors add (Widrow & Kollar, Quantization Noise,
    # 2008, the additive-noise model of a quantiser -- from memory). 2000 samples: the sample
    # variance's standard error is sqrt(2/n) of it; 5 of them bound it.
    err = a["measured_current_A"] - a["current_A"]
    q = 2 * 16.0 / 2**10
    var = 0.2**2 + q**2 / 12
    n = err.size
    assert abs(err.var() / var - 1.0) < 5.0 * math.sqrt(2.0 / n)
