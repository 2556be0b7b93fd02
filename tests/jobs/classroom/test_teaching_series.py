"""Cards that teach: every card of the shipped teaching scenario is a series a student can plot and fit on
their own, the class stays efficient for K when pooled, and both hold when the truth is off the guess by
the plan's own uncertainty (issue "Cards that teach")."""

from __future__ import annotations

import numpy as np
import pytest

from planner.inference.simulate import simulate
from planner.inputs.plan import parse_plan_text
from planner.inputs.readings import Readings
from planner.inputs.recipe import stock_matrix
from planner.inputs.roster import roster_of_count
from planner.jobs.classroom.cards import class_set_study
from planner.jobs.compile import compile_study
from planner.jobs.measure.fit import fit_study
from planner.jobs.plan.assess import assess_study

from ...conftest import scenario_text

WINDOW = (0.2, 0.8)  # source: Weber 1975, Adv. Protein Chem. 29:1 (saturation where the data fix K)
OWN_SE_MAX = 0.10  # the bar for one card's own fit (log10 units)
EFFICIENCY_MIN = 0.8  # the aim against copies of the best recipe


@pytest.fixture(scope="module", params=[24, 60])
def cset(request, study):
    return class_set_study(study, roster_of_count(request.param), seed=0)


def _ratios(plan, recipe) -> np.ndarray:
    """L/M of every tube from the volumes and the plan's stock concentrations (mol/L)."""
    tot = recipe.volumes_mL @ stock_matrix(plan)  # mmol: volumes (mL) × mol/L
    return tot[:, 1] / tot[:, 0]


def test_every_card_is_a_spread_series(plan, cset):
    for c in cset.cards:
        v = c.recipe.volumes_mL
        distinct = np.unique(np.round(v, 6), axis=0).shape[0]
        assert distinct >= 5, c.student  # the issue: at least five distinct compositions
        r = _ratios(plan, c.recipe)
        assert r.max() / r.min() >= 4.0 - 1e-9, c.student  # the issue: L/M ratios span at least 4-fold
        assert c.spread.distinct == distinct and c.spread.ratio_span == pytest.approx(r.max() / r.min())
        # in an order a student can plot: the varied stock never decreases down the card
        assert np.all(np.diff(c.recipe.column(c.series.varied)) >= -1e-12), c.student
        assert np.ptp(c.recipe.column(c.series.partner)) == 0, c.student  # the partner is held


def test_saturation_covers_the_curve_at_the_guess_and_one_sd_off(study, cset):
    # judged by the assessment's own tube table at the guess and at log β ± 1 sd (not by the builder)
    sd = float(study.params.prior_sd[study.params.target])
    for c in cset.cards[:12]:
        for shift in (-sd, 0.0, sd):
            a = assess_study(study, c.recipe, at={"ML": 3.3 + shift}, precision=False)
            s = np.array([t["saturation"] for t in a.tube_rows()])
            inside = (s >= WINDOW[0]) & (s <= WINDOW[1])
            assert inside.sum() >= (2 if shift == 0 else 1), (c.student, shift, s)
            assert s.max() - s.min() >= 0.5 * (WINDOW[1] - WINDOW[0]) - 1e-9, (c.student, shift)


def test_class_is_distinct_sound_and_efficient(cset):
    assert cset.sound and cset.distinct and cset.lab == "binding-curve"
    assert cset.efficiency >= EFFICIENCY_MIN, cset.efficiency
    # derived: the pooled fit of N cards beats one card and N copies of the evenly stepped series
    assert cset.se["pooled"] < cset.se["cards_median"]
    assert cset.se["pooled"] < cset.se["pooled_even_copies"]
    assert cset.se["pooled_without_stock"] <= cset.se["pooled"] * (1 + 1e-9)
    # the price of the cards' shape alone (stock errors left out) is reported, not hidden
    assert 0.3 < cset.efficiency_without_stock <= 1.0


def _own_fits(study, cards, log_beta: float, seed: int):
    """Each card's readings simulated with the whole error budget at ``log_beta``, fitted alone."""
    rng = np.random.default_rng(seed)
    lb = study.model.log_beta.copy()
    lb[study.model.index("ML")] = log_beta
    out = []
    for c in cards:
        y = simulate(study.bench, study.model, c.recipe, rng, 1, log_beta=lb).absorbance[0]
        out.append(fit_study(study, Readings(c.recipe, y)))
    return out


def test_each_card_fits_on_its_own_at_the_guess(study, cset):
    fits = _own_fits(study, cset.cards, 3.3, seed=11)
    for c, f in zip(cset.cards, fits, strict=True):
        t = list(f.names).index("log_beta[ML]")
        assert f.determined and f.converged, (c.student, f.reason)
        assert f.se[t] <= OWN_SE_MAX, (c.student, f.se[t])
        assert f.se_error_model[t] == pytest.approx(
            c.assessment.target_se, rel=0.25
        )  # derived: Cramér–Rao at the fit
    est = np.array([f.estimate[list(f.names).index("log_beta[ML]")] for f in fits])
    se = np.array([f.se[list(f.names).index("log_beta[ML]")] for f in fits])
    z = (est - 3.3) / se
    assert np.mean(np.abs(z) < 2) >= 0.85  # derived: ~95 % of |z| < 2 for an unbiased, calibrated fit


