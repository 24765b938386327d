"""Catalogue (datasheet) data of a permanent-magnet DC motor: the model derived from it, and
how well the figures agree.

Motor catalogues give a small brushed motor by its figures at the nominal voltage ``V``:
no-load speed ``w0`` and current ``I0``, stall torque ``Ts`` and current ``Is``, terminal
resistance ``R`` and inductance ``L``, torque constant ``K`` or speed constant ``Kv``, rotor
inertia ``J`` and mechanical time constant ``tau_m``. The simulation needs ``R, L, K, J`` and the
friction ``B, T_c``. This module derives the missing model parameters from the figures given
(:func:`derive_motor`) and compares every figure that is over-determined with the model's own
value of it (:class:`CatalogueCheck`, warn beyond :data:`WARN_PERCENT`).

The steady-state relations used (SI units; the permanent-magnet machine of
:mod:`dcsim.plant.machine`, ``v = R i + L di/dt + K w``, ``J dw/dt = K i - B w - T_c sgn w``):

=========================  ==========================================  =======================
figure                     model value                                 from
=========================  ==========================================  =======================
speed constant ``Kv``      ``1 / K`` [rad/(V s)]; ``K = 60 / (2 pi Kv[rpm/V])``  power balance
stall current ``Is``       ``V / R``                                   armature at ``w = 0``
stall torque ``Ts``        ``K V / R``                                 ``T = K i`` at stall
no-load speed ``w0``       ``(K V - R T_c) / (K^2 + R B)``             steady state, no load
no-load current ``I0``     ``(B w0 + T_c) / K``                        torque balance, no load
mech. time constant        ``J R / K^2``                               linearised speed step
=========================  ==========================================  =======================

Sources: A. Hughes and B. Drury, *Electric Motors and Drives*, 4th ed., Newnes (2013), ch. 3
(steady-state speed-torque line, ``T = K I``, ``E = K w``); N. Mohan, *Electric Drives: An
Integrative Approach*, MNPERE (2003), ch. 7 (the electrical and mechanical time constants
``L/R`` and ``J R / K^2``); the speed-constant identity ``Kt = 60 / (2 pi Kv) = 9.5493 / Kv``
(derived; the project's check list). The stall torque is the armature's ``K V / R`` without
friction, as catalogues state it; the Coulomb friction lowers the torque the shaft can give at
standstill by ``T_c``.

**Friction from the no-load current.** One operating point cannot tell viscous from dry
friction. When the table gives neither ``viscous_friction`` nor ``coulomb_friction``, the
no-load torque ``K I0`` is taken as Coulomb friction ``T_c = K I0`` (``B = 0``): in small
brushed motors the no-load loss is mostly brush and bearing friction, nearly constant with
speed (common practice, no source), and a Coulomb term keeps the breakaway torque the motor
must overcome at start, which a viscous term would drop to zero. Give either friction key to
override it; the no-load current is then one of the checks.

Everything here is a pure function of floats; problems raise one
:class:`~dcsim.errors.ScenarioError` naming the file and the key.
"""

from __future__ import annotations

import math
import textwrap
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

from dcsim.errors import ScenarioError

__all__ = [
    "CATALOGUE_KEYS",
    "MODEL_KEYS",
    "WARN_PERCENT",
    "CatalogueCheck",
    "Derivation",
    "derive_motor",
    "format_machine",
    "format_motor",
    "machine_as_dict",
    "mechanical_time_constant",
    "motor_as_dict",
    "no_load_current",
    "no_load_speed",
    "speed_constant_from_torque_constant",
    "stall_current",
    "stall_torque",
    "torque_constant_from_speed_constant",
]

WARN_PERCENT = 5.0
"""Catalogue figures that differ from the model's value by more than this [%] are warned about
(common practice, no source: catalogue figures carry a tolerance of about +-5 to 10 %)."""

CONTRADICTION_PERCENT = 5.0
"""``torque_constant`` and ``speed_constant`` are one quantity in two units: given both, they
may differ by at most this [%] (rounding), or the data are refused as contradictory."""

CATALOGUE_KEYS = (
    "nominal_voltage",
    "no_load_speed",
    "no_load_current",
    "stall_torque",
    "stall_current",
    "speed_constant",
    "mechanical_time_constant",
)
"""Keys of ``[motor]`` that hold catalogue figures (the model keys are :data:`MODEL_KEYS`)."""

MODEL_KEYS = (
    "resistance",
    "inductance",
    "torque_constant",
    "inertia",
    "viscous_friction",
    "coulomb_friction",
)
"""Keys of ``[motor]`` the simulation reads (SI)."""

DERIVABLE_KEYS = ("resistance", "torque_constant", "inertia", "coulomb_friction")
"""Model keys that can come from catalogue figures."""

_AT_NOMINAL_VOLTAGE = ("no_load_speed", "no_load_current", "stall_torque", "stall_current")
"""Catalogue figures that only mean something at a stated voltage."""

_RPM = 2.0 * math.pi / 60.0  # rad/s per rpm


# --------------------------------------------------------------------------------------------
# The relations, one function each
# --------------------------------------------------------------------------------------------


