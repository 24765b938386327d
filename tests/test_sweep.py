"""Sweeps: every row is the scenario run alone; Monte Carlo and corners against theory;
resume; the Dask path; bad sweep files.

The drive is an invented bench motor on a stiff 20 V supply (ideal bridge, open loop at the
armature voltage V = control.voltage, no load torque, no coulomb friction), whose steady
(no-load) speed has the closed form

    w = V K / (R B + K^2)

(steady state of L di/dt = V - R i - K w, J dw/dt = K i - B w). Its time constants are
L/R = 0.1 ms and J R / (R B + K^2) = 0.2 ms, so a 10 ms run ends some 50 time constants after
the start: the speed is steady to far below rounding (e^-50 ~ 2e-22).
"""

from __future__ import annotations

import csv
import functools
import json
import math
import os
import re
import signal
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import dcsim
from dcsim import cli
from dcsim.errors import ScenarioError
from dcsim.results.io import read_trace_csv
from dcsim.results.summary import CAUTION
from dcsim.sweep import load_sweep, load_sweep_text, read_results, run_sweep
from dcsim.sweep.execute import CONFIRM_ABOVE_RUNS
from dcsim.sweep.plan import Plan

REPO = Path(__file__).resolve().parents[1]

V0, R0, K0, B0 = 10.0, 1.0, 0.05, 2.5e-3  # [V], [ohm], [N*m/A], [N*m*s/rad]

BENCH_MOTOR = f"""
[about]
title = "Bench motor, no load (invented)"
[simulation]
duration = "10 ms"
[motor]
resistance = "{R0} ohm"
inductance = "0.1 mH"
torque_constant = "{K0} N*m/A"
inertia = "1e-6 kg*m^2"
viscous_friction = "{B0} N*m*s/rad"
[supply]
voltage = "20 V"
[control]
voltage = "{V0} V"
"""


def no_load_speed(v: float, r: float, k: float, b: float) -> float:
    """Steady no-load speed w = V K / (R B + K^2) [rad/s] of a PM DC motor on voltage V."""
    # Source: Hughes & Drury, Electric Motors and Drives, 4th ed., ch. 3 (steady-state
    # equations of the d.c. motor); here di/dt = dw/dt = 0 in L di/dt = V - R i - K w and
    # J dw/dt = K i - B w.
    return v * k / (r * b + k * k)


@pytest.fixture
def folder():
    """A folder with the bench motor, made once per test process."""
    return _folder()


@functools.cache
def _folder() -> Path:
    path = Path(tempfile.mkdtemp(prefix="dcsim-test-sweep-"))
    (path / "bench.toml").write_text(BENCH_MOTOR, encoding="utf-8")
    return path


def write_sweep(folder: Path, name: str, text: str) -> Path:
    path = folder / name
    path.write_text(text, encoding="utf-8")
    return path


def read_csv(path: Path) -> list[dict[str, str]]:
    with open(path, encoding="utf-8", newline="") as fh:
        return list(csv.DictReader(fh))


MIXED = """
base = "bench.toml"
samples = 6
seed = 11
corners = true
metrics = ["final_speed_rad_s", "peak_current_A", "i2t_A2s", "min_bus_voltage_V"]
[grid]
"control.voltage" = ["9 V", "12 V"]
"motor.inductance" = { from = "0.1 mH", to = "0.2 mH", count = 2 }
[tolerance]
"motor.resistance" = { normal = "5 %" }
"motor.torque_constant" = { uniform = "0.002 N*m/A" }
[criteria]
"peak_current_A" = { max = "8 A" }
"""


@pytest.fixture
def mixed():
    """A grid x (nominal + corners + samples) sweep on two local workers, run once."""
    return _mixed()


@functools.cache
def _mixed():
    folder = _folder()
    sweep = write_sweep(folder, "mixed.toml", MIXED)
    out = folder / "mixed_out"
    outcome = run_sweep(sweep, out, workers=2)
    return sweep, out, outcome


# --------------------------------------------------------------------------------------------
# Every row is the scenario run alone
# --------------------------------------------------------------------------------------------


