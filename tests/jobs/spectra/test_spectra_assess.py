"""Whole-spectrum precision: Cramér–Rao against Monte Carlo at and away from the guess, the spectral
error budget against the single-wavelength one, and the comparison with single wavelengths."""

from __future__ import annotations

import numpy as np
import pytest

from planner.inputs.recipe import totals_M
from planner.jobs.compile import expected_state
from planner.jobs.spectra.assess import assess_spectra
from planner.jobs.spectra.precision import information_by_wavelength
from planner.jobs.spectra.reading import expected, spectra_model
from planner.model.jacobians import absorbance_derivatives
from planner.uncertainty.budget import error_budget
from planner.uncertainty.spectra_budget import totals_errors

from .helpers import even_recipe, example

MC_TOLERANCE = 0.10  # the check: Cramér–Rao of the spectrum fit against a Monte Carlo within 10 %


@pytest.mark.parametrize("at_sd", [0.0, 1.0])
def test_cramer_rao_matches_monte_carlo_at_and_away_from_the_guess(at_sd):
    # source: Cramér 1946 / Rao 1945 — the ML estimator's covariance tends to the inverse Fisher
    # information; 600 trials give the Monte-Carlo sd to ±3 % (1/√(2·600)), so 10 % is > 3 sd of noise.
    # Read every 5 nm (61 wavelengths) to keep the suite short; benchmarks/spectra.py runs 301.
    plan, study, rec = example(5.0)
    m = study.model
    at = {s: float(m.log_beta[m.index(s)] + at_sd * m.log_beta_sd[m.index(s)]) for s in ("ML", "ML2")}
    a = assess_spectra(study, rec, trials=600, seed=4, at=at, profile_chi2=False, factors=False)
    assert a.mc.failed_fraction == 0.0
    ratio = a.mc.sd / a.cramer_rao.se
    assert np.all(np.abs(ratio - 1.0) < MC_TOLERANCE), ratio
    assert np.all(np.abs(a.mc.bias) < 0.2 * a.cramer_rao.se + 3 * a.mc.sd / np.sqrt(600))


def test_spectral_budget_at_one_wavelength_equals_the_single_wavelength_budget():
    # the same error budget, derived twice: through the totals' covariance (spectra) and through the
    # volumes and stocks directly (planner.uncertainty.budget) — at the working wavelength they agree
    plan, study, rec = example()
    m = study.model
    st = expected_state(m, rec)
    single = error_budget(study.bench, m, rec, st)
    g = absorbance_derivatives(m, st).dA_dtotals  # (n, 2) at optics.wavelength_nm
    errs = totals_errors(study.bench, m, rec)
    n = rec.n_tubes
    G = np.zeros((n, 2 * n))
    for i in range(n):
        G[i, 2 * i : 2 * i + 2] = g[i]
    vol = G @ errs.covariance() @ G.T
    assert np.allclose(vol, single.delivery + single.stock, rtol=1e-9, atol=1e-14)


def test_whole_spectrum_beats_every_single_wavelength():
    # derived: the whole window holds every single wavelength's readings plus more (each with its own
    # nuisance ε), so its information about the target is at least any one wavelength's
    plan, study, rec = example()
    a = assess_spectra(study, even_recipe(plan), trials=0, profile_chi2=False, factors=False)
    sp = a.summary()["spectra"]
    assert sp["se_whole_spectrum"] < sp["se_best_single_wavelength"]
    single = np.array([r["se_single"] or np.inf for r in sp["by_wavelength"]])
    assert np.all(sp["se_whole_spectrum"] <= single * (1 + 1e-9))
    share = np.array([r["information_share"] for r in sp["by_wavelength"]])
    assert np.all(share >= 0) and np.isclose(share.sum(), 1.0)


def test_information_shares_sum_the_targets_information():
    # derived: 1/Var(θ_t) = Σ_rows (J_row · F⁻¹e_t)² / [F⁻¹]_tt² over the projected Jacobian's rows
    plan, study, rec = example(10.0)
    sm = spectra_model(study, rec)
    ex = expected(study, rec, sm)
    from planner.jobs.spectra.precision import spectra_cramer_rao

    cr = spectra_cramer_rao(sm, ex.weights, sm.params.guess)
    t = sm.params.target
    u = cr.cov[:, t]
    parts = (cr.jacobian @ u) ** 2
    assert np.isclose(parts.sum() / cr.cov[t, t] ** 2, 1.0 / cr.cov[t, t], rtol=1e-8)
    share = information_by_wavelength(cr, rec.n_tubes, sm.spectra.size, t)
    assert np.isclose(share.sum(), 1.0)


def test_assessment_json_keeps_the_baseline_keys_and_adds_spectra():
    plan, study, rec = example()
    s = assess_spectra(study, rec, trials=50, seed=0).summary()
    for key in (
        "title",
        "verdict",
        "verdict_reason",
        "parameters",
        "tubes",
        "checks",
        "correlation",
        "profile",
    ):
        assert key in s
    assert [p["name"] for p in s["parameters"]] == ["log_beta[ML]", "log_beta[ML2]"]
    for key in (
        "se_whole_spectrum",
        "se_best_single_wavelength",
        "best_single_wavelength_nm",
        "by_wavelength",
    ):
        assert key in s["spectra"]
    ids = {c["id"] for c in s["checks"]}
    assert {"linear-range", "factors", "identifiability", "glassware", "stock-budget"} <= ids
    tot = totals_M(rec, study.model.stock_conc_M)
    assert np.allclose([t["total_M"]["M"] for t in s["tubes"]], tot[:, 0])


def test_a_tube_reading_above_the_range_fails_the_check():
    plan, study, rec = example()
    from dataclasses import replace

    loud = replace(rec, volumes_mL=rec.volumes_mL * np.array([4.0, 1.0, 1.0]))  # four times the copper
    a = assess_spectra(study, loud, trials=0, profile_chi2=False, factors=False)
    check = {c.id: c for c in a.checks}["linear-range"]
    assert check.status == "fail" and "above" in check.message
    assert a.verdict != "resolved"


def test_one_wavelength_of_the_spectrum_is_the_single_wavelength_assessment():
    # the same recipe judged two ways: the whole-spectrum code's SE from one wavelength alone, and the
    # single-wavelength assessment of the plan moved to that wavelength (ε from the table there, the
    # window's instrument there, the stray-light curve kept rather than undone: Fisher information is
    # unchanged by a known smooth transform of the readings [derived])
    from planner.inputs.plan import parse_plan_text
    from planner.jobs.compile import compile_study
    from planner.jobs.plan.assess import assess_study

    from .helpers import EXAMPLE

    plan, study, _ = example()
    rec = even_recipe(plan)
    sp = assess_spectra(study, rec, trials=0, profile_chi2=False, factors=False).summary()["spectra"]
    by = {r["wavelength_nm"]: r["se_single"] for r in sp["by_wavelength"]}
    for wl in (431, 520, 600, 690):
        text = EXAMPLE.read_text(encoding="utf-8").replace("wavelength_nm = 600", f"wavelength_nm = {wl}")
        moved = compile_study(parse_plan_text(text, base_dir=EXAMPLE.parent))
        se = assess_study(moved, rec, trials=0, profile_chi2=False, model_check=False).target_se
        assert se == pytest.approx(by[float(wl)], rel=1e-6)
