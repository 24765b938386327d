"""Regenerative braking: how high the bus goes, what the brake resistor takes, what it needs.

Stops
    A *stop* is an interval in which the bridge returns power to the bus (``v_bus i_bridge < 0``,
    the bridge's bus current smoothed over four PWM periods in the switching model). For each,
    the energy the shaft gives up has the closed form

        E_shaft = 1/2 J (w1^2 - w2^2) + E_load,       E_load = -int T_load w dt

    (``E_load = -T_load (theta2 - theta1)`` for a constant load: the potential energy of a
    lowered load), of which the armature's copper and the friction keep ``E_cu + E_fr`` and the
    inductance gives back ``1/2 L (i1^2 - i2^2)``; the rest reaches the bridge. The simulated
    energy into the bus, ``-int v_bus i_bridge dt``, is smaller by the bridge's losses.
Capacitor alone
    Without a chopper and with a source that takes nothing back, the energy ``E`` of a stop
    charges the bus capacitor from ``V0``: ``1/2 C (V^2 - V0^2) = E``, so a rise to at most
    ``V0 + dV`` needs ``C >= 2 E / ((V0 + dV)^2 - V0^2)`` (capacitor energy balance).
Brake resistor
    At its switch-on voltage ``V_on`` a resistor ``R`` takes ``V_on^2 / R``; to absorb the
    peak returned power ``P``, ``R <= V_on^2 / P``; its pulse rating must cover the energy of a
    stop and its continuous rating the average power over the duty cycle (common practice, no
    source: see the rules of thumb of the check list).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from matplotlib.figure import Figure

from dcsim.checks.runs import CheckRuns
from dcsim.checks.verdict import Verdict, judged, not_applicable
from dcsim.engine.assemble import gear_loss_power, shaft_values
from dcsim.results.trace import SimulationResult
from dcsim.scenario.schema import Checks, Scenario

GROUP = "regeneration"
PLOT = "regeneration_bus"
_PLOTS = (PLOT,)


@dataclass(frozen=True)
class Stop:
    """One interval of regeneration and its energy account [SI].

    Attributes
    ----------
    start_s, end_s : float
        [s]
    speed_start_rad_s, speed_end_rad_s : float
        [rad/s]
    bus_start_V, bus_peak_V : float
        Bus voltage at the start, highest over the stop and until the chopper stops [V].
    kinetic_J : float
        ``1/2 J (w1^2 - w2^2)`` [J].
    load_J : float
        ``-int T_load w dt``: work the load does on the shaft (a lowered load) [J].
    copper_J, friction_J : float
        Losses of the armature and the friction over the stop [J].
    inductance_J : float
        ``1/2 L (i1^2 - i2^2)`` [J].
    to_bus_J : float
        Energy the bridge returned to the bus, simulated [J].
    to_brake_J : float
        Energy into the brake resistor from the stop's start until the chopper is off [J].
    peak_power_W : float
        Highest power returned to the bus [W].
    gear_J : float
        Loss of the gear over the stop [J] (0 without a gear).
    """

    start_s: float
    end_s: float
    speed_start_rad_s: float
    speed_end_rad_s: float
    bus_start_V: float
    bus_peak_V: float
    kinetic_J: float
    load_J: float
    copper_J: float
    friction_J: float
    inductance_J: float
    to_bus_J: float
    to_brake_J: float
    peak_power_W: float
    gear_J: float = 0.0

    @property
    def closed_form_J(self) -> float:
        """Energy reaching the bridge by the closed form (module docstring) [J]."""
        return (
            self.kinetic_J
            + self.load_J
            - self.copper_J
            - self.friction_J
            - self.gear_J
            + self.inductance_J
        )


def _integral(t: np.ndarray, y: np.ndarray) -> float:
    return float(0.5 * np.sum(np.diff(t) * (y[1:] + y[:-1]))) if t.size > 1 else 0.0


def find_stops(sc: Scenario, result: SimulationResult) -> list[Stop]:
    """The regenerative stops of a run (module docstring)."""
    tr = result.trace
    t = tr["time_s"]
    if t.size < 3:
        return []
    p_bus = tr["bus_voltage_V"] * tr["bridge_bus_current_A"]
    window = 1
    if sc.bridge.model == "switching":
        window = max(1, math.ceil(4.0 / sc.bridge.frequency / result.record_interval_s))
    smooth = np.convolve(p_bus, np.ones(window) / window, mode="same") if window > 1 else p_bus
    scale = float(np.max(np.abs(smooth)))
    if scale <= 0.0:
        return []
    regen = smooth < -1e-3 * scale
    # close gaps of a few rows (a ripple zero crossing does not split a stop)
    idx = np.flatnonzero(regen)
    if idx.size == 0:
        return []
    groups = np.split(idx, np.flatnonzero(np.diff(idx) > 5) + 1)
    stops = []
    inertia = shaft_values(sc)["inertia"]  # at the motor shaft, through a gear
    gear_W = gear_loss_power(sc, t, tr["speed_rad_s"])
    if "winding_resistance_ohm" in tr:
        r = tr["winding_resistance_ohm"]
    else:
        r = np.full(t.size, sc.motor.resistance)
    brake = tr["brake_current_A"] if "brake_current_A" in tr else np.zeros(t.size)
    for g in groups:
        a, b = int(g[0]), int(g[-1])
        if b - a < 2:
            continue
        a = max(a - 1, 0)  # the row before the first regenerating one
        b = min(b + 1, t.size - 1)
        s = slice(a, b + 1)
        e = b
        while e + 1 < t.size and brake[e + 1] > 0.0:
            e += 1
        w, i = tr["speed_rad_s"], tr["current_A"]
        to_bus = -_integral(t[s], p_bus[s])
        if to_bus <= 0.0:
            continue
        stops.append(
            Stop(
                start_s=float(t[a]),
                end_s=float(t[b]),
                speed_start_rad_s=float(w[a]),
                speed_end_rad_s=float(w[b]),
                bus_start_V=float(tr["bus_voltage_V"][a]),
                bus_peak_V=float(np.max(tr["bus_voltage_V"][a : e + 1])),
                kinetic_J=0.5 * inertia * float(w[a] ** 2 - w[b] ** 2),
                load_J=-_integral(t[s], tr["load_torque_Nm"][s] * w[s]),
                copper_J=_integral(t[s], r[s] * i[s] ** 2),
                friction_J=_integral(t[s], tr["friction_torque_Nm"][s] * w[s]),
                inductance_J=0.5 * sc.motor.inductance * float(i[a] ** 2 - i[b] ** 2),
                to_bus_J=to_bus,
                to_brake_J=_integral(t[a : e + 1], (tr["bus_voltage_V"] * brake)[a : e + 1]),
                peak_power_W=float(-np.min(smooth[s])),
                gear_J=_integral(t[s], gear_W[s]),
            )
        )
    return stops


def _trip_kinds(result: SimulationResult) -> list[str]:
    return [str(e.get("kind")) for e in result.summary.get("trips", []) or []]


def regen_checks(sc: Scenario, runs: CheckRuns) -> tuple[list[Verdict], dict[str, Figure]]:
    """The regeneration verdicts and the bus figure."""
    ck = sc.checks or Checks()
    results = [r for r in (runs.result("nominal"), runs.result("high_supply")) if r is not None]
    nominal = runs.get("nominal")
    verdicts: list[Verdict] = []
    if not results:
        why = nominal.error if nominal is not None else "no run"
        return [Verdict("regeneration.bus_peak", GROUP, "Bus voltage", "fail", detail=why)], {}
    peak_run = max(results, key=lambda r: r.summary["peak_bus_voltage_V"])
    peak = float(peak_run.summary["peak_bus_voltage_V"])
    where = "" if peak_run is results[0] else " (at checks.supply_max)"
    title = "Bus voltage within the capacitor's rating"
    if sc.supply.capacitance <= 0.0:
        verdicts.append(
            not_applicable(
                "regeneration.capacitor_voltage", GROUP, title, "the scenario has no bus capacitor"
            )
        )
    elif ck.capacitor_rated_voltage is None:
        verdicts.append(
            not_applicable(
                "regeneration.capacitor_voltage",
                GROUP,
                title,
                "give checks.capacitor_rated_voltage",
            )
        )
    else:
        verdicts.append(
            judged(
                "regeneration.capacitor_voltage",
                GROUP,
                title,
                peak,
                ck.capacitor_rated_voltage,
                "V",
                detail=f"peak bus voltage {peak:.4g} V{where}",
                plots=_PLOTS,
            )
        )
    title = "Bus stays below the over-voltage trip"
    trip = sc.protection.over_voltage if sc.protection is not None else 0.0
    if not trip:
        verdicts.append(
            not_applicable(
                "regeneration.over_voltage_trip",
                GROUP,
                title,
                "the scenario has no protection.over_voltage",
            )
        )
    else:
        tripped = [r for r in results if "over_voltage" in _trip_kinds(r)]
        detail = f"peak bus voltage {peak:.4g} V{where}"
        if tripped:
            first = next(e for e in tripped[0].summary["trips"] if e["kind"] == "over_voltage")
            detail = f"the over-voltage trip fires at {first['time_s']:.4g} s: the drive stops"
        v = judged(
            "regeneration.over_voltage_trip",
            GROUP,
            title,
            peak,
            trip,
            "V",
            detail=detail,
            plots=_PLOTS,
        )
        if tripped and v.status == "pass":
            v = Verdict(v.name, GROUP, title, "fail", peak, trip, "V", detail=detail, plots=_PLOTS)
        verdicts.append(v)

    stops = find_stops(sc, peak_run)
    verdicts.extend(_stop_verdicts(sc, ck, peak_run, stops))
    return verdicts, {PLOT: bus_figure(sc, peak_run, stops, ck)}


def _stop_verdicts(sc: Scenario, ck: Checks, result: SimulationResult, stops: list[Stop]):
    out: list[Verdict] = []
    cycle = sc.simulation.cycle_time or sc.simulation.duration
    if not stops:
        why = "the run has no regenerative stop (the bridge never returns power to the bus)"
        for name, title in (
            ("regeneration.stop_energy", "Energy returned on the hardest stop or lowering"),
            ("regeneration.brake_pulse_energy", "Brake resistor pulse energy"),
            ("regeneration.brake_continuous_power", "Brake resistor continuous power"),
        ):
            out.append(not_applicable(name, GROUP, title, why))
        return out
    hard = max(stops, key=lambda s: s.to_bus_J)
    out.append(
        Verdict(
            "regeneration.stop_energy",
            GROUP,
            "Energy returned on the hardest stop or lowering",
            "info",
            figure=hard.to_bus_J,
            unit="J",
            detail=(
                f"{len(stops)} stop(s); the hardest from {hard.start_s:.4g} s to "
                f"{hard.end_s:.4g} s ({hard.speed_start_rad_s:.4g} -> "
                f"{hard.speed_end_rad_s:.4g} rad/s): closed form 1/2 J (w1^2 - w2^2) = "
                f"{hard.kinetic_J:.4g} J + lowered load {hard.load_J:.4g} J - copper "
                f"{hard.copper_J:.4g} J - friction {hard.friction_J:.4g} J"
                + (f" - gear {hard.gear_J:.4g} J" if hard.gear_J else "")
                + f" + inductance "
                f"{hard.inductance_J:.4g} J = {hard.closed_form_J:.4g} J at the bridge; "
                f"simulated into the bus {hard.to_bus_J:.4g} J (the difference is the bridge's "
                f"loss); peak returned power {hard.peak_power_W:.4g} W"
            ),
            values={k: getattr(hard, k) for k in Stop.__dataclass_fields__}
            | {"closed_form_J": hard.closed_form_J, "stops": len(stops)},
            plots=_PLOTS,
        )
    )
    rise = ck.allowed_bus_rise
    v0 = hard.bus_start_V
    basis = "checks.allowed_bus_rise"
    if rise is None and ck.capacitor_rated_voltage is not None:
        rise, basis = ck.capacitor_rated_voltage - v0, "up to checks.capacitor_rated_voltage"
    if rise is not None and rise > 0.0:
        c_min = 2.0 * hard.to_bus_J / ((v0 + rise) ** 2 - v0**2)
        out.append(
            Verdict(
                "regeneration.min_capacitance",
                GROUP,
                "Bus capacitance for the hardest stop without a chopper",
                "info",
                figure=c_min,
                unit="F",
                detail=(
                    f"C >= 2 E / ((V0 + dV)^2 - V0^2) = {c_min:.4g} F for E = "
                    f"{hard.to_bus_J:.4g} J from V0 = {v0:.4g} V with a rise of {rise:.4g} V "
                    f"({basis}); assumes the source takes nothing back (now "
                    f"{sc.supply.capacitance:.4g} F)"
                ),
                values={"capacitance_F": c_min, "energy_J": hard.to_bus_J, "rise_V": rise},
                plots=_PLOTS,
            )
        )
    v_on = (
        sc.brake.on_voltage
        if sc.brake is not None
        else (v0 + rise if rise is not None and rise > 0.0 else None)
    )
    if v_on is not None:
        p_avg = sum(s.to_bus_J for s in stops) / cycle
        r_max = v_on**2 / hard.peak_power_W
        out.append(
            Verdict(
                "regeneration.brake_resistor",
                GROUP,
                "Brake resistor that absorbs the hardest stop",
                "info",
                figure=r_max,
                unit="ohm",
                detail=(
                    f"R <= V_on^2 / P = {r_max:.4g} ohm at V_on = {v_on:.4g} V for the peak "
                    f"returned power {hard.peak_power_W:.4g} W; pulse rating >= "
                    f"{hard.to_bus_J:.4g} J per stop, continuous rating >= {p_avg:.4g} W over "
                    f"a cycle of {cycle:g} s (add 20-50 % margin: common practice)"
                ),
                values={
                    "resistance_ohm": r_max,
                    "pulse_energy_J": hard.to_bus_J,
                    "average_power_W": p_avg,
                    "on_voltage_V": v_on,
                },
            )
        )
    title = "Brake resistor pulse energy"
    if sc.brake is None:
        out.append(
            not_applicable(
                "regeneration.brake_pulse_energy",
                GROUP,
                title,
                "the scenario has no [brake] chopper",
            )
        )
    elif ck.brake_pulse_energy is None:
        out.append(
            not_applicable(
                "regeneration.brake_pulse_energy",
                GROUP,
                title,
                "give checks.brake_pulse_energy (the resistor's rating)",
            )
        )
    else:
        e = max(s.to_brake_J for s in stops)
        out.append(
            judged(
                "regeneration.brake_pulse_energy",
                GROUP,
                title,
                e,
                ck.brake_pulse_energy,
                "J",
                detail=f"largest energy into the resistor in one stop {e:.4g} J",
                plots=_PLOTS,
            )
        )
    title = "Brake resistor continuous power"
    if sc.brake is None:
        out.append(
            not_applicable(
                "regeneration.brake_continuous_power",
                GROUP,
                title,
                "the scenario has no [brake] chopper",
            )
        )
    elif ck.brake_continuous_power is None:
        out.append(
            not_applicable(
                "regeneration.brake_continuous_power",
                GROUP,
                title,
                "give checks.brake_continuous_power (the resistor's rating)",
            )
        )
    else:
        p = float(result.summary["energy_to_brake_resistor_J"]) / cycle
        out.append(
            judged(
                "regeneration.brake_continuous_power",
                GROUP,
                title,
                p,
                ck.brake_continuous_power,
                "W",
                detail=f"average power over a cycle of {cycle:g} s: {p:.4g} W "
                f"(peak {result.summary.get('peak_brake_power_W', 0.0):.4g} W)",
                plots=_PLOTS,
            )
        )
    return out


def bus_figure(sc: Scenario, result: SimulationResult, stops: list[Stop], ck: Checks) -> Figure:
    """Bus voltage with its limits, and the power returned to the bus and into the brake."""
    fig = Figure(figsize=(9.0, 5.2), dpi=110, layout="constrained")
    ax, bx = fig.subplots(2, 1, sharex=True)
    tr = result.trace
    t = tr["time_s"]
    ax.plot(t, tr["bus_voltage_V"], color="#1f5f8b", lw=1.2, label="bus voltage")
    levels = [("capacitor rating", ck.capacitor_rated_voltage, "#b03a2e", "-")]
    if sc.protection is not None and sc.protection.over_voltage:
        levels.append(("over-voltage trip", sc.protection.over_voltage, "#b03a2e", "--"))
    if sc.brake is not None:
        levels.append(("chopper on", sc.brake.on_voltage, "#d0731c", ":"))
        levels.append(("chopper off", sc.brake.off_voltage, "#d0731c", ":"))
    for label, v, c, ls in levels:
        if v:
            ax.axhline(v, color=c, ls=ls, lw=1.0, label=f"{label} {v:g} V")
    ax.set_ylabel("bus voltage [V]")
    ax.legend(fontsize=7, loc="best")
    p_bus = tr["bus_voltage_V"] * tr["bridge_bus_current_A"]
    bx.plot(t, -p_bus, color="#1f5f8b", lw=1.0, label="returned to the bus")
    if "brake_current_A" in tr:
        bx.plot(
            t,
            tr["bus_voltage_V"] * tr["brake_current_A"],
            color="#d0731c",
            lw=1.0,
            label="into the brake resistor",
        )
    for s in stops:
        for a in (ax, bx):
            a.axvspan(s.start_s, s.end_s, color="#dfe3e8", alpha=0.6, lw=0)
    bx.axhline(0.0, color="#22313f", lw=0.6)
    bx.set_ylabel("power [W]")
    bx.set_xlabel("time [s]")
    bx.legend(fontsize=7, loc="best")
    for a in (ax, bx):
        a.grid(True, color="#dfe3e8")
    ax.set_title("Bus voltage and regenerated power (shaded: stops)", fontsize=9)
    return fig
