"""The example scenarios in ``scenarios/``: each validates, runs, closes its energy account, and
matches a closed form of the drive equations.

Every example is an invented setting (a coolant pump, a parcel conveyor, a slipway winch, a
warehouse shuttle, a boatyard hoist). The expected values are computed here from the scenario's
own parameters with textbook formulas or scipy, never copied from a run.

Drive equations (SI, shaft quantities)::

    L di/dt = v_a - R i - K w
    J dw/dt = K i - B w - T_c sgn(w) - T_load
    C dv/dt = i_s - i_bridge,  i_s = (V_s - v) / R_s   (0 while a diode front end blocks)
"""

from __future__ import annotations

import json
import math
import os
import subprocess
import sys
from functools import cache
from pathlib import Path

import numpy as np
import pytest
from scipy.linalg import expm

import dcsim
from dcsim import cli
from dcsim.results.trace import ENERGY_KEYS, TRACE_COLUMNS

REPO = Path(__file__).resolve().parents[1]
SCENARIO_DIR = REPO / "scenarios"
SCENARIOS = sorted(SCENARIO_DIR.glob("*.toml"))
IDS = [p.stem for p in SCENARIOS]

# The examples the physics checks below are written for; more may be added freely.
EXPECTED_EXAMPLES = {
    "coolant_pump_start",
    "conveyor_load_step",
    "winch_locked_rotor",
    "shuttle_breakaway",
    "winch_lowering_diode_bus",
}

# The project's accuracy target for states and integrals: the linear parts are propagated
# exactly (matrix exponential), so only rounding and the summary quadrature remain.
STATE_TOL = 1e-6

# A steady-state check is made only where the transient left at the sampling instant, at most
# about exp(-N) of the initial deviation after N slowest time constants, is far below STATE_TOL.
SETTLED_TIME_CONSTANTS = 20.0

SUMMARY_KEYS = {
    "peak_current_A",
    "peak_current_time_s",
    "i2t_A2s",
    "final_speed_rad_s",
    "peak_bus_voltage_V",
    "min_bus_voltage_V",
    *ENERGY_KEYS,
}
PLOTS = ("overview.png", "current.png", "speed.png", "bus_voltage.png", "torque.png")


@cache
def scenario(stem: str) -> dcsim.Scenario:
    return dcsim.load_scenario(SCENARIO_DIR / f"{stem}.toml")


@cache
def result(stem: str) -> dcsim.SimulationResult:
    return dcsim.simulate(scenario(stem))


def max_rel_error(actual: np.ndarray, expected: np.ndarray) -> float:
    """Largest deviation relative to the largest magnitude of the expected signal."""
    return float(np.max(np.abs(actual - expected)) / np.max(np.abs(expected)))


def row_before(trace, t: float) -> int:
    """Index of the last recorded row strictly before ``t`` [s]."""
    return int(np.searchsorted(trace["time_s"], t, side="left")) - 1


def stages(sc: dcsim.Scenario, keys: tuple[str, ...]) -> list[tuple[float, float, dict]]:
    """Split a run at its events: ``(start_s, end_s, {key: SI value})`` for each stage."""
    values = {k: sc.get(k) for k in keys}
    out, start = [], 0.0
    for ev in sc.events:
        if ev.at > start:
            out.append((start, ev.at, dict(values)))
            start = ev.at
        for key, value in ev.changes:
            if key in values:
                values[key] = value
    out.append((start, sc.simulation.duration, dict(values)))
    return out


def steady_speed(k: float, v: float, r: float, t_opp: float, b: float) -> float:
    """Steady speed of a PM DC motor at terminal voltage ``v`` behind loop resistance ``r``.

    From V = R I + K w and K I = B w + T (T: friction + load torque opposing rotation):
    w = (K V - R T) / (K^2 + R B) [rad/s].
    """
    # Source: Hughes & Drury, Electric Motors and Drives, 4th ed., ch. 3 (steady-state
    # equations of the d.c. motor: V = E + I R, E = k w, T = k I).
    return (k * v - r * t_opp) / (k * k + r * b)


