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
        ``"quantity"`` (number or unit string), ``"bool"``, ``"choice"`` or ``"text"``.
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
    """

    unit: str | None
    kind: str = "quantity"
    default: Any = REQUIRED
    constraint: str = "any"
    noun: str = "a number"
    example: str = "1"
    choices: tuple[str, ...] = ()
    changeable: bool = False


def _q(unit, noun, example, default=REQUIRED, constraint="nonnegative", changeable=False):
    return KeySpec(
        unit=unit,
        default=default,
        constraint=constraint,
        noun=noun,
        example=example,
        changeable=changeable,
    )


KEYS: dict[str, dict[str, KeySpec]] = {
    "simulation": {
        "duration": _q("s", "a time", "1 s", constraint="positive"),
        "record_interval": _q("s", "a time", "50 us", default=None, constraint="positive"),
        "step": _q("s", "a time", "1 us", default=None, constraint="positive"),
    },
    "motor": {
        "kind": KeySpec(
            None,
            kind="choice",
            default="permanent_magnet",
            noun="a motor kind",
            example="permanent_magnet",
            choices=("permanent_magnet",),
        ),
        "resistance": _q("ohm", "a resistance", "1.2 ohm", constraint="positive", changeable=True),
        "inductance": _q("H", "an inductance", "2 mH", constraint="positive"),
        "torque_constant": _q(
            "N*m/A", "a torque constant", "0.05 N*m/A", constraint="positive", changeable=True
        ),
        "inertia": _q("kg*m^2", "a moment of inertia", "1e-4 kg*m^2", constraint="positive"),
        "viscous_friction": _q(
            "N*m*s/rad",
            "a viscous friction coefficient",
            "1e-5 N*m*s/rad",
            default=0.0,
            changeable=True,
        ),
        "coulomb_friction": _q("N*m", "a torque", "0.01 N*m", default=0.0, changeable=True),
    },
    "load": {
        "inertia": _q("kg*m^2", "a moment of inertia", "0 kg*m^2", default=0.0, changeable=True),
        "torque": _q("N*m", "a torque", "0.02 N*m", default=0.0, constraint="any", changeable=True),
        "locked": KeySpec(
            None, kind="bool", default=False, noun="true or false", example="false", changeable=True
        ),
    },
    "supply": {
        "voltage": _q("V", "a voltage", "24 V", constraint="nonnegative", changeable=True),
        "resistance": _q("ohm", "a resistance", "0.1 ohm", default=0.0, changeable=True),
        "capacitance": _q("F", "a capacitance", "470 uF", default=0.0),
        "regenerative": KeySpec(
            None, kind="bool", default=True, noun="true or false", example="true", changeable=True
        ),
    },
    "control": {
        "mode": KeySpec(
            None,
            kind="choice",
            default="voltage",
            noun="a control mode",
            example="voltage",
            choices=("voltage",),
        ),
        "voltage": _q("V", "a voltage", "24 V", default=0.0, constraint="any", changeable=True),
    },
    "about": {
        "title": KeySpec(None, kind="text", default="", noun="a text", example="'Winch'"),
        "description": KeySpec(None, kind="text", default="", noun="a text", example="'...'"),
    },
}
"""Every accepted ``table.key`` with its :class:`KeySpec`. Tables are the TOML tables."""

REQUIRED_TABLES = ("simulation", "motor", "supply")


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
    """

    duration: float
    record_interval: float | None = None
    step: float | None = None


@dataclass(frozen=True)
class Motor:
    """Permanent-magnet DC machine, armature quantities.

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
        Coulomb (dry) friction torque, also the static breakaway level [N*m].
    kind : str
        Machine kind; only ``"permanent_magnet"`` so far.
    """

    resistance: float
    inductance: float
    torque_constant: float
    inertia: float
    viscous_friction: float = 0.0
    coulomb_friction: float = 0.0
    kind: str = "permanent_magnet"


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
    """

    voltage: float
    resistance: float = 0.0
    capacitance: float = 0.0
    regenerative: bool = True


@dataclass(frozen=True)
class Control:
    """Controller settings.

    Attributes
    ----------
    mode : str
        ``"voltage"``: open loop, the bridge applies ``voltage`` clipped to the bus.
    voltage : float
        Commanded armature voltage [V].
    """

    mode: str = "voltage"
    voltage: float = 0.0


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
    simulation, motor, load, supply, control, about
        The tables of the file.
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
        """Value of a dotted key, e.g. ``sc.get("motor.resistance")`` [SI]."""
        table, _, key = dotted.partition(".")
        return getattr(getattr(self, table), key)
