"""Fuse element: first-order heating model, IEC 60127-2 gates, table fits, CSV and keys.

Settings (invented): the 5 A supply fuse of a coolant pump (the contract's example keys), a
2 A fuse in a warehouse shuttle's steering drive, and a harbour winch maker's table.

References beside each check: the closed form of the lumped first-order model (derived; lumped
capacitance method, Incropera et al., *Fundamentals of Heat and Mass Transfer*, 6th ed.,
sec. 5.1-5.3), scipy.integrate.solve_ivp of the same ODE (reference library), and the time gates
of IEC 60127-2 standard sheets 2 and 3 as listed in the project's CHECKS.md.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from scipy.integrate import solve_ivp
from scipy.optimize import least_squares

from dcsim.errors import ScenarioError
from dcsim.power.fuse import (
    CAUTION,
    IEC_60127_2_GATES,
    FuseModel,
    adiabatic_melting_time_s,
    check_gates,
    fit_time_current,
    fuse_model_from_keys,
    generic_model,
    heat_fraction,
    melting_time_s,
    read_time_current_csv,
)

# Coolant pump fuse, the contract's example: 5 A, 10 A^2 s, I_min = 2.1 x 5 A = 10.5 A.
PUMP = FuseModel(
    rated_current_A=5.0, melting_i2t_A2s=10.0, min_melting_current_A=10.5, origin="parameters"
)

# solve_ivp tolerances: the ODE is scalar and smooth; rtol 1e-11 puts the integration error
# near 1e-10, so 1e-8 relative separates it from any modelling slip.
IVP_RTOL = 1e-11
IVP_ATOL = 1e-13
AGREE = 1e-8


def _ode(model: FuseModel, current_A: float):
    i_min2 = model.min_melting_current_A**2
    tau = model.melting_i2t_A2s / i_min2  # tau recomputed from the contract's definition

    def rhs(_t: float, f: np.ndarray) -> np.ndarray:
        return (current_A**2 / i_min2 - f) / tau

    return rhs


def _ivp_melting_time(model: FuseModel, current_A: float, f0: float = 0.0) -> float:
    def melted(_t: float, f: np.ndarray) -> float:
        return f[0] - 1.0

    melted.terminal = True
    melted.direction = 1.0
    t_end = 50.0 * model.tau_s
    sol = solve_ivp(
        _ode(model, current_A),
        (0.0, t_end),
        [f0],
        method="DOP853",
        rtol=IVP_RTOL,
        atol=IVP_ATOL,
        events=melted,
    )
    assert sol.status == 1, "the reference run must end on the melting event"
    return float(sol.t_events[0][0])


# --------------------------------------------------------------------------------------------
# Constant-current melting time, adiabatic limit, heat fraction
# --------------------------------------------------------------------------------------------


def test_tau_from_contract_definition() -> None:
    # Source: CONTRACT.md [fuse]: tau = melting_i2t / min_melting_current^2 (derived)
    assert PUMP.tau_s == pytest.approx(10.0 / 10.5**2, rel=1e-15)


@pytest.mark.parametrize("current_A", [10.6, 12.0, 15.0, 21.0, 52.5, 200.0])
def test_melting_time_closed_form(current_A: float) -> None:
    # Source: closed form of the lumped first-order model (derived; Incropera sec. 5.3):
    # t = tau ln(I^2 / (I^2 - I_min^2))
    tau = 10.0 / 10.5**2
    expected = tau * math.log(current_A**2 / (current_A**2 - 10.5**2))
    assert melting_time_s(PUMP, current_A) == pytest.approx(expected, rel=1e-12)
    # heating goes with i^2: a regenerating (negative) current melts the same
    assert melting_time_s(PUMP, -current_A) == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize("current_A", [10.6, 12.0, 21.0, 200.0])
def test_melting_time_against_solve_ivp(current_A: float) -> None:
    # Source: scipy.integrate.solve_ivp of df/dt = (i^2/I_min^2 - f)/tau, event f = 1
    # (reference library)
    reference = _ivp_melting_time(PUMP, current_A)
    assert melting_time_s(PUMP, current_A) == pytest.approx(reference, rel=AGREE)


@pytest.mark.parametrize(("current_A", "f0"), [(12.0, 0.5), (30.0, 0.9), (11.0, 0.2)])
def test_melting_time_from_a_warm_element_against_solve_ivp(current_A: float, f0: float) -> None:
    # Source: scipy.integrate.solve_ivp of the same ODE from f(0) = f0 (reference library)
    reference = _ivp_melting_time(PUMP, current_A, f0=f0)
    assert melting_time_s(PUMP, current_A, f0=f0) == pytest.approx(reference, rel=AGREE)


def test_melting_time_broadcasts_and_never_melts_at_or_below_i_min() -> None:
    # Source: closed form (derived): the steady heat fraction I^2/I_min^2 <= 1 never reaches 1
    currents = np.array([[0.0, 5.0, 10.5], [-10.5, 11.0, 40.0]])
    t = melting_time_s(PUMP, currents)
    assert t.shape == currents.shape
    assert np.all(np.isinf(t[0])) and np.isinf(t[1, 0])
    assert np.all(np.isfinite(t[1, 1:])) and t[1, 1] > t[1, 2] > 0.0
    assert isinstance(melting_time_s(PUMP, 20.0), float)


def test_adiabatic_limit_for_short_pulses() -> None:
    # Source: closed form (derived): I^2 t_melt / I2t = -ln(1 - x)/x with x = I_min^2/I^2, and
    # -ln(1 - x) = x + x^2/2 + x^3/3 + ... (Abramowitz & Stegun 4.1.24), so the ratio -> 1 + x/2
    currents = np.array([20.0, 50.0, 100.0, 300.0, 1000.0, 1.0e4])
    ratio = melting_time_s(PUMP, currents) / adiabatic_melting_time_s(PUMP, currents)
    x = (10.5 / currents) ** 2
    assert np.all(np.diff(ratio) < 0.0) and np.all(ratio > 1.0)  # falls towards 1 from above
    series = 1.0 + x / 2.0 + x**2 / 3.0 + x**3 / 4.0
    # the tail sum_{n>=4} x^n/(n+1) is positive and at most x^4 / (5 (1 - x))
    tail = ratio - series
    assert np.all(tail > -1e-15) and np.all(tail <= x**4 / (5.0 * (1.0 - x)) + 1e-15)
    assert ratio[-1] == pytest.approx(1.0, abs=1e-6)
    assert adiabatic_melting_time_s(PUMP, 100.0) == pytest.approx(10.0 / 100.0**2, rel=1e-15)


@pytest.mark.parametrize(
    ("current_A", "f0"),
    [(8.0, 0.0), (10.5, 0.0), (15.0, 0.3), (0.0, 0.8), (-12.0, 0.1)],
)
def test_heat_fraction_against_solve_ivp(current_A: float, f0: float) -> None:
    # Source: scipy.integrate.solve_ivp of df/dt = (i^2/I_min^2 - f)/tau (reference library);
    # includes cooling at zero current and a current below I_min
    t = np.linspace(0.0, 3.0 * PUMP.tau_s, 13)
    sol = solve_ivp(
        _ode(PUMP, current_A),
        (0.0, t[-1]),
        [f0],
        method="DOP853",
        t_eval=t,
        rtol=IVP_RTOL,
        atol=IVP_ATOL,
    )
    f = heat_fraction(PUMP, current_A, t, f0=f0)
    assert f == pytest.approx(sol.y[0], rel=AGREE, abs=1e-10)


def test_heat_fraction_is_one_at_the_melting_time() -> None:
    # Source: closed form (derived): f(t_melt) = 1 by definition of the melting time
    currents = np.array([11.0, 20.0, 100.0])
    t = melting_time_s(PUMP, currents)
    assert heat_fraction(PUMP, currents, t) == pytest.approx(np.ones(3), rel=1e-12)


# --------------------------------------------------------------------------------------------
# IEC 60127-2 gates and the generic models
# --------------------------------------------------------------------------------------------

# Source: IEC 60127-2 standard sheet 2 (quick-acting, low breaking) -- confirmed from a faithful
# copy: (multiple of In, shortest s, longest s)
SHEET_2 = [(1.5, 3600.0, math.inf), (2.1, 0.0, 1800.0), (2.75, 0.05, 2.0), (4.0, 0.01, 0.3)]
SHEET_2 += [(10.0, 0.0, 0.02)]
# Source: IEC 60127-2 standard sheet 3 (time-lag, low breaking) -- from memory
SHEET_3 = [(1.5, 3600.0, math.inf), (2.1, 0.0, 120.0), (2.75, 0.6, 10.0), (4.0, 0.15, 3.0)]
SHEET_3 += [(10.0, 0.02, 0.15)]


def test_gate_tables_match_the_standard_sheets() -> None:
    # Source: IEC 60127-2 standard sheet 2 (confirmed) and sheet 3 (from memory), as in CHECKS.md
    for name, sheet, status in (
        ("quick-acting", SHEET_2, "confirmed"),
        ("time-lag", SHEET_3, "from memory"),
    ):
        gates = IEC_60127_2_GATES[name]
        assert [(g.multiple, g.t_min_s, g.t_max_s) for g in gates] == sheet
        assert all(g.status == status for g in gates)


@pytest.mark.parametrize(
    ("fuse_class", "sheet"), [("quick-acting", SHEET_2), ("time-lag", SHEET_3)]
)
@pytest.mark.parametrize("rated_current_A", [0.125, 2.0, 10.0])
def test_generic_models_fall_inside_every_gate(
    fuse_class: str, sheet: list[tuple[float, float, float]], rated_current_A: float
) -> None:
    # Source: IEC 60127-2 standard sheet 2 (confirmed) / sheet 3 (from memory); model times from
    # the closed form t = tau ln(m^2/(m^2 - k^2)) recomputed here (derived)
    model = generic_model(rated_current_A, fuse_class)
    assert model.origin == f"generic {fuse_class} class"
    assert model.min_melting_current_A > model.rated_current_A
    k = model.min_melting_current_A / rated_current_A
    for multiple, t_min, t_max in sheet:
        t = model.tau_s * math.log(multiple**2 / (multiple**2 - k**2)) if multiple > k else math.inf
        assert t_min <= t <= t_max, (fuse_class, multiple, t)
    results = check_gates(model, fuse_class)
    assert [r.multiple for r in results] == [m for m, _, _ in sheet]
    assert all(r.inside for r in results)
    expected_status = "confirmed" if fuse_class == "quick-acting" else "from memory"
    assert all(r.status == expected_status for r in results)
    assert "no substitute for the maker's time-current curve" in model.warning
    assert CAUTION in model.warning
    if fuse_class == "time-lag":
        assert "from memory" in model.warning


@pytest.mark.parametrize("fuse_class", ["quick-acting", "time-lag"])
def test_generic_model_is_the_documented_centre(fuse_class: str) -> None:
    # Source: the choice documented in generic_model (derived): k = sqrt(1.5 x 2.1) between the
    # conventional non-melting and melting multiples of IEC 60127-2, and tau with equal log
    # margins to the nearest lower and upper time limits
    model = generic_model(1.0, fuse_class)
    k = model.min_melting_current_A
    assert k == pytest.approx(math.sqrt(1.5 * 2.1), rel=1e-14)
    below, above = [], []
    for gate in IEC_60127_2_GATES[fuse_class]:
        if gate.multiple <= k:
            continue
        t = model.tau_s * math.log(gate.multiple**2 / (gate.multiple**2 - k**2))
        if gate.t_min_s > 0.0:
            below.append(math.log(t / gate.t_min_s))
        if math.isfinite(gate.t_max_s):
            above.append(math.log(gate.t_max_s / t))
    assert min(below) == pytest.approx(min(above), rel=1e-12)
    assert min(below) > 0.0
    assert generic_model(1.0, fuse_class) == model  # reproducible


def test_generic_model_scales_with_rating_and_takes_class_letters() -> None:
    # Source: closed form (derived): the gates are in multiples of In, so I_min ~ In, tau fixed
    small, large = generic_model(1.0, "F"), generic_model(4.0, "quick-acting")
    assert large.min_melting_current_A == pytest.approx(4.0 * small.min_melting_current_A)
    assert large.tau_s == pytest.approx(small.tau_s, rel=1e-14)
    assert generic_model(1.0, "T").origin == "generic time-lag class"
    # outside the span the sheet covers: still a model, with a warning
    assert "outside the span" in generic_model(16.0, "quick-acting").warning


def test_default_i_min_fails_the_quick_acting_2_1_gate() -> None:
    # Source: IEC 60127-2 sheet 2 (2.1 In melts within 30 min) against the closed form: with
    # I_min = 2.1 In the model never melts at 2.1 In
    model = fuse_model_from_keys(2.0, melting_i2t_A2s=3.0, source="shuttle.toml")
    results = {r.multiple: r for r in check_gates(model, "quick-acting")}
    assert math.isinf(results[2.1].model_time_s)
    assert not results[2.1].inside
    assert results[1.5].inside


# --------------------------------------------------------------------------------------------
# Fitting a time-current table
# --------------------------------------------------------------------------------------------


def test_fit_recovers_known_parameters_from_exact_points() -> None:
    # Source: closed form (derived): points generated from t = tau ln(I^2/(I^2 - I_min^2))
    i_min, tau = 3.3, 0.42
    currents = np.array([3.6, 4.0, 5.0, 7.0, 12.0, 30.0])
    times = tau * np.log(currents**2 / (currents**2 - i_min**2))
    model, report = fit_time_current(
        currents[::-1], times[::-1], rated_current_A=2.0, source="winch.toml"
    )
    assert model.origin == "table fit"
    assert model.min_melting_current_A == pytest.approx(i_min, rel=1e-6)
    assert model.tau_s == pytest.approx(tau, rel=1e-6)
    assert report.worst_ratio == pytest.approx(1.0, abs=1e-6)
    assert report.currents_A == tuple(currents)  # sorted by current
    assert model.warning == ""


def test_fit_on_a_noisy_table_gives_a_sensible_report() -> None:
    # Source: scipy.optimize.least_squares on the same log-time residuals (reference library);
    # points from the closed form with a fixed +-10 % pattern (invented noise)
    i_min, tau = 3.3, 0.42
    currents = np.array([3.6, 4.0, 5.0, 7.0, 12.0, 30.0])
    exact = tau * np.log(currents**2 / (currents**2 - i_min**2))
    noise = np.array([1.10, 0.90, 1.05, 0.95, 1.08, 0.92])
    times = exact * noise
    model, report = fit_time_current(currents, times, rated_current_A=2.0)

    def residuals(p: np.ndarray) -> np.ndarray:
        g = np.log(currents**2 / (currents**2 - p[0] ** 2))
        return np.log(times) - np.log(p[1] * g)

    ref = least_squares(
        residuals,
        x0=[i_min, tau],
        bounds=([2.0, 1e-6], [currents[0] * (1 - 1e-12), np.inf]),
        xtol=1e-14,
        ftol=1e-14,
        gtol=1e-14,
    )
    ours = residuals(np.array([model.min_melting_current_A, model.tau_s]))
    # at least as good as the reference optimiser (and therefore as the true parameters)
    assert ours @ ours <= 2.0 * ref.cost * (1.0 + 1e-9)
    assert model.min_melting_current_A == pytest.approx(ref.x[0], rel=1e-5)
    assert model.tau_s == pytest.approx(ref.x[1], rel=1e-5)
    # the report: given and model times, their ratios, the worst point
    assert report.given_times_s == pytest.approx(tuple(times), rel=1e-15)
    model_times = melting_time_s(model, currents)
    assert report.model_times_s == pytest.approx(tuple(model_times), rel=1e-15)
    ratios = model_times / times
    spread = np.maximum(ratios, 1.0 / ratios)
    assert report.worst_ratio == pytest.approx(spread.max(), rel=1e-15)
    assert report.worst_current_A == currents[np.argmax(spread)]
    assert report.rms_log10_error == pytest.approx(np.sqrt(np.mean(np.log10(ratios) ** 2)))
    # a +-10 % table: the least-squares fit stays within the noise band on the log scale
    assert report.rms_log10_error <= np.sqrt(np.mean(np.log10(noise) ** 2))
    assert 1.0 < report.worst_ratio < 2.0 and report.warning == ""


@pytest.mark.parametrize(
    ("currents", "times", "expected"),
    [
        ([3.0, 4.0, 6.0], [1.0, 2.0, 0.1], "fall as current rises"),  # times increasing
        ([3.0, 6.0], [1.0, 0.5], "I^2 t to fall"),  # I^2 t rising: 9 -> 18 A^2 s
        ([2.0, 4.0], [10.0, 0.1], "carry its rating"),  # a point at the rated current
        ([3.0, 3.0, 5.0], [2.0, 1.0, 0.1], "each current once"),
        ([4.0], [1.0], "at least 2"),
        ([3.0, 5.0], [1.0, -0.1], "finite and > 0"),
        ([3.0, 5.0], [1.0, math.nan], "finite and > 0"),
        ([3.0, 5.0, 8.0], [1.0, 0.1], "as many melting times"),
        ([2.2, 2.4, 2.6, 40.0], [3600.0, 3000.0, 2500.0, 1e-4], "within a factor 10"),
    ],
)
def test_fit_refuses_tables_the_model_cannot_represent(
    currents: list[float], times: list[float], expected: str
) -> None:
    # Source: closed form (derived): model times fall with current and model I^2 t falls
    # monotonically to melting_i2t; a fuse carries its rating
    with pytest.raises(ScenarioError) as err:
        fit_time_current(currents, times, rated_current_A=2.0, source="winch.toml")
    assert err.value.key == "fuse.table" and err.value.source == "winch.toml"
    assert expected in str(err.value) and "expected" in str(err.value)
    assert "found" in str(err.value)


# --------------------------------------------------------------------------------------------
# CSV tables
# --------------------------------------------------------------------------------------------


def _write(tmp_path: Path, text: str, name: str = "curve.csv") -> Path:
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def test_csv_with_header_comments_and_semicolons(tmp_path: Path) -> None:
    # Source: format documented in read_time_current_csv (common practice (no source))
    path = _write(
        tmp_path,
        "# harbour winch fuse, maker's table (invented)\n"
        "current [A]; melting time [s]\n"
        "\n"
        "3,6; 1,25   # first point\n"
        "5;0,15\n"
        "30;0,00204\n",
    )
    currents, times = read_time_current_csv(path, source="winch.toml", key="fuse.table")
    assert currents.tolist() == [3.6, 5.0, 30.0]
    assert times.tolist() == [1.25, 0.15, 0.00204]
    plain = _write(tmp_path, "3.6,1.25\n5,0.15\n", name="plain.csv")
    currents, times = read_time_current_csv(plain, source="winch.toml", key="fuse.table")
    assert currents.tolist() == [3.6, 5.0] and times.tolist() == [1.25, 0.15]


@pytest.mark.parametrize(
    ("text", "line", "expected"),
    [
        ("I,t\n3,1\nabc,0.1\n", 3, "expected a number (current in A), found 'abc'"),
        ("3,1\n5,0.1,7\n", 2, "expected 2 values"),
        ("3,1\n2.5,0.5\n", 2, "increasing order"),
        ("3,1\n5,2\n", 2, "fall as current rises"),
        ("3,1\n5,-0.1\n", 2, "melting time > 0 s"),
        ("current [A], time [ms]\n3,1000\n5,100\n", 1, "column 2 in s"),
        ("current (mA), time (s)\n3000,1\n5000,0.1\n", 1, "column 1 in A"),
        ("# only a comment\n3,1\n", None, "at least 2 data lines, found 1"),
        ("", None, "at least 2 data lines, found 0"),
    ],
)
def test_csv_problems_name_file_line_expectation_and_finding(
    tmp_path: Path, text: str, line: int | None, expected: str
) -> None:
    # Source: project rule (one ScenarioError naming file, key, expectation, finding)
    path = _write(tmp_path, text)
    with pytest.raises(ScenarioError) as err:
        read_time_current_csv(path, source="winch.toml", key="fuse.table")
    message = str(err.value)
    assert err.value.source == "winch.toml" and err.value.key == "fuse.table"
    assert str(path) in message and expected in message
    if line is not None:
        assert f"line {line}:" in message


def test_csv_missing_file(tmp_path: Path) -> None:
    # Source: project rule (one ScenarioError naming file, key, expectation, finding)
    with pytest.raises(ScenarioError) as err:
        read_time_current_csv(tmp_path / "nope.csv", source="winch.toml", key="fuse.table")
    assert "nope.csv" in str(err.value) and "no such file" in str(err.value)
    assert err.value.key == "fuse.table"


# --------------------------------------------------------------------------------------------
# From scenario keys
# --------------------------------------------------------------------------------------------


def test_keys_with_melting_i2t_and_default_i_min() -> None:
    # Source: CONTRACT.md [fuse]: min_melting_current defaults to 2.1 x rated_current and
    # tau = melting_i2t / min_melting_current^2 (derived)
    model = fuse_model_from_keys(5.0, melting_i2t_A2s=10.0, source="pump.toml")
    assert model.min_melting_current_A == pytest.approx(10.5, rel=1e-15)
    assert model.tau_s == pytest.approx(10.0 / 10.5**2, rel=1e-15)
    assert model.origin == "parameters" and CAUTION in model.warning
    given = fuse_model_from_keys(
        5.0, melting_i2t_A2s=10.0, min_melting_current_A=8.0, source="pump.toml"
    )
    assert given.min_melting_current_A == 8.0


def test_keys_with_a_table_and_a_class(tmp_path: Path) -> None:
    # Source: closed form (derived): points generated from t = tau ln(I^2/(I^2 - I_min^2))
    i_min, tau = 3.3, 0.42
    currents = [3.6, 5.0, 12.0]
    pairs = [[i, tau * math.log(i**2 / (i**2 - i_min**2))] for i in currents]
    model = fuse_model_from_keys(2.0, table=pairs, source="winch.toml")
    assert model.origin == "table fit" and model.tau_s == pytest.approx(tau, rel=1e-6)
    scenario = tmp_path / "winch.toml"
    _write(tmp_path, "\n".join(f"{i!r},{t!r}" for i, t in pairs) + "\n")
    from_file = fuse_model_from_keys(2.0, table="curve.csv", source=str(scenario))
    assert from_file.min_melting_current_A == pytest.approx(i_min, rel=1e-6)
    generic = fuse_model_from_keys(2.0, fuse_class="time-lag", source="winch.toml")
    assert generic == generic_model(2.0, "time-lag")


@pytest.mark.parametrize(
    ("kwargs", "key", "expected"),
    [
        (dict(rated_current_A=5.0), "fuse", "found none"),
        (
            dict(rated_current_A=5.0, melting_i2t_A2s=10.0, fuse_class="F"),
            "fuse.class",
            "exactly one of",
        ),
        (
            dict(rated_current_A=5.0, melting_i2t_A2s=10.0, min_melting_current_A=5.0),
            "fuse.min_melting_current",
            "carry its rating",
        ),
        (
            dict(rated_current_A=5.0, fuse_class="F", min_melting_current_A=9.0),
            "fuse.min_melting_current",
            "only with",
        ),
        (dict(rated_current_A=-5.0, melting_i2t_A2s=10.0), "fuse.rated_current", "> 0"),
        (dict(rated_current_A=5.0, melting_i2t_A2s=0.0), "fuse.melting_i2t", "> 0"),
        (dict(rated_current_A=5.0, fuse_class="slow-ish"), "fuse.class", "slow-ish"),
        (dict(rated_current_A=5.0, table=[[6.0, 1.0], "x"]), "fuse.table", "entry 2"),
        (dict(rated_current_A=5.0, table=42), "fuse.table", "found 42"),
        (dict(rated_current_A=5.0, table="missing.csv"), "fuse.table", "no such file"),
    ],
)
def test_bad_keys_raise_one_scenario_error(kwargs: dict, key: str, expected: str) -> None:
    # Source: project rule (one ScenarioError naming file, key, expectation, finding)
    with pytest.raises(ScenarioError) as err:
        fuse_model_from_keys(**kwargs, source="pump.toml")
    assert err.value.key == key and err.value.source == "pump.toml"
    assert str(err.value).startswith(f"pump.toml: {key}: ")
    assert "expected" in str(err.value) and expected in str(err.value)
