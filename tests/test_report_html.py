"""Presentation of design-check verdicts: the terminal table, the report set and its HTML page.

The reports here are built by hand (an invented harbour winch) with small matplotlib figures:
these are tests of layout and file handling, not physics checks. The one conversion shown
(kelvin to degrees Celsius) carries its source.
"""

from __future__ import annotations

import base64
import functools
import io
import json
import math
import os
import re
import shutil
import struct
import subprocess
import tempfile
from html.parser import HTMLParser
from pathlib import Path

import matplotlib.image as mpimg
import numpy as np
import pytest
from matplotlib.figure import Figure

from dcsim.checks.report import (
    REPORT_DPI,
    figure_stem,
    format_table,
    write_report,
)
from dcsim.checks.verdict import CAUTION, CheckReport, Verdict, judged, not_applicable
from dcsim.results import io as rio

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"
VOID_TAGS = {"meta", "img", "br", "hr", "link", "input", "col", "area", "base", "wbr", "source"}
FORBIDDEN_TAGS = {"script", "link", "iframe", "object", "embed", "base", "frame", "audio", "video"}
URL_ATTRIBUTES = {"href", "src", "srcset", "poster", "data", "action", "formaction", "xlink:href"}

# Figure sizes [in] whose products with the report's 110 dpi are whole pixels.
SIZES_IN = {
    "fuse_heat": (3.0, 2.0),
    "bus_voltage": (4.0, 2.5),
    "winding_temperature": (3.0, 2.0),
    "speed_loop": (5.0, 2.0),
    "overview": (4.0, 2.0),
}


# --------------------------------------------------------------------------------------------
# Hand-built reports
# --------------------------------------------------------------------------------------------


def small_figure(title: str, size_in: tuple[float, float]) -> Figure:
    """A small line plot (object API, no pyplot)."""
    fig = Figure(figsize=size_in)
    ax = fig.add_subplot()
    ax.plot([0.0, 1.0, 2.0, 3.0], [0.0, 1.0, 0.4, 1.6], color="#1f5f8b")
    ax.set_title(title)
    return fig


def winch_verdicts() -> tuple[Verdict, ...]:
    """One verdict of each status, in every group, for an invented harbour winch."""
    return (
        judged(
            "fuse.survives_start",
            "fuse",
            "Fuse survives the winch start",
            0.42,
            1.0,
            "-",
            detail="Peak heat fraction of the 20 A slow-blow fuse during the hook start.",
            plots=("fuse_heat",),
        ),
        Verdict(
            name="fuse.melt_time_locked",
            group="fuse",
            title="Fuse melting time with the drum locked",
            status="pass",
            figure=math.inf,
            limit=2.0,
            unit="s",
            upper=False,
            detail="The locked-drum current stays below the fuse's minimum melting current.",
        ),
        judged(
            "regeneration.peak_bus",
            "regeneration",
            "Bus voltage while lowering",
            33.0,
            30.0,
            "V",
            detail=(
                "Lowering the hook load at full speed pumps the bus up to 33 V, while the brake "
                "chopper is set to start at 31 V; the bus capacitor alone cannot hold it and "
                "the supply does not take current back."
            ),
            values={"peak_bus_V": 33.0, "energy_returned_J": 1523.7, "clamped": False},
            plots=("bus_voltage", "fuse_heat"),
        ),
        Verdict(
            name="regeneration.min_capacitance",
            group="regeneration",
            title="Smallest bus capacitance that holds 30 V",
            status="info",
            figure=0.0047,
            unit="F",
            detail="Sizing suggestion from the energy returned while lowering.",
        ),
        judged(
            "thermal.winding_temperature",
            "thermal",
            "Winding temperature after ten lifts",
            398.25,
            428.15,
            "K",
            detail="Insulation class F.",
            plots=("winding_temperature",),
        ),
        not_applicable(
            "duty.rms_current",
            "duty",
            "RMS current over the duty cycle",
            "needs motor.rated_current_A in the scenario file",
        ),
        judged(
            "loops.speed_phase_margin",
            "loops",
            "Speed loop phase margin",
            52.3,
            45.0,
            "deg",
            upper=False,
            plots=("speed_loop",),
        ),
    )


