"""Loader rules of the machine library: wound-field kinds, commutator ripple, ``[shaft]``.

Two steps of :func:`dcsim.scenario.load.load_scenario`: :func:`wound_field_derivation`
derives the torque constant a wound-field machine's other users need (step choice, tuning
plants) from its field, and :func:`machine_problem` refuses what the machine-library kernel
does not model, naming the key, what is expected and what was found.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Any

from dcsim.errors import ScenarioError
from dcsim.plant.field import curve_arrays, flux_constant
from dcsim.scenario import datasheet
from dcsim.scenario.schema import KEYS

_Show = Callable[[str], str]
_Problem = tuple[str, str] | None

WOUND_FIELD = ("separately_excited", "shunt", "series", "compound")
FIELD_KEYS = (
    "field_resistance",
    "field_inductance",
    "mutual_inductance",
    "magnetisation",
    "magnetisation_speed",
    "field_voltage",
    "base_speed",
    "compound",
    "series_field_resistance",
    "series_field_inductance",
    "series_turns_ratio",
)
REQUIRED_FOR = {
    "separately_excited": ("field_resistance", "field_inductance", "field_voltage"),
    "shunt": ("field_resistance", "field_inductance"),
    "series": ("field_resistance", "field_inductance"),
    "compound": (
        "field_resistance",
        "field_inductance",
        "series_field_resistance",
        "series_field_inductance",
        "series_turns_ratio",
    ),
}
ONLY_FOR = {
    "field_voltage": ("separately_excited",),
    "base_speed": ("separately_excited",),
    "compound": ("compound",),
    "series_field_resistance": ("compound",),
    "series_field_inductance": ("compound",),
    "series_turns_ratio": ("compound",),
}


def uses_machine_kernel(values: dict[str, Any], present: set[str]) -> bool:
    """Whether the run needs :mod:`dcsim.engine.machine_kernel` (flat ``table.key`` values)."""
    return (
        values.get("motor.kind", "permanent_magnet") != "permanent_magnet"
        or values.get("motor.commutator_segments") is not None
        or "shaft" in present
    )


def rated_flux_constant(values: dict[str, Any], source: str = "<scenario>") -> tuple[float, str]:
    """Flux constant [V*s/rad] of a wound-field machine at its field's steady current, and
    the formula, for the derived ``torque_constant``."""
    kind = values["motor.kind"]
    mag_i, mag_k = curve_arrays(values["motor.magnetisation"], values["motor.magnetisation_speed"])
    m = values["motor.mutual_inductance"]
    rf = values["motor.field_resistance"]
    vs = values.get("supply.voltage")
    if vs is None and kind != "separately_excited":
        raise ScenarioError(
            'missing key: expected a voltage, e.g. voltage = "24 V" in [supply], found no voltage',
            source=source,
            key="supply.voltage",
        )
    if kind != "separately_excited" and not vs > 0.0:
        raise ScenarioError(
            f"expected a supply voltage > 0 for a {kind} machine (its derived torque constant "
            "is the flux at the field current the supply drives), found "
            f"{vs:.6g} V",
            source=source,
            key="supply.voltage",
        )
    if kind == "separately_excited":
        i_f, how = values["motor.field_voltage"] / rf, "field_voltage / field_resistance"
    elif kind == "series":
        i_f = vs / (values["motor.resistance"] + rf)
        how = "supply.voltage / (resistance + field_resistance) (locked-rotor current)"
    else:
        i_f, how = vs / rf, "supply.voltage / field_resistance"
    return flux_constant(i_f, mag_i, mag_k, m), f"flux constant at the field current {how}"


def wound_field_derivation(
    values: dict[str, Any], given: set[str], source: str
) -> datasheet.Derivation:
    """Check the wound-field keys of ``[motor]`` and derive ``torque_constant`` (in place).

    Raises
    ------
    ScenarioError
        A key the kind needs is missing, or one it cannot use is given.
    """
    kind = values["motor.kind"]
    for key in ("torque_constant", *datasheet.CATALOGUE_KEYS):
        if f"motor.{key}" in given:
            raise ScenarioError(
                f"expected no {key} for a {kind} machine (its flux follows the field: give "
                f"mutual_inductance or a magnetisation table), found {key} written",
                source=source,
                key=f"motor.{key}",
            )
    for key in ("resistance", "inertia", *REQUIRED_FOR[kind]):
        if values.get(f"motor.{key}") is None:
            example = KEYS["motor"][key].example
            raise ScenarioError(
                f"missing key: expected {key} in [motor] for a {kind.replace('_', ' ')} "
                f'machine, e.g. {key} = "{example}", found no {key}',
                source=source,
                key=f"motor.{key}",
            )
    for key, kinds in ONLY_FOR.items():
        if f"motor.{key}" in given and kind not in kinds:
            raise ScenarioError(
                f"expected no {key} for a {kind} machine (it belongs to the "
                f"{' / '.join(kinds)} kind), found {key} written",
                source=source,
                key=f"motor.{key}",
            )
    has_m = values["motor.mutual_inductance"] is not None
    table = values["motor.magnetisation"]
    if has_m == (table is not None):
        raise ScenarioError(
            "expected exactly one of mutual_inductance (linear magnetics) or magnetisation (a "
            "table of field current against back-EMF), found " + ("both" if has_m else "neither"),
            source=source,
            key="motor.magnetisation" if has_m else "motor.mutual_inductance",
        )
    if table is not None:
        _check_table(table, values["motor.magnetisation_speed"], source)
    elif "motor.magnetisation_speed" in given:
        raise ScenarioError(
            "expected no magnetisation_speed without a magnetisation table (it is the speed "
            "at which the table's back-EMF was measured; mutual_inductance needs none), found "
            "magnetisation_speed written",
            source=source,
            key="motor.magnetisation_speed",
        )
    k, formula = rated_flux_constant(values, source)
    if not k > 0.0:
        raise ScenarioError(
            f"expected a field that makes flux, found a flux constant of {k:.3g} V*s/rad at "
            "the steady field current (check the magnetisation table)",
            source=source,
            key="motor.magnetisation" if table is not None else "motor.mutual_inductance",
        )
    values["motor.torque_constant"] = k
    return datasheet.Derivation(values={}, derived=(("torque_constant", formula),), checks=())


def _check_table(table: tuple[tuple[float, float], ...], speed: float | None, source: str) -> None:
    key = "motor.magnetisation"
    if speed is None:
        raise ScenarioError(
            "missing key: a magnetisation table gives back-EMF at a speed; expected "
            'magnetisation_speed = "1500 rpm", found no magnetisation_speed',
            source=source,
            key="motor.magnetisation_speed",
        )
    if table[0][0] != 0.0:
        raise ScenarioError(
            f"expected the table to start at 0 A (the residual back-EMF there, often 0 V), "
            f"found its first point at {table[0][0]:.6g} A",
            source=source,
            key=key,
        )
    for n in range(1, len(table)):
        (i0, e0), (i1, e1) = table[n - 1], table[n]
        if not (i1 > i0 and e1 > e0):
            raise ScenarioError(
                f"expected field current and back-EMF both rising from point to point, found "
                f"point {n} ({i1:.6g} A, {e1:.6g} V) after ({i0:.6g} A, {e0:.6g} V)",
                source=source,
                key=key,
            )
    if table[0][1] < 0.0:
        raise ScenarioError(
            f"expected a back-EMF >= 0 V at 0 A, found {table[0][1]:.6g} V",
            source=source,
            key=key,
        )


FLUX_FEEDFORWARD_KEYS = (
    "control.current.back_emf_feedforward",
    "control.speed.acceleration_feedforward",
    "control.speed.friction_feedforward",
)
"""Controller feed-forward switches that scale by the torque constant (refused where the
flux varies)."""


def machine_problem(
    values: dict[str, Any], present: set[str], given: set[str], show: _Show
) -> _Problem:
    """What the machine-library kernel cannot run, as ``(key, message)``; None when fine."""
    kind = values["motor.kind"]
    if kind == "permanent_magnet":
        for key in FIELD_KEYS:
            if f"motor.{key}" in given:
                return (
                    f"motor.{key}",
                    f"expected no {key} for a permanent-magnet machine (field keys belong to "
                    f'the wound-field kinds: motor.kind = "separately_excited", "shunt", '
                    f'"series" or "compound"), found {show(f"motor.{key}")}',
                )
    for key, low in (("commutator_segments", 2), ("pole_pairs", 1)):
        v = values[f"motor.{key}"]
        if v is not None and (v != round(v) or v < low or v > 1000):
            return (
                f"motor.{key}",
                f"expected a whole number from {low} to 1000, found {show(f'motor.{key}')}",
            )
    if "shaft" in present and values["shaft.backlash"] >= 2.0 * math.pi:
        return (
            "shaft.backlash",
            f"expected a total play of less than one turn (360 deg), found "
            f"{show('shaft.backlash')}: more play than a turn is no coupling "
            "(check the unit: deg, not rad)",
        )
    if not uses_machine_kernel(values, present):
        return None
    what = _feature(values, present)
    refuse: list[tuple[str, str]] = []
    if values["bridge.model"] != "ideal":
        refuse.append(("bridge.model", f"bridge.model = 'ideal', found {show('bridge.model')}"))
    if values["motor.kind"] != "permanent_magnet":
        for key in ("thermal.magnet_material", "thermal.magnet_coefficient"):
            if values.get(key) is not None:
                return (
                    key,
                    f"expected no magnet temperature coefficient: a "
                    f"{values['motor.kind'].replace('_', ' ')} machine has no magnets (its "
                    f"flux follows the field current), found {show(key)}",
                )
    varying = kind in ("series", "shunt", "compound") or (
        kind == "separately_excited" and values["motor.base_speed"] is not None
    )
    for key in FLUX_FEEDFORWARD_KEYS:
        if varying and values.get(key):
            return (
                key,
                f"expected {key} = false for a {kind.replace('_', ' ')} machine: the "
                "feed-forward uses one torque constant (the derived motor.torque_constant), "
                "but this machine's flux changes with its "
                + ("speed above base_speed" if kind == "separately_excited" else "currents")
                + ", so the feed-forward would be wrong away from one operating point; found "
                "true",
            )
    if refuse:
        key, expected = refuse[0]
        return (
            key,
            f"expected {expected}: {what} runs on the machine-library kernel, which drives the "
            "armature through the ideal averaged bridge (the averaged and switching PWM "
            "models are not joined to it yet)",
        )
    return None


def _feature(values: dict[str, Any], present: set[str]) -> str:
    if values["motor.kind"] != "permanent_magnet":
        return f"a {values['motor.kind'].replace('_', ' ')} machine"
    if values["motor.commutator_segments"] is not None:
        return "commutator ripple (motor.commutator_segments)"
    return "a compliant shaft ([shaft])"
