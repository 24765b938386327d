"""The project's own exceptions.

Every problem a user can cause (a bad scenario, a run that cannot go on) raises one of these,
so that the command line can print one clean line and choose its exit code.
"""

from __future__ import annotations


class DcsimError(Exception):
    """Base class of every error dcsim raises on purpose."""


class ScenarioError(DcsimError, ValueError):
    """A scenario file or value is not acceptable.

    The message names the file, the key, what was expected and what was found.
    """

    def __init__(self, message: str, *, source: str = "", key: str = "") -> None:
        self.source = source
        self.key = key
        self.detail = message
        prefix = ": ".join(p for p in (source, key) if p)
        super().__init__(f"{prefix}: {message}" if prefix else message)


class SimulationError(DcsimError, RuntimeError):
    """A run could not go on (non-finite state, energy with nowhere to go, ...)."""