def winch_report(verdicts: tuple[Verdict, ...] | None = None, **changes) -> CheckReport:
    """The harbour-winch report with its five figures (one named by no verdict)."""
    fields = {
        "scenario_source": "examples/harbour_winch.toml",
        "title": "Harbour winch, 2 t hook",
        "verdicts": winch_verdicts() if verdicts is None else verdicts,
        "figures": {name: small_figure(name, size) for name, size in SIZES_IN.items()},
        "runs": {
            "nominal": "the scenario as written",
            "lowering": "hook load lowered at full speed",
        },
        "warnings": ("Fuse class is generic: give supply.fuse.curve for the maker's curve.",),
    }
    fields.update(changes)
    return CheckReport(**fields)


def snapshot(directory: Path) -> dict[str, bytes]:
    """Every entry of a directory (hidden ones too) with its bytes; directories as b'<dir>'."""
    return {
        p.name: (b"<dir>" if p.is_dir() else p.read_bytes()) for p in sorted(directory.iterdir())
    }


def png_size(data: bytes) -> tuple[int, int]:
    """Width and height [px] of a PNG from its IHDR chunk (ISO/IEC 15948, 11.2.2)."""
    assert data[:8] == PNG_SIGNATURE
    length, kind = struct.unpack(">I4s", data[8:16])
    assert kind == b"IHDR" and length == 13
    return struct.unpack(">II", data[16:24])


def expected_px(name: str) -> tuple[int, int]:
    w_in, h_in = SIZES_IN[name]
    return round(w_in * REPORT_DPI), round(h_in * REPORT_DPI)


