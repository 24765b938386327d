"""Motion references: exact distances and end times, limits kept, continuity, the evaluator.

The closed forms below are those of Biagiotti & Melchiorri, *Trajectory Planning for Automatic
Machines and Robots*, Springer 2008 (sec. 3.2.2 trapezoidal speed, sec. 3.4 double-S speed),
re-derived in the comments from the phase durations, for rest-to-rest moves.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import quad

from dcsim.controllers.motion import (
    Profile,
    evaluate,
    ramp_profile,
    read_reference_csv,
    s_curve_profile,
    sample,
    step_profile,
    table_profile,
    trapezoid_profile,
)
from dcsim.errors import ScenarioError

RTOL = 1e-12


def segment_ends(profile: Profile) -> np.ndarray:
    """(value, d1, d2) of each row's cubic at the start of the next row (numpy, not evaluate)."""
    seg = profile.segments
    tau = np.diff(seg[:, 0])
    c0, c1, c2, c3 = (seg[:-1, i] for i in range(1, 5))
    value = c0 + c1 * tau + c2 * tau**2 + c3 * tau**3
    d1 = c1 + 2 * c2 * tau + 3 * c3 * tau**2
    d2 = 2 * c2 + 6 * c3 * tau
    return np.column_stack([value, d1, d2])


def dense(profile: Profile, at: float, n: int = 20001):
    t = np.linspace(at - 0.1, profile.end_time_s + 0.1, n)
    t = np.concatenate([t, profile.segments[:, 0]])  # the boundaries too
    t.sort()
    return (t, *sample(profile, t))


def speed_integral(profile: Profile) -> float:
    """Distance as the integral of the speed, by scipy's adaptive quadrature."""
    seg = profile.segments
    total = 0.0
    for k in range(seg.shape[0] - 1):
        t0, t1 = seg[k, 0], seg[k + 1, 0]
        total += quad(lambda t: evaluate(seg, t, 0)[1], t0, t1, epsabs=0.0, epsrel=1e-13)[0]
    return total


# --------------------------------------------------------------------------------------------
# Trapezoid
# --------------------------------------------------------------------------------------------

# warehouse shuttle drive pulley: speed 2 rad/s, acceleration 4 rad/s^2 (so v^2/a = 1 rad)
TRAPEZOID_CASES = [
    # (distance [rad], deceleration [rad/s^2] or None, speed limit reached)
    (3.0, None, True),
    (-3.0, None, True),
    (0.5, None, False),
    (-0.5, None, False),
    (1.0, None, True),  # exactly v^2/a: the cruise has zero length
    (4.0, 1.0, True),  # slower braking: v^2/(2a) + v^2/(2d) = 2.5 rad
    (1.0, 1.0, False),
    (-1.0, 1.0, False),
]
V, A = 2.0, 4.0
AT, P0 = 0.25, 7.5


def trapezoid_time(D: float, v: float, a: float, d: float) -> float:
    # Source: Biagiotti & Melchiorri 2008, sec. 3.2.2 for d = a: T = D/v + v/a when
    # D >= v^2/a, T = 2 sqrt(D/a) otherwise. Derived here for d != a: the ramps cover
    # v^2/(2a) and v^2/(2d) in v/a and v/d, the cruise the rest at v, so
    # T = v/a + v/d + (D - v^2/(2a) - v^2/(2d))/v = D/v + v/(2a) + v/(2d); triangular:
    # v_p^2/(2a) + v_p^2/(2d) = D gives v_p = sqrt(2 D a d/(a + d)), T = v_p/a + v_p/d.
    if d == a:
        return D / v + v / a if D >= v * v / a else 2.0 * math.sqrt(D / a)
    if D >= v * v / (2 * a) + v * v / (2 * d):
        return D / v + v / (2 * a) + v / (2 * d)
    vp = math.sqrt(2 * D * a * d / (a + d))
    return vp / a + vp / d


