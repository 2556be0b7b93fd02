"""Every ``--json`` structure, made in one place from the jobs' result objects.

The jobs return frozen result objects (:class:`~planner.jobs.plan.assess.Assessment`,
:class:`~planner.jobs.plan.design.Design`, :class:`~planner.jobs.measure.fit.Fit`, …); the printed sheets
and the command line read their attributes. JSON is made only here, at the edge: :func:`to_json` turns any
result into the structure the README documents (and ``kplan … --json`` prints, ``design --out`` writes),
and :func:`json_safe` makes any value plain JSON (numpy values made Python ones, NaN and ±inf made null).
One function a shape; a shape used inside another (a check, a stock's preparation) is built by its own
function and called. The shapes live in sibling modules by subject (:mod:`planner.paper.json_plan`,
:mod:`planner.paper.json_measure`, :mod:`planner.paper.json_stocks`, :mod:`planner.paper.json_class`,
:mod:`planner.paper.json_core`, built from :mod:`planner.paper.json_fields`); this module re-exports them.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Any

import numpy as np

from .json_class import (
    card_json,
    class_grade_json,
    class_set_json,
    class_stock_json,
    diagnosis_json,
    explanation_json,
    pooled_parameter_json,
    spread_json,
    student_json,
)
from .json_core import (
    approximate_design_json,
    clash_json,
    exact_design_json,
    fit_result_json,
    hazards_json,
    plan_reagent_json,
    sensitivity_json,
    speciation_json,
)
from .json_measure import fit_head as fit_head
from .json_measure import fit_json, spectra_fit_json
from .json_measure import fit_parameter_rows as fit_parameter_rows
from .json_plan import alternative_json as alternative_json
from .json_plan import (
    assessment_json,
    change_json,
    check_json,
    classic_series_json,
    design_json,
    detection_json,
    factor_outlook_json,
    limits_json,
    model_check_json,
    next_batch_json,
    parameter_json,
    rival_json,
    share_json,
    spectra_detection_json,
    spectra_facts_json,
    titration_json,
)
from .json_plan import sequential_json as sequential_json
from .json_plan import tube_rows as tube_rows
from .json_stocks import (
    dilution_step_json,
    glassware_json,
    mass_basis_json,
    preparation_json,
    solute_json,
    stock_need_json,
)

__all__ = ["json_safe", "to_json"]


def json_safe(obj: Any) -> Any:
    """``obj`` as plain JSON values: dicts, lists, str, int, float, bool and None.

    Numpy scalars and arrays become Python values, every NaN or ±inf becomes None (JSON has neither; a
    strict reader refuses the bare tokens Python's json would write), and a result object of the jobs
    becomes its documented structure (:func:`to_json`).
    """
    if obj is None or isinstance(obj, str | bool | int):
        return obj
    if isinstance(obj, dict):
        return {str(k): json_safe(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [json_safe(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return json_safe(obj.tolist())
    if isinstance(obj, np.generic):
        obj = obj.item()
    if isinstance(obj, float):
        return obj if math.isfinite(obj) else None
    shape = _shape_of(obj)
    if shape is not None:
        return json_safe(shape(obj))
    return obj


def to_json(result: Any) -> dict:
    """The documented JSON structure of a job's result (plain values: ready for ``json.dumps``).

    Raises
    ------
    TypeError
        For an object that has no JSON structure.
    """
    shape = _shape_of(result)
    if shape is None:
        raise TypeError(f"{type(result).__name__} has no JSON structure")
    return json_safe(shape(result))


# --------------------------------------------------------------------------------------------------
# a command's whole structure, made plain here
# --------------------------------------------------------------------------------------------------
def stocks_json(title: str, needs) -> dict:
    """``kplan stocks --json``."""
    return json_safe({"title": title, "stocks": [stock_need_json(n) for n in needs]})


def cards_json(cs, stocks, files) -> dict:
    """``kplan cards --json``: the class set, its stock list and the files written."""
    out = class_set_json(cs)
    out["stocks"] = [class_stock_json(s) for s in stocks]
    out["files"] = [str(f) for f in files]
    return json_safe(out)


# --------------------------------------------------------------------------------------------------
# which shape a result has (by its class, named so that nothing is imported until a shape is asked for)
# --------------------------------------------------------------------------------------------------
SHAPES: dict[str, Callable[[Any], dict]] = {
    "planner.jobs.plan.checks.Check": check_json,
    "planner.jobs.plan.assess.ParameterRow": parameter_json,
    "planner.jobs.plan.assess.Assessment": assessment_json,
    "planner.jobs.plan.limits.Share": share_json,
    "planner.jobs.plan.limits.Change": change_json,
    "planner.jobs.plan.limits.Limits": limits_json,
    "planner.inference.discrimination.Detection": detection_json,
    "planner.jobs.spectra.detection.SpectraDetection": spectra_detection_json,
    "planner.jobs.plan.model_check.ModelCheck": model_check_json,
    "planner.jobs.plan.design.Design": design_json,
    "planner.jobs.titration.titrate.TitrationDesign": titration_json,
    "planner.jobs.plan.sequential.NextBatch": next_batch_json,
    "planner.jobs.spectra.facts.SpectraFacts": spectra_facts_json,
    "planner.jobs.spectra.facts.FactorOutlook": factor_outlook_json,
    "planner.jobs.classic.common.ClassicSeries": classic_series_json,
    "planner.jobs.classic.rivals.RivalFit": rival_json,
    "planner.jobs.measure.fit.Fit": fit_json,
    "planner.jobs.spectra.fit.SpectraFit": spectra_fit_json,
    "planner.uncertainty.catalogue.GlasswareItem": glassware_json,
    "planner.uncertainty.stocks.DilutionStep": dilution_step_json,
    "planner.uncertainty.stocks.StockPreparation": preparation_json,
    "planner.jobs.stocks.needs.Solute": solute_json,
    "planner.jobs.stocks.mass_basis.MassBasis": mass_basis_json,
    "planner.jobs.stocks.needs.StockNeed": stock_need_json,
    "planner.jobs.classroom._series.Spread": spread_json,
    "planner.jobs.classroom.cards.Card": card_json,
    "planner.jobs.classroom.cards.ClassSet": class_set_json,
    "planner.jobs.classroom.stock_list.ClassStock": class_stock_json,
    "planner.jobs.classroom.grade.StudentGrade": student_json,
    "planner.jobs.classroom.grade_text.PooledParameter": pooled_parameter_json,
    "planner.jobs.classroom.grade.ClassGrade": class_grade_json,
    "planner.jobs.classroom.mixup.Explanation": explanation_json,
    "planner.jobs.classroom.mixup.Diagnosis": diagnosis_json,
    "planner.inference.fit_result.FitResult": fit_result_json,
    "planner.model.speciation.Speciation": speciation_json,
    "planner.model.sensitivities.Sensitivity": sensitivity_json,
    "planner.inference.approximate.ApproximateDesign": approximate_design_json,
    "planner.inference.exchange.ExactDesign": exact_design_json,
    "planner.paper.safety.ReagentHazards": hazards_json,
    "planner.paper.safety.PlanReagent": plan_reagent_json,
    "planner.paper.safety.Clash": clash_json,
}
"""Result class (module.qualified name) → the function that builds its JSON."""


def _shape_of(obj: Any) -> Callable[[Any], dict] | None:
    for cls in type(obj).__mro__:
        shape = SHAPES.get(f"{cls.__module__}.{cls.__qualname__}")
        if shape is not None:
            return shape
    return None
