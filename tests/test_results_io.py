"""Result writing: trace CSV round trip, summary JSON, atomic writes, plots and the text summary.

The results here are synthetic arrays built by hand: these are tests of file handling and
layout, not physics checks.
"""

from __future__ import annotations

import json
import math
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from dcsim.errors import DcsimError
from dcsim.results import io as rio
from dcsim.results import plots
from dcsim.results.io import (
    TraceFileError,
    atomic_write,
    read_trace_csv,
    write_outputs,
    write_summary_json,
    write_trace_csv,
)
from dcsim.results.summary import CAUTION, RAD_S_PER_RPM, energy_residual, format_summary
from dcsim.results.trace import ENERGY_KEYS, TRACE_COLUMNS, SimulationResult, Trace
from dcsim.scenario.schema import About, Event, Motor, Scenario, Simulation, Supply

REPO = Path(__file__).resolve().parents[1]
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"
OUTPUT_NAMES = [
    "trace.csv",
    "summary.json",
    "overview.png",
    "current.png",
    "speed.png",
    "bus_voltage.png",
    "torque.png",
]


# --------------------------------------------------------------------------------------------
# Synthetic results
# --------------------------------------------------------------------------------------------


def make_scenario(duration: float = 1.0, title: str = "Coolant pump start-up") -> Scenario:
    """A hand-built scenario (invented coolant pump) with two events."""
    return Scenario(
        simulation=Simulation(duration=duration),
        motor=Motor(resistance=0.8, inductance=1.5e-3, torque_constant=0.06, inertia=2e-4),
        supply=Supply(voltage=24.0, resistance=0.15, capacitance=1e-3),
        about=About(title=title),
        events=(
            Event(at=0.3 * duration, changes=(("load.torque", 0.12),)),
            Event(
                at=0.6 * duration, changes=(("supply.voltage", 18.0), ("supply.resistance", 0.2))
            ),
        ),
        source="scenarios/coolant_pump.toml",
    )


def make_summary() -> dict:
    """Synthetic summary numbers (layout only)."""
    return {
        "peak_current_A": 25.25,
        "peak_current_time_s": 0.0021,
        "i2t_A2s": 3.5,
        "final_speed_rad_s": 300.0,
        "peak_bus_voltage_V": 24.3,
        "min_bus_voltage_V": 17.2,
        "energy_from_supply_J": 100.0,
        "energy_source_loss_J": 5.0,
        "energy_copper_loss_J": 20.0,
        "energy_friction_J": 3.0,
        "energy_to_load_J": 40.0,
        "energy_shaft_lock_J": 0.0,
        "energy_coupling_J": 0.0,
        "kinetic_energy_change_J": 31.0,
        "stored_energy_change_J": 0.75,
    }


def make_result(duration: float = 1.0, rows: int = 501, title: str = "Coolant pump start-up"):
    t = np.linspace(0.0, duration, rows)
    cols = {name: np.sin((i + 1) * 5.0 * t) * (i + 1) for i, name in enumerate(TRACE_COLUMNS)}
    cols["time_s"] = t
    return SimulationResult(
        scenario=make_scenario(duration, title),
        trace=Trace(columns=cols),
        summary=make_summary(),
        step_s=1e-6,
        record_interval_s=duration / (rows - 1),
        event_times_s=(0.3 * duration, 0.6 * duration),
    )


def snapshot(directory: Path) -> dict[str, bytes]:
    """Every entry of a directory (hidden ones too) with its bytes; directories as b'<dir>'."""
    return {
        p.name: (b"<dir>" if p.is_dir() else p.read_bytes()) for p in sorted(directory.iterdir())
    }


def bits(a: np.ndarray) -> np.ndarray:
    return np.ascontiguousarray(a, dtype=np.float64).view(np.uint64)


# --------------------------------------------------------------------------------------------
# Trace CSV
# --------------------------------------------------------------------------------------------


