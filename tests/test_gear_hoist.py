"""Gearbox with forward and back-driving efficiency, self-locking, and the hoist load.

The references are closed forms: the steady torque balance and armature voltage equation of
a DC machine, the gear's power balance in each direction, conservation of energy, the exact
solution of the linear runaway (scipy's matrix exponential), and a hanging mass on a drum.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
import scipy.linalg

import dcsim
from dcsim.errors import ScenarioError
from tests.reference import assert_energy_closes

ROOT = Path(__file__).resolve().parents[1]

R, L, K, JM, B = 1.5, 2e-3, 0.05, 2e-5, 1e-6  # motor [ohm, H, N*m/A, kg*m^2, N*m*s/rad]
N, EF, EB, JG = 25.0, 0.7, 0.4, 3e-6  # gear: ratio, efficiencies, inertia [kg*m^2]
M, RD, G = 8.0, 0.03, 9.80665  # hoist: mass [kg], drum radius [m], standard gravity [m/s^2]
TL = M * G * RD  # load torque at the drum [N*m]; Source: weight m g on a lever r (statics)


def _text(
    voltage: float,
    *,
    duration: float = 1.0,
    ef: float = EF,
    eb: float = EB,
    coulomb: float = 0.0,
    bridge: str = "ideal",
    extra: str = "",
    hoist: bool = True,
) -> str:
    text = f"""
