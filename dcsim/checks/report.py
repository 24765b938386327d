"""Presentation of design-check verdicts: the terminal table and the written report.

:func:`format_table` lays out a :class:`~dcsim.checks.verdict.CheckReport` as plain text for
``dcsim check``. :func:`write_report` writes the report set of ``dcsim report`` into a
directory, all or nothing: ``report.html`` (one self-contained page: inline CSS, figures
embedded as base64 PNG, no script and no external resource), ``verdicts.json`` and one PNG per
figure.

Nothing here computes a verdict; the numbers are shown as the checks give them (SI units, the
unit string of each verdict). Reports carry no date or time, so the same verdicts give the same
bytes.
"""

from __future__ import annotations

import base64
import html
import json
import math
import re
import shutil
import struct
import tempfile
import textwrap
from collections.abc import Iterable, Mapping, Sequence
from pathlib import Path
from typing import Any

from dcsim.checks.verdict import CAUTION, STATUSES, CheckReport, Verdict
from dcsim.plant.thermal import celsius as to_celsius
from dcsim.results.io import _STAGING_PREFIX, _commit, atomic_write

REPORT_FILE = "report.html"
VERDICTS_FILE = "verdicts.json"
REPORT_DPI = 110
"""Resolution of the figure PNGs [dots per inch]."""


GROUP_ORDER = ("fuse", "regeneration", "thermal", "duty", "loops", "bus")
"""Order of the group sections; any other group follows in order of first appearance."""

_GROUP_TITLES = {
    "fuse": "Fuse coordination",
    "regeneration": "Regenerative braking",
    "thermal": "Thermal",
    "duty": "Duty cycle",
    "loops": "Control loops",
    "bus": "Bus supply",
}
_LABELS = {"pass": "PASS", "fail": "FAIL", "n/a": "n/a", "info": "info"}
_TABLE_WIDTH = 100
_TITLE_WIDTH = 36
_DETAIL_INDENT = 8
_PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"
_NOT_ABSOLUTE = ("rise", "delta", "difference")  # a temperature difference has no degC reading


# --------------------------------------------------------------------------------------------
# Numbers and quantities
# --------------------------------------------------------------------------------------------


def format_number(x: float | None) -> str:
    """A number with about four significant figures.

    Parameters
    ----------
    x : float or None
        The value (any unit).

    Returns
    -------
    str
        ``"-"`` for None, ``"inf"`` / ``"-inf"`` / ``"nan"`` for non-finite values, whole
        numbers for 1e4 <= |x| < 1e6 (``"12345"``), otherwise ``'%.4g'`` (``"0.004701"``,
        ``"398.2"``, ``"1.5e-05"``).
    """
    if x is None:
        return "-"
    x = float(x)
    if math.isnan(x):
        return "nan"
    if math.isinf(x):
        return "inf" if x > 0 else "-inf"
    if x == 0.0:
        return "0"
    if 1e4 <= abs(x) < 1e6:
        return f"{x:.0f}"
    return f"{x:.4g}"


def _is_absolute_temperature(verdict: Verdict) -> bool:
    """True for a temperature in kelvin that also reads in degC (not a rise or difference)."""
    name = verdict.name.lower()
    return (
        verdict.unit == "K"
        and "temperature" in name
        and not any(word in name for word in _NOT_ABSOLUTE)
    )


def format_quantity(
    x: float | None, unit: str, *, celsius: bool = False, plain: bool = True
) -> str:
    """A value with its unit, as shown in the table and the report.

    Parameters
    ----------
    x : float or None
        The value [unit].
    unit : str
        Display unit (``"-"`` or ``""`` for a pure number, which is then shown alone).
    celsius : bool
        The value is an absolute temperature in kelvin: shown as ``"398.2 K (125.0 degC)"``
        with t/degC = T/K - 273.15 (SI Brochure, 9th ed. 2019, section 2.3.1).
    plain : bool
        ASCII (``degC``) when True, the degree sign when False.

    Returns
    -------
    str
        ``"-"`` without a value; ``"never"`` for an infinite time (unit ``"s"``, e.g. a fuse
        that does not melt); ``"inf V"`` for other infinite values.
    """
    if x is None:
        return "-"
    x = float(x)
    if unit == "s" and math.isinf(x) and x > 0:
        return "never"
    if celsius and math.isfinite(x):
        degree = "degC" if plain else "\u00b0C"
        return f"{x:.1f} K ({to_celsius(x):.1f} {degree})"
    number = format_number(x)
    return number if unit in ("", "-") else f"{number} {unit}"