def test_csv_round_trip_is_bit_exact(tmp_path):
    rng = np.random.default_rng(20240601)
    rows = 4000
    # Random bit patterns cover every exponent and mantissa; add the awkward cases by hand.
    raw = rng.integers(0, 2**64 - 1, size=(rows, len(TRACE_COLUMNS)), dtype=np.uint64)
    table = raw.view(np.float64).copy()
    table[~np.isfinite(table)] = 1.0
    special = [0.1, 1.0 / 3.0, -0.0, 5e-324, 2.2250738585072014e-308, 1.7976931348623157e308]
    table[: len(special), 0] = special
    table[:3, 1] = [math.inf, -math.inf, math.nan]
    columns = {name: table[:, i] for i, name in enumerate(TRACE_COLUMNS)}
    columns["extra_flag"] = (np.arange(rows) % 2).astype(bool)
    columns["counter"] = np.arange(rows, dtype=np.int64)

    path = write_trace_csv(Trace(columns=columns), tmp_path / "trace.csv")
    back = read_trace_csv(path)

    assert list(back) == list(TRACE_COLUMNS) + ["extra_flag", "counter"]
    for name, original in columns.items():
        original = np.asarray(original, dtype=np.float64)
        got = back[name]
        assert got.dtype == np.float64
        nan = np.isnan(original)
        assert np.array_equal(np.isnan(got), nan), name
        assert np.array_equal(bits(got[~nan]), bits(original[~nan])), name  # -0.0 included


@settings(max_examples=60, deadline=None)
@given(st.lists(st.floats(allow_nan=False, allow_infinity=True, width=64), max_size=40))
def test_csv_round_trip_any_floats(tmp_path_factory, values):
    path = tmp_path_factory.mktemp("csv") / "trace.csv"
    arr = np.array(values, dtype=np.float64)
    columns = {name: arr * (1 if i % 2 else -1) for i, name in enumerate(TRACE_COLUMNS)}
    back = read_trace_csv(write_trace_csv(columns, path))
    for name in TRACE_COLUMNS:
        assert np.array_equal(bits(back[name]), bits(columns[name]))


def test_csv_header_puts_contract_columns_first(tmp_path):
    cols = {name: np.zeros(3) for name in reversed(TRACE_COLUMNS)}
    cols = {"winding_temp_C": np.ones(3), **cols, "bridge_loss_W": np.zeros(3)}
    path = write_trace_csv(cols, tmp_path / "t.csv")
    header = path.read_text(encoding="utf-8").splitlines()[0]
    assert header.split(",") == list(TRACE_COLUMNS) + ["winding_temp_C", "bridge_loss_W"]


def test_csv_with_no_rows_round_trips(tmp_path):
    cols = {name: np.empty(0) for name in TRACE_COLUMNS}
    back = read_trace_csv(write_trace_csv(cols, tmp_path / "empty.csv"))
    assert list(back) == list(TRACE_COLUMNS)
    assert back.rows == 0


@pytest.mark.parametrize(
    ("change", "fragment"),
    [
        (lambda c: c.pop("speed_rad_s"), "speed_rad_s"),
        (lambda c: c.__setitem__("current_A", np.zeros(4)), "differ in length"),
        (lambda c: c.__setitem__("current_A", np.zeros((3, 2))), "1-D"),
        (lambda c: c.__setitem__("current_A", np.array(["a", "b", "c"])), "real numbers"),
        (lambda c: c.__setitem__("bad,name", np.zeros(3)), "CSV header"),
    ],
)
def test_write_trace_rejects_bad_traces_and_writes_nothing(tmp_path, change, fragment):
    cols = {name: np.zeros(3) for name in TRACE_COLUMNS}
    change(cols)
    with pytest.raises(ValueError, match=fragment):
        write_trace_csv(cols, tmp_path / "trace.csv")
    assert list(tmp_path.iterdir()) == []


def _csv_text(header: list[str], rows: list[str]) -> str:
    return "\n".join([",".join(header), *rows]) + "\n"


@pytest.mark.parametrize(
    ("text", "key", "fragment"),
    [
        ("", "line 1", "header row"),
        (_csv_text(list(TRACE_COLUMNS[:-1]), ["0"] * 2), "supply_current_A", "supply_current_A"),
        (_csv_text(list(TRACE_COLUMNS) + ["time_s"], []), "time_s", "once"),
        (
            _csv_text(list(TRACE_COLUMNS), ["0,1,2,3,4,5,6,7,8", "0,1,2,3,4,x,6,7,8"]),
            "line 3",
            "found 'x'",
        ),
        (_csv_text(list(TRACE_COLUMNS), ["0,1,2,3,4,5,6,7,8", "0,1,2,3"]), "line 3", "found 4"),
    ],
)
def test_read_trace_reports_file_place_and_problem(tmp_path, text, key, fragment):
    path = tmp_path / "bad.csv"
    path.write_text(text, encoding="utf-8")
    with pytest.raises(TraceFileError) as info:
        read_trace_csv(path)
    err = info.value
    assert isinstance(err, ValueError) and isinstance(err, DcsimError)
    assert err.source == str(path)
    assert err.key == key
    assert fragment in str(err)
    assert "\n" not in str(err)


