"""The ``dcsim`` command: ``run``, ``validate``, ``tune``, ``check``, ``report``, ``sweep``,
``motor``, ``fit``, ``duty-curve`` and ``demo``.

Exit codes: 0 success; 3 a design check fails (``check``, ``report``) or a sweep finished with
runs that failed (an error or a criterion); 2 bad input (scenario file, command line), with one
line on stderr naming the file, the key, what was expected and what was found; 1 any other
failure, with one line; 130 interrupted. ``--debug`` shows the full traceback instead.

The engine, numpy and matplotlib are imported inside the commands that need them, so that
``dcsim --help`` and ``dcsim validate`` start quickly.
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from collections.abc import Callable, Sequence
from pathlib import Path
from types import TracebackType
from typing import TYPE_CHECKING, TextIO

from dcsim.errors import DcsimError

if TYPE_CHECKING:
    from dcsim.scenario.schema import Scenario

EXIT_OK = 0
EXIT_FAILURE = 1
EXIT_BAD_INPUT = 2
EXIT_NOT_PASSED = 3  # a design check fails, or a sweep run fails or misses a criterion
EXIT_INTERRUPTED = 130

DEMO_SCENARIO = Path(__file__).with_name("data") / "demo.toml"
"""The built-in demo scenario (an invented harbour line winch)."""

DEFAULT_RUN_ROOT = Path("dcsim-out")
DEFAULT_DEMO_DIR = Path("dcsim-demo")

_PROG = "dcsim"
_SLOW_RUN_S = 1.0  # runs at least this long report their time even when stderr is not a terminal

_CAUTION_EPILOG = (
    "Caution: simulation is not a substitute for the component makers' data, local electrical "
    "codes and licensed practice; verify on hardware with protection in place."
)


class _UsageError(Exception):
    """The command line itself is wrong (unknown option, missing argument)."""


class _BadInput(Exception):
    """A file named on the command line is missing or unusable (exit 2)."""


class _Parser(argparse.ArgumentParser):
    """argparse that reports a usage error as one line instead of printing usage and exiting."""

    def error(self, message: str) -> None:  # type: ignore[override]
        raise _UsageError(f"{message} (see '{self.prog} --help')")


# --------------------------------------------------------------------------------------------
# Output helpers
# --------------------------------------------------------------------------------------------


def _write(stream: TextIO, text: str) -> None:
    """Write text, replacing characters the stream's encoding cannot show (e.g. ``²``)."""
    try:
        stream.write(text)
    except UnicodeEncodeError:
        encoding = getattr(stream, "encoding", None) or "ascii"
        stream.write(text.encode(encoding, "replace").decode(encoding))


def _one_line(text: str) -> str:
    return " ".join(part.strip() for part in str(text).splitlines() if part.strip())


def _error_line(message: str) -> None:
    _write(sys.stderr, f"{_PROG}: error: {_one_line(message)}\n")


def _shown(path: Path) -> str:
    """A path as the user would like to read it: relative to the working directory if inside."""
    try:
        return str(path.resolve().relative_to(Path.cwd().resolve()))
    except ValueError:
        return str(path)


class _Progress:
    """``simulating NAME ... done in X s`` on stderr.

    On a terminal the first half is shown at once and completed at the end. Otherwise (logs,
    pipes) one line is written afterwards, and only for runs slower than ``_SLOW_RUN_S``.
    """

    def __init__(self, stream: TextIO, label: str) -> None:
        self.stream = stream
        self.label = label
        self.live = bool(getattr(stream, "isatty", lambda: False)())
        self.start = 0.0

    def __enter__(self) -> _Progress:
        self.start = time.perf_counter()
        if self.live:
            _write(self.stream, f"simulating {self.label} ...")
            self.stream.flush()
        return self

    def update(self, fraction: float) -> None:
        """Show the fraction of simulated time done (terminal only)."""
        if self.live and fraction < 1.0:
            elapsed = time.perf_counter() - self.start
            _write(
                self.stream,
                f"\rsimulating {self.label} ... {100 * fraction:3.0f} %  ({elapsed:.0f} s)",
            )
            self.stream.flush()

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> None:
        elapsed = time.perf_counter() - self.start
        if self.live:
            _write(self.stream, f" done in {elapsed:.2f} s\n" if exc_type is None else "\n")
        elif exc_type is None and elapsed >= _SLOW_RUN_S:
            _write(self.stream, f"simulating {self.label} ... done in {elapsed:.1f} s\n")
        self.stream.flush()