def format_limit(verdict: Verdict, *, plain: bool = True) -> str:
    """The limit of a verdict with its direction, e.g. ``"<= 30 V"`` or ``">= 45 deg"``.

    Parameters
    ----------
    verdict : Verdict
        The verdict (``limit`` [unit], ``upper``: True for a maximum).
    plain : bool
        ASCII ``<=`` / ``>=`` when True, the signs ``\u2264`` / ``\u2265`` when False.

    Returns
    -------
    str
        ``"-"`` when the verdict has no limit.
    """
    if verdict.limit is None:
        return "-"
    if plain:
        sign = "<=" if verdict.upper else ">="
    else:
        sign = "\u2264" if verdict.upper else "\u2265"
    value = format_quantity(
        verdict.limit, verdict.unit, celsius=_is_absolute_temperature(verdict), plain=plain
    )
    return f"{sign} {value}"


def format_figure(verdict: Verdict, *, plain: bool = True) -> str:
    """The figure of a verdict with its unit (see :func:`format_quantity`)."""
    return format_quantity(
        verdict.figure, verdict.unit, celsius=_is_absolute_temperature(verdict), plain=plain
    )


def format_margin(margin: float | None) -> str:
    """A signed relative margin in percent, three significant figures: ``"+25 %"``, ``"-10 %"``,
    ``"+6.98 %"``, ``"+inf %"``, or ``"-"``.

    Parameters
    ----------
    margin : float or None
        :attr:`Verdict.margin` [-] (positive inside the limit).
    """
    if margin is None:
        return "-"
    if math.isnan(margin):
        return "nan"
    if math.isinf(margin):
        return "+inf %" if margin > 0 else "-inf %"
    return f"{margin * 100.0:+.3g} %"


def _verdict_counts_line(report: CheckReport) -> str:
    counts = report.counts()
    total = len(report.verdicts)
    parts = ", ".join(f"{counts[s]} {s}" for s in STATUSES)
    noun = "verdict" if total == 1 else "verdicts"
    return f"{total} {noun}: {parts}"


def overall_verdict(report: CheckReport) -> str:
    """``"all checks pass"``, ``"1 check fails"``, ``"N checks fail"`` or ``"no check applies"``.

    The last when no verdict is ``pass`` or ``fail`` (only ``n/a`` and ``info`` rows): nothing
    was judged, so nothing can be said to pass.
    """
    counts = report.counts()
    fails = counts["fail"]
    if fails == 1:
        return "1 check fails"
    if fails > 1:
        return f"{fails} checks fail"
    if counts["pass"] == 0:
        return "no check applies"
    return "all checks pass"


# --------------------------------------------------------------------------------------------
# Terminal table
# --------------------------------------------------------------------------------------------