def test_read_trace_rejects_non_utf8(tmp_path):
    path = tmp_path / "latin.csv"
    path.write_bytes(",".join(TRACE_COLUMNS).encode() + b"\n\xff\xfe\n")
    with pytest.raises(TraceFileError, match="UTF-8"):
        read_trace_csv(path)


def test_read_trace_missing_file(tmp_path):
    with pytest.raises(FileNotFoundError):
        read_trace_csv(tmp_path / "nowhere.csv")


# --------------------------------------------------------------------------------------------
# Summary JSON
# --------------------------------------------------------------------------------------------


def test_summary_json_sorted_keys_caution_and_plain_numbers(tmp_path):
    summary = make_summary()
    summary["peak_current_A"] = np.float64(25.25)
    summary["record_rows"] = np.int64(10001)
    summary["regenerated"] = np.bool_(True)
    summary["event_times_s"] = np.array([0.3, 0.6])
    summary["undefined_ratio"] = math.nan
    path = write_summary_json(summary, tmp_path / "summary.json")

    text = path.read_text(encoding="utf-8")
    data = json.loads(text)
    assert list(data) == sorted(data)  # json.loads keeps the file's order
    assert data["caution"] == CAUTION
    assert set(make_summary()) <= set(data)
    assert data["peak_current_A"] == 25.25
    assert data["record_rows"] == 10001 and isinstance(data["record_rows"], int)
    assert data["regenerated"] is True
    assert data["event_times_s"] == [0.3, 0.6]
    assert data["undefined_ratio"] is None  # JSON has no NaN
    assert "NaN" not in text


def test_summary_json_refuses_unknown_objects_before_writing(tmp_path):
    with pytest.raises(TypeError, match="shaft"):
        write_summary_json({"shaft": object()}, tmp_path / "summary.json")
    assert list(tmp_path.iterdir()) == []


# --------------------------------------------------------------------------------------------
# Atomic writes
# --------------------------------------------------------------------------------------------


def test_atomic_write_replaces_only_on_success(tmp_path):
    target = tmp_path / "notes.txt"
    target.write_text("old", encoding="utf-8")
    seen = []

    def fails(tmp: Path) -> None:
        seen.append(tmp)
        tmp.write_text("half", encoding="utf-8")
        raise OSError("disk full")

    with pytest.raises(OSError, match="disk full"):
        atomic_write(target, fails)
    assert target.read_text(encoding="utf-8") == "old"
    assert [p.name for p in tmp_path.iterdir()] == ["notes.txt"]
    # The temporary file sat beside the target and kept its suffix.
    assert seen[0].parent == tmp_path and seen[0].suffix == ".txt"

    atomic_write(target, lambda tmp: tmp.write_text("new", encoding="utf-8"))
    assert target.read_text(encoding="utf-8") == "new"
    assert [p.name for p in tmp_path.iterdir()] == ["notes.txt"]


def test_atomic_write_gives_ordinary_permissions(tmp_path):
    plain = tmp_path / "plain.txt"
    plain.write_text("x", encoding="utf-8")
    atomic = atomic_write(tmp_path / "atomic.txt", lambda p: p.write_text("x", encoding="utf-8"))
    assert atomic.stat().st_mode == plain.stat().st_mode


def test_atomic_write_cleans_up_on_interrupt(tmp_path):
    def interrupted(tmp: Path) -> None:
        raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        atomic_write(tmp_path / "x.csv", interrupted)
    assert list(tmp_path.iterdir()) == []


# --------------------------------------------------------------------------------------------
# The output set
# --------------------------------------------------------------------------------------------


def test_write_outputs_writes_the_full_set(tmp_path):
    result = make_result()
    out = tmp_path / "runs" / "pump"  # parents are created
    files = write_outputs(result, out)

    assert [p.name for p in files] == OUTPUT_NAMES
    assert sorted(p.name for p in out.iterdir()) == sorted(OUTPUT_NAMES)  # nothing else left
    back = read_trace_csv(out / "trace.csv")
    for name in TRACE_COLUMNS:
        assert np.array_equal(bits(back[name]), bits(result.trace[name]))
    data = json.loads((out / "summary.json").read_text(encoding="utf-8"))
    for key, value in result.summary.items():
        assert data[key] == value
    assert data["caution"] == CAUTION
    assert data["step_s"] == result.step_s
    assert data["record_interval_s"] == result.record_interval_s
    assert data["event_times_s"] == list(result.event_times_s)
    for name in OUTPUT_NAMES[2:]:
        assert (out / name).read_bytes().startswith(PNG_SIGNATURE)


