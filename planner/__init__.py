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
    # errors (one base class: KplanError)
    "KplanError": "inputs.errors",
    "InputError": "inputs.errors",
    "LimitError": "inputs.errors",
    "LocatedError": "inputs.errors",
    "TableError": "inputs.tables",
    "PlanError": "inputs.plan",
    "RecipeError": "inputs.recipe",
    "DesignError": "jobs.plan.design",
    "FitError": "inference.fit_result",
    "EquilibriumError": "model.closed_forms",
    # inputs: the plan and the tables
    "Plan": "inputs.plan",
    "load_plan": "inputs.plan",
    "parse_plan_text": "inputs.plan",
    "Recipe": "inputs.recipe",
    "make_recipe": "inputs.recipe",
    "read_recipe_csv": "inputs.recipe",
    "recipe_to_csv": "inputs.recipe",
    "Readings": "inputs.readings",
    "read_readings_csv": "inputs.readings",
    "read_schedule_csv": "inputs.schedule",
    "read_roster_csv": "inputs.roster",
    "roster_of_count": "inputs.roster",
    "read_key": "inputs.gradebook",
    "read_results": "inputs.gradebook",
    "read_table": "inputs.tables",
    "write_csv": "inputs.tables",
    # the compiled plan
    "Study": "inference.study",
    "compile_study": "jobs.compile",
    "build_model": "jobs.compile",
    "error_budget": "jobs.compile",
    "plan_devices": "jobs.compile",
    "expected_state": "jobs.compile",
    # planning: assess, design, the even series, the next batch
    "Assessment": "jobs.plan.assess",
    "assess": "jobs.plan.assess",
    "assess_study": "jobs.plan.assess",
    "Design": "jobs.plan.design",
    "design": "jobs.plan.design",
    "design_study": "jobs.plan.design",
    "even_series": "jobs.plan.even",
    "NextBatch": "jobs.plan.sequential",
    "next_batch": "jobs.plan.sequential",
    # classic series, titrations, stocks
    "ClassicSeries": "jobs.classic",
    "run_series": "jobs.classic",
    "TitrationDesign": "jobs.titration.titrate",
    "design_titration": "jobs.titration.titrate",
    "StockNeed": "jobs.stocks.needs",
    "stock_needs": "jobs.stocks.needs",
    # after the measurement
    "Fit": "jobs.measure.fit",
    "fit_readings": "jobs.measure.fit",
    "fit_study": "jobs.measure.fit",
    # a class
    "ClassSet": "jobs.classroom.cards",
    "class_set": "jobs.classroom.cards",
    "class_set_study": "jobs.classroom.cards",
    "ClassGrade": "jobs.classroom.grade",
    "grade_class": "jobs.classroom.grade",
    # the numerical core
    "Model": "model.compiled",
    "TubeState": "model.compiled",
    "predict": "model.compiled",
    "Speciation": "model.speciation",
    "speciate": "model.speciation",
    "one_to_one": "model.closed_forms",
    "ErrorBudget": "uncertainty.budget",
    "FitResult": "inference.fit_result",
    "fit_many": "inference.lm",
    # the --json structure of any result
    "to_json": "paper.json_out",
}

if TYPE_CHECKING:  # pragma: no cover - for type checkers and IDEs
    from .inference.fit_result import FitError, FitResult
    from .inference.lm import fit_many
    from .inference.study import Study
    from .inputs.errors import InputError, KplanError, LimitError, LocatedError
    from .inputs.gradebook import read_key, read_results
    from .inputs.plan import Plan, PlanError, load_plan, parse_plan_text
    from .inputs.readings import Readings, read_readings_csv
    from .inputs.recipe import Recipe, RecipeError, make_recipe, read_recipe_csv, recipe_to_csv
    from .inputs.roster import read_roster_csv, roster_of_count
    from .inputs.schedule import read_schedule_csv
    from .inputs.tables import TableError, read_table, write_csv
    from .jobs.classic import ClassicSeries, run_series
    from .jobs.classroom.cards import ClassSet, class_set, class_set_study
    from .jobs.classroom.grade import ClassGrade, grade_class
    from .jobs.compile import build_model, compile_study, error_budget, expected_state, plan_devices
    from .jobs.measure.fit import Fit, fit_readings, fit_study
    from .jobs.plan.assess import Assessment, assess, assess_study
    from .jobs.plan.design import Design, DesignError, design, design_study
    from .jobs.plan.even import even_series
    from .jobs.plan.sequential import NextBatch, next_batch
    from .jobs.stocks.needs import StockNeed, stock_needs
    from .jobs.titration.titrate import TitrationDesign, design_titration
    from .model.closed_forms import EquilibriumError, one_to_one
    from .model.compiled import Model, TubeState, predict
    from .model.speciation import Speciation, speciate
    from .paper.json_out import to_json
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
    "ClassGrade",
    "ClassSet",
    "ClassicSeries",
    "Design",
    "DesignError",
    "EquilibriumError",
    "ErrorBudget",
    "Fit",
    "FitError",
    "FitResult",
    "InputError",
    "KplanError",
    "LimitError",
    "LocatedError",
    "Model",
    "NextBatch",
    "Plan",
    "PlanError",
    "Readings",
    "Recipe",
    "RecipeError",
    "Speciation",
    "StockNeed",
    "Study",
    "TableError",
    "TitrationDesign",
    "TubeState",
    "assess",
    "assess_study",
    "build_model",
    "class_set",
    "class_set_study",
    "compile_study",
    "design",
    "design_study",
    "design_titration",
    "error_budget",
    "even_series",
    "expected_state",
    "fit_many",
    "fit_readings",
    "fit_study",
    "grade_class",
    "load_plan",
    "make_recipe",
    "next_batch",
    "one_to_one",
    "parse_plan_text",
    "plan_devices",
    "predict",
    "read_key",
    "read_readings_csv",
    "read_recipe_csv",
    "read_results",
    "read_roster_csv",
    "read_schedule_csv",
    "read_table",
    "recipe_to_csv",
    "roster_of_count",
    "run_series",
    "speciate",
    "stock_needs",
    "to_json",
    "write_csv",
]
