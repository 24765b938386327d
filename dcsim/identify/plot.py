"""Measured against fitted response of an identified motor (matplotlib's object API only)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
from matplotlib.figure import Figure

from dcsim.identify.fit import FitResult

__all__ = ["plot_fit", "save_fit_plot"]

_INK = "#22313f"
_BLUE = "#1f5f8b"
_ORANGE = "#d0731c"
_MEASURED = "#9aa5b1"
_GRID = "#dfe3e8"


def plot_fit(result: FitResult) -> Figure:
    """Voltage, current and speed (or angle): the measured samples and the fitted model.

    Parameters
    ----------
    result : FitResult
        From :func:`~dcsim.identify.fit.fit_motor`.

    Returns
    -------
    matplotlib.figure.Figure
        Four panels (voltage; current; speed or angle; the residuals of both, each divided by
        its noise level) with the caution line at the foot; not registered with pyplot.
    """
    from dcsim.results.summary import CAUTION

    log = result.log
    t = log.time_s - log.time_s[0]
    scale, unit = (1e3, "ms") if t[-1] < 1.0 else (1.0, "s")
    t = t * scale
    position = result.channel == "position"
    measured = log.position_rad if position else log.speed_rad_s
    fitted = result.fitted[:, 2 if position else 1]
    label = "angle [rad]" if position else "speed [rad/s]"
    noise_y = result.noise["position_rad" if position else "speed_rad_s"]

    fig = Figure(figsize=(10.0, 8.6), dpi=120, layout="constrained")
    fig.set_facecolor("white")
    axes = fig.subplots(4, 1, sharex=True, height_ratios=(1.0, 1.6, 1.6, 1.0))
    axes[0].plot(t, log.voltage_V, color=_INK, linewidth=1.0, label="applied (logged)")
    axes[0].set_ylabel("voltage [V]")
    for ax, meas, fit, ylabel in (
        (axes[1], log.current_A, result.fitted[:, 0], "current [A]"),
        (axes[2], measured, fitted, label),
    ):
        ax.plot(t, meas, color=_MEASURED, linewidth=0.6, label="measured")
        ax.plot(t, fit, color=_BLUE if ax is axes[1] else _ORANGE, linewidth=1.3, label="fitted")
        ax.set_ylabel(ylabel)
    # residuals averaged over short windows: white noise averages out, a model error shows
    span = max(len(t) // 300, 1)
    kernel = np.ones(span) / span
    for resid, colour, name in (
        ((log.current_A - result.fitted[:, 0]) / result.noise["current_A"], _BLUE, "current"),
        ((measured - fitted) / noise_y, _ORANGE, "angle" if position else "speed"),
    ):
        axes[3].plot(
            t, np.convolve(resid, kernel, mode="same"), color=colour, linewidth=0.9, label=name
        )
    axes[3].set_ylabel(f"residual / noise\n(mean of {span})", fontsize=9)
    axes[3].set_xlabel(f"time [{unit}]")
    for ax in axes:
        ax.grid(True, color=_GRID, linewidth=0.8)
        ax.set_axisbelow(True)
        for side in ("top", "right"):
            ax.spines[side].set_visible(False)
        ax.tick_params(colors=_INK, labelsize=8)
        ax.margins(x=0)
        ax.legend(loc="upper right", fontsize=8, ncols=2, frameon=True, framealpha=0.85,
                  edgecolor="none")  # fmt: skip
    v = result.values
    fig.suptitle(
        f"Motor fitted to {Path(log.source).name}: R {v['resistance']:.4g} ohm, "
        f"L {v['inductance'] * 1e3:.4g} mH, K {v['torque_constant']:.4g} N*m/A, "
        f"J {v['inertia'] * 1e7:.4g} g*cm^2, B {v['viscous_friction']:.3g} N*m*s/rad, "
        f"Tc {v['coulomb_friction'] * 1e3:.4g} mN*m",
        x=0.01, ha="left", fontsize=10, color=_INK, fontweight="bold",
    )  # fmt: skip
    fig.text(0.01, 0.005, CAUTION, ha="left", va="bottom", fontsize=6.5, color="#8a8f96",
             wrap=True)  # fmt: skip
    fig.get_layout_engine().set(rect=(0.0, 0.03, 1.0, 0.97))
    return fig


def save_fit_plot(result: FitResult, path: str | Path) -> Path:
    """Write :func:`plot_fit` as a PNG, atomically (temporary name, then renamed).

    Parameters
    ----------
    result : FitResult
        The fit.
    path : str or Path
        The PNG file; its folder must exist.

    Returns
    -------
    Path
        The file written.
    """
    from dcsim.results.io import atomic_write

    fig = plot_fit(result)
    return atomic_write(Path(path), lambda tmp: fig.savefig(tmp, format="png"))