def test_every_row_equals_simulate_alone(mixed):
    sweep, out, outcome = mixed
    spec = load_sweep(sweep)
    plan = Plan(spec)
    rows = read_csv(out / "results.csv")
    base = dcsim.load_scenario(sweep.parent / "bench.toml")
    assert outcome.complete and outcome.runs == len(plan) == len(rows) == 4 * (1 + 4 + 6)
    assert [int(r["run"]) for r in rows] == list(range(len(plan)))
    for row in rows:
        # The values in the table are exactly the plan's (repr round-trips a double).
        changes = {k: float(row[k]) for k in plan.keys}
        assert tuple(changes.values()) == plan.run(int(row["run"])).values
        # Source: the contract (CONTRACT.md, "dcsim sweep"): a row is the scenario run alone
        # by simulate; simulate is pure, so the comparison is exact.
        alone = dcsim.simulate(base.with_changes(changes)).summary
        for metric in spec.metrics:
            assert float(row[metric]) == alone[metric], (row["run"], metric)
        expected_pass = alone["peak_current_A"] <= 8.0
        assert row["pass"] == ("true" if expected_pass else "false")
        assert row["error"] == ""
    assert {r["kind"] for r in rows} == {"nominal", "corner", "sample"}
    assert outcome.passed == sum(r["pass"] == "true" for r in rows)
    assert 0 < outcome.passed < len(rows)  # the criterion splits the runs


def test_parquet_holds_the_same_table(mixed):
    import pyarrow.parquet as pq

    _, out, _ = mixed
    rows = read_csv(out / "results.csv")
    table = pq.read_table(out / "results.parquet").to_pylist()
    assert len(table) == len(rows)
    for a, b in zip(rows, table, strict=True):
        assert int(a["run"]) == b["run"] and a["kind"] == b["kind"]
        assert float(a["final_speed_rad_s"]) == b["final_speed_rad_s"]
        assert (a["pass"] == "true") == b["pass"]
    back = read_results(out)
    assert back.rows == len(rows) and back["final_speed_rad_s"].dtype == np.float64


def test_report_files_and_worst_case(mixed):
    _, out, outcome = mixed
    report = json.loads((out / "report.json").read_text("utf-8"))
    assert report["runs"] == outcome.runs
    assert "not a substitute" in report["caution"]
    table = read_results(out)
    for metric in ("final_speed_rad_s", "peak_current_A"):
        worst = report["metrics"][metric]
        assert worst["worst"] == "high"
        assert worst["worst_value"] == table[metric].max()
        assert worst["worst_run"] == int(table["run"][np.argmax(table[metric])])
    low = report["metrics"]["min_bus_voltage_V"]
    assert low["worst"] == "low"  # min_* metrics: the lowest is the worst
    for metric in ("final_speed_rad_s", "peak_current_A", "i2t_A2s"):
        assert (out / f"hist_{metric}.png").stat().st_size > 0
        assert (out / f"scatter_{metric}.png").stat().st_size > 0


def test_same_sweep_same_table(mixed, folder):
    sweep, out, _ = mixed
    again = folder / "mixed_again"
    run_sweep(sweep, again, workers=1, report=False)
    # Source: seeded draws (numpy Generator from SeedSequence(seed)), a pure simulate.
    assert (again / "results.csv").read_bytes() == (out / "results.csv").read_bytes()


# --------------------------------------------------------------------------------------------
# Monte Carlo against the propagation of uncertainty
# --------------------------------------------------------------------------------------------


