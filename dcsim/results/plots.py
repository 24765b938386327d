"""Plots of a run: an overview figure and one figure per quantity.

Only matplotlib's object API is used (:class:`matplotlib.figure.Figure`), never ``pyplot``: no
figure is registered anywhere, nothing global is changed, and the module works under any
backend (including ``Agg`` on a machine without a display).
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from matplotlib.axes import Axes
from matplotlib.figure import Figure

from dcsim.results.summary import CAUTION, RAD_S_PER_RPM
from dcsim.results.trace import SimulationResult

# A palette of our own: ink-like, readable in print and for common colour-vision deficiencies
# (blue / orange / dark grey / purple differ in lightness as well as hue).
_INK = "#22313f"
_BLUE = "#1f5f8b"
_ORANGE = "#d0731c"
_PURPLE = "#6b4c9a"
_EVENT = "#8a8f96"
_GRID = "#dfe3e8"

_DPI = 120
_PANEL_HEIGHT_IN = 1.9
_WIDTH_IN = 10.0


@dataclass(frozen=True)
class _TimeAxis:
    """Time values as plotted, with their label."""

    values: np.ndarray
    scale: float  # plotted = seconds * scale
    label: str


@dataclass(frozen=True)
class _Marker:
    """A scenario event as drawn: time [s] and a short label."""

    at_s: float
    label: str


def _time_axis(result: SimulationResult) -> _TimeAxis:
    """Seconds, or milliseconds when the run is shorter than one second."""
    t = np.asarray(result.trace["time_s"], dtype=float)
    if result.scenario.simulation.duration < 1.0:
        return _TimeAxis(t * 1e3, 1e3, "time [ms]")
    return _TimeAxis(t, 1.0, "time [s]")


def _event_markers(result: SimulationResult) -> list[_Marker]:
    """One marker per scenario event, labelled with the key(s) it changes."""
    markers = []
    for event in result.scenario.events:
        keys = [key for key, _ in event.changes]
        if not keys:
            continue
        label = keys[0] if len(keys) == 1 else f"{keys[0]} +{len(keys) - 1}"
        markers.append(_Marker(float(event.at), label))
    return markers


def _title(result: SimulationResult) -> str:
    """The scenario's own title, else its file name."""
    title = result.scenario.about.title.strip()
    if title:
        return title
    source = result.scenario.source
    return Path(source).name if source and not source.startswith("<") else source


def _style(ax: Axes, ylabel: str) -> None:
    ax.set_ylabel(ylabel)
    ax.grid(True, color=_GRID, linewidth=0.8)
    ax.set_axisbelow(True)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    for side in ("left", "bottom"):
        ax.spines[side].set_color(_INK)
    ax.tick_params(colors=_INK, labelsize=8)
    ax.yaxis.label.set_color(_INK)
    ax.margins(x=0)


def _legend(ax: Axes) -> None:
    ax.legend(
        loc="upper right",
        fontsize=8,
        ncols=2,
        frameon=True,
        framealpha=0.85,
        facecolor="white",
        edgecolor="none",
    )


def _draw_command(ax: Axes, result: SimulationResult, time: _TimeAxis, column: str) -> None:
    """The loop's command (held between samples) over the true value, when there is one."""
    if column in result.trace:
        ax.step(
            time.values,
            result.trace[column],
            where="post",
            color=_ORANGE,
            linewidth=1.0,
            linestyle=(0, (4, 1.5)),
            label="command",
        )


def _draw_current(ax: Axes, result: SimulationResult, time: _TimeAxis) -> None:
    ax.plot(time.values, result.trace["current_A"], color=_BLUE, linewidth=1.2, label="actual")
    _draw_command(ax, result, time, "current_command_A")
    _style(ax, "armature\ncurrent [A]")
    if "current_command_A" in result.trace:
        _legend(ax)