def slowest_rate_with_capacitor(sc: dcsim.Scenario) -> float:
    """|Re| of the slowest eigenvalue of the linear model with the bridge fully on [1/s].

    States (i, w, v): the armature sees the bus voltage v, the bus capacitor is charged by the
    source through R_s and discharged by the armature current.
    """
    m, s = sc.motor, sc.supply
    j = m.inertia + sc.load.inertia
    a = np.array(
        [
            [-m.resistance / m.inductance, -m.torque_constant / m.inductance, 1.0 / m.inductance],
            [m.torque_constant / j, -m.viscous_friction / j, 0.0],
            [-1.0 / s.capacitance, 0.0, -1.0 / (s.resistance * s.capacitance)],
        ]
    )
    # Source: numpy.linalg.eigvals; a linear system's modes decay as exp(Re(lambda) t).
    rates = -np.linalg.eigvals(a).real
    assert np.all(rates > 0.0), "the linearised drive must be stable for a steady state"
    return float(rates.min())


def forced_response(a: np.ndarray, b: np.ndarray, x0: np.ndarray, t: np.ndarray) -> np.ndarray:
    """x(t) of x' = A x + b from x(0) = x0, for each time in ``t``; shape (len(t), n).

    The augmented-matrix form: exp([[A, b], [0, 0]] t) [x0; 1] = [x(t); 1].
    """
    # Source: C. F. Van Loan, "Computing integrals involving the matrix exponential", IEEE
    # Trans. Autom. Control 23 (1978) 395-404; evaluated with scipy.linalg.expm.
    n = len(x0)
    m = np.zeros((n + 1, n + 1))
    m[:n, :n] = a
    m[:n, n] = b
    z = np.append(x0, 1.0)
    return (expm(m[None, :, :] * t[:, None, None]) @ z)[:, :n]


# --------------------------------------------------------------------------------------------
# Every example
# --------------------------------------------------------------------------------------------


def test_the_examples_are_there():
    found = {p.stem for p in SCENARIOS}
    assert EXPECTED_EXAMPLES <= found, EXPECTED_EXAMPLES - found


@pytest.mark.parametrize("path", SCENARIOS, ids=IDS)
def test_example_validates_and_describes_itself(path, capsys):
    assert cli.main(["validate", str(path)]) == 0
    assert capsys.readouterr().out.startswith("ok: ")
    about = scenario(path.stem).about
    assert about.title.strip() and about.description.strip()


@pytest.mark.parametrize("path", SCENARIOS, ids=IDS)
def test_example_runs_and_its_energy_account_closes(path):
    sc, res = scenario(path.stem), result(path.stem)
    tr, s = res.trace, res.summary

    assert set(TRACE_COLUMNS) <= set(tr)
    for name in TRACE_COLUMNS:
        assert np.all(np.isfinite(tr[name])), name
    assert tr["time_s"][0] == 0.0
    assert math.isclose(tr["time_s"][-1], sc.simulation.duration, rel_tol=1e-12)
    assert SUMMARY_KEYS <= set(s)

    # Source: conservation of energy -- the source's energy is what the losses, the load and
    # the change of kinetic and stored energy take. Recomputed here from the terms.
    terms = {k: float(v) for k, v in s.items() if k.startswith("energy_") and k.endswith("_J")}
    terms.pop("energy_balance_residual_J", None)
    terms["kinetic_energy_change_J"] = float(s["kinetic_energy_change_J"])
    terms["stored_energy_change_J"] = float(s["stored_energy_change_J"])
    spent = math.fsum(v for k, v in terms.items() if k != "energy_from_supply_J")
    residual = terms["energy_from_supply_J"] - spent
    largest = max(abs(v) for v in terms.values())
    assert largest > 0.0
    assert abs(residual) <= 1e-6 * largest, (residual, largest)


def test_cli_run_writes_trace_summary_and_plots(tmp_path):
    stem = "coolant_pump_start"
    out = tmp_path / "out"
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join(filter(None, [str(REPO), env.get("PYTHONPATH")]))
    env["MPLBACKEND"] = "Agg"
    proc = subprocess.run(
        [sys.executable, "-m", "dcsim.cli", "run", str(SCENARIO_DIR / f"{stem}.toml")]
        + ["--out", str(out)],
        cwd=tmp_path,
        env=env,
        capture_output=True,
        text=True,
        timeout=300,
    )
    assert proc.returncode == 0, proc.stderr

    res = result(stem)
    header = (out / "trace.csv").read_text().splitlines()[0].split(",")
    assert set(TRACE_COLUMNS) <= {h.strip() for h in header}
    data = np.genfromtxt(out / "trace.csv", delimiter=",", names=True)
    assert len(data) == res.trace.rows
    np.testing.assert_allclose(data["current_A"], res.trace["current_A"], rtol=1e-9, atol=1e-12)

    summary = json.loads((out / "summary.json").read_text())
    assert SUMMARY_KEYS <= set(summary)
    for key in SUMMARY_KEYS:  # the engine is pure: the CLI run gives the API's numbers
        assert math.isclose(summary[key], res.summary[key], rel_tol=1e-12, abs_tol=1e-15), key

    for name in PLOTS:
        png = out / name
        assert png.is_file(), name
        assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n", name