# --------------------------------------------------------------------------------------------
# Commands
# --------------------------------------------------------------------------------------------


def _load(given: str) -> Scenario:
    """Load a scenario file, turning a missing or unreadable file into bad input."""
    if not given.strip():
        raise _BadInput("expected a scenario file name, found an empty string")
    path = Path(given)
    if not path.exists():
        raise _BadInput(f"{given}: file not found")
    if path.is_dir():
        raise _BadInput(f"{given}: expected a scenario file, found a directory")

    from dcsim.scenario.load import load_scenario

    try:
        return load_scenario(given)
    except FileNotFoundError:
        raise _BadInput(f"{given}: file not found") from None
    except PermissionError:
        raise _BadInput(f"{given}: cannot read the file (permission denied)") from None


def _check_out_dir(out_dir: Path) -> None:
    """Refuse, before any simulation, an output directory that cannot be made or written."""
    if out_dir.exists() and not out_dir.is_dir():
        raise _BadInput(f"{out_dir}: expected an output directory, found a file")
    parent = out_dir
    while not parent.exists():
        if parent == parent.parent:
            break
        parent = parent.parent
    if parent.exists() and not parent.is_dir():
        raise _BadInput(f"{out_dir}: expected an output directory, found that {parent} is a file")
    if parent.exists() and not os.access(parent, os.W_OK | os.X_OK):
        raise _BadInput(
            f"{out_dir}: expected a writable output directory, found {parent} not writable"
        )


def _warn_catalogue(scenario: Scenario) -> None:
    """One ``dcsim: warning:`` line on stderr per catalogue figure the motor model disagrees
    with by more than 5 % (``[motor]`` catalogue data; see ``dcsim motor``), and one for a
    switching bridge's PWM frequency in the audible band."""
    for message in getattr(scenario.motor, "catalogue_warnings", ()):
        _write(sys.stderr, f"{_PROG}: warning: {scenario.source}: motor: {message}\n")
    audible = scenario.bridge.audible_warning
    if audible is not None:
        _write(sys.stderr, f"{_PROG}: warning: {scenario.source}: {audible}\n")


def _run_and_write(given: str, label: str, out_dir: Path) -> int:
    """Shared body of ``run`` and ``demo``."""
    _check_out_dir(out_dir)
    scenario = _load(given)
    _warn_catalogue(scenario)

    from dcsim.engine.run import simulate
    from dcsim.results.io import write_outputs
    from dcsim.results.summary import format_summary

    with _Progress(sys.stderr, label) as progress:
        result = simulate(scenario, progress=progress.update)
    files = write_outputs(result, out_dir)

    lines = [format_summary(result.summary), "", f"files written to {_shown(out_dir)}:"]
    lines += [f"  {_shown(f)}" for f in files]
    _write(sys.stdout, "\n".join(lines) + "\n")
    return EXIT_OK


def _cmd_run(args: argparse.Namespace) -> int:
    out_dir = Path(args.out) if args.out else DEFAULT_RUN_ROOT / Path(args.scenario).stem
    return _run_and_write(args.scenario, Path(args.scenario).name, out_dir)


def _cmd_demo(args: argparse.Namespace) -> int:
    out_dir = Path(args.out) if args.out else DEFAULT_DEMO_DIR
    return _run_and_write(str(DEMO_SCENARIO), "the demo scenario", out_dir)


class _RunsProgress:
    """Progress of the several runs of ``check`` / ``report``: one :class:`_Progress` each."""

    def __init__(self, stream: TextIO, label: str) -> None:
        self.stream, self.label = stream, label
        self.name: str | None = None
        self.current: _Progress | None = None

    def __call__(self, name: str, fraction: float) -> None:
        if name != self.name:
            self.close()
            self.name = name
            self.current = _Progress(self.stream, f"{self.label} [{name} run]").__enter__()
        assert self.current is not None
        self.current.update(fraction)

    def close(self) -> None:
        if self.current is not None:
            self.current.__exit__(None, None, None)
            self.current = None