def torque_constant_from_speed_constant(speed_constant_rpm_per_V: float) -> float:
    """Torque constant of a speed constant given in rpm/V.

    Parameters
    ----------
    speed_constant_rpm_per_V : float
        Speed constant ``Kv`` [rpm/V]: no-load speed per volt of back-EMF.

    Returns
    -------
    float
        ``Kt = 60 / (2 pi Kv) = 9.5493 / Kv`` [N*m/A] (= [V*s/rad]).

    Notes
    -----
    Power balance ``e i = T w`` makes the back-EMF constant in V*s/rad equal to the torque
    constant in N*m/A; the speed constant is its inverse, written per minute and per
    revolution (Hughes & Drury, *Electric Motors and Drives*, 4th ed., ch. 3).
    """
    return 60.0 / (2.0 * math.pi * speed_constant_rpm_per_V)


def speed_constant_from_torque_constant(torque_constant_Nm_per_A: float) -> float:
    """Speed constant [rpm/V] of a torque constant [N*m/A]: ``Kv = 60 / (2 pi Kt)``."""
    return 60.0 / (2.0 * math.pi * torque_constant_Nm_per_A)


def stall_current(voltage_V: float, resistance_ohm: float) -> float:
    """Stall (locked-rotor) current ``V / R`` [A] of voltage [V] and terminal resistance [ohm].

    At standstill there is no back-EMF, so the steady armature current is ``V / R`` (Hughes &
    Drury, ch. 3, armature equivalent circuit).
    """
    return voltage_V / resistance_ohm


def stall_torque(voltage_V: float, resistance_ohm: float, torque_constant_Nm_per_A: float) -> float:
    """Stall torque ``K V / R`` [N*m] (``T = K i`` at the stall current; no friction).

    Parameters
    ----------
    voltage_V : float
        Terminal voltage [V].
    resistance_ohm : float
        Terminal resistance [ohm].
    torque_constant_Nm_per_A : float
        [N*m/A]
    """
    return torque_constant_Nm_per_A * voltage_V / resistance_ohm


def no_load_speed(
    voltage_V: float,
    resistance_ohm: float,
    torque_constant_Nm_per_A: float,
    viscous_friction_Nms: float = 0.0,
    coulomb_friction_Nm: float = 0.0,
) -> float:
    """Steady no-load speed of the model [rad/s]: ``(K V - R T_c) / (K^2 + R B)``.

    Parameters
    ----------
    voltage_V : float
        Terminal voltage [V].
    resistance_ohm : float
        [ohm]
    torque_constant_Nm_per_A : float
        [N*m/A]
    viscous_friction_Nms : float
        [N*m*s/rad]
    coulomb_friction_Nm : float
        [N*m]

    Notes
    -----
    From ``V = R i + K w`` and ``K i = B w + T_c`` (steady state, forward rotation, no load):
    the speed-torque line of the permanent-magnet machine (Hughes & Drury, ch. 3) with the
    friction as the only load. Without friction it is ``V / K``.
    """
    k = torque_constant_Nm_per_A
    return (k * voltage_V - resistance_ohm * coulomb_friction_Nm) / (
        k * k + resistance_ohm * viscous_friction_Nms
    )


def no_load_current(
    voltage_V: float,
    resistance_ohm: float,
    torque_constant_Nm_per_A: float,
    viscous_friction_Nms: float = 0.0,
    coulomb_friction_Nm: float = 0.0,
) -> float:
    """Steady no-load current of the model [A]: ``(B w0 + T_c) / K`` at the speed of
    :func:`no_load_speed` (same parameters and units)."""
    w0 = no_load_speed(
        voltage_V, resistance_ohm, torque_constant_Nm_per_A, viscous_friction_Nms,
        coulomb_friction_Nm,
    )  # fmt: skip
    return (viscous_friction_Nms * w0 + coulomb_friction_Nm) / torque_constant_Nm_per_A


def mechanical_time_constant(
    resistance_ohm: float, torque_constant_Nm_per_A: float, inertia_kgm2: float
) -> float:
    """Mechanical time constant ``J R / K^2`` [s] (the catalogue's, rotor only, ``L`` neglected).

    Parameters
    ----------
    resistance_ohm : float
        [ohm]
    torque_constant_Nm_per_A : float
        [N*m/A]
    inertia_kgm2 : float
        Rotor inertia [kg*m^2].

    Notes
    -----
    With ``L = 0`` and no friction, a voltage step gives ``J dw/dt = K (V - K w) / R``: a first
    order lag of time constant ``J R / K^2`` (Mohan, *Electric Drives*, ch. 7).
    """
    return inertia_kgm2 * resistance_ohm / torque_constant_Nm_per_A**2


