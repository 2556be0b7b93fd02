"""The keyword options the assessments and the designs share: their defaults, and a misspelt or
out-of-range one refused as a keyword parameter would refuse it."""

from __future__ import annotations

import pytest

from planner.inputs.errors import KplanError
from planner.jobs.compile import compile_study
from planner.jobs.plan.assess import assess, assess_study
from planner.jobs.plan.design import design_request, design_study
from planner.jobs.plan.even import even_series
from planner.jobs.plan.options import (
    ASSESS_DEFAULTS,
    DESIGN_DEFAULTS,
    STUDY_ASSESS_DEFAULTS,
    STUDY_DESIGN_DEFAULTS,
    with_defaults,
)
from planner.jobs.spectra.assess import SPECTRA_ASSESS_DEFAULTS, assess_spectra
from planner.jobs.spectra.design import design_spectra

from ..spectra.helpers import even_recipe, example


def test_defaults_fill_what_the_caller_left_out():
    run = with_defaults({"seed": 7}, STUDY_ASSESS_DEFAULTS)
    assert run["seed"] == 7
    assert run["trials"] == 2000 and run["at"] is None and run["precision"] and not run["suggest"]
    assert set(ASSESS_DEFAULTS) < set(STUDY_ASSESS_DEFAULTS) and set(ASSESS_DEFAULTS) < set(
        SPECTRA_ASSESS_DEFAULTS
    )


def test_a_misspelt_keyword_is_a_type_error(teaching_plan):
    rec = even_series(teaching_plan)
    with pytest.raises(TypeError, match="'trails'"):
        assess(teaching_plan, rec, trails=0)  # type: ignore[call-arg]
    with pytest.raises(TypeError, match="'factors'"):  # whole spectra only
        assess_study(compile_study(teaching_plan), rec, trials=0, factors=False)  # type: ignore[call-arg]
    plan, study, srec = example(5.0)
    with pytest.raises(TypeError, match="'suggest'"):  # one wavelength only
        assess_spectra(study, srec, trials=0, suggest=True)  # type: ignore[call-arg]


@pytest.mark.parametrize("trials", [-1, 2.5, True])
def test_trials_out_of_range_are_refused_by_both(teaching_plan, trials):
    with pytest.raises(KplanError, match="trials"):
        assess(teaching_plan, even_series(teaching_plan), trials=trials)
    plan, study, _ = example(5.0)
    with pytest.raises(KplanError, match="trials"):
        assess_spectra(study, even_recipe(plan), trials=trials)


def test_a_design_takes_the_plans_keys_unless_told(teaching_plan):
    study = compile_study(teaching_plan)
    assert design_request(study, DESIGN_DEFAULTS) == (study.tubes, study.criterion, study.robust)
    told = with_defaults({"tubes": 5, "criterion": "all", "robust": not study.robust}, STUDY_DESIGN_DEFAULTS)
    assert design_request(study, told) == (5, "all", not study.robust)
    assert set(DESIGN_DEFAULTS) < set(STUDY_DESIGN_DEFAULTS)


def test_both_designs_refuse_a_misspelt_keyword_or_a_bad_request(teaching_plan):
    with pytest.raises(TypeError, match="'tube'"):
        design_study(compile_study(teaching_plan), tube=4)  # type: ignore[call-arg]
    plan, study, _ = example(5.0)
    with pytest.raises(TypeError, match="'volumetric'"):  # one wavelength only
        design_spectra(study, volumetric=False)  # type: ignore[call-arg]
    with pytest.raises(KplanError, match="tubes"):
        design_spectra(study, tubes=-3)
    with pytest.raises(KplanError, match="criterion 'best'"):
        design_spectra(study, criterion="best")


@pytest.mark.parametrize(
    "func,defaults,first",
    [
        (assess, STUDY_ASSESS_DEFAULTS, ["plan", "recipe"]),
        (assess_study, STUDY_ASSESS_DEFAULTS, ["study", "recipe"]),
        (design_study, STUDY_DESIGN_DEFAULTS, ["study"]),
        (assess_spectra, SPECTRA_ASSESS_DEFAULTS, ["study", "recipe"]),
        (design_spectra, DESIGN_DEFAULTS, ["study"]),
    ],
)
def test_help_and_completion_show_every_keyword_with_its_default(func, defaults, first):
    """help(), inspect.signature and a notebook's completion list the keywords, not ``**options``."""
    import inspect

    params = inspect.signature(func).parameters
    assert list(params)[: len(first)] == first and "options" not in params
    shown = {k: p.default for k, p in params.items() if p.kind is inspect.Parameter.KEYWORD_ONLY}
    assert shown == dict(defaults)
    assert params["seed"].annotation == "int"