# --------------------------------------------------------------------------------------------
# One closed form per example
# --------------------------------------------------------------------------------------------


def test_coolant_pump_settles_at_the_steady_state_speed():
    sc, res = scenario("coolant_pump_start"), result("coolant_pump_start")
    tr, s = res.trace, res.summary
    m, sup = sc.motor, sc.supply
    r_loop = m.resistance + sup.resistance
    t_opp = m.coulomb_friction + sc.load.torque

    # The formula holds for the bridge fully on (armature voltage = bus voltage), the loop
    # resistance then being R + R_s ...
    assert math.isclose(tr["armature_voltage_V"][-1], tr["bus_voltage_V"][-1], rel_tol=1e-12)
    # ... and only once the start-up transient has died away.
    rate = slowest_rate_with_capacitor(sc)
    assert rate * sc.simulation.duration > SETTLED_TIME_CONSTANTS

    w_ss = steady_speed(m.torque_constant, sup.voltage, r_loop, t_opp, m.viscous_friction)
    i_ss = (m.viscous_friction * w_ss + t_opp) / m.torque_constant  # K I = B w + T
    assert abs(s["final_speed_rad_s"] / w_ss - 1.0) <= STATE_TOL
    assert abs(s["final_current_A"] / i_ss - 1.0) <= STATE_TOL
    # The bus sits one wiring drop below the source: v = V_s - R_s I (Ohm's law).
    v_ss = sup.voltage - sup.resistance * i_ss
    assert abs(tr["bus_voltage_V"][-1] / v_ss - 1.0) <= STATE_TOL
    # The inrush stays below the stall current of the motor on the full source voltage,
    # V_s / R, the most the armature can draw with the bus capacitor charged to V_s.
    # Source: Alexander & Sadiku, Fundamentals of Electric Circuits, sec. 7.6 (RL step).
    assert s["peak_current_A"] < sup.voltage / m.resistance


def test_conveyor_speed_after_the_load_step_and_the_sag():
    sc, res = scenario("conveyor_load_step"), result("conveyor_load_step")
    tr, m, sup = res.trace, sc.motor, sc.supply
    r_loop = m.resistance + sup.resistance
    keys = ("supply.voltage", "load.torque", "control.voltage")
    plan = stages(sc, keys)
    assert len(plan) == 3  # empty belt, loaded belt, loaded belt on the sagged supply

    measured, expected = [], []
    for start, end, values in plan:
        # Open loop at full voltage: the bridge is fully on in every stage.
        assert values["control.voltage"] >= values["supply.voltage"]
        rate = slowest_rate_with_capacitor(sc)
        assert rate * (end - start) > SETTLED_TIME_CONSTANTS
        k = row_before(tr, end) if end < sc.simulation.duration else tr.rows - 1
        assert tr["time_s"][k] > start
        w_ss = steady_speed(
            m.torque_constant,
            values["supply.voltage"],
            r_loop,
            m.coulomb_friction + values["load.torque"],
            m.viscous_friction,
        )
        assert abs(tr["speed_rad_s"][k] / w_ss - 1.0) <= STATE_TOL, (start, end)
        measured.append(tr["speed_rad_s"][k])
        expected.append(w_ss)
    # The load step and the sag each slow the open-loop drive.
    assert measured[0] > measured[1] > measured[2]
    assert expected[0] > expected[1] > expected[2]