# --------------------------------------------------------------------------------------------
# Results
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class CatalogueCheck:
    """One catalogue figure against the model's value of it.

    Attributes
    ----------
    name : str
        What is compared ("stall torque").
    key : str
        The catalogue key (``"stall_torque"``).
    catalogue_value : float
        The figure as given [SI].
    formula : str
        How the model gives it (``"K*V/R"``).
    model_value : float
        The model's value [SI].
    unit : str
        SI unit of both values.
    used : bool
        The figure was used to derive the model, so that part of the agreement holds by
        construction.
    """

    name: str
    key: str
    catalogue_value: float
    formula: str
    model_value: float
    unit: str
    used: bool = False

    @property
    def difference_percent(self) -> float:
        """``100 (model - catalogue) / catalogue`` [%]."""
        return 100.0 * (self.model_value - self.catalogue_value) / self.catalogue_value

    @property
    def ok(self) -> bool:
        """Within :data:`WARN_PERCENT`."""
        return abs(self.difference_percent) <= WARN_PERCENT

    @property
    def status(self) -> str:
        """``"ok"`` or ``"WARN"``."""
        return "ok" if self.ok else "WARN"

    def message(self) -> str:
        """One line for a warning: both figures and the difference."""
        shown, unit = _catalogue_units(self.unit)
        return (
            f"catalogue {self.name} ({self.key}) {_g(self.catalogue_value * shown)} {unit} "
            f"differs by {self.difference_percent:+.1f} % from the model's {self.formula} = "
            f"{_g(self.model_value * shown)} {unit} (more than {WARN_PERCENT:g} %)"
        )

    def as_dict(self) -> dict[str, Any]:
        """JSON-ready fields (SI values)."""
        return {
            "name": self.name,
            "key": self.key,
            "catalogue_value": self.catalogue_value,
            "formula": self.formula,
            "model_value": self.model_value,
            "unit": self.unit,
            "difference_percent": (
                self.difference_percent if math.isfinite(self.difference_percent) else None
            ),
            "status": self.status,
            "used_in_derivation": self.used,
        }


@dataclass(frozen=True)
class Derivation:
    """What :func:`derive_motor` made of a ``[motor]`` table.

    Attributes
    ----------
    values : dict
        Model key -> SI value for every key derived (given keys are not repeated).
    derived : tuple of (str, str)
        ``(model key, formula)`` of each derived key, in the order derived.
    checks : tuple of CatalogueCheck
        Every over-determined figure against the model.
    """

    values: dict[str, float]
    derived: tuple[tuple[str, str], ...]
    checks: tuple[CatalogueCheck, ...]

    @property
    def warnings(self) -> tuple[str, ...]:
        """Messages of the checks beyond :data:`WARN_PERCENT`."""
        return tuple(c.message() for c in self.checks if not c.ok)


# --------------------------------------------------------------------------------------------
# Derivation
# --------------------------------------------------------------------------------------------