def format_table(report: CheckReport) -> str:
    """The terminal output of ``dcsim check``.

    Parameters
    ----------
    report : CheckReport
        The verdicts of a scenario.

    Returns
    -------
    str
        Lines: the caution; the scenario file (and title); a table with one row per verdict
        (status, what is checked, figure with unit, limit, signed margin in percent) and, below
        each row, its detail indented and wrapped to 100 columns; the warnings; a last line with
        the counts and the overall verdict. Ends with a newline.
    """
    lines = [CAUTION]
    scenario = f"Scenario: {report.scenario_source}"
    if report.title:
        scenario += f" ({report.title})"
    lines.append(scenario)
    lines.append("")

    rows = [
        (
            _LABELS[v.status],
            textwrap.wrap(v.title, _TITLE_WIDTH) or [""],
            format_figure(v),
            format_limit(v),
            format_margin(v.margin),
            v.detail,
        )
        for v in report.verdicts
    ]
    header = ("STATUS", ["CHECK"], "FIGURE", "LIMIT", "MARGIN")
    w_status = max(len(r[0]) for r in [header, *rows])
    w_title = max(len(line) for r in [header, *rows] for line in r[1])
    w_figure = max(len(r[2]) for r in [header, *rows])
    w_limit = max(len(r[3]) for r in [header, *rows])
    w_margin = max(len(r[4]) for r in [header, *rows])

    def row_lines(status: str, title: list[str], figure: str, limit: str, margin: str) -> list:
        first = (
            f"{status:<{w_status}}  {title[0]:<{w_title}}  {figure:>{w_figure}}  "
            f"{limit:<{w_limit}}  {margin:>{w_margin}}"
        )
        more = [f"{'':<{w_status}}  {t}" for t in title[1:]]
        return [first.rstrip(), *more]

    if rows:
        lines.extend(row_lines(*header))
        lines.append("  ".join("-" * w for w in (w_status, w_title, w_figure, w_limit, w_margin)))
        indent = " " * _DETAIL_INDENT
        for status, title, figure, limit, margin, detail in rows:
            lines.extend(row_lines(status, title, figure, limit, margin))
            for paragraph in detail.splitlines():
                lines.extend(
                    textwrap.wrap(
                        paragraph,
                        _TABLE_WIDTH,
                        initial_indent=indent,
                        subsequent_indent=indent,
                        break_on_hyphens=False,
                    )
                )
    else:
        lines.append("No verdicts.")

    if report.warnings:
        lines.append("")
        lines.append("Warnings:")
        for warning in report.warnings:
            lines.extend(
                textwrap.wrap(
                    warning,
                    _TABLE_WIDTH,
                    initial_indent="  - ",
                    subsequent_indent="    ",
                    break_on_hyphens=False,
                )
                or ["  -"]
            )
    lines.append("")
    lines.append(f"{_verdict_counts_line(report)}; {overall_verdict(report)}")
    return "\n".join(lines) + "\n"


# --------------------------------------------------------------------------------------------
# Figure files
# --------------------------------------------------------------------------------------------


def figure_stem(name: str) -> str:
    """A file stem of a figure name: lower case, characters other than [a-z0-9_-] as ``_``.

    Parameters
    ----------
    name : str
        Figure name (key of :attr:`CheckReport.figures`).

    Returns
    -------
    str
        E.g. ``"Fuse heat / start"`` -> ``"fuse_heat_start"``; ``"figure"`` if nothing is left.
    """
    stem = re.sub(r"[^a-z0-9_-]+", "_", str(name).lower()).strip("_")
    return stem or "figure"


def _figure_files(names: Iterable[str]) -> dict[str, str]:
    """Figure name -> unique file name (``<stem>.png``, ``<stem>-2.png`` on a clash)."""
    files: dict[str, str] = {}
    used: set[str] = set()
    for name in names:
        stem = figure_stem(name)
        candidate, n = stem, 1
        while candidate in used:
            n += 1
            candidate = f"{stem}-{n}"
        used.add(candidate)
        files[name] = f"{candidate}.png"
    return files


def figure_words(name: str) -> str:
    """A figure name in words: ``"fuse.heat_fraction"`` -> ``"Fuse heat fraction"``."""
    words = " ".join(re.split(r"[\s._\-/]+", str(name))).strip()
    return (words[:1].upper() + words[1:]) if words else str(name)


def _png_size(data: bytes) -> tuple[int, int]:
    """Width and height [px] from a PNG's IHDR chunk (PNG spec, ISO/IEC 15948, 11.2.2)."""
    if data[:8] != _PNG_SIGNATURE or data[12:16] != b"IHDR":
        raise ValueError("expected a PNG file, found other bytes")
    width, height = struct.unpack(">II", data[16:24])
    return width, height


# --------------------------------------------------------------------------------------------
# HTML
# --------------------------------------------------------------------------------------------