@pytest.mark.parametrize(("distance", "decel", "reached"), TRAPEZOID_CASES)
def test_trapezoid_distance_time_and_limits(distance, decel, reached):
    p = trapezoid_profile(distance, speed=V, acceleration=A, deceleration=decel, at=AT, initial=P0)
    d = A if decel is None else decel
    D = abs(distance)
    # Source: Biagiotti & Melchiorri 2008, sec. 3.2.2 (see trapezoid_time)
    assert p.end_time_s - AT == pytest.approx(trapezoid_time(D, V, A, d), rel=RTOL)
    assert p.segments[-1, 0] == p.end_time_s
    # Source: definition of the move (rest at initial + distance); the last moving cubic
    # ends there to 1e-12, and the integral of the speed (scipy.integrate.quad) is the distance
    assert p.segments[-1, 1] == P0 + distance
    assert segment_ends(p)[-1, 0] == pytest.approx(P0 + distance, rel=RTOL, abs=RTOL * D)
    assert speed_integral(p) == pytest.approx(distance, rel=RTOL)
    # Source: definition of the limits: |v| <= v_max, |accel| <= a_max, d_max braking
    t, x, v, acc = dense(p, AT)
    assert np.all(np.abs(v) <= V * (1 + RTOL))
    assert np.all(np.abs(acc) <= max(A, d) * (1 + RTOL))
    braking = v * acc < 0
    assert np.all(np.abs(acc[braking]) <= d * (1 + RTOL))
    assert np.all(p.segments[:, 4] == 0.0)  # no cubic term: constant acceleration pieces
    # Source: Biagiotti & Melchiorri 2008, sec. 3.2.2: peak speed v_max when reached, else
    # v_p = sqrt(2 D a d/(a + d)) (derived above; sqrt(D a) for d = a)
    peak = np.max(np.abs(p.segments[:, 2]))
    expected_peak = V if reached else math.sqrt(2 * D * A * d / (A + d))
    assert peak == pytest.approx(expected_peak, rel=RTOL)
    assert ("not reached" in p.notes) != reached
    # before the start: the initial position, at rest
    assert evaluate(p.segments, AT - 1.0, 0)[:3] == (P0, 0.0, 0.0)
    # moves in the right direction throughout
    assert np.all(np.sign(distance) * v >= 0.0)


@pytest.mark.parametrize(("distance", "decel", "reached"), TRAPEZOID_CASES)
def test_trapezoid_continuity(distance, decel, reached):
    # Source: Biagiotti & Melchiorri 2008, sec. 3.2.2: the trapezoidal-speed trajectory has
    # continuous position and speed (the acceleration jumps)
    p = trapezoid_profile(distance, speed=V, acceleration=A, deceleration=decel, at=AT, initial=P0)
    ends = segment_ends(p)
    starts = p.segments[1:, 1:3]
    np.testing.assert_allclose(ends[:, 0], starts[:, 0], rtol=0, atol=RTOL * (P0 + abs(distance)))
    np.testing.assert_allclose(ends[:, 1], starts[:, 1], rtol=0, atol=RTOL * V)


def test_trapezoid_negative_is_mirrored():
    # Source: symmetry of the construction (common practice (no source)): a move of -D is
    # the move of +D reflected about the initial position
    fwd = trapezoid_profile(3.0, speed=V, acceleration=A, deceleration=1.0, at=AT, initial=P0)
    back = trapezoid_profile(-3.0, speed=V, acceleration=A, deceleration=1.0, at=AT, initial=P0)
    t = np.linspace(0.0, fwd.end_time_s + 1.0, 2001)
    xf, vf, af = sample(fwd, t)
    xb, vb, ab = sample(back, t)
    np.testing.assert_allclose(xb - P0, -(xf - P0), rtol=0, atol=RTOL * 3.0)
    np.testing.assert_array_equal(vb, -vf)
    np.testing.assert_array_equal(ab, -af)


# --------------------------------------------------------------------------------------------
# S-curve (double S)
# --------------------------------------------------------------------------------------------

