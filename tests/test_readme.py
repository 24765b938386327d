"""The README's examples stay runnable: its scenario block loads and runs, its API snippet runs.

These are documentation checks, not physics checks; the one physical assertion (the energy
account closes) is conservation of energy, as in every other run of the suite.
"""

from __future__ import annotations

import os
import re
from pathlib import Path

import dcsim

ROOT = Path(__file__).resolve().parents[1]
README = (ROOT / "README.md").read_text(encoding="utf-8")


def _blocks(lang: str) -> list[str]:
    return re.findall(rf"```{lang}\n(.*?)```", README, flags=re.S)


def test_readme_scenario_block_loads_and_runs():
    block = _blocks("toml")[0]
    sc = dcsim.load_scenario_text(block, source="README.md")
    res = dcsim.simulate(sc)
    s = res.summary
    largest = max(abs(v) for k, v in s.items() if k.endswith("_J") and "residual" not in k)
    # Source: conservation of energy (the account of the contract closes).
    assert abs(s["energy_balance_residual_J"]) <= 1e-6 * largest
    assert res.trace["time_s"][-1] == sc.simulation.duration


PLANT = """
[simulation]
duration = "0.5 s"
[motor]
resistance = "0.8 ohm"
inductance = "1.2 mH"
torque_constant = "0.06 N*m/A"
inertia = "2e-4 kg*m^2"
[supply]
voltage = "48 V"
"""


def test_readme_control_block_runs_on_a_plant():
    (block,) = [b for b in _blocks("toml") if "[control.current]" in b]
    sc = dcsim.load_scenario_text(PLANT + block, source="README.md")
    res = dcsim.simulate(sc)
    # Source: conservation of energy (the account closes in closed loop too).
    largest = max(abs(v) for k, v in res.summary.items() if k.endswith("_J") and "res" not in k)
    assert abs(res.summary["energy_balance_residual_J"]) <= 1e-6 * largest
    # the S-curve move of the block ends at its distance (the reference, exactly)
    assert res.trace["reference_position_rad"][-1] == sc.control.reference.distance


def test_readme_python_snippet_runs(tmp_path):
    (snippet,) = _blocks("python")
    cwd = os.getcwd()
    os.chdir(ROOT)
    try:
        out = tmp_path / "out"
        namespace: dict = {}
        exec(snippet.replace('"out/pump"', repr(str(out))), namespace)  # noqa: S102
    finally:
        os.chdir(cwd)
    assert (out / "trace.csv").is_file() and (out / "summary.json").is_file()
    assert namespace["sc2"].motor.inductance == 3e-3
    assert namespace["sc"].motor.inductance != 3e-3  # with_changes left the original alone


def test_readme_states_the_caution_and_two_commands():
    assert "not a substitute for the component makers' data" in README
    quick = README.split("## Quick start", 1)[1].split("\n## ", 1)[0]
    assert len(_blocks_in(quick, "bash")) == 2
    assert "dcsim demo" in quick and "pytest" in quick


def _blocks_in(text: str, lang: str) -> list[str]:
    return re.findall(rf"```{lang}\n(.*?)```", text, flags=re.S)


def test_readme_machine_library_block_loads_and_runs():
    block = next(b for b in _blocks("toml") if 'kind = "separately_excited"' in b)
    rest = """
[simulation]
duration = "0.5 s"
[supply]
voltage = "220 V"
[control]
voltage = "220 V"
[load]
torque = "5 N*m"
inertia = "0.05 kg*m^2"
"""
    sc = dcsim.load_scenario_text(block + rest, source="README.md")
    res = dcsim.simulate(sc)
    s = res.summary
    largest = max(abs(v) for k, v in s.items() if k.endswith("_J") and "residual" not in k)
    # Source: conservation of energy (the account of the contract closes).
    assert abs(s["energy_balance_residual_J"]) <= 1e-6 * largest
    assert s["machine_kind"] == "separately_excited"
    assert s["shaft_resonance_Hz"] > 0.0
