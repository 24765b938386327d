"""``dcsim motor`` on machine-library scenarios: the field, commutator and shaft sections.

Each figure the command prints is checked against its closed form, computed here from the
scenario's own numbers:

- the field time constant ``L_f / R_f`` of a winding (first-order R-L circuit);
- the steady field current of each kind: separately excited ``V_f / R_f``, shunt and compound
  ``V_s / R_f`` (field across the supply), series ``V_s / (R_a + R_f)`` (locked rotor);
- the flux constant ``K = M i_f`` (linear magnetics) or ``E(i_f) / w_m`` from the
  magnetisation curve (back-EMF ``E = K w``);
- the commutator ripple ``1 - cos(pi / p)`` against a direct evaluation of the ripple factor
  ``sum_j |sin(x - 2 pi j / N)| pi / (2N)`` the kernel uses;
- the two-mass shaft resonance ``sqrt(k (J1 + J2) / (J1 J2))`` against the eigenvalues of the
  two-mass stiffness / inertia matrices (numpy).
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from dcsim import cli
from dcsim.engine import assemble as engine_assemble
from dcsim.engine import layout
from dcsim.scenario import load_scenario_text
from dcsim.scenario.datasheet import format_motor

RPM = 2.0 * math.pi / 60.0

SEP = """
[simulation]
duration = "1 s"
[motor]
kind = "separately_excited"
resistance = "0.5 ohm"
inductance = "5 mH"
inertia = "0.05 kg*m^2"
field_resistance = "100 ohm"
field_inductance = "20 H"
field_voltage = "100 V"
magnetisation = [["0 A","0 V"],["0.5 A","100 V"],["1 A","180 V"],["1.5 A","220 V"]]
magnetisation_speed = "1000 rpm"
base_speed = "800 rpm"
[load]
torque = "5 N*m"
[supply]
voltage = "220 V"
[control]
voltage = "220 V"
"""

SERIES = """
[simulation]
duration = "1 s"
[motor]
kind = "series"
resistance = "0.5 ohm"
inductance = "5 mH"
inertia = "0.2 kg*m^2"
field_resistance = "0.3 ohm"
field_inductance = "10 mH"
mutual_inductance = "30 mH"
{extra}
[load]
torque = "20 N*m"
[supply]
voltage = "48 V"
[control]
voltage = "48 V"
"""

COMPOUND = """
[simulation]
duration = "1 s"
[motor]
kind = "compound"
compound = "differential"
resistance = "0.8 ohm"
inductance = "6 mH"
inertia = "0.1 kg*m^2"
field_resistance = "120 ohm"
field_inductance = "12 H"
mutual_inductance = "0.9 H"
series_field_resistance = "0.05 ohm"
series_field_inductance = "1 mH"
series_turns_ratio = "0.02"
[load]
torque = "2 N*m"
[supply]
voltage = "120 V"
[control]
voltage = "120 V"
"""

PM_SHAFT = """
[simulation]
duration = "1 s"
[motor]
resistance = "1 ohm"
inductance = "1 mH"
torque_constant = "0.1 N*m/A"
inertia = "2e-4 kg*m^2"
commutator_segments = {segments}
pole_pairs = {pole_pairs}
[load]
inertia = "6e-4 kg*m^2"
[shaft]
stiffness = "40 N*m/rad"
damping = "0.002 N*m*s/rad"
backlash = "0.5 deg"
[supply]
voltage = "24 V"
[control]
voltage = "12 V"
"""

PM = """
[simulation]
duration = "1 s"
[motor]
resistance = "1 ohm"
inductance = "1 mH"
torque_constant = "0.1 N*m/A"
inertia = "2e-4 kg*m^2"
[supply]
voltage = "24 V"
[control]
voltage = "12 V"
"""


def _motor(tmp_path, capsys, text: str, *, as_json: bool = False):
    path = tmp_path / "machine.toml"
    path.write_text(text, encoding="utf-8")
    argv = ["motor", str(path)] + (["--json"] if as_json else [])
    assert cli.main(argv) == 0
    out = capsys.readouterr().out
    return json.loads(out) if as_json else out


def _row(out: str, label: str) -> str:
    """The line of the printed table that starts with ``label``."""
    rows = [line for line in out.splitlines() if line.strip().startswith(label)]
    assert rows, f"no row {label!r} in:\n{out}"
    return rows[0]


def test_separately_excited_field_section(tmp_path, capsys):
    out = _motor(tmp_path, capsys, SEP)
    assert "Field (separately excited machine):" in out
    # Source: derived -- first-order R-L winding, tau = L_f / R_f = 20 H / 100 ohm
    assert "0.2 s" in _row(out, "field time constant")
    assert "magnetisation curve, 4 points" in _row(out, "flux from")
    assert "1000 rpm" in _row(out, "flux from")
    assert "100 V" in _row(out, "field voltage")
    assert "800 rpm" in _row(out, "base speed")
    # Source: derived -- steady field current of an R-L winding on a DC supply, V_f / R_f
    assert "1 A" in _row(out, "steady field current")
    # Source: derived -- E = K w: K = E(1 A) / w_m = 180 V / (1000 rpm in rad/s)
    k = 180.0 / (1000.0 * RPM)
    assert f"{k:.6g} N*m/A" in _row(out, "torque constant")
    # field weakening above 800 rpm: the engine's default limit, 4 x base speed (common
    # practice: a 1:4 field-weakening range; dcsim.engine.assemble.FIELD_WEAKENING_LIMIT)
    assert f"{4 * 800.0 * RPM:.6g} rad/s" in _row(out, "max speed")
    assert "default 4 x base_speed" in _row(out, "max speed")

    data = _motor(tmp_path, capsys, SEP, as_json=True)
    f = data["field"]
    assert f["kind"] == "separately_excited"
    assert f["field_time_constant_s"] == pytest.approx(20.0 / 100.0, rel=1e-12)
    assert f["flux_from"] == "magnetisation"
    assert f["magnetisation_points"] == 4
    assert f["magnetisation_speed_rad_s"] == pytest.approx(1000.0 * RPM, rel=1e-12)
    assert f["field_voltage_V"] == 100.0
    assert f["base_speed_rad_s"] == pytest.approx(800.0 * RPM, rel=1e-12)
    assert f["steady_field_current_A"] == pytest.approx(1.0, rel=1e-12)
    assert f["torque_constant_Nm_per_A"] == pytest.approx(k, rel=1e-12)
    assert f["max_speed_rad_s"] == pytest.approx(4 * 800.0 * RPM, rel=1e-12)
    assert "commutator" not in data and "shaft" not in data


def test_series_field_section_and_default_over_speed(tmp_path, capsys):
    text = SERIES.format(extra="")
    out = _motor(tmp_path, capsys, text)
    assert "Field (series machine):" in out
    # Source: derived -- the series winding alone, L_f / R_f = 10 mH / 0.3 ohm
    assert f"{0.01 / 0.3:.4g} s" in _row(out, "series winding time constant")
    # Source: derived -- one armature loop of R_a + R_f and L_a + L_f
    assert f"{0.015 / 0.8:.4g} s" in _row(out, "armature loop time constant")
    assert "mutual inductance M = 0.03 H" in _row(out, "flux from")
    # Source: derived -- locked rotor: no back-EMF, i = V_s / (R_a + R_f) = 48 / 0.8
    i_lr = 48.0 / 0.8
    assert f"{i_lr:.6g} A" in _row(out, "series field current")
    # Source: derived -- linear magnetics K = M i = 0.03 H * 60 A
    assert f"{0.03 * i_lr:.6g} N*m/A" in _row(out, "torque constant")

    data = _motor(tmp_path, capsys, text, as_json=True)["field"]
    assert data["steady_field_current_A"] == pytest.approx(i_lr, rel=1e-12)
    assert data["torque_constant_Nm_per_A"] == pytest.approx(0.03 * i_lr, rel=1e-12)
    factor = engine_assemble.RUNAWAY_LIMIT_FACTOR
    # Source: derived -- the engine's rule, factor x V_s / K; the same as the kernel's
    expected = factor * 48.0 / (0.03 * i_lr)
    assert data["max_speed_rad_s"] == pytest.approx(expected, rel=1e-12)
    p = engine_assemble.parameter_vector(load_scenario_text(text))
    assert data["max_speed_rad_s"] == pytest.approx(p[layout.P_WMAX], rel=1e-12)
    assert f"{expected:.6g} rad/s" in _row(out, "max speed")


def test_series_given_max_speed(tmp_path, capsys):
    text = SERIES.format(extra='max_speed = "3000 rpm"')
    out = _motor(tmp_path, capsys, text)
    row = _row(out, "max speed")
    assert "3000 rpm" in row and "given" in row
    data = _motor(tmp_path, capsys, text, as_json=True)["field"]
    assert data["max_speed_rad_s"] == pytest.approx(3000.0 * RPM, rel=1e-12)
    assert data["max_speed_from"] == "given"


def test_compound_series_winding_and_sense(tmp_path, capsys):
    out = _motor(tmp_path, capsys, COMPOUND)
    assert "Field (compound machine):" in out
    assert "differential" in _row(out, "compound sense")
    assert "0.05 ohm" in _row(out, "series winding resistance")
    assert "1 mH" in _row(out, "series winding inductance")
    assert "0.02" in _row(out, "series turns ratio")
    # Source: derived -- shunt field across the supply: i_f = V_s / R_f = 120 / 120
    assert "1 A" in _row(out, "steady field current")
    # Source: derived -- L_f / R_f = 12 H / 120 ohm
    assert "0.1 s" in _row(out, "field time constant")
    data = _motor(tmp_path, capsys, COMPOUND, as_json=True)["field"]
    assert data["compound"] == "differential"
    assert data["series_field_resistance_ohm"] == 0.05
    assert data["series_field_inductance_H"] == pytest.approx(1e-3, rel=1e-12)
    assert data["series_turns_ratio"] == 0.02
    # Source: derived -- K = M i_f = 0.9 H * 1 A
    assert data["torque_constant_Nm_per_A"] == pytest.approx(0.9, rel=1e-12)
    # the differential compound machine runs away like a series one: an over-speed default
    assert data["max_speed_from"].startswith("default")


def test_shunt_flux_at_supply_field_current(tmp_path, capsys):
    text = COMPOUND.replace('kind = "compound"', 'kind = "shunt"')
    text = "\n".join(
        line for line in text.splitlines() if not line.startswith(("compound", "series_"))
    )
    data = _motor(tmp_path, capsys, text, as_json=True)["field"]
    # Source: derived -- K = M V_s / R_f (field across the supply, linear magnetics)
    assert data["torque_constant_Nm_per_A"] == pytest.approx(0.9 * 120.0 / 120.0, rel=1e-12)
    assert data["max_speed_rad_s"] is None  # a shunt machine does not run away


def _ripple_pp_direct(n_seg: int) -> float:
    """pk-pk / max of the kernel's ripple factor, evaluated on a fine grid (not closed form)."""
    x = np.linspace(0.0, 2.0 * math.pi, 200_001)
    j = np.arange(n_seg)[:, None]
    r = np.abs(np.sin(x[None, :] - 2.0 * math.pi * j / n_seg)).sum(axis=0) * math.pi / (2 * n_seg)
    return float((r.max() - r.min()) / r.max())