# harbour winch drum: speed 2 rad/s, acceleration 4 rad/s^2, jerk 40 rad/s^3; a slow variant
# with speed 0.2 rad/s where v j = 8 < a^2 = 16, so the acceleration limit is never reached
S_CASES = [
    # (name, distance [rad], speed, acceleration, jerk)
    ("all limits", 10.0, 2.0, 4.0, 40.0),
    ("all limits", -10.0, 2.0, 4.0, 40.0),
    ("speed only", 1.0, 0.2, 4.0, 40.0),
    ("speed only", -1.0, 0.2, 4.0, 40.0),
    ("acceleration only", 0.5, 2.0, 4.0, 40.0),
    ("acceleration only", -0.5, 2.0, 4.0, 40.0),
    ("no limit", 0.05, 2.0, 4.0, 40.0),
    ("no limit", -0.05, 2.0, 4.0, 40.0),
    ("no limit", 0.01, 0.2, 4.0, 40.0),
    ("all limits", 1.2, 2.0, 4.0, 40.0),  # exactly v (a/j + v/a): zero cruise
    ("acceleration only", 0.08, 2.0, 4.0, 40.0),  # exactly 2 a^3/j^2: zero hold phase
]


def s_curve_expected(name: str, D: float, v: float, a: float, j: float) -> tuple[float, float]:
    """(total time [s], peak speed [rad/s]) from the closed forms.

    Derived from the phase durations (jerk phases T_j, acceleration period T_a, cruise T_v;
    the acceleration period covers v_p T_a / 2 by symmetry; T = 2 T_a + T_v), which are those
    of Biagiotti & Melchiorri 2008, sec. 3.4 with zero end speeds and accelerations.
    """
    if name == "all limits":
        # T_j = a/j, T_a = T_j + v/a, T_v = D/v - T_a  =>  T = D/v + v/a + a/j
        return D / v + v / a + a / j, v
    if name == "speed only":
        # T_j = sqrt(v/j), T_a = 2 T_j, T_v = D/v - T_a  =>  T = D/v + 2 sqrt(v/j)
        return D / v + 2.0 * math.sqrt(v / j), v
    if name == "acceleration only":
        # T_v = 0, T_j = a/j, D = v_p T_a with v_p = a (T_a - T_j): a T_a^2 - (a^2/j) T_a - D = 0
        # => T_a = (a^2/j + sqrt(a^4/j^2 + 4 a D)) / (2 a)  (the form B&M sec. 3.4 give for
        # zero end speeds -- from memory), v_p = a (T_a - a/j), T = 2 T_a
        ta = (a * a / j + math.sqrt(a**4 / j**2 + 4.0 * a * D)) / (2.0 * a)
        return 2.0 * ta, a * (ta - a / j)
    # no limit: T_v = 0, T_a = 2 T_j, v_p = j T_j^2, D = v_p T_a = 2 j T_j^3
    # => T = 4 T_j = 4 (D/(2j))^(1/3), v_p = (j D^2 / 4)^(1/3)
    return 4.0 * (D / (2.0 * j)) ** (1.0 / 3.0), (j * D * D / 4.0) ** (1.0 / 3.0)


@pytest.mark.parametrize(("name", "distance", "v", "a", "j"), S_CASES)
def test_s_curve_distance_time_and_limits(name, distance, v, a, j):
    p = s_curve_profile(distance, speed=v, acceleration=a, jerk=j, at=AT, initial=P0)
    D = abs(distance)
    T, vp = s_curve_expected(name, D, v, a, j)
    # Source: Biagiotti & Melchiorri 2008, sec. 3.4 (derived in s_curve_expected)
    assert p.end_time_s - AT == pytest.approx(T, rel=RTOL)
    assert p.segments[-1, 0] == p.end_time_s
    # Source: definition of the move; the last moving cubic ends at initial + distance, and
    # the integral of the speed (scipy.integrate.quad) is the distance
    assert p.segments[-1, 1] == P0 + distance
    assert segment_ends(p)[-1, 0] == pytest.approx(P0 + distance, rel=RTOL, abs=RTOL * D)
    assert speed_integral(p) == pytest.approx(distance, rel=RTOL)
    # Source: Biagiotti & Melchiorri 2008, sec. 3.4: the speed peaks at mid-move (symmetric
    # limits), at v_p from s_curve_expected
    _, v_mid, a_mid, _ = evaluate(p.segments, AT + T / 2.0, 0)
    assert v_mid == pytest.approx(math.copysign(vp, distance), rel=RTOL)
    assert abs(a_mid) <= RTOL * a
    # Source: definition of the limits |v| <= v_max, |accel| <= a_max, |jerk| <= j_max;
    # the jerk of each cubic piece is 6 c3
    t, x, vel, acc = dense(p, AT)
    assert np.all(np.abs(vel) <= v * (1 + RTOL))
    assert np.all(np.abs(acc) <= a * (1 + RTOL))
    jerk = 6.0 * p.segments[:, 4]
    assert np.all(np.abs(jerk) <= j * (1 + RTOL))
    # Source: Biagiotti & Melchiorri 2008, sec. 3.4: the jerk is +-j_max or 0 on each phase,
    # seven phases at most, and the limits reached are reached exactly
    assert set(np.round(jerk / j, 12)) <= {-1.0, 0.0, 1.0}
    assert p.segments.shape[0] <= 8
    peak_acc = np.max(np.abs(acc))
    if name in ("all limits", "acceleration only"):
        assert np.max(np.abs(2.0 * p.segments[:, 3])) == pytest.approx(a, rel=RTOL)
    else:
        assert peak_acc < a * (1 - 1e-3)
    if name in ("all limits", "speed only"):
        assert np.max(np.abs(p.segments[:, 2])) == pytest.approx(v, rel=RTOL)
    else:
        assert np.max(np.abs(vel)) < v * (1 - 1e-3)
    # starts and ends at rest, in the right direction throughout
    assert evaluate(p.segments, AT - 1.0, 0)[:3] == (P0, 0.0, 0.0)
    assert tuple(p.segments[0, 2:4]) == (0.0, 0.0)
    assert np.all(np.sign(distance) * vel >= -RTOL * v)


