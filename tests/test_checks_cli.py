"""``dcsim check`` and ``dcsim report``: exit codes, the caution first, files, bad input.

Exit codes are the contract's (CONTRACT.md): 0 when every check passes, 3 when any fails,
2 on bad input with one line on stderr.
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest

import dcsim
from dcsim import cli
from dcsim.checks.verdict import CAUTION

REPO = Path(__file__).resolve().parents[1]

DRIVE = """
[about]
title = "Bench fan behind a 5 A fuse"
[simulation]
duration = "0.3 s"
record_interval = "0.2 ms"
[motor]
resistance = "0.5 ohm"
inductance = "10 uH"
torque_constant = "0.05 N*m/A"
inertia = "1e-4 kg*m^2"
[supply]
voltage = "12 V"
resistance = "20 mohm"
capacitance = "100 uF"
[control]
voltage = "12 V"
[bridge]
model = "averaged"
[fuse]
rated_current = "5 A"
melting_i2t = "20 A^2*s"
min_melting_current = "10.5 A"
[checks]
stall_clear_time = "{clear}"
"""


def _write(tmp_path: Path, clear: str) -> Path:
    path = tmp_path / "fan.toml"
    path.write_text(DRIVE.format(clear=clear))
    return path


def test_check_passes_with_exit_0_and_the_caution_first(tmp_path, capsys):
    # The stall melts this fuse at 0.042 s (closed form in test_checks.py): within 0.5 s.
    code = cli.main(["check", str(_write(tmp_path, "0.5 s")), "--json"])
    out = capsys.readouterr().out
    assert code == 0
    assert out.splitlines()[0] == CAUTION
    payload = json.loads(out[out.index("{") :])
    assert payload["all_pass"] is True and payload["caution"] == CAUTION
    assert {v["name"] for v in payload["verdicts"]} >= {"fuse.survives_start", "fuse.clears_stall"}


def test_check_fails_with_exit_3(tmp_path, capsys):
    # ... and not within 0.02 s.
    code = cli.main(["check", str(_write(tmp_path, "20 ms"))])
    out = capsys.readouterr().out
    assert code == 3
    assert "FAIL" in out and "Fuse clears a stalled rotor" in out


def test_report_writes_html_and_verdicts(tmp_path, capsys):
    out_dir = tmp_path / "rep"
    code = cli.main(["report", str(_write(tmp_path, "20 ms")), "--out", str(out_dir)])
    capsys.readouterr()
    assert code == 3
    html = (out_dir / "report.html").read_text(encoding="utf-8")
    assert "simulation is not a substitute" in html
    verdicts = json.loads((out_dir / "verdicts.json").read_text())
    assert verdicts["all_pass"] is False
    assert (out_dir / "fuse_time_current.png").stat().st_size > 1000
    assert not [p for p in out_dir.iterdir() if p.name.startswith(".")]


@pytest.mark.parametrize(
    ("change", "key"),
    [
        ('stall_clear_time = "20 ms"\nstall_clear_tme = "1 s"', "checks.stall_clear_tme"),
        ('stall_clear_time = "2 A"', "checks.stall_clear_time"),
        ('stall_clear_time = "-1 s"', "checks.stall_clear_time"),
        ('stall_clear_time = "1 s"\nfuse_margin = 1.5', "checks.fuse_margin"),
        ('stall_clear_time = "1 s"\nsupply_min = "14 V"\nsupply_max = "10 V"', "checks.supply_max"),
    ],
)
def test_bad_check_keys_are_one_line_naming_the_key(tmp_path, capsys, change, key):
    # Source: project rule (one message naming file, key, expectation and finding; exit 2)
    text = DRIVE.format(clear="1 s").replace('stall_clear_time = "1 s"', change)
    path = tmp_path / "bad.toml"
    path.write_text(text)
    assert cli.main(["check", str(path)]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1
    assert "bad.toml" in err and key in err


def test_bad_temperature_difference_is_refused(tmp_path, capsys):
    # A hot-spot allowance is a difference: "10 degC" would silently be 283 K.
    text = DRIVE.format(clear="1 s") + (
        '[thermal]\nresistance = "2 K/W"\ntime_constant = "60 s"\nhot_spot_allowance = "10 degC"\n'
    )
    path = tmp_path / "bad.toml"
    path.write_text(text)
    assert cli.main(["validate", str(path)]) == 2
    err = capsys.readouterr().err
    assert "thermal.hot_spot_allowance" in err


def test_loop_margins_are_the_tuning_modules(tmp_path):
    # Source: python-control stability_margins on the exact sampled loop, as reported by
    # dcsim.tuning (checked against python-control in test_tuning_plants.py).
    from dcsim.checks.loops import loop_checks
    from dcsim.tuning.tuner import tune

    sc = dcsim.load_scenario(REPO / "scenarios" / "conveyor_speed_loop.toml")
    verdicts = {v.name: v for v in loop_checks(sc)}
    for loop in ("current", "speed"):
        figures = tune(sc, loop, "scenario").figures
        assert verdicts[f"loops.{loop}.phase_margin"].figure == figures.phase_margin_deg
        assert verdicts[f"loops.{loop}.gain_margin"].figure == figures.gain_margin_dB
        assert verdicts[f"loops.{loop}.phase_margin"].limit == 45.0