def test_monte_carlo_speed_against_first_order_propagation(folder):
    n = 400
    rel = 0.02
    sweep = write_sweep(
        folder,
        "mc.toml",
        f"""base = "bench.toml"
samples = {n}
seed = 2024
nominal = false
metrics = ["final_speed_rad_s"]
[tolerance]
"motor.resistance" = {{ normal = "{100 * rel} %" }}
""",
    )
    outcome = run_sweep(sweep, folder / "mc_out", workers=2, report=False)
    table = read_results(folder / "mc_out")
    assert outcome.complete and table.rows == n and set(table["kind"]) == {"sample"}
    w = table["final_speed_rad_s"]
    r = table["motor.resistance"]
    # Each run is at its steady state: the closed form at the drawn R, to rounding (the run
    # ends 50 time constants after the start; the integrator is exact for this linear model).
    assert np.allclose(w, [no_load_speed(V0, x, K0, B0) for x in r], rtol=1e-12, atol=0)

    sigma_r = rel * R0
    w0 = no_load_speed(V0, R0, K0, B0)
    # Source: JCGM 100:2008 (GUM), sec. 5.1.2, eq. (10): first-order propagation,
    # u(w) = |dw/dR| u(R), with dw/dR = -V K B / (R B + K^2)^2.
    dw_dr = -V0 * K0 * B0 / (R0 * B0 + K0**2) ** 2
    sigma_w = abs(dw_dr) * sigma_r
    # The first-order mean is w(R0). The second-order term, (1/2) w''(R0) sigma_R^2 with
    # w'' = 2 V K B^2 / (R B + K^2)^3, is what a first-order comparison leaves out; it is a
    # fifth of the standard error of the mean at this sample size, so the check below tests
    # the propagation, not the neglect.
    bias = 0.5 * (2 * V0 * K0 * B0**2 / (R0 * B0 + K0**2) ** 3) * sigma_r**2
    se_mean = sigma_w / math.sqrt(n)
    assert abs(bias) < 0.25 * se_mean
    # Tolerances: three standard errors of the statistic for n = 400 seeded draws (a check
    # that a correct sweep would fail with probability 0.3 % for a random seed).
    # Source: GUM sec. 4.2.3 (experimental standard deviation of the mean, s / sqrt(n)).
    assert abs(w.mean() - w0) <= 3 * se_mean
    # Source: GUM annex E.4.3 (relative standard deviation of an experimental standard
    # deviation of n normal values, about 1 / sqrt(2 (n - 1))).
    se_std = sigma_w / math.sqrt(2 * (n - 1))
    assert abs(w.std(ddof=1) - sigma_w) <= 3 * se_std
    # The draws themselves: a normal sample of R with mean R0 and standard deviation sigma_R.
    assert abs(r.mean() - R0) <= 3 * sigma_r / math.sqrt(n)


def test_uniform_tolerance_draws_stay_in_their_band(folder):
    n = 300
    sweep = write_sweep(
        folder,
        "mc_uniform.toml",
        f"""base = "bench.toml"
samples = {n}
seed = 5
metrics = ["final_speed_rad_s"]
[tolerance]
"control.voltage" = {{ uniform = "1.5 V" }}
""",
    )
    run_sweep(sweep, folder / "mc_uniform_out", workers=1, report=False)
    table = read_results(folder / "mc_uniform_out")
    v = table["control.voltage"][table["kind"] == "sample"]
    w = table["final_speed_rad_s"][table["kind"] == "sample"]
    assert v.size == n and v.min() >= V0 - 1.5 and v.max() <= V0 + 1.5
    # Source: GUM sec. 4.3.7: a rectangular distribution of half width a has standard
    # deviation a / sqrt(3). Sampling error of s for n draws: from memory, the large-sample
    # variance of the sample variance is (mu4 - sigma^4) / n, and mu4 = 1.8 sigma^4 for the
    # rectangular distribution, so sd(s) ~ sigma sqrt(0.8 / n) / 2; three of those.
    sigma = 1.5 / math.sqrt(3)
    assert abs(v.std(ddof=1) - sigma) <= 3 * sigma * math.sqrt(0.8 / n) / 2
    # The speed is linear in V: w = V K / (R B + K^2) run by run, to rounding.
    assert np.allclose(w, no_load_speed(1.0, R0, K0, B0) * v, rtol=1e-12, atol=0)


def test_draws_are_seeded_per_key(folder):
    one = load_sweep(
        write_sweep(
            folder,
            "d1.toml",
            'base = "bench.toml"\nsamples = 50\nseed = 9\n[tolerance]\n'
            '"motor.resistance" = { normal = "5 %" }\n',
        )
    )
    two = load_sweep(
        write_sweep(
            folder,
            "d2.toml",
            'base = "bench.toml"\nsamples = 50\nseed = 9\n[tolerance]\n'
            '"motor.torque_constant" = { uniform = "2 %" }\n'
            '"motor.resistance" = { normal = "5 %" }\n',
        )
    )
    a, b = Plan(one), Plan(two)
    # Adding a toleranced key leaves the draws of the others as they were.
    assert np.array_equal(a.draws[:, 0], b.draws[:, 1])
    assert np.array_equal(Plan(one).draws, a.draws)


# --------------------------------------------------------------------------------------------
# Corners
# --------------------------------------------------------------------------------------------