@pytest.mark.parametrize(("name", "distance", "v", "a", "j"), S_CASES)
def test_s_curve_continuity(name, distance, v, a, j):
    # Source: Biagiotti & Melchiorri 2008, sec. 3.4: the double-S trajectory has continuous
    # position, speed and acceleration (the jerk is piecewise constant)
    p = s_curve_profile(distance, speed=v, acceleration=a, jerk=j, at=AT, initial=P0)
    ends = segment_ends(p)
    starts = np.column_stack([p.segments[1:, 1], p.segments[1:, 2], 2.0 * p.segments[1:, 3]])
    np.testing.assert_allclose(ends[:, 0], starts[:, 0], rtol=0, atol=RTOL * (P0 + abs(distance)))
    np.testing.assert_allclose(ends[:, 1], starts[:, 1], rtol=0, atol=RTOL * v)
    np.testing.assert_allclose(ends[:, 2], starts[:, 2], rtol=0, atol=RTOL * a)


def test_s_curve_notes_name_the_case():
    # common practice (no source): the notes say which limits were reached
    assert s_curve_profile(10.0, speed=2.0, acceleration=4.0, jerk=40.0).notes == (
        "speed limit reached; acceleration limit reached"
    )
    notes = s_curve_profile(0.05, speed=2.0, acceleration=4.0, jerk=40.0).notes
    assert notes.startswith("speed limit not reached") and "acceleration limit not" in notes


@pytest.mark.parametrize("builder", ["trapezoid", "s-curve"])
def test_zero_distance_is_constant(builder):
    # Source: definition of the move (no distance, no motion)
    if builder == "trapezoid":
        p = trapezoid_profile(0.0, speed=1.0, acceleration=1.0, at=2.0, initial=-3.0)
    else:
        p = s_curve_profile(0.0, speed=1.0, acceleration=1.0, jerk=1.0, at=2.0, initial=-3.0)
    x, v, a = sample(p, [0.0, 2.0, 5.0])
    np.testing.assert_array_equal(x, -3.0)
    np.testing.assert_array_equal(v, 0.0)
    np.testing.assert_array_equal(a, 0.0)
    assert p.end_time_s == 2.0 and p.kind == builder


# --------------------------------------------------------------------------------------------
# Step, ramp, table
# --------------------------------------------------------------------------------------------


def test_step():
    # Source: definition of a step (value before, value from the step time on)
    p = step_profile(150.0, at=0.2, initial=10.0)
    x, v, a = sample(p, [0.0, 0.19999, 0.2, 1.0])
    np.testing.assert_array_equal(x, [10.0, 10.0, 150.0, 150.0])
    np.testing.assert_array_equal(v, 0.0)
    np.testing.assert_array_equal(a, 0.0)
    assert p.end_time_s == 0.2 and p.kind == "step"