def _previous_run(out: Path) -> dict[str, bytes]:
    write_outputs(make_result(title="Previous run"), out)
    (out / "notes.txt").write_text("kept by the user", encoding="utf-8")
    return snapshot(out)


def test_failure_while_plotting_leaves_previous_outputs(tmp_path, monkeypatch):
    out = tmp_path / "out"
    before = _previous_run(out)
    real = plots.plot_quantity

    def fail_on_speed(result, name):
        if name == "speed":  # overview.png and current.png are already staged by then
            raise RuntimeError("renderer gave up")
        return real(result, name)

    monkeypatch.setattr(plots, "plot_quantity", fail_on_speed)
    with pytest.raises(RuntimeError, match="renderer gave up"):
        write_outputs(make_result(title="New run", rows=301), out)
    assert snapshot(out) == before  # same names (no temp files, no staging dir), same bytes


def test_failure_while_renaming_rolls_back(tmp_path, monkeypatch):
    out = tmp_path / "out"
    before = _previous_run(out)
    real_replace = os.replace
    renames_into_out = []

    def flaky_replace(src, dst):
        if Path(dst).parent == out:
            renames_into_out.append(Path(dst).name)
            if len(renames_into_out) == 3:  # trace.csv and summary.json are already replaced
                raise OSError(28, "No space left on device", str(dst))
        return real_replace(src, dst)

    monkeypatch.setattr(rio.os, "replace", flaky_replace)
    with pytest.raises(OSError, match="No space left"):
        write_outputs(make_result(title="New run", rows=301), out)
    monkeypatch.undo()
    assert renames_into_out[:3] == OUTPUT_NAMES[:3]
    assert snapshot(out) == before


def test_failed_first_run_leaves_nothing(tmp_path, monkeypatch):
    def broken(result, out_dir_tmp):
        raise MemoryError("no room for pixels")

    monkeypatch.setattr(plots, "save_plots", broken)
    with pytest.raises(MemoryError):
        write_outputs(make_result(), tmp_path / "fresh")
    assert list((tmp_path / "fresh").iterdir()) == []


def test_directory_in_the_way_replaces_nothing(tmp_path):
    out = tmp_path / "out"
    before = _previous_run(out)
    (out / "torque.png").unlink()
    (out / "torque.png").mkdir()
    before = snapshot(out)
    with pytest.raises(IsADirectoryError):
        write_outputs(make_result(title="New run"), out)
    assert snapshot(out) == before


# --------------------------------------------------------------------------------------------
# Plots
# --------------------------------------------------------------------------------------------


def _texts(fig) -> list[str]:
    return [t.get_text() for t in fig.findobj(lambda a: hasattr(a, "get_text"))]


def _event_lines(ax) -> list[float]:
    return sorted(
        line.get_xdata()[0]
        for line in ax.get_lines()
        if line.get_linestyle() != "-" and len(set(line.get_xdata())) == 1
    )


def test_overview_panels_labels_events_title_and_caution():
    result = make_result(duration=2.0)
    fig = plots.plot_overview(result)
    axes = fig.axes
    assert len(axes) == 4  # the rpm scale is a child of the speed panel, not a fifth panel
    labels = [ax.get_ylabel() for ax in axes]
    assert labels == ["armature\ncurrent [A]", "speed [rad/s]", "voltage [V]", "torque [N·m]"]
    assert all(axes[0].get_shared_x_axes().joined(axes[0], ax) for ax in axes[1:])
    assert axes[-1].get_xlabel() == "time [s]"  # a 2 s run stays in seconds
    for ax in axes:
        assert _event_lines(ax) == pytest.approx([0.6, 1.2])
    texts = _texts(fig)
    assert "load.torque" in texts and "supply.voltage +1" in texts
    assert "Coolant pump start-up" in texts
    assert CAUTION in texts
    assert any("[rpm]" in t for t in texts)


