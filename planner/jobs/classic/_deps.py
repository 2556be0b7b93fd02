"""Everything the classic series take from the rest of the package, in one place.

The other modules of this subpackage import these names from here and never from the modules below, so
a move elsewhere in the package (``build_model`` to ``planner/jobs/compile.py``, a renamed module in the
model, uncertainty or inference layers) is a change to this file only.
"""

from __future__ import annotations

from dataclasses import replace

from ...inference.precision import free_parameters as _free_parameters
from ...inference.precision import parameter_jacobian, whitening
from ...inputs.plan import Epsilon, Plan, PlanError
from ...inputs.recipe import Recipe, make_recipe, totals_M
from ...inputs.text import plural
from ...model.activity import ActivityWarning
from ...model.compiled import Model, TubeState, predict, tube_ions_M
from ...model.jacobians import absorbance_derivatives
from ...model.optics import bandwidth_factor
from ...uncertainty import budget as _budget
from ...uncertainty.delivery import snap_to_grid
from ..compile import build_model, compile_bench, error_budget, expected_state, make_up_min_mL, plan_devices
from ..plan.assess import Assessment
from ..plan.checks import RANGE_RISK, SECOND_COMPLEX_SHARE, Check, blanks, hand_bias_summary, range_band
from ..plan.even import even_series

__all__ = [
    "ActivityWarning",
    "Assessment",
    "Check",
    "Epsilon",
    "Model",
    "Plan",
    "PlanError",
    "RANGE_RISK",
    "SECOND_COMPLEX_SHARE",
    "Recipe",
    "TubeState",
    "absorbance_derivatives",
    "assess_tubes",
    "bandwidth_factor",
    "blanks",
    "error_budget",
    "error_factors",
    "even_series",
    "expected_state",
    "free_parameters",
    "hand_bias_summary",
    "make_recipe",
    "make_up_min_mL",
    "parameter_jacobian",
    "plan_devices",
    "plan_model",
    "plural",
    "predict",
    "range_band",
    "snap_to_grid",
    "totals_M",
    "tube_ions_M",
    "whitening",
]


def plan_model(plan: Plan) -> Model:
    """The plan's numerical model (the one place the classic series import ``build_model``)."""
    return build_model(plan)


def free_parameters(plan: Plan, model: Model):
    """The parameters a fit of the plan's data estimates (for ``model``, which may be a variant)."""
    return _free_parameters(model, plan.target, blank_offset=plan.design.blank_offset)


def error_factors(plan: Plan, model: Model, recipe: Recipe, state: TubeState, devices, **kw):
    """Per-tube variances and shared-error factors of ``recipe`` (the plan's glassware, ``devices``)."""
    return _budget.error_factors(replace(compile_bench(plan), devices=devices), model, recipe, state, **kw)


def assess_tubes(plan: Plan, recipe: Recipe) -> Assessment:
    """Expected tubes, error budget and checks of ``recipe`` without the precision analysis (the one place
    the classic series import ``assess``)."""
    from ..plan.assess import assess

    return assess(plan, recipe, trials=0, precision=False)
