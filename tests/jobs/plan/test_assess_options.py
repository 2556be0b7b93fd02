"""The keyword options every assessment shares: their defaults, and a misspelt or out-of-range one refused
as a keyword parameter would refuse it."""

from __future__ import annotations

import pytest

from planner.inputs.errors import KplanError
from planner.jobs.compile import compile_study
from planner.jobs.plan.assess import assess, assess_study
from planner.jobs.plan.assess_options import ASSESS_DEFAULTS, STUDY_DEFAULTS, with_defaults
from planner.jobs.plan.even import even_series
from planner.jobs.spectra.assess import SPECTRA_DEFAULTS, assess_spectra

from ..spectra.helpers import even_recipe, example


def test_defaults_fill_what_the_caller_left_out():
    run = with_defaults({"seed": 7}, STUDY_DEFAULTS)
    assert run["seed"] == 7
    assert run["trials"] == 2000 and run["at"] is None and run["precision"] and not run["suggest"]
    assert set(ASSESS_DEFAULTS) < set(STUDY_DEFAULTS) and set(ASSESS_DEFAULTS) < set(SPECTRA_DEFAULTS)


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
