"""kplan: plan, check and fit absorbance experiments that measure metal–ligand formation constants.

The public API, in the order data flows: plan → model → assessment / design.

>>> from planner import load_plan, even_series, assess, design
>>> plan = load_plan("plan.toml")                      # doctest: +SKIP
>>> a = assess(plan, even_series(plan), trials=500)    # doctest: +SKIP
>>> d = design(plan)                                   # doctest: +SKIP
"""

from .inference.fit_result import FitResult
from .inference.lm import fit_many
from .inputs.plan import Plan, PlanError, load_plan, parse_plan_text
from .inputs.recipe import Recipe, RecipeError, make_recipe, read_recipe_csv, recipe_to_csv
from .jobs.assess import Assessment, assess
from .jobs.compile import build_model, error_budget, plan_devices
from .jobs.design import Design, DesignError, design
from .jobs.series import even_series
from .model.closed_forms import EquilibriumError, one_to_one
from .model.compiled import Model, TubeState, predict
from .model.speciation import Speciation, speciate
from .uncertainty.budget import ErrorBudget

__version__ = "0.1.0"

__all__ = [
    "Assessment",
    "Design",
    "DesignError",
    "EquilibriumError",
    "ErrorBudget",
    "FitResult",
    "Model",
    "Plan",
    "PlanError",
    "Recipe",
    "RecipeError",
    "Speciation",
    "TubeState",
    "assess",
    "build_model",
    "design",
    "error_budget",
    "even_series",
    "fit_many",
    "load_plan",
    "make_recipe",
    "one_to_one",
    "parse_plan_text",
    "plan_devices",
    "predict",
    "read_recipe_csv",
    "recipe_to_csv",
    "speciate",
]