@pytest.mark.parametrize(("segments", "pole_pairs", "per_pole_pair"), [(8, 1, 8), (7, 2, 14)])
def test_commutator_section(tmp_path, capsys, segments, pole_pairs, per_pole_pair):
    text = PM_SHAFT.format(segments=segments, pole_pairs=pole_pairs)
    out = _motor(tmp_path, capsys, text)
    assert "Commutator ripple:" in out
    # Source: derived -- N equally spaced rectified coil sines repeat N times per electrical
    # turn for even N (opposite coils coincide) and 2N times for odd N
    assert f"{per_pole_pair * pole_pairs} per turn" in _row(out, "pulses")
    data = _motor(tmp_path, capsys, text, as_json=True)["commutator"]
    assert data["pulses_per_electrical_turn"] == per_pole_pair
    assert data["pulses_per_turn"] == per_pole_pair * pole_pairs
    # Source: derived -- envelope of p-pulse rectified sines, max 1 and min cos(pi/p) (scaled);
    # checked against the ripple factor evaluated directly
    closed = 1.0 - math.cos(math.pi / per_pole_pair)
    assert data["ripple_pp_fraction"] == pytest.approx(closed, rel=1e-12)
    assert data["ripple_pp_fraction"] == pytest.approx(_ripple_pp_direct(segments), rel=1e-6)