def derive_motor(
    catalogue: Mapping[str, float | None],
    model: Mapping[str, float | None],
    *,
    source: str,
    table: str = "motor",
) -> Derivation:
    """Derive the missing model parameters from catalogue figures and check the figures.

    Parameters
    ----------
    catalogue : mapping
        Catalogue key (:data:`CATALOGUE_KEYS`) -> SI value, or ``None`` when not given:
        ``nominal_voltage`` [V], ``no_load_speed`` [rad/s], ``no_load_current`` [A],
        ``stall_torque`` [N*m], ``stall_current`` [A], ``speed_constant`` [rad/(V*s)],
        ``mechanical_time_constant`` [s]. All given values are finite and > 0.
    model : mapping
        Model key (:data:`MODEL_KEYS`) -> SI value as the table gives it, ``None`` when not
        given (for the friction keys: not written, even if they default to 0).
    source : str
        The scenario file, for messages.
    table : str
        Table name used in keys of messages.

    Returns
    -------
    Derivation
        The derived keys and the consistency checks.

    Raises
    ------
    ScenarioError
        Insufficient data (a model key that is neither given nor derivable), contradictory
        data (``torque_constant`` and ``speed_constant`` more than
        :data:`CONTRADICTION_PERCENT` apart, a no-load current the resistance cannot carry),
        a catalogue figure at a voltage not given, or figures that give a non-finite value.

    Notes
    -----
    Rules, in order of preference (each key from the first rule whose inputs are known,
    repeated until nothing more follows):

    - ``K``: ``torque_constant``; ``1 / speed_constant``; ``Ts / Is``; ``(V - R I0) / w0``
      (the armature equation at the no-load point, ``I0 = 0`` if not given); ``Ts R / V``.
    - ``R``: ``resistance``; ``V / Is``; ``K V / Ts``; ``tau_m K^2 / J``.
    - ``J``: ``inertia``; ``tau_m K^2 / R``.
    - friction: given keys as they are; with neither given, ``T_c = K I0`` (see the module
      notes), else none.
    """
    cat = {k: catalogue.get(k) for k in CATALOGUE_KEYS}
    known: dict[str, float | None] = {k: model.get(k) for k in MODEL_KEYS}
    given_catalogue = [k for k in CATALOGUE_KEYS if cat[k] is not None]

    def key(name: str) -> str:
        return f"{table}.{name}"

    if cat["nominal_voltage"] is None:
        for name in _AT_NOMINAL_VOLTAGE:
            if cat[name] is not None:
                raise ScenarioError(
                    "missing key: expected the nominal voltage the catalogue figures are "
                    f'given at (e.g. nominal_voltage = "24 V") beside {name}, found no '
                    "nominal_voltage",
                    source=source,
                    key=key("nominal_voltage"),
                )

    v = cat["nominal_voltage"]
    w0, i0 = cat["no_load_speed"], cat["no_load_current"]
    ts, i_s = cat["stall_torque"], cat["stall_current"]
    kv, tau_m = cat["speed_constant"], cat["mechanical_time_constant"]

    derived: list[tuple[str, str]] = []
    used: set[str] = set()
    values: dict[str, float] = {}

    if known["torque_constant"] is not None and kv is not None:
        k_kv = 1.0 / kv
        apart = 100.0 * abs(1.0 / known["torque_constant"] - kv) / kv  # as the check's figure
        if not apart <= CONTRADICTION_PERCENT:
            raise ScenarioError(
                "expected speed_constant and torque_constant to agree (Kt = 60 / (2 pi Kv) = "
                f"9.5493 / Kv) within {CONTRADICTION_PERCENT:g} %, found speed_constant "
                f"{_g(kv / _RPM)} rpm/V (Kt = {_g(k_kv)} N*m/A) against torque_constant "
                f"{_g(known['torque_constant'])} N*m/A, {apart:.1f} % apart; give one of them",
                source=source,
                key=key("speed_constant"),
            )

    def put(name: str, value: float, formula: str, inputs: tuple[str, ...]) -> None:
        known[name] = value
        values[name] = value
        derived.append((name, formula))
        used.update(inputs)

    for _ in range(4):  # each pass can add K, R or J; three passes suffice
        progress = False
        K, R, J = known["torque_constant"], known["resistance"], known["inertia"]
        if K is None:
            if kv is not None:
                put("torque_constant", 1.0 / kv, "1 / speed_constant", ("speed_constant",))
            elif ts is not None and i_s is not None:
                put(
                    "torque_constant",
                    ts / i_s,
                    "stall_torque / stall_current",
                    ("stall_torque", "stall_current"),
                )
            elif v is not None and w0 is not None and R is not None:
                drop = R * (i0 or 0.0)
                if not drop < v:
                    raise ScenarioError(
                        "expected a no-load current below nominal_voltage / resistance "
                        f"({_g(v / R)} A: the back-EMF V - R I0 at no load must be positive), "
                        f"found {_g(i0 or 0.0)} A",
                        source=source,
                        key=key("no_load_current"),
                    )
                put(
                    "torque_constant",
                    (v - drop) / w0,
                    "(nominal_voltage - R * no_load_current) / no_load_speed",
                    ("no_load_speed", "no_load_current") if i0 is not None else ("no_load_speed",),
                )
            elif ts is not None and v is not None and R is not None:
                put(
                    "torque_constant",
                    ts * R / v,
                    "stall_torque * R / nominal_voltage",
                    ("stall_torque",),
                )
            progress |= known["torque_constant"] is not None
        K = known["torque_constant"]
        if R is None:
            if i_s is not None and v is not None:
                put(
                    "resistance",
                    v / i_s,
                    "nominal_voltage / stall_current",
                    ("stall_current",),
                )
            elif ts is not None and v is not None and K is not None:
                put(
                    "resistance",
                    K * v / ts,
                    "K * nominal_voltage / stall_torque",
                    ("stall_torque",),
                )
            elif tau_m is not None and K is not None and J is not None:
                put(
                    "resistance",
                    tau_m * K * K / J,
                    "mechanical_time_constant * K^2 / J",
                    ("mechanical_time_constant",),
                )
            progress |= known["resistance"] is not None
        R = known["resistance"]
        if J is None and tau_m is not None and K is not None and R is not None:
            put(
                "inertia",
                tau_m * K * K / R,
                "mechanical_time_constant * K^2 / R",
                ("mechanical_time_constant",),
            )
            progress = True
        if not progress:
            break

    _require(known, cat, given_catalogue, source=source, key=key)
    K, R, J = known["torque_constant"], known["resistance"], known["inertia"]
    assert K is not None and R is not None and J is not None  # _require raised otherwise

    if known["viscous_friction"] is None and known["coulomb_friction"] is None and i0 is not None:
        put("coulomb_friction", K * i0, "K * no_load_current", ("no_load_current",))
    B = known["viscous_friction"] or 0.0
    tc = known["coulomb_friction"] or 0.0

    for name, value in values.items():
        if not (math.isfinite(value) and value > 0.0):
            raise ScenarioError(
                f"expected catalogue figures that give a finite {name} above 0, found "
                f"{value!r} from {dict(derived)[name]}",
                source=source,
                key=key(name),
            )

    checks: list[CatalogueCheck] = []

    def check(name: str, ckey: str, value: float, formula: str, model_value: float, unit: str):
        if not math.isfinite(model_value):
            raise ScenarioError(
                f"expected catalogue figures the model can be compared with, found that the "
                f"model's {formula} is not finite ({model_value!r})",
                source=source,
                key=key(ckey),
            )
        checks.append(CatalogueCheck(name, ckey, value, formula, model_value, unit, ckey in used))

    if kv is not None:
        check("speed constant", "speed_constant", kv, "1/K", 1.0 / K, "rad/(V*s)")
    if v is not None:
        if i_s is not None:
            check("stall current", "stall_current", i_s, "V/R", stall_current(v, R), "A")
        if ts is not None:
            check("stall torque", "stall_torque", ts, "K*V/R", stall_torque(v, R, K), "N*m")
        w_model = no_load_speed(v, R, K, B, tc)
        if w0 is not None:
            check(
                "no-load speed",
                "no_load_speed",
                w0,
                "(K*V - R*Tc)/(K^2 + R*B)",
                w_model,
                "rad/s",
            )
        if i0 is not None:
            check(
                "no-load current",
                "no_load_current",
                i0,
                "(B*w0 + Tc)/K",
                (B * w_model + tc) / K,
                "A",
            )
    if tau_m is not None:
        check(
            "mechanical time constant",
            "mechanical_time_constant",
            tau_m,
            "J*R/K^2",
            mechanical_time_constant(R, K, J),
            "s",
        )
    return Derivation(values=values, derived=tuple(derived), checks=tuple(checks))


