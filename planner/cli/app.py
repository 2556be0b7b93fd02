"""The typer application, the consoles and the errors the shell raises; every command module registers on ``app``."""

from __future__ import annotations

from importlib import resources

import typer
from rich.console import Console

from ..inputs.plan import PlanError
from ..inputs.recipe import RecipeError

app = typer.Typer(
    name="kplan",
    help="Plan, check and fit absorbance experiments that measure metal–ligand formation constants.",
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
)
out = Console()
err = Console(stderr=True)

SCENARIOS = ("teaching", "stepwise", "proton")

DEMO_SCENARIO = "teaching"


class UserError(Exception):
    """Raised by the shell for bad input that is not a plan or recipe problem."""


def _user_errors() -> tuple[type[BaseException], ...]:
    from ..inference.design_criteria import DesignError
    from ..inference.fit_result import FitError
    from ..model.closed_forms import EquilibriumError
    from ..paper.sheets import RenderError
    from ..uncertainty.catalogue import GlasswareError
    from ..uncertainty.stocks import StockError

    return (PlanError, RecipeError, UserError, EquilibriumError, GlasswareError, StockError, DesignError,
            FitError, RenderError)


def scenario_text(name: str) -> str:
    """Text of a built-in scenario plan."""
    if name not in SCENARIOS:
        raise UserError(f"--scenario: unknown scenario '{name}'; choose one of {', '.join(SCENARIOS)}")
    return resources.files("planner.data").joinpath("scenarios", f"{name}.toml").read_text(encoding="utf-8")


# ----------------------------------------------------------------------------------------------------
