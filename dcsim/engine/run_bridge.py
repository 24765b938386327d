"""Runs of the averaged and switching bridge models: inputs -> kernel -> result."""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np

from dcsim.engine import bridge_layout as B
from dcsim.engine.assemble import BridgeInputs
from dcsim.engine.bridge_kernel import CACHE_SLOTS, run_periods, start_run
from dcsim.engine.run import check_finite_totals, controller_arrays, with_residual

CHUNK_STEPS = 2_000_000
"""Nominal steps per kernel call; between calls the run reports progress."""

TRIP_NAMES = {
    B.TRIP_OVER_VOLTAGE: "over_voltage",
    B.TRIP_UNDER_VOLTAGE: "under_voltage",
    B.TRIP_RESTART: "restart",
    B.TRIP_FUSE: "fuse_melted",
    B.TRIP_BYPASS: "precharge_bypassed",
    B.TRIP_BUS_COLLAPSE: "bus_collapsed",
    B.TRIP_OVER_CURRENT: "over_current",
    B.TRIP_BMS_CHARGE: "battery_disconnect_charge_current",
    B.TRIP_BMS_VOLTAGE: "battery_disconnect_full_voltage",
    B.TRIP_BMS_DISCHARGE: "battery_disconnect_discharge_current",
    B.TRIP_BMS_RECLOSE: "battery_reconnect",
}
DISCONNECT_CAUSES = {
    "battery_disconnect_charge_current": "charge_current",
    "battery_disconnect_full_voltage": "full_voltage",
    "battery_disconnect_discharge_current": "discharge_current",
}
"""Trip-log kinds of the battery disconnect opening, and the cause each names."""