_WAYS = {
    "torque_constant": (
        'torque_constant (e.g. "0.05 N*m/A"), speed_constant (e.g. "500 rpm/V"), stall_torque '
        "with stall_current, nominal_voltage with no_load_speed and resistance, or "
        "stall_torque with nominal_voltage and resistance"
    ),
    "resistance": (
        'resistance (e.g. "1.2 ohm"), nominal_voltage with stall_current, nominal_voltage with '
        "stall_torque and the torque constant, or mechanical_time_constant with the torque "
        "constant and inertia"
    ),
    "inertia": (
        'inertia (e.g. "25 g*cm^2"), or mechanical_time_constant with the resistance and the '
        "torque constant"
    ),
}


def _require(
    known: Mapping[str, float | None],
    cat: Mapping[str, float | None],
    given_catalogue: list[str],
    *,
    source: str,
    key: Any,
) -> None:
    """Raise the message of the first model key that is still missing."""
    for name in ("torque_constant", "resistance", "inertia"):
        if known[name] is None:
            found = (
                f"only {', '.join(given_catalogue)}"
                if given_catalogue
                else "no catalogue figures either"
            )
            raise ScenarioError(
                f"missing key: expected {_WAYS[name]} in [motor], found no {name} and {found}",
                source=source,
                key=key(name),
            )


# --------------------------------------------------------------------------------------------
# Showing a motor: SI beside catalogue units
# --------------------------------------------------------------------------------------------

_CATALOGUE_UNITS = {
    "ohm": (1.0, "ohm"),
    "H": (1e3, "mH"),
    "N*m/A": (1.0, "N*m/A"),
    "kg*m^2": (1e7, "g*cm^2"),
    "N*m*s/rad": (1e3 * 1000.0 * _RPM, "mN*m/krpm"),
    "N*m": (1e3, "mN*m"),
    "V": (1.0, "V"),
    "rad/s": (1.0 / _RPM, "rpm"),
    "A": (1.0, "A"),
    "rad/(V*s)": (1.0 / _RPM, "rpm/V"),
    "s": (1e3, "ms"),
}
"""SI unit -> (factor, catalogue unit): ``shown = factor * SI``."""

_SI_UNITS = {
    "resistance": "ohm",
    "inductance": "H",
    "torque_constant": "N*m/A",
    "inertia": "kg*m^2",
    "viscous_friction": "N*m*s/rad",
    "coulomb_friction": "N*m",
    "nominal_voltage": "V",
    "no_load_speed": "rad/s",
    "no_load_current": "A",
    "stall_torque": "N*m",
    "stall_current": "A",
    "speed_constant": "rad/(V*s)",
    "mechanical_time_constant": "s",
}


def _catalogue_units(si_unit: str) -> tuple[float, str]:
    return _CATALOGUE_UNITS.get(si_unit, (1.0, si_unit))


def _g(x: float, digits: int = 4) -> str:
    return f"{x:.{digits}g}"


def motor_as_dict(motor: Any) -> dict[str, Any]:
    """A :class:`~dcsim.scenario.schema.Motor` as one JSON-ready object.

    Parameters
    ----------
    motor : Motor
        The loaded motor (model keys filled, catalogue keys as given or ``None``).

    Returns
    -------
    dict
        The SI model keys (``resistance`` ... ``coulomb_friction``) at the top level, then
        ``kind``, ``speed_constant_rpm_per_V``, ``electrical_time_constant_s``,
        ``mechanical_time_constant_s`` (``J R / K^2`` of the model), ``catalogue`` (the
        figures given, SI), ``derived`` (key -> formula), ``checks`` (see
        :meth:`CatalogueCheck.as_dict`) and ``warnings``.
    """
    out: dict[str, Any] = {k: float(getattr(motor, k)) for k in MODEL_KEYS}
    out["kind"] = motor.kind
    out["speed_constant_rpm_per_V"] = speed_constant_from_torque_constant(motor.torque_constant)
    out["electrical_time_constant_s"] = motor.inductance / motor.resistance
    out["mechanical_time_constant_s"] = mechanical_time_constant(
        motor.resistance, motor.torque_constant, motor.inertia
    )
    out["catalogue"] = {
        k: getattr(motor, k, None) for k in CATALOGUE_KEYS if getattr(motor, k, None) is not None
    }
    out["derived"] = dict(getattr(motor, "derived", ()))
    checks = tuple(getattr(motor, "checks", ()))
    out["checks"] = [c.as_dict() for c in checks]
    out["warnings"] = [c.message() for c in checks if not c.ok]
    return out