@pytest.mark.parametrize(("value", "initial", "rate"), [(120.0, 20.0, 50.0), (-30.0, 10.0, 8.0)])
def test_ramp_with_rate(value, initial, rate):
    # coolant pump speed ramp. Source: closed form of a linear ramp: reaches the value at
    # at + |value - initial| / rate, slope +-rate, midway value the average
    at = 1.5
    p = ramp_profile(value, at=at, initial=initial, rate=rate)
    t_end = at + abs(value - initial) / rate
    assert p.end_time_s == pytest.approx(t_end, rel=RTOL)
    x, v, a = sample(p, [at - 1.0, at, (at + t_end) / 2.0, t_end, t_end + 5.0])
    np.testing.assert_allclose(
        x, [initial, initial, (initial + value) / 2.0, value, value], rtol=RTOL
    )
    np.testing.assert_allclose(
        v, [0.0, math.copysign(rate, value - initial), math.copysign(rate, value - initial), 0, 0],
        rtol=RTOL,
    )  # fmt: skip
    np.testing.assert_array_equal(a, 0.0)
    ends = segment_ends(p)
    assert ends[0, 0] == pytest.approx(value, rel=RTOL)  # continuous at the ramp's end


def test_ramp_with_time_and_degenerate_ramps():
    # Source: closed form of a linear ramp (value reached after ramp_time)
    p = ramp_profile(4.0, initial=1.0, ramp_time=3.0)
    assert p.end_time_s == 3.0
    assert sample(p, [1.0])[0][0] == pytest.approx(2.0, rel=RTOL)
    assert sample(p, [1.0])[1][0] == pytest.approx(1.0, rel=RTOL)
    step = ramp_profile(4.0, at=1.0, initial=1.0, ramp_time=0.0)
    np.testing.assert_array_equal(sample(step, [0.5, 1.0])[0], [1.0, 4.0])
    flat = ramp_profile(4.0, initial=4.0, rate=2.0)
    np.testing.assert_array_equal(sample(flat, [-1.0, 0.0, 9.0])[0], 4.0)


def test_table_matches_numpy_interp():
    # Source: numpy.interp (reference implementation of piecewise-linear interpolation,
    # holding the end values outside the points)
    rng = np.random.default_rng(20240611)
    times = np.cumsum(rng.uniform(0.05, 1.0, 30)) - 2.0
    values = rng.normal(0.0, 50.0, 30)
    p = table_profile(times, values)
    t = np.sort(rng.uniform(times[0] - 1.0, times[-1] + 1.0, 5000))
    x, v, a = sample(p, t)
    np.testing.assert_allclose(x, np.interp(t, times, values), rtol=RTOL, atol=RTOL * 200.0)
    np.testing.assert_array_equal(sample(p, times)[0], values)  # exact at the points
    np.testing.assert_array_equal(a, 0.0)
    assert p.end_time_s == times[-1]
    # slope inside each interval = finite difference of the points (same source)
    mid = (times[:-1] + times[1:]) / 2.0
    np.testing.assert_allclose(
        sample(p, mid)[1], np.diff(values) / np.diff(times), rtol=RTOL, atol=0
    )


# --------------------------------------------------------------------------------------------
# Evaluator
# --------------------------------------------------------------------------------------------


def test_evaluate_hint_gives_the_same_as_a_full_search():
    # common practice (no source): the hint only saves search time
    p = s_curve_profile(10.0, speed=2.0, acceleration=4.0, jerk=40.0, at=0.5, initial=1.0)
    seg = p.segments
    t = np.linspace(0.0, p.end_time_s + 1.0, 3001)
    t = np.sort(np.concatenate([t, seg[:, 0]]))
    hint = 0
    for ti in t:
        with_hint = evaluate(seg, ti, hint)
        assert with_hint == evaluate(seg, ti, 0)
        assert seg[with_hint[3], 0] <= ti or with_hint[3] == 0
        hint = with_hint[3]
    # earlier time than the hinted segment, and hints out of range: same answers
    late = evaluate(seg, p.end_time_s, 0)[3]
    for ti in (0.0, 0.6, 1.0, 3.0):
        ref = evaluate(seg, ti, 0)
        assert evaluate(seg, ti, late) == ref
        assert evaluate(seg, ti, 999) == ref
        assert evaluate(seg, ti, -4) == ref
        assert evaluate(np.array(seg), ti, late) == ref  # a writable copy compiles the same


