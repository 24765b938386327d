"""The ``dcsim`` command line: exit codes, one-line errors, outputs, and fast start-up.

Error mapping is tested with stand-in loader and engine modules (placed in ``sys.modules``) so
that it is checked whether or not the real ones are there; the tests at the end use the real
loader and engine and are skipped only while those modules are missing.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import types
from pathlib import Path

import numpy as np
import pytest

from dcsim import cli
from dcsim.errors import ScenarioError, SimulationError
from dcsim.results.summary import CAUTION
from dcsim.results.trace import TRACE_COLUMNS, SimulationResult, Trace
from dcsim.scenario.schema import About, Event, Motor, Scenario, Simulation, Supply

REPO = Path(__file__).resolve().parents[1]
OUTPUT_NAMES = {
    "trace.csv",
    "summary.json",
    "overview.png",
    "current.png",
    "speed.png",
    "bus_voltage.png",
    "torque.png",
}


def run_cli(*args: str, cwd: Path) -> subprocess.CompletedProcess:
    """``python -m dcsim.cli ARGS`` in a fresh process, with this checkout first on the path."""
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join(filter(None, [str(REPO), env.get("PYTHONPATH")]))
    return subprocess.run(
        [sys.executable, "-m", "dcsim.cli", *args],
        cwd=cwd,
        env=env,
        capture_output=True,
        text=True,
        timeout=300,
    )


def assert_one_clean_line(stderr: str) -> str:
    lines = stderr.splitlines()
    assert len(lines) == 1, stderr
    assert "Traceback" not in stderr
    assert lines[0].startswith("dcsim: ")
    return lines[0]


# --------------------------------------------------------------------------------------------
# Stand-ins for the loader and the engine
# --------------------------------------------------------------------------------------------


def hand_scenario(source: str) -> Scenario:
    return Scenario(
        simulation=Simulation(duration=0.5),
        motor=Motor(resistance=0.8, inductance=1.5e-3, torque_constant=0.06, inertia=2e-4),
        supply=Supply(voltage=24.0),
        about=About(title="Warehouse shuttle drive"),
        events=(
            Event(at=0.1, changes=(("load.torque", 0.05),)),
            Event(at=0.2, changes=(("supply.voltage", 20.0),)),
        ),
        source=source,
    )


def hand_result(scenario: Scenario) -> SimulationResult:
    """Synthetic arrays: a CLI test, not a physics check."""
    t = np.linspace(0.0, scenario.simulation.duration, 101)
    cols = {name: np.cos(t * (i + 2)) for i, name in enumerate(TRACE_COLUMNS)}
    cols["time_s"] = t
    summary = {
        "peak_current_A": 12.5,
        "peak_current_time_s": 0.004,
        "i2t_A2s": 1.25,
        "final_speed_rad_s": 200.0,
        "peak_bus_voltage_V": 24.0,
        "min_bus_voltage_V": 19.5,
        "energy_from_supply_J": 10.0,
        "energy_copper_loss_J": 4.0,
        "kinetic_energy_change_J": 6.0,
    }
    return SimulationResult(scenario, Trace(cols), summary, 1e-6, 5e-3, (0.1, 0.2))


@pytest.fixture
def fake_modules(monkeypatch):
    """Install stand-in ``dcsim.scenario.load`` and ``dcsim.engine.run``; return their knobs."""
    knobs = types.SimpleNamespace(load_error=None, sim_error=None, loaded=[])

    def load_scenario(path):
        knobs.loaded.append(path)
        if knobs.load_error is not None:
            raise knobs.load_error
        return hand_scenario(str(path))

    def simulate(scenario, progress=None):
        if knobs.sim_error is not None:
            raise knobs.sim_error
        return hand_result(scenario)

    loader = types.ModuleType("dcsim.scenario.load")
    loader.load_scenario = load_scenario
    engine = types.ModuleType("dcsim.engine.run")
    engine.simulate = simulate
    monkeypatch.setitem(sys.modules, "dcsim.scenario.load", loader)
    monkeypatch.setitem(sys.modules, "dcsim.engine.run", engine)
    return knobs


@pytest.fixture
def scenario_file(tmp_path):
    path = tmp_path / "shuttle.toml"
    path.write_text("# contents are read by the stand-in loader only\n", encoding="utf-8")
    return path


# --------------------------------------------------------------------------------------------
# Command line itself (no loader or engine needed)
# --------------------------------------------------------------------------------------------


def test_help_lists_commands_and_caution(tmp_path):
    done = run_cli("--help", cwd=tmp_path)
    assert done.returncode == 0
    for command in ("run", "validate", "demo"):
        assert command in done.stdout
    assert "Caution:" in done.stdout
    assert done.stderr == ""


@pytest.mark.parametrize("command", ["run", "validate", "demo"])
def test_command_help(command, capsys):
    assert cli.main([command, "--help"]) == 0
    assert "usage: dcsim " + command in capsys.readouterr().out


def test_no_command_is_bad_input(capsys):
    assert cli.main([]) == 2
    line = assert_one_clean_line(capsys.readouterr().err)
    assert "no command" in line


def test_usage_errors_are_one_line(tmp_path):
    for args in (["frobnicate"], ["validate"], ["run", "x.toml", "--speed", "3"]):
        done = run_cli(*args, cwd=tmp_path)
        assert done.returncode == 2, args
        line = assert_one_clean_line(done.stderr)
        assert "usage:" not in line and "--help" in line


def test_validate_missing_file(tmp_path):
    done = run_cli("validate", "no_such_winch.toml", cwd=tmp_path)
    assert done.returncode == 2
    line = assert_one_clean_line(done.stderr)
    assert line == "dcsim: error: no_such_winch.toml: file not found"
    assert done.stdout == ""


def test_run_missing_file(tmp_path, capsys):
    assert cli.main(["run", str(tmp_path / "gone.toml"), "--out", str(tmp_path / "o")]) == 2
    assert "file not found" in assert_one_clean_line(capsys.readouterr().err)
    assert not (tmp_path / "o").exists()


def test_validate_directory(tmp_path, capsys):
    assert cli.main(["validate", str(tmp_path)]) == 2
    assert "found a directory" in assert_one_clean_line(capsys.readouterr().err)


def test_out_is_a_file(tmp_path, scenario_file, capsys):
    blocker = tmp_path / "taken"
    blocker.write_text("x", encoding="utf-8")
    assert cli.main(["run", str(scenario_file), "--out", str(blocker)]) == 2
    line = assert_one_clean_line(capsys.readouterr().err)
    assert "taken" in line and "expected an output directory" in line


def test_import_stays_light(tmp_path):
    code = (
        "import sys\n"
        "import dcsim.cli\n"
        "heavy = [m for m in ('matplotlib', 'numba', 'scipy', 'control', 'dcsim.engine',"
        " 'dcsim.results.plots') if m in sys.modules]\n"
        "print(','.join(heavy))\n"
    )
    env = dict(os.environ, PYTHONPATH=str(REPO))
    done = subprocess.run(
        [sys.executable, "-c", code], cwd=tmp_path, env=env, capture_output=True, text=True
    )
    assert done.returncode == 0, done.stderr
    assert done.stdout.strip() == ""


def test_help_caution_matches_the_reports():
    assert cli._CAUTION_EPILOG == CAUTION


def test_demo_file_is_shipped():
    text = cli.DEMO_SCENARIO.read_text(encoding="utf-8")
    assert "[[events]]" in text and "Caution:" in text


# --------------------------------------------------------------------------------------------
# Error mapping and outputs, with the stand-ins
# --------------------------------------------------------------------------------------------


def test_validate_reports_duration_and_events(fake_modules, scenario_file, capsys):
    assert cli.main(["validate", str(scenario_file)]) == 0
    assert capsys.readouterr().out == f"ok: {scenario_file} (0.5 s, 2 events)\n"


def test_scenario_error_is_exit_2_with_one_line(fake_modules, scenario_file, capsys):
    fake_modules.load_error = ScenarioError(
        "expected an inductance such as '2 mH',\nfound '2 ohm'",
        source=str(scenario_file),
        key="motor.inductance",
    )
    assert cli.main(["validate", str(scenario_file)]) == 2
    line = assert_one_clean_line(capsys.readouterr().err)
    assert line == (
        f"dcsim: error: {scenario_file}: motor.inductance: expected an inductance such as "
        "'2 mH', found '2 ohm'"
    )


def test_simulation_error_is_exit_1(fake_modules, scenario_file, tmp_path, capsys):
    fake_modules.sim_error = SimulationError("speed became non-finite at t = 0.2 s")
    assert cli.main(["run", str(scenario_file), "--out", str(tmp_path / "o")]) == 1
    line = assert_one_clean_line(capsys.readouterr().err)
    assert line == "dcsim: error: speed became non-finite at t = 0.2 s"
    assert not (tmp_path / "o").exists()  # nothing is written when the run fails


def test_unexpected_error_hints_at_debug(fake_modules, scenario_file, tmp_path, capsys):
    fake_modules.sim_error = ZeroDivisionError("float division by zero")
    assert cli.main(["run", str(scenario_file), "--out", str(tmp_path / "o")]) == 1
    line = assert_one_clean_line(capsys.readouterr().err)
    assert "ZeroDivisionError" in line and "--debug" in line


@pytest.mark.parametrize("where", ["before", "after"])
def test_debug_reraises(fake_modules, scenario_file, tmp_path, where):
    fake_modules.sim_error = ZeroDivisionError("float division by zero")
    args = ["run", str(scenario_file), "--out", str(tmp_path / "o")]
    args = ["--debug", *args] if where == "before" else [*args, "--debug"]
    with pytest.raises(ZeroDivisionError):
        cli.main(args)


def test_interrupt_is_exit_130(fake_modules, scenario_file, tmp_path, capsys):
    fake_modules.sim_error = KeyboardInterrupt()
    assert cli.main(["run", str(scenario_file), "--out", str(tmp_path / "o")]) == 130
    assert assert_one_clean_line(capsys.readouterr().err) == "dcsim: interrupted"


def test_write_failure_is_exit_1(fake_modules, scenario_file, tmp_path, monkeypatch, capsys):
    from dcsim.results import io as rio

    def refuse(result, out_dir):
        raise PermissionError(13, "Permission denied", str(out_dir))

    monkeypatch.setattr(rio, "write_outputs", refuse)
    assert cli.main(["run", str(scenario_file), "--out", str(tmp_path / "o")]) == 1
    line = assert_one_clean_line(capsys.readouterr().err)
    assert line == f"dcsim: error: {tmp_path / 'o'}: Permission denied"


def test_run_writes_outputs_and_prints_summary(fake_modules, scenario_file, tmp_path, capsys):
    out = tmp_path / "results"
    assert cli.main(["run", str(scenario_file), "--out", str(out)]) == 0
    captured = capsys.readouterr()
    assert {p.name for p in out.iterdir()} == OUTPUT_NAMES
    assert "12.5 A" in captured.out and "files written to" in captured.out
    for name in OUTPUT_NAMES:
        assert name in captured.out
    assert CAUTION in captured.out
    data = json.loads((out / "summary.json").read_text(encoding="utf-8"))
    assert data["peak_current_A"] == 12.5 and data["caution"] == CAUTION
    assert captured.err == ""  # a quick run off a terminal prints no progress


def test_run_default_out_dir(fake_modules, scenario_file, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    assert cli.main(["run", str(scenario_file)]) == 0
    assert {p.name for p in (tmp_path / "dcsim-out" / "shuttle").iterdir()} == OUTPUT_NAMES


def test_demo_default_out_dir(fake_modules, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    assert cli.main(["demo"]) == 0
    assert fake_modules.loaded == [str(cli.DEMO_SCENARIO)]
    assert {p.name for p in (tmp_path / "dcsim-demo").iterdir()} == OUTPUT_NAMES


def test_slow_run_reports_its_time(fake_modules, scenario_file, tmp_path, monkeypatch, capsys):
    monkeypatch.setattr(cli, "_SLOW_RUN_S", 0.0)  # make every run count as slow
    assert cli.main(["run", str(scenario_file), "--out", str(tmp_path / "o")]) == 0
    err = capsys.readouterr().err
    assert err.startswith("simulating shuttle.toml ... done in ") and err.endswith(" s\n")


# --------------------------------------------------------------------------------------------
# With the real loader and engine (skipped only while those modules are missing)
# --------------------------------------------------------------------------------------------


def test_validate_demo_file_with_real_loader(tmp_path):
    pytest.importorskip("dcsim.scenario.load")
    done = run_cli("validate", str(cli.DEMO_SCENARIO), cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    assert done.stdout == f"ok: {cli.DEMO_SCENARIO} (1 s, 2 events)\n"


def test_validate_bad_file_with_real_loader(tmp_path):
    pytest.importorskip("dcsim.scenario.load")
    text = cli.DEMO_SCENARIO.read_text(encoding="utf-8")
    bad = tmp_path / "bad_winch.toml"
    bad.write_text(text.replace('inductance = "1.5 mH"', 'inductance = "1.5 ohm"'), "utf-8")
    done = run_cli("validate", str(bad), cwd=tmp_path)
    assert done.returncode == 2
    line = assert_one_clean_line(done.stderr)
    assert "bad_winch.toml" in line and "inductance" in line and "ohm" in line


def test_validate_broken_toml_with_real_loader(tmp_path):
    pytest.importorskip("dcsim.scenario.load")
    bad = tmp_path / "torn.toml"
    bad.write_text('[motor\nresistance = "1 ohm"\n', encoding="utf-8")
    done = run_cli("validate", str(bad), cwd=tmp_path)
    assert done.returncode == 2
    assert "torn.toml" in assert_one_clean_line(done.stderr)


def test_demo_end_to_end(tmp_path):
    pytest.importorskip("dcsim.scenario.load")
    pytest.importorskip("dcsim.engine.run")
    done = run_cli("demo", "--out", "demo-out", cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    assert {p.name for p in (tmp_path / "demo-out").iterdir()} == OUTPUT_NAMES
    assert "Energy account" in done.stdout and CAUTION in done.stdout


def test_validate_every_bad_loading_case_in_process(tmp_path, capsys):
    """Every bad-input case of the loader tests, through ``dcsim validate``: exit 2, one line."""
    pytest.importorskip("dcsim.scenario.load")
    from test_scenario_loading import BAD

    assert BAD  # the list exists and is not empty
    for index, (name, text, _key, _fragments) in enumerate(BAD):
        slug = "".join(c if c.isalnum() else "_" for c in name)
        path = tmp_path / f"bad_{index:02d}_{slug}.toml"
        path.write_text(text, encoding="utf-8")
        code = cli.main(["validate", str(path)])
        err = capsys.readouterr().err
        assert code == 2, (name, err)
        assert "Traceback" not in err, name
        lines = err.splitlines()
        assert len(lines) == 1 and lines[0].strip(), (name, err)
        assert path.name in lines[0], (name, lines[0])