def format_motor(motor: Any, *, title: str = "") -> str:
    """The model and the consistency table as text (``dcsim motor``).

    Parameters
    ----------
    motor : Motor
        The loaded motor.
    title : str
        First line (the scenario's name).

    Returns
    -------
    str
        Lines without a trailing newline: each model key in SI and in catalogue units with
        where it came from, the time constants, then one row per check (catalogue figure,
        model figure, difference in %, ok / WARN), then the warnings.
    """
    derived = dict(getattr(motor, "derived", ()))
    lines = [title] if title else []
    lines.append("Motor model (SI, and in catalogue units):")
    rows = []
    for name in MODEL_KEYS:
        value = float(getattr(motor, name))
        unit = _SI_UNITS[name]
        factor, cat_unit = _catalogue_units(unit)
        shown = f"{_g(value * factor)} {cat_unit}" if cat_unit != unit else ""
        if name == "torque_constant":
            shown = f"Kv {_g(speed_constant_from_torque_constant(value))} rpm/V"
        where = f"from {derived[name]}" if name in derived else "given"
        if name not in derived and name.endswith("friction") and value == 0.0:
            where = "default (none)"
        rows.append((name, f"{_g(value, 6)} {unit}", shown, where))
    te = motor.inductance / motor.resistance
    tm = mechanical_time_constant(motor.resistance, motor.torque_constant, motor.inertia)
    rows.append(("electrical time constant", f"{_g(te)} s", f"{_g(te * 1e3)} ms", "L/R"))
    rows.append(("mechanical time constant", f"{_g(tm)} s", f"{_g(tm * 1e3)} ms", "J*R/K^2"))
    widths = [max(len(r[i]) for r in rows) for i in range(3)]
    for r in rows:
        lines.append(
            f"  {r[0]:<{widths[0]}}  {r[1]:<{widths[1]}}  {r[2]:<{widths[2]}}  {r[3]}".rstrip()
        )
    given = [k for k in CATALOGUE_KEYS if getattr(motor, k, None) is not None]
    checks = tuple(getattr(motor, "checks", ()))
    lines.append("")
    if not given:
        lines.append("Catalogue data: none given (the model keys are used as written).")
        return "\n".join(lines)
    figures = []
    for k in given:
        factor, unit = _catalogue_units(_SI_UNITS[k])
        figures.append(f"{k} {_g(getattr(motor, k) * factor)} {unit}")
    lines += textwrap.wrap(
        "Catalogue data: " + ", ".join(figures), width=100, subsequent_indent="  "
    )
    lines.append("")
    if not checks:
        lines.append("Consistency: no figure is over-determined, nothing to compare.")
        return "\n".join(lines)
    lines.append(f"Consistency of the catalogue data (WARN beyond {WARN_PERCENT:g} %):")
    table = [("check", "catalogue", "model", "difference", "")]
    for c in checks:
        factor, unit = _catalogue_units(c.unit)
        table.append(
            (
                c.name,
                f"{_g(c.catalogue_value * factor)} {unit}",
                f"{c.formula} = {_g(c.model_value * factor)} {unit}",
                f"{c.difference_percent + 0.0:+.2f} %".replace("-0.00", "+0.00"),
                c.status + ("  (used in the derivation)" if c.used else ""),
            )
        )
    widths = [max(len(r[i]) for r in table) for i in range(4)]
    for r in table:
        lines.append(
            f"  {r[0]:<{widths[0]}}  {r[1]:>{widths[1]}}  {r[2]:>{widths[2]}}  "
            f"{r[3]:>{widths[3]}}  {r[4]}".rstrip()
        )
    warnings = [c.message() for c in checks if not c.ok]
    if warnings:
        lines.append("")
        lines += [f"WARNING: {w}" for w in warnings]
    return "\n".join(lines)


# --------------------------------------------------------------------------------------------
# The machine library's keys: field, commutator, shaft (``dcsim motor``)
# --------------------------------------------------------------------------------------------


def _steady_field_current(sc: Any) -> tuple[float, str]:
    """Field current [A] at which the derived torque constant is taken, and the formula
    (the rule of :func:`dcsim.scenario.machines.rated_flux_constant`)."""
    m = sc.motor
    if m.kind == "separately_excited":
        return m.field_voltage / m.field_resistance, "field_voltage / field_resistance"
    if m.kind == "series":
        return (
            sc.supply.voltage / (m.resistance + m.field_resistance),
            "supply.voltage / (resistance + field_resistance), the locked-rotor current",
        )
    return sc.supply.voltage / m.field_resistance, "supply.voltage / field_resistance"


def _max_speed(sc: Any) -> tuple[float | None, str]:
    """Over-speed limit [rad/s] (``None``: none) and where it comes from (the engine's rule,
    :func:`dcsim.engine.assemble.default_max_speed`)."""
    from dcsim.engine.assemble import default_max_speed

    m = sc.motor
    if m.max_speed is not None:
        return float(m.max_speed), "given"
    value, how = default_max_speed(sc)
    return (value if value > 0.0 else None), how


