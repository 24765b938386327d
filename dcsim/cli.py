"""The ``dcsim`` command: ``run``, ``validate`` and ``demo``.

Exit codes: 0 success; 2 bad input (scenario file, command line), with one line on stderr
naming the file, the key, what was expected and what was found; 1 any other failure, with one
line; 130 interrupted. ``--debug`` shows the full traceback instead.

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


def _run_and_write(given: str, label: str, out_dir: Path) -> int:
    """Shared body of ``run`` and ``demo``."""
    _check_out_dir(out_dir)
    scenario = _load(given)

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


def _cmd_validate(args: argparse.Namespace) -> int:
    scenario = _load(args.scenario)
    # the run's plan too (step, rows, events against the parameters): what `run` would
    # refuse, `validate` refuses. assemble needs numpy only, not the compiled kernel.
    from dcsim.engine.assemble import assemble, assemble_bridge

    if scenario.bridge.model == "ideal":
        assemble(scenario)
    else:
        assemble_bridge(scenario)
    n = len(scenario.events)
    duration = scenario.simulation.duration
    _write(sys.stdout, f"ok: {args.scenario} ({duration:g} s, {n} event{'' if n == 1 else 's'})\n")
    return EXIT_OK


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
            "Exit codes: 0 success, 2 bad input, 1 any other failure, 130 interrupted. "
            + _CAUTION_EPILOG
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
        _error_line("no command given; choose one of run, validate, demo (see 'dcsim --help')")
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
