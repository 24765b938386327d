"""Readable text form of a run summary, for the terminal.

The summary itself is the plain dict of SI numbers in :attr:`SimulationResult.summary` (keys as
in ``summary.json``); this module only lays it out. It also holds :data:`CAUTION`, the line that
every report dcsim writes carries.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

from dcsim.results.trace import ENERGY_KEYS

CAUTION = (
    "Caution: simulation is not a substitute for the component makers' data, local electrical "
    "codes and licensed practice; verify on hardware with protection in place."
)
"""Plain caution carried by every report, plot and summary dcsim writes."""

RAD_S_PER_RPM = 2.0 * math.pi / 60.0
"""One revolution per minute in radians per second [rad/s per rpm]."""

_SUPPLY_KEY = "energy_from_supply_J"
_RESIDUAL_KEY = "energy_balance_residual_J"

_ENERGY_LABELS = {
    "energy_from_supply_J": "delivered by the source",
    "energy_source_loss_J": "source + wiring resistance loss",
    "energy_copper_loss_J": "armature copper loss",
    "energy_friction_J": "friction (viscous + coulomb)",
    "energy_to_load_J": "to the load",
    "energy_gear_loss_J": "gear loss",
    "energy_shaft_lock_J": "absorbed by the shaft lock",
    "energy_coupling_J": "lost or carried off by load coupling",
    "kinetic_energy_change_J": "change of kinetic energy",
    "stored_energy_change_J": "change of stored energy (L, C)",
    "energy_bridge_loss_J": "bridge loss (switches, diodes)",
    "energy_to_brake_resistor_J": "to the brake resistor",
    "energy_capacitor_esr_J": "bus capacitor ESR loss",
    "energy_precharge_loss_J": "pre-charge resistor loss",
    "energy_current_sense_J": "current-sense resistor loss",
    "energy_fuse_arc_J": "supply inductance at the fuse opening",
    "energy_brush_drop_J": "brush contact drop",
    "energy_brush_friction_J": "brush friction",
    "energy_iron_loss_J": "iron loss (hysteresis + eddy current)",
    "energy_field_copper_loss_J": "field copper loss",
    "energy_shaft_damping_J": "shaft damping",
}


def energy_terms(summary: Mapping[str, Any]) -> list[str]:
    """Keys of the energy account found in a summary, supply first, in a stable order.

    Parameters
    ----------
    summary : mapping
        Run summary (SI numbers).

    Returns
    -------
    list of str
        ``energy_from_supply_J`` (if present), then the known terms of
        :data:`~dcsim.results.trace.ENERGY_KEYS` that are present, then any further
        ``energy_*_J`` keys (new losses) in sorted order. The residual key is never included.
    """
    known = [k for k in ENERGY_KEYS if k in summary]
    extra = sorted(
        k
        for k in summary
        if k.startswith("energy_")
        and k.endswith("_J")
        and k not in ENERGY_KEYS
        and k != _RESIDUAL_KEY
    )
    return known + extra


def energy_residual(summary: Mapping[str, Any]) -> float:
    """Residual of the energy account [J].

    Parameters
    ----------
    summary : mapping
        Run summary (SI numbers) holding ``energy_from_supply_J`` and the other terms.

    Returns
    -------
    float
        ``energy_balance_residual_J`` when the summary carries it; otherwise the energy delivered
        by the source minus the sum of every other term [J]. ``nan`` when the supply term is
        missing.
    """
    if _RESIDUAL_KEY in summary:
        return float(summary[_RESIDUAL_KEY])
    if _SUPPLY_KEY not in summary:
        return math.nan
    spent = math.fsum(float(summary[k]) for k in energy_terms(summary) if k != _SUPPLY_KEY)
    return float(summary[_SUPPLY_KEY]) - spent


def _num(value: Any, unit: str = "", digits: int = 5) -> str:
    """A number with ``digits`` significant figures and its unit, or ``n/a``."""
    if value is None:
        return "n/a"
    try:
        x = float(value)
    except (TypeError, ValueError):
        return str(value)
    if math.isnan(x):
        return "n/a"
    text = f"{x:.{digits}g}"
    return f"{text} {unit}" if unit else text


def _time(value: Any) -> str:
    """A time [s] shown in ms below one second."""
    try:
        x = float(value)
    except (TypeError, ValueError):
        return _num(value)
    if math.isfinite(x) and abs(x) < 1.0:
        return _num(x * 1e3, "ms")
    return _num(x, "s")


def format_summary(summary: Mapping[str, Any]) -> str:
    """Lay a run summary out as a text table for the terminal.

    Parameters
    ----------
    summary : mapping
        Scalar results of a run keyed as in ``summary.json`` (SI numbers): ``peak_current_A``
        [A], ``peak_current_time_s`` [s], ``i2t_A2s`` [A^2*s], ``final_speed_rad_s`` [rad/s],
        ``min_bus_voltage_V`` / ``peak_bus_voltage_V`` [V] and the ``energy_*_J`` terms [J].
        Missing entries are shown as ``n/a``.

    Returns
    -------
    str
        Several lines, without a trailing newline, ending with :data:`CAUTION`.

    Notes
    -----
    The residual of the energy account is the summary's ``energy_balance_residual_J`` when
    present, else the source energy minus the sum of every other term; it is also shown relative
    to the source energy.
    """
    get = summary.get
    width = 42
    lines = ["Run summary"]

    def row(label: str, text: str) -> None:
        lines.append(f"  {label:<{width}}{text}")

    peak = _num(get("peak_current_A"), "A")
    if get("peak_current_time_s") is not None:
        peak += f"  at {_time(get('peak_current_time_s'))}"
    row("peak armature current", peak)
    row("I²t of the armature current", _num(get("i2t_A2s"), "A²s"))

    speed = get("final_speed_rad_s")
    speed_text = _num(speed, "rad/s")
    if speed is not None and math.isfinite(float(speed)):
        speed_text += f"  ({_num(float(speed) / RAD_S_PER_RPM, 'rpm')})"
    row("final speed", speed_text)
    bus_text = f"min {_num(get('min_bus_voltage_V'), 'V')}"
    if get("min_bus_voltage_time_s") is not None:
        bus_text += f" at {_time(get('min_bus_voltage_time_s'))}"
    row("bus voltage", bus_text + f"   max {_num(get('peak_bus_voltage_V'), 'V')}")

    if get("bridge_model") is not None:
        _power_stage_rows(summary, row)
    if get("peak_winding_temperature_K") is not None:
        from dcsim.plant.thermal import celsius

        peak_c = celsius(float(get("peak_winding_temperature_K")))
        row(
            "winding temperature (thermal model)",
            f"peak {_num(peak_c, 'degC', digits=4)} at "
            f"{_time(get('peak_winding_temperature_time_s'))}, final "
            f"{_num(celsius(float(get('final_winding_temperature_K'))), 'degC', digits=4)}",
        )
    if get("control_mode") is not None:
        lines.append("")
        lines.append(f"  {'Closed loop':<{width}}mode {get('control_mode')}")
        _control_rows(summary, row)

    terms = energy_terms(summary)
    if terms or _RESIDUAL_KEY in summary:
        lines.append("")
        lines.append(f"  {'Energy account':<{width}}[J]")
        for key in terms:
            label = _ENERGY_LABELS.get(key, key.removeprefix("energy_").removesuffix("_J"))
            row(("" if key == _SUPPLY_KEY else "  ") + label, _num(get(key), digits=6))
        residual = energy_residual(summary)
        text = _num(residual, digits=3)
        supply = get(_SUPPLY_KEY)
        if supply is not None and float(supply) != 0.0 and math.isfinite(residual):
            text += f"  ({_num(100.0 * residual / float(supply), '%', digits=2)} of the source)"
        row("residual (source - all terms)", text)

    lines.append("")
    lines.append(CAUTION)
    return "\n".join(lines)


_CONTROL_UNITS = {"A": "A", "rad_s": "rad/s", "rad": "rad"}


def _control_rows(summary: Mapping[str, Any], row) -> None:
    """Rows of a closed-loop run: the response metrics of the controlled quantity."""
    get = summary.get
    unit_key = next((u for u in ("rad_s", "rad", "A") if f"final_error_{u}" in summary), "A")
    unit = _CONTROL_UNITS[unit_key]
    row("fastest loop sample time", _time(get("control_sample_time_s")))
    if "rise_time_s" in summary:
        row("rise time (10-90 %)", _time(get("rise_time_s")))
        row("overshoot", _num(get("overshoot_percent"), "%", digits=3))
        row("settling time (2 %)", _time(get("settling_time_s")))
        row("steady-state error", _num(get(f"steady_state_error_{unit_key}"), unit, digits=3))
    if f"peak_following_error_{unit_key}" in summary:
        row(
            "following error during the move",
            f"peak {_num(get(f'peak_following_error_{unit_key}'), unit, digits=3)}   "
            f"rms {_num(get(f'rms_following_error_{unit_key}'), unit, digits=3)}",
        )
    row("error at the end", _num(get(f"final_error_{unit_key}"), unit, digits=3))
    for step in get("load_steps") or []:
        rec = step.get("recovery_time_s")
        row(
            f"load change at {_time(step['time_s'])}",
            f"dip {_num(step[f'dip_{unit_key}'], unit, digits=3)}, back within "
            f"{_num(step[f'band_{unit_key}'], unit, digits=3)} "
            + ("never" if rec is None else f"after {_time(rec)}"),
        )
    if get("time_in_current_limit_s") is not None:
        row("time at the current limit", _time(get("time_in_current_limit_s")))
    row("time at the voltage limit", _time(get("time_in_voltage_limit_s")))


def _power_stage_rows(summary: Mapping[str, Any], row) -> None:
    """Rows of the averaged and switching bridge models: chopper, trips, fuse, battery."""
    get = summary.get
    row("bridge model", str(get("bridge_model")))
    if get("switching_events"):
        row("switching events (leg transitions)", str(get("switching_events")))
    if get("current_limit_events"):
        row("pulses ended by the peak current limit", str(get("current_limit_events")))
    if get("energy_bridge_loss_J"):
        row(
            "bridge loss, mean over the run",
            f"switching {_num(get('bridge_switching_loss_W'), 'W', digits=4)}   "
            f"conduction {_num(get('bridge_conduction_loss_W'), 'W', digits=4)}",
        )
    if get("current_ripple_A") is not None:
        row("current ripple (last PWM period, p-p)", _num(get("current_ripple_A"), "A", digits=4))
    if get("pwm_warning"):
        period = get("pwm_period_s")
        shown = _num(1e-3 / float(period), "kHz", digits=4) if period else "n/a"
        row("PWM frequency", f"{shown}: in the audible band (below 20 kHz)")
    if get("energy_to_brake_resistor_J"):
        row("peak brake resistor power", _num(get("peak_brake_power_W"), "W"))
    events = list(get("trips") or []) + list(get("restarts") or [])
    for e in sorted(events, key=lambda e: e["time_s"]):
        what = str(e["kind"]).replace("_", " ")
        row(f"{what}", f"at {_time(e['time_s'])}, bus {_num(e['bus_voltage_V'], 'V')}")
    if get("peak_fuse_heat_fraction") is not None:
        if get("fuse_melted"):
            row("fuse", f"MELTED at {_time(get('fuse_melt_time_s'))}")
        else:
            frac = _num(100.0 * float(get("peak_fuse_heat_fraction")), "%", digits=3)
            row("fuse", f"intact; peak heat {frac} of melting")
    if get("fuse_warning"):
        row("fuse model", str(get("fuse_warning")))
    if get("capacitor_rms_current_A") is not None:
        text = f"{_num(get('capacitor_rms_current_A'), 'A')} over the run"
        if get("capacitor_max_period_rms_current_A") is not None:
            text += f", {_num(get('capacitor_max_period_rms_current_A'), 'A')} in one period"
        row("bus capacitor RMS current", text)
        if get("capacitor_esr_power_W"):
            row("bus capacitor ESR heating (mean)", _num(get("capacitor_esr_power_W"), "W"))
        row("bus ripple (largest peak-to-peak)", _num(get("bus_ripple_voltage_V"), "V"))
    changes = [
        ("battery disconnected (" + str(e["cause"]).replace("_", " ") + ")", e)
        for e in get("battery_disconnects") or []
    ] + [("battery reconnected", e) for e in get("battery_reconnects") or []]
    for what, e in sorted(changes, key=lambda c: c[1]["time_s"]):
        row(what, f"at {_time(e['time_s'])}, bus {_num(e['bus_voltage_V'], 'V')}")
    if get("final_state_of_charge") is not None:
        row(
            "battery state of charge",
            f"{_num(get('initial_state_of_charge'), digits=4)} -> "
            f"{_num(get('final_state_of_charge'), digits=4)}",
        )
    if "precharge_bypass_time_s" in summary:
        t_b = get("precharge_bypass_time_s")
        row("pre-charge bypassed", "never" if t_b is None else f"at {_time(t_b)}")
