"""Whole-spectrum benchmark: the Monte Carlo of 12 tubes × 301 wavelengths against the single-wavelength
Monte Carlo of the same tubes, a per-trial baseline, and the design time — in one run.

Problem: the example examples/spectra-ml-ml2.toml (ML and ML2 with overlapping bands, 400–700 nm every
1 nm, both complexes' spectra fitted at every wavelength) and its recipe examples/spectra-ml-ml2.csv
(12 tubes). Each timing is taken in this process:

- single wavelength: ``assess_study`` of the same 12 tubes at optics.wavelength_nm with 2000 trials (its
  Monte Carlo fits log β of both complexes and both ε at that wavelength) — the goal's reference;
- whole spectra: the whole-spectrum Monte Carlo (:func:`planner.jobs.spectra.precision.spectra_monte_carlo`)
  with 2000 trials, variable projection batched over trials. Goal: ≤ 5× the single-wavelength time;
- baseline: what a careful user would write without a batched engine — scipy.optimize.least_squares on
  each simulated experiment in turn, the spectra eliminated by dense generalised least squares at every
  evaluation (variable projection, numpy-vectorised within a trial), timed on a few trials and scaled to
  2000;
- design: ``kplan design`` of the example (the whole-spectrum design, its exact SEs across the guess, and
  the single-wavelength design it is compared with). Goal: ≤ 10 s.
- model check: on examples/spectra-ml-check.toml (the same tubes, a 1:1 plan that leaves out ML2), the
  whole-spectrum model check with 400 simulated experiments (batched refits) against the one-wavelength
  model check of the same tubes with 400 experiments, and against the per-trial scipy baseline above
  scaled to 400; then the design with its guard.

Run: python benchmarks/spectra.py
"""

from __future__ import annotations

import time
from pathlib import Path

import numpy as np
from scipy.optimize import least_squares

from planner.inference.precision import unpack
from planner.inference.simulate import simulate
from planner.inputs.plan import load_plan
from planner.inputs.recipe import read_recipe_csv
from planner.jobs.compile import compile_study
from planner.jobs.plan.assess import assess_study
from planner.jobs.spectra.design import design_spectra
from planner.jobs.spectra.precision import spectra_monte_carlo
from planner.jobs.spectra.reading import expected, spectra_model
from planner.model.spectra import linearise, spectra_readings
from planner.paper.json_out import to_json

ROOT = Path(__file__).resolve().parents[1]
TRIALS = 2000
BASELINE_TRIALS = 3


def baseline_fit(sm, Y: np.ndarray, Sigma_inv: np.ndarray) -> np.ndarray:
    """One experiment by scipy: θ searched by least_squares, E by dense GLS at every evaluation."""
    n, W = Y.shape
    L = np.linalg.cholesky(Sigma_inv)  # Σ⁻¹ = L Lᵀ: residual Lᵀ (y − m)
    y = Y.T.ravel()  # wavelength by wavelength

    Lt = L.T.reshape(n * W, W, n)  # columns wavelength by wavelength

    def resid(th):
        C, _, K, _ = sm.basis(th[None])
        r0 = L.T @ (y - K[0].T.ravel())
        A = (Lt @ C[0]).reshape(n * W, -1)  # Lᵀ (I_W ⊗ C) without forming the Kronecker product
        e = np.linalg.lstsq(A, r0, rcond=None)[0]
        return r0 - A @ e

    return least_squares(resid, sm.params.guess, method="lm").x