def test_worst_corner_is_the_one_the_formula_predicts(folder):
    # With R B > K^2 in the whole box (R B >= 0.9 * 5e-3 = 4.5e-3 > K^2 <= 0.055^2 = 3.0e-3),
    # w = V K / (R B + K^2) rises with V, falls with R and rises with K:
    # dw/dK = V (R B - K^2) / (R B + K^2)^2 > 0. So the highest speed is at (V high, R low,
    # K high) and the lowest at (V low, R high, K low).
    b = 5e-3
    sweep = write_sweep(
        folder,
        "corners.toml",
        f"""base = "bench.toml"
corners = true
metrics = ["final_speed_rad_s", "peak_current_A"]
[set]
"motor.viscous_friction" = "{b} N*m*s/rad"
[tolerance]
"control.voltage" = {{ uniform = "10 %" }}
"motor.resistance" = {{ uniform = "10 %" }}
"motor.torque_constant" = {{ uniform = "10 %" }}
[criteria]
"final_speed_rad_s" = {{ min = "50 rad/s" }}
""",
    )
    outcome = run_sweep(sweep, folder / "corners_out", workers=2)
    table = read_results(folder / "corners_out")
    assert table.rows == 1 + 8 and outcome.complete
    corners = table["kind"] == "corner"
    v, r, k = (
        table[key] for key in ("control.voltage", "motor.resistance", "motor.torque_constant")
    )
    w = table["final_speed_rad_s"]
    # Source: the closed form at every corner (steady state, to rounding).
    assert np.allclose(
        w, [no_load_speed(*x, b) for x in zip(v, r, k, strict=True)], rtol=1e-12, atol=0
    )
    hi = np.flatnonzero(corners)[np.argmax(w[corners])]
    lo = np.flatnonzero(corners)[np.argmin(w[corners])]
    # Source: monotonicity of w = V K / (R B + K^2) (signs of its partial derivatives above).
    assert (v[hi], r[hi], k[hi]) == (V0 * 1.1, R0 * 0.9, K0 * 1.1)
    assert (v[lo], r[lo], k[lo]) == (V0 * 0.9, R0 * 1.1, K0 * 0.9)
    # Corner numbering: the last corner is all high, the first all low, so the formula's
    # extreme corners are corner 0b101 (V high, R low, K high) and 0b010.
    assert int(table["run"][hi]) == 1 + 0b101 and int(table["run"][lo]) == 1 + 0b010
    # The report: a min criterion makes the lowest speed the worst.
    worst = outcome.report.metrics["final_speed_rad_s"]
    assert worst.worst == "low" and worst.worst_run == int(table["run"][lo])
    assert worst.worst_values == {
        "control.voltage": V0 * 0.9,
        "motor.resistance": R0 * 1.1,
        "motor.torque_constant": K0 * 0.9,
    }
    # The stall current V / R is highest at (V high, R low), whatever K.
    peak = outcome.report.metrics["peak_current_A"]
    assert (peak.worst_values["control.voltage"], peak.worst_values["motor.resistance"]) == (
        V0 * 1.1,
        R0 * 0.9,
    )


def test_corners_of_a_normal_tolerance_sit_at_corner_sigma(folder):
    spec = load_sweep(
        write_sweep(
            folder,
            "csig.toml",
            'base = "bench.toml"\ncorners = true\ncorner_sigma = 2\n[tolerance]\n'
            '"motor.resistance" = { normal = "5 %" }\n',
        )
    )
    plan = Plan(spec)
    assert [plan.run(i).values for i in range(len(plan))] == [(1.0,), (0.9,), (1.1,)]


# --------------------------------------------------------------------------------------------
# Resume
# --------------------------------------------------------------------------------------------


def test_resume_after_a_run_limit_gives_the_uninterrupted_table(mixed, folder):
    sweep, full, _ = mixed
    out = folder / "mixed_resumed"
    first = run_sweep(sweep, out, workers=2, max_runs=17)
    assert not first.complete and first.executed.size == 17
    assert not (out / "results.parquet").exists()
    # A row cut short by a kill, of a run not done yet: dropped on resume, run again.
    pending = sorted(set(range(first.runs)) - set(first.executed.tolist()))
    with open(out / "results.csv", "a", encoding="utf-8") as fh:
        fh.write(f"{pending[0]},sample,0,9.0,1.0")
    with pytest.raises(ScenarioError, match="--resume"):
        run_sweep(sweep, out, workers=2)  # an existing sweep without --resume
    second = run_sweep(sweep, out, workers=2, resume=True, report=False)
    assert second.complete and second.done_before == 17
    # No run done twice, none left out.
    assert not set(first.executed.tolist()) & set(second.executed.tolist())
    assert sorted(first.executed.tolist() + second.executed.tolist()) == list(range(first.runs))
    assert (out / "results.csv").read_bytes() == (full / "results.csv").read_bytes()