[simulation]
duration = "{duration} s"
[motor]
resistance = {R}
inductance = {L}
torque_constant = {K}
inertia = {JM}
viscous_friction = {B}
coulomb_friction = {coulomb}
[supply]
voltage = 24
{"capacitance = 1e-3" + chr(10) + "resistance = 0.05" if bridge != "ideal" else ""}
[bridge]
model = "{bridge}"
[control]
voltage = {voltage}
[gear]
ratio = {N}
forward_efficiency = {ef}
back_efficiency = {eb}
inertia = {JG}
"""
    if hoist:
        text += f"[hoist]\nmass = {M}\ndrum_radius = {RD}\n"
    return text + extra


def _run(text: str):
    res = dcsim.simulate(dcsim.load_scenario_text(text))
    assert_energy_closes(res.summary)
    return res


J_TOTAL = JM + JG + M * RD**2 / N**2
# Source: inertia referred through a gear, J_L / N^2 (kinetic energy 1/2 J_L (w/N)^2), plus
# the point mass m r^2 on the drum (textbook rigid-body dynamics).


def test_steady_lifting_matches_torque_balance_through_the_gear():
    v = 12.0
    res = _run(_text(v, coulomb=2e-3))
    # Source: steady state of the DC machine, K i = T_L/(N eta_f) + B w + T_c and
    # V = R i + K w (any machines textbook, e.g. Chapman, DC machine steady state); the gear
    # term is the forward efficiency's power balance, T_m w = T_L (w/N) / eta_f.
    t_m = TL / (N * EF) + 2e-3
    w = (v - R * t_m / K) / (K + R * B / K)
    i = (t_m + B * w) / K
    # the run lasts > 100 electromechanical time constants (J R / K^2 = 2.1 ms): settled
    # to rounding; 1e-9 covers the final transient of exp(-1 s / 2.1 ms) and rounding
    assert res.summary["final_speed_rad_s"] == pytest.approx(w, rel=1e-9)
    assert res.trace["current_A"][-1] == pytest.approx(i, rel=1e-9)
    # Source: the same power balance: the gear loses (1 - eta_f) of the motor's shaft power
    # into the load, P_gear = T_L w / N (1/eta_f - 1) at the steady speed
    p_gear = TL * w / N * (1.0 / EF - 1.0)
    tr = res.trace
    late = tr["time_s"] > 0.5
    e_late = res.summary["energy_gear_loss_J"]
    assert e_late > 0.0
    # the trace's load torque is the load's torque through a loss-free gear, T_L / N
    assert np.all(tr["load_torque_Nm"][late] == pytest.approx(TL / N, rel=1e-12))
    # the gear loss over the second half equals P_gear * 0.5 s (a second run stopped at
    # 0.5 s gives the first half: the difference is the settled half)
    res_half = _run(_text(v, coulomb=2e-3, duration=0.5))
    settled = res.summary["energy_gear_loss_J"] - res_half.summary["energy_gear_loss_J"]
    assert settled == pytest.approx(p_gear * 0.5, rel=1e-7)


def test_lowering_at_the_generator_point_with_back_efficiency():
    v = -2.0  # a small negative armature voltage: the load runs the machine as a generator
    res = _run(_text(v, coulomb=1e-3))
    # Source: steady torque balance at w < 0, where the load drives the motor through the
    # gear with eta_b: K i = eta_b T_L / N + B w - T_c, and V = R i + K w (steady state of
    # the DC machine, as above).
    t_drive = EB * TL / N
    i_ref, w_ref = np.linalg.solve(np.array([[K, -B], [R, K]]), np.array([t_drive - 1e-3, v]))
    assert w_ref < 0.0 and i_ref > 0.0
    w_sim = res.summary["final_speed_rad_s"]
    i_sim = res.trace["current_A"][-1]
    assert w_sim == pytest.approx(w_ref, rel=1e-9)
    assert i_sim == pytest.approx(i_ref, rel=1e-9)
    # Source: conservation of energy at the generator point: the power the lowered mass
    # gives up, T_L |w| / N, times eta_b, is the power returned to the supply (-V i) plus
    # the copper and friction losses.
    p_load = TL * abs(w_sim) / N
    returned = -v * i_sim
    assert returned > 0.0
    losses = R * i_sim**2 + B * w_sim**2 + 1e-3 * abs(w_sim)
    assert EB * p_load == pytest.approx(returned + losses, rel=1e-9)


def test_self_locking_gear_holds_the_hanging_load():
    # eta_b = 0: the load cannot drive the motor; the bridge applies 0 V (armature shorted)
    for bridge in ("ideal", "averaged"):
        res = dcsim.simulate(
            dcsim.load_scenario_text(_text(0.0, eb=0.0, duration=0.2, bridge=bridge))
        )
        # Source: self-locking of a gear with zero back-driving efficiency (no torque at the
        # motor shaft can come from the load side), with the stuck shaft exactly at rest
        assert np.all(res.trace["speed_rad_s"] == 0.0)
        assert np.all(res.trace["position_rad"] == 0.0)
        assert np.all(res.trace["current_A"] == 0.0)
        # nothing moves, so no mechanical energy goes anywhere (exactly zero; the bus
        # capacitor of the averaged bridge exchanges rounding with the source)
        for key in ("energy_gear_loss_J", "energy_to_load_J", "energy_friction_J"):
            assert res.summary[key] == 0.0, key
        assert res.summary["kinetic_energy_change_J"] == 0.0


def test_back_drivable_gear_runs_away_as_the_linear_solution():
    res = _run(_text(0.0, duration=0.05))
    tr = res.trace
    # Source: with the armature shorted and w < 0 the system is linear,
    # L di/dt = -R i - K w, J dw/dt = K i - B w - eta_b T_L / N (the gear's back-driving
    # torque at the motor shaft); its exact solution from rest is the matrix exponential of
    # the augmented matrix (scipy.linalg.expm; Moler & Van Loan, "Nineteen dubious ways",
    # SIAM Review 45 (2003), method 2: the constant forcing as an extra state).
    a = np.array(
        [
            [-R / L, -K / L, 0.0],
            [K / J_TOTAL, -B / J_TOTAL, -EB * TL / N / J_TOTAL],
            [0.0, 0.0, 0.0],
        ]
    )
    ref = np.array([scipy.linalg.expm(a * t) @ np.array([0.0, 0.0, 1.0]) for t in tr["time_s"]])
    # the kernel's step is exact for the linear part: agreement to rounding (1e-9 of the peak)
    assert np.max(np.abs(tr["speed_rad_s"] - ref[:, 1])) <= 1e-9 * np.max(np.abs(ref[:, 1]))
    assert np.max(np.abs(tr["current_A"] - ref[:, 0])) <= 1e-9 * np.max(np.abs(ref[:, 0]))
    # Source: Newton's second law at the start (i = 0): J_total dw/dt = -eta_b T_L / N
    dt = tr["time_s"][1]
    accel0 = -EB * TL / N / J_TOTAL
    assert tr["speed_rad_s"][1] / dt == pytest.approx(accel0, rel=1e-2)  # O(dt/tau) term


def test_hoist_torque_inertia_and_lowering_energy():
    from dcsim.checks.regen import find_stops
    from dcsim.engine.assemble import shaft_values

    sc = dcsim.load_scenario_text(_text(-1.0, duration=0.5, extra=""))
    sv = shaft_values(sc)
    # Source: a point mass on a drum: torque m g r, inertia m r^2 (rigid-body dynamics),
    # referred through the gear (T/N with the efficiencies, J/N^2)
    assert sv["inertia"] == pytest.approx(J_TOTAL, rel=1e-15)
    assert sv["load_torque"] + sv["gear_coulomb"] == pytest.approx(TL / (N * EF), rel=1e-15)
    assert sv["load_torque"] - sv["gear_coulomb"] == pytest.approx(EB * TL / N, rel=1e-15)
    res = dcsim.simulate(sc)
    s = res.summary
    assert_energy_closes(s)
    theta = res.trace["position_rad"][-1]
    assert theta < 0.0  # lowered the whole run
    h = RD * abs(theta) / N  # height lowered [m]
    # Source: potential energy m g h (the load's work on the shaft, negative), and the
    # gear's loss (1 - eta_b) m g h when the load drives the motor the whole way
    assert s["energy_to_load_J"] == pytest.approx(-M * G * h, rel=1e-9)
    assert s["energy_gear_loss_J"] == pytest.approx((1.0 - EB) * M * G * h, rel=1e-9)
    # Source: conservation of energy: returned to the supply = m g h eta_b - copper -
    # friction - the kinetic energy the shaft and the mass took up - the inductance's
    kinetic = 0.5 * J_TOTAL * res.summary["final_speed_rad_s"] ** 2
    stored = 0.5 * L * res.trace["current_A"][-1] ** 2
    returned = EB * M * G * h - s["energy_copper_loss_J"] - s["energy_friction_J"]
    returned -= kinetic + stored
    assert -s["energy_from_supply_J"] == pytest.approx(returned, rel=1e-7)
    assert returned > 0.0
    # The regeneration check finds the lowering and its closed form (trapezoid integrals of
    # the trace rows, so it agrees with the kernel's Simpson integrals to the rows'
    # quadrature error; 1e-3 is far above it at 10 000 rows over a smooth transient)
    stops = find_stops(sc, res)
    assert len(stops) == 1
    t, th = res.trace["time_s"], res.trace["position_rad"]
    h_stop = RD * abs(np.interp(stops[0].end_s, t, th) - np.interp(stops[0].start_s, t, th)) / N
    # Source: the gear's loss while the load drives the motor, (1 - eta_b) m g h
    assert stops[0].gear_J == pytest.approx((1.0 - EB) * M * G * h_stop, rel=1e-3)
    assert stops[0].closed_form_J == pytest.approx(stops[0].to_bus_J, rel=1e-3)


@pytest.mark.parametrize("bridge", ["ideal", "averaged", "switching"])
def test_energy_account_closes_with_the_gear_loss(bridge):
    # lift, then lower by an event on the armature voltage; the gear loses in both
    extra = '[[events]]\nat = "0.03 s"\nset = { "control.voltage" = -6 }\n'
    res = _run(_text(12.0, duration=0.06, bridge=bridge, coulomb=1e-3, extra=extra))
    assert res.summary["energy_gear_loss_J"] > 0.0
    assert min(res.trace["speed_rad_s"]) < 0.0 < max(res.trace["speed_rad_s"])


def test_no_gear_leaves_results_unchanged():
    # a gear of ratio 1 and efficiency 1 is no gear: bit for bit the same run
    text = _text(12.0, duration=0.05, hoist=False, coulomb=1e-3).replace(f"inertia = {JG}\n", "")
    text += "[load]\ntorque = 0.01\ninertia = 1e-5\n"
    text += '[[events]]\nat = "0.02 s"\nset = { "load.torque" = 0.03 }\n'
    plain = text.replace(
        f"[gear]\nratio = {N}\nforward_efficiency = {EF}\nback_efficiency = {EB}\n", ""
    )
    unit = (
        text.replace(f"ratio = {N}", "ratio = 1")
        .replace(f"= {EF}", "= 1")
        .replace(f"= {EB}", "= 1")
    )
    a = _run(plain)
    b = _run(unit)
    # common practice (no source): the identity mapping must not perturb a single bit
    for name in a.trace:
        assert np.array_equal(a.trace[name], b.trace[name]), name
    assert a.summary["energy_gear_loss_J"] == 0.0 == b.summary["energy_gear_loss_J"]


def test_event_flipping_the_load_torque_remaps_the_gear():
    # T_L > 0 lifted, then an event makes it negative (the load now pulls forward): the
    # mapping is recomputed for the new sign, so at w > 0 the load drives the motor with
    # eta_b
    text = _text(6.0, duration=1.0, hoist=False)
    text += '[load]\ntorque = 0.5\n[[events]]\nat = "0.4 s"\nset = { "load.torque" = -0.5 }\n'
    res = _run(text)
    # Source: steady state K i = T_m + B w, V = R i + K w, with T_m = eta_b T_L / N for a
    # load driving the motor (T_L < 0, w > 0: the gear's back-driving power balance)
    t_m = EB * -0.5 / N
    w = (6.0 - R * t_m / K) / (K + R * B / K)
    assert w > 0.0
    assert res.summary["final_speed_rad_s"] == pytest.approx(w, rel=1e-9)
    assert res.trace["load_torque_Nm"][-1] == pytest.approx(-0.5 / N, rel=1e-12)


BASE = _text(1.0, duration=0.1, hoist=False)


@pytest.mark.parametrize(
    ("text", "key", "found"),
    [
        (BASE.replace(f"ratio = {N}", "ratio = 0"), "gear.ratio", "found 0"),
        (BASE.replace(f"ratio = {N}", "ratio = -3"), "gear.ratio", "found -3"),
        (BASE.replace(f"= {EF}", "= 0"), "gear.forward_efficiency", "found 0"),
        (BASE.replace(f"= {EF}", "= 1.2"), "gear.forward_efficiency", "found 1.2"),
        (BASE.replace(f"= {EB}", "= -0.1"), "gear.back_efficiency", "found -0.1"),
        (BASE.replace(f"= {EB}", '= "110 %"'), "gear.back_efficiency", "110 %"),
        (BASE + "[hoist]\nmass = 0\ndrum_radius = 0.1\n", "hoist.mass", "found 0"),
        (BASE + "[hoist]\nmass = 1\ndrum_radius = 0\n", "hoist.drum_radius", "found 0"),
        (BASE + "[hoist]\nmass = 1\ndrum_radius = '1 s'\n", "hoist.drum_radius", "1 s"),
        (
            BASE + "[hoist]\nmass = 1\ndrum_radius = 0.1\n[load]\ntorque = 0.2\n",
            "load.torque",
            "found 0.2",
        ),
        (
            BASE
            + "[hoist]\nmass = 1\ndrum_radius = 0.1\n"
            + '[[events]]\nat = "0.01 s"\nset = { "load.torque" = 0.2 }\n',
            "events[0].set.load.torque",
            "found one",
        ),
        (BASE.replace("[gear]\n", "[gear]\nteeth = 3\n"), "gear.teeth", "teeth"),
    ],
)
def test_bad_input_names_the_key(text, key, found):
    with pytest.raises(ScenarioError) as err:
        dcsim.load_scenario_text(text, source="hoist.toml")
    message = str(err.value)
    assert f"hoist.toml: {key}:" in message
    assert found in message


def test_readme_documents_the_keys():
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    for key in ("ratio", "forward_efficiency", "back_efficiency", "mass", "drum_radius",
                "gravity", "energy_gear_loss_J"):  # fmt: skip
        assert f"`{key}`" in readme, key
    assert "| `gear` (optional) |" in readme and "| `hoist` (optional) |" in readme


def test_harbour_hoist_scenario_runs_and_holds():
    sc = dcsim.load_scenario(ROOT / "scenarios" / "harbour_hoist_gearbox.toml")
    assert sc.gear is not None and sc.hoist is not None
    assert sc.gear.back_efficiency == 0.0  # the worm gear is self-locking
    res = dcsim.simulate(sc)
    assert_energy_closes(res.summary)
    assert res.summary["energy_gear_loss_J"] > 0.0
    assert math.isfinite(res.summary["final_speed_rad_s"])


def test_controller_and_tuning_see_the_inertia_at_the_motor_shaft():
    # The speed loop's acceleration feed-forward and the tuning plant both need the inertia
    # the motor accelerates: rotor + gear + load / N^2 (J_TOTAL above, same source).
    from dcsim.controllers import layout as C
    from dcsim.controllers.assemble import controller_inputs
    from dcsim.tuning.plants import _mechanics

    text = _text(0.0).replace(
        "[control]\nvoltage = 0.0\n",
        '[control]\nmode = "speed"\n[control.current]\nkp = 2.0\nki = 2000.0\n'
        'sample_time = "50 us"\n[control.speed]\nkp = 0.05\nki = 1.0\nsample_time = "200 us"\n'
        'limit = "10 A"\n[control.reference]\nkind = "step"\nvalue = "100 rad/s"\n',
    )
    sc = dcsim.load_scenario_text(text)
    assert controller_inputs(sc).params[C.C_J] == pytest.approx(J_TOTAL, rel=1e-12)
    assert _mechanics(sc)[1] == pytest.approx(J_TOTAL, rel=1e-12)
