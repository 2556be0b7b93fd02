"""Fitting measured readings with the plan's model (`kplan fit`)."""

from __future__ import annotations

import numpy as np
import pytest

from planner.inference.simulate import simulate
from planner.inputs.readings import Readings, parse_readings_csv
from planner.inputs.recipe import RecipeError, make_recipe
from planner.jobs.compile import compile_study
from planner.jobs.measure.fit import fit_readings


def _recipe(plan):
    return make_recipe(
        plan, {"CU": np.full(8, 1.0), "DY": np.array([0.5, 0.75, 1.0, 1.5, 2.0, 2.5, 3.0, 3.5])}
    )


def test_fit_recovers_a_different_truth(teaching_plan):
    # derived: data simulated at log β = 3.6 (the plan guesses 3.3) are fitted back within ~3 SE, and the
    # χ² of many such fits follows χ²(dof) on average (its mean is dof)
    r = _recipe(teaching_plan)
    study = compile_study(teaching_plan)
    model = study.model
    lb = model.log_beta.copy()
    lb[0] = 3.6
    sim = simulate(study.bench, model, r, np.random.default_rng(4), 40, log_beta=lb)
    chis, z = [], []
    for k in range(40):
        f = fit_readings(teaching_plan, Readings(r, sim.absorbance[k]))
        assert f.converged
        z.append((f.estimate[0] - 3.6) / f.se[0])
        chis.append(f.chi2)
    z = np.array(z)
    assert np.all(np.abs(z) < 4.5)
    assert abs(np.mean(z)) < 0.6 and 0.6 < np.std(z) < 1.5
    assert 0.5 * f.dof < np.mean(chis) < 1.6 * f.dof


def test_readings_csv(teaching_plan):
    text = "tube,CU,DY,absorbance\nT1,1.00,0.50,0.301\nT2,1.00,1.00,0.455\nT3,1.00,2.00,0.640\n"
    rd = parse_readings_csv(text, teaching_plan)
    assert rd.recipe.tubes == ("T1", "T2", "T3")
    np.testing.assert_allclose(rd.absorbance, [0.301, 0.455, 0.640])
    with pytest.raises(RecipeError, match="no absorbance column"):
        parse_readings_csv("tube,CU,DY\nT1,1,1\n", teaching_plan)
    with pytest.raises(RecipeError, match="not an absorbance"):
        parse_readings_csv("tube,CU,DY,A\nT1,1,1,\n", teaching_plan)