def _draw_speed(ax: Axes, result: SimulationResult, time: _TimeAxis) -> None:
    shaft = _has_shaft(result)
    ax.plot(
        time.values,
        result.trace["speed_rad_s"],
        color=_BLUE,
        linewidth=1.2,
        label="motor" if shaft else "actual",
    )
    if shaft:
        ax.plot(
            time.values,
            result.trace["load_speed_rad_s"],
            color=_PURPLE,
            linewidth=1.0,
            linestyle=(0, (4, 1.5)),
            label="load side",
        )
    if result.scenario.control.mode in ("speed", "position"):
        _draw_command(ax, result, time, "speed_command_rad_s")
    if shaft or result.scenario.control.mode in ("speed", "position"):
        _legend(ax)
    _style(ax, "speed [rad/s]")
    rpm = ax.secondary_yaxis(
        "right", functions=(lambda w: w / RAD_S_PER_RPM, lambda n: n * RAD_S_PER_RPM)
    )
    rpm.set_ylabel("[rpm]", color=_INK)
    rpm.tick_params(colors=_INK, labelsize=8)
    rpm.spines["right"].set_color(_INK)


def _draw_voltages(ax: Axes, result: SimulationResult, time: _TimeAxis) -> None:
    ax.plot(time.values, result.trace["bus_voltage_V"], color=_INK, linewidth=1.2, label="bus")
    ax.plot(
        time.values,
        result.trace["armature_voltage_V"],
        color=_ORANGE,
        linewidth=1.0,
        linestyle=(0, (4, 1.5)),
        label="armature",
    )
    _style(ax, "voltage [V]")
    _legend(ax)


def _draw_torques(ax: Axes, result: SimulationResult, time: _TimeAxis) -> None:
    ax.plot(time.values, result.trace["motor_torque_Nm"], color=_BLUE, linewidth=1.2, label="motor")
    ax.plot(
        time.values,
        result.trace["load_torque_Nm"],
        color=_PURPLE,
        linewidth=1.0,
        linestyle=(0, (4, 1.5)),
        label="load",
    )
    _style(ax, "torque [N·m]")
    _legend(ax)


def _draw_supply(ax: Axes, result: SimulationResult, time: _TimeAxis) -> None:
    """Supply-line current and brake resistor current; the fuse heat fraction on the right."""
    tr = result.trace
    ax.plot(time.values, tr["supply_current_A"], color=_INK, linewidth=1.2, label="supply")
    ax.plot(
        time.values,
        tr["brake_current_A"],
        color=_ORANGE,
        linewidth=1.0,
        linestyle=(0, (4, 1.5)),
        label="brake resistor",
    )
    _style(ax, "current [A]")
    if result.scenario.fuse is not None:
        heat = ax.twinx()
        heat.plot(time.values, tr["fuse_heat_fraction"], color=_PURPLE, linewidth=1.0)
        heat.axhline(1.0, color=_PURPLE, linewidth=0.8, linestyle=(0, (1, 2)))
        heat.set_ylabel("fuse heat\n(1 = melts)", color=_PURPLE)
        heat.tick_params(colors=_PURPLE, labelsize=8)
        heat.set_ylim(0.0, 1.1)
        for side in ("top", "left"):
            heat.spines[side].set_visible(False)
    _legend(ax)


def _draw_position(ax: Axes, result: SimulationResult, time: _TimeAxis) -> None:
    """Shaft angle against the position reference; the following error on the right."""
    tr = result.trace
    ax.plot(time.values, tr["position_rad"], color=_BLUE, linewidth=1.2, label="actual")
    ax.plot(
        time.values,
        tr["reference_position_rad"],
        color=_ORANGE,
        linewidth=1.0,
        linestyle=(0, (4, 1.5)),
        label="reference",
    )
    _style(ax, "angle [rad]")
    err = ax.twinx()
    err.plot(
        time.values,
        (tr["reference_position_rad"] - tr["position_rad"]) * 1e3,
        color=_PURPLE,
        linewidth=0.9,
    )
    err.set_ylabel("following\nerror [mrad]", color=_PURPLE)
    err.tick_params(colors=_PURPLE, labelsize=8)
    for side in ("top", "left"):
        err.spines[side].set_visible(False)
    _legend(ax)


def _draw_field(ax: Axes, result: SimulationResult, time: _TimeAxis) -> None:
    """Field current of a wound-field machine (series machine: its armature current)."""
    ax.plot(time.values, result.trace["field_current_A"], color=_BLUE, linewidth=1.2)
    _style(ax, "field\ncurrent [A]")


