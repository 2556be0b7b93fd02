"""kplan: plan, check and fit absorbance experiments that measure metal–ligand formation constants.

The public API, in the order data flows: plan → model → assessment / design.

>>> from planner import load_plan, even_series, assess, design
>>> plan = load_plan("plan.toml")                      # doctest: +SKIP
>>> a = assess(plan, even_series(plan), trials=500)    # doctest: +SKIP
>>> d = design(plan)                                   # doctest: +SKIP
"""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING

# Names are imported on first use (PEP 562), so that `kplan --help` and the light commands do not pay for
# the whole numerical stack at start-up; `from planner import assess` works as usual.
_WHERE = {
    "FitResult": "inference.fit_result",
    "fit_many": "inference.lm",
    "Plan": "inputs.plan",
    "PlanError": "inputs.plan",
    "load_plan": "inputs.plan",
    "parse_plan_text": "inputs.plan",
    "Recipe": "inputs.recipe",
    "RecipeError": "inputs.recipe",
    "make_recipe": "inputs.recipe",
    "read_recipe_csv": "inputs.recipe",
    "recipe_to_csv": "inputs.recipe",
    "Assessment": "jobs.plan.assess",
    "assess": "jobs.plan.assess",
    "build_model": "jobs.compile",
    "error_budget": "jobs.compile",
    "plan_devices": "jobs.compile",
    "Design": "jobs.plan.design",
    "DesignError": "jobs.plan.design",
    "design": "jobs.plan.design",
    "even_series": "jobs.plan.even",
    "EquilibriumError": "model.closed_forms",
    "one_to_one": "model.closed_forms",
    "Model": "model.compiled",
    "TubeState": "model.compiled",
    "predict": "model.compiled",
    "Speciation": "model.speciation",
    "speciate": "model.speciation",
    "ErrorBudget": "uncertainty.budget",
}

if TYPE_CHECKING:  # pragma: no cover - for type checkers and IDEs
    from .inference.fit_result import FitResult
    from .inference.lm import fit_many
    from .inputs.plan import Plan, PlanError, load_plan, parse_plan_text
    from .inputs.recipe import Recipe, RecipeError, make_recipe, read_recipe_csv, recipe_to_csv
    from .jobs.compile import build_model, error_budget, plan_devices
    from .jobs.plan.assess import Assessment, assess
    from .jobs.plan.design import Design, DesignError, design
    from .jobs.plan.even import even_series
    from .model.closed_forms import EquilibriumError, one_to_one
    from .model.compiled import Model, TubeState, predict
    from .model.speciation import Speciation, speciate
    from .uncertainty.budget import ErrorBudget


def __getattr__(name: str):
    if name in _WHERE:
        value = getattr(importlib.import_module(f".{_WHERE[name]}", __name__), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'planner' has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(_WHERE))


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
