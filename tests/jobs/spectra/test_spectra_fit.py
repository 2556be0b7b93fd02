"""Fits of whole spectra: variable projection against a full nonlinear fit, recovery of the truth at and
away from the guess, the factor analysis as a model check, and the readings' two table forms."""

from __future__ import annotations

import numpy as np
import pytest

from planner.inference.lm import fit_many
from planner.inference.precision import Whitening, unpack
from planner.inputs.recipe import RecipeError
from planner.inputs.spectra_readings import (
    SpectraReadings,
    parse_spectra_readings,
    spectra_readings_to_csv,
)
from planner.jobs.compile import compile_study
from planner.jobs.spectra.fit import fit_spectra
from planner.jobs.spectra.reading import expected, spectra_model
from planner.jobs.spectra.simulated import simulated_spectra
from planner.model.spectra import linearise

from .helpers import example


def test_variable_projection_equals_full_nonlinear_fit_on_simulated_spectra():
    # source: Golub & Pereyra 1973, SIAM J. Numer. Anal. 10:413 (thm 2.1); the issue asks 1e-6 in log β
    plan, study, rec = example(10.0)  # 31 wavelengths: the full fit has 2 + 62 parameters
    data = simulated_spectra(study, rec, np.random.default_rng(3))
    sm = spectra_model(study, rec)
    ex = expected(study, rec, sm)
    Y = linearise(data.absorbance, sm.spectra.stray_light)
    from planner.inference.varpro import SeparableProblem

    prob = SeparableProblem(sm.basis, Y[None], ex.weights)
    P = sm.params.size
    vp = fit_many(prob.f, sm.params.guess[None], prob.y(P), jac=prob.jac, scale_cov=False, xtol=1e-14)
    n, W = Y.shape
    s = sm.free.size

    def full(p):
        C, _, K, _ = sm.basis(p[:, :P])
        return (K + C @ p[:, P:].reshape(-1, s, W)).reshape(p.shape[0], -1)

    def full_jac(p):
        C, dC, K, dK = sm.basis(p[:, :P])
        E = p[:, P:].reshape(-1, s, W)
        dth = dK + np.einsum("tnsp,tsw->tnwp", dC, E)
        dE = np.einsum("tns,wv->tnwsv", C, np.eye(W)).reshape(p.shape[0], n, W, s * W)
        return np.concatenate([dth, dE], axis=-1).reshape(p.shape[0], n * W, -1)

    b = ex.budget
    wh = Whitening.of(b.photometric_var.ravel(), b.factors().reshape(n * W, -1))
    p0 = np.concatenate([sm.params.guess, sm.true_spectra().ravel()])[None]
    fl = fit_many(
        full, p0, Y.ravel()[None], jac=full_jac, whiten=wh, scale_cov=False, xtol=1e-14, max_iter=500
    )
    assert vp.converged[0] and fl.converged[0]
    assert np.abs(vp.theta[0] - fl.theta[0, :P]).max() < 1e-6
    assert np.isclose(vp.chi2[0], fl.chi2[0], rtol=1e-8)
    assert np.allclose(vp.se[0], fl.se[0, :P], rtol=1e-4)


@pytest.mark.parametrize("shift_sd", [0.0, 1.0])
def test_fit_recovers_the_truth_at_and_away_from_the_guess(shift_sd):
    plan, study, rec = example()
    sm = spectra_model(study, rec)
    lb = study.model.log_beta.copy()
    lb[sm.params.index] += shift_sd * study.model.log_beta_sd[sm.params.index]
    data = simulated_spectra(study, rec, np.random.default_rng(7), log_beta=lb)
    f = fit_spectra(study, data)
    assert f.determined and f.converged
    truth = lb[sm.params.index]
    assert np.all(np.abs(f.estimate - truth) < 3.5 * f.se)
    # the error model is right: χ² within its central 99.8 %, every tube's scatter as expected
    assert 0.001 < f.p_value < 0.999
    assert not f.outlier_tubes.any()
    # the factor analysis finds the species that stand above the noise
    assert f.factors.n_indicator == f.above_noise
    lo, hi = f.profile_ci95
    assert lo < f.estimate[sm.params.target] < hi


