"""Benchmark: the whole Monte-Carlo assessment path of a plan, against one-by-one scipy fits.

Scenario: the built-in teaching scenario and its evenly spaced 8-tube recipe. 10,000 whole experiments
are simulated (stock errors once per experiment, deliveries per tube, photometric noise per reading) and
fitted by planner.inference.lm.fit_many with the full-covariance weighting, through the same code
`kplan assess` runs. The baseline fits 200 of the same simulated experiments one at a time with
scipy.optimize.least_squares (method "lm") on the same model functions, in the same run. Prints the
time per fit for both, the ratio, and the largest difference in fitted log K on the common 200.

Run: python benchmarks/assess_pipeline.py
"""

from __future__ import annotations

import time
from importlib import resources

import numpy as np
from scipy.optimize import least_squares

from planner.inference.lm import fit_many
from planner.inference.precision import ReadingModel, whitening
from planner.inference.simulate import simulate
from planner.inputs.plan import parse_plan_text
from planner.jobs.compile import compile_study, expected_state
from planner.jobs.plan.even import even_series
from planner.model.compiled import tube_ions_M
from planner.uncertainty.budget import error_budget


def main(n_trials: int = 10000, n_baseline: int = 200) -> None:
    text = resources.files("planner.data").joinpath("scenarios", "teaching.toml").read_text(encoding="utf-8")
    plan = parse_plan_text(text)
    study = compile_study(plan)
    model, params, bench = study.model, study.params, study.bench
    recipe = even_series(plan)
    state = expected_state(model, recipe)
    W = whitening(error_budget(bench, model, recipe, state).total)
    ions = tube_ions_M(model, recipe.volumes_mL, recipe.total_volume_mL)
    reading = ReadingModel(model, params, state.totals_M, ions)
    sim = simulate(bench, model, recipe, np.random.default_rng(1), n_trials)
    lo, hi = reading.bounds()

    t0 = time.perf_counter()
    res = fit_many(
        reading.f,
        params.guess,
        sim.absorbance,
        jac=reading.jac,
        whiten=W,
        scale_cov=False,
        lower=lo,
        upper=hi,
        rowwise=reading.rowwise,  # as monte_carlo passes it: every trial reads the same tubes
    )
    t_ours = (time.perf_counter() - t0) / n_trials

    est = np.empty((n_baseline, params.size))
    t0 = time.perf_counter()
    for i in range(n_baseline):  # the plain baseline: one problem at a time
        y = sim.absorbance[i]
        r = least_squares(
            lambda th, y=y: W @ (reading.f(th[None, :])[0] - y),
            params.guess,
            jac=lambda th: W @ reading.jac(th[None, :])[0],
            method="lm",
        )
        est[i] = r.x
    t_base = (time.perf_counter() - t0) / n_baseline
    t = params.target
    diff = np.max(np.abs(res.theta[:n_baseline, t] - est[:, t]))
    print(
        f"{n_trials} experiments: vectorised {t_ours * 1e6:.1f} µs/fit ({t_ours * n_trials:.2f} s total, "
        f"{res.converged.mean():.1%} converged); scipy one by one {t_base * 1e6:.0f} µs/fit; "
        f"ratio {t_base / t_ours:.0f}×; max |Δ log K| on the common {n_baseline}: {diff:.1e}"
    )


if __name__ == "__main__":
    main()