def _draw_shaft(ax: Axes, result: SimulationResult, time: _TimeAxis) -> None:
    """Torque passed by the compliant shaft, against the load torque."""
    tr = result.trace
    ax.plot(time.values, tr["shaft_torque_Nm"], color=_BLUE, linewidth=1.2, label="shaft")
    ax.plot(
        time.values,
        tr["load_torque_Nm"],
        color=_PURPLE,
        linewidth=1.0,
        linestyle=(0, (4, 1.5)),
        label="load",
    )
    _style(ax, "shaft\ntorque [N·m]")
    _legend(ax)


def _has_field(result: SimulationResult) -> bool:
    """The trace has a field current that is not zero throughout."""
    if "field_current_A" not in result.trace:
        return False
    return bool(np.any(np.asarray(result.trace["field_current_A"]) != 0.0))


def _has_shaft(result: SimulationResult) -> bool:
    """The run has a compliant shaft (``[shaft]``) and its trace columns."""
    return result.scenario.shaft is not None and "shaft_torque_Nm" in result.trace


_Drawer = Callable[[Axes, SimulationResult, _TimeAxis], None]

_PANELS: tuple[tuple[str, _Drawer], ...] = (
    ("current", _draw_current),
    ("speed", _draw_speed),
    ("bus_voltage", _draw_voltages),
    ("torque", _draw_torques),
)
"""Each quantity: its file stem and how to draw it. Order is the overview's, top to bottom."""

_SUPPLY_PANEL: tuple[str, _Drawer] = ("supply", _draw_supply)
"""Added for the averaged and switching bridge models (their trace has the bus circuit)."""
_POSITION_PANEL: tuple[str, _Drawer] = ("position", _draw_position)
"""Added in position control (the reference and the following error)."""
_FIELD_PANEL: tuple[str, _Drawer] = ("field_current", _draw_field)
"""Added below the armature current when the trace has a field current that is not zero
throughout (wound-field machines)."""
_SHAFT_PANEL: tuple[str, _Drawer] = ("shaft_torque", _draw_shaft)
"""Added below the torques with a compliant ``[shaft]`` (the speed panel then shows the load
side's speed beside the motor's)."""


def _panels(result: SimulationResult) -> tuple[tuple[str, _Drawer], ...]:
    panels = _PANELS
    if _has_field(result):
        panels = panels[:1] + (_FIELD_PANEL,) + panels[1:]
    if _has_shaft(result):
        panels = panels + (_SHAFT_PANEL,)
    if "reference_position_rad" in result.trace:
        panels = (_POSITION_PANEL,) + panels
    if "brake_current_A" in result.trace:
        panels = panels + (_SUPPLY_PANEL,)
    return panels


def _mark_events(axes: Sequence[Axes], markers: list[_Marker], time: _TimeAxis) -> None:
    """Dashed vertical line on every panel; the label once, at the top of the first panel."""
    for marker in markers:
        x = marker.at_s * time.scale
        for ax in axes:
            ax.axvline(x, color=_EVENT, linewidth=0.9, linestyle=(0, (3, 3)), zorder=1.5)
        axes[0].annotate(
            marker.label,
            xy=(x, 1.0),
            xycoords=axes[0].get_xaxis_transform(),
            xytext=(3, -2),
            textcoords="offset points",
            ha="left",
            va="top",
            fontsize=7.5,
            color=_EVENT,
            gid="event-label",
        )


def _finish(fig: Figure, title: str, bottom_in: float = 0.35) -> None:
    """Title and the caution footer, with room kept for it below the axes."""
    fig.suptitle(title, x=0.01, ha="left", fontsize=12, color=_INK, fontweight="bold")
    height = fig.get_figheight()
    fig.text(
        0.01,
        0.012,
        CAUTION,
        ha="left",
        va="bottom",
        fontsize=6.5,
        color=_EVENT,
        wrap=True,
        gid="caution",
    )
    fig.get_layout_engine().set(rect=(0.0, bottom_in / height, 1.0, 1.0 - bottom_in / height))


def _new_figure(rows: int) -> Figure:
    height = _PANEL_HEIGHT_IN * rows + 1.0
    fig = Figure(figsize=(_WIDTH_IN, height), dpi=_DPI, layout="constrained")
    fig.set_facecolor("white")
    return fig


