"""Typed, immutable scenario values (SI floats) and the table of accepted keys.

A :class:`Scenario` is what the loader makes of a TOML file: every quantity is a plain float in
SI units (ohm, henry, newton-metre per ampere, kilogram square metre, second, volt, farad).
Scenarios are frozen; :meth:`Scenario.with_changes` returns a new one.

The table :data:`KEYS` is the single place that says which keys exist, their physical
dimension (as a pint unit string), their default and the constraint on their value. Loading,
validation, event checking and ``with_changes`` all read it.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

from dcsim.scenario.datasheet import CatalogueCheck

# --------------------------------------------------------------------------------------------
# Key table
# --------------------------------------------------------------------------------------------

REQUIRED = object()  # marker: the key has no default


@dataclass(frozen=True)
class KeySpec:
    """What one scenario key accepts.

    Parameters
    ----------
    unit : str or None
        pint unit the value is converted to (its SI unit); ``None`` for non-quantities.
    kind : str
        ``"quantity"`` (number or unit string), ``"bool"``, ``"choice"``, ``"text"`` or
        ``"pairs"`` (a list of two-element lists, the first in ``unit``, the second in
        ``unit2``, e.g. times and voltages).
    default : object
        Default value in SI, or :data:`REQUIRED`.
    constraint : str
        ``"positive"`` (> 0), ``"nonnegative"`` (>= 0) or ``"any"`` (finite).
    noun : str
        What the quantity is, for messages ("an inductance").
    example : str
        A correctly written value, for messages ("2 mH").
    choices : tuple of str
        Accepted strings for ``kind == "choice"``.
    changeable : bool
        Whether ``[[events]]`` may change the key during a run. Keys whose change would make
        stored energy jump (inductance, inertia, capacitance) are not changeable.
    unit2 : str or None
        Unit of the second member of each pair (``kind == "pairs"``).
    """

    unit: str | None
    kind: str = "quantity"
    default: Any = REQUIRED
    constraint: str = "any"
    noun: str = "a number"
    example: str = "1"
    choices: tuple[str, ...] = ()
    changeable: bool = False
    unit2: str | None = None


def _choice(default, noun, choices):
    return KeySpec(
        None, kind="choice", default=default, noun=noun, example=default, choices=choices
    )


def _text(noun, example):
    return KeySpec(None, kind="text", default=None, noun=noun, example=example)


def _pairs(unit, unit2, noun, example):
    return KeySpec(unit, kind="pairs", default=None, noun=noun, example=example, unit2=unit2)


def _q(unit, noun, example, default=REQUIRED, constraint="nonnegative", changeable=False):
    return KeySpec(
        unit=unit,
        default=default,
        constraint=constraint,
        noun=noun,
        example=example,
        changeable=changeable,
    )


INSULATION_CLASS_LIMITS_K = {
    "A": 378.15,
    "E": 393.15,
    "B": 403.15,
    "F": 428.15,
    "H": 453.15,
    "N": 473.15,
    "R": 493.15,
}
"""Thermal class limits of IEC 60085 (105, 120, 130, 155, 180, 200, 220 degC) [K]: the
highest temperature the insulation system is rated for (IEC 60085, thermal classes)."""

MAGNET_COEFFICIENTS_PER_K = {
    "ferrite": -0.0020,
    "ndfeb": -0.0012,
    "smco": -0.00035,
    "alnico": -0.0002,
}
"""Reversible temperature coefficients of the remanence of common magnet materials [1/K]
(hard ferrite about -0.2 %/K, sintered NdFeB -0.12 %/K, Sm2Co17 -0.035 %/K, AlNiCo
-0.02 %/K): typical values from memory (magnet makers' data sheets give each grade's own);
the air-gap flux, and so the torque constant, follows the remanence."""

AUDIBLE_LIMIT_HZ = 20e3
"""PWM frequencies below this lie in the audible band [Hz] (the usual line for a drive that
must not whine; common practice (no source))."""

STANDARD_GRAVITY_M_S2 = 9.80665
"""Standard acceleration of gravity [m/s^2] (3rd CGPM, 1901; the exact defined value)."""

CONTROLLED = "<controlled>"
"""Placeholder unit of reference values: A, rad/s or rad, as the control mode says."""

CONTROLLED_UNITS = {"current": "A", "speed": "rad/s", "position": "rad"}
"""SI unit of the controlled quantity of each closed-loop mode."""


def _loop_keys(
    in_unit: str,
    out_unit: str,
    limit_unit: str,
    kp_example: str,
    ki_example: str,
    h_example: str,
    limit_example: str,
    *,
    feedforward: tuple[str, ...],
    limit_required: bool = False,
) -> dict[str, KeySpec]:
    """Keys of one control loop (measurement in ``in_unit``, output in ``out_unit``).

    ``feedforward`` names the loop's feed-forward switches (bool keys, default off).
    """
    kp_unit = f"({out_unit})/({in_unit})"
    kd_example = f"0 {out_unit}*s/({in_unit})"
    switches = {
        name: KeySpec(None, kind="bool", default=False, noun="true or false", example="true")
        for name in feedforward
    }
    return switches | {
        "kp": _q(kp_unit, "a proportional gain", kp_example, default=None),
        "ki": _q(f"{kp_unit}/s", "an integral gain", ki_example, default=0.0),
        "kd": _q(f"{kp_unit}*s", "a derivative gain", kd_example, default=0.0),
        "form": _choice("parallel", "a controller form", ("parallel", "ideal", "series")),
        "gain": _q(kp_unit, "a controller gain", kp_example, default=None),
        "integral_time": _q("s", "a time", "10 ms", default=None, constraint="positive"),
        "derivative_time": _q("s", "a time", "1 ms", default=None),
        "sample_time": _q("s", "a time", h_example, constraint="positive"),
        "limit": _q(
            limit_unit,
            "an output limit",
            limit_example,
            default=REQUIRED if limit_required else None,
            constraint="positive",
        ),
        "derivative_filter": _q("s", "a time constant", "100 us", default=0.0),
        "setpoint_weight": _q("", "a setpoint weight", "1", default=1.0),
        "anti_windup": _choice(
            "clamping", "an anti-windup method", ("clamping", "back-calculation", "none")
        ),
        "tracking_time": _q("s", "a time", "5 ms", default=None, constraint="positive"),
        "discretisation": _choice(
            "backward-euler",
            "a discretisation method",
            ("backward-euler", "forward-euler", "tustin"),
        ),
        "initial_output": _q(
            out_unit, "an initial output", f"0 {out_unit}", default=None, constraint="any"
        ),
    }


KEYS: dict[str, dict[str, KeySpec]] = {
    "simulation": {
        "duration": _q("s", "a time", "1 s", constraint="positive"),
        "record_interval": _q("s", "a time", "50 us", default=None, constraint="positive"),
        "step": _q("s", "a time", "1 us", default=None, constraint="positive"),
        "cycle_time": _q("s", "a time", "60 s", default=None, constraint="positive"),
    },
    "motor": {
        "kind": KeySpec(
            None,
            kind="choice",
            default="permanent_magnet",
            noun="a motor kind",
            example="permanent_magnet",
            choices=("permanent_magnet", "separately_excited", "shunt", "series", "compound"),
        ),
        # resistance, torque_constant and inertia: required unless the catalogue keys below
        # give them (dcsim.scenario.datasheet derives them; default None = "not written").
        "resistance": _q(
            "ohm", "a resistance", "1.2 ohm", default=None, constraint="positive", changeable=True
        ),
        "inductance": _q("H", "an inductance", "2 mH", constraint="positive"),
        "torque_constant": _q(
            "N*m/A",
            "a torque constant",
            "0.05 N*m/A",
            default=None,
            constraint="positive",
            changeable=True,
        ),
        "inertia": _q(
            "kg*m^2", "a moment of inertia", "1e-4 kg*m^2", default=None, constraint="positive"
        ),
        "viscous_friction": _q(
            "N*m*s/rad",
            "a viscous friction coefficient",
            "1e-5 N*m*s/rad",
            default=0.0,
            changeable=True,
        ),
        "coulomb_friction": _q("N*m", "a torque", "0.01 N*m", default=0.0, changeable=True),
        # breakaway torque; None: equal to coulomb_friction (no static excess)
        "static_friction": _q("N*m", "a torque", "0.015 N*m", default=None, changeable=True),
        # brushes and iron (dcsim.plant.machine): contact drop per brush, brush friction,
        # hysteresis drag (loss ~ speed) and eddy-current drag (loss ~ speed^2)
        "brush_drop": _q("V", "a voltage per brush", "1 V", default=0.0),
        "brush_friction": _q("N*m", "a torque", "2 mN*m", default=0.0),
        "hysteresis_loss_torque": _q("N*m", "a torque", "1 mN*m", default=0.0),
        "eddy_loss_coefficient": _q(
            "N*m*s/rad", "a drag coefficient", "2e-6 N*m*s/rad", default=0.0
        ),
        # wound-field machines (dcsim.engine.machine_kernel): the field winding, its flux
        # (mutual inductance, or a magnetisation table of field current against back-EMF at
        # magnetisation_speed), the separate field's supply and base speed, the compound
        # machine's series winding; the over-speed limit that stops a run
        "field_resistance": _q(
            "ohm", "a resistance", "120 ohm", default=None, constraint="positive", changeable=True
        ),
        "field_inductance": _q("H", "an inductance", "8 H", default=None, constraint="positive"),
        "mutual_inductance": _q("H", "an inductance", "0.9 H", default=None, constraint="positive"),
        "magnetisation": _pairs(
            "A", "V", "a table of field current and back-EMF", "[['0 A', '0 V'], ['1 A', '180 V']]"
        ),
        "magnetisation_speed": _q(
            "rad/s", "a speed", "1500 rpm", default=None, constraint="positive"
        ),
        "field_voltage": _q(
            "V", "a voltage", "110 V", default=None, constraint="positive", changeable=True
        ),
        "base_speed": _q("rad/s", "a speed", "1500 rpm", default=None, constraint="positive"),
        "compound": _choice("cumulative", "a compound connection", ("cumulative", "differential")),
        "series_field_resistance": _q(
            "ohm", "a resistance", "0.05 ohm", default=None, constraint="positive", changeable=True
        ),
        "series_field_inductance": _q(
            "H", "an inductance", "2 mH", default=None, constraint="positive"
        ),
        "series_turns_ratio": _q(
            "",
            "a ratio (series ampere-turns per armature amp, in field amps)",
            "0.02",
            default=None,
            constraint="positive",
        ),
        "max_speed": _q("rad/s", "a speed", "4000 rpm", default=None, constraint="positive"),
        # commutator ripple (off by default): segments = coils of the armature winding
        "commutator_segments": _q(
            "", "a whole number of segments (>= 2)", "12", default=None, constraint="positive"
        ),
        "pole_pairs": _q(
            "", "a whole number of pole pairs", "1", default=1.0, constraint="positive"
        ),
        # catalogue figures (datasheet import): optional, at the nominal voltage
        "nominal_voltage": _q("V", "a voltage", "24 V", default=None, constraint="positive"),
        "no_load_speed": _q("rad/s", "a speed", "5200 rpm", default=None, constraint="positive"),
        "no_load_current": _q("A", "a current", "45 mA", default=None, constraint="positive"),
        "stall_torque": _q("N*m", "a torque", "120 mN*m", default=None, constraint="positive"),
        "stall_current": _q("A", "a current", "4.2 A", default=None, constraint="positive"),
        "speed_constant": _q(
            "rad/(V*s)", "a speed constant", "500 rpm/V", default=None, constraint="positive"
        ),
        "mechanical_time_constant": _q(
            "s", "a time constant", "12 ms", default=None, constraint="positive"
        ),
    },
    "load": {
        "inertia": _q("kg*m^2", "a moment of inertia", "0 kg*m^2", default=0.0, changeable=True),
        "torque": _q("N*m", "a torque", "0.02 N*m", default=0.0, constraint="any", changeable=True),
        "locked": KeySpec(
            None, kind="bool", default=False, noun="true or false", example="false", changeable=True
        ),
    },
    # gearbox between the motor shaft and the load (the [load] keys then mean the load side)
    "gear": {
        "ratio": _q("", "a gear ratio (motor turns per load turn)", "40", constraint="positive"),
        "forward_efficiency": _q(
            "", "an efficiency (0 < eta <= 1)", "0.7", default=1.0, constraint="positive"
        ),
        "back_efficiency": _q("", "an efficiency (0 <= eta <= 1)", "0.3", default=1.0),
        "inertia": _q("kg*m^2", "a moment of inertia", "2e-5 kg*m^2", default=0.0),
    },
    # rope hoist: a mass hanging from a drum on the load side of the gear (or on the motor)
    "hoist": {
        "mass": _q("kg", "a mass", "250 kg", constraint="positive"),
        "drum_radius": _q("m", "a length", "0.1 m", constraint="positive"),
        "gravity": _q(
            "m/s^2",
            "an acceleration",
            "9.80665 m/s^2",
            default=STANDARD_GRAVITY_M_S2,
            constraint="positive",
        ),
    },
    # compliant shaft between the motor and the load, at the motor shaft (dcsim.engine.
    # machine_kernel): the rotor (and gear) on one side, the load on the other
    "shaft": {
        "stiffness": _q("N*m/rad", "a torsional stiffness", "400 N*m/rad", constraint="positive"),
        "damping": _q("N*m*s/rad", "a damping coefficient", "0.02 N*m*s/rad", default=0.0),
        "backlash": _q("rad", "an angle (total play)", "0.5 deg", default=0.0),
    },
    "supply": {
        "voltage": _q("V", "a voltage", "24 V", constraint="nonnegative", changeable=True),
        "resistance": _q("ohm", "a resistance", "0.1 ohm", default=0.0, changeable=True),
        "capacitance": _q("F", "a capacitance", "470 uF", default=0.0),
        "regenerative": KeySpec(
            None, kind="bool", default=True, noun="true or false", example="true", changeable=True
        ),
        "inductance": _q("H", "an inductance", "10 uH", default=0.0),
        "esr": _q("ohm", "a resistance", "20 mohm", default=0.0),
        "initial_bus_voltage": _q("V", "a voltage", "0 V", default=None),
    },
    "bridge": {
        "model": _choice("ideal", "a bridge model", ("ideal", "averaged", "switching")),
        "pwm": _choice("unipolar", "a PWM scheme", ("unipolar", "bipolar")),
        "frequency": _q("Hz", "a frequency", "20 kHz", default=20e3, constraint="positive"),
        "alignment": _choice("centre", "a carrier alignment", ("centre", "edge")),
        "duty_counts": _q("", "a number of timer counts", "1000", default=0.0),
        "min_pulse": _q("s", "a time", "200 ns", default=0.0),
        "dead_time": _q("s", "a time", "500 ns", default=0.0),
        "on_resistance": _q("ohm", "a resistance", "10 mohm", default=0.0),
        "diode_drop": _q("V", "a voltage", "0.8 V", default=0.0),
        "switching_energy": _q("J", "an energy", "20 uJ", default=0.0),
        "switching_energy_voltage": _q("V", "a voltage", "24 V", default=0.0),
        "switching_energy_current": _q("A", "a current", "10 A", default=0.0),
        "peak_current_limit": _q("A", "a current", "15 A", default=0.0),
        "blanking_time": _q("s", "a time", "1 us", default=0.0),
        "decay": _choice(None, "a decay mode", ("slow", "fast", "mixed")),
        "slow_decay": _choice("low-side", "a slow-decay path", ("low-side", "high-side")),
        "fast_decay": _choice("diodes", "a fast-decay path", ("diodes", "synchronous")),
        "fast_decay_fraction": _q("", "a fraction from 0 to 1", "0.3", default=0.5),
        "current_regulation": _choice(
            "cycle-by-cycle", "a current regulation", ("cycle-by-cycle", "fixed-off-time")
        ),
        "sense_resistance": _q("ohm", "a resistance", "50 mohm", default=0.0),
        "sense_threshold": _q("V", "a voltage", "0.5 V", default=0.0),
        "sense_location": _choice(
            "in-line", "a sense location", ("in-line", "low-side", "high-side")
        ),
        "off_time": _q("s", "a time", "25 us", default=None, constraint="positive"),
        "comparator_delay": _q("s", "a time", "300 ns", default=0.0),
        "min_on_time": _q("s", "a time", "1 us", default=0.0),
        "rise_time": _q("s", "a time", "40 ns", default=0.0),
        "fall_time": _q("s", "a time", "60 ns", default=0.0),
    },
    "brake": {
        "resistance": _q("ohm", "a resistance", "10 ohm", constraint="positive"),
        "on_voltage": _q("V", "a voltage", "30 V", constraint="positive"),
        "off_voltage": _q("V", "a voltage", "28 V", constraint="positive"),
    },
    "protection": {
        "over_voltage": _q("V", "a voltage", "34 V", default=0.0),
        "under_voltage": _q("V", "a voltage", "9 V", default=0.0),
        "restart": _choice("latch", "a restart rule", ("latch", "auto")),
        "restart_delay": _q("s", "a time", "100 ms", default=0.1),
        "restart_margin": _q("V", "a voltage", "1 V", default=0.0),
        "over_current": _q("A", "a current", "20 A", default=0.0),
        "over_current_deglitch": _q("s", "a time", "2 us", default=0.0),
        "over_current_action": _choice("latch", "an over-current action", ("latch", "retry")),
        "over_current_retry_time": _q("s", "a time", "5 ms", default=0.01, constraint="positive"),
    },
    "precharge": {
        "resistance": _q("ohm", "a resistance", "47 ohm", constraint="positive"),
        "bypass_time": _q("s", "a time", "200 ms", default=None),
        "bypass_voltage": _q("V", "a voltage", "20 V", default=None, constraint="positive"),
    },
    "battery": {
        "open_circuit_voltage": _pairs(
            "", "V", "a table of state of charge and voltage", "[[0.0, '11.6 V'], [1.0, '12.8 V']]"
        ),
        "resistance": _q("ohm", "a resistance", "15 mohm", default=0.0),
        "capacity": _q("A*s", "a charge", "40 A*h", constraint="positive"),
        "initial_state_of_charge": _q("", "a fraction from 0 to 1", "0.9", default=1.0),
        "max_charge_current": _q("A", "a current", "5 A", default=None, constraint="positive"),
        "max_discharge_current": _q("A", "a current", "60 A", default=None, constraint="positive"),
        "full_voltage": _q("V", "a voltage", "14.4 V", default=None, constraint="positive"),
        "reclose_voltage": _q("V", "a voltage", "13.2 V", default=None, constraint="positive"),
        "reclose_time": _q("s", "a time", "500 ms", default=None, constraint="positive"),
    },
    "fuse": {
        "rated_current": _q("A", "a current", "5 A", constraint="positive"),
        "melting_i2t": _q("A^2*s", "an I2t value", "10 A^2*s", default=None, constraint="positive"),
        "min_melting_current": _q("A", "a current", "10.5 A", default=None, constraint="positive"),
        "table": _text("a CSV file of current and melting time", "'fuse_curve.csv'"),
        "generic_class": KeySpec(
            None,
            kind="choice",
            default=None,
            noun="a generic fuse class",
            example="quick-acting",
            choices=("quick-acting", "time-lag"),
        ),
        "characteristic": KeySpec(
            None,
            kind="choice",
            default=None,
            noun="a fuse characteristic",
            example="quick-acting",
            choices=("quick-acting", "time-lag"),
        ),
    },
    "supply_profile": {
        "start": _q("s", "a time", "100 ms", default=0.0),
        "standard": _text("a standard profile name", "'iso16750-2:12V:III'"),
        "points": _pairs(
            "s", "V", "a table of time and voltage", "[['0 ms', '12 V'], ['5 ms', '6 V']]"
        ),
        "file": _text("a CSV file of time and voltage", "'sag.csv'"),
    },
    "control": {
        "mode": KeySpec(
            None,
            kind="choice",
            default="voltage",
            noun="a control mode",
            example="voltage",
            choices=("voltage", "current", "speed", "position"),
        ),
        "voltage": _q("V", "a voltage", "24 V", default=0.0, constraint="any", changeable=True),
        "computation_delay": KeySpec(
            None, kind="bool", default=False, noun="true or false", example="false"
        ),
        "voltage_fraction": _q("", "a fraction of the bus voltage", "0.95", default=1.0),
    },
    "control.current": _loop_keys(
        "A",
        "V",
        "V",
        "2.5 V/A",
        "3000 V/(A*s)",
        "50 us",
        "24 V",
        feedforward=("back_emf_feedforward",),
    ),
    "control.speed": _loop_keys(
        "rad/s",
        "A",
        "A",
        "0.05 A*s/rad",
        "2 A/rad",
        "200 us",
        "10 A",
        feedforward=("acceleration_feedforward", "friction_feedforward"),
        limit_required=True,
    )
    | {
        # braking current the speed loop may command (opposing the measured speed); None: limit
        "regen_limit": _q("A", "a current", "3 A", default=None, constraint="positive"),
    },
    "control.position": _loop_keys(
        "rad",
        "rad/s",
        "rad/s",
        "50 1/s",
        "0 1/s^2",
        "1 ms",
        "300 rad/s",
        feedforward=("speed_feedforward",),
    ),
    "control.reference": {
        "kind": _choice(
            "step", "a reference kind", ("step", "ramp", "trapezoid", "s-curve", "table")
        ),
        "value": _q(
            CONTROLLED,
            "a value of the controlled quantity",
            "200 rad/s",
            default=None,
            constraint="any",
        ),
        "initial": _q(
            CONTROLLED,
            "a value of the controlled quantity",
            "0 rad/s",
            default=0.0,
            constraint="any",
        ),
        "at": _q("s", "a time", "10 ms", default=0.0),
        "rate": _q(
            CONTROLLED + "/s",
            "a rate of change",
            "2000 rad/s^2",
            default=None,
            constraint="positive",
        ),
        "ramp_time": _q("s", "a time", "100 ms", default=None),
        "distance": _q("rad", "an angle", "20 rad", default=None, constraint="any"),
        "speed": _q("rad/s", "a speed", "300 rad/s", default=None, constraint="positive"),
        "acceleration": _q(
            "rad/s^2", "an acceleration", "5000 rad/s^2", default=None, constraint="positive"
        ),
        "deceleration": _q(
            "rad/s^2", "an acceleration", "5000 rad/s^2", default=None, constraint="positive"
        ),
        "jerk": _q("rad/s^3", "a jerk", "1e6 rad/s^3", default=None, constraint="positive"),
        "file": _text("a CSV file of time and reference value", "'moves.csv'"),
    },
    "sensors": {
        "encoder_lines": _q("", "a number of encoder lines per revolution", "500", default=0.0),
        "speed_method": _choice(
            "difference", "a speed measurement method", ("difference", "period", "exact")
        ),
        "speed_filter": _q("s", "a time constant", "1 ms", default=0.0),
        "timer_frequency": _q("Hz", "a frequency", "10 MHz", default=0.0),
        "current_gain_error": _q(
            "", "a relative gain error", "0.02", default=0.0, constraint="any"
        ),
        "current_offset": _q("A", "a current", "0.05 A", default=0.0, constraint="any"),
        "current_adc_bits": _q("", "a number of ADC bits", "12", default=0.0),
        "current_range": _q("A", "a current", "20 A", default=0.0),
        "current_noise": _q("A", "a current", "0.01 A", default=0.0),
        "speed_noise": _q("rad/s", "a speed", "0.1 rad/s", default=0.0),
        "position_noise": _q("rad", "an angle", "1 mrad", default=0.0),
        "bus_voltage_noise": _q("V", "a voltage", "0.05 V", default=0.0),
        "bus_voltage_adc_bits": _q("", "a number of ADC bits", "12", default=0.0),
        "bus_voltage_range": _q("V", "a voltage", "60 V", default=0.0),
        "seed": _q("", "a whole number", "1", default=0.0),
    },
    "thermal": {
        "resistance": _q(
            "K/W", "a thermal resistance", "1.5 K/W", default=None, constraint="positive"
        ),
        "time_constant": _q("s", "a time", "600 s", default=None, constraint="positive"),
        "winding_to_housing": _q(
            "K/W", "a thermal resistance", "0.8 K/W", default=None, constraint="positive"
        ),
        "housing_to_ambient": _q(
            "K/W", "a thermal resistance", "1.6 K/W", default=None, constraint="positive"
        ),
        "winding_capacity": _q(
            "J/K", "a heat capacity", "120 J/K", default=None, constraint="positive"
        ),
        "housing_capacity": _q(
            "J/K", "a heat capacity", "900 J/K", default=None, constraint="positive"
        ),
        "magnet_material": KeySpec(
            None,
            kind="choice",
            default=None,
            noun="a magnet material",
            example="ferrite",
            choices=tuple(MAGNET_COEFFICIENTS_PER_K),
        ),
        "magnet_coefficient": _q(
            "1/K", "a temperature coefficient", "-0.002 1/K", default=None, constraint="any"
        ),
        "ambient": _q("K", "a temperature", "40 degC", default=313.15, constraint="positive"),
        "initial_temperature": _q(
            "K", "a temperature", "40 degC", default=None, constraint="positive"
        ),
        "reference_temperature": _q(
            "K", "a temperature", "20 degC", default=293.15, constraint="positive"
        ),
        "insulation_class": KeySpec(
            None,
            kind="choice",
            default=None,
            noun="an insulation class",
            example="F",
            choices=tuple(INSULATION_CLASS_LIMITS_K),
        ),
        "hot_spot_allowance": _q("delta_degC", "a temperature difference", "10 K", default=10.0),
        "coupled": KeySpec(None, kind="bool", default=True, noun="true or false", example="true"),
    },
    "checks": {
        "fuse_margin": _q("", "a fraction of melting", "0.75", default=0.75, constraint="positive"),
        "fuse_derating": _q(
            "", "an ambient derating factor", "0.9", default=1.0, constraint="positive"
        ),
        "stall_clear_time": _q("s", "a time", "2 s", default=None, constraint="positive"),
        "supply_min": _q("V", "a voltage", "10.5 V", default=None, constraint="positive"),
        "supply_max": _q("V", "a voltage", "14.4 V", default=None, constraint="positive"),
        "capacitor_rated_voltage": _q(
            "V", "a voltage", "35 V", default=None, constraint="positive"
        ),
        "allowed_bus_rise": _q("V", "a voltage", "6 V", default=None, constraint="positive"),
        "brake_pulse_energy": _q("J", "an energy", "200 J", default=None, constraint="positive"),
        "brake_continuous_power": _q("W", "a power", "25 W", default=None, constraint="positive"),
        "continuous_current": _q("A", "a current", "4 A", default=None, constraint="positive"),
        "peak_current": _q("A", "a current", "40 A", default=None, constraint="positive"),
        "min_phase_margin": _q("deg", "an angle", "45 deg", default=45.0, constraint="positive"),
        "min_gain_margin": _q(
            "dB", "a gain ratio in dB", "6 dB", default=6.0, constraint="positive"
        ),
        "brown_out_voltage": _q("V", "a voltage", "9 V", default=None, constraint="positive"),
    },
    "about": {
        "title": KeySpec(None, kind="text", default="", noun="a text", example="'Winch'"),
        "description": KeySpec(None, kind="text", default="", noun="a text", example="'...'"),
    },
}
"""Every accepted ``table.key`` with its :class:`KeySpec`. Tables are the TOML tables."""

REQUIRED_TABLES = ("simulation", "motor", "supply")
OPTIONAL_TABLES = (
    "brake",
    "protection",
    "precharge",
    "battery",
    "fuse",
    "supply_profile",
    "control.current",
    "control.speed",
    "control.position",
    "control.reference",
    "sensors",
    "thermal",
    "checks",
    "gear",
    "hoist",
    "shaft",
)
"""Tables that describe a part the drive may not have: absent means no such part."""
DERIVED_FIELDS = {
    "motor": ("derived", "checks"),
    "fuse": ("table_points",),
    "supply_profile": ("times_s", "voltages_V", "notes"),
    "control": ("current", "speed", "position", "reference"),
    "control.reference": ("times_s", "values"),
}
"""Dataclass fields the loader fills from the keys (not keys themselves)."""
POWER_STAGE_TABLES = OPTIONAL_TABLES[:6]
"""Parts that only the averaged and switching bridge models simulate."""


def changeable_keys() -> list[str]:
    """Dotted names of the keys ``[[events]]`` may change."""
    return [f"{t}.{k}" for t, keys in KEYS.items() for k, s in keys.items() if s.changeable]


# --------------------------------------------------------------------------------------------
# Values
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Simulation:
    """Run settings.

    Attributes
    ----------
    duration : float
        Simulated time [s].
    record_interval : float or None
        Spacing of trace rows [s]; ``None`` lets dcsim choose.
    step : float or None
        Plant integration step [s]; ``None`` lets dcsim choose from the time constants.
    cycle_time : float or None
        The run is one duty cycle, repeated every ``cycle_time`` with the drive off (no
        current) for the rest of it [s] (>= duration). Used by the winding's thermal model (the
        periodic steady state: the hottest cycle), the fuse's repeated-start check, the RMS
        current and the average brake power. ``None``: the run happens once.
    """

    duration: float
    record_interval: float | None = None
    step: float | None = None
    cycle_time: float | None = None


@dataclass(frozen=True)
class Motor:
    """Permanent-magnet DC machine, armature quantities.

    The model keys (``resistance`` ... ``coulomb_friction``) are what the simulation reads.
    A file may give catalogue figures instead of some of them (``nominal_voltage`` ...
    ``mechanical_time_constant``); the loader derives the missing model keys from them and
    compares every over-determined figure with the model (:mod:`dcsim.scenario.datasheet`).

    Attributes
    ----------
    resistance : float
        Armature resistance, terminal to terminal [ohm].
    inductance : float
        Armature inductance [H].
    torque_constant : float
        Torque constant [N*m/A], equal to the back-EMF constant [V*s/rad] in SI.
    inertia : float
        Rotor inertia [kg*m^2].
    viscous_friction : float
        Viscous friction coefficient [N*m*s/rad].
    coulomb_friction : float
        Coulomb (dry, sliding) friction torque [N*m].
    static_friction : float or None
        Static (breakaway) friction torque [N*m], at least ``coulomb_friction``: a shaft at
        rest stays there while ``|K i - T_load|`` does not exceed it. ``None``: equal to
        ``coulomb_friction`` (no static excess). See :mod:`dcsim.plant.mechanics`.
    brush_drop : float
        Contact drop of each of the two brushes [V]: the armature sees ``v - 2 V_b sgn(i)``
        and the current stays at zero while ``|v - K w| < 2 V_b`` (loss
        ``energy_brush_drop_J``). See :mod:`dcsim.plant.machine`.
    brush_friction : float
        Brush friction [N*m], a Coulomb torque of its own (loss ``energy_brush_friction_J``).
    hysteresis_loss_torque : float
        Hysteresis drag of the armature iron [N*m], constant magnitude: loss ``T_h |w|``.
    eddy_loss_coefficient : float
        Eddy-current drag of the armature iron [N*m*s/rad]: loss ``B_e w^2``. Both iron terms
        are booked as ``energy_iron_loss_J``.
    kind : str
        ``"permanent_magnet"`` (default), ``"separately_excited"``, ``"shunt"``, ``"series"``
        or ``"compound"`` (:mod:`dcsim.engine.machine_kernel`). For the wound-field kinds
        ``torque_constant`` is derived: the flux constant at the field's steady current
        (series: at the locked-rotor current), used for the step choice and the tuning
        plants; the simulation follows the field.
    field_resistance, field_inductance : float or None
        Field winding [ohm, H] (series machine: the series winding).
    mutual_inductance : float or None
        Field-armature mutual inductance [H]: back-EMF ``M i_f w`` (linear magnetics).
    magnetisation : tuple of (float, float) or None
        Magnetisation curve: field current [A] against back-EMF [V] at
        ``magnetisation_speed`` [rad/s]; strictly increasing, from 0 A; saturation is in it.
    field_voltage : float or None
        Separately excited: the field supply [V].
    base_speed : float or None
        Separately excited: above this speed [rad/s] the field is weakened (flux ~ 1/speed).
    compound : str
        ``"cumulative"`` or ``"differential"`` (compound machine).
    series_field_resistance, series_field_inductance, series_turns_ratio : float or None
        Compound machine: the series winding [ohm, H] and its ampere-turns per armature amp
        expressed in shunt-field amps [-].
    max_speed : float or None
        Over-speed limit [rad/s]: a run that exceeds it stops with a message (series
        machines default to 10 x the speed at which the back-EMF at the locked-rotor flux
        equals the supply).
    commutator_segments : float or None
        Segments (coils) of the commutator: torque and back-EMF ripple (None: smooth).
    pole_pairs : float
        Pole pairs; the ripple repeats ``pole_pairs`` times per turn.
    nominal_voltage : float or None
        Catalogue: the voltage the other figures are given at [V].
    no_load_speed, no_load_current : float or None
        Catalogue: steady speed [rad/s] (files may write rpm) and current [A] without load.
    stall_torque, stall_current : float or None
        Catalogue: torque [N*m] and current [A] with the rotor held, at the nominal voltage.
    speed_constant : float or None
        Catalogue: no-load speed per volt of back-EMF [rad/(V*s)] (files write rpm/V);
        ``torque_constant = 1 / speed_constant`` in SI.
    mechanical_time_constant : float or None
        Catalogue: ``J R / K^2`` [s].
    derived : tuple of (str, str)
        ``(model key, formula)`` of each model key derived from catalogue figures (filled by
        the loader; the scenario writer leaves these keys out, the loader derives them again).
    checks : tuple of CatalogueCheck
        The catalogue figures against the model (filled by the loader); those off by more
        than 5 % are the scenario's warnings (:attr:`catalogue_warnings`).
    """

    resistance: float
    inductance: float
    torque_constant: float
    inertia: float
    viscous_friction: float = 0.0
    coulomb_friction: float = 0.0
    static_friction: float | None = None
    brush_drop: float = 0.0
    brush_friction: float = 0.0
    hysteresis_loss_torque: float = 0.0
    eddy_loss_coefficient: float = 0.0
    kind: str = "permanent_magnet"
    field_resistance: float | None = None
    field_inductance: float | None = None
    mutual_inductance: float | None = None
    magnetisation: tuple[tuple[float, float], ...] | None = None
    magnetisation_speed: float | None = None
    field_voltage: float | None = None
    base_speed: float | None = None
    compound: str = "cumulative"
    series_field_resistance: float | None = None
    series_field_inductance: float | None = None
    series_turns_ratio: float | None = None
    max_speed: float | None = None
    commutator_segments: float | None = None
    pole_pairs: float = 1.0
    nominal_voltage: float | None = None
    no_load_speed: float | None = None
    no_load_current: float | None = None
    stall_torque: float | None = None
    stall_current: float | None = None
    speed_constant: float | None = None
    mechanical_time_constant: float | None = None
    derived: tuple[tuple[str, str], ...] = ()
    checks: tuple[CatalogueCheck, ...] = ()

    @property
    def catalogue_warnings(self) -> tuple[str, ...]:
        """One message per catalogue figure more than 5 % off the model (empty: none)."""
        return tuple(c.message() for c in self.checks if not c.ok)


@dataclass(frozen=True)
class Load:
    """Load referred to the motor shaft.

    Attributes
    ----------
    inertia : float
        Load inertia [kg*m^2].
    torque : float
        Constant load torque opposing positive rotation [N*m]; negative drives the shaft.
    locked : bool
        Rotor held at zero speed.
    """

    inertia: float = 0.0
    torque: float = 0.0
    locked: bool = False


@dataclass(frozen=True)
class Gear:
    """Gearbox between the motor shaft and the load; the ``[load]`` keys mean the load side.

    Attributes
    ----------
    ratio : float
        Motor turns per load turn, ``N = w_motor / w_load`` [-] (> 0).
    forward_efficiency : float
        Efficiency when the motor drives the load, ``0 < eta_f <= 1`` [-].
    back_efficiency : float
        Efficiency when the load drives the motor, ``0 <= eta_b <= 1`` [-]; 0 is a
        self-locking gear (a worm gear of small lead angle).
    inertia : float
        Inertia of the gear referred to the motor shaft [kg*m^2].
    """

    ratio: float = 1.0
    forward_efficiency: float = 1.0
    back_efficiency: float = 1.0
    inertia: float = 0.0


@dataclass(frozen=True)
class Hoist:
    """A mass hanging on a rope from a drum on the load shaft (lifting = positive speed).

    Attributes
    ----------
    mass : float
        Suspended mass [kg].
    drum_radius : float
        Radius at which the rope leaves the drum [m].
    gravity : float
        Acceleration of gravity [m/s^2] (default: standard gravity).
    """

    mass: float = 0.0
    drum_radius: float = 0.0
    gravity: float = STANDARD_GRAVITY_M_S2


@dataclass(frozen=True)
class Shaft:
    """A compliant shaft (coupling) between the rotor and the load, with backlash.

    Values at the motor shaft (a gear's ratio referred through: stiffness and damping on the
    load side divide by ``N^2``, the play multiplies by ``N``). The rotor and the gear's
    inertia are on the motor side, the load's (and a hoist's) on the other. Torque passed:
    ``k (d -+ b/2) + c (w_1 - w_2)`` outside the play ``|d| <= b/2``, zero inside it (the
    dead-zone model; Nordin & Gutman, Automatica 38 (2002) 1633).

    Attributes
    ----------
    stiffness : float
        Torsional stiffness ``k`` [N*m/rad].
    damping : float
        Damping ``c`` while the teeth are in contact [N*m*s/rad].
    backlash : float
        Total play ``b`` [rad] (files may write degrees).
    """

    stiffness: float = 0.0
    damping: float = 0.0
    backlash: float = 0.0


@dataclass(frozen=True)
class Supply:
    """DC supply feeding the bridge.

    Attributes
    ----------
    voltage : float
        Source open-circuit voltage [V].
    resistance : float
        Source plus wiring resistance [ohm].
    capacitance : float
        DC-bus capacitance [F]; 0 means no bus capacitor.
    regenerative : bool
        Whether the source can take current back; ``False`` is a diode front end.
    inductance : float
        Source plus wiring inductance [H] (averaged and switching bridge models).
    esr : float
        Equivalent series resistance of the bus capacitor [ohm] (averaged and switching).
    initial_bus_voltage : float or None
        Bus capacitor voltage at t = 0 [V]; ``None``: charged to the source voltage (0 V with
        a pre-charge circuit).
    """

    voltage: float
    resistance: float = 0.0
    capacitance: float = 0.0
    regenerative: bool = True
    inductance: float = 0.0
    esr: float = 0.0
    initial_bus_voltage: float | None = None


@dataclass(frozen=True)
class Bridge:
    """The H-bridge between the bus and the armature.

    Attributes
    ----------
    model : str
        ``"ideal"`` (the bridge applies the commanded voltage, clipped to the bus, with no
        losses), ``"averaged"`` (cycle-average of the PWM legs, with conduction losses and the
        dead-time error) or ``"switching"`` (every switching instant).
    pwm : str
        ``"unipolar"`` (each leg has its own duty; the armature sees 0 and +-V_bus) or
        ``"bipolar"`` (the diagonals switch together; the armature sees +-V_bus).
    frequency : float
        PWM frequency [Hz].
    alignment : str
        ``"centre"`` (triangle carrier, pulses centred in the period) or ``"edge"``
        (sawtooth carrier, pulses start with the period).
    duty_counts : float
        Timer counts per PWM period; duties are rounded to whole counts (0: not quantised).
    min_pulse : float
        Shortest high or low pulse the modulator produces [s]; shorter ones are dropped.
    dead_time : float
        Delay from one switch of a leg turning off to the other turning on [s].
    on_resistance : float
        On-resistance of each switch [ohm].
    diode_drop : float
        Forward drop of each freewheeling diode [V].
    switching_energy : float
        Energy lost per leg transition [J], at ``switching_energy_voltage`` and
        ``switching_energy_current`` if given (scaled linearly with bus voltage and current).
    switching_energy_voltage, switching_energy_current : float
        Reference bus voltage [V] and current [A] of ``switching_energy``; 0: not scaled.
    peak_current_limit : float
        Cycle-by-cycle limit [A]: the comparator ends the pulse for the rest of the period
        (0: none; switching model only).
    blanking_time : float
        Time after each pulse starts during which the limit comparator is ignored [s].
    decay : str or None
        Drive/decay PWM (switching model only; replaces ``pwm``): in each period one diagonal
        drives for the duty, and the off-time recirculates the current in ``"slow"`` decay
        (both low-side or both high-side switches on), returns it to the bus in ``"fast"``
        decay (the diodes, or the opposite diagonal), or ``"mixed"``: fast for
        ``fast_decay_fraction`` of the off-time, then slow. None: the ``pwm`` scheme.
    slow_decay : str
        ``"low-side"`` or ``"high-side"`` switches for slow decay.
    fast_decay : str
        ``"diodes"`` (every switch off: the current stops at zero) or ``"synchronous"`` (the
        opposite diagonal on: the current may reverse).
    fast_decay_fraction : float
        Fraction of the off-time in fast decay for ``"mixed"`` [-].
    current_regulation : str
        What the trip comparator does (``peak_current_limit`` or ``sense_threshold /
        sense_resistance``): ``"cycle-by-cycle"`` (decay for the rest of the PWM period) or
        ``"fixed-off-time"`` (decay for ``off_time``, then drive again).
    sense_resistance : float
        Current-sense resistor [ohm] (in the current path it sees; 0: none).
    sense_threshold : float
        Comparator threshold across the sense resistor [V]; the trip current is
        ``sense_threshold / sense_resistance``.
    sense_location : str
        ``"in-line"`` (in series with the armature: sees its current in every state),
        ``"low-side"`` or ``"high-side"`` (one resistor in the bridge's bus return or feed:
        sees the bus current ``g i``, zero while the current recirculates in slow decay).
    off_time : float or None
        Fixed off-time of ``"fixed-off-time"`` regulation [s].
    comparator_delay : float
        Delay from the trip to the switches turning off [s] (the peak overshoots the level).
    min_on_time : float
        Shortest drive after a pulse starts, whatever the comparator says [s].
    rise_time, fall_time : float
        Turn-on and turn-off transition times of a switch [s] (switching model; instead of
        ``switching_energy``): each hard-switched transition loses ``V_bus |i| t / 2`` with
        ``t`` the rise time for a switch turning on, the fall time for one turning off
        (Mohan, Undeland & Robbins, *Power Electronics*, 3rd ed., sec. 2-5, from memory);
        0: none.

    Notes
    -----
    :attr:`audible_warning` is the warning of a PWM frequency in the audible band.
    """

    model: str = "ideal"
    pwm: str = "unipolar"
    frequency: float = 20e3
    alignment: str = "centre"
    duty_counts: float = 0.0
    min_pulse: float = 0.0
    dead_time: float = 0.0
    on_resistance: float = 0.0
    diode_drop: float = 0.0
    switching_energy: float = 0.0
    switching_energy_voltage: float = 0.0
    switching_energy_current: float = 0.0
    peak_current_limit: float = 0.0
    blanking_time: float = 0.0
    decay: str | None = None
    slow_decay: str = "low-side"
    fast_decay: str = "diodes"
    fast_decay_fraction: float = 0.5
    current_regulation: str = "cycle-by-cycle"
    sense_resistance: float = 0.0
    sense_threshold: float = 0.0
    sense_location: str = "in-line"
    off_time: float | None = None
    comparator_delay: float = 0.0
    min_on_time: float = 0.0
    rise_time: float = 0.0
    fall_time: float = 0.0

    @property
    def trip_current_A(self) -> float:
        """Trip level of the current comparator [A] (0: none)."""
        if self.sense_threshold > 0.0 and self.sense_resistance > 0.0:
            return self.sense_threshold / self.sense_resistance
        return self.peak_current_limit

    @property
    def audible_warning(self) -> str | None:
        """The warning of a switching model whose PWM frequency lies in the audible band
        (below :data:`AUDIBLE_LIMIT_HZ`), naming the key and its value; ``None`` otherwise."""
        if self.model != "switching" or not self.frequency < AUDIBLE_LIMIT_HZ:
            return None
        return (
            f"bridge.frequency = {self.frequency / 1e3:.4g} kHz lies in the audible band "
            f"(below {AUDIBLE_LIMIT_HZ / 1e3:g} kHz, common practice): the drive may whine at "
            "the switching frequency or its harmonics"
        )


@dataclass(frozen=True)
class Brake:
    """Brake chopper: a resistor across the bus, switched by a hysteresis comparator.

    Attributes
    ----------
    resistance : float
        Brake resistor [ohm].
    on_voltage, off_voltage : float
        Bus voltage at which the chopper switches on, and back off [V] (off < on).
    """

    resistance: float
    on_voltage: float
    off_voltage: float


@dataclass(frozen=True)
class Protection:
    """Bus voltage trips that disable the bridge (the motor coasts).

    Attributes
    ----------
    over_voltage, under_voltage : float
        Trip levels [V]; 0: no such trip.
    restart : str
        ``"latch"`` (stays off) or ``"auto"`` (restarts after ``restart_delay`` once the bus is
        ``restart_margin`` inside the trip levels; checked at each PWM period start).
    restart_delay : float
        [s]
    restart_margin : float
        [V]
    over_current : float
        Over-current trip level of the sensed current [A] (0: none); the sense resistor's
        location decides which bridge states it sees.
    over_current_deglitch : float
        The sensed current must stay above the level this long to trip [s].
    over_current_action : str
        ``"latch"`` (stays off) or ``"retry"`` (restarts after ``over_current_retry_time``,
        checked at each kernel period start).
    over_current_retry_time : float
        [s]
    """

    over_voltage: float = 0.0
    under_voltage: float = 0.0
    restart: str = "latch"
    restart_delay: float = 0.1
    restart_margin: float = 0.0
    over_current: float = 0.0
    over_current_deglitch: float = 0.0
    over_current_action: str = "latch"
    over_current_retry_time: float = 0.01


@dataclass(frozen=True)
class Precharge:
    """Pre-charge resistor in the supply line, bypassed after a time or at a bus voltage.

    The bridge stays disabled until the bypass.

    Attributes
    ----------
    resistance : float
        [ohm]
    bypass_time : float or None
        Bypass at this time [s].
    bypass_voltage : float or None
        Bypass when the bus reaches this voltage [V] (whichever comes first).
    """

    resistance: float
    bypass_time: float | None = None
    bypass_voltage: float | None = None


@dataclass(frozen=True)
class Battery:
    """Battery source: open-circuit voltage against state of charge, internal resistance.

    Attributes
    ----------
    open_circuit_voltage : tuple of (float, float)
        ``(state of charge [-], open-circuit voltage [V])`` points, state of charge rising;
        linear between them and beyond the ends.
    resistance : float
        Internal resistance [ohm] (in series with ``supply.resistance``).
    capacity : float
        Capacity [C] (the file may give it in A*h).
    initial_state_of_charge : float
        [-], 1 = full.
    max_charge_current : float or None
        The battery-management disconnect opens when the charge current exceeds this [A].
    max_discharge_current : float or None
        ... when the discharge current exceeds this [A].
    full_voltage : float or None
        ... when the terminal voltage ``OCV - R i`` exceeds this full-charge voltage [V].
    reclose_voltage : float or None
        The open disconnect recloses when the bus voltage falls to this level [V].
    reclose_time : float or None
        ... or this long after it opened [s] (checked at the start of each kernel period: a
        PWM period, or a trace row / controller sample of the averaged model). Neither: it
        stays open.
    """

    open_circuit_voltage: tuple[tuple[float, float], ...]
    capacity: float
    resistance: float = 0.0
    initial_state_of_charge: float = 1.0
    max_charge_current: float | None = None
    max_discharge_current: float | None = None
    full_voltage: float | None = None
    reclose_voltage: float | None = None
    reclose_time: float | None = None

    @property
    def has_disconnect(self) -> bool:
        """Whether a battery-management disconnect is given (any of its opening limits)."""
        return any(
            v is not None
            for v in (self.max_charge_current, self.max_discharge_current, self.full_voltage)
        )

    def ocv_at(self, soc: float) -> float:
        """Open-circuit voltage at a state of charge [V] (linear, extended at the ends)."""
        pts = self.open_circuit_voltage
        k = 0
        while k < len(pts) - 2 and soc > pts[k + 1][0]:
            k += 1
        (s0, v0), (s1, v1) = pts[k], pts[k + 1]
        return v0 + (v1 - v0) * (soc - s0) / (s1 - s0)


@dataclass(frozen=True)
class Fuse:
    """Fuse element in the supply line (first-order heating model).

    Attributes
    ----------
    rated_current : float
        [A]
    melting_i2t : float or None
        Pre-arcing I^2 t of the adiabatic region [A^2 s].
    min_melting_current : float or None
        Smallest current that ever melts the element [A]; default 2.1 x rated.
    table : str or None
        CSV file of current [A] and melting time [s], fitted to the model (alternative to
        ``melting_i2t``).
    generic_class : str or None
        ``"quick-acting"`` or ``"time-lag"``: a generic model inside the IEC 60127-2 gates of
        the class (with a warning: the maker's curve should replace it).
    characteristic : str or None
        The fuse's IEC 60127-2 characteristic, ``"quick-acting"`` (F) or ``"time-lag"`` (T):
        its pre-arcing time gates are drawn on the time-current plot and the model is held
        against them (a generic class implies its own).
    table_points : tuple of (float, float)
        The table as read (filled by the loader).
    """

    rated_current: float
    melting_i2t: float | None = None
    min_melting_current: float | None = None
    table: str | None = None
    generic_class: str | None = None
    characteristic: str | None = None
    table_points: tuple[tuple[float, float], ...] = ()


@dataclass(frozen=True)
class SupplyProfile:
    """Source voltage against time: piecewise linear from ``start``.

    Attributes
    ----------
    start : float
        When the profile begins [s]; before it the source is at ``supply.voltage``.
    standard : str or None
        Name of a built-in standard profile.
    points : tuple of (float, float) or None
        ``(time from start [s], voltage [V])`` points.
    file : str or None
        CSV of time and voltage.
    times_s, voltages_V : tuple of float
        The resolved profile (filled by the loader from whichever was given).
    notes : str
        Source of a standard profile and what in it is approximated or from memory.
    """

    start: float = 0.0
    standard: str | None = None
    points: tuple[tuple[float, float], ...] | None = None
    file: str | None = None
    times_s: tuple[float, ...] = ()
    voltages_V: tuple[float, ...] = ()
    notes: str = ""


@dataclass(frozen=True)
class Loop:
    """One discrete control loop (see :mod:`dcsim.controllers.pid` for the equations).

    Units are those of the loop: the current loop measures A and outputs V, the speed loop
    rad/s and A, the position loop rad and rad/s.

    Attributes
    ----------
    sample_time : float
        [s]; an integer multiple of the fastest loop's.
    kp, ki, kd : float or None
        Parallel-form gains: ``u = kp (b r - y) + ki * integral(e dt) + kd d(-y)/dt``.
    form : str
        ``"parallel"`` (``kp``, ``ki``, ``kd``), ``"ideal"`` or ``"series"`` (``gain``,
        ``integral_time``, ``derivative_time``, converted by :meth:`parallel_gains`).
    gain, integral_time, derivative_time : float or None
        Gains of the ideal or series form [output/input, s, s].
    limit : float or None
        Output limit [output unit]; the current loop's is also bounded by the measured bus
        voltage (times ``control.voltage_fraction``).
    derivative_filter : float
        Time constant of the derivative filter [s] (0: none).
    setpoint_weight : float
        Weight ``b`` of the reference in the proportional term [-].
    anti_windup : str
        ``"clamping"`` (conditional integration), ``"back-calculation"`` or ``"none"``.
    tracking_time : float or None
        Back-calculation tracking time [s]; default ``kp / ki``.
    discretisation : str
        ``"backward-euler"``, ``"forward-euler"`` or ``"tustin"`` (the integral; the
        derivative uses the backward difference, or Tustin with Tustin).
    initial_output : float or None
        Output at the first sample (bumpless start: the integral is preset to give it)
        [output unit]; ``None``: the integral starts at 0.
    """

    sample_time: float
    kp: float | None = None
    ki: float = 0.0
    kd: float = 0.0
    form: str = "parallel"
    gain: float | None = None
    integral_time: float | None = None
    derivative_time: float | None = None
    limit: float | None = None
    derivative_filter: float = 0.0
    setpoint_weight: float = 1.0
    anti_windup: str = "clamping"
    tracking_time: float | None = None
    discretisation: str = "backward-euler"
    initial_output: float | None = None

    def parallel_gains(self) -> tuple[float, float, float]:
        """``(kp, ki, kd)`` of the parallel form, whichever form the scenario used."""
        if self.form == "parallel":
            return float(self.kp or 0.0), self.ki, self.kd
        from dcsim.controllers.pid import parallel_gains

        return parallel_gains(
            self.form, float(self.gain or 0.0), self.integral_time, self.derivative_time
        )


@dataclass(frozen=True)
class CurrentLoop(Loop):
    """The current loop (A in, V out).

    Attributes
    ----------
    back_emf_feedforward : bool
        Add ``K * measured speed`` to the output (back-EMF compensation).
    """

    back_emf_feedforward: bool = False


@dataclass(frozen=True)
class SpeedLoop(Loop):
    """The speed loop (rad/s in, A out; ``limit`` is the current limit and required).

    Attributes
    ----------
    acceleration_feedforward : bool
        Add ``J * reference acceleration / K`` (J = rotor + load inertia).
    friction_feedforward : bool
        Add ``(B w_ref + T_c sgn w_ref) / K``.
    regen_limit : float or None
        Regenerative (braking) current limit [A]: with the measured speed positive the
        current command is clamped below at ``-regen_limit`` (above at ``limit``), with it
        negative above at ``+regen_limit``; at zero measured speed the limit is symmetric.
        The usual firmware defence of a supply that cannot take current back. ``None``: the
        braking current is limited by ``limit`` only.
    """

    acceleration_feedforward: bool = False
    friction_feedforward: bool = False
    regen_limit: float | None = None


@dataclass(frozen=True)
class PositionLoop(Loop):
    """The position loop (rad in, rad/s out).

    Attributes
    ----------
    speed_feedforward : bool
        Add the reference speed of the motion profile to the output.
    """

    speed_feedforward: bool = False


@dataclass(frozen=True)
class Reference:
    """What the outermost loop follows (units of the controlled quantity: A, rad/s or rad).

    Attributes
    ----------
    kind : str
        ``"step"`` (``value`` at ``at``), ``"ramp"`` (to ``value`` at ``rate`` or over
        ``ramp_time``), ``"trapezoid"`` / ``"s-curve"`` (position moves of ``distance`` with
        ``speed``, ``acceleration`` [, ``deceleration``] [, ``jerk``] limits) or ``"table"``
        (``file``: CSV of time [s] and value [SI], linear between points).
    value, initial : float or None
        Final and starting value.
    at : float
        Start time [s].
    rate : float or None
        Ramp rate [unit/s].
    ramp_time : float or None
        Ramp duration [s].
    distance, speed, acceleration, deceleration, jerk : float or None
        Move of ``distance`` [rad] within the limits [rad/s, rad/s^2, rad/s^3].
    file : str or None
        CSV of the table reference.
    times_s, values : tuple of float
        The table as read (filled by the loader).
    """

    kind: str = "step"
    value: float | None = None
    initial: float = 0.0
    at: float = 0.0
    rate: float | None = None
    ramp_time: float | None = None
    distance: float | None = None
    speed: float | None = None
    acceleration: float | None = None
    deceleration: float | None = None
    jerk: float | None = None
    file: str | None = None
    times_s: tuple[float, ...] = ()
    values: tuple[float, ...] = ()


@dataclass(frozen=True)
class Sensors:
    """Measurements the controller works on (see :mod:`dcsim.controllers.cascade`).

    Attributes
    ----------
    encoder_lines : float
        Incremental encoder lines per revolution, read x4 (0: the angle is read exactly).
    speed_method : str
        ``"difference"`` (counts per sample), ``"period"`` (time between edges) or
        ``"exact"``; without an encoder the speed is read exactly.
    speed_filter : float
        First-order low-pass time constant on the speed [s] (0: none).
    timer_frequency : float
        Clock that stamps encoder edges for the period method [Hz] (0: exact).
    current_gain_error : float
        Relative gain error of the current sensor [-].
    current_offset : float
        [A]
    current_adc_bits, current_range : float
        ADC resolution and +- full scale [A] (0: none).
    current_noise, speed_noise, position_noise, bus_voltage_noise : float
        Standard deviations of white noise [A, rad/s, rad, V].
    bus_voltage_adc_bits, bus_voltage_range : float
        Bus voltage ADC resolution and full scale 0..range [V].
    seed : float
        Seed of the noise generator (a whole number).
    """

    encoder_lines: float = 0.0
    speed_method: str = "difference"
    speed_filter: float = 0.0
    timer_frequency: float = 0.0
    current_gain_error: float = 0.0
    current_offset: float = 0.0
    current_adc_bits: float = 0.0
    current_range: float = 0.0
    current_noise: float = 0.0
    speed_noise: float = 0.0
    position_noise: float = 0.0
    bus_voltage_noise: float = 0.0
    bus_voltage_adc_bits: float = 0.0
    bus_voltage_range: float = 0.0
    seed: float = 0.0


@dataclass(frozen=True)
class Control:
    """Controller settings.

    Attributes
    ----------
    mode : str
        ``"voltage"``: open loop. The ideal bridge applies ``voltage`` clipped to the bus; the
        averaged and switching bridges run at the duty ``voltage / supply.voltage`` (the
        nominal supply voltage at the start), so their armature voltage follows the bus.
        ``"current"``, ``"speed"``, ``"position"``: the cascade of discrete loops down to the
        current loop, whose output voltage the bridge applies (the PWM bridges at the duty
        ``command / measured bus voltage``).
    voltage : float
        Commanded armature voltage [V] (mode ``"voltage"``).
    computation_delay : bool
        Apply each sample's output one base sample later.
    voltage_fraction : float
        Part of the measured bus voltage the current loop may command [-].
    current, speed, position : Loop or None
        The loops ([control.current], ...); the mode needs its own loop and those inside it.
    reference : Reference or None
        What the outermost loop follows.
    """

    mode: str = "voltage"
    voltage: float = 0.0
    computation_delay: bool = False
    voltage_fraction: float = 1.0
    current: CurrentLoop | None = None
    speed: SpeedLoop | None = None
    position: PositionLoop | None = None
    reference: Reference | None = None


@dataclass(frozen=True)
class Thermal:
    """Thermal model of the machine: one node (winding -> ambient) or two (winding -> housing
    -> ambient).

    ``C dT/dt = P_cu - (T - T_amb) / R_th`` with ``tau = R_th C``: a lumped body behind one
    thermal resistance (Incropera et al., *Fundamentals of Heat and Mass Transfer*, 6th ed.,
    sec. 5.1-5.3). The copper loss ``P_cu = R(T) i^2`` with ``R(T) = R20 (1 + alpha20 (T -
    20 degC))``, alpha20 = 0.00393 /K (IEC 60028).

    Attributes
    ----------
    resistance : float or None
        One-node model: thermal resistance winding to ambient [K/W].
    time_constant : float or None
        One-node model: thermal time constant ``R_th C`` [s].
    winding_to_housing, housing_to_ambient : float or None
        Two-node model: thermal resistances [K/W] of the network winding -> housing ->
        ambient (give these four instead of ``resistance`` and ``time_constant``).
    winding_capacity, housing_capacity : float or None
        Two-node model: heat capacities [J/K]. The copper loss heats the winding node.
    magnet_material : str or None
        ``"ferrite"``, ``"ndfeb"``, ``"smco"`` or ``"alnico"``: the torque constant falls with
        the magnets' temperature (the housing node's; two-node model only) by the material's
        coefficient (:data:`MAGNET_COEFFICIENTS_PER_K`).
    magnet_coefficient : float or None
        The coefficient itself [1/K] (instead of ``magnet_material``): ``K(T) = K_ref (1 +
        c (T - reference_temperature))``.
    ambient : float
        Ambient temperature [K] (files may write ``"40 degC"``).
    initial_temperature : float or None
        Winding temperature at t = 0 [K]; ``None``: the ambient (or, with
        ``simulation.cycle_time``, the periodic steady state).
    reference_temperature : float
        Temperature at which ``motor.resistance`` is given [K].
    insulation_class : str or None
        IEC 60085 thermal class (A, E, B, F, H, N, R) the winding is held against.
    hot_spot_allowance : float
        How much hotter the hottest spot runs than the average winding temperature the model
        gives [K].
    coupled : bool
        The armature resistance of the electrical model follows the winding temperature.
    """

    resistance: float | None = None
    time_constant: float | None = None
    winding_to_housing: float | None = None
    housing_to_ambient: float | None = None
    winding_capacity: float | None = None
    housing_capacity: float | None = None
    magnet_material: str | None = None
    magnet_coefficient: float | None = None
    ambient: float = 313.15
    initial_temperature: float | None = None
    reference_temperature: float = 293.15
    insulation_class: str | None = None
    hot_spot_allowance: float = 10.0
    coupled: bool = True

    @property
    def two_node(self) -> bool:
        """True for the winding -> housing -> ambient network."""
        return self.winding_to_housing is not None

    @property
    def magnet_coefficient_per_K(self) -> float:
        """Temperature coefficient of the torque constant [1/K] (0: none)."""
        if self.magnet_coefficient is not None:
            return self.magnet_coefficient
        if self.magnet_material is not None:
            return MAGNET_COEFFICIENTS_PER_K[self.magnet_material]
        return 0.0


@dataclass(frozen=True)
class Checks:
    """Limits and ratings the design checks (``dcsim check``) hold the run against.

    Each rating is optional: a check without its rating is reported as not applicable.

    Attributes
    ----------
    fuse_margin : float
        Largest peak heat fraction of the fuse over a start, after derating [-].
    fuse_derating : float
        Ambient derating factor of the fuse's current rating [-] (0.9: the fuse carries 90 %
        of its nominal current at the enclosure's temperature; heat fractions grow by
        ``1 / derating^2``).
    stall_clear_time : float or None
        With the rotor locked, the fuse must melt within this time (what the motor and its
        wiring withstand at that current) [s].
    supply_min, supply_max : float or None
        Supply corners [V]: the fuse's start-up check also runs at ``supply_max``, its stall
        check at ``supply_min``.
    capacitor_rated_voltage : float or None
        Rated voltage of the bus capacitor [V].
    allowed_bus_rise : float or None
        Bus voltage rise allowed on a stop without a chopper, for the suggested capacitance [V].
    brake_pulse_energy, brake_continuous_power : float or None
        Brake resistor ratings: energy of one stop [J], continuous power [W].
    continuous_current : float or None
        Continuous (thermal) current rating of the motor [A], against the RMS current.
    peak_current : float or None
        Peak current limit of the motor (demagnetisation or brushes) [A].
    min_phase_margin : float
        [deg]
    min_gain_margin : float
        [dB]
    brown_out_voltage : float or None
        The controller's brown-out threshold [V]: the bus must stay above it.
    """

    fuse_margin: float = 0.75
    fuse_derating: float = 1.0
    stall_clear_time: float | None = None
    supply_min: float | None = None
    supply_max: float | None = None
    capacitor_rated_voltage: float | None = None
    allowed_bus_rise: float | None = None
    brake_pulse_energy: float | None = None
    brake_continuous_power: float | None = None
    continuous_current: float | None = None
    peak_current: float | None = None
    min_phase_margin: float = 45.0
    min_gain_margin: float = 6.0
    brown_out_voltage: float | None = None


@dataclass(frozen=True)
class About:
    """Free text describing the scenario."""

    title: str = ""
    description: str = ""


@dataclass(frozen=True)
class Event:
    """A change of scalar keys at an exact time.

    Attributes
    ----------
    at : float
        Time of the change [s].
    changes : tuple of (str, object)
        ``(dotted key, SI value)`` pairs, e.g. ``("load.torque", 0.02)``.
    """

    at: float
    changes: tuple[tuple[str, Any], ...]


@dataclass(frozen=True)
class Scenario:
    """A complete, validated scenario in SI units.

    Attributes
    ----------
    simulation, motor, load, supply, control, about, bridge
        The tables of the file.
    brake, protection, precharge, battery, fuse, supply_profile, sensors, thermal, checks,
    gear, hoist, shaft
        Optional parts; ``None`` when the file has no such table.
    events : tuple of Event
        Sorted by time (stable for equal times, in file order).
    source : str
        Where it came from (a file path or ``"<text>"``), used in messages.
    """

    simulation: Simulation
    motor: Motor
    supply: Supply
    load: Load = field(default_factory=Load)
    control: Control = field(default_factory=Control)
    about: About = field(default_factory=About)
    bridge: Bridge = field(default_factory=Bridge)
    brake: Brake | None = None
    protection: Protection | None = None
    precharge: Precharge | None = None
    battery: Battery | None = None
    fuse: Fuse | None = None
    supply_profile: SupplyProfile | None = None
    sensors: Sensors | None = None
    thermal: Thermal | None = None
    checks: Checks | None = None
    gear: Gear | None = None
    hoist: Hoist | None = None
    shaft: Shaft | None = None
    events: tuple[Event, ...] = ()
    source: str = "<scenario>"

    def with_changes(self, changes: dict[str, Any]) -> Scenario:
        """Return a new scenario with the given dotted keys changed.

        Parameters
        ----------
        changes : dict
            ``{"motor.inductance": "3 mH", "load.torque": 0.02, ...}``: values as in a
            scenario file (SI numbers or unit strings).

        Returns
        -------
        Scenario
            A new, re-validated scenario; ``self`` is unchanged.
        """
        from dcsim.scenario.load import apply_changes

        return apply_changes(self, changes)

    def get(self, dotted: str) -> Any:
        """Value of a dotted key, e.g. ``sc.get("motor.resistance")`` or
        ``sc.get("control.speed.kp")`` [SI]; ``None`` when its table is absent."""
        table, _, key = dotted.rpartition(".")
        part = table_of(self, table)
        return None if part is None else getattr(part, key)


def table_of(scenario: Scenario, table: str) -> Any:
    """The dataclass of a (possibly nested, dotted) table, or ``None`` when it is absent."""
    part: Any = scenario
    for name in table.split("."):
        if part is None:
            return None
        part = getattr(part, name)
    return part
