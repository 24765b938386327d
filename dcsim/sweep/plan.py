"""The runs of a sweep: grid x (nominal + corners + Monte Carlo samples), numbered.

Run numbers are deterministic: grid points in row-major order (the first axis of ``[grid]``
varies slowest), and within each point the nominal run (if any), then the corners, then the
samples. A run's values are computed from its number on demand, so a plan of millions of runs
takes no more memory than its draws (8 bytes per toleranced key per sample).

Draws
-----
Each toleranced key has its own random stream, a :class:`numpy.random.Generator` seeded by
``SeedSequence(seed, spawn_key=(crc32(key),))``: adding or removing a key leaves the draws of
the others unchanged. A normal tolerance draws standard normal deviates ``z``
(:meth:`~numpy.random.Generator.standard_normal`), a uniform one ``z`` from [-1, 1)
(:meth:`~numpy.random.Generator.uniform`). Sample ``s`` uses the same ``z`` at every grid point
(common random numbers, so that grid points differ by their grid values only). The value is
``nominal * (1 + z * fraction)`` for a tolerance in %, ``nominal + z * amount`` in units.

Corners
-------
Every low/high combination of the toleranced keys: ``z = -1`` or ``+1`` for a uniform
tolerance, ``-corner_sigma`` or ``+corner_sigma`` for a normal one. Corner ``c`` takes the
high side of the ``j``-th toleranced key (in file order) when bit ``n - 1 - j`` of ``c`` is
set: corner 0 is all low, the last corner all high.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import math
import zlib
from collections.abc import Iterator
from dataclasses import dataclass
from typing import Any

import numpy as np

from dcsim.scenario.load import key_spec
from dcsim.sweep.spec import SweepSpec

__all__ = ["KIND_CORNER", "KIND_NOMINAL", "KIND_SAMPLE", "Plan", "RunSpec"]

KIND_NOMINAL = "nominal"
KIND_CORNER = "corner"
KIND_SAMPLE = "sample"

_FORMAT = 1  # bump when the numbering or the draws change: old output folders then refuse --resume


@dataclass(frozen=True)
class RunSpec:
    """One run of a sweep.

    Attributes
    ----------
    run : int
        Run number, from 0.
    kind : str
        ``"nominal"``, ``"corner"`` or ``"sample"``.
    point : int
        Grid point number, from 0.
    values : tuple
        Value of each of :attr:`Plan.keys` in this run [SI; bool or str for switches and
        choices].
    """

    run: int
    kind: str
    point: int
    values: tuple[Any, ...]


class Plan:
    """Every run of a sweep, numbered (see the module notes).

    Parameters
    ----------
    spec : SweepSpec
        A checked sweep.

    Attributes
    ----------
    spec : SweepSpec
    keys : tuple of str
        The varied scenario keys, one column each: grid keys, then toleranced keys.
    key_kinds : tuple of str
        ``"float"``, ``"bool"`` or ``"str"`` for each of :attr:`keys`.
    points : int
        Number of grid points (1 without a grid).
    per_point : int
        Runs per grid point: nominal + corners + samples.
    draws : numpy.ndarray
        ``(samples, toleranced keys)`` deviates ``z``.
    """

    def __init__(self, spec: SweepSpec) -> None:
        self.spec = spec
        self.keys = spec.varied_keys
        kinds = {"quantity": "float", "bool": "bool", "choice": "str"}
        self.key_kinds = tuple(kinds[key_spec(k).kind] for k in self.keys)
        self._sizes = tuple(len(axis.levels) for axis in spec.grid)
        self.points = math.prod(self._sizes)
        n_tol = len(spec.tolerances)
        self.n_nominal = 1 if spec.nominal else 0
        self.n_corners = 2**n_tol if spec.corners and n_tol else 0
        self.n_samples = spec.samples if n_tol else 0
        self.per_point = self.n_nominal + self.n_corners + self.n_samples
        self.draws = np.zeros((self.n_samples, n_tol))
        for j, tol in enumerate(spec.tolerances):
            seq = np.random.SeedSequence(spec.seed, spawn_key=(zlib.crc32(tol.key.encode()),))
            rng = np.random.default_rng(seq)
            if tol.distribution == "normal":
                self.draws[:, j] = rng.standard_normal(self.n_samples)
            else:
                self.draws[:, j] = rng.uniform(-1.0, 1.0, self.n_samples)
        self._position = {k: i for i, k in enumerate(self.keys)}
        self._base_values = tuple(spec.base.get(k) for k in self.keys)

    def __len__(self) -> int:
        return self.points * self.per_point

    def describe(self) -> str:
        """``"3 grid points x (1 nominal + 8 corners + 100 samples) = 327 runs"``."""
        parts = []
        for n, word in (
            (self.n_nominal, "nominal"),
            (self.n_corners, "corner"),
            (self.n_samples, "sample"),
        ):
            if n:
                parts.append(f"{n} {word}" + ("s" if n != 1 and word != "nominal" else ""))
        inner = " + ".join(parts)
        points = f"{self.points} grid point{'s' if self.points != 1 else ''}"
        return f"{points} x ({inner}) = {len(self)} runs"

    def point_values(self, point: int) -> list[Any]:
        """Values of :attr:`keys` at a grid point, before any tolerance [SI]."""
        values = list(self._base_values)
        rest = point
        levels = []
        for size in reversed(self._sizes):
            rest, k = divmod(rest, size)
            levels.append(k)
        for axis, k in zip(self.spec.grid, reversed(levels), strict=True):
            for key, value in zip(axis.keys, axis.levels[k], strict=True):
                values[self._position[key]] = value
        return values

    def run(self, run: int) -> RunSpec:
        """The run with number ``run`` (0 <= run < len(plan))."""
        if not 0 <= run < len(self):
            raise IndexError(f"run {run} outside the plan of {len(self)} runs")
        point, offset = divmod(run, self.per_point)
        values = self.point_values(point)
        if offset < self.n_nominal:
            return RunSpec(run, KIND_NOMINAL, point, tuple(values))
        offset -= self.n_nominal
        tols = self.spec.tolerances
        if offset < self.n_corners:
            n = len(tols)
            z = []
            for j, tol in enumerate(tols):
                side = 1.0 if (offset >> (n - 1 - j)) & 1 else -1.0
                z.append(side * (self.spec.corner_sigma if tol.distribution == "normal" else 1.0))
            kind = KIND_CORNER
        else:
            z = [float(v) for v in self.draws[offset - self.n_corners]]
            kind = KIND_SAMPLE
        for tol, zj in zip(tols, z, strict=True):
            i = self._position[tol.key]
            nominal = float(values[i])
            values[i] = (
                nominal * (1.0 + zj * tol.amount) if tol.relative else nominal + zj * (tol.amount)
            )
        return RunSpec(run, kind, point, tuple(values))

    def changes(self, run: int) -> dict[str, Any]:
        """``{key: value}`` of a run, for :meth:`~dcsim.scenario.schema.Scenario.with_changes`."""
        return dict(zip(self.keys, self.run(run).values, strict=True))

    def __iter__(self) -> Iterator[RunSpec]:
        for k in range(len(self)):
            yield self.run(k)

    def fingerprint(self) -> str:
        """A hash of everything that decides the runs and their columns (not the criteria).

        Two plans with the same fingerprint give the same table, so ``--resume`` may continue
        one with the other.
        """
        spec = self.spec
        data = {
            "format": _FORMAT,
            "base": repr(dataclasses.replace(spec.base, source="")),
            "grid": [
                [a.label, list(a.keys), [list(map(repr, lv)) for lv in a.levels]] for a in spec.grid
            ],
            "tolerances": [
                [t.key, t.distribution, t.relative, repr(t.amount)] for t in spec.tolerances
            ],
            "samples": spec.samples,
            "seed": spec.seed,
            "corners": spec.corners,
            "corner_sigma": repr(spec.corner_sigma),
            "nominal": spec.nominal,
            "metrics": list(spec.metrics),
        }
        text = json.dumps(data, sort_keys=True)
        return hashlib.sha256(text.encode()).hexdigest()