def test_profile_segments_are_read_only_and_checked():
    p = trapezoid_profile(1.0, speed=1.0, acceleration=1.0)
    assert not p.segments.flags.writeable
    assert p.segments.dtype == np.float64 and p.segments.flags.c_contiguous
    with pytest.raises(ScenarioError, match=r"expected Profile.segments of shape \(n, 5\)"):
        Profile(np.zeros((2, 4)), "table", 0.0)
    with pytest.raises(ScenarioError, match="expected Profile.kind one of"):
        Profile(np.zeros((1, 5)), "sine", 0.0)
    with pytest.raises(ScenarioError, match="expected non-decreasing segment start times"):
        Profile(np.array([[1.0, 0, 0, 0, 0], [0.0, 0, 0, 0, 0]]), "table", 1.0)
    with pytest.raises(ScenarioError, match="expected finite Profile.segments"):
        Profile(np.array([[0.0, np.nan, 0, 0, 0]]), "table", 0.0)


# --------------------------------------------------------------------------------------------
# CSV reader
# --------------------------------------------------------------------------------------------


def test_read_reference_csv_good_header_semicolons(tmp_path):
    # Source: the file's own numbers (a shuttle position schedule written by hand)
    good = tmp_path / "shuttle.csv"
    good.write_text("# shuttle position\n\n0, 0\n0.5, 1.25\n\n2.0,3.0 \n", encoding="utf-8")
    t, x = read_reference_csv(good, source="s.toml", key="reference.file")
    np.testing.assert_array_equal(t, [0.0, 0.5, 2.0])
    np.testing.assert_array_equal(x, [0.0, 1.25, 3.0])
    header = tmp_path / "header.csv"
    header.write_text("time_s,position_rad\n0,1\n1,2\n", encoding="utf-8")
    np.testing.assert_array_equal(read_reference_csv(header, source="s", key="k")[1], [1.0, 2.0])
    semi = tmp_path / "semi.csv"
    semi.write_text("t;speed\n0;10.5\n1;20\n", encoding="utf-8")
    t, v = read_reference_csv(semi, source="s", key="k")
    np.testing.assert_array_equal(v, [10.5, 20.0])
    p = table_profile(*read_reference_csv(good, source="s", key="k"))
    assert sample(p, [1.25])[0][0] == pytest.approx(1.25 + 0.75 * 1.75 / 1.5, rel=RTOL)


@pytest.mark.parametrize(
    ("text", "fragment"),
    [
        ("0,0\n1,x\n", "line 2"),
        ("t,v\n0,0\nbad,1\n", "line 3"),
        ("0,0\n1,2,3\n", "line 2"),
        ("0,0\n1,nan\n", "expected finite numbers on line 2"),
        ("0,0\n1,1\n1,2\n", "found 1 s on line 3 of"),
        ("0,0\n2,1\n# c\n1,2\n", "after 2 s on line 2"),
        ("t,v\n0,0\n", "expected at least two (time, value) lines"),
    ],
)
def test_read_reference_csv_bad_lines(tmp_path, text, fragment):
    bad = tmp_path / "winch.csv"
    bad.write_text(text, encoding="utf-8")
    with pytest.raises(ScenarioError) as err:
        read_reference_csv(bad, source="winch.toml", key="reference.file")
    assert fragment in str(err.value)
    assert "winch.csv" in str(err.value)
    assert err.value.source == "winch.toml" and err.value.key == "reference.file"
    assert str(err.value).startswith("winch.toml: reference.file: expected")


def test_read_reference_csv_missing_file(tmp_path):
    with pytest.raises(ScenarioError, match="expected a readable CSV file") as err:
        read_reference_csv(tmp_path / "missing.csv", source="a.toml", key="reference.file")
    assert "missing.csv" in str(err.value)


# --------------------------------------------------------------------------------------------
# Bad arguments
# --------------------------------------------------------------------------------------------

