"""The typer application, the consoles and the errors the shell raises; every command module registers on
``app``."""

from __future__ import annotations

import json
import os
from importlib import resources
from pathlib import Path
from typing import Any

import typer
import typer.core
from rich.console import Console
from rich.markup import escape

from ..inputs.errors import InputError
from ..inputs.text import visible

_TYPE_NAMES = {"<path>": "PATH", "<int>": "INTEGER", "<str>": "TEXT", "<float>": "FLOAT", "<bool>": ""}


def _plain_type_name(param) -> None:
    """Help shows a parameter's value type the usual way (PATH, INTEGER, TEXT; nothing for a flag) instead
    of typer's ``<path>``, ``<int>``, ``<bool>``. Set on our own parameter objects (typer has no setting
    for it); no typer class is changed."""
    shown = param.display_type_rich

    def display_type_rich(ctx):
        label = shown(ctx)
        return _TYPE_NAMES.get(label, label) if isinstance(label, str) else label

    param.display_type_rich = display_type_rich


class _Commands(typer.core.TyperGroup):
    """The command group: each command it hands out shows plain value types in its help."""

    def get_command(self, ctx, cmd_name):
        cmd = super().get_command(ctx, cmd_name)
        if cmd is not None and not getattr(cmd, "_kplan_plain", False):
            for param in cmd.get_params(ctx):
                _plain_type_name(param)
            cmd._kplan_plain = True
        return cmd

    def get_params(self, ctx):
        params = super().get_params(ctx)
        for param in params:  # the group's own options (--version, completion, --help)
            if not getattr(param, "_kplan_plain", False):
                _plain_type_name(param)
                param._kplan_plain = True
        return params

    def list_commands(self, ctx):
        # alphabetical, whatever order the command modules were imported in (see planner.cli.register)
        return sorted(super().list_commands(ctx))


app = typer.Typer(
    name="kplan",
    cls=_Commands,
    help="Plan, check and fit absorbance experiments that measure metal–ligand formation constants.",
    no_args_is_help=True,
    add_completion=True,  # --install-completion / --show-completion for bash, zsh, fish, PowerShell
    pretty_exceptions_enable=False,
)

PIPED_WIDTH = 160  # tables written to a file or a pipe: wide enough that names are not cut


def _console(stderr: bool = False) -> Console:
    # emoji codes (":warning:") in a title would otherwise be replaced by pictures; a pipe or a file
    # gets a wide table instead of rich's 80 columns, unless COLUMNS says otherwise
    c = Console(emoji=False, stderr=stderr)
    if not c.is_terminal and "COLUMNS" not in os.environ:
        c = Console(emoji=False, stderr=stderr, width=PIPED_WIDTH)
    return c


out = _console()
err = _console(stderr=True)


def _version(value: bool) -> None:
    if value:
        from importlib.metadata import PackageNotFoundError, version

        try:
            v = version("kplan")
        except PackageNotFoundError:  # pragma: no cover - running from a source tree without install
            from .. import __version__ as v
        print(f"kplan {v}")
        raise typer.Exit()


@app.callback()
def _root(
    show_version: bool = typer.Option(
        False, "--version", help="print the version and exit", is_eager=True, callback=_version
    ),
) -> None:
    """Plan, check and fit absorbance experiments that measure metal–ligand formation constants."""


SCENARIOS = ("teaching", "stepwise", "proton", "spectra")
SCENARIO_FILES = {
    "spectra": ("spectra-ml-ml2-epsilon.csv",)
}  # files a scenario's plan names, written beside it

DEMO_SCENARIO = "teaching"


class UserError(InputError):
    """Raised by the shell for bad input that is not a plan or recipe problem."""


def user_errors() -> tuple[type[BaseException], ...]:
    # every error the tool raises for its user derives from KplanError (planner.inputs.errors, which
    # imports nothing heavy, so `kplan --help` stays fast)
    from ..inputs.errors import KplanError

    return (KplanError,)


def safe_text(text: object) -> str:
    """User-supplied text made safe to pass to a rich console as markup: shown as written.

    Control and bidirectional-formatting characters become visible ``\\uXXXX`` escapes (they could
    recolour the terminal, open links or reverse a line) and rich markup (``[bold]``, ``[link=...]``) is
    escaped, so a title like ``"x [/bold] y"`` prints as is instead of failing or styling the output.
    Every user-supplied string a command prints goes through here.
    """
    return escape(visible(text))


def one_line(text: object) -> str:
    """:func:`safe_text` of a message, on one line (an error is always exactly one line on stderr)."""
    return safe_text(" ".join(str(text).replace("\r\n", "\n").split("\n")))


def dump_json(obj: Any) -> str:
    """Strict JSON text (no NaN/Infinity, non-ASCII escaped), indented, of a job's result (its documented
    structure, :func:`planner.paper.json_out.to_json`) or of plain values."""
    from ..paper.json_out import json_safe

    return json.dumps(json_safe(obj), indent=2, allow_nan=False)


def scenario_text(name: str) -> str:
    """Text of a built-in scenario plan."""
    if name not in SCENARIOS:
        raise UserError(f"--scenario: unknown scenario '{name}'; choose one of {', '.join(SCENARIOS)}")
    return resources.files("planner.data").joinpath("scenarios", f"{name}.toml").read_text(encoding="utf-8")


def scenario_files(name: str) -> dict[str, str]:
    """The files a built-in scenario's plan names (e.g. its ε table), by file name, as text."""
    folder = resources.files("planner.data").joinpath("scenarios")
    return {f: folder.joinpath(f).read_text(encoding="utf-8") for f in SCENARIO_FILES.get(name, ())}


def parse_scenario(name: str, text: str | None = None):
    """A built-in scenario's plan, validated (its named files read from a temporary folder)."""
    import tempfile

    from ..inputs.plan import parse_plan_text

    text = scenario_text(name) if text is None else text
    with tempfile.TemporaryDirectory() as tmp:
        for fname, body in scenario_files(name).items():
            Path(tmp, fname).write_text(body, encoding="utf-8")
        return parse_plan_text(text, source=f"scenario {name}", base_dir=tmp)


# ----------------------------------------------------------------------------------------------------
