"""The `kplan` command line: one module per command; each parses, calls one job, and prints or writes.

Importing this package registers every command on :data:`app` (see :mod:`planner.cli.app`).
"""

from __future__ import annotations

import sys
import warnings

from rich.markup import escape

from . import assess, cards, check, demo, design, fit, new, report, sheet, stocks  # noqa: F401  (register commands)
from .app import SCENARIOS, UserError, _user_errors, app, err
from .paper_output import PAPER_CHOICES

__all__ = ["PAPER_CHOICES", "SCENARIOS", "UserError", "app", "main"]


def main() -> None:
    """Console entry point: user errors become one line on stderr and exit code 2."""
    errors = _user_errors()
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("default")
            app()  # standalone: usage errors already exit 2 with a message
    except errors as exc:
        err.print(f"[red]error:[/red] {escape(str(exc))}", highlight=False, soft_wrap=True)
        sys.exit(2)


if __name__ == "__main__":  # pragma: no cover
    main()