def test_winch_locked_rotor_current_and_i2t():
    sc, res = scenario("winch_locked_rotor"), result("winch_locked_rotor")
    tr, s = res.trace, res.summary
    m, sup = sc.motor, sc.supply
    assert sc.load.locked
    plan = stages(sc, ("control.voltage",))
    assert len(plan) == 2
    (_, t_trip, on), (_, t_end, off) = plan
    assert on["control.voltage"] >= sup.voltage and off["control.voltage"] == 0.0

    # Energised: the full-on bridge puts the armature across the source and its wiring, an
    # R-L circuit with R_1 = R + R_s. After the trip the bridge applies 0 V: the current
    # decays through the armature alone, R_2 = R.
    # Source: Alexander & Sadiku, Fundamentals of Electric Circuits, sec. 7.6 (RL step and
    # natural response): i = I (1 - e^(-t/tau)), i = i_0 e^(-t/tau), tau = L / R.
    r1, r2, ind = m.resistance + sup.resistance, m.resistance, m.inductance
    i_stall = sup.voltage / r1
    tau1, tau2 = ind / r1, ind / r2
    i_trip = i_stall * (1.0 - math.exp(-t_trip / tau1))
    t = tr["time_s"]
    expected = np.where(
        t <= t_trip,
        i_stall * (1.0 - np.exp(-t / tau1)),
        i_trip * np.exp(-(t - t_trip) / tau2),
    )
    assert max_rel_error(tr["current_A"], expected) <= STATE_TOL
    assert abs(s["peak_current_A"] / i_trip - 1.0) <= STATE_TOL
    i_final = i_trip * math.exp(-(t_end - t_trip) / tau2)
    assert abs(s["final_current_A"] - i_final) <= STATE_TOL * i_stall

    # I^2 t: integral of I^2 (1 - e^(-t/tau1))^2 over the energised part plus
    # i_trip^2 e^(-2t/tau2) over the decay.
    # Source: the RL currents above, integrated term by term (elementary integrals).
    i2t_on = i_stall**2 * (
        t_trip
        - 2.0 * tau1 * (1.0 - math.exp(-t_trip / tau1))
        + 0.5 * tau1 * (1.0 - math.exp(-2.0 * t_trip / tau1))
    )
    i2t_off = i_trip**2 * 0.5 * tau2 * (1.0 - math.exp(-2.0 * (t_end - t_trip) / tau2))
    # The engine integrates with Simpson's rule; its error on an exponential is about
    # (h/tau)^4 / 180 relative (Source: Burden & Faires, Numerical Analysis, composite
    # Simpson's rule error term), ~1e-9 here, inside STATE_TOL.
    assert (s["step_s"] / tau1) ** 4 / 180.0 < STATE_TOL
    assert abs(s["i2t_A2s"] / (i2t_on + i2t_off) - 1.0) <= STATE_TOL

    # The rotor never moves; the bus sags by the wiring drop at the stall current.
    assert np.all(tr["speed_rad_s"] == 0.0) and np.all(tr["position_rad"] == 0.0)
    assert abs(s["min_bus_voltage_V"] - (sup.voltage - sup.resistance * i_trip)) <= (
        STATE_TOL * sup.voltage
    )


def test_shuttle_sticks_until_the_predicted_breakaway():
    sc, res = scenario("shuttle_breakaway"), result("shuttle_breakaway")
    tr, m = res.trace, sc.motor
    assert sc.load.torque >= 0.0  # a level (or uphill) track: the armature must do all the work
    i_break = (m.coulomb_friction + sc.load.torque) / m.torque_constant
    tau = m.inductance / m.resistance

    # Stuck shaft: no back-EMF, the bridge applies the (small) command exactly, so the armature
    # is an R-L circuit driven by a staircase. Follow it stage by stage until the current
    # first reaches the breakaway level K i = T_c + T_load.
    # Source: Alexander & Sadiku, Fundamentals of Electric Circuits, sec. 7.6 (RL step from an
    # initial current): i = V/R + (i_0 - V/R) e^(-(t - t_0)/tau); breakaway when the drive
    # torque exceeds the Coulomb (static) level, Armstrong-Helouvry et al., Automatica 30
    # (1994) 1083, doi:10.1016/0005-1098(94)90209-7.
    t_break, i0, pieces = None, 0.0, []
    for start, end, values in stages(sc, ("control.voltage",)):
        v = values["control.voltage"]
        i_inf = v / m.resistance
        pieces.append((start, end, i0, i_inf))
        if i_inf > i_break and i0 < i_break:
            t_break = start + tau * math.log((i_inf - i0) / (i_inf - i_break))
            if t_break < end:
                break
        i0 = i_inf + (i0 - i_inf) * math.exp(-(end - start) / tau)
    assert t_break is not None, "the staircase never reaches the breakaway current"

    t = tr["time_s"]
    stuck = t < t_break
    moving = t > t_break
    assert stuck.sum() > 0 and moving.sum() > 0
    # The bridge can apply every command of the stuck stretch: the bus stays above it.
    assert tr["bus_voltage_V"][stuck].min() >= max(p[3] for p in pieces) * m.resistance
    # Exactly at rest (not merely slow) until the breakaway, then moving forward.
    assert np.all(tr["speed_rad_s"][stuck] == 0.0)
    assert np.all(tr["position_rad"][stuck] == 0.0)
    assert tr["speed_rad_s"][np.argmax(moving)] > 0.0
    assert np.all(tr["speed_rad_s"][moving] > 0.0)

    expected = np.zeros_like(t)
    for start, end, i_start, i_inf in pieces:
        sel = (t >= start) & (t <= end) & stuck
        expected[sel] = i_inf + (i_start - i_inf) * np.exp(-(t[sel] - start) / tau)
    assert max_rel_error(tr["current_A"][stuck], expected[stuck]) <= STATE_TOL