def test_shaft_section_resonance(tmp_path, capsys):
    text = PM_SHAFT.format(segments=8, pole_pairs=1)
    out = _motor(tmp_path, capsys, text)
    assert "Shaft" in out
    assert "40 N*m/rad" in _row(out, "stiffness")
    assert "0.002 N*m*s/rad" in _row(out, "damping")
    assert "0.5 deg" in _row(out, "backlash")
    j1, j2, k = 2e-4, 6e-4, 40.0
    # Source: derived -- free two-mass torsional system J1 x1'' = -k (x1 - x2),
    # J2 x2'' = k (x1 - x2); its non-zero eigenvalue of M^-1 K is w^2 (numpy, not closed form)
    stiff = np.array([[k, -k], [-k, k]])
    mass_inv = np.diag([1.0 / j1, 1.0 / j2])
    w2 = max(np.linalg.eigvals(mass_inv @ stiff).real)
    wr = math.sqrt(w2)
    assert wr == pytest.approx(math.sqrt(k * (j1 + j2) / (j1 * j2)), rel=1e-9)
    data = _motor(tmp_path, capsys, text, as_json=True)["shaft"]
    assert data["motor_side_inertia_kgm2"] == pytest.approx(j1, rel=1e-12)
    assert data["load_side_inertia_kgm2"] == pytest.approx(j2, rel=1e-12)
    assert data["resonance_rad_s"] == pytest.approx(wr, rel=1e-9)
    assert data["resonance_Hz"] == pytest.approx(wr / (2 * math.pi), rel=1e-9)
    assert data["backlash_rad"] == pytest.approx(math.radians(0.5), rel=1e-12)
    assert f"{wr / (2 * math.pi):.4g} Hz" in _row(out, "resonance")
    # a permanent-magnet motor has no field section
    assert "Field (" not in out and "field" not in _motor(tmp_path, capsys, text, as_json=True)


def test_permanent_magnet_output_unchanged(tmp_path, capsys):
    out = _motor(tmp_path, capsys, PM)
    sc = load_scenario_text(PM)
    expected = format_motor(sc.motor, title=str(tmp_path / "machine.toml"))
    assert out == f"{expected}\n\n{cli._CAUTION_EPILOG}\n"
    data = _motor(tmp_path, capsys, PM, as_json=True)
    assert not {"field", "commutator", "shaft"} & set(data)