def run_bridge_inputs(bi: BridgeInputs, progress: Callable[[float], None] | None = None):
    """Run the bridge kernel; returns ``(status, t_stop, rec, acc, x, q, trips, crec, chops)``
    (``chops``: one row per decay of the current comparator: its start [s], the current
    there [A], its end [s] and the current there [A]; NaN while unfinished)."""
    rec = np.zeros((B.N_REC, bi.rows))
    acc = np.zeros(B.N_ACC)
    acc[B.A_RIPPLE_LAST] = -1.0  # no complete PWM period yet
    trips = np.zeros((B.MAX_TRIPS + 1, 3))
    chops = np.zeros((B.MAX_CHOPS + 1, 4))
    q = bi.params.copy()
    x = bi.state0.copy()
    md = bi.modes0.copy()
    legs = np.zeros(2, dtype=np.int64)
    counters = np.zeros(4, dtype=np.int64)
    cache = (
        np.full(CACHE_SLOTS, -1, dtype=np.int64),
        np.zeros((CACHE_SLOTS, 2), dtype=np.int64),
        np.zeros(CACHE_SLOTS, dtype=np.int64),
        np.zeros((CACHE_SLOTS, 2, B.N_A, B.N_A)),
    )
    ev = (bi.event_time_s, bi.event_index, bi.event_value)
    ctl, crec = controller_arrays(bi.controller, bi.periods_per_sample, bi.rows)
    n_cp = bi.periods_per_sample
    start_run(
        x, md, q, *ev, counters, rec, acc, trips, bi.ocv_soc, bi.ocv_V, legs, n_cp, *ctl, crec
    )
    per_chunk = max(1, CHUNK_STEPS // bi.n_grid)
    status, t_stop = B.STATUS_OK, 0.0
    for p_first in range(0, bi.n_periods, per_chunk):
        p_last = min(p_first + per_chunk, bi.n_periods) - 1
        status, t_stop = run_periods(
            x, md, q, bi.period_s, bi.n_grid, bi.steps_per_row, bi.duration_s, p_first,
            p_last, *ev, counters, rec, acc, trips, chops, bi.ocv_soc, bi.ocv_V, legs, *cache,
            n_cp, *ctl, crec,
        )  # fmt: skip
        if progress is not None:
            progress((p_last + 1) / bi.n_periods)
        if status != B.STATUS_OK:
            break
    n = counters[1]
    n_chops = int(chops[0, 0])
    chop_log = chops[1 : 1 + n_chops].copy()
    return int(status), float(t_stop), rec[:, :n], acc, x, q, trips, crec[:, :n], chop_log


def stop_message(source: str, status: int, t_stop: float) -> str:
    where = f"{source}: run stopped at t = {t_stop:.6g} s: "
    if status == B.STATUS_BATTERY_EMPTY:
        return where + (
            "the battery's state of charge reached 0; raise battery.capacity or "
            "battery.initial_state_of_charge, or shorten the run"
        )
    return where + (
        "the state became non-finite; the parameters give an unbounded solution or values "
        "beyond floating point (check the magnitudes and units of the scenario)"
    )


def bridge_energy_account(bi: BridgeInputs, acc, xf, qf) -> dict[str, float]:
    """Energy terms of a bridge-model run [J]; the supply term equals the sum of the others."""
    q0, x0 = bi.params, bi.state0
    with np.errstate(over="ignore", invalid="ignore"):
        kinetic = 0.5 * (qf[B.Q_J] * xf[B.S_W] ** 2 - q0[B.Q_J] * x0[B.S_W] ** 2)
        stored = 0.5 * q0[B.Q_L] * (xf[B.S_I] ** 2 - x0[B.S_I] ** 2)
        stored += 0.5 * q0[B.Q_C] * (xf[B.S_VC] ** 2 - x0[B.S_VC] ** 2)
        stored += 0.5 * q0[B.Q_LS] * (xf[B.S_IS] ** 2 - x0[B.S_IS] ** 2)
    terms = {
        "energy_from_supply_J": float(acc[B.A_SUPPLY]),
        "energy_source_loss_J": float(acc[B.A_SOURCE_LOSS]),
        "energy_copper_loss_J": float(acc[B.A_COPPER]),
        "energy_friction_J": float(acc[B.A_FRICTION]),
        "energy_to_load_J": float(acc[B.A_LOAD]),
        "energy_gear_loss_J": float(acc[B.A_GEAR]),
        "energy_shaft_lock_J": float(acc[B.A_LOCK]),
        "energy_coupling_J": float(acc[B.A_COUPLING]),
        "energy_bridge_loss_J": float(acc[B.A_BRIDGE]),
        "energy_to_brake_resistor_J": float(acc[B.A_BRAKE]),
        "energy_capacitor_esr_J": float(acc[B.A_ESR]),
        "energy_precharge_loss_J": float(acc[B.A_PRECHARGE]),
        "energy_current_sense_J": float(acc[B.A_SENSE]),
        "energy_fuse_arc_J": float(acc[B.A_FUSE_ARC]),
        "energy_brush_drop_J": float(acc[B.A_BRUSH_DROP]),
        "energy_brush_friction_J": float(acc[B.A_BRUSH_FRICTION]),
        "energy_iron_loss_J": float(acc[B.A_IRON]),
        "kinetic_energy_change_J": float(kinetic),
        "stored_energy_change_J": float(stored),
    }
    return with_residual(terms)


def chop_summary(chops: np.ndarray) -> dict:
    """Figures of the current comparator's decays (rows as in :func:`run_bridge_inputs`):
    the largest current at a decay start, the smallest at a decay end, and the last complete
    chop's peak, valley and period (from the last two decay starts)."""
    if chops.shape[0] == 0:
        return {}
    done = chops[~np.isnan(chops[:, 2])]
    out = {
        "chop_peak_max_A": float(np.max(np.abs(chops[:, 1]))),
        "last_chop_peak_A": float(chops[-1, 1]),
    }
    if done.shape[0]:
        out["chop_valley_min_A"] = float(np.min(np.abs(done[:, 3])))
        out["last_chop_valley_A"] = float(done[-1, 3])
    if chops.shape[0] >= 2:
        period = float(chops[-1, 0] - chops[-2, 0])
        out["last_chop_period_s"] = period
        out["last_chop_frequency_Hz"] = 1.0 / period if period > 0.0 else None
    return out


def capacitor_stress(bi: BridgeInputs, acc) -> dict[str, float]:
    """The bus capacitor's stress over the run [SI].

    ``capacitor_rms_current_A``: ``sqrt(int i_C^2 dt / T)`` over the run (Simpson's rule on
    each segment, like the energy terms); ``capacitor_esr_power_W``: the ESR's mean heating,
    ``energy_capacitor_esr_J / T`` (= ESR I_rms^2); ``bus_ripple_voltage_V``: the largest
    peak-to-peak bus voltage over one kernel period (a PWM period of the switching model; a
    trace row, or a controller sample in closed loop, of the averaged one); switching model
    only, ``capacitor_max_period_rms_current_A``: the largest RMS over one PWM period.
    """
    duration = bi.duration_s
    period = bi.period_s
    # the last period is closed here (the kernel closes each one at the next one's start)
    last = duration - (bi.n_periods - 1) * period
    ripple = max(acc[B.A_BUS_RIPPLE], acc[B.A_PERIOD_BUS_MAX] - acc[B.A_PERIOD_BUS_MIN])
    out = {
        "capacitor_rms_current_A": math.sqrt(max(acc[B.A_ICAP2], 0.0) / duration),
        "capacitor_esr_power_W": float(acc[B.A_ESR]) / duration,
        "bus_ripple_voltage_V": float(ripple),
    }
    if bi.switching:
        peak = float(acc[B.A_CAP_RMS_PERIOD])
        if last >= period * (1.0 - 1e-9):
            peak = max(peak, math.sqrt(max(acc[B.A_ICAP2] - acc[B.A_MARK_ICAP2], 0.0) / last))
        out["capacitor_max_period_rms_current_A"] = peak
    return out


def bridge_summary(sc, bi: BridgeInputs, acc, xf, qf, trips, chops=None) -> dict:
    """The summary of a bridge-model run (SI numbers; ``trips`` a list of dicts)."""
    summary: dict = {
        "peak_current_A": float(acc[B.A_PEAK_I]),
        "peak_current_time_s": float(acc[B.A_PEAK_I_TIME]),
        "i2t_A2s": float(acc[B.A_I2T]),
        "final_speed_rad_s": float(xf[B.S_W]),
        "final_current_A": float(xf[B.S_I]),
        "final_position_rad": float(xf[B.S_TH]),
        "peak_bus_voltage_V": float(acc[B.A_BUS_MAX]),
        "min_bus_voltage_V": float(acc[B.A_BUS_MIN]),
        "min_bus_voltage_time_s": float(acc[B.A_BUS_MIN_TIME]),
    }
    summary.update(bridge_energy_account(bi, acc, xf, qf))
    summary.update(capacitor_stress(bi, acc))
    check_finite_totals(sc.source, summary)
    n = int(trips[0, 0])
    log = []
    for k in range(n):
        kind = TRIP_NAMES[int(trips[1 + k, 1])]
        value = "current_A" if kind == "over_current" else "bus_voltage_V"
        log.append({"time_s": float(trips[1 + k, 0]), "kind": kind, value: float(trips[1 + k, 2])})
    summary.update(
        {
            "bridge_model": sc.bridge.model,
            "peak_brake_power_W": float(acc[B.A_BRAKE_PEAK_W]),
            "current_limit_events": int(acc[B.A_LIMIT_EVENTS]),
            "switching_events": int(acc[B.A_SWITCHINGS]),
            "trips": [
                e
                for e in log
                if e["kind"] in ("over_voltage", "under_voltage", "bus_collapsed", "over_current")
            ],
            "restarts": [e for e in log if e["kind"] == "restart"],
            "fuse_melted": bool(acc[B.A_FUSE_MELT_TIME] >= 0.0),
            "fuse_melt_time_s": float(acc[B.A_FUSE_MELT_TIME])
            if acc[B.A_FUSE_MELT_TIME] >= 0.0
            else None,
            "peak_fuse_heat_fraction": float(acc[B.A_FUSE_PEAK]) if sc.fuse is not None else None,
        }
    )
    if chops is not None:
        summary.update(chop_summary(chops))
    if sc.battery is not None:
        summary["initial_state_of_charge"] = float(bi.state0[B.S_SOC])
        summary["final_state_of_charge"] = float(xf[B.S_SOC])
        if sc.battery.has_disconnect:
            summary["battery_disconnects"] = [
                {"time_s": e["time_s"], "cause": DISCONNECT_CAUSES[e["kind"]],
                 "bus_voltage_V": e["bus_voltage_V"]}
                for e in log
                if e["kind"] in DISCONNECT_CAUSES
            ]  # fmt: skip
            summary["battery_reconnects"] = [e for e in log if e["kind"] == "battery_reconnect"]
            summary["battery_connected_at_end"] = bool(
                len(summary["battery_disconnects"]) == len(summary["battery_reconnects"])
            )
    if sc.precharge is not None:
        t_b = float(acc[B.A_BYPASS_TIME])
        summary["precharge_bypass_time_s"] = t_b if t_b >= 0.0 else None
    if bi.fuse_model is not None and bi.fuse_model.warning:
        summary["fuse_warning"] = bi.fuse_model.warning
    summary.update(
        {
            "duration_s": bi.duration_s,
            "step_s": bi.step_s,
            "record_interval_s": bi.record_interval_s,
            "steps": bi.n_periods * bi.n_grid,
            "located_regime_changes": int(acc[B.A_SPLITS]),
        }
    )
    if bi.switching:
        summary["pwm_period_s"] = bi.period_s
    summary.update(bridge_loss_split(bi, acc))
    warning = sc.bridge.audible_warning
    if warning is not None:
        summary["pwm_warning"] = warning
    return summary


def bridge_loss_split(bi: BridgeInputs, acc) -> dict:
    """The bridge loss split into its switching and conduction parts, their mean powers, and
    the armature current ripple (switching model).

    ``bridge_switching_loss_J`` [J] is the energy of the leg transitions (per-transition
    energy or transition times, see :func:`dcsim.engine.bridge_kernel.switching_energy`);
    ``bridge_conduction_loss_J`` [J] the rest of ``energy_bridge_loss_J`` (on-resistance and
    diode drops, integrated over the run). Neither starts with ``energy_``: the account holds
    their sum once, as ``energy_bridge_loss_J``. The powers [W] are the energies over the
    run's duration. ``current_ripple_A`` [A]: the armature current's peak-to-peak over the
    last complete PWM period of the run (switching model only; the averaged model has no
    ripple to show, and its closed form is not given here).
    """
    total = float(acc[B.A_BRIDGE])
    switching = float(acc[B.A_SWITCH_LOSS])
    conduction = total - switching
    out = {
        "bridge_switching_loss_J": switching,
        "bridge_conduction_loss_J": conduction,
        "bridge_switching_loss_W": switching / bi.duration_s,
        "bridge_conduction_loss_W": conduction / bi.duration_s,
    }
    if bi.switching and acc[B.A_RIPPLE_LAST] >= 0.0:
        out["current_ripple_A"] = float(acc[B.A_RIPPLE_LAST])
    return out
