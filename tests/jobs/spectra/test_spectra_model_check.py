"""The model check with whole spectra: the exact noncentrality against a direct full nonlinear fit, the
simulated power against the noncentral χ², the whole spectrum against the best single wavelength on the
worked example, and the design's guard.

The plans are the invented model-check example (examples/spectra-ml-check.toml: copper(II) with the
imaginary ligand Pz, a 1:1 plan that leaves out a 1:2 complex), read at a few wavelengths to keep the
suite short.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest
from scipy.linalg import cho_factor, cho_solve, solve_triangular
from scipy.optimize import least_squares

from planner.inputs.recipe import read_recipe_csv
from planner.jobs.compile import compile_study
from planner.jobs.spectra.assess import assess_spectra, expected_factors
from planner.jobs.spectra.detection import alternative_readings, spectra_detection
from planner.jobs.spectra.reading import expected, spectra_model
from planner.jobs.spectra.single import single_wavelengths
from planner.model.compiled import predict
from planner.model.jacobians import concentration_derivatives
from planner.paper.json_out import to_json
from planner.uncertainty.spectra_budget import totals_errors

from .helpers import CHECK_RECIPE, check_variant, example

BINOMIAL_SD = 3.5  # simulated shares within 3.5 binomial sd of the noncentral χ² power [common practice]


def _case(step_nm: float, ml2_log_beta: float | None = None):
    plan = check_variant(step_nm, ml2_log_beta)
    study = compile_study(plan)
    rec = read_recipe_csv(CHECK_RECIPE, plan)
    sm = spectra_model(study, rec)
    return plan, study, rec, sm, expected(study, rec, sm)


def _detect(study, rec, sm, ex, trials: int, seed: int = 1, single: bool = False):
    eligible = single_wavelengths(sm, ex, sm.params.guess).eligible if single else None
    above = expected_factors(sm, ex)[1]
    rng = np.random.default_rng(seed)
    return spectra_detection(study, rec, sm, ex, rng, trials, above=above, eligible=eligible)


def test_the_alternatives_spectrum_is_its_column_of_the_table():
    # the two-complex example reads ML2 from the same table as a species: the model-check example's
    # alternative gets the same spectrum over the window, and the same ε at the working wavelength
    _, two, _ = example(10.0)
    _, study, _, _, _ = _case(10.0)
    k = two.model.absorbers.index("ML2")
    np.testing.assert_allclose(study.alternative_spectra[0], two.spectra.epsilon_M_cm[:, k], rtol=1e-12)
    alt = dict(study.alternatives)["ML2"]
    assert alt.epsilon_M_cm[-1] == pytest.approx(two.model.epsilon_M_cm[k], rel=1e-12)


def test_default_alternatives_borrow_the_targets_spectrum(tmp_path):
    # README: ε of an alternative defaults to the target's — with spectra, its whole spectrum
    study = compile_study(check_variant(10.0, table_dir=tmp_path))
    assert [n for n, _ in study.alternatives] == ["ML2", "M2L"]
    ml = study.spectra.epsilon_M_cm[:, study.model.absorbers.index("ML")]
    for eps in study.alternative_spectra:
        np.testing.assert_allclose(eps, ml, rtol=1e-12)


def _dense_covariance(study, rec, sm, ex) -> np.ndarray:
    """(n W, n W) covariance of every reading (tube by tube, wavelength within): the photometric variance
    plus the totals' covariance (planner.uncertainty.spectra_budget) carried to every wavelength by
    ∂A/∂totals at the guess — the dense matrix varpro never forms."""
    model, spectra = study.model, study.spectra
    n, W = rec.n_tubes, spectra.size
    st = predict(model, sm.totals_M, sm.ions_M, warn=False)
    dct = concentration_derivatives(model, st).dc_dtotals  # (n, A, 2)
    g = model.path_cm * np.einsum("nac,wa->nwc", dct, spectra.epsilon_M_cm)  # (n, W, 2)
    G = np.zeros((n * W, 2 * n))
    for i in range(n):
        G[i * W : (i + 1) * W, 2 * i : 2 * i + 2] = g[i]
    photometric = np.diag((ex.readings.linear_sd**2).ravel())
    return photometric + G @ totals_errors(study.bench, model, rec).covariance() @ G.T


def _direct_least_chi2(study, rec, sm, ex, Y):
    """The main model (log β[ML] and ML's spectrum at every wavelength as explicit parameters) fitted
    to the noise-free spectra Y (n, W) by generalised least squares with the dense covariance."""
    model, spectra = study.model, study.spectra
    L = np.linalg.cholesky(_dense_covariance(study, rec, sm, ex))
    j_ml, j_m = model.absorbers.index("ML"), model.absorbers.index("M")

    def resid(x):
        lb = model.log_beta.copy()
        lb[model.index("ML")] = x[0]
        c = predict(model, sm.totals_M, sm.ions_M, log_beta=lb, warn=False).absorber_conc_M()
        m = model.path_cm * (np.outer(c[:, j_m], spectra.epsilon_M_cm[:, j_m]) + np.outer(c[:, j_ml], x[1:]))
        return solve_triangular(L, (Y - m).ravel(), lower=True)

    x0 = np.concatenate([[model.log_beta[model.index("ML")]], spectra.epsilon_M_cm[:, j_ml]])
    fit = least_squares(resid, x0, method="lm", xtol=1e-15, ftol=1e-15, gtol=1e-15, max_nfev=20000)
    return float(fit.fun @ fit.fun)


def test_noncentrality_is_the_least_chi2_of_a_direct_full_fit():
    # source: Atkinson & Fedorov 1975, Biometrika 62:57 — λ is the main model's least squared misfit to
    # the alternative's noise-free data in the fit's own metric; variable projection (Golub & Pereyra
    # 1973) must give the full fit's minimum over the constant and every spectrum value
    _, study, rec, sm, ex = _case(10.0, 3.4)
    d = _detect(study, rec, sm, ex, 0)[0]
    Y = alternative_readings(study, sm)[0]
    direct = _direct_least_chi2(study, rec, sm, ex, Y)
    assert 10.0 < direct < 1e4  # a misfit the test can see, not a rounding error
    assert d.noncentrality == pytest.approx(direct, rel=1e-6)
    # derived: readings − ML's spectrum (one value per wavelength) − the constant
    assert d.dof == rec.n_tubes * sm.spectra.size - sm.spectra.size - 1


@pytest.mark.parametrize("ml2_log_beta", [3.4, -3.0])
def test_simulated_power_matches_the_noncentral_chi2_power(ml2_log_beta):
    # derived: under the alternative the fit's χ² is χ²_dof(λ) (Atkinson & Fedorov 1975), so the share of
    # simulated experiments whose test rejects the main model estimates P(χ²_dof(λ) > χ²_dof,0.95) — about
    # 50 % here; with no ML2 formed (log β₂ = −3) λ = 0 and the test keeps its 5 % level
    _, study, rec, sm, ex = _case(10.0, ml2_log_beta)
    trials = 800
    d = _detect(study, rec, sm, ex, trials, seed=7)[0]
    p = d.power_noise_free
    assert (0.3 < p < 0.7) if ml2_log_beta > 0 else p == pytest.approx(0.05, abs=1e-3)
    assert abs(d.power - p) < BINOMIAL_SD * np.sqrt(p * (1 - p) / trials), (d.power, p)
    # the factor analysis: an extra factor far too weak to stand above the noise here, and rare
    # false alarms without it
    assert d.power_factors < 0.05
    assert d.power_either >= d.power


def test_worked_example_whole_spectrum_against_the_best_single_wavelength():
    # the example: a weak 1:2 complex (K2 ≈ 3 L/mol) left out of a 1:1 plan. With every wavelength the
    # fit reveals it in every experiment; the best single wavelength of the same tubes, fitted on its own
    # (the constant and ML's ε there), reveals it in about a third — and not at all from the two
    # compositions of the target-only design (two compositions, two parameters: λ = 0)
    plan, study, rec, sm, ex = _case(5.0)
    even = _detect(study, rec, sm, ex, 0, single=True)[0]
    assert even.power_noise_free > 0.999
    assert 0.2 < even.power_noise_free_single < 0.5 and even.dof_single == rec.n_tubes - 2
    from planner.jobs.spectra.design import design_spectra

    target_only = design_spectra(study, seed=0, check_model=False).recipe
    sm2 = spectra_model(study, target_only)
    ex2 = expected(study, target_only, sm2)
    designed = _detect(study, target_only, sm2, ex2, 0, single=True)[0]
    assert designed.power_noise_free > 0.999
    assert designed.noncentrality_single == pytest.approx(0.0, abs=1e-6)
    assert designed.power_noise_free_single == pytest.approx(0.05, abs=1e-3)


def test_best_single_wavelength_is_the_single_wavelength_model_check_there():
    # the same λ two ways: variable projection on one wavelength of the spectrum, and the single-wavelength
    # model check of the plan moved to that wavelength (ε from the table there, the readings with their
    # stray light rather than undone: λ unchanged to first order [derived])
    from planner.jobs.plan.detection import recipe_detection

    plan, study, rec, sm, ex = _case(5.0)
    d = _detect(study, rec, sm, ex, 0, single=True)[0]
    moved = check_variant(5.0, wavelength_nm=f"{d.best_single_wavelength_nm:g}")
    assert plan.optics.wavelength_nm != moved.optics.wavelength_nm
    one = recipe_detection(compile_study(moved), rec, np.random.default_rng(0), 0)[0]
    assert one.dof == d.dof_single
    assert one.noncentrality == pytest.approx(d.noncentrality_single, rel=1e-3)


def test_concentration_space_noncentrality_is_exact_for_equal_noise():
    # derived (planner.jobs.spectra.model_check): with the same photometric sd for every reading, the
    # exchange's rows — the misfit inside the span of the model's spectra in concentration space, plus the
    # added spectrum's part outside it with the fitted spectra free to follow — give exactly the
    # linearised noncentrality of the whole-spectrum fit, rᵀΣ⁻¹r − gᵀ(JᵀΣ⁻¹J)⁻¹g over every reading
    from planner.inference.guard import _BlockState
    from planner.jobs.plan.candidates import Candidates
    from planner.jobs.spectra.model_check import guard_rows

    plan = check_variant(
        20.0,
        3.6,
        noise="{ k1 = 0.0, k2 = 0.0, k3 = 0.002 }",
        stray_light="0.0",
        edge_rise="1.0",
    )
    study = compile_study(plan)
    rec = read_recipe_csv(CHECK_RECIPE, plan)
    sm = spectra_model(study, rec)
    ex = expected(study, rec, sm)
    F, R, M0, _ = guard_rows(study, Candidates(rec, ("PZ",), rec.n_tubes, 0.05))
    P = F.shape[-1]
    st = _BlockState(F, R, np.zeros((P, P)) if M0 is None else M0, np.ones(rec.n_tubes, dtype=int))
    _, lam_rows = st.var_lam(0)
    # the same from every reading: Jacobian in (log β, ML's spectrum), dense covariance
    spectra = study.spectra
    n, W = rec.n_tubes, spectra.size
    Y = alternative_readings(study, sm)[0]
    main = sm.linear_readings(sm.params.guess[None])[0]
    C, dC, K, dK = sm.basis(sm.params.guess[None])
    dA = (dK[0] + np.einsum("nsp,sw->nwp", dC[0], sm.true_spectra()))[..., 0]  # (n, W)
    J = np.zeros((n * W, 1 + W))
    J[:, 0] = dA.ravel()
    for i in range(n):
        J[i * W : (i + 1) * W, 1:] = C[0, i, 0] * np.eye(W)
    cf = cho_factor(_dense_covariance(study, rec, sm, ex))
    r = (Y - main).ravel()
    Sr, SJ = cho_solve(cf, r), cho_solve(cf, J)
    b = J.T @ Sr
    lam_direct = r @ Sr - b @ np.linalg.solve(J.T @ SJ, b)
    assert lam_direct > 1.0
    assert lam_rows[0] == pytest.approx(lam_direct, rel=1e-6)


@pytest.fixture(scope="module")
def guarded(tmp_path_factory):
    """The example with the default alternatives (ML2 and M2L with ML's spectrum) read every 50 nm: the
    target-only design's two compositions cannot reveal them, a spread design can."""
    from planner.jobs.spectra.design import design_spectra

    study = compile_study(check_variant(50.0, table_dir=tmp_path_factory.mktemp("eps")))
    return study, design_spectra(study, seed=0, check_model=False), design_spectra(study, seed=0)


def test_the_guard_replaces_the_design_where_that_pays(guarded):
    # the rule of the one-wavelength check (issue 20): a guarded design only when it raises the power
    # against some alternative by ≥ 20 points or to the 80 % goal, at an SE cost within ×(1 + check_weight)
    study, plain, d = guarded
    mc = d.model_check
    assert mc is not None and mc.replaced and mc.moves >= 1
    assert 1.0 <= mc.se_guarded_over_target_only <= 1.0 + study.check_weight + 1e-9
    assert mc.se_target_only == pytest.approx(plain.se_target, rel=1e-9)
    assert d.se_target == pytest.approx(mc.se_guarded, rel=1e-9)
    gains = [g.power_noise_free - t.power_noise_free for g, t in mc.detection]
    assert max(gains) >= 0.20
    for g, t in mc.detection:
        assert t.power_noise_free < 0.1  # the target-only design: about the test's level
        # the printed design's simulated power against its noncentral χ² power
        p = g.power_noise_free
        assert abs(g.power - p) < BINOMIAL_SD * np.sqrt(p * (1 - p) / g.trials) + 0.02
    s = to_json(d)
    assert s["model_check"]["replaced"] is True
    entry = s["model_check"]["alternatives"][0]
    for key in ("power", "power_noise_free", "power_factors", "power_either", "best_single_wavelength_nm"):
        assert key in entry
    assert {c["id"]: c for c in s["checks"]}["model-check"]["status"] in ("pass", "warn")


def test_the_guarded_design_keeps_its_lead_when_the_truth_differs(guarded):
    # the truth ±1 sd of log β[ML] away from the guess (the alternatives' constants moved with it): the
    # guarded design still reveals the left-out complexes more often than the target-only design
    from planner.jobs.spectra.model_check import exact_detection

    study, plain, d = guarded
    j = study.model.index("ML")

    def moved(m, shift):
        lb = m.log_beta.copy()
        lb[j] += shift
        lb[len(study.model.species) :] += 2 * shift  # ML2, M2L: log β₂ = 2 log β₁ − log 4
        return replace(m, log_beta=lb)

    for k in (-1.0, 1.0):
        shift = k * float(study.model.log_beta_sd[j])
        truth = replace(
            study,
            model=moved(study.model, shift),
            alternatives=tuple((n, moved(m, shift)) for n, m in study.alternatives),
        )
        g = exact_detection(truth, d.recipe)
        t = exact_detection(truth, plain.recipe)
        assert max(a.power_noise_free - b.power_noise_free for a, b in zip(g, t, strict=True)) >= 0.1, shift


def test_a_design_that_cannot_pay_stands_and_says_what_would_reveal(tmp_path):
    # read every 5 nm (61 wavelengths; every 1 nm gives the same verdict): the χ² test of a whole spectrum
    # has hundreds of degrees of freedom, and an alternative with ML's own spectrum adds no factor, so no
    # design within ×1.25 gains 20 points — the target-only design stands, and says what would help
    from planner.jobs.spectra.design import design_spectra

    study = compile_study(check_variant(5.0, table_dir=tmp_path))
    d = design_spectra(study, seed=0)
    mc = d.model_check
    assert not mc.replaced and mc.reason.startswith("the target-only design stands")
    assert len(mc.advice) == 2
    assert "ligand in larger excess" in mc.advice[0] and "metal in excess" in mc.advice[1]
    assert all("no combination of the model's spectra (here 0.0%" in a for a in mc.advice)
    check = {c["id"]: c for c in to_json(d)["checks"]}["model-check"]
    assert check["status"] == "warn" and "says how far any design" in check["message"]


def test_assessment_reports_the_model_check_with_spectra():
    plan, study, rec, sm, ex = _case(10.0)
    a = assess_spectra(study, rec, trials=100, seed=3, profile_chi2=False)
    rows = to_json(a)["model_check"]
    assert [r["alternative"] for r in rows] == ["ML2"]
    r = rows[0]
    assert r["trials"] == 100 and r["power"] == 1.0 and r["power_factors"] > 0.9
    assert r["best_single_wavelength_nm"] is not None and r["dof_single_wavelength"] == 10
    check = {c.id: c for c in a.checks}["model-check"]
    assert check.status == "pass" and "χ² test 100%" in check.message
    # a recipe that cannot reveal it: the check warns and says what to do
    weak = compile_study(check_variant(10.0, 2.0))
    b = assess_spectra(weak, rec, trials=0, profile_chi2=False, factors=False)
    check = {c.id: c for c in b.checks}["model-check"]
    assert check.status == "warn" and "spread the tubes over more compositions" in check.message
