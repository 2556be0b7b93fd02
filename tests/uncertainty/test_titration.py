"""In-cuvette titrations: cumulative dilution, the correlated error budget, and Monte Carlo agreement."""

from __future__ import annotations

import numpy as np
import pytest

from planner.inference.simulate import simulate
from planner.inputs.plan import load_plan, parse_plan_text
from planner.inputs.recipe import RecipeError
from planner.inputs.schedule import Schedule, parse_schedule_csv
from planner.jobs.compile import compile_study, expected_state
from planner.jobs.plan.assess import assess_study
from planner.uncertainty.budget import error_budget
from planner.uncertainty.titration import titration_recipe

from ..conftest import ROOT

EXAMPLE = ROOT / "examples" / "titration-cuvette.toml"


@pytest.fixture(scope="module")
def study():
    return compile_study(load_plan(EXAMPLE))


def _sched(*aliquots):
    return Schedule(tuple(str(k + 1) for k in range(len(aliquots))), np.array(aliquots, dtype=float))


def test_cumulative_dilution_matches_a_hand_calculation(study):
    # derived by hand: 2.000 mL of 0.100 mM Ni2+, then 20, 30 and 50 µL of 5.00 mM ligand:
    # after the third addition the cell holds 2.100 mL with M = 0.100 × 2.000 / 2.100 = 0.095238 mM and
    # L = 5.00 × 0.100 / 2.100 = 0.238095 mM
    rec = titration_recipe(study.bench, _sched(0.020, 0.030, 0.050))
    tot = expected_state(study.model, rec).totals_M
    np.testing.assert_allclose(rec.total_volume_mL, [2.020, 2.050, 2.100])
    np.testing.assert_allclose(tot[2], [0.100e-3 * 2.0 / 2.1, 5.00e-3 * 0.1 / 2.1], rtol=1e-12)
    np.testing.assert_allclose(tot[0], [0.100e-3 * 2.0 / 2.02, 5.00e-3 * 0.02 / 2.02], rtol=1e-12)


def test_delivery_covariance_matches_simulated_additions(study):
    # the cumulative, correlated delivery covariance against simulated titrations with delivery errors only
    rec = titration_recipe(study.bench, _sched(*([0.05] * 10)))
    st = expected_state(study.model, rec)
    b = error_budget(study.bench, study.model, rec, st)
    sim = simulate(
        study.bench, study.model, rec, np.random.default_rng(5), 40_000, photometric=False, stock=False
    )
    emp = np.cov(sim.absorbance.T)
    pred = b.delivery
    assert np.max(np.abs(pred - pred.T)) < 1e-15
    off = ~np.eye(rec.n_tubes, dtype=bool)
    assert np.all(pred[off] > 0)  # correlated along the titration, not independent per point
    # sampling error of a covariance ≈ sqrt((σ_i² σ_j² + σ_ij²) / N) [derived]
    sd = np.sqrt(np.diag(pred))
    tol = 5 * np.sqrt((np.outer(sd, sd) ** 2 + pred**2) / 40_000)
    assert np.all(np.abs(emp - pred) < tol + 1e-3 * np.abs(pred))


def test_break_at_equivalence_for_a_strong_complex():
    # derived: for log β = 9 every added ligand binds until L = M, then the absorbance stops rising: the two
    # straight lines of the titration curve cross at the equivalence ratio L/M = 1
    text = EXAMPLE.read_text(encoding="utf-8").replace("log_beta = 4.00", "log_beta = 9.00")
    text = text.replace("L  = { value = 300.0, rsd = 0.0 }", "L  = { value = 0.0, rsd = 0.0 }")
    text = text.replace('conc = { L = "5.00 mM" }', 'conc = { L = "0.500 mM" }')
    st = compile_study(parse_plan_text(text))
    rec = titration_recipe(st.bench, _sched(*([0.010] * 80)))
    tot = expected_state(st.model, rec).totals_M
    a = expected_state(st.model, rec).absorbance
    ratio = tot[:, 1] / tot[:, 0]
    corrected = a * rec.total_volume_mL / 2.0  # undo the dilution so both branches are straight
    before, after = ratio < 0.7, ratio > 1.3
    p1 = np.polyfit(ratio[before], corrected[before], 1)
    p2 = np.polyfit(ratio[after], corrected[after], 1)
    cross = (p2[1] - p1[1]) / (p1[0] - p2[0])
    assert cross == pytest.approx(1.0, abs=0.02)


def test_cramer_rao_agrees_with_refitted_simulated_titrations(study):
    rec = titration_recipe(study.bench, _sched(*([0.05] * 12)))
    a = assess_study(study, rec, trials=1500, seed=3, model_check=False)
    t = a.params.target
    assert a.mc.sd[t] == pytest.approx(a.cramer_rao.se[t], rel=0.15)


def test_bad_schedules_are_refused(study):
    with pytest.raises(RecipeError, match="more than max_volume"):
        titration_recipe(study.bench, _sched(0.1, 0.1, 0.1, 0.1, 0.1, 0.1, 0.1, 0.1, 0.1, 0.1, 0.1))
    with pytest.raises(RecipeError, match="below the smallest volume"):
        titration_recipe(study.bench, _sched(0.005))
    with pytest.raises(RecipeError, match="more than the"):
        titration_recipe(study.bench, _sched(0.2))
    with pytest.raises(RecipeError, match="a titration schedule starts"):
        parse_schedule_csv("tube,NI,NQ\nT1,1,1\n")
    text = EXAMPLE.read_text(encoding="utf-8").replace('titrant = "NQ"', 'titrant = "XX"')
    from planner.inputs.plan import PlanError

    with pytest.raises(PlanError, match="titration.titrant"):
        parse_plan_text(text)
