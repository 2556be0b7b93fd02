"""The next tubes from the readings so far (kplan design --after): the experiment continues."""

from __future__ import annotations

import numpy as np
import pytest

from planner.inference.simulate import simulate
from planner.inputs.plan import parse_plan_text
from planner.inputs.readings import Readings, parse_readings_csv, readings_to_csv
from planner.inputs.recipe import concat_recipes, make_recipe
from planner.jobs.compile import compile_study
from planner.jobs.measure.fit import fit_study
from planner.jobs.plan.assess import assess_study
from planner.jobs.plan.candidates import Candidates, information_rows, rows_with_prior
from planner.jobs.plan.design import design_study
from planner.jobs.plan.even import even_series_for
from planner.jobs.plan.sequential import next_batch, next_labels, posterior_se

from ...conftest import scenario_text


def _plan(goal: float = 0.05, log_beta: float | None = None):
    text = scenario_text("teaching").replace("goal_se = 0.05", f"goal_se = {goal}")
    if log_beta is not None:
        text = text.replace("log_beta = 3.30", f"log_beta = {log_beta:.2f}")
    return parse_plan_text(text)


def _study(goal: float = 0.05, log_beta: float | None = None):
    return compile_study(_plan(goal, log_beta))


def _read(study, recipe, log_beta_ml: float, rng):
    lb = study.model.log_beta.copy()
    lb[0] = log_beta_ml
    return simulate(study.bench, study.model, recipe, rng, 1, log_beta=lb).absorbance[0]


def test_information_in_hand_is_added_to_the_prior():
    # derived: the information of tubes measured before is Σ FᵀF of their whitened rows, in the same
    # parameters and nuisance factors as the candidates
    st = _study()
    first = even_series_for(st, 5)
    cand = Candidates(first, ("CU", "DY"), first.n_tubes, 0.05)
    nodes = st.nodes(False)
    F, M0, _, _ = information_rows(st, cand, nodes, "target")
    _, M0p, _, _ = rows_with_prior(st, cand, first, nodes, "target")
    Fr = F[0, :, 0, :]
    np.testing.assert_allclose(M0p[0], M0 + Fr.T @ Fr, rtol=1e-12, atol=1e-12)


def test_next_labels_follow_the_last_tube():
    assert next_labels(("T1", "T2", "T3", "T4"), 4) == ("T5", "T6", "T7", "T8")
    assert next_labels(("A", "B"), 2) == ("T1", "T2")
    assert next_labels(("T1", "T10", "x3"), 2) == ("T11", "T12")


def test_the_next_batch_continues_the_experiment():
    st = _study(goal=0.02)
    plan = _plan(goal=0.02)
    first = even_series_for(st, 8).take(np.arange(6))  # readings up to about 0.9: inside the linear range
    nb = next_batch(st, Readings(first, _read(st, first, 3.3, np.random.default_rng(2))), tubes=4)
    j = st.model.index("ML")
    assert nb.study.model.log_beta[j] == pytest.approx(nb.fit.estimate[0])
    assert nb.study.model.log_beta_sd[j] == pytest.approx(nb.fit.se[0])
    assert not nb.stop and nb.recipe.tubes == ("T7", "T8", "T9", "T10") and nb.censored == ()
    assert nb.everything.tubes == (*first.tubes, *nb.recipe.tubes)
    # every headline number is for all tubes together: the SE after is the information of the ten tubes
    # plus the plan's prior (derived: F = JᵀΣ⁻¹J + diag(1/sd²)), below the SE now and below the new tubes'
    assert nb.se_after < nb.se_now
    assert nb.se_after == pytest.approx(posterior_se(nb.study, nb.everything, st.params.prior_sd), rel=1e-12)
    alone = assess_study(nb.study, nb.recipe, trials=0, profile_chi2=False, model_check=False).target_se
    together = assess_study(
        nb.study, nb.everything, trials=0, profile_chi2=False, model_check=False
    ).target_se
    assert nb.se_after <= together < alone
    assert {c["id"] for c in nb.design_summary()["checks"]} and len(nb.design_summary()["tubes"]) == 10
    # the template of every tube, once its new absorbances are filled in, is one readings file for kplan fit
    both = concat_recipes([first, nb.recipe])
    template = readings_to_csv(
        both, plan, np.concatenate([_read(st, first, 3.3, np.random.default_rng(2)), [np.nan] * 4])
    )
    assert template.count(",\n") == 4
    with pytest.raises(Exception, match="not an absorbance"):
        parse_readings_csv(template, plan)
    # fill the new tubes with what they would read (four arbitrary numbers may not determine anything)
    new = iter(f"{a:.4f}" for a in _read(st, nb.recipe, 3.3, np.random.default_rng(3)))
    filled = "\n".join((ln + next(new)) if ln.endswith(",") else ln for ln in template.splitlines()) + "\n"
    rd = parse_readings_csv(filled, plan)
    assert rd.recipe.tubes == both.tubes and fit_study(st, rd).determined


def test_stops_when_the_goal_is_met():
    st = _study(goal=0.5)
    first = design_study(st, tubes=8, seed=0, check_model=False).recipe
    nb = next_batch(st, Readings(first, _read(st, first, 3.3, np.random.default_rng(3))), tubes=4)
    assert nb.stop and nb.design is None and "meets the goal" in nb.reason


def test_readings_over_the_range_are_information_not_a_refusal():
    # issue 19: two of four scouting readings ran over the linear range and the tool refused to plan. They
    # say "at least 1.0" (censored): the fit still has an answer (the plan's prior carried), the complex is
    # found stronger than guessed, and the next tubes are proposed
    st = _study()
    plan = _plan()
    scout = make_recipe(plan, {"CU": np.array([0.5, 0.5, 3.0, 3.0]), "DY": np.array([2.0, 5.0, 2.0, 5.0])})
    a = _read(st, scout, 5.3, np.random.default_rng(4))
    assert np.sum(a > 1.0) == 2
    nb = next_batch(st, Readings(scout, a), tubes=4)
    assert nb.censored == ("T3", "T4") and "at least 1" in nb.reason
    assert nb.fit.estimate[0] > 3.3 + 0.5 and not nb.stop and nb.recipe is not None
    assert nb.everything.tubes == ("T1", "T2", "T5", "T6", "T7", "T8")  # the censored ones do not count


@pytest.mark.parametrize("truth", [1.3, 5.3])
def test_sequential_batches_reach_a_design_centred_on_the_truth(truth):
    # issue 19: from a guess two decades too high (truth 1.3: the first batch reads below the linear range)
    # or too low (truth 5.3), a first batch of 4 at the guess and three batches of 4 from next_batch reach
    # within 1.3× the SE (at the truth) of 16 tubes designed knowing the truth (the same plan centred on it)
    st = _study()
    rng = np.random.default_rng(5)
    rec = design_study(st, tubes=4, seed=0, check_model=False).recipe
    A = _read(st, rec, truth, rng)
    for b in range(3):
        nb = next_batch(st, Readings(rec, A), tubes=4, seed=b)
        assert nb.recipe is not None
        rec = concat_recipes([rec, nb.recipe])
        A = np.concatenate([A, _read(st, nb.recipe, truth, rng)])

    def se_at_truth(study, recipe):
        return assess_study(
            study, recipe, trials=0, at={"ML": truth}, profile_chi2=False, model_check=False
        ).target_se

    centred = _study(log_beta=truth)
    best = design_study(centred, tubes=16, seed=0, check_model=False).recipe
    assert rec.n_tubes == 16
    assert se_at_truth(st, rec) <= 1.3 * se_at_truth(centred, best)