@pytest.mark.parametrize("shift", [-1.0, 1.0])
def test_each_card_fits_when_the_truth_is_one_sd_off(study, cset, shift):
    # the plan's own uncertainty: log β = 3.30 ± 0.50 (1 sd)
    truth = 3.3 + shift * 0.5
    fits = _own_fits(study, cset.cards[:24], truth, seed=12)
    for c, f in zip(cset.cards[:24], fits, strict=True):
        t = list(f.names).index("log_beta[ML]")
        assert f.determined, (c.student, f.reason)
        assert f.se[t] <= OWN_SE_MAX, (c.student, f.se[t])
        assert abs(f.estimate[t] - truth) <= 4 * f.se[t], (c.student, f.estimate[t])


def test_same_seed_same_cards_other_seed_other_cards(study):
    a = class_set_study(study, roster_of_count(6), seed=4)
    b = class_set_study(study, roster_of_count(6), seed=4)
    c = class_set_study(study, roster_of_count(6), seed=5)
    va = [x.recipe.volumes_mL for x in a.cards]
    assert all(np.array_equal(x, y.recipe.volumes_mL) for x, y in zip(va, b.cards, strict=True))
    assert any(not np.array_equal(x, y.recipe.volumes_mL) for x, y in zip(va, c.cards, strict=True))


def test_pooled_option_keeps_the_maximal_efficiency(study):
    cs = class_set_study(study, roster_of_count(8), seed=0, pooled=True)
    assert cs.lab == "pooled" and cs.sound
    assert cs.se["pooled"] <= 1.05 * cs.se["pooled_best_copies"]  # derived: tubes move ±1–2 grid steps only
    assert all(c.series is None for c in cs.cards)


WIDE = (
    scenario_text("teaching")
    .replace("linear_range = [0.10, 1.00]", "linear_range = [0.05, 1.50]")
    .replace("ML = { value = 950.0, rsd = 0.30 }", "ML = { value = 950.0, rsd = 0.10 }")
)


def test_mole_ratio_cards_straddle_the_complex_ratio():
    # invented variant of the teaching scenario whose readings leave room for a mole-ratio series
    plan = parse_plan_text(WIDE.replace("robust = true", 'robust = true\ncard_series = "mole-ratio"'))
    from planner.jobs.classroom.cards import class_set

    cs = class_set(plan, roster_of_count(6), seed=0)
    assert cs.lab == "mole-ratio" and cs.sound
    for c in cs.cards:
        r = _ratios(plan, c.recipe)
        assert np.ptp(c.recipe.column("CU")) == 0  # the metal is held
        # source: the two-line hand method needs tubes well before and after the break (mole_ratio.py)
        assert (r <= 0.75).sum() >= 2 and (r >= 1.25).sum() >= 2, r
        assert np.all(np.diff(r) >= -1e-12)  # in the order of the ratio


def test_job_cards_keep_the_total_and_straddle_the_fraction():
    plan = parse_plan_text(WIDE.replace("goal_se = 0.05", "goal_se = 0.10"))
    from planner.jobs.classroom.cards import class_set

    cs = class_set(plan, roster_of_count(6), seed=0, series="job")
    assert cs.lab == "job" and cs.sound
    for c in cs.cards:
        vm, vl = c.recipe.column("CU"), c.recipe.column("DY")
        assert np.ptp(vm + vl) == pytest.approx(0.0, abs=1e-9)  # Job 1928: a constant total
        x = vm / (vm + vl)
        assert (x < 0.5).sum() >= 2 and (x > 0.5).sum() >= 2  # source: Job 1928, extremum at p/(p+q) = 0.5


def test_job_refuses_stocks_that_are_not_equimolar(study):
    from dataclasses import replace

    from planner.inference.design_criteria import DesignError

    conc = study.model.stock_conc_M.copy()
    conc[1, 1] *= 2.0  # DY twice as concentrated as CU
    other = replace(study, model=replace(study.model, stock_conc_M=conc))
    with pytest.raises(DesignError, match="equimolar"):
        class_set_study(other, roster_of_count(3), series="job")


def test_strong_complex_is_pointed_to_the_mole_ratio_series():
    # the shipped proton scenario: conditional log K ≈ 5.3 at its pH, every tube above 80 % saturated
    from planner.inference.design_criteria import DesignError

    study = compile_study(parse_plan_text(scenario_text("proton")))
    with pytest.raises(DesignError, match='card_series = "mole-ratio"'):
        class_set_study(study, roster_of_count(4))
    cs = class_set_study(study, roster_of_count(2), series="mole-ratio")
    assert cs.lab == "mole-ratio"
    for c in cs.cards:  # the plan holds the metal by design.fixed: the ligand rises past the ratio
        assert np.ptp(c.recipe.column("CU")) == 0 and c.series.partner == "CU"


def test_titration_plans_are_refused():
    from planner.inference.design_criteria import DesignError
    from planner.inputs.plan import load_plan

    from ...conftest import ROOT

    study = compile_study(load_plan(ROOT / "examples" / "titration-cuvette.toml"))
    with pytest.raises(DesignError, match="in-cuvette titration"):
        class_set_study(study, roster_of_count(2))