def _checked(given: str):
    """Load a scenario and run all its design checks (with progress on stderr)."""
    scenario = _load(given)

    from dcsim.checks.session import run_checks

    progress = _RunsProgress(sys.stderr, Path(given).name)
    try:
        return run_checks(scenario, progress)
    finally:
        progress.close()


def _cmd_check(args: argparse.Namespace) -> int:
    report = _checked(args.scenario)
    from dcsim.checks.report import format_table

    _write(sys.stdout, format_table(report) + "\n")
    if args.json:
        import json

        _write(sys.stdout, json.dumps(report.as_dict(), indent=2, allow_nan=False) + "\n")
    return EXIT_NOT_PASSED if report.failed else EXIT_OK


def _cmd_report(args: argparse.Namespace) -> int:
    out_dir = Path(args.out)
    _check_out_dir(out_dir)
    report = _checked(args.scenario)
    from dcsim.checks.report import format_table, write_report

    files = write_report(report, out_dir)
    lines = [format_table(report), "", f"files written to {_shown(out_dir)}:"]
    lines += [f"  {_shown(f)}" for f in files]
    _write(sys.stdout, "\n".join(lines) + "\n")
    return EXIT_NOT_PASSED if report.failed else EXIT_OK


def _cmd_validate(args: argparse.Namespace) -> int:
    scenario = _load(args.scenario)
    _warn_catalogue(scenario)
    # the run's plan too (step, rows, events against the parameters): what `run` would
    # refuse, `validate` refuses. assemble needs numpy only, not the compiled kernel.
    from dcsim.engine.assemble import assemble, assemble_bridge
    from dcsim.engine.machine_run import machine_inputs, needs_machine_kernel

    if needs_machine_kernel(scenario):
        machine_inputs(scenario)  # its sub-step budget and [shaft] checks too
    elif scenario.bridge.model == "ideal":
        assemble(scenario)
    else:
        assemble_bridge(scenario)
    n = len(scenario.events)
    duration = scenario.simulation.duration
    _write(sys.stdout, f"ok: {args.scenario} ({duration:g} s, {n} event{'' if n == 1 else 's'})\n")
    return EXIT_OK


def _rate(text: str, option: str) -> float:
    """A frequency option: rad/s, or a unit string such as "200 Hz" or "1200 rad/s"."""
    from dcsim.units import UnitError, to_si

    try:
        value = float(text)
    except ValueError:
        try:
            unit = "Hz" if text.strip().endswith("Hz") else "rad/s"
            value = to_si(text, unit, noun="a frequency", example="200 Hz")
            if unit == "Hz":
                value *= 2 * 3.141592653589793
        except UnitError as err:
            raise _BadInput(f"{option}: {err.detail}") from None
    if not value > 0:
        raise _BadInput(f"{option}: expected a frequency above 0, found {text!r}")
    return value