def _commutator(m: Any) -> dict[str, Any] | None:
    if m.commutator_segments is None:
        return None
    n, pp = int(m.commutator_segments), int(m.pole_pairs)
    per_period = n if n % 2 == 0 else 2 * n
    return {
        "segments": n,
        "pole_pairs": pp,
        "pulses_per_electrical_turn": per_period,
        "pulses_per_turn": per_period * pp,
        "ripple_pp_fraction": 1.0 - math.cos(math.pi / per_period),
    }


def _shaft(sc: Any) -> dict[str, Any] | None:
    if sc.shaft is None:
        return None
    from dcsim.engine import layout
    from dcsim.engine.assemble import parameter_vector

    p = parameter_vector(sc)
    j1, j2 = float(p[layout.P_J1]), float(p[layout.P_J] - p[layout.P_J1])
    out: dict[str, Any] = {
        "stiffness_Nm_per_rad": sc.shaft.stiffness,
        "damping_Nms_per_rad": sc.shaft.damping,
        "backlash_rad": sc.shaft.backlash,
        "motor_side_inertia_kgm2": j1,
        "load_side_inertia_kgm2": j2,
        "resonance_rad_s": None,
        "resonance_Hz": None,
    }
    if j2 > 0.0:
        wr = math.sqrt(sc.shaft.stiffness * (j1 + j2) / (j1 * j2))
        out["resonance_rad_s"], out["resonance_Hz"] = wr, wr / (2.0 * math.pi)
    return out


def machine_as_dict(sc: Any) -> dict[str, Any]:
    """The machine-library part of a scenario's motor as JSON-ready objects (SI).

    Parameters
    ----------
    sc : Scenario
        The loaded scenario (the supply voltage and the load side are needed too).

    Returns
    -------
    dict
        ``field`` (wound-field kinds: the field winding, where the flux comes from, the steady
        field current and the torque constant derived at it, the over-speed limit),
        ``commutator`` (with ``commutator_segments``) and ``shaft`` (with ``[shaft]``: the
        two-mass resonance ``sqrt(k (J1 + J2) / (J1 J2))``); each only when it applies.
    """
    m = sc.motor
    out: dict[str, Any] = {}
    if m.kind != "permanent_magnet":
        i_f, how = _steady_field_current(sc)
        w_max, w_from = _max_speed(sc)
        field: dict[str, Any] = {
            "kind": m.kind,
            "field_resistance_ohm": m.field_resistance,
            "field_inductance_H": m.field_inductance,
            "field_time_constant_s": m.field_inductance / m.field_resistance,
            "flux_from": "magnetisation" if m.magnetisation is not None else "mutual_inductance",
            "mutual_inductance_H": m.mutual_inductance,
            "magnetisation_points": None if m.magnetisation is None else len(m.magnetisation),
            "magnetisation_speed_rad_s": m.magnetisation_speed,
            "steady_field_current_A": i_f,
            "steady_field_current_from": how,
            "torque_constant_Nm_per_A": m.torque_constant,
            "max_speed_rad_s": w_max,
            "max_speed_from": w_from,
        }
        if m.kind == "series":
            loop_r = m.resistance + m.field_resistance
            field["armature_loop_time_constant_s"] = (m.inductance + m.field_inductance) / loop_r
        if m.kind == "separately_excited":
            field["field_voltage_V"] = m.field_voltage
            field["base_speed_rad_s"] = m.base_speed
        if m.kind == "compound":
            field["compound"] = m.compound
            field["series_field_resistance_ohm"] = m.series_field_resistance
            field["series_field_inductance_H"] = m.series_field_inductance
            field["series_turns_ratio"] = m.series_turns_ratio
        out["field"] = field
    commutator = _commutator(m)
    if commutator is not None:
        out["commutator"] = commutator
    shaft = _shaft(sc)
    if shaft is not None:
        out["shaft"] = shaft
    return out


def _milli(henry: float) -> str:
    """An inductance in mH beside the SI value, when below 1 H."""
    return f"{_g(henry * 1e3)} mH" if henry < 1.0 else ""


def _opt(x: float | None, unit: str, digits: int = 4) -> str:
    return "-" if x is None else f"{_g(x, digits)} {unit}"