def test_fitted_spectra_se_against_monte_carlo():
    # the SE bands of the fitted spectra (linear parameters given the constants, plus the constants' own
    # uncertainty) against the scatter of the spectra refitted to 300 simulated experiments
    from planner.inference.varpro import SeparableProblem
    from planner.jobs.spectra.fit import _spectra_with_se
    from planner.jobs.spectra.precision import spectra_monte_carlo

    plan, study, rec = example(10.0)
    sm = spectra_model(study, rec)
    ex = expected(study, rec, sm)
    th = sm.params.guess
    exact = SeparableProblem(sm.basis, sm.linear_readings(th[None]), ex.weights)
    from planner.jobs.spectra.precision import spectra_cramer_rao

    cov = spectra_cramer_rao(sm, ex.weights, th).cov
    _, se = _spectra_with_se(exact, th, cov)
    mc = spectra_monte_carlo(study.bench, rec, sm, ex.weights, np.random.default_rng(8), 300, th, chunk=300)
    assert mc.failed_fraction == 0.0
    # the spectra each simulated experiment's fit leaves: the same draws again (one chunk, same order)
    rng = np.random.default_rng(8)
    from planner.inference.simulate import simulate
    from planner.model.spectra import spectra_readings

    lb, _, _ = unpack(study.model, sm.params, th)
    exp = simulate(study.bench, study.model, rec, rng, 300, log_beta=lb, photometric=False)
    rd = spectra_readings(sm.spectra, exp.state.absorber_conc_M(), study.model.path_cm)
    y = rd.absorbance + rd.absorbance_sd * rng.standard_normal(rd.absorbance.shape)
    Y = linearise(y, sm.spectra.stray_light)
    E = SeparableProblem(sm.basis, Y, ex.weights).linear_parameters(mc.estimates)
    ratio = E.std(axis=0, ddof=1) / se
    assert 0.88 < np.median(ratio) < 1.12, np.median(ratio)
    assert np.all(np.abs(E.mean(axis=0) - sm.true_spectra()) < 4 * se / np.sqrt(300) + 1e-9)


def test_factor_analysis_reveals_a_species_the_model_leaves_out():
    # data made with a 1:3 complex of its own band, fitted with the plan's ML + ML2 model: the data matrix
    # holds one factor more than the model's absorbing species (a check no single wavelength gives)
    plan, study, rec = example()
    truth = compile_study(extra_plan_with_ml3())
    data = simulated_spectra(truth, rec, np.random.default_rng(9))
    f = fit_spectra(study, data)
    assert f.factors.n_indicator > f.above_noise
    assert "leaves out" in f.factor_verdict


def extra_plan_with_ml3():
    from planner.inputs.plan import parse_plan_text

    from .helpers import EXAMPLE

    text = EXAMPLE.read_text(encoding="utf-8").replace(
        "[optics]",
        '[[species]]\nname = "ML3"\nformula = { M = 1, L = 3 }\nlog_beta = 8.0\n'
        "log_beta_sd = 0.0\n\n[optics]",
    )
    text = text.replace(
        "spectra_rsd = { ML = 0.3, ML2 = 0.3 }",
        "spectra_rsd = { ML = 0.3, ML2 = 0.3 }\n\n[optics.bands]\n"
        "ML3 = { peak_nm = 470, fwhm_nm = 60, epsilon_max = 900 }",
    )
    return parse_plan_text(text, base_dir=EXAMPLE.parent)


def test_long_and_wide_tables_read_alike_and_name_their_problems():
    plan, study, rec = example(10.0)
    data = simulated_spectra(study, rec, np.random.default_rng(1))
    wide = parse_spectra_readings(spectra_readings_to_csv(data, plan), plan)
    rows = ["tube,wavelength_nm,absorbance"]
    for i, t in enumerate(data.tubes):
        for w, a in zip(data.wavelength_nm, data.absorbance[i], strict=True):
            rows.append(f"{t},{w:g},{a:.5f}")
    shuffled = [rows[0]] + rows[:0:-1]  # any order of the rows
    long = parse_spectra_readings("\n".join(shuffled), plan).with_recipe(rec)
    assert wide.tubes == long.tubes and np.allclose(wide.absorbance, long.absorbance)
    assert np.allclose(wide.recipe.volumes_mL, rec.volumes_mL)
    with pytest.raises(RecipeError, match="no reading at"):
        parse_spectra_readings("\n".join(rows[:-1]), plan)
    with pytest.raises(RecipeError, match="read twice"):
        parse_spectra_readings("\n".join(rows + [rows[1]]), plan)
    with pytest.raises(RecipeError, match=r"line 3, absorbance"):
        parse_spectra_readings("\n".join(rows[:2] + ["T1,410,abc"] + rows[3:]), plan)
    with pytest.raises(RecipeError, match="no spectrum for"):
        SpectraReadings(data.tubes[1:], data.wavelength_nm, data.absorbance[1:]).with_recipe(rec)


def test_excluded_tubes_and_readings_above_the_range_are_left_out():
    plan, study, rec = example(10.0)
    data = simulated_spectra(study, rec, np.random.default_rng(2))
    a = data.absorbance.copy()
    a[3, 4] = 1.5  # above the linear range's top: left out
    f = fit_spectra(study, SpectraReadings(data.tubes, data.wavelength_nm, a, rec), exclude=("T12",))
    assert f.tubes == rec.tubes[:11]
    assert f.readings_left_out == 1 and not f.used[3, 4]
    assert f.excluded == (("T12", "excluded by request"),)
    lb, _, _ = unpack(study.model, spectra_model(study, rec).params, f.estimate)
    assert np.all(np.isfinite(lb))
