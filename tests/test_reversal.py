"""Reversal and plugging: scenarios/shuttle_reversal.toml (an invented warehouse shuttle).

The command is reversed from +V to -V while the shaft turns forward: the back-EMF then adds to
the supply, and the current heads for ``(V + E)/R`` with ``E = K w`` just before the reversal,
about twice the stall current (common practice: no source).

Reference for the transient: while the shaft still turns forward the drive with its bus is
linear, ``y = (i, w, v_C, 1)``, duty ``d = -1`` of the averaged bridge (ideal switches)::

    L di/dt   = d v_C - R i - K w
    J dw/dt   = K i - B w - T_c              (w > 0: sliding forward)
    C dv_C/dt = (V_s - v_C)/R_s - d i        (the bridge draws d i from the bus)

solved from the state just before the reversal by the matrix exponential (scipy.linalg.expm).
"""

from __future__ import annotations

import functools
from pathlib import Path

import numpy as np
import pytest
from reference import assert_energy_closes
from scipy.linalg import expm
from scipy.optimize import minimize_scalar

from dcsim import load_scenario, load_scenario_text, simulate
from dcsim.checks.session import run_checks

SCENARIO = Path(__file__).resolve().parents[1] / "scenarios" / "shuttle_reversal.toml"
T_REV = 0.4  # the reversal event [s]


def _scenario(text_changes: tuple[tuple[str, str], ...] = ()):
    text = SCENARIO.read_text(encoding="utf-8")
    for old, new in text_changes:
        assert old in text
        text = text.replace(old, new)
    return load_scenario_text(text, source=str(SCENARIO))


def _run(sc):
    res = simulate(sc)
    # the bus capacitor starts charged to the supply: C V^2 / 2 is a store, not a term
    assert_energy_closes(res.summary, stored_J=0.5 * sc.supply.capacitance * sc.supply.voltage**2)
    return res


def _plant_values(sc):
    m, s = sc.motor, sc.supply
    j = m.inertia + sc.load.inertia
    return m.resistance, m.inductance, m.torque_constant, j, m.viscous_friction, s


def _reference_matrix(sc, duty: float) -> np.ndarray:
    """Augmented matrix of the linear drive (module docstring), sliding forward."""
    r, ll, k, j, b, s = _plant_values(sc)
    tc, rs, c = sc.motor.coulomb_friction, s.resistance, s.capacitance
    a = np.zeros((4, 4))
    a[0, 0], a[0, 1], a[0, 2] = -r / ll, -k / ll, duty / ll
    a[1, 0], a[1, 1], a[1, 3] = k / j, -b / j, -tc / j
    a[2, 0], a[2, 2], a[2, 3] = -duty / c, -1.0 / (rs * c), s.voltage / (rs * c)
    return a


@functools.cache
def plugging_run():
    """The reversal scenario and its run (shared by the tests below; a cached helper)."""
    sc = load_scenario(SCENARIO)
    assert sc.bridge.model == "averaged" and sc.fuse is not None
    assert sc.bridge.on_resistance == 0.0 and sc.bridge.diode_drop == 0.0 and sc.supply.esr == 0.0
    return sc, _run(sc)


def test_peak_current_after_the_reversal_against_the_closed_form():
    sc, res = plugging_run()
    r, ll, k, j, b, s = _plant_values(sc)
    tr, summ = res.trace, res.summary
    t = tr["time_s"]
    k0 = int(np.flatnonzero(np.isclose(t, T_REV, rtol=0, atol=1e-12))[0])
    w0 = tr["speed_rad_s"][k0]
    y0 = np.array([tr["current_A"][k0], w0, tr["bus_voltage_V"][k0], 1.0])
    assert w0 > 0.0 and y0[0] > 0.0  # running forward, motoring
    a = _reference_matrix(sc, -1.0)

    def state(tt: float) -> np.ndarray:
        return expm(a * (tt - T_REV)) @ y0

    # The trace after the reversal follows the closed form (10 ms: the shaft still turns
    # forward). The engine's pieces are exact exponentials: held to 1e-9 of each scale
    # (rounding of the 8x8 propagators over ~2000 steps, with a wide margin).
    after = np.flatnonzero((t >= T_REV) & (t <= T_REV + 0.01))
    ref = np.array([state(x) for x in t[after]])
    assert np.all(ref[:, 1] > 0.0)
    i_peak_scale = np.max(np.abs(ref[:, 0]))
    assert np.max(np.abs(tr["current_A"][after] - ref[:, 0])) <= 1e-9 * i_peak_scale
    assert np.max(np.abs(tr["speed_rad_s"][after] - ref[:, 1])) <= 1e-9 * w0
    assert np.max(np.abs(tr["bus_voltage_V"][after] - ref[:, 2])) <= 1e-9 * s.voltage

    # The peak of the closed form, and where it is.
    tau = ll / r
    opt = minimize_scalar(
        lambda tt: state(tt)[0], bounds=(T_REV, T_REV + 10 * tau), method="bounded",
        options={"xatol": 1e-12},
    )  # fmt: skip
    t_pk, i_pk = float(opt.x), float(-opt.fun)
    y_pk = state(t_pk)
    # At the peak di/dt = 0: R |i| = v_C + K w there (the armature equation), below the
    # resistive limit (V + E)/R, E = K w just before the reversal: the bus has sagged and the
    # shaft slowed. Source: the armature circuit's KVL, L di/dt = v_a - R i - K w.
    assert abs(r * i_pk - (y_pk[2] + k * y_pk[1])) <= 1e-6 * r * i_pk
    e0 = k * w0
    limit = (s.voltage + e0) / r
    assert i_pk < limit
    assert limit / (s.voltage / r) > 1.9  # about twice the stall current (common practice)

    # The summary's peak against it. dcsim tracks |i| at every step's mid and end points,
    # h/2 apart: the nearest lies within h/4 of the peak, where the parabola i_pk - i''/2 dt^2
    # is at most |i''| h^2 / 32 low (derived here); i'' = (A^2 y)_i of the linear system.
    h = summ["step_s"]
    i2 = abs(float((a @ a @ y_pk)[0]))
    assert i_pk - i2 * h**2 / 32.0 - 1e-9 * i_pk <= summ["peak_current_A"] <= i_pk * (1 + 1e-9)
    # ... just after the reversal: within h/4 of the closed-form peak time.
    assert T_REV < summ["peak_current_time_s"] < T_REV + 10 * tau
    assert abs(summ["peak_current_time_s"] - t_pk) <= h / 4.0 + 1e-12