def _cmd_tune(args: argparse.Namespace) -> int:
    scenario = _load(args.scenario)
    import json

    from dcsim.tuning.report import closed_loop_step, format_result, save_tuning_plots
    from dcsim.tuning.tuner import _loop_tf, _prefilter, check_in_simulation, tune, with_gains

    tolerances = None
    if args.tolerance is not None:
        if not 0 < args.tolerance < 1:
            raise _BadInput(
                f"--tolerance: expected a fraction between 0 and 1, found {args.tolerance}"
            )
        tolerances = {
            k: args.tolerance
            for k in (
                "motor.resistance",
                "motor.inductance",
                "motor.torque_constant",
                "motor.inertia",
            )
        }
    if args.write and Path(args.write).exists() and not args.force:
        raise _BadInput(
            f"{args.write}: expected a new file (or --force to replace it), found an existing file"
        )
    result = tune(
        scenario,
        args.loop,
        args.method,
        bandwidth_rad_s=_rate(args.bandwidth, "--bandwidth") if args.bandwidth else None,
        a=args.a,
        pm_min_deg=args.pm,
        gm_min_dB=args.gm,
        ms_max=args.ms,
        model=args.model,
        tolerances=tolerances,
    )
    data = result.as_dict()
    text = format_result(result)
    if args.check:
        check = check_in_simulation(scenario, result)
        data["simulation_check"] = check
        p, q = check["predicted"], check["simulated"]

        def g(x):
            return "n/a" if x is None else f"{x:.3g}"

        text += (
            f"\n\nSimulation check (a step of {check['step']:.4g}; predicted without a "
            f"prefilter / simulated): overshoot {g(p['overshoot_percent'])} / "
            f"{g(q['overshoot_percent'])} %, rise {g(p['rise_time_s'])} / {g(q['rise_time_s'])} "
            f"s, settling {g(p['settling_time_s'])} / {g(q['settling_time_s'])} s; "
            f"{check['note']}"
        )
    if args.q_format:
        if not 1 <= args.q_format <= 31:
            raise _BadInput(f"--q-format: expected 1 to 31 bits, found {args.q_format}")
        if not (args.input_base > 0 and args.output_base > 0):
            raise _BadInput("--input-base / --output-base: expected values above 0")
        fixed = result.fixed_point(
            q_bits=args.q_format, input_base=args.input_base, output_base=args.output_base
        )
        data["fixed_point"] = fixed
        text += f"\n\nQ{args.q_format} coefficients (input base {args.input_base:g}, output base "
        text += f"{args.output_base:g}; value = mantissa * 2^(shift - {args.q_format})):"
        for name in ("q0", "q1", "kp", "ki_h"):
            e = fixed[name]
            text += (
                f"\n  {name:<5} mantissa {e['mantissa']:>7d}  shift {e['shift']:>2d}  "
                f"({e['per_unit']:.6g} p.u.)"
            )
    written = []
    if args.plots:
        from dcsim.tuning.plants import loop_plant

        plant = loop_plant(scenario, args.loop)
        lt = _loop_tf(
            plant, result.kp, result.ki, result.kd, result.model, result.discretisation, 0.0
        )
        pre = _prefilter(result.prefilter_time_s, result.sample_time_s, result.model)
        written += save_tuning_plots(result, lt, closed_loop_step(lt, pre), args.plots)
    if args.write:
        from dcsim.scenario.write import write_scenario

        write_scenario(
            with_gains(scenario, result),
            args.write,
            header=f"{args.scenario} with the {args.loop} loop tuned by {args.method} (dcsim tune)",
            force=args.force,
        )
        written.append(Path(args.write))
    if args.json:
        _write(sys.stdout, json.dumps(data, indent=2, default=float) + "\n")
    else:
        lines = [text]
        if written:
            lines += ["", "files written:"] + [f"  {_shown(f)}" for f in written]
        _write(sys.stdout, "\n".join(lines) + "\n")
    return EXIT_OK


def _cmd_motor(args: argparse.Namespace) -> int:
    scenario = _load(args.scenario)
    from dcsim.scenario.datasheet import (
        format_machine,
        format_motor,
        machine_as_dict,
        motor_as_dict,
    )

    if args.json:
        import json

        data = {"source": scenario.source, **motor_as_dict(scenario.motor)}
        data.update(machine_as_dict(scenario))
        data["caution"] = _CAUTION_EPILOG
        _write(sys.stdout, json.dumps(data, indent=2, allow_nan=False) + "\n")
        return EXIT_OK
    title = f"{args.scenario}: {scenario.about.title}" if scenario.about.title else args.scenario
    text = format_motor(scenario.motor, title=title)
    machine = format_machine(scenario)
    if machine:
        text += "\n\n" + machine
    _write(sys.stdout, f"{text}\n\n{_CAUTION_EPILOG}\n")
    return EXIT_OK


