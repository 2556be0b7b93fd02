"""The tool's errors: one base class, one subclass per kind of problem a user can hit.

Every error raised for a user carries a message that names what was wrong (a plan key path, a file line,
a parameter) and how to fix it, in one line; the command line prints it and exits 2. Library callers
catch :class:`KplanError` (it is also a ``ValueError``, so older ``except ValueError`` code still works).
Messages below the command line name parameters and plan keys, never command-line flags.
"""

from __future__ import annotations


class KplanError(ValueError):
    """Base of every error kplan raises for input it cannot use or a request it cannot meet."""


class InputError(KplanError):
    """Input that cannot be used: a plan, a table, a unit, a path, a parameter out of its range."""


class LimitError(InputError):
    """A request beyond the tool's stated limits (rows, tubes, trials, students, file size)."""


class LocatedError(InputError):
    """Input that cannot be used, with where it is: ``key`` (a plan key path, a file's line and column,
    a path; "" for the whole input) and ``message`` (what was wrong and the fix)."""

    def __init__(self, key: str, message: str):
        self.key = key
        self.message = message
        super().__init__(f"{key}: {message}" if key else message)


__all__ = ["InputError", "KplanError", "LimitError", "LocatedError"]
