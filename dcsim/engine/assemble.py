"""Scenario -> flat kernel inputs: parameter vector, initial state, event table, step plan.

This is the one place that knows both the scenario's dotted keys and the kernel's array
layout (:mod:`dcsim.engine.layout`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from dcsim.engine import layout as L
from dcsim.errors import ScenarioError
from dcsim.scenario.schema import Scenario

PARAM_OF_KEY: dict[str, int] = {
    "motor.resistance": L.P_R,
    "motor.torque_constant": L.P_K,
    "motor.viscous_friction": L.P_B,
    "motor.coulomb_friction": L.P_TC,
    "load.torque": L.P_TL,
    "load.inertia": L.P_J,  # the event value is the load's; the kernel gets rotor + load
    "load.locked": L.P_LOCK,
    "supply.voltage": L.P_VS,
    "supply.resistance": L.P_RS,
    "supply.regenerative": L.P_REGEN,
    "control.voltage": L.P_VCMD,
}
"""Kernel parameter index of every key that events may change."""

STEPS_PER_TIME_CONSTANT = 10
"""Default step = fastest time constant / this. The linear part is exact at any step; the
step only has to resolve the quadrature of the summary integrals (Simpson's rule: relative
error about (h/tau)^4 / 180 on an exponential, ~6e-7 here) and of the third-order
correction of the bus term."""


MAX_USER_STEP_FRACTION = 0.25
"""A step set by the user may be at most this fraction of the fastest time constant: the
states are exact at any step, but the summary integrals use Simpson's rule over it (relative
error about (h/tau)^4 / 180, 2e-5 at a quarter)."""

DEFAULT_ROWS = 10_000
MAX_STEPS = 500_000_000
MAX_TRACE_BYTES = 2_000_000_000
"""Largest trace a run may allocate [bytes] (rows x columns x 8)."""


@dataclass(frozen=True)
class KernelInputs:
    """Everything the kernel (``start_run``, ``run_steps``) needs, as plain arrays and numbers."""

    params: np.ndarray
    state0: np.ndarray
    has_capacitor: bool
    step_s: float
    n_steps: int
    steps_per_row: int
    record_interval_s: float
    duration_s: float
    event_time_s: np.ndarray
    event_index: np.ndarray
    event_value: np.ndarray
    rows: int
    time_constants_s: dict


def parameter_vector(sc: Scenario) -> np.ndarray:
    """Kernel parameter vector [SI] of a scenario at t = 0."""
    p = np.zeros(L.N_PARAM)
    m, ld, s, c = sc.motor, sc.load, sc.supply, sc.control
    p[L.P_R] = m.resistance
    p[L.P_L] = m.inductance
    p[L.P_K] = m.torque_constant
    p[L.P_J] = m.inertia + ld.inertia
    p[L.P_B] = m.viscous_friction
    p[L.P_TC] = m.coulomb_friction
    p[L.P_TL] = ld.torque
    p[L.P_LOCK] = 1.0 if ld.locked else 0.0
    p[L.P_VS] = s.voltage
    p[L.P_RS] = s.resistance
    p[L.P_C] = s.capacitance
    p[L.P_REGEN] = 1.0 if s.regenerative else 0.0
    p[L.P_VCMD] = c.voltage
    return p


def time_constants(p: np.ndarray) -> dict[str, float]:
    """Time constants of the drive [s], by name.

    ``electrical`` L/(R+R_s); ``electromechanical`` J (R+R_s) / K^2 (the mechanical time
    constant of a DC motor, e.g. Hughes & Drury, *Electric Motors and Drives*, ch. 4);
    ``electromechanical_resonance`` sqrt(L J)/K; ``viscous`` J/B; with a capacitor the source
    R_s C, the armature R C and the L-C resonance sqrt(L C).
    """
    r_tot = p[L.P_R] + p[L.P_RS]
    tau = {"electrical": p[L.P_L] / r_tot}
    if p[L.P_LOCK] < 0.5:
        tau["electromechanical"] = p[L.P_J] * r_tot / p[L.P_K] ** 2
        tau["electromechanical_resonance"] = math.sqrt(p[L.P_L] * p[L.P_J]) / p[L.P_K]
        if p[L.P_B] > 0.0:
            tau["viscous"] = p[L.P_J] / p[L.P_B]
    if p[L.P_C] > 0.0:
        if p[L.P_RS] > 0.0:
            tau["source_rc"] = p[L.P_RS] * p[L.P_C]
        tau["armature_rc"] = p[L.P_R] * p[L.P_C]
        tau["lc_resonance"] = math.sqrt(p[L.P_L] * p[L.P_C])
    return tau


def _nice_interval(x: float) -> float:
    """Largest 1, 2 or 5 x 10^k not above ``x``."""
    e = math.floor(math.log10(x))
    for m in (5.0, 2.0, 1.0):
        if m * 10.0**e <= x * (1 + 1e-12):
            return m * 10.0**e
    return 10.0**e


def assemble(sc: Scenario) -> KernelInputs:
    """Turn a scenario into kernel inputs and choose the step.

    Raises
    ------
    ScenarioError
        When an event makes the parameters inconsistent, or the step would need too many
        steps.
    """
    p0 = parameter_vector(sc)
    duration = sc.simulation.duration

    times, idx, vals = [], [], []
    p_ev = p0.copy()
    taus = time_constants(p0)
    for n, ev in enumerate(sc.events):
        for key, value in ev.changes:
            if key not in PARAM_OF_KEY:
                raise ScenarioError(
                    f"'{key}' cannot be changed by an event; changeable keys are "
                    + ", ".join(sorted(PARAM_OF_KEY)),
                    source=sc.source,
                    key=f"events[{n}].set",
                )
            v = float(value)
            if key == "load.inertia":
                v += sc.motor.inertia
            times.append(ev.at)
            idx.append(PARAM_OF_KEY[key])
            vals.append(v)
            p_ev[PARAM_OF_KEY[key]] = v
            if p_ev[L.P_C] > 0.0 and p_ev[L.P_RS] <= 0.0:
                raise ScenarioError(
                    "expected a resistance > 0 while supply.capacitance > 0 (the source "
                    f"charges the capacitor through it), found {v!r} ohm",
                    source=sc.source,
                    key=f"events[{n}].set.{key}",
                )
        for name, tau in time_constants(p_ev).items():
            taus[name] = min(taus.get(name, math.inf), tau)

    fastest = min(taus.values())
    if sc.simulation.record_interval is not None:
        record = sc.simulation.record_interval
    else:
        record = _nice_interval(duration / DEFAULT_ROWS)
    if sc.simulation.step is not None:
        h = sc.simulation.step
        fastest_name = min(taus, key=taus.get)
        if h > fastest * MAX_USER_STEP_FRACTION:
            raise ScenarioError(
                f"expected a step of at most {fastest * MAX_USER_STEP_FRACTION:.3g} s (a "
                f"quarter of the fastest time constant, {fastest_name} = {fastest:.3g} s), "
                f"found {h:.3g} s: the states stay exact at any step, but I2t, the peaks and "
                "the energy account are integrated over it; remove simulation.step to let "
                "dcsim choose",
                source=sc.source,
                key="simulation.step",
            )
        if sc.simulation.record_interval is not None:
            ratio = record / h
            if ratio < 1.0 - 1e-9 or abs(ratio - round(ratio)) > 1e-9 * ratio:
                raise ScenarioError(
                    f"expected a whole multiple of simulation.step ({h:.6g} s), found "
                    f"{record:.6g} s",
                    source=sc.source,
                    key="simulation.record_interval",
                )
        n_sub = max(1, round(record / h))
        record = n_sub * h
    else:
        h_target = fastest / STEPS_PER_TIME_CONSTANT
        n_sub = max(1, math.ceil(record / h_target - 1e-9))
        h = record / n_sub
    n_steps = max(1, math.ceil(duration / h - 1e-9))
    if n_steps > MAX_STEPS:
        raise ScenarioError(
            f"expected at most {MAX_STEPS:.0e} steps, found {n_steps:.3g} "
            f"(step {h:.3g} s over {duration:.3g} s, set by the fastest time constant, "
            f"{fastest:.3g} s): shorten simulation.duration",
            source=sc.source,
            key="simulation.step",
        )
    rows = n_steps // n_sub + (1 if n_steps % n_sub else 0) + 2
    if rows * L.N_REC * 8 > MAX_TRACE_BYTES:
        raise ScenarioError(
            f"expected at most {MAX_TRACE_BYTES // (L.N_REC * 8):.3g} trace rows (a "
            f"{MAX_TRACE_BYTES / 1e9:.0f} GB trace), found {rows:.3g} ({duration:.3g} s "
            f"recorded every {record:.3g} s): set a longer simulation.record_interval or a "
            "shorter duration",
            source=sc.source,
            key="simulation.record_interval",
        )

    x0 = np.zeros(L.N_STATE)
    has_cap = sc.supply.capacitance > 0.0
    if has_cap:
        x0[L.X_BUS] = sc.supply.voltage  # the bus capacitor starts charged to the source

    return KernelInputs(
        params=p0,
        state0=x0,
        has_capacitor=has_cap,
        step_s=h,
        n_steps=n_steps,
        steps_per_row=n_sub,
        record_interval_s=record,
        duration_s=duration,
        event_time_s=np.asarray(times, dtype=np.float64),
        event_index=np.asarray(idx, dtype=np.int64),
        event_value=np.asarray(vals, dtype=np.float64),
        rows=rows,
        time_constants_s=taus,
    )
