"""A fitted motor as text, as a scenario file and as files on disk (``dcsim fit``)."""

from __future__ import annotations

import math
from pathlib import Path

from dcsim.errors import ScenarioError
from dcsim.identify.fit import CONFIDENCE, PARAMETERS, UNITS, FitResult
from dcsim.scenario.schema import About, Control, Motor, Scenario, Simulation, Supply

__all__ = ["FIT_FILES", "fitted_scenario", "format_fit", "write_fit"]

FIT_FILES = ("motor.toml", "fit.png")
"""The files ``dcsim fit`` writes into its output folder."""

_CATALOGUE = {
    "inductance": (1e3, "mH"),
    "inertia": (1e7, "g*cm^2"),
    "coulomb_friction": (1e3, "mN*m"),
}


def _row(result: FitResult, name: str) -> str:
    value = result.values[name]
    lo, hi = result.intervals[name]
    unit = UNITS[name]
    text = (
        f"  {name:<17} {value:<12.6g} {unit:<10} {100 * CONFIDENCE:.0f} %: {lo:.6g} .. {hi:.6g}"
        f"  (+-{result.half_width_percent(name):.2g} %)"
    )
    if name in _CATALOGUE:
        factor, cat = _CATALOGUE[name]
        text += f"  = {value * factor:.4g} {cat}"
    return text


def format_fit(result: FitResult) -> str:
    """The fitted parameters with their intervals, the noise levels and the excitation notes.

    Parameters
    ----------
    result : FitResult
        From :func:`~dcsim.identify.fit.fit_motor`.

    Returns
    -------
    str
        Lines without a trailing newline.
    """
    log = result.log
    what = "current and speed" if result.channel == "speed" else "current and angle"
    lines = [
        f"Motor fitted to {log.source}: {result.n_samples} samples every "
        f"{log.sample_time_s * 1e6:.4g} us, {what} (output error, least squares; "
        f"{100 * CONFIDENCE:.0f} % intervals from the linearised covariance)",
    ]
    lines += [_row(result, name) for name in PARAMETERS]
    noise = ", ".join(f"{_NOISE[k][0]} {v:.3g} {_NOISE[k][1]}" for k, v in result.noise.items())
    lines.append(f"  noise (RMS of the residuals): {noise}; {result.evaluations} simulations")
    if result.poorly_excited:
        lines.append(
            "  poorly excited by this log (95 % half-width above 10 %): "
            + ", ".join(result.poorly_excited)
            + "; log steady running at more speeds, both directions, and voltage steps"
        )
    return "\n".join(lines)


_NOISE = {"current_A": ("current", "A"), "speed_rad_s": ("speed", "rad/s"),
          "position_rad": ("angle", "rad")}  # fmt: skip


def fitted_scenario(result: FitResult, *, source: str = "<fit>") -> Scenario:
    """A loadable scenario whose ``[motor]`` is the fit.

    The other tables only make the file complete: a run as long as the log, from rest, at the
    log's largest voltage (the voltage of largest magnitude) on an ideal bridge.

    Parameters
    ----------
    result : FitResult
        The fit.
    source : str
        ``Scenario.source`` (the file it will be written to).

    Returns
    -------
    Scenario
    """
    log = result.log
    volts = [abs(float(v)) for v in log.voltage_V]
    peak = max(range(len(volts)), key=volts.__getitem__)
    duration = float(log.time_s[-1] - log.time_s[0])
    return Scenario(
        about=About(
            title=f"Motor fitted to {Path(log.source).name}",
            description=(
                f"dcsim fit: R, L, K, J, B and Tc fitted by output-error least squares to "
                f"{result.n_samples} samples of {Path(log.source).name}. The run below is only "
                "a start at the log's largest voltage; copy [motor] into your own scenario."
            ),
        ),
        simulation=Simulation(duration=duration, record_interval=log.sample_time_s),
        motor=Motor(**{name: float(result.values[name]) for name in PARAMETERS}),
        supply=Supply(voltage=max(volts[peak], 1.0)),
        control=Control(mode="voltage", voltage=float(log.voltage_V[peak])),
        source=source,
    )


def _header(result: FitResult) -> str:
    from dcsim.results.summary import CAUTION

    lines = [
        f"Motor fitted to {result.log.source} by dcsim fit.",
        f"Output-error least squares; {100 * CONFIDENCE:.0f} % confidence intervals from the "
        "linearised covariance",
        "s^2 (J^T J)^-1 (Bates & Watts, Nonlinear Regression Analysis, 1988, sec. 2.3):",
    ]
    lines += [_row(result, name).rstrip() for name in PARAMETERS]
    lines.append("Only [motor] is the fit; the other tables make the file loadable (a start at")
    lines.append("the log's largest voltage).")
    lines.append(CAUTION)
    return "\n".join(lines)


def write_fit(result: FitResult, out_dir: str | Path, *, force: bool = False) -> list[Path]:
    """Write ``motor.toml`` (the fitted scenario) and ``fit.png`` (measured against fitted).

    Both are written to a temporary name and renamed; an existing file is refused unless
    ``force``.

    Parameters
    ----------
    result : FitResult
        The fit.
    out_dir : str or Path
        Folder, made if missing.
    force : bool
        Replace existing files.

    Returns
    -------
    list of Path
        The files written.

    Raises
    ------
    ScenarioError
        A file exists and ``force`` is false, or the folder cannot be written.
    """
    from dcsim.identify.plot import save_fit_plot
    from dcsim.scenario.write import write_scenario

    folder = Path(out_dir)
    targets = [folder / name for name in FIT_FILES]
    if not force:
        for target in targets:
            if target.exists():
                raise ScenarioError(
                    "expected a new file (or force=True, --force, to replace it), found an "
                    "existing file",
                    source=str(target),
                )
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as err:
        raise ScenarioError(
            f"expected a folder the fit can be written in, found that it cannot be made "
            f"({err.strerror or err})",
            source=str(folder),
        ) from None
    toml, png = targets
    sc = fitted_scenario(result, source=str(toml))
    for name in PARAMETERS:
        if not math.isfinite(result.values[name]):
            raise ScenarioError(
                f"expected a finite fitted value, found {result.values[name]!r}",
                source=result.log.source,
                key=name,
            )
    write_scenario(sc, toml, header=_header(result), force=force)
    save_fit_plot(result, png)
    return [toml, png]
