"""Cramér–Rao and the χ² profile at their edges: too few readings, and constants too strong to measure."""

from __future__ import annotations

import numpy as np

from planner.inference.precision import cramer_rao
from planner.inputs.plan import parse_plan_text
from planner.jobs.plan.assess import assess
from planner.jobs.plan.even import even_series

from ..conftest import scenario_text


def test_fewer_readings_than_parameters_give_no_finite_se():
    # derived: one reading cannot determine two parameters, whatever their Jacobian; the bound is infinite
    J = np.array([[0.3, 2.0e-5]])
    cr = cramer_rao(J, np.array([[1e-6]]))
    assert np.all(np.isinf(cr.se)) and np.all(np.isnan(cr.cov))


def test_two_independent_readings_give_the_inverse_information():
    # derived: for J = I and Σ = diag(σ²) the Cramér–Rao SEs are σ
    cr = cramer_rao(np.eye(2), np.diag([4e-6, 9e-6]))
    np.testing.assert_allclose(cr.se, [2e-3, 3e-3], rtol=1e-12)


def _strong(text: str, log_beta: float) -> str:
    return text.replace("log_beta = 3.30", f"log_beta = {log_beta:.2f}", 1)


def test_a_very_strong_constant_is_bounded_below_not_lost_at_both_ends():
    # derived: at millimolar totals log β = 20 saturates every tube (β·C ≈ 1e17), so the data give only a
    # lower bound; the "K → 0" end must be a constant at which no complex forms (β·C_max ≤ 1e-4), not
    # guess − 10 = 10, which still saturates
    text = scenario_text("teaching")
    assert "log_beta = 3.30" in text
    plan = parse_plan_text(_strong(text, 20.0))
    a = assess(plan, even_series(plan), trials=0)
    assert a.profile is not None
    assert a.profile.high_unbounded and not a.profile.low_unbounded
    assert a.verdict == "bounded" and "lower bound" in a.verdict_reason
    c_max = float(a.state.totals_M.max())
    assert a.profile.log_beta[0] <= -4.0 - np.log10(c_max) + 1e-9


def test_profile_ends_unchanged_for_an_ordinary_constant():
    # the guess ± 10 already spans both limits at these concentrations (log β 3.3, millimolar totals)
    plan = parse_plan_text(scenario_text("teaching"))
    a = assess(plan, even_series(plan), trials=0)
    np.testing.assert_allclose(a.profile.log_beta[[0, -1]], [3.3 - 10.0, 3.3 + 10.0])


def test_low_rank_whitening_is_a_whitening():
    # derived (Woodbury): for Σ = D + S Sᵀ the structured W has WᵀW = Σ⁻¹, and applies to rows and columns
    from planner.inference.precision import Whitening, whitening

    rng = np.random.default_rng(0)
    n, k = 30, 4
    var = rng.uniform(1e-6, 4e-6, n)
    S = rng.normal(0, 1e-3, (n, k))
    cov = np.diag(var) + S @ S.T
    W = Whitening.of(var, S)
    Wd = W.dense()
    np.testing.assert_allclose(Wd.T @ Wd, np.linalg.inv(cov), rtol=1e-8)
    x = rng.normal(size=(5, n))
    np.testing.assert_allclose(x @ W.T, x @ Wd.T, rtol=1e-12)
    J = rng.normal(size=(n, 3))
    np.testing.assert_allclose(W @ J, Wd @ J, rtol=1e-12)
    # the same quadratic forms as the inverse Cholesky factor
    L = whitening(cov)
    np.testing.assert_allclose(np.sum((x @ W.T) ** 2, axis=1), np.sum((x @ L.T) ** 2, axis=1), rtol=1e-9)
