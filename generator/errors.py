"""User-facing error types: one line, exit code attached, never a traceback."""

from __future__ import annotations


class UserError(Exception):
    """A mistake in the user's input; printed as one line, exit code 2."""

    exit_code = 2


class CheckFailed(Exception):
    """A check that ran and failed (budget, stale file, infeasible envelope); exit code 1."""

    exit_code = 1


class InternalError(Exception):
    """kinetab's own mistake (a result it should never produce); printed as one line asking for a
    report, exit code 3, nothing written."""

    exit_code = 3


class ModelError(UserError):
    """A model file problem: `FILE: section.key: expected ..., found ...`."""

    def __init__(self, source: str, key: str, expected: str, found: str) -> None:
        self.source, self.key, self.expected, self.found = source, key, expected, found
        super().__init__(f"{source}: {key}: expected {expected}, found {found}")
