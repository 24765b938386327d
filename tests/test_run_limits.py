"""Limits of a run that the user can hit: refused up front with a clear message (exit 2),
or stopped with one (exit 1) -- never a silently wrong answer.

No physics reference here: these are input-handling checks. Where a limit is numerical its
reason is stated beside it.
"""

from __future__ import annotations

from pathlib import Path

import pytest

import dcsim
from dcsim import cli

STIFF = """
[simulation]
duration = "0.01 s"
{extra}
[motor]
resistance = "4 ohm"
inductance = "2.75e-6 H"
torque_constant = "0.0274 N*m/A"
inertia = "3.2284e-6 kg*m^2"
[supply]
voltage = "{volts}"
[control]
voltage = "{volts}"
"""


def _file(tmp_path: Path, extra: str = "", volts: str = "1 V") -> Path:
    path = tmp_path / "spindle.toml"
    text = STIFF.format(extra=extra, volts=volts)
    if "1 ns" in extra:
        text = text.replace('duration = "0.01 s"', 'duration = "10 s"')
    path.write_text(text, encoding="utf-8")
    return path


def _one_line(err: str) -> str:
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert len(lines) == 1, err
    assert "Traceback" not in err
    return lines[0]


@pytest.mark.parametrize(
    ("extra", "key", "words"),
    [
        # A step of 1 ms on a 0.69 us electrical time constant: the states would still be
        # exact (exponential step) but the summary integrals would not.
        ('step = "1 ms"', "simulation.step", "expected a step of at most"),
        ('record_interval = "50 us"\nstep = "30 ns"', "simulation.record_interval",
         "whole multiple of simulation.step"),
        # 10 s at 69 ns steps: more steps than the kernel takes in one run
        ('record_interval = "1 ns"', "simulation.step", "steps"),
    ],
)  # fmt: skip
def test_validate_refuses_what_run_would_refuse(tmp_path, capsys, extra, key, words):
    path = _file(tmp_path, extra)
    assert cli.main(["validate", str(path)]) == 2
    line = _one_line(capsys.readouterr().err)
    assert str(path) in line and key in line and words in line


def test_trace_memory_is_bounded(tmp_path, capsys):
    text = STIFF.replace('duration = "0.01 s"', 'duration = "3000 s"').replace(
        'inductance = "2.75e-6 H"', 'inductance = "2 mH"'
    )
    path = tmp_path / "soak.toml"
    path.write_text(text.format(extra='record_interval = "10 us"', volts="1 V"))
    assert cli.main(["validate", str(path)]) == 2
    line = _one_line(capsys.readouterr().err)
    assert "simulation.record_interval" in line and "trace rows" in line


def test_output_directory_is_checked_before_the_run(tmp_path, capsys):
    blocker = tmp_path / "afile"
    blocker.write_text("not a directory")
    assert cli.main(["run", str(_file(tmp_path)), "--out", str(blocker / "sub")]) == 2
    line = _one_line(capsys.readouterr().err)
    assert "expected an output directory" in line
    assert "simulating" not in line


def test_empty_file_name_is_bad_input(capsys):
    assert cli.main(["validate", ""]) == 2
    assert "empty" in _one_line(capsys.readouterr().err)


def test_overflowing_totals_stop_the_run_with_a_message(tmp_path):
    # 1e300 V: the state stays finite but i^2 overflows floating point (max ~1.8e308).
    sc = dcsim.load_scenario(_file(tmp_path, volts="1e300 V"))
    with pytest.raises(dcsim.SimulationError, match="not finite"):
        dcsim.simulate(sc)


def test_non_finite_state_names_no_step_the_user_did_not_set(tmp_path, capsys):
    path = _file(tmp_path, volts="1e307 V")
    assert cli.main(["run", str(path), "--out", str(tmp_path / "o")]) == 1
    line = _one_line(capsys.readouterr().err)
    assert "non-finite" in line or "not finite" in line
    assert "simulation.step" not in line
    assert not (tmp_path / "o" / "trace.csv").exists()  # nothing half-written


PLUGGED = """
[about]
title = "sorter belt driven backwards by its load while the drive pushes forward"
[simulation]
duration = "20 ms"
[motor]
resistance = "1 ohm"
inductance = "10 mH"
torque_constant = "0.01 N*m/A"
inertia = "1e-6 kg*m^2"
[load]
torque = "-0.125 N*m"
[supply]
voltage = "5 V"
resistance = "1 ohm"
[control]
voltage = "-5 V"
"""


def test_bus_that_would_go_negative_stops_with_a_message(tmp_path, capsys):
    # The load overhauls the shaft forward while the bridge is fully on backwards (plugging):
    # the armature current reaches (V + K w) / R, more than the 5 A the 1 ohm source can pass
    # at zero bus voltage -- Kirchhoff's voltage law gives v = V_s - R_s i_s < 0, which the
    # ideal bridge (no freewheeling diodes) cannot clamp. Source: KVL over the source.
    path = tmp_path / "plugged.toml"
    path.write_text(PLUGGED)
    assert cli.main(["run", str(path), "--out", str(tmp_path / "o")]) == 1
    line = _one_line(capsys.readouterr().err)
    assert "below zero" in line and "freewheeling" in line


DROPOUT = """
[about]
title = "conveyor: the supply drops out, the armature is shorted through the dead source"
[simulation]
duration = "0.4 s"
[motor]
resistance = "1.2 ohm"
inductance = "2 mH"
torque_constant = "0.05 N*m/A"
inertia = "1e-4 kg*m^2"
[supply]
voltage = "24 V"
[control]
voltage = "24 V"
[[events]]
at = "0.2 s"
set = { "supply.voltage" = "0 V" }
"""


def test_supply_dropout_to_an_ideal_zero_volt_source_brakes_and_runs_on():
    # A 0 V ideal source takes current either way: the fully-on bridge shorts the armature,
    # which brakes (bus exactly 0 V, not below it). The run must go on, current reversed.
    # Source: Kirchhoff's voltage law; the piecewise closed form of such events is checked in
    # test_physics_linear.
    res = dcsim.simulate(dcsim.load_scenario_text(DROPOUT))
    tr = res.trace
    after = tr["time_s"] > 0.2
    assert (tr["bus_voltage_V"][after] == 0.0).all()
    assert tr["current_A"][after].min() < 0.0  # generating into the short: braking
    assert res.summary.energy_closure <= 1e-6  # Source: conservation of energy