SK = {"source": "pump.toml", "key": "reference"}
BAD = [
    (lambda: step_profile(float("nan"), **SK), "expected a finite value", "nan"),
    (lambda: step_profile(1.0, at=float("inf"), **SK), "expected a finite at [s]", "inf"),
    (lambda: step_profile("fast", **SK), "expected value as a number", "'fast'"),
    (lambda: step_profile(True, **SK), "expected value as a number", "True"),
    (lambda: ramp_profile(1.0, rate=1.0, ramp_time=1.0, **SK), "exactly one of rate", "both"),
    (lambda: ramp_profile(1.0, **SK), "exactly one of rate", "neither"),
    (lambda: ramp_profile(1.0, rate=0.0, **SK), "expected rate > 0 unit/s", "found 0 unit/s"),
    (lambda: ramp_profile(1.0, rate=-2.0, **SK), "expected rate > 0", "found -2"),
    (lambda: ramp_profile(1.0, ramp_time=-1.0, **SK), "expected ramp_time >= 0 s", "found -1 s"),
    (lambda: ramp_profile(1.0, rate=float("nan"), **SK), "expected a finite rate", "nan"),
    (lambda: ramp_profile(1.0, initial=float("-inf"), rate=1.0, **SK), "finite initial", "inf"),
    (
        lambda: trapezoid_profile(1.0, speed=0.0, acceleration=1.0, **SK),
        "expected speed > 0 rad/s",
        "found 0 rad/s",
    ),
    (
        lambda: trapezoid_profile(1.0, speed=1.0, acceleration=-1.0, **SK),
        "expected acceleration > 0 rad/s^2",
        "found -1",
    ),
    (
        lambda: trapezoid_profile(1.0, speed=1.0, acceleration=1.0, deceleration=0.0, **SK),
        "expected deceleration > 0 rad/s^2",
        "found 0",
    ),
    (
        lambda: trapezoid_profile(float("nan"), speed=1.0, acceleration=1.0, **SK),
        "expected a finite distance [rad]",
        "nan",
    ),
    (
        lambda: trapezoid_profile(1.0, speed=1.0, acceleration=1.0, at=float("nan"), **SK),
        "expected a finite at [s]",
        "nan",
    ),
    (
        lambda: s_curve_profile(1.0, speed=-1.0, acceleration=1.0, jerk=1.0, **SK),
        "expected speed > 0 rad/s",
        "found -1",
    ),
    (
        lambda: s_curve_profile(1.0, speed=1.0, acceleration=0.0, jerk=1.0, **SK),
        "expected acceleration > 0",
        "found 0",
    ),
    (
        lambda: s_curve_profile(1.0, speed=1.0, acceleration=1.0, jerk=0.0, **SK),
        "expected jerk > 0 rad/s^3",
        "found 0 rad/s^3",
    ),
    (
        lambda: s_curve_profile(1.0, speed=1.0, acceleration=1.0, jerk=float("inf"), **SK),
        "expected a finite jerk",
        "inf",
    ),
    (
        lambda: s_curve_profile(1.0, speed=1.0, acceleration=1.0, jerk=None, **SK),
        "expected jerk as a number",
        "None",
    ),
    (lambda: table_profile([0.0], [1.0], **SK), "at least two (time, value) points", "found 1"),
    (lambda: table_profile([0.0, 1.0], [1.0], **SK), "as many times as values", "(2,) and (1,)"),
    (lambda: table_profile([0.0, 0.0], [1.0, 2.0], **SK), "strictly rising", "0 s after 0 s"),
    (lambda: table_profile([0.0, 2.0, 1.0], [1, 2, 3], **SK), "strictly rising", "at point 2"),
    (lambda: table_profile([0.0, 1.0], [1.0, np.nan], **SK), "finite numbers", "at point 1"),
    (lambda: table_profile(["a", "b"], [1, 2], **SK), "sequences of numbers", "'a'"),
]


@pytest.mark.parametrize(("call", "expected", "found"), BAD)
def test_bad_arguments_raise_scenario_error(call, expected, found):
    with pytest.raises(ScenarioError) as err:
        call()
    message = str(err.value)
    assert expected in message
    assert found in message
    assert message.startswith("pump.toml: reference: expected")
    assert err.value.source == "pump.toml" and err.value.key == "reference"
