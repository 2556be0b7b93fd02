"""What the commands share: the kinds of option (flag, text, path, seed, count: one way each to declare
them), the arguments and options several commands take (one definition each), ``--at`` parsing, option
limits, reading a recipe or a titration schedule, and the Monte-Carlo progress bar."""

from __future__ import annotations

import math
from pathlib import Path
from typing import Annotated

import typer

from ..inputs.choices import PAPERS
from ..inputs.limits import MAX_TRIALS as MAX_TRIALS  # the limits are defined once, in inputs/limits
from ..inputs.limits import MAX_TUBES as MAX_TUBES
from .app import UserError, err


def _option(metavar: str, help: str, name: str | None = None, **bounds):
    """An option shown in ``--help`` as ``name METAVAR`` (typer's name from the parameter without one)."""
    return typer.Option(*((name,) if name else ()), help=help, metavar=metavar, **bounds)


def flag_option(help: str, name: str | None = None):
    """An on/off option (``--json``, ``--html``): nothing after it in ``--help``."""
    return _option("", help, name)


def text_option(help: str, name: str | None = None):
    """An option that takes a word or a quantity with its unit (a choice, a concentration, a reagent)."""
    return _option("TEXT", help, name)


def path_option(help: str, name: str | None = None):
    """An option that takes a file or a folder (``--out``, ``--after``, ``--recipe``)."""
    return _option("PATH", help, name)


def seed_option(help: str):
    """A random seed (0 or more)."""
    return _option("INTEGER", help, min=0)


def trials_option(help: str):
    """The number of Monte-Carlo experiments (0 to the limit of :mod:`planner.inputs.limits`)."""
    return _option("INTEGER", help, min=0, max=MAX_TRIALS)


def count_option(help: str, limit: int, *, hidden: bool = False):
    """A whole-number option from 1 to ``limit`` (a bound from :mod:`planner.inputs.limits`)."""
    return _option("INTEGER", help, min=1, max=limit, hidden=hidden)


PlanFile = Annotated[Path, typer.Argument(help="plan file (TOML)")]
RecipeFile = Annotated[Path, typer.Argument(help="recipe CSV")]
JsonFlag = Annotated[bool, flag_option("print one JSON object instead of tables", "--json")]
HtmlFlag = Annotated[bool, flag_option("write HTML instead of PDF", "--html")]
PaperSize = Annotated[str, text_option(f"paper size: {' | '.join(PAPERS)}")]
McSeed = Annotated[int, seed_option("seed of the Monte-Carlo random numbers")]


LOG_BETA_RANGE = (-50.0, 60.0)  # the plan's bound on log_beta


def parse_at(items: list[str], species: list[str] | None = None) -> dict[str, float]:
    """'ML=4.3' pairs from repeated --at options (names checked against ``species`` when given)."""
    from ..inputs.names import unknown_name

    out = {}
    for item in items:
        name, sep, value = item.partition("=")
        try:
            if not sep:
                raise ValueError
            x = float(value)
        except ValueError:
            raise UserError(f"--at {item}: write NAME=LOGBETA, e.g. --at ML=4.3") from None
        lo, hi = LOG_BETA_RANGE
        if not (math.isfinite(x) and lo <= x <= hi):
            raise UserError(f"--at {item}: log β must be a finite number between {lo:g} and {hi:g}")
        if species is not None and name.strip() not in species:
            raise UserError(f"--at {item}: {unknown_name('species', name.strip(), species)}")
        out[name.strip()] = x
    return out


PROGRESS_WORK = 40_000  # simulated tube readings above which a Monte Carlo takes about a second or more


def with_progress(run, trials: int, quiet: bool, tubes: int = 8):
    """Run ``run(progress)`` with a rich progress bar when the Monte Carlo is long (trials × tubes)."""
    if quiet or trials * max(tubes, 1) < PROGRESS_WORK or not err.is_terminal:
        return run(None)
    from rich.progress import Progress

    with Progress(console=err, transient=True) as bar:
        task = bar.add_task("Monte Carlo", total=trials)
        return run(lambda done, total: bar.update(task, completed=done))


def read_points(path, plan, study, *, readings: bool = False):
    """The recipe (or readings) in PATH for ``plan``.

    See :func:`planner.jobs.titration.titrate.read_points`.
    """
    from ..jobs.titration.titrate import read_points as _read

    return _read(path, plan, study, readings=readings)