def _cmd_fit(args: argparse.Namespace) -> int:
    given = args.log
    if not given.strip():
        raise _BadInput("expected a CSV motor log, found an empty file name")
    out_dir = Path(args.out) if args.out else Path("dcsim-fit") / Path(given).stem
    _check_out_dir(out_dir)
    from dcsim.identify.report import FIT_FILES

    if not args.force:
        for name in FIT_FILES:
            if (out_dir / name).exists():
                raise _BadInput(
                    f"{out_dir / name}: expected a new file (or --force to replace it), found "
                    "an existing file"
                )
    from dcsim.identify.fit import fit_motor
    from dcsim.identify.log import read_log_csv
    from dcsim.identify.report import format_fit, write_fit

    result = fit_motor(read_log_csv(given))
    files = write_fit(result, out_dir, force=args.force)
    if args.json:
        import json

        data = result.as_dict()
        data["files"] = [str(f) for f in files]
        data["caution"] = _CAUTION_EPILOG
        _write(sys.stdout, json.dumps(data, indent=2, allow_nan=False) + "\n")
        return EXIT_OK
    lines = [format_fit(result), "", "files written:"]
    lines += [f"  {_shown(f)}" for f in files]
    lines += ["", _CAUTION_EPILOG]
    _write(sys.stdout, "\n".join(lines) + "\n")
    return EXIT_OK


def _cmd_duty_curve(args: argparse.Namespace) -> int:
    out_dir = (
        Path(args.out) if args.out else DEFAULT_RUN_ROOT / (Path(args.scenario).stem + "-duty")
    )
    _check_out_dir(out_dir)
    if args.points < 2:
        raise _UsageError(f"--points: expected 2 or more, found {args.points}")
    scenario = _load(args.scenario)

    import numpy as np

    from dcsim.results.io import atomic_write
    from dcsim.studies.duty_curve import format_duty_curve, plot_duty_curve, speed_duty_curve

    duties = np.linspace(1.0 / args.points, 1.0, args.points)
    with _Progress(sys.stderr, f"{Path(args.scenario).name} [speed against duty]") as progress:
        curve = speed_duty_curve(scenario, duties, progress=progress.update)
    out_dir.mkdir(parents=True, exist_ok=True)
    rows = curve.as_rows()
    header = list(rows[0])

    def write_csv(tmp: Path) -> None:
        with open(tmp, "w", encoding="utf-8") as fh:
            fh.write(",".join(header) + "\n")
            for r in rows:
                fh.write(",".join(str(r[k]) for k in header) + "\n")

    files = [
        atomic_write(out_dir / "duty_curve.csv", write_csv),
        plot_duty_curve(curve, out_dir / "duty_curve.png"),
    ]
    lines = [format_duty_curve(curve), "", f"files written to {_shown(out_dir)}:"]
    lines += [f"  {_shown(f)}" for f in files]
    lines += ["", _CAUTION_EPILOG]
    _write(sys.stdout, "\n".join(lines) + "\n")
    return EXIT_OK


def _cmd_sweep(args: argparse.Namespace) -> int:
    given = args.sweep
    if not given.strip():
        raise _BadInput("expected a sweep file name, found an empty string")
    path = Path(given)
    if not path.exists():
        raise _BadInput(f"{given}: file not found")
    if path.is_dir():
        raise _BadInput(f"{given}: expected a sweep file, found a directory")
    out_dir = Path(args.out) if args.out else DEFAULT_RUN_ROOT / path.stem
    _check_out_dir(out_dir)
    if args.workers is not None and args.scheduler:
        raise _BadInput("--workers, --scheduler: expected one of them, found both")
    if args.workers is not None and args.workers < 1:
        raise _BadInput(f"--workers: expected 1 or more, found {args.workers}")

    from dcsim.sweep.execute import run_sweep
    from dcsim.sweep.report import format_report

    try:
        outcome = run_sweep(
            given,
            out_dir,
            workers=args.workers,
            scheduler=args.scheduler,
            resume=args.resume,
            confirm=args.yes,
        )
    except KeyboardInterrupt:
        _write(
            sys.stderr,
            f"{_PROG}: interrupted; the finished runs are in "
            f"{_shown(out_dir / 'results.csv')}; --resume runs the rest\n",
        )
        return EXIT_INTERRUPTED
    lines = [format_report(outcome.report)] if outcome.report is not None else []
    if outcome.done_before:
        lines.append(
            f"({outcome.done_before} runs were in {_shown(out_dir)} already; "
            f"{outcome.executed.size} more were run)"
        )
    top = [f for f in outcome.files if f.parent == out_dir]
    plots = [f for f in top if f.suffix == ".png"]
    lines += ["", f"files written to {_shown(out_dir)}:"]
    lines += [f"  {f.name}" for f in top if f.suffix != ".png"]
    if plots:
        lines.append(f"  {len(plots)} plots: hist_<metric>.png, scatter_<metric>.png")
    traces = sorted({f.parent.name for f in outcome.files if f.parent.parent.name == "traces"})
    if traces:
        lines.append(f"  traces/{{{', '.join(traces)}}}/ (trace.csv, summary.json)")
    _write(sys.stdout, "\n".join(lines) + "\n")
    return EXIT_OK if outcome.failed == 0 and outcome.passed == outcome.runs else EXIT_NOT_PASSED


