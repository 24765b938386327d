"""Scenario -> the controller's flat arrays (parameters, initial state, noise seed, reference).

The kernels see only these arrays; see :mod:`dcsim.controllers.layout` for the indices.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from dcsim.controllers import layout as C
from dcsim.controllers.motion import (
    Profile,
    ramp_profile,
    s_curve_profile,
    step_profile,
    table_profile,
    trapezoid_profile,
)
from dcsim.scenario.schema import Loop, Reference, Scenario

_MODES = {
    "voltage": C.MODE_VOLTAGE,
    "current": C.MODE_CURRENT,
    "speed": C.MODE_SPEED,
    "position": C.MODE_POSITION,
}
_AW = {"none": C.AW_NONE, "clamping": C.AW_CLAMP, "back-calculation": C.AW_BACK}
_DISC = {
    "backward-euler": C.DISC_BACKWARD,
    "forward-euler": C.DISC_FORWARD,
    "tustin": C.DISC_TUSTIN,
}
_SPEED = {"exact": C.SPEED_EXACT, "difference": C.SPEED_DIFFERENCE, "period": C.SPEED_PERIOD}
LOOP_NAMES = ("current", "speed", "position")
LOOPS_OF_MODE = {
    "voltage": (),
    "current": ("current",),
    "speed": ("speed", "current"),
    "position": ("position", "speed", "current"),
}


@dataclass(frozen=True)
class ControllerInputs:
    """What the kernels need to run the controller.

    Attributes
    ----------
    params : float array (N_CP,)
        Controller parameters.
    state0 : float array (N_CS,)
        Initial controller state.
    rng0 : uint64 array (1,)
        Noise generator state.
    segments : float array (n, 5)
        Reference profile (:mod:`dcsim.controllers.motion`).
    sample_s : float
        Base sample time: the fastest loop's [s] (0 in open loop).
    profile : Profile
        The reference as built.
    """

    params: np.ndarray
    state0: np.ndarray
    rng0: np.ndarray
    segments: np.ndarray
    sample_s: float
    profile: Profile

    @property
    def closed_loop(self) -> bool:
        return self.sample_s > 0.0


def reference_profile(sc: Scenario) -> Profile:
    """The reference of the outermost loop as a profile (a constant 0 when none is given)."""
    ref: Reference | None = sc.control.reference
    where = {"source": sc.source, "key": "control.reference"}
    if ref is None:
        return step_profile(0.0, at=0.0, initial=0.0, **where)
    if ref.kind == "step":
        return step_profile(float(ref.value), at=ref.at, initial=ref.initial, **where)
    if ref.kind == "ramp":
        return ramp_profile(
            float(ref.value),
            at=ref.at,
            initial=ref.initial,
            rate=ref.rate,
            ramp_time=ref.ramp_time,
            **where,
        )
    if ref.kind == "trapezoid":
        return trapezoid_profile(
            float(ref.distance),
            speed=float(ref.speed),
            acceleration=float(ref.acceleration),
            deceleration=ref.deceleration,
            at=ref.at,
            initial=ref.initial,
            **where,
        )
    if ref.kind == "s-curve":
        return s_curve_profile(
            float(ref.distance),
            speed=float(ref.speed),
            acceleration=float(ref.acceleration),
            jerk=float(ref.jerk),
            at=ref.at,
            initial=ref.initial,
            **where,
        )
    return table_profile(np.array(ref.times_s), np.array(ref.values), **where)


def controller_inputs(sc: Scenario) -> ControllerInputs:
    """Controller arrays of a scenario (open loop: an inactive controller)."""
    cp = np.zeros(C.N_CP)
    cs = np.zeros(C.N_CS)
    ctl = sc.control
    cp[C.C_MODE] = _MODES[ctl.mode]
    active = LOOPS_OF_MODE[ctl.mode]
    profile = reference_profile(sc) if active else step_profile(0.0)
    if not active:
        return ControllerInputs(
            cp, cs, np.zeros(1, dtype=np.uint64), profile.segments, 0.0, profile
        )
    loops: dict[str, Loop] = {name: getattr(ctl, name) for name in active}
    base = min(loop.sample_time for loop in loops.values())
    cp[C.C_DELAY] = 1.0 if ctl.computation_delay else 0.0
    cp[C.C_H] = base
    cp[C.C_K] = sc.motor.torque_constant
    from dcsim.engine.assemble import shaft_values  # (engine.assemble imports this module)

    cp[C.C_J] = shaft_values(sc)["inertia"]  # referred through a gear / hoist if any
    cp[C.C_BV] = sc.motor.viscous_friction
    cp[C.C_TC] = sc.motor.coulomb_friction
    cp[C.C_BUS_LIMIT] = 1.0
    cp[C.C_VMAX_FRACTION] = ctl.voltage_fraction
    s = sc.sensors
    if s is not None:
        cp[C.C_ENC] = 4.0 * s.encoder_lines
        cp[C.C_SPEED_METHOD] = _SPEED[s.speed_method] if s.encoder_lines > 0 else C.SPEED_EXACT
        cp[C.C_SPEED_TF] = s.speed_filter
        cp[C.C_TIMER_F] = s.timer_frequency
        cp[C.C_I_GAIN] = s.current_gain_error
        cp[C.C_I_OFFSET] = s.current_offset
        cp[C.C_I_BITS] = s.current_adc_bits
        cp[C.C_I_RANGE] = s.current_range
        cp[C.C_I_NOISE] = s.current_noise
        cp[C.C_W_NOISE] = s.speed_noise
        cp[C.C_TH_NOISE] = s.position_noise
        cp[C.C_V_NOISE] = s.bus_voltage_noise
        cp[C.C_V_BITS] = s.bus_voltage_adc_bits
        cp[C.C_V_RANGE] = s.bus_voltage_range
    seed = int(s.seed) if s is not None else 0
    rng0 = np.array([seed], dtype=np.uint64)
    for index, name in enumerate(LOOP_NAMES):
        o = C.LP0 + index * C.NLP
        loop = getattr(ctl, name)
        if name not in active or loop is None:
            cp[o + C.L_RATIO] = 1.0
            cp[o + C.L_LIMIT] = math.inf
            cp[o + C.L_REGEN] = math.inf
            continue
        kp, ki, kd = loop.parallel_gains()
        cp[o + C.L_KP] = kp
        cp[o + C.L_KI] = ki
        cp[o + C.L_KD] = kd
        cp[o + C.L_TF] = loop.derivative_filter
        cp[o + C.L_B] = loop.setpoint_weight
        cp[o + C.L_LIMIT] = math.inf if loop.limit is None else loop.limit
        regen = getattr(loop, "regen_limit", None)  # the speed loop's only
        cp[o + C.L_REGEN] = math.inf if regen is None else regen
        # default tracking time: the integral time kp / ki (Astrom & Hagglund 1995, sec. 3.5,
        # suggest T_t between T_d and T_i); a pure integral loop tracks in one sample
        tt = loop.tracking_time
        if tt is None:
            tt = kp / ki if ki > 0 and kp > 0 else loop.sample_time
        cp[o + C.L_TT] = tt
        cp[o + C.L_AW] = _AW[loop.anti_windup]
        cp[o + C.L_DISC] = _DISC[loop.discretisation]
        cp[o + C.L_RATIO] = round(loop.sample_time / base)
        cp[o + C.L_H] = loop.sample_time
        cp[o + C.L_U0] = math.nan if loop.initial_output is None else loop.initial_output
        cp[o + C.L_ACTIVE] = 1.0
        if name == "current":
            cp[o + C.L_FF] = float(loop.back_emf_feedforward)
        elif name == "speed":
            cp[o + C.L_FF] = float(loop.acceleration_feedforward)
            cp[o + C.L_FF2] = float(loop.friction_feedforward)
        else:
            cp[o + C.L_FF] = float(loop.speed_feedforward)
    return ControllerInputs(cp, cs, rng0, profile.segments, base, profile)


def record_names(mode: str) -> tuple[str, ...]:
    """Trace column names of the controller's recorded values in ``mode``.

    The reference columns are named by what they are: position mode records the profile's
    position, speed and acceleration; speed mode the reference speed and acceleration;
    current mode the reference current.
    """
    ref = {
        "current": ("reference_current_A", "reference_current_rate_A_s", "_unused_d2"),
        "speed": (
            "reference_speed_rad_s",
            "reference_acceleration_rad_s2",
            "reference_jerk_rad_s3",
        ),
        "position": (
            "reference_position_rad",
            "reference_speed_rad_s",
            "reference_acceleration_rad_s2",
        ),
    }[mode]
    return ref + C.RECORD_NAMES[3:]