def test_hoist_lowering_follows_the_linear_model_and_charges_the_blocked_bus():
    sc, res = scenario("winch_lowering_diode_bus"), result("winch_lowering_diode_bus")
    tr, s = res.trace, res.summary
    m, sup, ld = sc.motor, sc.supply, sc.load
    assert not sup.regenerative and ld.torque < 0.0 and not sc.events
    v_cmd = sc.control.voltage
    j = m.inertia + ld.inertia
    # Overhauling from the start: the hanging load alone beats the Coulomb friction, so the
    # shaft moves forward at once, friction opposing it: T_opp = T_c + T_load.
    assert -ld.torque > m.coulomb_friction
    t_opp = m.coulomb_friction + ld.torque

    # With the bus at or above the command, the bridge applies exactly v_cmd: the (i, w, theta,
    # q = integral of i) model is linear and does not depend on the bus.
    assert np.all(tr["bus_voltage_V"] >= v_cmd)
    a = np.zeros((4, 4))
    a[0, :2] = [-m.resistance / m.inductance, -m.torque_constant / m.inductance]
    a[1, :2] = [m.torque_constant / j, -m.viscous_friction / j]
    a[2, 1] = 1.0
    a[3, 0] = 1.0
    b = np.array([v_cmd / m.inductance, -t_opp / j, 0.0, 0.0])
    t = tr["time_s"]
    x = forced_response(a, b, np.zeros(4), t)
    assert np.all(x[1:, 1] > 0.0)  # forward throughout: the sgn(w) term stays fixed
    assert max_rel_error(tr["current_A"], x[:, 0]) <= STATE_TOL
    assert max_rel_error(tr["speed_rad_s"], x[:, 1]) <= STATE_TOL
    assert max_rel_error(tr["position_rad"], x[:, 2]) <= STATE_TOL

    # Heading for the generating steady state (current negative: energy flows to the bus).
    w_ss = steady_speed(m.torque_constant, v_cmd, m.resistance, t_opp, m.viscous_friction)
    assert w_ss > v_cmd / m.torque_constant
    assert s["final_current_A"] < 0.0

    # Diode front end: the source never takes current back, and carries none while the bus
    # stands above it.
    assert np.all(tr["supply_current_A"] >= 0.0)
    assert np.all(tr["supply_current_A"][tr["bus_voltage_V"] > sup.voltage] == 0.0)

    # Once the diode blocks for good, the lossless bridge moves v_cmd * i of power out of the
    # capacitor: d(C v^2 / 2)/dt = -v_cmd i, so v(t2)^2 = v(t1)^2 - (2 v_cmd / C)(q2 - q1).
    # Source: Mohan, Undeland & Robbins, Power Electronics, 3rd ed., ch. 7 (lossless bridge:
    # input power = output power) with the capacitor energy C v^2 / 2.
    conducting = np.nonzero(tr["supply_current_A"] > 0.0)[0]
    k1 = int(conducting[-1]) + 1
    k2 = tr.rows - 1
    assert t[k2] - t[k1] > 0.5 * sc.simulation.duration  # a long blocked stretch
    v1 = tr["bus_voltage_V"][k1]
    v2_sq = v1**2 - 2.0 * v_cmd / sup.capacitance * (x[k2, 3] - x[k1, 3])
    assert abs(tr["bus_voltage_V"][k2] / math.sqrt(v2_sq) - 1.0) <= STATE_TOL
    # The bus rises visibly above the source yet stays under 60 V in this example.
    assert 1.5 * sup.voltage < s["peak_bus_voltage_V"] < 60.0