# --------------------------------------------------------------------------------------------
# Parser and entry point
# --------------------------------------------------------------------------------------------


def _version() -> str:
    try:
        from importlib.metadata import PackageNotFoundError, version
    except ImportError:  # pragma: no cover
        return "unknown"
    try:
        return version("dcsim")
    except PackageNotFoundError:
        return "unknown (not installed)"


def build_parser() -> argparse.ArgumentParser:
    """The argument parser of the ``dcsim`` command.

    Returns
    -------
    argparse.ArgumentParser
        A parser whose namespace carries ``handler`` (the command function) and ``debug``.
    """
    parser = _Parser(
        prog=_PROG,
        description="Time-domain simulation of brushed / permanent-magnet DC motor drives.",
        epilog=(
            "Exit codes: 0 success, 3 a design check fails or sweep runs failed, 2 bad input, "
            "1 any other failure, "
            "130 interrupted. " + _CAUTION_EPILOG
        ),
    )
    parser.add_argument("--version", action="version", version=f"%(prog)s {_version()}")
    parser.add_argument(
        "--debug", action="store_true", default=False, help="show the full traceback of errors"
    )
    # --debug also accepted after the command; SUPPRESS keeps it from resetting the top one.
    common = _Parser(add_help=False)
    common.add_argument(
        "--debug",
        action="store_true",
        default=argparse.SUPPRESS,
        help="show the full traceback of errors",
    )

    commands = parser.add_subparsers(title="commands", dest="command", metavar="COMMAND")

    run = commands.add_parser(
        "run",
        parents=[common],
        help="simulate a scenario and write trace, summary and plots",
        description="Simulate a scenario file and write trace.csv, summary.json and PNG plots.",
    )
    run.add_argument("scenario", metavar="SCENARIO", help="scenario file (TOML)")
    run.add_argument(
        "--out", metavar="DIR", help="output directory (default: ./dcsim-out/<scenario file stem>)"
    )
    run.set_defaults(handler=_cmd_run)

    validate = commands.add_parser(
        "validate",
        parents=[common],
        help="check a scenario file without running it",
        description="Load and check a scenario file without running it.",
    )
    validate.add_argument("scenario", metavar="SCENARIO", help="scenario file (TOML)")
    validate.set_defaults(handler=_cmd_validate)

    tune_ = commands.add_parser(
        "tune",
        parents=[common],
        help="tune a loop of a scenario by a published method",
        description="Gains of the current, speed or position loop by a named method, with "
        "margins, bandwidth and step figures from the sampled plant.",
    )
    tune_.add_argument("scenario", metavar="SCENARIO", help="scenario file (TOML)")
    tune_.add_argument("--loop", required=True, choices=("current", "speed", "position"))
    tune_.add_argument(
        "--method",
        required=True,
        choices=(
            "imc",
            "modulus-optimum",
            "symmetric-optimum",
            "simc",
            "ziegler-nichols",
            "optimise",
            "scenario",
        ),
        help="tuning method; 'scenario' analyses the scenario's own gains",
    )
    tune_.add_argument(
        "--bandwidth", metavar="RATE", help="target bandwidth (imc): rad/s or '200 Hz'"
    )
    tune_.add_argument(
        "--a", type=float, default=2.0, help="symmetric-optimum parameter (default 2)"
    )
    tune_.add_argument(
        "--pm", type=float, default=60.0, help="optimise: phase margin at least [deg]"
    )
    tune_.add_argument("--gm", type=float, default=6.0, help="optimise: gain margin at least [dB]")
    tune_.add_argument("--ms", type=float, default=1.6, help="optimise: sensitivity peak at most")
    tune_.add_argument("--model", choices=("discrete", "continuous"), default="discrete")
    tune_.add_argument(
        "--tolerance", type=float, help="worst case over +- this fraction of R, L, K, J"
    )
    tune_.add_argument("--json", action="store_true", help="print one JSON object")
    tune_.add_argument("--check", action="store_true", help="check the gains in the simulation")
    tune_.add_argument("--plots", metavar="DIR", help="write bode.png, nyquist.png, step.png here")
    tune_.add_argument("--write", metavar="NEW.toml", help="write the scenario with the gains")
    tune_.add_argument("--force", action="store_true", help="let --write replace a file")
    tune_.add_argument(
        "--q-format", type=int, metavar="BITS", help="fixed-point coefficients (e.g. 15)"
    )
    tune_.add_argument(
        "--input-base",
        type=float,
        default=1.0,
        help="fixed point: base of the measured quantity [SI]",
    )
    tune_.add_argument(
        "--output-base", type=float, default=1.0, help="fixed point: base of the loop's output [SI]"
    )
    tune_.set_defaults(handler=_cmd_tune)

    check = commands.add_parser(
        "check",
        parents=[common],
        help="design checks: fuse, regeneration, thermal, duty cycle, loop margins",
        description="Run a scenario and the variants its checks need (the rotor locked, the "
        "supply corners) and print a verdict per check with its margin. Exit 0 when every "
        "check passes, 3 when any fails, 2 on bad input. Limits and ratings come from the "
        "scenario's [checks] and [thermal] tables.",
    )
    check.add_argument("scenario", metavar="SCENARIO", help="scenario file (TOML)")
    check.add_argument(
        "--json", action="store_true", help="also print the verdicts as one JSON object"
    )
    check.set_defaults(handler=_cmd_check)

    report = commands.add_parser(
        "report",
        parents=[common],
        help="design checks as one self-contained HTML report with plots and verdicts.json",
        description="As 'check', then write DIR/report.html (plots embedded, viewable "
        "offline), DIR/verdicts.json and the PNGs. Exit codes as 'check'.",
    )
    report.add_argument("scenario", metavar="SCENARIO", help="scenario file (TOML)")
    report.add_argument("--out", metavar="DIR", required=True, help="output directory")
    report.set_defaults(handler=_cmd_report)

    motor = commands.add_parser(
        "motor",
        parents=[common],
        help="the motor model a scenario derives, and its catalogue consistency table",
        description="Print the [motor] model the scenario gives (SI and catalogue units, and "
        "where each key came from) and the consistency table of its catalogue figures: each "
        "figure against the model's value, the difference in %%, ok or WARN beyond 5 %%.",
    )
    motor.add_argument("scenario", metavar="SCENARIO", help="scenario file (TOML)")
    motor.add_argument("--json", action="store_true", help="print one JSON object")
    motor.set_defaults(handler=_cmd_motor)

    fit = commands.add_parser(
        "fit",
        parents=[common],
        help="fit R, L, K, J and friction to a measured log and write the [motor] table",
        description="Fit resistance, inductance, torque constant, inertia, viscous and "
        "Coulomb friction to a CSV log (header 'time [s], voltage [V], current [A], speed "
        "[rpm]' or with position; units in brackets), with 95 %% confidence intervals; write "
        "DIR/motor.toml (a loadable scenario with the fitted [motor]) and DIR/fit.png "
        "(measured against fitted).",
    )
    fit.add_argument("log", metavar="LOG.csv", help="measured log (CSV)")
    fit.add_argument(
        "--out", metavar="DIR", help="output directory (default: ./dcsim-fit/<log file stem>)"
    )
    fit.add_argument("--json", action="store_true", help="print one JSON object")
    fit.add_argument("--force", action="store_true", help="replace existing files in DIR")
    fit.set_defaults(handler=_cmd_fit)

    sweep = commands.add_parser(
        "sweep",
        parents=[common],
        help="run a grid, Monte Carlo tolerances and worst-case corners of a scenario",
        description="Run every run of a sweep file (grid x nominal, corners and Monte Carlo "
        "samples of the tolerances) in parallel, and write results.csv / results.parquet (a row "
        "per run), report.json (worst cases, statistics) and PNG histograms and scatter plots. "
        "Exit 3 when any run fails (an error, or a criterion of the sweep file).",
    )
    sweep.add_argument("sweep", metavar="SWEEP", help="sweep file (TOML)")
    sweep.add_argument(
        "--out", metavar="DIR", help="output directory (default: ./dcsim-out/<sweep file stem>)"
    )
    sweep.add_argument(
        "--workers", type=int, metavar="N", help="local worker processes (default: all CPUs)"
    )
    sweep.add_argument(
        "--scheduler", metavar="ADDRESS", help="send the runs to a Dask scheduler (tcp://host:port)"
    )
    sweep.add_argument(
        "--resume", action="store_true", help="continue the sweep in DIR: run only the rest"
    )
    sweep.add_argument("--yes", action="store_true", help="confirm a sweep of more than 10000 runs")
    sweep.set_defaults(handler=_cmd_sweep)

    duty = commands.add_parser(
        "duty-curve",
        parents=[common],
        help="settled speed against duty in slow, fast and mixed decay (switching bridge)",
        description="Run a switching-bridge scenario in voltage mode at N duties in each decay "
        "mode (slow, fast, mixed; the scenario's other bridge keys kept) and write "
        "DIR/duty_curve.csv and DIR/duty_curve.png: the settled mean speed (last half of each "
        "run) and the current ripple against duty, which shows the light-load non-linearity "
        "of fast decay.",
    )
    duty.add_argument("scenario", metavar="SCENARIO", help="scenario file (TOML)")
    duty.add_argument(
        "--out", metavar="DIR", help="output directory (default: ./dcsim-out/<stem>-duty)"
    )
    duty.add_argument(
        "--points", type=int, default=10, metavar="N", help="duties from 1/N to 1 (default 10)"
    )
    duty.set_defaults(handler=_cmd_duty_curve)

    demo = commands.add_parser(
        "demo",
        parents=[common],
        help="run the built-in demo (a harbour line winch)",
        description="Run the built-in demo scenario: a harbour line winch starting on slack "
        "line, taking up tension at 0.3 s, with a supply sag at 0.6 s.",
    )
    demo.add_argument("--out", metavar="DIR", help="output directory (default: ./dcsim-demo)")
    demo.set_defaults(handler=_cmd_demo)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Run the ``dcsim`` command.

    Parameters
    ----------
    argv : sequence of str, optional
        Arguments without the program name; ``None`` reads ``sys.argv[1:]``.

    Returns
    -------
    int
        Exit code: 0 success, 2 bad input, 1 other failure, 130 interrupted.
    """
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except _UsageError as exc:
        _error_line(str(exc))
        return EXIT_BAD_INPUT
    except SystemExit as exc:  # --help and --version print, then exit 0
        return exc.code if isinstance(exc.code, int) else EXIT_OK

    handler: Callable[[argparse.Namespace], int] | None = getattr(args, "handler", None)
    if handler is None:
        _error_line(
            "no command given; choose one of run, validate, check, report, tune, sweep, motor, "
            "fit, demo (see 'dcsim --help')"
        )
        return EXIT_BAD_INPUT

    if args.debug:
        return handler(args)
    try:
        return handler(args)
    except KeyboardInterrupt:
        _write(sys.stderr, f"{_PROG}: interrupted\n")
        return EXIT_INTERRUPTED
    except _BadInput as exc:
        _error_line(str(exc))
        return EXIT_BAD_INPUT
    except DcsimError as exc:
        # Bad-input errors of the project subclass ValueError (ScenarioError, TraceFileError).
        _error_line(str(exc) or type(exc).__name__)
        return EXIT_BAD_INPUT if isinstance(exc, ValueError) else EXIT_FAILURE
    except OSError as exc:
        where = exc.filename2 or exc.filename
        reason = exc.strerror or str(exc)
        _error_line(f"{where}: {reason}" if where else reason)
        return EXIT_FAILURE
    except Exception as exc:  # noqa: BLE001 - the last resort: one line, not a traceback
        _error_line(
            f"unexpected {type(exc).__name__}: {_one_line(str(exc))} "
            "(run with --debug for the traceback)"
        )
        return EXIT_FAILURE


if __name__ == "__main__":
    sys.exit(main())