_CSS = """
:root { color-scheme: light; }
* { box-sizing: border-box; }
body { margin: 0 auto; max-width: 72rem; padding: 1rem 1.5rem 3rem;
  font-family: sans-serif; font-size: 15px; line-height: 1.45; color: #1d2733;
  background: #ffffff; }
h1 { font-size: 1.6rem; margin: 1rem 0 0.25rem; }
h2 { font-size: 1.25rem; margin: 2rem 0 0.6rem; padding-bottom: 0.2rem;
  border-bottom: 2px solid #d5dbe2; }
h3 { font-size: 1.02rem; margin: 1.1rem 0 0.3rem; }
code { font-family: monospace; font-size: 0.92em; }
.caution { border: 2px solid #a15c00; background: #fff4e0; color: #4a2c00;
  padding: 0.7rem 1rem; margin: 0 0 1rem; font-weight: bold; }
.caution p { margin: 0; }
.source { margin: 0; color: #4b5866; }
.summary { margin: 1rem 0; padding: 0.6rem 1rem; border-left: 6px solid #667085;
  background: #f3f5f7; }
.summary.all-pass { border-left-color: #1b7f3b; }
.summary.some-fail { border-left-color: #b42318; }
table { border-collapse: collapse; width: 100%; font-variant-numeric: tabular-nums; }
th, td { text-align: left; vertical-align: top; padding: 0.35rem 0.5rem;
  border-bottom: 1px solid #e3e7ec; }
thead th { background: #eef1f4; border-bottom: 2px solid #c9d0d8; }
td.num { text-align: right; white-space: nowrap; }
td.limit { white-space: nowrap; }
td.neg { color: #b42318; font-weight: bold; }
.name { display: block; color: #5b6775; font-size: 0.85em; }
.detail { white-space: pre-line; overflow-wrap: anywhere; }
.name { overflow-wrap: anywhere; }
.scroll { overflow-x: auto; }
.badge { display: inline-block; min-width: 3.6em; padding: 0.1em 0.45em; border-radius: 3px;
  color: #ffffff; font-weight: bold; font-size: 0.85em; text-align: center;
  letter-spacing: 0.03em; }
.badge-pass { background: #1b7f3b; }
.badge-fail { background: #b42318; }
.badge-na { background: #667085; }
.badge-info { background: #1d5fb4; }
.check { margin: 0 0 1rem; padding: 0.2rem 0 0.4rem 0.9rem; border-left: 4px solid #d5dbe2; }
.check.fail { border-left-color: #b42318; }
.check p { margin: 0.2rem 0; }
table.values { width: auto; margin: 0.3rem 0; font-size: 0.9em; }
table.values th { font-weight: normal; }
figure { margin: 1rem 0 1.5rem; }
figure img { display: block; max-width: 100%; height: auto; border: 1px solid #e3e7ec; }
figcaption { margin-top: 0.35rem; font-size: 0.92em; color: #3a4654; }
.missing { color: #8a4b00; }
ul.warnings li { margin: 0.25rem 0; }
@media print {
  body { max-width: none; padding: 0; font-size: 10pt; }
  .caution, .badge, .summary, thead th { -webkit-print-color-adjust: exact;
    print-color-adjust: exact; }
  h2 { break-after: avoid; }
  tr, figure, .check { break-inside: avoid; }
  figure img { max-width: 100% !important; border: none; }
}
""".strip()


def _e(text: Any) -> str:
    return html.escape(str(text), quote=True)


def _badge(status: str) -> str:
    css = {"pass": "pass", "fail": "fail", "n/a": "na", "info": "info"}[status]
    return f'<span class="badge badge-{css}">{_e(_LABELS[status].upper())}</span>'


def _value_text(value: Any) -> str:
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, (int, float)):
        return format_number(value)
    if isinstance(value, Mapping):
        return ", ".join(f"{k}: {_value_text(v)}" for k, v in value.items())
    if isinstance(value, (list, tuple)):
        return ", ".join(_value_text(v) for v in value)
    if value is None:
        return "-"
    try:
        return format_number(float(value))
    except (TypeError, ValueError):
        return str(value)


def _ordered_groups(verdicts: Sequence[Verdict]) -> list[str]:
    present = list(dict.fromkeys(v.group for v in verdicts))
    return [g for g in GROUP_ORDER if g in present] + [g for g in present if g not in GROUP_ORDER]


def _group_title(group: str) -> str:
    return _GROUP_TITLES.get(group) or figure_words(group) or "Other checks"


def _verdict_row(v: Verdict) -> str:
    margin = v.margin
    neg = " neg" if margin is not None and margin < 0 else ""
    return (
        "<tr>"
        f"<td>{_badge(v.status)}</td>"
        f'<td>{_e(v.title)}<span class="name"><code>{_e(v.name)}</code></span></td>'
        f'<td class="num">{_e(format_figure(v, plain=False))}</td>'
        f'<td class="limit">{_e(format_limit(v, plain=False))}</td>'
        f'<td class="num{neg}">{_e(format_margin(margin))}</td>'
        f'<td class="detail">{_e(v.detail)}</td>'
        "</tr>"
    )