def main() -> None:
    plan = load_plan(ROOT / "examples" / "spectra-ml-ml2.toml")
    study = compile_study(plan)
    rec = read_recipe_csv(ROOT / "examples" / "spectra-ml-ml2.csv", plan)
    sm = spectra_model(study, rec)
    ex = expected(study, rec, sm)
    n, W = rec.n_tubes, study.spectra.size
    print(f"{n} tubes × {W} wavelengths, fitted spectra {', '.join(sm.basis_names)}, {TRIALS} trials")

    t = time.perf_counter()
    single = assess_study(study, rec, trials=TRIALS, profile_chi2=False, model_check=False)
    t_single = time.perf_counter() - t
    print(
        f"single wavelength ({plan.optics.wavelength_nm:g} nm): {t_single:6.2f} s   "
        f"SE(log β[ML]) {single.target_se:.3g}, MC sd {single.mc.sd[single.params.target]:.3g}, "
        f"{single.mc.failed_fraction:.1%} failed"
    )

    t = time.perf_counter()
    mc = spectra_monte_carlo(
        study.bench, rec, sm, ex.weights, np.random.default_rng(0), TRIALS, sm.params.guess
    )
    t_spec = time.perf_counter() - t
    print(
        f"whole spectra:                {t_spec:6.2f} s   MC sd {mc.sd[sm.params.target]:.3g}, "
        f"{mc.failed_fraction:.1%} failed   ratio to single wavelength {t_spec / t_single:.2f} (goal ≤ 5)"
    )

    b = ex.budget
    S = b.factors().transpose(1, 0, 2).reshape(n * W, -1)
    Sigma = np.diag(b.photometric_var.T.ravel()) + S @ S.T
    Sigma_inv = np.linalg.inv(Sigma)
    lb, _, _ = unpack(study.model, sm.params, sm.params.guess)
    rng = np.random.default_rng(1)
    exp = simulate(study.bench, study.model, rec, rng, BASELINE_TRIALS, log_beta=lb, photometric=False)
    rd = spectra_readings(sm.spectra, exp.state.absorber_conc_M(), study.model.path_cm)
    y = rd.absorbance + rd.absorbance_sd * rng.standard_normal(rd.absorbance.shape)
    Y = linearise(y, sm.spectra.stray_light)
    t = time.perf_counter()
    for k in range(BASELINE_TRIALS):
        baseline_fit(sm, Y[k], Sigma_inv)
    t_base = (time.perf_counter() - t) / BASELINE_TRIALS * TRIALS
    print(
        f"baseline (scipy, one trial at a time, {BASELINE_TRIALS} trials scaled): {t_base:6.1f} s   "
        f"ours is ×{t_base / t_spec:.0f} faster"
    )

    t = time.perf_counter()
    d = design_spectra(study)
    t_design = time.perf_counter() - t
    print(
        f"design: {t_design:.2f} s (goal ≤ 10 s)   SE {d.se_target:.3g}, even series {d.se_even:.3g}, "
        f"one wavelength designed alone {to_json(d)['spectra']['se_single_wavelength_design']:.3g}"
    )
    model_check(t_base / TRIALS)


def model_check(per_trial_baseline_s: float) -> None:
    """The model check with whole spectra on the 1:1 example that leaves out ML2 (see the docstring)."""
    from planner.jobs.plan.detection import recipe_detection
    from planner.jobs.spectra.assess import expected_factors
    from planner.jobs.spectra.detection import spectra_detection
    from planner.jobs.spectra.single import single_wavelengths

    trials = 400
    plan = load_plan(ROOT / "examples" / "spectra-ml-check.toml")
    study = compile_study(plan)
    rec = read_recipe_csv(ROOT / "examples" / "spectra-ml-check.csv", plan)
    t = time.perf_counter()
    one = recipe_detection(study, rec, np.random.default_rng(0), trials)[0]
    t_one = time.perf_counter() - t
    sm = spectra_model(study, rec)
    ex = expected(study, rec, sm)
    t = time.perf_counter()
    eligible = single_wavelengths(sm, ex, sm.params.guess).eligible
    rng = np.random.default_rng(0)
    whole = spectra_detection(
        study, rec, sm, ex, rng, trials, above=expected_factors(sm, ex)[1], eligible=eligible
    )
    t_whole = time.perf_counter() - t
    t_base = per_trial_baseline_s * trials
    w = whole[0]
    print(
        f"model check, {trials} experiments: one wavelength {t_one:.2f} s (power {one.power:.0%}); whole "
        f"spectra {t_whole:.2f} s (χ² {w.power:.0%}, factors {w.power_factors:.0%}; best single wavelength "
        f"{w.best_single_wavelength_nm:g} nm {w.power_noise_free_single:.0%})   ratio {t_whole / t_one:.1f}; "
        f"baseline {t_base:.1f} s, ours ×{t_base / t_whole:.0f} faster"
    )
    t = time.perf_counter()
    d = design_spectra(study)
    print(f"design with the model check: {time.perf_counter() - t:.2f} s   {d.model_check.reason}")


if __name__ == "__main__":
    main()
