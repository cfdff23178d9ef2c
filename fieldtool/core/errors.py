"""One error root for the whole tool.

FieldtoolError            every error a user may see: a short title and a message
├── ProfileError          a board profile that cannot be used (file, key, what, fix)
├── SolverError           the steady state could not be found honestly
├── InputError            a readings file, fault spec or option that cannot be used
└── (meters, history)     their own subclasses, defined beside their code
"""

from __future__ import annotations


class FieldtoolError(Exception):
    """An error a user may see: a short title and a one-line message."""

    title = "Error"

    def __init__(self, message: str, *, title: str | None = None) -> None:
        super().__init__(message)
        self.message = message
        if title is not None:
            self.title = title

    def __str__(self) -> str:
        return self.message


class ProfileError(FieldtoolError):
    """A board profile that is missing, unreadable or invalid."""

    title = "Bad profile"


class SolverError(FieldtoolError):
    """The periodic steady state did not converge."""

    title = "Solver did not converge"


class InputError(FieldtoolError):
    """A readings file, fault spec or command-line value that cannot be used."""

    title = "Bad input"
