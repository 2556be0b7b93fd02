"""Classic hand-made series (Job's method, complete-conversion calibration, mole-ratio) and the wavelength
survey, planned on the plan's glassware and judged by the same model and error budget as every other job."""

from __future__ import annotations

from ...inputs.choices import SERIES_METHOD_OPTIONS, SERIES_METHODS
from ...inputs.limits import MAX_REPLICATES, MAX_TUBES, check_count
from ._deps import Plan, plan_model
from .calibration import conversion_tube
from .common import ClassicSeries, SeriesInfeasible, infeasible
from .job import continuous_variation
from .mole_ratio import mole_ratio_series
from .survey import wavelength_survey

# the methods ``kplan series --method`` offers and their options, defined once in planner.inputs.choices
METHODS = SERIES_METHODS
METHOD_OPTIONS = SERIES_METHOD_OPTIONS

__all__ = [
    "METHODS",
    "METHOD_OPTIONS",
    "ClassicSeries",
    "SeriesInfeasible",
    "continuous_variation",
    "conversion_tube",
    "mole_ratio_series",
    "plan_model",
    "run_series",
    "wavelength_survey",
]


def run_series(
    plan: Plan,
    method: str,
    *,
    points: int | None = None,
    total_M: float | None = None,
    tubes: int | None = None,
    limiting: str | None = None,
    excess_M: float | None = None,
    vary: str | None = None,
    max_ratio: float | None = None,
    recipe=None,
) -> ClassicSeries:
    """Plan and judge the classic series ``method`` (one of :data:`METHODS`).

    ``points`` (tubes of a Job or mole-ratio series) and ``tubes`` (the calibration series' replicate
    tubes) are checked against :data:`planner.inputs.limits.MAX_TUBES` and ``MAX_REPLICATES``. A series the
    stocks and glassware cannot make at the method's defaults comes back with no tubes and a failing
    "feasible" check saying what would (not as an input error: the plan is not wrong).
    """
    if points is not None:
        points = check_count(points, "points", MAX_TUBES)
    if tubes is not None:
        tubes = check_count(tubes, "tubes", MAX_REPLICATES)
    try:
        return _run(plan, method, points, total_M, tubes, limiting, excess_M, vary, max_ratio, recipe)
    except SeriesInfeasible as exc:
        from .calibration import QUESTION as Q_CAL
        from .job import QUESTION as Q_JOB
        from .mole_ratio import QUESTION as Q_MR
        from .survey import QUESTION as Q_SURVEY

        q = {"job": Q_JOB, "calibration": Q_CAL, "mole-ratio": Q_MR, "survey": Q_SURVEY}[method]
        return infeasible(method, plan, q, exc)


def _run(plan, method, points, total_M, tubes, limiting, excess_M, vary, max_ratio, recipe) -> ClassicSeries:
    if method == "job":
        return continuous_variation(plan, points=points, total_M=total_M)
    if method == "calibration":
        return conversion_tube(plan, limiting=limiting, total_M=total_M, excess_M=excess_M, tubes=tubes or 1)
    if method == "mole-ratio":
        return mole_ratio_series(plan, vary=vary or "L", points=points, total_M=total_M, max_ratio=max_ratio)
    if method == "survey":
        return wavelength_survey(plan, recipe)
    raise ValueError(f"unknown method {method!r}")
