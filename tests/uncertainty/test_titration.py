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


# --------------------------------------------------------------------------------------------------
# a burette as the titrant: reading differences, not a random walk (issue 20, item 0)
# --------------------------------------------------------------------------------------------------
BURETTE = ROOT / "examples" / "titration-burette.toml"


def _burette_points():
    from planner.jobs.titration.titrate import read_points

    plan = load_plan(BURETTE)
    st = compile_study(plan)
    return st, read_points(BURETTE.with_suffix(".csv"), plan, st)


def _readings_monte_carlo(st, rec, T, rng):
    """Burette titrations simulated reading by reading, independently of the error budget's algebra.

    The chemist reads the burette before the first portion (R_0) and after each one (R_k) and records the
    nominal readings; the meniscus really sits at R_k − e_k, each e_k read to ±1/5 of the 0.05 mL
    graduation (uniform on ±0.01 mL, the reading model's rectangular distribution, GUM 4.3.7), and the
    scale delivers (1 + c) mL per mL read (its calibration, triangular ±0.02 mL at 10 mL, QUAM A1). The
    titrant added by point k is therefore ((R_k − e_k) − (R_0 − e_0))·(1 + c) [source: the reading-
    difference model of domain.md §4, "In-cuvette titration": a burette delivery is the difference of two
    readings, so reading errors do not accumulate]. The 25 mL start volume, the stock concentrations
    and the photometric noise are drawn as well; every experiment is refitted with the nominal volumes.
    """
    from planner.inference.lm import fit_many
    from planner.inference.precision import ReadingModel, whitening_of
    from planner.model.compiled import predict, tube_ions_M
    from planner.uncertainty.delivery import delivery_uncertainty

    model, bench, params = st.model, st.bench, st.params
    t = bench.titration
    ks, kt = bench.stock_index(t.cell), bench.stock_index(t.titrant)
    burette = bench.devices.items[bench.devices.stock_device[kt]]
    pipette = bench.devices.items[bench.devices.stock_device[ks]]
    added = rec.volumes_mL[:, kt]
    n = added.size
    half = 0.2 * burette.graduation_mL  # read to a fifth of a subdivision [common practice]
    e = rng.uniform(-half, half, (T, n + 1))  # reading errors of R_0 … R_n
    # triangular calibration error of the scale, as a relative error of every reading difference
    c = rng.triangular(-1.0, 0.0, 1.0, (T, 1)) * burette.tolerance_mL / burette.capacity_mL
    true_added = (added - (e[:, 1:] - e[:, :1])) * (1.0 + c)
    d0 = delivery_uncertainty(pipette, np.array([t.start_volume_mL]))
    V0 = (
        t.start_volume_mL
        + d0.random_mL[0] * rng.standard_normal((T, 1))
        + d0.systematic_mL[0] * rng.standard_normal((T, 1))
    )
    V = np.zeros((T, n, len(bench.stock_ids)))
    V[:, :, ks] = V0
    V[:, :, kt] = true_added
    C = model.stock_conc_M * (
        1.0 + model.stock_conc_rsd[:, None] * rng.standard_normal((T, len(bench.stock_ids), 1))
    )
    Vtot = V.sum(axis=-1)
    totals = np.einsum("tnk,tkc->tnc", V, C) / Vtot[..., None]
    state = predict(model, totals, tube_ions_M(model, V, Vtot), warn=False)
    y = state.absorbance + state.absorbance_sd * rng.standard_normal((T, n))
    nominal = expected_state(model, rec)
    reading = ReadingModel(
        model, params, nominal.totals_M, tube_ions_M(model, rec.volumes_mL, rec.total_volume_mL)
    )
    W = whitening_of(error_budget(bench, model, rec, nominal))
    lo, hi = reading.bounds()
    res = fit_many(reading.f, params.guess, y, jac=reading.jac, whiten=W, scale_cov=False, lower=lo, upper=hi)
    ok = res.converged & np.all(np.isfinite(res.theta), axis=1)
    return res.theta[ok, params.target], ok.mean()