def plot_overview(result: SimulationResult) -> Figure:
    """Stacked panels of the main traces of a run, sharing the time axis.

    Panels, top to bottom: armature current [A]; speed [rad/s] with a secondary scale in rpm;
    bus and armature voltage [V]; motor and load torque [N*m]; for the averaged and switching
    bridge models also the supply-line and brake resistor currents [A] with the fuse heat
    fraction. A wound-field machine adds its field current [A] below the armature current; a
    compliant ``[shaft]`` adds the shaft torque [N*m] against the load torque, and the load
    side's speed beside the motor's. Scenario events are dashed
    vertical lines labelled with the key they change. The time axis is in ms when the run is
    shorter than 1 s. The footer carries the caution line.

    Parameters
    ----------
    result : SimulationResult
        A finished run; its trace must hold the columns of
        :data:`~dcsim.results.trace.TRACE_COLUMNS`.

    Returns
    -------
    matplotlib.figure.Figure
        A figure not known to ``pyplot``; save it with ``fig.savefig(...)``.
    """
    time = _time_axis(result)
    panels = _panels(result)
    fig = _new_figure(len(panels))
    axes = fig.subplots(len(panels), 1, sharex=True)
    for ax, (_, draw) in zip(axes, panels, strict=True):
        draw(ax, result, time)
    axes[-1].set_xlabel(time.label, color=_INK)
    _mark_events(axes, _event_markers(result), time)
    _finish(fig, _title(result))
    return fig


def plot_quantity(result: SimulationResult, name: str) -> Figure:
    """One panel of :func:`plot_overview` on its own figure.

    Parameters
    ----------
    result : SimulationResult
        A finished run.
    name : str
        ``"current"``, ``"speed"``, ``"bus_voltage"`` or ``"torque"``; also ``"supply"``,
        ``"position"``, ``"field_current"`` or ``"shaft_torque"`` where the run has them.

    Returns
    -------
    matplotlib.figure.Figure
        The single-panel figure, with events, title and caution footer.
    """
    panels = dict(_panels(result))
    if name not in panels:
        raise ValueError(f"no plot named {name!r}; choose one of {', '.join(panels)}")
    time = _time_axis(result)
    fig = _new_figure(2)
    ax = fig.subplots(1, 1)
    panels[name](ax, result, time)
    ax.set_xlabel(time.label, color=_INK)
    _mark_events([ax], _event_markers(result), time)
    _finish(fig, _title(result))
    return fig


PLOT_FILES: tuple[str, ...] = ("overview.png",) + tuple(f"{stem}.png" for stem, _ in _PANELS)
"""File names :func:`save_plots` writes, in order (plus ``supply.png`` for the averaged and
switching bridge models, ``position.png`` in position control, ``field_current.png`` for a
wound-field machine and ``shaft_torque.png`` with a compliant ``[shaft]``)."""


def save_plots(result: SimulationResult, out_dir_tmp: str | Path) -> list[Path]:
    """Write the overview and one PNG per quantity into a directory.

    Each file is written atomically (temporary name, then renamed). :func:`dcsim.results.io.
    write_outputs` calls this on a staging directory so that a failure replaces nothing.

    Parameters
    ----------
    result : SimulationResult
        A finished run.
    out_dir_tmp : str or Path
        Existing directory to write into.

    Returns
    -------
    list of Path
        The files written: ``overview.png``, ``current.png``, ``speed.png``,
        ``bus_voltage.png``, ``torque.png``.
    """
    from dcsim.results.io import atomic_write

    out = Path(out_dir_tmp)
    figures: list[tuple[str, Callable[[], Figure]]] = [
        ("overview.png", lambda: plot_overview(result)),
        *(
            (f"{stem}.png", lambda stem=stem: plot_quantity(result, stem))
            for stem, _ in _panels(result)
        ),
    ]

    written = []
    for file_name, make in figures:
        fig = make()
        target = out / file_name
        atomic_write(target, lambda tmp, fig=fig: fig.savefig(tmp, format="png", dpi=_DPI))
        written.append(target)
    return written