def test_resume_refuses_a_changed_sweep(mixed, folder):
    sweep, full, _ = mixed
    changed = write_sweep(folder, "mixed_changed.toml", MIXED.replace("seed = 11", "seed = 12"))
    with pytest.raises(ScenarioError, match="different plan"):
        run_sweep(changed, full, resume=True)


LONG = """base = "bench.toml"
samples = 600
seed = 3
metrics = ["final_speed_rad_s", "i2t_A2s"]
[set]
"simulation.duration" = "40 ms"
[tolerance]
"motor.resistance" = { normal = "3 %" }
"""
"""600 runs of 40 ms: long enough to be stopped part-way."""


def test_resume_after_killing_the_process(folder):
    sweep = write_sweep(folder, "long.toml", LONG)
    out = folder / "killed"
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join(filter(None, [str(REPO), env.get("PYTHONPATH")]))
    proc = subprocess.Popen(
        [
            sys.executable,
            "-m",
            "dcsim.cli",
            "sweep",
            str(sweep),
            "--out",
            str(out),
            "--workers",
            "2",
        ],
        env=env,
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
        start_new_session=True,
    )
    journal = out / "results.csv"
    try:
        deadline = time.monotonic() + 120
        while time.monotonic() < deadline and proc.poll() is None:
            if journal.exists() and journal.read_text("utf-8").count("\n") > 1:
                break  # the first batch is in
            time.sleep(0.005)
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)  # the sweep and its workers
        proc.wait(timeout=30)
    assert proc.returncode == -signal.SIGKILL, "the sweep ended before it could be killed"
    lines = journal.read_text("utf-8").splitlines()[1:]
    done = {int(line.split(",")[0]) for line in lines if line}
    assert 0 < len(done) < 601

    resumed = run_sweep(sweep, out, workers=2, resume=True, report=False)
    assert resumed.complete and resumed.done_before == len(done)
    assert not done & set(resumed.executed.tolist())  # no run done twice
    assert len(done) + resumed.executed.size == 601
    whole = folder / "unkilled"
    run_sweep(sweep, whole, workers=2, report=False)
    assert journal.read_bytes() == (whole / "results.csv").read_bytes()


# --------------------------------------------------------------------------------------------
# Dask
# --------------------------------------------------------------------------------------------


def test_dask_local_cluster_gives_the_same_table(mixed, folder):
    distributed = pytest.importorskip("distributed")
    sweep, local, _ = mixed
    out = folder / "mixed_dask"
    with distributed.LocalCluster(
        n_workers=2,
        threads_per_worker=1,
        processes=False,
        protocol="tcp",  # a real scheduler on loopback, as --scheduler would reach
        host="127.0.0.1",
        dashboard_address=None,
    ) as cluster:
        outcome = run_sweep(sweep, out, scheduler=cluster.scheduler_address, report=False)
    assert outcome.complete
    assert (out / "results.csv").read_bytes() == (local / "results.csv").read_bytes()


def test_unreachable_scheduler_is_one_clear_error(folder, mixed, monkeypatch):
    from dcsim.sweep import execute
    from dcsim.sweep.execute import ClusterError

    monkeypatch.setattr(execute, "CONNECT_TIMEOUT_S", 1.0)
    sweep, _, _ = mixed
    with pytest.raises(ClusterError, match="cannot reach the Dask scheduler"):
        run_sweep(sweep, folder / "no_cluster", scheduler="tcp://127.0.0.1:9")


# --------------------------------------------------------------------------------------------
# Failures, size, traces
# --------------------------------------------------------------------------------------------


