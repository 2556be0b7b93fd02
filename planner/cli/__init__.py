"""The `kplan` command line: one module per command; each parses, calls one job, and prints or writes.

Each command lives in its own module, which registers it on :data:`app` (see :mod:`planner.cli.app`) when
imported. :func:`main` imports only the module of the command named on the command line (all of them for
help, completion or an unknown name), so that a command does not pay for the others' options;
:func:`register` imports them for a caller that wants the whole app.

Exit codes: 0 fine; 1 the recipe or data fail; 2 bad input (one line on stderr naming the key or path
and the fix, no traceback, no file written); 130 interrupted (Ctrl-C).
"""

from __future__ import annotations

import importlib
import os
import sys
import warnings
from collections.abc import Sequence

import typer

from .app import SCENARIOS, UserError, app, err, one_line, user_errors
from .paper_output import PAPER_CHOICES

__all__ = ["COMMANDS", "PAPER_CHOICES", "SCENARIOS", "UserError", "app", "main", "register"]

EXIT_INTERRUPTED = 130  # the shell's convention for a process ended by SIGINT

COMMANDS = (
    "assess",
    "cards",
    "check",
    "demo",
    "design",
    "fit",
    "grade",
    "new",
    "report",
    "series",
    "sheet",
    "stocks",
)


def register(argv: Sequence[str] = ()) -> None:
    """Register on :data:`app` the command ``argv`` names (its first word), or every command.

    Every command is registered when ``argv`` does not start with a command's name (``--help``,
    ``--version``, a misspelt name that typer should answer with the list) or the shell asks for
    completions.
    """
    first = argv[0] if argv else None
    completing = any(k.startswith("_") and k.endswith("_COMPLETE") for k in os.environ)
    names = (first,) if first in COMMANDS and not completing else COMMANDS
    for name in names:
        importlib.import_module(f"{__name__}.{name}")


def _show_warning(message, category, filename, lineno, file=None, line=None) -> None:
    """Show the tool's own warnings as one clean line; drop warnings raised inside libraries.

    A library's DeprecationWarning or RuntimeWarning says nothing the user can act on; the tool's own
    warning classes (defined in :mod:`planner`) say what to check, so they are shown.
    """
    if getattr(category, "__module__", "").startswith("planner."):
        err.print(f"[yellow]warning:[/yellow] {one_line(message)}", highlight=False, soft_wrap=True)


def main() -> None:
    """Console entry point: user errors become one line on stderr and exit code 2; Ctrl-C exits 130."""
    # pydantic scans every installed package's entry points for plugins on its first model (~20 ms on a
    # full environment); the plan schema uses none. Set the variable to an empty value to load them.
    os.environ.setdefault("PYDANTIC_DISABLE_PLUGINS", "__all__")
    register(sys.argv[1:])
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("default")  # each warning once per place it is raised
            warnings.showwarning = _show_warning
            # not standalone: usage errors, Ctrl-C and exit codes are handled below, in one place
            code = app(standalone_mode=False)
    except typer.TyperException as exc:  # click's usage errors (exit 2) and other command-line errors
        ctx = getattr(exc, "ctx", None)
        if type(exc).__name__ == "NoArgsIsHelpError":
            print(exc.format_message())  # bare `kplan`: the help, as before
            sys.exit(exc.exit_code)
        where = f" (see '{ctx.command_path} --help')" if ctx is not None else ""
        _fail(exc.format_message() + where, exc.exit_code)
    except (KeyboardInterrupt, typer.Abort):
        sys.exit(EXIT_INTERRUPTED)
    except Exception as exc:
        # the error classes are imported only now, so that `kplan --help` does not load the numerics
        if isinstance(exc, user_errors()):
            _fail(str(exc), 2)
        if isinstance(exc, OSError):
            # the environment, not the input's content: a file that vanished, a full disk, a closed pipe
            where = f"{exc.filename}: " if exc.filename else ""
            _fail(f"{where}{exc.strerror or exc}", 2)
        raise
    if isinstance(code, int) and code:
        sys.exit(code)


def _fail(message: str, code: int) -> None:
    err.print(f"[red]error:[/red] {one_line(message)}", highlight=False, soft_wrap=True)
    sys.exit(code)


if __name__ == "__main__":  # pragma: no cover
    main()
