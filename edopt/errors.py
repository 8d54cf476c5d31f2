"""The exception family of edopt: each carries what the user must fix."""

from __future__ import annotations


class EdoptError(Exception):
    """Base class: a problem the user can act on (message says what to fix)."""


class CaseError(EdoptError):
    """A case or technology file is malformed; names the file and, where known, the line."""

    def __init__(self, message: str, path: str | None = None, line: int | None = None) -> None:
        where = ""
        if path is not None:
            where = f"{path}:{line}: " if line is not None else f"{path}: "
        super().__init__(where + message)
        self.path = path
        self.line = line


class GateError(EdoptError):
    """A gate type is unknown or its description is invalid."""


class CircuitError(EdoptError):
    """The gate network is inconsistent (undriven net, loop, unknown pin, ...)."""


class InfeasibleTarget(EdoptError):
    """No sizing meets the delay target; carries the minimum achievable delay."""

    def __init__(self, message: str, min_delay_ps: float | None = None) -> None:
        super().__init__(message)
        self.min_delay_ps = min_delay_ps


class SolverError(EdoptError):
    """The numerical solver failed to reach a trustworthy answer."""
