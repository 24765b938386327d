"""Speed against duty for the H-bridge's decay modes (the light-load non-linearity).

Each point is one switching-model run of the scenario in voltage mode at a fixed duty, with
the bridge in one decay mode; the point is the time mean of the speed (and current) over
the last part of the run, where the drive has settled. In slow decay the armature sees
``d V`` on average whatever the current does (the recirculating current may reverse through
the low-side switches), so speed is linear in duty. In fast decay through the diodes the
armature sees ``+V`` during the drive and ``-V`` while the current returns to the bus; at
light load the current reaches zero within the period and stays there (discontinuous
conduction), the terminals then show the back-EMF and the speed rises above the line the
continuous-current average gives -- the curve bends. Mixed decay lies between.

References
----------
.. [1] N. Mohan, T. M. Undeland and W. P. Robbins, *Power Electronics: Converters,
   Applications and Design*, 3rd ed., Wiley (2003), dc-motor drives and the full-bridge
   converter: average output voltage in continuous conduction -- section from memory.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from dcsim.errors import ScenarioError
from dcsim.scenario.schema import Scenario

DECAYS = ("slow", "fast", "mixed")
SETTLED_FRACTION = 0.5
"""The mean is taken over the last half of each run."""


@dataclass(frozen=True)
class DutyCurve:
    """Speed and current against duty, one row per decay mode.

    Attributes
    ----------
    duty : numpy.ndarray
        Drive duties [-], shape ``(n,)``.
    decays : tuple of str
        The decay modes, one row each of the arrays below.
    speed_rad_s : numpy.ndarray
        Settled mean speed [rad/s], shape ``(len(decays), n)``.
    current_A : numpy.ndarray
        Settled mean armature current [A].
    ripple_A : numpy.ndarray
        Largest peak-to-peak armature current within one PWM period, over the last ten
        periods [A] (as fine as the trace rows resolve it).
    bus_voltage_V : float
        Supply voltage the duty refers to [V].
    torque_constant_Nm_A : float
        [N*m/A], for the ideal line ``d V / K``.
    source : str
        The scenario's file name.
    """

    duty: np.ndarray
    decays: tuple[str, ...]
    speed_rad_s: np.ndarray
    current_A: np.ndarray
    ripple_A: np.ndarray
    bus_voltage_V: float
    torque_constant_Nm_A: float
    source: str = ""
    notes: tuple[str, ...] = field(default_factory=tuple)

    def as_rows(self) -> list[dict[str, float | str]]:
        """One dict per (decay, duty) point, SI numbers."""
        rows: list[dict[str, float | str]] = []
        for k, decay in enumerate(self.decays):
            for j, d in enumerate(self.duty):
                rows.append(
                    {
                        "decay": decay,
                        "duty": float(d),
                        "speed_rad_s": float(self.speed_rad_s[k, j]),
                        "current_A": float(self.current_A[k, j]),
                        "ripple_A": float(self.ripple_A[k, j]),
                    }
                )
        return rows


def _settled_mean(t: np.ndarray, y: np.ndarray) -> float:
    """Time mean of ``y`` over the last :data:`SETTLED_FRACTION` of the run (trapezoids)."""
    keep = t >= t[-1] - SETTLED_FRACTION * (t[-1] - t[0])
    tt, yy = t[keep], y[keep]
    return float(np.trapezoid(yy, tt) / (tt[-1] - tt[0]))


def _period_ripple(t: np.ndarray, i: np.ndarray, period_s: float, n: int = 10) -> float:
    """Largest peak-to-peak current within one PWM period over the last ``n`` periods [A]."""
    t_end = t[-1]
    worst = 0.0
    for k in range(n):
        sel = (t >= t_end - (k + 1) * period_s) & (t <= t_end - k * period_s)
        if np.count_nonzero(sel) >= 2:
            worst = max(worst, float(i[sel].max() - i[sel].min()))
    return worst


def speed_duty_curve(
    scenario: Scenario,
    duties: Sequence[float] = tuple(np.linspace(0.05, 1.0, 20)),
    decays: Sequence[str] = DECAYS,
    progress: Callable[[float], None] | None = None,
) -> DutyCurve:
    """Run the scenario at each duty in each decay mode and return the settled curve.

    Parameters
    ----------
    scenario : Scenario
        A switching-bridge scenario (``bridge.model = "switching"``); its control is replaced
        by voltage mode at ``duty x supply.voltage``, its ``bridge.decay`` by each of
        ``decays`` (the other bridge keys, e.g. ``fast_decay_fraction``, are kept). Its
        duration must let the drive settle: the mean is over the last half.
    duties : sequence of float
        Drive duties from 0 to 1 [-].
    decays : sequence of str
        Decay modes among ``"slow"``, ``"fast"``, ``"mixed"``.
    progress : callable, optional
        Called with the fraction of runs done.
    """
    from dcsim.engine.run import simulate

    where = scenario.source
    if scenario.bridge.model != "switching":
        raise ScenarioError(
            f"{where}: bridge.model: expected 'switching' for a speed-against-duty curve (the "
            f"decay modes act within each PWM period), found '{scenario.bridge.model}'"
        )
    for decay in decays:
        if decay not in DECAYS:
            raise ScenarioError(
                f"{where}: decay: expected one of {', '.join(DECAYS)}, found {decay!r}"
            )
    d = np.asarray(duties, dtype=float)
    if d.size == 0 or np.any(d < 0.0) or np.any(d > 1.0):
        raise ScenarioError(f"{where}: duty: expected values from 0 to 1, found {d.tolist()}")
    v_bus = scenario.supply.voltage
    speed = np.zeros((len(decays), d.size))
    current = np.zeros_like(speed)
    ripple = np.zeros_like(speed)
    base = scenario
    if scenario.control.mode != "voltage":
        base = scenario.with_changes({"control.mode": "voltage"})
    n_runs = len(decays) * d.size
    done = 0
    for k, decay in enumerate(decays):
        moded = base.with_changes({"bridge.decay": decay})
        for j, duty in enumerate(d):
            res = simulate(moded.with_changes({"control.voltage": float(duty) * v_bus}))
            t = res.trace["time_s"]
            speed[k, j] = _settled_mean(t, res.trace["speed_rad_s"])
            current[k, j] = _settled_mean(t, res.trace["current_A"])
            ripple[k, j] = _period_ripple(t, res.trace["current_A"], 1.0 / moded.bridge.frequency)
            done += 1
            if progress is not None:
                progress(done / n_runs)
    return DutyCurve(
        duty=d,
        decays=tuple(decays),
        speed_rad_s=speed,
        current_A=current,
        ripple_A=ripple,
        bus_voltage_V=v_bus,
        torque_constant_Nm_A=scenario.motor.torque_constant,
        source=Path(where).name if where else "",
    )


def format_duty_curve(curve: DutyCurve) -> str:
    """The curve as a text table: duty, then speed [rad/s] and ripple [A] per decay mode."""
    head = (
        ["duty"] + [f"{d} [rad/s]" for d in curve.decays] + [f"{d} p-p [A]" for d in curve.decays]
    )
    lines = ["  ".join(f"{h:>14}" for h in head)]
    for j, duty in enumerate(curve.duty):
        cells = [f"{duty:14.3f}"]
        cells += [f"{curve.speed_rad_s[k, j]:14.2f}" for k in range(len(curve.decays))]
        cells += [f"{curve.ripple_A[k, j]:14.3f}" for k in range(len(curve.decays))]
        lines.append("  ".join(cells))
    title = (
        f"{curve.source}: settled speed against drive duty"
        if curve.source
        else "speed against duty"
    )
    return title + "\n" + "\n".join(lines)


def plot_duty_curve(curve: DutyCurve, path: str | Path) -> Path:
    """Speed against duty for each decay mode, with the ideal line ``d V / K``, as a PNG
    (written to a temporary name, then renamed)."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from dcsim.results.io import atomic_write

    fig, (ax, ax2) = plt.subplots(2, 1, figsize=(7.5, 7.0), sharex=True)
    line = curve.duty * curve.bus_voltage_V / curve.torque_constant_Nm_A
    ax.plot(curve.duty, line, color="0.6", linestyle=":", label="d V / K (no load, no loss)")
    styles = {"slow": ("tab:blue", "o"), "fast": ("tab:red", "s"), "mixed": ("tab:green", "^")}
    for k, decay in enumerate(curve.decays):
        color, marker = styles.get(decay, ("k", "."))
        ax.plot(curve.duty, curve.speed_rad_s[k], color=color, marker=marker, ms=4,
                label=f"{decay} decay")  # fmt: skip
        ax2.plot(curve.duty, curve.ripple_A[k], color=color, marker=marker, ms=4)
    ax.set_ylabel("settled speed [rad/s]")
    ax.grid(True, alpha=0.3)
    ax.legend(loc="upper left", fontsize=8, frameon=False)
    ax2.set_ylabel("current ripple p-p [A]")
    ax2.set_xlabel("drive duty [-]")
    ax2.grid(True, alpha=0.3)
    title = "speed against duty by decay mode"
    fig.suptitle(f"{curve.source}: {title}" if curve.source else title, fontsize=10)
    fig.tight_layout()
    out = atomic_write(path, lambda tmp: fig.savefig(tmp, format="png", dpi=110))
    plt.close(fig)
    return out
