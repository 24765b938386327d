"""Two-column CSV files a scenario names (supply profiles, reference tables).

Comma or semicolon separated, an optional text header line, blank lines and ``#`` comments
skipped. Every problem is one :class:`~dcsim.errors.ScenarioError` naming the file and line.
"""

from __future__ import annotations

import csv
import math
import os
from pathlib import Path

from dcsim.errors import ScenarioError


def read_pairs(
    path: str | os.PathLike[str], *, columns: str, source: str, key: str
) -> list[tuple[float, float, int]]:
    """Read ``(first, second, line number)`` from a two-column CSV file.

    Parameters
    ----------
    path : str or path-like
        The CSV file.
    columns : str
        What the two columns hold, for messages (``"time [s], voltage [V]"``).
    source, key : str
        The scenario file and key that name the CSV.

    Raises
    ------
    ScenarioError
        The file cannot be read, or a line is not two finite numbers.
    """
    file = Path(path)
    try:
        text = file.read_text(encoding="utf-8-sig")
    except (OSError, UnicodeDecodeError) as err:
        reason = getattr(err, "strerror", None) or str(err)
        raise ScenarioError(
            f"expected a readable CSV file of {columns.replace(', ', ' and ')}, found that "
            f"{file} cannot be read ({reason})",
            source=source,
            key=key,
        ) from None
    rows: list[tuple[float, float, int]] = []
    lines = text.splitlines()
    delimiter = ";" if any(";" in ln for ln in lines) else ","
    for lineno, row in enumerate(csv.reader(lines, delimiter=delimiter), start=1):
        cells = [c.strip() for c in row]
        if not cells or all(not c for c in cells) or cells[0].startswith("#"):
            continue
        try:
            numbers = [float(c) for c in cells if c]
        except ValueError:
            if not rows and all(_is_text(c) for c in cells if c):
                continue  # the header line
            raise ScenarioError(
                f"expected two numbers ({columns}) on line {lineno} of {file}, found "
                f"{','.join(cells)!r}",
                source=source,
                key=key,
            ) from None
        if len(numbers) != 2:
            raise ScenarioError(
                f"expected two numbers ({columns}) on line {lineno} of {file}, found "
                f"{len(numbers)}",
                source=source,
                key=key,
            )
        if not all(math.isfinite(x) for x in numbers):
            raise ScenarioError(
                f"expected finite numbers on line {lineno} of {file} ({columns}), found "
                f"{','.join(cells)!r}",
                source=source,
                key=key,
            )
        rows.append((numbers[0], numbers[1], lineno))
    return rows


def _is_text(cell: str) -> bool:
    try:
        float(cell)
    except ValueError:
        return True
    return False