def test_a_failing_run_is_recorded_and_the_sweep_goes_on(folder, capsys):
    # An overhauling load on a diode-fed supply without bus capacitor has nowhere to send its
    # energy: that run stops with a SimulationError; the other run is fine.
    sweep = write_sweep(
        folder,
        "failing.toml",
        """base = "bench.toml"
metrics = ["final_speed_rad_s"]
[set]
"supply.regenerative" = false
[grid]
"load.torque" = ["0 N*m", "-1 N*m"]
""",
    )
    out = folder / "failing_out"
    assert cli.main(["sweep", str(sweep), "--out", str(out), "--workers", "2"]) == 3
    rows = read_csv(out / "results.csv")
    assert [r["error"] == "" for r in rows] == [True, False]
    assert "diode-fed supply" in rows[1]["error"] and "\n" not in rows[1]["error"]
    assert rows[1]["final_speed_rad_s"] == "" and rows[1]["pass"] == "false"
    assert float(rows[0]["final_speed_rad_s"]) == pytest.approx(
        no_load_speed(V0, R0, K0, B0), rel=1e-12
    )  # Source: the closed form of the no-load speed (steady state)
    out_text = capsys.readouterr().out
    assert "1 failed" in out_text
    assert out_text.splitlines()[0] == CAUTION  # every report opens with the caution


