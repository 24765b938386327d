"""Let pytest collect the benchmark scripts (``bench_*.py``) when asked for them.

The default test run never comes here: ``addopts`` in ``pyproject.toml`` has
``--ignore=tests/benchmarks``. Naming the folder or a file runs them::

    python -m pytest tests/benchmarks -s
    python -m pytest tests/benchmarks/bench_core.py -s
"""

from __future__ import annotations

from pathlib import Path

import pytest


def pytest_collect_file(parent: pytest.Collector, file_path: Path) -> pytest.Module | None:
    """Collect ``bench_*.py`` as test modules (pytest's default pattern is ``test_*.py``)."""
    if parent.session.isinitpath(file_path):
        return None  # named on the command line: pytest collects it already
    if file_path.suffix == ".py" and file_path.name.startswith("bench_"):
        return pytest.Module.from_parent(parent, path=file_path)
    return None
