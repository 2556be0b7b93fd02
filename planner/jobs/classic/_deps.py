"""Everything the classic series take from the rest of the package, in one place.

The other modules of this subpackage import these names from here and never from the modules below, so
a move elsewhere in the package (``build_model`` to ``planner/jobs/compile.py``, a renamed module in the
model, uncertainty or inference layers) is a change to this file only.
"""

from __future__ import annotations

from ...inference.precision import free_parameters, whitening
from ...inputs.plan import Epsilon, Plan, PlanError
from ...inputs.recipe import Recipe, make_recipe, totals_M
from ...model.activity import ActivityWarning
from ...model.compiled import Model, TubeState, predict, tube_ions_M
from ...model.jacobians import absorbance_derivatives
from ...model.optics import bandwidth_factor
from ...uncertainty.budget import error_budget, error_factors, plan_devices
from ..assess import Assessment
from ..checks import Check
from ..series import even_series

__all__ = [
    "ActivityWarning", "Assessment", "Check", "Epsilon", "Model", "Plan", "PlanError", "Recipe", "TubeState", "absorbance_derivatives",
    "assess_tubes", "bandwidth_factor", "error_budget", "error_factors", "even_series", "free_parameters",
    "make_recipe", "plan_devices", "plan_model", "predict", "totals_M", "tube_ions_M", "whitening",
]


def plan_model(plan: Plan) -> Model:
    """The plan's numerical model (the one place the classic series import ``build_model``)."""
    from ...model.compiled import build_model

    return build_model(plan)


def assess_tubes(plan: Plan, recipe: Recipe) -> Assessment:
    """Expected tubes, error budget and checks of ``recipe`` without the precision analysis (the one place
    the classic series import ``assess``)."""
    from ..assess import assess

    return assess(plan, recipe, trials=0, precision=False)