def _verdict_block(v: Verdict) -> list[str]:
    css = " fail" if v.status == "fail" else ""
    out = [
        f'<div class="check{css}">',
        f"<h3>{_badge(v.status)} {_e(v.title)}</h3>",
        f'<p class="name"><code>{_e(v.name)}</code></p>',
    ]
    numbers = [
        f"{label}: {_e(text)}"
        for label, present, text in (
            ("Figure", v.figure is not None, format_figure(v, plain=False)),
            ("Limit", v.limit is not None, format_limit(v, plain=False)),
            ("Margin", v.margin is not None, format_margin(v.margin)),
        )
        if present
    ]
    if numbers:
        out.append(f"<p>{' &middot; '.join(numbers)}</p>")
    if v.detail:
        out.append(f'<p class="detail">{_e(v.detail)}</p>')
    if v.values:
        out.append('<table class="values"><tbody>')
        for key, value in v.values.items():
            out.append(f"<tr><th><code>{_e(key)}</code></th><td>{_e(_value_text(value))}</td></tr>")
        out.append("</tbody></table>")
    out.append("</div>")
    return out


def _figure_block(name: str, file_name: str, png: bytes, owners: Sequence[Verdict]) -> list[str]:
    width, height = _png_size(png)
    words = figure_words(name)
    data = base64.b64encode(png).decode("ascii")
    caption = f"<strong>{_e(words)}</strong> <code>{_e(file_name)}</code>"
    if owners:
        shows = "; ".join(f"{v.title} ({v.name})" for v in owners)
        caption += f" &mdash; for: {_e(shows)}"
    return [
        "<figure>",
        f'<img src="data:image/png;base64,{data}" alt="{_e(words)}" '
        f'width="{width}" height="{height}">',
        f"<figcaption>{caption}</figcaption>",
        "</figure>",
    ]


def report_html(report: CheckReport, pngs: Mapping[str, bytes], files: Mapping[str, str]) -> str:
    """The text of ``report.html``.

    Parameters
    ----------
    report : CheckReport
        The verdicts.
    pngs : mapping of str to bytes
        Figure name -> PNG bytes (the files written beside the report).
    files : mapping of str to str
        Figure name -> PNG file name.

    Returns
    -------
    str
        One self-contained HTML5 page (inline CSS, images as ``data:`` URIs, no script, no
        external resource, no date). Every text taken from the report is escaped.
    """
    title = report.title or report.scenario_source or "scenario"
    counts = _verdict_counts_line(report)
    overall = overall_verdict(report)
    state = "some-fail" if report.failed else ("all-pass" if overall == "all checks pass" else "")
    n_warn = len(report.warnings)
    warn_note = (
        f"; {n_warn} warning{'s' if n_warn != 1 else ''}, listed at the end" if n_warn else ""
    )

    owners: dict[str, list[Verdict]] = {}
    for v in report.verdicts:
        for plot in v.plots:
            owners.setdefault(plot, [])
            if v not in owners[plot]:
                owners[plot].append(v)

    out = [
        "<!DOCTYPE html>",
        '<html lang="en">',
        "<head>",
        '<meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>Design checks: {_e(title)}</title>",
        f"<style>\n{_CSS}\n</style>",
        "</head>",
        "<body>",
        f'<div class="caution" role="note"><p>{_e(CAUTION)}</p></div>',
        "<header>",
        f"<h1>Design checks: {_e(title)}</h1>",
        f'<p class="source">Scenario file: <code>{_e(report.scenario_source)}</code></p>',
        "</header>",
        f'<p class="summary {state}"><strong>{_e(overall.capitalize())}</strong> '
        f"&mdash; {_e(counts)}{_e(warn_note)}.</p>",
        "<section>",
        "<h2>Verdicts</h2>",
        '<div class="scroll"><table class="verdicts">',
        "<thead><tr>"
        + "".join(
            f"<th>{h}</th>" for h in ("Status", "Check", "Figure", "Limit", "Margin", "Detail")
        )
        + "</tr></thead>",
        "<tbody>",
    ]
    if report.verdicts:
        out.extend(_verdict_row(v) for v in report.verdicts)
    else:
        out.append('<tr><td colspan="6">No verdicts.</td></tr>')
    out += ["</tbody>", "</table></div>", "</section>"]

    shown: set[str] = set()

    def figures_for(names: Iterable[str]) -> list[str]:
        block: list[str] = []
        for name in names:
            if name in shown:
                continue
            shown.add(name)
            if name in pngs:
                block.extend(_figure_block(name, files[name], pngs[name], owners.get(name, [])))
            else:
                block.append(
                    f'<p class="missing">Figure <code>{_e(name)}</code> was not produced.</p>'
                )
        return block

    for group in _ordered_groups(report.verdicts):
        members = [v for v in report.verdicts if v.group == group]
        out += ["<section>", f"<h2>{_e(_group_title(group))}</h2>"]
        for v in members:
            out.extend(_verdict_block(v))
        out.extend(figures_for(plot for v in members for plot in v.plots))
        out.append("</section>")

    loose = [name for name in pngs if name not in owners]
    if loose:
        out += ["<section>", "<h2>Overview</h2>", *figures_for(loose), "</section>"]

    out += ["<section>", "<h2>Runs behind the verdicts</h2>"]
    if report.runs:
        out.append(
            '<table class="runs"><thead><tr><th>Run</th>'
            "<th>What was changed</th></tr></thead><tbody>"
        )
        for name, what in report.runs.items():
            out.append(f"<tr><td><code>{_e(name)}</code></td><td>{_e(what)}</td></tr>")
        out.append("</tbody></table>")
    else:
        out.append("<p>No runs listed.</p>")
    out += ["</section>", "<section>", "<h2>Warnings</h2>"]
    if report.warnings:
        out.append('<ul class="warnings">')
        out.extend(f"<li>{_e(w)}</li>" for w in report.warnings)
        out.append("</ul>")
    else:
        out.append("<p>None.</p>")
    out += ["</section>", "</body>", "</html>"]
    return "\n".join(out) + "\n"


