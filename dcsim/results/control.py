"""Closed-loop results: the controller's trace columns and the response metrics of a run.

The metrics (:mod:`dcsim.results.metrics`) are taken on the *true* controlled quantity
(armature current, shaft speed or angle) against the reference the outermost loop followed:

- a step or ramp reference: rise time (10-90 %), overshoot, settling time (2 % band) and the
  steady-state error, over the window from the reference's start to the first load change
  after it (or the end of the run);
- a move (trapezoid, S-curve, table, ramp): peak and RMS following error while the reference
  moves, and the error at the end of the run;
- each event that changes the load torque, load inertia or the supply voltage after the
  start: the dip of the controlled quantity and the time it takes to return within 2 % of the
  reference (2 % of the reference magnitude: common practice, no source); in position mode
  also the speed's largest excursion from the profile's speed;
- time with the speed loop's output at its current limit, and with the current loop's output
  at its voltage limit.
"""

from __future__ import annotations

import math

import numpy as np

from dcsim.controllers.assemble import record_names, reference_profile
from dcsim.results.metrics import (
    disturbance_recovery,
    following_error,
    step_metrics,
    time_in_condition,
)
from dcsim.scenario.schema import Scenario

_TRUE_COLUMN = {"current": "current_A", "speed": "speed_rad_s", "position": "position_rad"}
_UNIT = {"current": "A", "speed": "rad_s", "position": "rad"}
_DISTURBANCES = ("load.torque", "load.inertia", "supply.voltage", "supply.resistance")


def control_columns(sc: Scenario, crec: np.ndarray) -> dict[str, np.ndarray]:
    """Trace columns of the controller (none in open loop)."""
    if crec.shape[0] == 0:
        return {}
    names = record_names(sc.control.mode)
    return {name: crec[k] for k, name in enumerate(names) if not name.startswith("_")}


def _finite(x: float | None) -> float | None:
    return None if x is None or not math.isfinite(x) else float(x)


def control_summary(sc: Scenario, columns: dict[str, np.ndarray], sample_s: float) -> dict:
    """Response metrics of a closed-loop run (keys carry the controlled quantity's unit)."""
    mode = sc.control.mode
    unit = _UNIT[mode]
    t = columns["time_s"]
    y = columns[_TRUE_COLUMN[mode]]
    ref_col = record_names(mode)[0]
    r = columns[ref_col]
    out: dict = {"control_mode": mode, "control_sample_time_s": sample_s}
    profile = reference_profile(sc)
    ref = sc.control.reference
    start = ref.at if ref is not None and ref.kind != "table" else float(t[0])
    if ref is not None and ref.kind == "table":
        start = float(ref.times_s[0])
    disturbance_times = sorted(
        {ev.at for ev in sc.events for k, _ in ev.changes if k in _DISTURBANCES and ev.at > start}
    )
    window_end = disturbance_times[0] if disturbance_times else float(t[-1])
    inside = (t >= start) & (t <= window_end)
    if ref is not None and ref.kind in ("step", "ramp") and np.count_nonzero(inside) >= 2:
        target = float(ref.value)
        y_start = float(np.interp(start, t, y))
        if target != y_start and y[inside][-1] != y_start:
            m = step_metrics(t[inside], y[inside], t_step_s=start, y_start=y_start, target=target)
            out.update(
                {
                    "rise_time_s": _finite(m["rise_time_s"]),
                    "overshoot_percent": _finite(m["overshoot_percent"]),
                    "settling_time_s": _finite(m["settling_time_s"]),
                    f"steady_state_error_{unit}": _finite(m["steady_state_error"]),
                }
            )
    if ref is not None and ref.kind != "step":
        move_end = min(profile.end_time_s, float(t[-1]))
        if move_end > start:
            fe = following_error(t, r - y, t_start_s=start, t_end_s=move_end)
            out[f"peak_following_error_{unit}"] = float(fe["peak_following_error"])
            out[f"rms_following_error_{unit}"] = float(fe["rms_following_error"])
    out[f"final_error_{unit}"] = float(r[-1] - y[-1])
    steps = []
    for k, t_ev in enumerate(disturbance_times):
        end = disturbance_times[k + 1] if k + 1 < len(disturbance_times) else float(t[-1])
        if t_ev >= t[-1]:
            continue
        r_ev = float(np.interp(t_ev, t, r))
        sel = (t >= t_ev) & (t <= end)
        if np.count_nonzero(sel) < 2:
            continue
        dev = np.abs(y[sel] - r_ev)
        band = 0.02 * abs(r_ev) if r_ev != 0.0 else 0.02 * float(dev.max() or 1.0)
        rec = disturbance_recovery(
            t[sel], y[sel], t_event_s=t_ev, y_reference=r_ev, band=band, window_end_s=end
        )
        entry = {
            "time_s": float(t_ev),
            f"dip_{unit}": float(rec["dip"]),
            "dip_time_s": float(rec["dip_time_s"]),
            "recovery_time_s": _finite(rec["recovery_time_s"]),
            f"band_{unit}": band,
        }
        if mode == "position":
            # the speed's excursion from the profile's speed, beside the position's
            dw = columns["speed_rad_s"][sel] - columns["reference_speed_rad_s"][sel]
            j = int(np.argmax(np.abs(dw)))
            entry["speed_dip_rad_s"] = float(dw[j])
            entry["speed_dip_time_s"] = float(t[sel][j] - t_ev)
        steps.append(entry)
    if steps:
        out["load_steps"] = steps
    if "speed_loop_limited" in columns and mode in ("speed", "position"):
        out["time_in_current_limit_s"] = time_in_condition(t, columns["speed_loop_limited"] > 0.5)
    out["time_in_voltage_limit_s"] = time_in_condition(t, columns["current_loop_limited"] > 0.5)
    return out
