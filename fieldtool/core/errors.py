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


ECHO_CHARACTERS = 40  # how much of a value a message repeats (common practice, no source)


def shown(value: object, limit: int = ECHO_CHARACTERS) -> str:
    """A value as a message repeats it: text quoted, anything else as Python writes it, and
    either cut short when long.

    A pasted 100,000-digit number or a whole file in one field must not fill the screen; the
    message keeps its start and says how long it was.
    """
    if isinstance(value, int) and not isinstance(value, bool) and value.bit_length() > 128:
        return f"a {int(value.bit_length() * 0.30103) + 1}-digit number"
    text = repr(value)
    if len(text) <= limit:
        return text
    size = len(value) if isinstance(value, str) else len(text)
    return f"{text[:limit]}… ({size} characters)"