def format_machine(sc: Any) -> str:
    """The machine-library part of ``dcsim motor``: field, commutator and shaft sections.

    Parameters
    ----------
    sc : Scenario
        The loaded scenario.

    Returns
    -------
    str
        Lines without a trailing newline; ``""`` for a permanent-magnet motor without
        commutator ripple or ``[shaft]``.
    """
    data = machine_as_dict(sc)
    m = sc.motor
    blocks: list[list[tuple[str, str, str, str]]] = []
    heads: list[str] = []
    field = data.get("field")
    if field is not None:
        kind = field["kind"]
        winding = "series winding" if kind == "series" else "field"
        rows = [("kind", kind.replace("_", " "), "", "motor.kind")]
        rows.append((f"{winding} resistance", f"{_g(m.field_resistance, 6)} ohm", "", "given"))
        rows.append(
            (
                f"{winding} inductance",
                f"{_g(m.field_inductance, 6)} H",
                _milli(m.field_inductance),
                "given",
            )
        )
        tf = field["field_time_constant_s"]
        rows.append((f"{winding} time constant", f"{_g(tf)} s", f"{_g(tf * 1e3)} ms", "L_f/R_f"))
        if kind == "series":
            ta = field["armature_loop_time_constant_s"]
            rows.append(
                ("armature loop time constant", f"{_g(ta)} s", f"{_g(ta * 1e3)} ms",
                 "(L + L_f)/(R + R_f)")
            )  # fmt: skip
        if m.magnetisation is not None:
            ws = m.magnetisation_speed
            rows.append(
                (
                    "flux from",
                    f"magnetisation curve, {len(m.magnetisation)} points",
                    f"at {_g(ws)} rad/s ({_g(ws / _RPM)} rpm)",
                    "K = E / w_m, linear between points",
                )
            )
        else:
            rows.append(
                (
                    "flux from",
                    f"mutual inductance M = {_g(m.mutual_inductance, 6)} H",
                    "",
                    "K = M i_f (linear)",
                )
            )
        if kind == "separately_excited":
            rows.append(("field voltage", f"{_g(m.field_voltage, 6)} V", "", "given"))
            if m.base_speed is not None:
                rows.append(
                    (
                        "base speed",
                        f"{_g(m.base_speed, 6)} rad/s",
                        f"{_g(m.base_speed / _RPM)} rpm",
                        "field weakened above it",
                    )
                )
            else:
                rows.append(("base speed", "none", "", "no field weakening"))
        if kind == "compound":
            rows.append(("compound sense", m.compound, "", "motor.compound"))
            rows.append(
                ("series winding resistance", f"{_g(m.series_field_resistance, 6)} ohm", "",
                 "given")
            )  # fmt: skip
            rows.append(
                (
                    "series winding inductance",
                    f"{_g(m.series_field_inductance, 6)} H",
                    _milli(m.series_field_inductance),
                    "given",
                )
            )
            rows.append(
                ("series turns ratio", f"{_g(m.series_turns_ratio, 6)}", "",
                 "series ampere-turns per armature amp, in field amps")
            )  # fmt: skip
        i_f = field["steady_field_current_A"]
        rows.append(
            (
                "series field current" if kind == "series" else "steady field current",
                f"{_g(i_f, 6)} A",
                "",
                field["steady_field_current_from"],
            )
        )
        rows.append(
            (
                "torque constant",
                f"{_g(m.torque_constant, 6)} N*m/A",
                f"at {_g(i_f)} A",
                "derived: flux constant at that field current",
            )
        )
        w_max = field["max_speed_rad_s"]
        rows.append(
            (
                "max speed",
                _opt(w_max, "rad/s", 6) if w_max is not None else field["max_speed_from"],
                "" if w_max is None else f"{_g(w_max / _RPM)} rpm",
                field["max_speed_from"] if w_max is not None else "motor.max_speed",
            )
        )
        heads.append(f"Field ({kind.replace('_', ' ')} machine):")
        blocks.append(rows)
    com = data.get("commutator")
    if com is not None:
        heads.append("Commutator ripple:")
        blocks.append(
            [
                ("segments", f"{com['segments']}", "", "motor.commutator_segments"),
                ("pole pairs", f"{com['pole_pairs']}", "", "motor.pole_pairs"),
                (
                    "pulses",
                    f"{com['pulses_per_turn']} per turn",
                    f"{com['pulses_per_electrical_turn']} per pole pair",
                    "N for even N, 2N for odd N, per pole pair",
                ),
                (
                    "ripple pk-pk / max",
                    f"{_g(com['ripple_pp_fraction'])}",
                    f"{_g(100 * com['ripple_pp_fraction'])} %",
                    "1 - cos(pi/p)",
                ),
            ]
        )
    sh = data.get("shaft")
    if sh is not None:
        heads.append("Shaft (two masses: rotor side J1, load side J2):")
        b = sh["backlash_rad"]
        rows = [
            ("stiffness", f"{_g(sh['stiffness_Nm_per_rad'], 6)} N*m/rad", "", "shaft.stiffness"),
            ("damping", f"{_g(sh['damping_Nms_per_rad'], 6)} N*m*s/rad", "", "shaft.damping"),
            ("backlash", f"{_g(b, 6)} rad", f"{_g(math.degrees(b))} deg", "total play"),
            ("J1 (rotor side)", f"{_g(sh['motor_side_inertia_kgm2'], 6)} kg*m^2", "", ""),
            ("J2 (load side)", f"{_g(sh['load_side_inertia_kgm2'], 6)} kg*m^2", "", ""),
        ]
        if sh["resonance_rad_s"] is not None:
            rows.append(
                (
                    "resonance",
                    f"{_g(sh['resonance_rad_s'])} rad/s",
                    f"{_g(sh['resonance_Hz'])} Hz",
                    "sqrt(k (J1 + J2) / (J1 J2))",
                )
            )
        else:
            rows.append(("resonance", "-", "", "no load inertia known (J2 = 0)"))
        blocks.append(rows)
    lines: list[str] = []
    for head, rows in zip(heads, blocks, strict=True):
        widths = [max(len(r[i]) for r in rows) for i in range(3)]
        lines.append(head)
        for r in rows:
            lines.append(
                f"  {r[0]:<{widths[0]}}  {r[1]:<{widths[1]}}  {r[2]:<{widths[2]}}  {r[3]}".rstrip()
            )
        lines.append("")
    return "\n".join(lines).rstrip("\n")