class Page(HTMLParser):
    """Records the declaration, every start tag with its attributes, texts and nesting faults."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.decl = ""
        self.tags: list[tuple[str, dict[str, str | None]]] = []
        self.stack: list[str] = []
        self.faults: list[str] = []
        self.texts: list[tuple[tuple[str, ...], str]] = []  # (open tags, text)
        self.events: list[str] = []  # "<tag" and text, in document order

    def handle_decl(self, decl: str) -> None:
        self.decl = decl

    def handle_starttag(self, tag, attrs) -> None:
        self.tags.append((tag, dict(attrs)))
        self.events.append(f"<{tag}")
        if tag not in VOID_TAGS:
            self.stack.append(tag)

    def handle_startendtag(self, tag, attrs) -> None:
        self.tags.append((tag, dict(attrs)))
        self.events.append(f"<{tag}")

    def handle_endtag(self, tag) -> None:
        if tag in VOID_TAGS:
            self.faults.append(f"end tag of void element {tag}")
        elif not self.stack or self.stack[-1] != tag:
            self.faults.append(f"</{tag}> closes {self.stack[-1] if self.stack else 'nothing'}")
        else:
            self.stack.pop()

    def handle_data(self, data) -> None:
        if data.strip():
            self.texts.append((tuple(self.stack), data))
            self.events.append(data)

    def text(self) -> str:
        return " ".join(t for _, t in self.texts)

    def in_tag(self, tag: str) -> list[str]:
        return [t for stack, t in self.texts if stack and stack[-1] == tag]


def parse(path: Path) -> Page:
    page = Page()
    page.feed(path.read_bytes().decode("utf-8"))  # must be UTF-8
    page.close()
    return page


@pytest.fixture
def written() -> tuple[CheckReport, Path, list[Path]]:
    """The winch report, written once per test process into a fresh directory."""
    return _written()


@functools.cache
def _written() -> tuple[CheckReport, Path, list[Path]]:
    report = winch_report()
    out = Path(tempfile.mkdtemp(prefix="dcsim-test-report-")) / "out"
    return report, out, write_report(report, out)


# --------------------------------------------------------------------------------------------
# format_table
# --------------------------------------------------------------------------------------------


def test_table_opens_with_the_caution_then_the_scenario():
    lines = format_table(winch_report()).splitlines()
    assert lines[0] == CAUTION
    assert "examples/harbour_winch.toml" in lines[1]
    assert "Harbour winch, 2 t hook" in lines[1]


def test_table_failing_verdict_shows_fail_and_a_negative_margin():
    lines = format_table(winch_report()).splitlines()
    (row,) = [line for line in lines if "Bus voltage while lowering" in line]
    assert row.startswith("FAIL ")
    # margin as defined in dcsim.checks.verdict: (limit - figure) / limit = (30 - 33) / 30
    assert re.search(r"33 V\s+<= 30 V\s+-10 %$", row), row
    (lower,) = [line for line in lines if "Speed loop phase margin" in line]
    # lower limit: (figure - limit) / limit = (52.3 - 45) / 45 = +16.2 %
    assert lower.startswith("PASS ")
    assert re.search(r"52\.3 deg\s+>= 45 deg\s+\+16\.2 %$", lower), lower


def test_table_not_applicable_row_shows_its_detail_below():
    lines = format_table(winch_report()).splitlines()
    (i,) = [k for k, line in enumerate(lines) if "RMS current over the duty cycle" in line]
    assert lines[i].startswith("n/a ")
    assert lines[i + 1] == " " * 8 + "needs motor.rated_current_A in the scenario file"


def test_table_info_row_has_no_limit_and_no_margin():
    lines = format_table(winch_report()).splitlines()
    (row,) = [line for line in lines if "Smallest bus capacitance" in line]
    assert row.startswith("info ")
    assert re.search(r"0\.0047 F\s+-\s+-$", row), row


def test_table_ends_with_the_counts_and_the_overall_verdict():
    report = winch_report()
    assert format_table(report).splitlines()[-1] == (
        "7 verdicts: 4 pass, 1 fail, 1 n/a, 1 info; 1 check fails"
    )
    passing = tuple(v for v in report.verdicts if v.status != "fail")
    assert format_table(winch_report(passing)).splitlines()[-1] == (
        "6 verdicts: 4 pass, 0 fail, 1 n/a, 1 info; all checks pass"
    )
    second = judged("duty.peak_current", "duty", "Peak armature current", 61.0, 50.0, "A")
    assert (
        format_table(winch_report((*report.verdicts, second)))
        .splitlines()[-1]
        .endswith("; 2 checks fail")
    )
    only_na = (not_applicable("duty.rms_current", "duty", "RMS current", "needs a rating"),)
    assert format_table(winch_report(only_na)).splitlines()[-1] == (
        "1 verdict: 0 pass, 0 fail, 1 n/a, 0 info; no check applies"
    )


def test_table_temperature_in_kelvin_also_reads_in_celsius():
    lines = format_table(winch_report()).splitlines()
    (row,) = [line for line in lines if "Winding temperature after ten lifts" in line]
    # Source: SI Brochure (BIPM, 9th ed. 2019), section 2.3.1: t/degC = T/K - 273.15,
    # so 398.25 K is 125.1 degC and 428.15 K is 155.0 degC.
    assert "398.2 K (125.1 degC)" in row
    assert "<= 428.1 K (155.0 degC)" in row
    rise = judged("thermal.temperature_rise", "thermal", "Winding temperature rise", 80, 105, "K")
    (rise_row,) = [
        line for line in format_table(winch_report((rise,))).splitlines() if "rise" in line
    ]
    assert "80 K" in rise_row and "<= 105 K" in rise_row and "degC" not in rise_row


def test_table_infinite_time_reads_never_and_margin_inf():
    lines = format_table(winch_report()).splitlines()
    (row,) = [line for line in lines if "Fuse melting time" in line]
    assert re.search(r"never\s+>= 2 s\s+\+inf %$", row), row


def test_table_details_are_wrapped_to_100_columns_and_text_is_ascii():
    report = winch_report()
    text = format_table(report)
    assert text.isascii()
    lines = text.splitlines()
    (i,) = [k for k, line in enumerate(lines) if "Bus voltage while lowering" in line]
    detail_lines = []
    for line in lines[i + 1 :]:
        if not line.startswith(" " * 8):
            break
        detail_lines.append(line)
    assert len(detail_lines) >= 2
    assert all(len(line) <= 100 for line in detail_lines)
    (bus,) = [v for v in report.verdicts if v.name == "regeneration.peak_bus"]
    assert " ".join(line.strip() for line in detail_lines) == bus.detail
    warnings_at = lines.index("Warnings:")
    assert lines[warnings_at + 1] == "  - " + report.warnings[0]


# --------------------------------------------------------------------------------------------
# write_report: the files
# --------------------------------------------------------------------------------------------


def test_write_report_writes_page_json_and_one_png_per_figure(written):
    report, out, files = written
    assert [p.name for p in files] == [
        "report.html",
        "verdicts.json",
        *(f"{name}.png" for name in SIZES_IN),
    ]
    assert sorted(p.name for p in out.iterdir()) == sorted(p.name for p in files)  # no staging
    for name in SIZES_IN:
        data = (out / f"{name}.png").read_bytes()
        assert png_size(data) == expected_px(name)


def test_verdicts_json_is_the_report_dict_without_nan(written):
    report, out, _ = written
    text = (out / "verdicts.json").read_text(encoding="utf-8")

    def no_constant(token):
        raise AssertionError(f"verdicts.json holds {token}")

    assert json.loads(text, parse_constant=no_constant) == report.as_dict()
    assert text.startswith('{\n  "caution": ')  # indent 2
    data = json.loads(text)
    (melt,) = [v for v in data["verdicts"] if v["name"] == "fuse.melt_time_locked"]
    assert melt["figure"] is None and melt["margin"] is None  # infinite -> null


def test_non_finite_values_become_null_in_json(tmp_path):
    odd = Verdict(
        name="loops.current_gain_margin",
        group="loops",
        title="Current loop gain margin",
        status="pass",
        figure=math.inf,
        limit=6.0,
        unit="dB",
        upper=False,
        values={"crossover_rad_s": math.nan, "phase_deg": [math.inf, 61.0]},
    )
    write_report(winch_report((odd,), figures={}), tmp_path)
    data = json.loads((tmp_path / "verdicts.json").read_text(encoding="utf-8"))
    assert data["verdicts"][0]["values"] == {"crossover_rad_s": None, "phase_deg": [None, 61.0]}


def test_figure_names_are_sanitised_and_kept_apart(tmp_path):
    assert figure_stem("Speed loop / Step") == "speed_loop_step"
    assert figure_stem("Bus_V.peak") == "bus_v_peak"
    assert figure_stem("<>") == "figure"
    figures = {"Bus V": small_figure("a", (3.0, 2.0)), "bus_v": small_figure("b", (4.0, 2.0))}
    files = write_report(winch_report((), figures=figures), tmp_path)
    assert [p.name for p in files[2:]] == ["bus_v.png", "bus_v-2.png"]
    assert png_size((tmp_path / "bus_v.png").read_bytes()) == (330, 220)
    assert png_size((tmp_path / "bus_v-2.png").read_bytes()) == (440, 220)


def test_figures_stay_open_and_unchanged(tmp_path):
    report = winch_report()
    dpi_before = {name: fig.dpi for name, fig in report.figures.items()}
    write_report(report, tmp_path)
    for name, fig in report.figures.items():
        assert fig.dpi == dpi_before[name]
        assert len(fig.axes) == 1
        buf = io.BytesIO()
        fig.savefig(buf, format="png")  # still usable by its owner
        assert buf.getvalue().startswith(PNG_SIGNATURE)


def test_a_figure_that_is_not_a_figure_is_refused_before_writing(tmp_path):
    out = tmp_path / "out"
    with pytest.raises(TypeError, match="report figure 'fuse_heat': expected a matplotlib"):
        write_report(winch_report(figures={"fuse_heat": "not a figure"}), out)
    assert not out.exists()


def test_reports_are_reproducible(tmp_path):
    report = winch_report()
    write_report(report, tmp_path / "a")
    write_report(report, tmp_path / "b")
    assert snapshot(tmp_path / "a") == snapshot(tmp_path / "b")
    page = (tmp_path / "a" / "report.html").read_text(encoding="utf-8")
    assert not re.search(r"\b(19|20)\d\d-\d\d-\d\d\b|\d\d:\d\d:\d\d", page)  # no timestamp


# --------------------------------------------------------------------------------------------
# write_report: all or nothing
# --------------------------------------------------------------------------------------------


def test_a_failing_figure_leaves_the_directory_as_it_was(tmp_path, monkeypatch):
    out = tmp_path / "out"
    write_report(winch_report(), out)
    (out / "notes.txt").write_text("kept by the user\n", encoding="utf-8")
    before = snapshot(out)

    report = winch_report(title="Harbour winch, second try")
    last = report.figures["overview"]

    def broken_savefig(*args, **kwargs):
        raise RuntimeError("renderer gave up")

    monkeypatch.setattr(last, "savefig", broken_savefig)
    with pytest.raises(RuntimeError, match="renderer gave up"):
        write_report(report, out)
    assert snapshot(out) == before


def test_a_failing_first_report_leaves_the_directory_empty(tmp_path, monkeypatch):
    report = winch_report()

    def broken_savefig(*args, **kwargs):
        raise OSError("disk full")

    monkeypatch.setattr(report.figures["speed_loop"], "savefig", broken_savefig)
    with pytest.raises(OSError, match="disk full"):
        write_report(report, tmp_path)
    assert snapshot(tmp_path) == {}


def test_a_failing_rename_puts_the_previous_files_back(tmp_path, monkeypatch):
    out = tmp_path / "out"
    write_report(winch_report(), out)
    before = snapshot(out)
    real_replace = os.replace
    renames: list[tuple[str, str]] = []  # (directory of the source, target) into out

    def flaky_replace(src, dst):
        if Path(dst).parent == out:  # a rename of the commit, not of a staged write
            renames.append((Path(src).parent.name, Path(dst).name))
            if len(renames) == 3:
                raise OSError("device went away")
        return real_replace(src, dst)

    monkeypatch.setattr(rio.os, "replace", flaky_replace)
    with pytest.raises(OSError, match="device went away"):
        write_report(winch_report(title="Harbour winch, new gearbox"), out)
    monkeypatch.undo()
    # two files committed, the third failed, then the two put back from the kept copies
    assert [target for _, target in renames] == [
        "report.html",
        "verdicts.json",
        "fuse_heat.png",
        "verdicts.json",
        "report.html",
    ]
    assert [source for source, _ in renames[3:]] == [".previous", ".previous"]
    assert snapshot(out) == before


# --------------------------------------------------------------------------------------------
# report.html
# --------------------------------------------------------------------------------------------


def test_page_is_one_self_contained_html5_file(written):
    _, out, _ = written
    page = parse(out / "report.html")
    raw = (out / "report.html").read_text(encoding="utf-8")
    assert page.decl.lower() == "doctype html"
    assert raw.startswith("<!DOCTYPE html>")
    assert page.faults == [] and page.stack == []
    tags = [t for t, _ in page.tags]
    assert tags[:3] == ["html", "head", "meta"]
    assert page.tags[0][1].get("lang") == "en"
    assert page.tags[2][1].get("charset", "").lower() == "utf-8"
    assert tags.count("title") == 1 and page.in_tag("title") == [
        "Design checks: Harbour winch, 2 t hook"
    ]
    assert not FORBIDDEN_TAGS & set(tags)
    for tag, attrs in page.tags:
        assert not any(a.startswith("on") for a in attrs), (tag, attrs)  # no event handlers
        for name, value in attrs.items():
            if name in URL_ATTRIBUTES:
                assert tag == "img" and name == "src", (tag, name, value)
                assert value.startswith("data:image/png;base64,")
    styles = page.in_tag("style")
    assert len(styles) == 1 and "@media print" in styles[0]
    for css in [*styles, *(a.get("style") or "" for _, a in page.tags)]:
        assert "url(" not in css and "@import" not in css and "@font-face" not in css
    prose = re.sub(r'src="data:image/png;base64,[A-Za-z0-9+/=]*"', "", raw)
    assert "data:" not in prose  # every data URI is an image source
    assert "http:" not in prose and "https:" not in prose and "//" not in prose


def test_every_image_is_an_embedded_png_of_a_figure(written):
    report, out, _ = written
    page = parse(out / "report.html")
    images = [attrs for tag, attrs in page.tags if tag == "img"]
    assert len(images) == len(report.figures)  # each figure once
    embedded = []
    for attrs in images:
        head, data = attrs["src"].split(",", 1)
        assert head == "data:image/png;base64"
        png = base64.b64decode(data, validate=True)
        width, height = png_size(png)
        assert (attrs["width"], attrs["height"]) == (str(width), str(height))
        embedded.append(png)
    files = [(out / f"{name}.png").read_bytes() for name in SIZES_IN]
    assert sorted(embedded) == sorted(files)
    for name in SIZES_IN:
        assert png_size((out / f"{name}.png").read_bytes()) == expected_px(name)


def test_caution_box_comes_first_and_before_the_verdict_table(written):
    _, out, _ = written
    page = parse(out / "report.html")
    body_at = page.events.index("<body")
    assert page.events[body_at + 1] == "<div"
    (caution_tag,) = [a for t, a in page.tags if a.get("class") == "caution"]
    assert caution_tag.get("role") == "note"
    assert page.events[body_at + 3] == CAUTION  # <div class="caution"><p>CAUTION
    assert page.events.index(CAUTION) < page.events.index("<table")


def test_sections_follow_the_group_order_then_overview_runs_warnings(tmp_path):
    verdicts = winch_verdicts()
    odd = judged("brake.pad_wear", "brake", "Brake pad wear per lift", 0.2, 1.0, "-")
    shuffled = (verdicts[6], odd, verdicts[4], verdicts[2], verdicts[5], verdicts[0])
    write_report(winch_report(shuffled), tmp_path)
    page = parse(tmp_path / "report.html")
    assert page.in_tag("h2") == [
        "Verdicts",
        "Fuse coordination",
        "Regenerative braking",
        "Thermal",
        "Duty cycle",
        "Control loops",
        "Brake",
        "Overview",
        "Runs behind the verdicts",
        "Warnings",
    ]
    # each figure once, in the section of the first group that names it
    events = page.events
    heading = {
        h: events.index(h)
        for h in ("Fuse coordination", "Regenerative braking", "Thermal", "Overview")
    }
    fuse_caption = events.index("Fuse heat")
    assert heading["Fuse coordination"] < fuse_caption < heading["Regenerative braking"]
    assert events.count("Fuse heat") == 1
    assert heading["Overview"] < events.index("Overview", heading["Overview"] + 1)
    text = page.text()
    assert "Fuse survives the winch start (fuse.survives_start)" in text
    assert "Bus voltage while lowering (regeneration.peak_bus)" in text  # both owners named


def test_status_badges_carry_text_not_only_colour(written):
    report, out, _ = written
    page = parse(out / "report.html")
    badges = [(stack, text) for stack, text in page.texts if stack[-1:] == ("span",)]
    rows = [t for s, t in badges if "tr" in s]
    assert rows == [
        {"pass": "PASS", "fail": "FAIL", "n/a": "N/A", "info": "INFO"}[v.status]
        for v in report.verdicts
    ]
    classes = [
        a.get("class") for t, a in page.tags if t == "span" and "badge" in a.get("class", "")
    ]
    assert {"badge badge-pass", "badge badge-fail", "badge badge-na", "badge badge-info"} <= set(
        classes
    )
    text = page.text()
    assert "1 check fails" in text
    assert "7 verdicts: 4 pass, 1 fail, 1 n/a, 1 info" in text
    for run, what in report.runs.items():
        assert run in text and what in text
    assert report.warnings[0] in page.in_tag("li")


def test_text_from_the_report_is_escaped(tmp_path):
    title = 'Brake <resistor> & "chopper" \u2264 it\'s'
    detail = "<script>alert('x')</script> R < 2 ohm & P > 300 W"
    verdict = judged(
        "regeneration.chopper",
        "regeneration",
        title,
        33.0,
        30.0,
        "V",
        detail=detail,
        values={"a<b": "x&y"},
        plots=("bus<peak>&",),
    )
    report = winch_report(
        (verdict,),
        title="Winch <b>bold</b>",
        scenario_source='odd "dir"/<winch>.toml',
        figures={"bus<peak>&": small_figure("x", (3.0, 2.0))},
        runs={"<run>": "load & speed"},
        warnings=("check <this> & that",),
    )
    files = write_report(report, tmp_path)
    assert files[2].name == "bus_peak.png"
    raw = (tmp_path / "report.html").read_text(encoding="utf-8")
    for text in (title, detail, "<b>bold</b>", "<winch>", "<run>", "<this>", "a<b", "<peak>"):
        assert text not in raw
    assert "&lt;script&gt;alert(&#x27;x&#x27;)&lt;/script&gt;" in raw
    assert "Brake &lt;resistor&gt; &amp; &quot;chopper&quot;" in raw
    page = parse(tmp_path / "report.html")
    assert page.faults == []
    assert "script" not in [t for t, _ in page.tags] and "b" not in [t for t, _ in page.tags]
    text = page.text()
    for shown in (title, detail, "Winch <b>bold</b>", "<run>", "load & speed", "check <this>"):
        assert shown in text
    assert page.in_tag("title") == ["Design checks: Winch <b>bold</b>"]
    alts = [a["alt"] for t, a in page.tags if t == "img"]
    assert alts == ["Bus<peak>&"]


def test_a_figure_named_but_not_produced_is_noted(tmp_path):
    verdict = judged(
        "loops.speed_overshoot", "loops", "Speed overshoot", 0.05, 0.1, "-", plots=("speed_step",)
    )
    write_report(winch_report((verdict,), figures={}), tmp_path)
    page = parse(tmp_path / "report.html")
    assert "was not produced." in page.text()
    assert [t for t, _ in page.tags].count("img") == 0


# --------------------------------------------------------------------------------------------
# Headless Chromium
# --------------------------------------------------------------------------------------------

WINDOW_PX = (1200, 1600)
PASS_RGB = (0x1B, 0x7F, 0x3B)  # .badge-pass in dcsim.checks.report
FAIL_RGB = (0xB4, 0x23, 0x18)  # .badge-fail (also the failing margin and the fail rules)


def chromium_binary() -> str | None:
    found = shutil.which("chromium")
    if found:
        return found
    return "/usr/bin/chromium" if Path("/usr/bin/chromium").exists() else None


def console_faults(stderr: str) -> list[str]:
    """Lines where the page logged to the console or failed to load something.

    The page has no script, so any console message is a fault (Chromium logs even
    ``console.error`` at INFO level, so the level is not enough).
    """
    marks = ("CONSOLE", "Uncaught", "Failed to load resource", "Not allowed to load")
    return [line for line in stderr.splitlines() if any(m in line for m in marks)]


def screenshot(chromium: str, page: Path, work: Path) -> tuple[bytes, str]:
    """Render a page headless at 1200x1600 px; the screenshot's bytes and Chromium's stderr."""
    work.mkdir()
    shot = work / "shot.png"
    command = [
        chromium,
        "--headless",
        "--no-sandbox",
        "--disable-gpu",
        "--disable-quic",
        "--no-first-run",
        "--disable-background-networking",
        "--disable-component-update",
        "--disable-sync",
        f"--user-data-dir={work / 'profile'}",
        f"--window-size={WINDOW_PX[0]},{WINDOW_PX[1]}",
        "--enable-logging=stderr",
        "--v=0",
        f"--screenshot={shot}",
        page.resolve().as_uri(),
    ]
    env = {
        **os.environ,
        "HOME": str(work),
        "XDG_CONFIG_HOME": str(work / "config"),
        "XDG_CACHE_HOME": str(work / "cache"),
    }
    try:
        done = subprocess.run(
            command, capture_output=True, text=True, timeout=60, env=env, cwd=work, check=False
        )
    except subprocess.TimeoutExpired as exc:
        pytest.fail(f"Chromium did not finish rendering {page.name} within 60 s: {exc}")
    assert shot.exists(), f"no screenshot of {page.name}; Chromium said:\n{done.stderr[-3000:]}"
    return shot.read_bytes(), done.stderr


def test_report_renders_in_headless_chromium(written, tmp_path):
    chromium = chromium_binary()
    if chromium is None:
        pytest.skip("Chromium not installed: .ci/run installs Debian's chromium")
    _, out, _ = written

    # A control page: white, with a script that throws, so that the console check is seen to
    # catch an error and the blank screenshot gives the size of an empty render.
    control = tmp_path / "control.html"
    control.write_text(
        '<!DOCTYPE html><html lang="en"><head><meta charset="utf-8"><title>blank</title>'
        '</head><body><script>throw new Error("control page error")</script></body></html>\n',
        encoding="utf-8",
    )
    blank_png, blank_err = screenshot(chromium, control, tmp_path / "blank")
    assert any("control page error" in line for line in console_faults(blank_err))

    shot_png, stderr = screenshot(chromium, out / "report.html", tmp_path / "report")
    assert console_faults(stderr) == []
    assert png_size(shot_png) == WINDOW_PX
    assert png_size(blank_png) == WINDOW_PX
    assert len(shot_png) > 5 * len(blank_png)

    pixels = mpimg.imread(io.BytesIO(shot_png), format="png")  # decoded rows, floats in 0..1
    assert pixels.shape[:2] == (WINDOW_PX[1], WINDOW_PX[0])
    rgb = np.round(pixels[..., :3] * 255.0).astype(int)
    blank = np.round(mpimg.imread(io.BytesIO(blank_png), format="png")[..., :3] * 255).astype(int)
    assert len(np.unique(blank.reshape(-1, 3), axis=0)) == 1  # the control really is blank
    ink = np.any(rgb < 200, axis=-1)
    assert ink.mean() > 0.02  # text, table rules and figures cover a visible part
    assert ink[: WINDOW_PX[1] // 4].mean() > 0.01  # and the top of the page is not empty
    for colour in (PASS_RGB, FAIL_RGB):  # the style sheet was applied
        near = np.all(np.abs(rgb - np.array(colour)) <= 6, axis=-1)
        assert near.sum() > 200, f"status colour {colour} not rendered"