def test_burette_titration_cramer_rao_matches_a_monte_carlo_of_readings():
    # issue 20's check: a titration with a 10 mL burette as the titrant; Cramér–Rao within 10 % of a Monte
    # Carlo that simulates the burette's readings (3000 experiments: the sd of an sd estimate is 1.3 %)
    st, rec = _burette_points()
    a = assess_study(st, rec, trials=0, profile_chi2=False, model_check=False)
    se = a.cramer_rao.se[st.params.target]
    est, ok = _readings_monte_carlo(st, rec, 3000, np.random.default_rng(20))
    assert ok > 0.99
    assert est.std(ddof=1) == pytest.approx(se, rel=0.10)


def test_burette_readings_do_not_accumulate_but_pipette_aliquots_do():
    import dataclasses

    from planner.uncertainty import titration as ti

    st, rec = _burette_points()
    e = ti.titrant_errors(st.bench, rec)
    assert e.cumulative
    cov = e.random_cov()
    u = e.reading_mL
    # derived: V_k = R_k − R_0 → var = 2u², cov(V_k, V_l) = u² for k ≠ l, whatever the number of portions
    np.testing.assert_allclose(np.diag(cov), 2 * u**2, rtol=1e-12)
    np.testing.assert_allclose(cov[0, -1], u**2, rtol=1e-12)
    assert u == pytest.approx(0.01 / np.sqrt(3.0), rel=1e-12)  # ±1/5 of 0.05 mL, rectangular (GUM 4.3.7)
    # the same portions as separate deliveries add up: the last point's variance grows with their number
    walk = dataclasses.replace(e, cumulative=False, aliquot_mL=np.full(rec.n_tubes, np.sqrt(2.0) * u))
    assert walk.random_cov()[-1, -1] == pytest.approx(rec.n_tubes * 2 * u**2, rel=1e-12)
    # and the micropipette titration of the cuvette example keeps its random walk
    cuv = compile_study(load_plan(EXAMPLE))
    rec2 = titration_recipe(cuv.bench, _sched(*([0.05] * 6)))
    e2 = ti.titrant_errors(cuv.bench, rec2)
    assert not e2.cumulative
    np.testing.assert_allclose(np.diag(e2.random_cov()), np.cumsum(e2.aliquot_mL**2), rtol=1e-12)


def test_a_random_walk_would_overstate_the_burette_titrations_se():
    # what the issue found: the micropipette's model applied to a burette overstates SE(log K); with the
    # reading model the prediction agrees with the simulated readings, the random walk does not
    import dataclasses

    from planner.uncertainty import titration as ti

    st, rec = _burette_points()
    e = ti.titrant_errors(st.bench, rec)
    walk = dataclasses.replace(
        e, cumulative=False, aliquot_mL=np.full(rec.n_tubes, np.sqrt(2.0) * e.reading_mL)
    )
    a = assess_study(st, rec, trials=0, profile_chi2=False, model_check=False)
    orig = ti.titrant_errors
    try:
        ti.titrant_errors = lambda *args, **kw: walk
        b = assess_study(st, rec, trials=0, profile_chi2=False, model_check=False)
    finally:
        ti.titrant_errors = orig
    t = st.params.target
    assert b.cramer_rao.se[t] > 1.5 * a.cramer_rao.se[t]


def test_a_burette_titration_must_fit_one_filling():
    # a burette is read along one filling: refilling mid-titration would start a new pair of readings
    text = BURETTE.read_text(encoding="utf-8").replace('max_volume = "35.00 mL"', 'max_volume = "40.00 mL"')
    text = text.replace('tube_volume = "35.00 mL"', 'tube_volume = "40.00 mL"')  # max_volume ≤ the vessel
    st = compile_study(parse_plan_text(text))
    with pytest.raises(RecipeError, match="in one filling"):
        titration_recipe(st.bench, _sched(*([1.0] * 10), 0.5))