def test_fuse_check_sees_the_reversal():
    sc, res = plugging_run()
    tr = res.trace
    t, heat = tr["time_s"], tr["fuse_heat_fraction"]
    report = run_checks(sc)
    survives = next(v for v in report.verdicts if v.name == "fuse.survives_start")
    peak = survives.values["peak_heat_fraction"]
    # The check's peak heat is the run's, reached after the reversal, not on the start.
    assert peak == res.summary["peak_fuse_heat_fraction"]
    assert t[int(np.argmax(heat))] > T_REV
    assert peak > 2.0 * heat[t < T_REV].max()
    # Without the reversal (the same event keeps +V) the check's figure is the start's.
    steady = _scenario(((' = "-24 V" }', ' = "24 V" }'),))
    quiet = run_checks(steady)
    v_quiet = next(v for v in quiet.verdicts if v.name == "fuse.survives_start")
    assert v_quiet.values["peak_heat_fraction"] < 0.5 * peak
    # The peak-current check sees the plugging current too.
    duty = next(v for v in report.verdicts if v.name == "duty.peak_current")
    assert duty.figure == pytest.approx(res.summary["peak_current_A"], rel=1e-12)


def test_peak_current_limit_holds_the_plugging_current():
    i_lim, t_blank = 60.0, 2e-6
    sc = _scenario(
        (
            ('model = "averaged"', 'model = "switching"'),
            (
                'frequency = "20 kHz"',
                f'frequency = "20 kHz"\npeak_current_limit = "{i_lim} A"\n'
                f'blanking_time = "{t_blank} s"',
            ),
        )
    )
    res = _run(sc)
    r, ll, k, j, b, s = _plant_values(sc)
    tr, summ = res.trace, res.summary
    t, i, w = tr["time_s"], tr["current_A"], tr["speed_rad_s"]
    w0 = w[int(np.searchsorted(t, T_REV)) - 1]
    assert (s.voltage + k * w0) / r > 1.5 * i_lim  # without the limit it would go far above
    # Upper bound (derived): the comparator ends the pulse exactly at the limit, except during
    # the blanking time after each pulse starts, when |i| can rise at most at
    # (v_bus + E)/L (bus and back-EMF in series, the resistance only helping): the overshoot
    # stays below (V_bus,max + K w0) t_blank / L.
    overshoot = (summ["peak_bus_voltage_V"] + k * w0) * t_blank / ll
    after = t > T_REV
    assert np.max(np.abs(i[after])) <= i_lim + overshoot
    assert summ["peak_current_A"] <= i_lim + overshoot
    assert summ["current_limit_events"] > 0
    # Lower bound while the limit acts: each period the pulse reaches the limit, then the
    # armature freewheels for at most one PWM period, where L d|i|/dt = K w - R |i|: the
    # current falls at most by R i_lim T / L (w > 0; derived here).
    limited = np.flatnonzero(after & (tr["current_limit_active"] > 0.5) & (w > 0.0))
    assert limited.size > 0
    window = slice(limited[0], limited[-1] + 1)
    period = 1.0 / sc.bridge.frequency
    ripple = r * i_lim * period / ll
    assert np.min(np.abs(i[window])) >= i_lim - ripple
    assert np.all(i[window] < 0.0)  # plugging: the current is reversed while w > 0
