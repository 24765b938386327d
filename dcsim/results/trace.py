"""Result objects of a run: :class:`Trace` (recorded columns) and :class:`SimulationResult`."""

from __future__ import annotations

from collections.abc import Iterator, Mapping
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:
    from dcsim.scenario.schema import Scenario

TRACE_COLUMNS: tuple[str, ...] = (
    "time_s",
    "current_A",
    "speed_rad_s",
    "position_rad",
    "armature_voltage_V",
    "bus_voltage_V",
    "motor_torque_Nm",
    "load_torque_Nm",
    "supply_current_A",
)
"""Columns every trace has, in CSV order (names carry their SI unit)."""

ENERGY_KEYS: tuple[str, ...] = (
    "energy_from_supply_J",
    "energy_source_loss_J",
    "energy_copper_loss_J",
    "energy_friction_J",
    "energy_to_load_J",
    "energy_shaft_lock_J",
    "energy_coupling_J",
    "kinetic_energy_change_J",
    "stored_energy_change_J",
)
"""Terms of the energy account. ``energy_from_supply_J`` equals the sum of all the others."""


@dataclass(frozen=True)
class Trace(Mapping):
    """Recorded columns of one run, each a 1-D numpy array of the same length.

    Behaves as a read-only mapping ``name -> array`` (``trace["current_A"]``). Column names
    carry their SI unit; see :data:`TRACE_COLUMNS`.
    """

    columns: Mapping[str, np.ndarray]

    def __getitem__(self, name: str) -> np.ndarray:
        try:
            return self.columns[name]
        except KeyError:
            raise KeyError(f"no trace column {name!r}; columns are {list(self.columns)}") from None

    def __iter__(self) -> Iterator[str]:
        return iter(self.columns)

    def __len__(self) -> int:
        return len(self.columns)

    @property
    def rows(self) -> int:
        """Number of recorded instants."""
        return len(self.columns["time_s"])


class Summary(Mapping):
    """Scalar results of one run, read-only, keyed as in ``summary.json`` (SI numbers).

    ``summary["i2t_A2s"]`` [A^2*s], ``summary["peak_current_A"]`` [A], the energy account
    (:data:`ENERGY_KEYS`, [J]) and ``energy_balance_residual_J`` [J]; ``dict(summary)`` gives a
    plain, writable copy.
    """

    __slots__ = ("_values",)

    def __init__(self, values: Mapping[str, float | int]) -> None:
        self._values = dict(values)

    def __getitem__(self, key: str) -> float | int:
        try:
            return self._values[key]
        except KeyError:
            raise KeyError(f"no summary key {key!r}; keys are {sorted(self._values)}") from None

    def __iter__(self) -> Iterator[str]:
        return iter(self._values)

    def __len__(self) -> int:
        return len(self._values)

    def __repr__(self) -> str:
        return f"Summary({self._values!r})"

    @property
    def energy_closure(self) -> float:
        """``|energy_balance_residual_J|`` over the largest energy term [-].

        Meaningful when something happens in the run: in a run where every term sits at
        rounding level (no command, no load) it compares rounding with rounding.
        """
        terms = [abs(self._values[k]) for k in ENERGY_KEYS if k in self._values]
        largest = max(terms, default=0.0)
        residual = abs(self._values.get("energy_balance_residual_J", 0.0))
        return residual / largest if largest > 0.0 else residual


@dataclass(frozen=True)
class SimulationResult:
    """Everything one run produced.

    Attributes
    ----------
    scenario : Scenario
        The scenario that was run.
    trace : Trace
        Recorded columns.
    summary : Summary
        Scalar results keyed as in ``summary.json`` (SI numbers), including the energy account
        (:data:`ENERGY_KEYS`) and ``energy_balance_residual_J``.
    step_s : float
        Plant integration step used [s].
    record_interval_s : float
        Spacing of trace rows [s].
    event_times_s : tuple of float
        Times at which scenario events were applied [s].
    chops : numpy.ndarray
        The current comparator's decays (switching bridge), one row each: start [s], current
        there [A], end [s], current there [A] (NaN while unfinished); shape ``(n, 4)``.
    """

    scenario: Scenario
    trace: Trace
    summary: Summary
    step_s: float
    record_interval_s: float
    event_times_s: tuple[float, ...] = field(default_factory=tuple)
    chops: np.ndarray = field(default_factory=lambda: np.zeros((0, 4)))