# --------------------------------------------------------------------------------------------
# The report set
# --------------------------------------------------------------------------------------------


def verdicts_json_text(report: CheckReport) -> str:
    """The text of ``verdicts.json``: ``report.as_dict()``, indented, no NaN, final newline."""
    return json.dumps(report.as_dict(), indent=2, allow_nan=False, ensure_ascii=False) + "\n"


def write_report(report: CheckReport, out_dir: str | Path) -> list[Path]:
    """Write the report set of a scenario's checks into a directory, all or nothing.

    Parameters
    ----------
    report : CheckReport
        The verdicts, their figures (matplotlib Figures; saved, not closed: the caller owns
        them), runs and warnings.
    out_dir : str or Path
        Output directory; created (with its parents) if missing.

    Returns
    -------
    list of Path
        ``report.html``, ``verdicts.json``, then one ``<name>.png`` per figure (at
        :data:`REPORT_DPI`, names by :func:`figure_stem`, ``-2``, ``-3`` ... on a clash), in
        the order of ``report.figures``.

    Raises
    ------
    TypeError
        A figure has no ``savefig`` method (nothing is written).

    Notes
    -----
    Every file is first written into a hidden staging directory inside ``out_dir`` and then
    renamed over its target by :func:`dcsim.results.io._commit`, which puts the previous files
    back should a rename fail; the staging directory is always removed. On any failure
    ``out_dir`` holds exactly what it held before; on success, the complete new set. The images
    embedded in the page are the bytes of the PNG files written beside it.
    """
    for name, fig in report.figures.items():
        if not callable(getattr(fig, "savefig", None)):
            raise TypeError(
                f"report figure {name!r}: expected a matplotlib Figure, found {type(fig).__name__}"
            )
    json_text = verdicts_json_text(report)  # fails before any file is created
    files = _figure_files(report.figures)

    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    staging = Path(tempfile.mkdtemp(prefix=_STAGING_PREFIX, dir=out))
    try:
        staged_pngs: list[Path] = []
        pngs: dict[str, bytes] = {}
        for name, fig in report.figures.items():
            target = atomic_write(
                staging / files[name],
                lambda tmp, fig=fig: fig.savefig(tmp, format="png", dpi=REPORT_DPI),
            )
            staged_pngs.append(target)
            pngs[name] = target.read_bytes()
        page = report_html(report, pngs, files)
        staged = [
            atomic_write(staging / REPORT_FILE, lambda tmp: tmp.write_text(page, encoding="utf-8")),
            atomic_write(
                staging / VERDICTS_FILE, lambda tmp: tmp.write_text(json_text, encoding="utf-8")
            ),
            *staged_pngs,
        ]
        return _commit(staged, out, staging)
    finally:
        shutil.rmtree(staging, ignore_errors=True)