def test_short_run_uses_milliseconds_and_file_name_as_title():
    result = make_result(duration=0.05, title="")
    fig = plots.plot_overview(result)
    assert fig.axes[-1].get_xlabel() == "time [ms]"
    first = fig.axes[0]
    assert _event_lines(first) == pytest.approx([15.0, 30.0])  # 0.3 * 50 ms, 0.6 * 50 ms
    assert max(first.get_lines()[0].get_xdata()) == pytest.approx(50.0)
    assert "coolant_pump.toml" in _texts(fig)


def test_rpm_scale_matches_rad_s():
    # Source: definitions -- one revolution is 2*pi rad and one minute is 60 s (SI Brochure,
    # 9th ed., 2019: radian and minute; the table numbers, 4 and 8, are from memory).
    assert RAD_S_PER_RPM == pytest.approx(2.0 * math.pi / 60.0, rel=1e-15)
    fig = plots.plot_overview(make_result())
    speed_ax = fig.axes[1]
    assert speed_ax.get_ylabel() == "speed [rad/s]"
    (rpm_ax,) = speed_ax.child_axes
    fig.draw_without_rendering()  # the secondary scale takes its limits at draw time
    ymin, ymax = speed_ax.get_ylim()
    smin, smax = rpm_ax.get_ylim()
    assert rpm_ax.get_ylabel() == "[rpm]"
    assert (smin, smax) == pytest.approx(
        (ymin * 60.0 / (2.0 * math.pi), ymax * 60.0 / (2.0 * math.pi)), rel=1e-12
    )


def test_save_plots_writes_one_png_per_quantity(tmp_path):
    files = plots.save_plots(make_result(rows=200), tmp_path)
    assert [p.name for p in files] == list(plots.PLOT_FILES) == OUTPUT_NAMES[2:]
    for path in files:
        assert path.read_bytes().startswith(PNG_SIGNATURE)
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted(OUTPUT_NAMES[2:])


def test_unknown_plot_name_is_refused():
    with pytest.raises(ValueError, match="current, speed, bus_voltage, torque"):
        plots.plot_quantity(make_result(rows=10), "flux")


def test_plots_do_not_touch_pyplot():
    code = (
        "import sys\n"
        "sys.path.insert(0, sys.argv[1])\n"
        "import importlib.util as u\n"
        "spec = u.spec_from_file_location('t', sys.argv[2]); t = u.module_from_spec(spec)\n"
        "spec.loader.exec_module(t)\n"
        "from dcsim.results import plots\n"
        "plots.plot_overview(t.make_result(rows=50))\n"
        "assert 'matplotlib.pyplot' not in sys.modules, 'pyplot was imported'\n"
    )
    done = subprocess.run(
        [sys.executable, "-c", code, str(REPO), __file__],
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert done.returncode == 0, done.stderr


# --------------------------------------------------------------------------------------------
# Text summary
# --------------------------------------------------------------------------------------------


def test_format_summary_shows_every_figure_and_ends_with_caution():
    summary = make_summary()
    text = format_summary(summary)
    assert text.endswith(CAUTION)
    assert "25.25 A" in text and "2.1 ms" in text
    assert "3.5 A²s" in text
    # Source: 1 rpm = 2*pi/60 rad/s, so 300 rad/s = 300 * 60 / (2*pi) = 2864.8 rpm
    assert "300 rad/s" in text and "2864.8 rpm" in text
    assert "min 17.2 V" in text and "max 24.3 V" in text
    for label in (
        "delivered by the source",
        "armature copper loss",
        "to the load",
        "change of kinetic energy",
        "change of stored energy",
    ):
        assert label in text
    # The synthetic account leaves 100 - 99.75 = 0.25 J; as defined in CONTRACT.md the residual
    # is the source energy minus every other term.
    assert energy_residual(summary) == pytest.approx(0.25, abs=1e-12)
    assert "residual" in text and "0.25" in text and "0.25 %" in text


def test_residual_includes_new_losses_and_prefers_the_engine_value():
    summary = make_summary()
    summary["energy_brake_resistor_J"] = 0.25
    assert energy_residual(summary) == pytest.approx(0.0, abs=1e-12)
    assert "brake_resistor" in format_summary(summary)
    summary["energy_balance_residual_J"] = 1.5e-9
    assert energy_residual(summary) == 1.5e-9
    assert "1.5e-09" in format_summary(summary)
    assert set(ENERGY_KEYS) <= set(summary)


def test_format_summary_tolerates_missing_figures():
    text = format_summary({"peak_current_A": 3.0})
    assert "3 A" in text and "n/a" in text
    assert text.endswith(CAUTION)