def test_a_large_sweep_needs_confirmation(folder, capsys):
    sweep = write_sweep(
        folder,
        "large.toml",
        """base = "bench.toml"
[grid]
"control.voltage" = { from = "6 V", to = "12 V", count = 101 }
"motor.resistance" = { from = "0.8 ohm", to = "1.2 ohm", count = 101 }
""",
    )
    assert 101 * 101 > CONFIRM_ABOVE_RUNS
    with pytest.raises(ScenarioError, match="--yes"):
        run_sweep(sweep, folder / "large_out")
    assert not (folder / "large_out").exists()
    assert cli.main(["sweep", str(sweep), "--out", str(folder / "large_out")]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "--yes" in err and "10201 runs" in err


def test_sweep_help_states_the_confirmation_threshold(capsys):
    assert cli.main(["sweep", "--help"]) == 0
    assert f"more than {CONFIRM_ABOVE_RUNS} runs" in " ".join(capsys.readouterr().out.split())


def test_traces_of_the_worst_runs_are_written(folder):
    sweep = write_sweep(
        folder,
        "traces.toml",
        """base = "bench.toml"
corners = true
traces = ["worst", 0]
metrics = ["peak_current_A"]
[tolerance]
"control.voltage" = { uniform = "10 %" }
"motor.resistance" = { uniform = "10 %" }
""",
    )
    outcome = run_sweep(sweep, folder / "traces_out", workers=1)
    worst = outcome.report.metrics["peak_current_A"].worst_run
    assert worst == 1 + 0b10  # V high, R low: the highest stall current V / R
    table = read_results(folder / "traces_out")
    traces = folder / "traces_out" / "traces"
    assert sorted(p.name for p in traces.iterdir()) == [f"run-{0:06d}", f"run-{worst:06d}"]
    for run in (0, worst):
        summary = json.loads((traces / f"run-{run:06d}" / "summary.json").read_text("utf-8"))
        # The run again (simulate is pure): its summary is the table's row, exactly.
        assert summary["sweep_run"] == run
        assert summary["peak_current_A"] == table["peak_current_A"][run]
        trace = read_trace_csv(traces / f"run-{run:06d}" / "trace.csv")
        assert trace.rows > 1 and np.max(trace["current_A"]) <= summary["peak_current_A"]


# --------------------------------------------------------------------------------------------
# Bad sweep files: one ScenarioError naming the file and the key
# --------------------------------------------------------------------------------------------

BAD = {
    "typo_top_key": ('base = "bench.toml"\nsampels = 10\n', "sampels", "did you mean 'samples'"),
    "unknown_scenario_key": (
        'base = "bench.toml"\n[grid]\n"motor.resistence" = [1.0, 2.0]\n',
        "grid.motor.resistence",
        "did you mean 'motor.resistance'",
    ),
    "wrong_unit": (
        'base = "bench.toml"\nsamples = 5\n[tolerance]\n"motor.resistance" = { normal = "5 V" }\n',
        "tolerance.motor.resistance.normal",
        "found '5 V' (a voltage)",
    ),
    "negative_sigma": (
        'base = "bench.toml"\nsamples = 5\n[tolerance]\n'
        '"motor.resistance" = { normal = "-0.05 ohm" }\n',
        "tolerance.motor.resistance.normal",
        "standard deviation above 0",
    ),
    "missing_base": (
        'samples = 5\n[tolerance]\n"motor.resistance" = { normal = "5 %" }\n',
        "base",
        "expected a base scenario",
    ),
    "base_not_found": ('base = "no_such_pump.toml"\n', "base", "no such file"),
    "grid_value_out_of_range": (
        'base = "bench.toml"\n[grid]\n"motor.resistance" = ["1 ohm", "-1 ohm"]\n',
        "grid.motor.resistance[1]",
        "greater than 0",
    ),
    "tolerance_without_samples": (
        'base = "bench.toml"\n[tolerance]\n"motor.resistance" = { normal = "5 %" }\n',
        "tolerance",
        "samples = N",
    ),
    "unknown_distribution": (
        'base = "bench.toml"\nsamples = 3\n[tolerance]\n"motor.resistance" = { gauss = "5 %" }\n',
        "tolerance.motor.resistance",
        "normal",
    ),
    "criterion_wrong_unit": (
        'base = "bench.toml"\n[criteria]\n"peak_current_A" = { max = "3 V" }\n',
        "criteria.peak_current_A.max",
        "a voltage",
    ),
    "linked_lengths_differ": (
        'base = "bench.toml"\n[grid]\nmotor = { "motor.resistance" = [1.0, 2.0], '
        '"motor.inductance" = ["1 mH"] }\n',
        "grid.motor",
        "same length",
    ),
}


@pytest.mark.parametrize("case", sorted(BAD))
def test_bad_sweep_file_is_one_clear_error(folder, case):
    text, key, detail = BAD[case]
    path = write_sweep(folder, f"bad_{case}.toml", text)
    with pytest.raises(ScenarioError) as info:
        load_sweep(path)
    message = str(info.value)
    assert "\n" not in message
    assert message.startswith(f"{path}: {key}: "), message
    assert detail in message


def test_unknown_metric_is_named_with_a_suggestion(folder):
    path = write_sweep(folder, "bad_metric.toml", 'base = "bench.toml"\nmetrics = ["i2t_As"]\n')
    with pytest.raises(ScenarioError, match=r"metrics\[0\]: unknown summary key 'i2t_As'.*i2t_A2s"):
        run_sweep(path, folder / "bad_metric_out")
    assert not (folder / "bad_metric_out").exists()


def test_cli_bad_sweep_file_is_exit_2_with_one_line(folder, tmp_path):
    path = write_sweep(folder, "bad_cli.toml", 'base = "bench.toml"\nsampels = 3\n')
    done = subprocess.run(
        [sys.executable, "-m", "dcsim", "sweep", str(path), "--out", str(tmp_path / "o")],
        env=dict(os.environ, PYTHONPATH=str(REPO)),
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert done.returncode == 2
    lines = done.stderr.splitlines()
    assert len(lines) == 1 and lines[0].startswith("dcsim: error: ") and "sampels" in lines[0]
    assert "Traceback" not in done.stderr and done.stdout == ""


def test_cli_rejects_workers_with_scheduler(folder, capsys):
    path = folder / "mixed.toml"
    path.write_text(MIXED, encoding="utf-8")
    code = cli.main(["sweep", str(path), "--workers", "2", "--scheduler", "tcp://127.0.0.1:9"])
    assert code == 2 and "found both" in capsys.readouterr().err


def test_inline_base_and_fixed_changes(folder):
    text = (
        "samples = 0\n"
        + "\n".join(
            f"[base.{line[1:-1]}]" if line.startswith("[") else line
            for line in BENCH_MOTOR.strip().splitlines()
        )
        + '\n[set]\n"motor.viscous_friction" = "5e-3 N*m*s/rad"\n'
    )
    spec = load_sweep(write_sweep(folder, "inline.toml", text))
    assert spec.base.motor.viscous_friction == 5e-3 and spec.base.motor.resistance == R0
    assert len(Plan(spec)) == 1


def test_interrupt_keeps_the_finished_runs_and_says_how_to_go_on(folder):
    sweep = write_sweep(folder, "long_interrupted.toml", LONG)
    out = folder / "interrupted"
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join(filter(None, [str(REPO), env.get("PYTHONPATH")]))
    proc = subprocess.Popen(
        [sys.executable, "-m", "dcsim", "sweep", str(sweep), "--out", str(out), "--workers", "2"],
        env=env,
        stdout=subprocess.DEVNULL,
        stderr=subprocess.PIPE,
        text=True,
        start_new_session=True,
    )
    journal = out / "results.csv"
    try:
        deadline = time.monotonic() + 120
        while time.monotonic() < deadline and proc.poll() is None:
            if journal.exists() and journal.read_text("utf-8").count("\n") > 1:
                break
            time.sleep(0.005)
        os.killpg(proc.pid, signal.SIGINT)  # Ctrl-C reaches the whole group, as on a terminal
        _, err = proc.communicate(timeout=60)
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)
            proc.wait(timeout=30)
    assert proc.returncode == 130, err
    lines = err.splitlines()
    assert len(lines) == 1 and "interrupted" in lines[0] and "--resume" in lines[0], err
    rows = journal.read_text("utf-8").splitlines()[1:]
    assert 0 < len(rows) < 601 and all(r.count(",") == rows[0].count(",") for r in rows)


def test_example_sweep_file_and_readme_block_load():
    example = load_sweep(REPO / "scenarios" / "sweeps" / "pump_fuse_tolerance.toml")
    assert len(Plan(example)) == 9 * (1 + 16 + 40) == 513  # as its header says
    readme = (REPO / "README.md").read_text(encoding="utf-8")
    (block,) = [
        b
        for b in re.findall(r"```toml\n(.*?)```", readme, flags=re.S)
        if b.lstrip().startswith("base = ")
    ]
    spec = load_sweep_text(block, source="README.md", base_dir=REPO / "scenarios" / "sweeps")
    plan = Plan(spec)
    assert len(plan) == 3 * 3 * 2 * (1 + 4 + 40)
    assert plan.keys[:4] == (
        "supply.voltage",
        "motor.inductance",
        "fuse.rated_current",
        "fuse.melting_i2t",
    )


# --------------------------------------------------------------------------------------------
# Any sweep file: a SweepSpec or one ScenarioError, nothing else
# --------------------------------------------------------------------------------------------

_SCALARS = st.one_of(
    st.booleans(),
    st.integers(-(10**6), 10**6),
    st.floats(allow_nan=False, allow_infinity=False, width=64),
    st.sampled_from(["5 %", "-5 %", "1 ohm", "0.1 mH", "12 V", "3 A", "x", "", "1e400 V", "%"]),
    st.text(alphabet="abc %0.-eV", max_size=8),
)
_VALUES = st.recursive(
    _SCALARS,
    lambda inner: st.one_of(
        st.lists(inner, max_size=3),
        st.dictionaries(
            st.sampled_from(
                [
                    "normal",
                    "uniform",
                    "from",
                    "to",
                    "count",
                    "scale",
                    "min",
                    "max",
                    "motor.resistance",
                    "q",
                ]
            ),
            inner,
            max_size=3,
        ),
    ),
    max_leaves=6,
)
_KEYS = [
    "motor.resistance",
    "supply.voltage",
    "fuse.rated_current",
    "control.speed.kp",
    "load.locked",
    "bridge.model",
    "motor.resistence",
    "motor",
    "peak_current_A",
]


def _toml(value) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int | float):
        return repr(value)
    if isinstance(value, str):
        return json.dumps(value)
    if isinstance(value, list):
        return "[" + ", ".join(_toml(v) for v in value) + "]"
    return "{ " + ", ".join(f"{json.dumps(k)} = {_toml(v)}" for k, v in value.items()) + " }"


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    top=st.dictionaries(
        st.sampled_from(
            [
                "samples",
                "seed",
                "corners",
                "corner_sigma",
                "nominal",
                "metrics",
                "traces",
                "title",
                "sampels",
            ]
        ),
        _VALUES,
        max_size=4,
    ),
    tables=st.dictionaries(
        st.sampled_from(["grid", "tolerance", "criteria", "set"]),
        st.dictionaries(st.sampled_from(_KEYS), _VALUES, max_size=3),
        max_size=3,
    ),
)
def test_any_sweep_file_gives_a_spec_or_one_scenario_error(top, tables):
    folder = _folder()
    lines = ['base = "bench.toml"'] + [f"{k} = {_toml(v)}" for k, v in top.items()]
    for name, body in tables.items():
        lines.append(f"[{name}]")
        lines += [f"{json.dumps(k)} = {_toml(v)}" for k, v in body.items()]
    text = "\n".join(lines) + "\n"
    try:
        spec = load_sweep_text(text, source=str(folder / "fuzz.toml"))
    except ScenarioError as err:
        assert "\n" not in str(err) and str(err).startswith(str(folder / "fuzz.toml"))
    else:
        assert len(Plan(spec)) >= 1
