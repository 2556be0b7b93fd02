"""Error budget: analytic derivatives, the propagated covariance against Monte Carlo, glassware checks."""

from __future__ import annotations

import numpy as np
import pytest

from planner.inference.simulate import simulate
from planner.inputs.plan import parse_plan_text
from planner.inputs.recipe import RecipeError, make_recipe, parse_recipe_csv
from planner.jobs.compile import build_model, compile_bench, error_budget, expected_state
from planner.jobs.plan.even import even_series
from planner.model.compiled import predict
from planner.model.jacobians import absorbance_derivatives
from planner.uncertainty.budget import glassware_problems, require_glassware_fits

from ..conftest import scenario_text


def _fd_check(plan):
    model = build_model(plan)
    r = even_series(plan)
    st = expected_state(model, r)
    der = absorbance_derivatives(model, st)
    tot = st.totals_M
    for c in range(2):
        h = 1e-6 * np.maximum(tot[:, c], 1e-9)
        up, dn = tot.copy(), tot.copy()
        up[:, c] += h
        dn[:, c] -= h
        num = (predict(model, up).absorbance - predict(model, dn).absorbance) / (2 * h)
        np.testing.assert_allclose(der.dA_dtotals[:, c], num, rtol=2e-5, atol=1e-6 * np.abs(num).max())
    for j in range(len(model.species)):
        up, dn = model.log_beta.copy(), model.log_beta.copy()
        up[j] += 1e-6
        dn[j] -= 1e-6
        num = (
            predict(model, tot, log_beta=up).absorbance - predict(model, tot, log_beta=dn).absorbance
        ) / 2e-6
        np.testing.assert_allclose(der.dA_dlog_beta[:, j], num, rtol=2e-5, atol=1e-9)
    for j in range(len(model.absorbers)):
        h = 1e-4 * max(model.epsilon_M_cm[j], 1.0)
        up, dn = model.epsilon_M_cm.copy(), model.epsilon_M_cm.copy()
        up[j] += h
        dn[j] -= h
        a_up = predict(model, tot, epsilon_M_cm=up).absorbance
        num = (a_up - predict(model, tot, epsilon_M_cm=dn).absorbance) / (2 * h)
        # derived: the speciation does not depend on ε, so the only error of this central difference is
        # the rounding of A itself, about 2 ulp(A) / 2h; for a species at 1e-10 M (free metal under a
        # strong complex) that floor is 1e-3 of the derivative, far above any fixed atol like 1e-12
        rounding = 4 * np.finfo(float).eps * np.abs(a_up).max() / (2 * h)
        np.testing.assert_allclose(der.dA_depsilon[:, j], num, rtol=1e-6, atol=rounding)


def test_derivatives_match_finite_differences(any_scenario):
    # derived: central differences of the full model (speciation + Beer–Lambert + stray light)
    _fd_check(any_scenario)


def test_parts_add_up(teaching_plan):
    model = build_model(teaching_plan)
    r = even_series(teaching_plan)
    st = expected_state(model, r)
    b = error_budget(teaching_plan, model, r, st)
    parts = b.sd_parts()
    np.testing.assert_allclose(sum(v**2 for v in parts.values()), np.diag(b.total), rtol=1e-12)
    assert all(np.all(v >= 0) for v in parts.values())
    # stock errors are systematic: one stock at a time gives perfectly correlated tubes (rank one)
    assert np.linalg.matrix_rank(b.stock, tol=1e-12 * np.abs(b.stock).max()) <= len(teaching_plan.stock)


def _exaggerated(text: str) -> str:
    # larger but still linear-regime errors make the Monte-Carlo comparison sharper
    return text.replace("conc_rsd = 0.005", "conc_rsd = 0.02").replace("conc_rsd = 0.01", "conc_rsd = 0.03")


@pytest.mark.parametrize("name", ["teaching", "stepwise"])
def test_covariance_against_monte_carlo(name):
    # derived: the linearised covariance (GUM §5) must match the sample covariance of simulated
    # experiments within sampling error (sd of a variance estimate ≈ var·√(2/T))
    plan = parse_plan_text(_exaggerated(scenario_text(name)))
    model = build_model(plan)
    r = even_series(plan)
    st = expected_state(model, r)
    dev = compile_bench(plan)
    b = error_budget(plan, model, r, st, dev.devices)
    T = 40000
    sim = simulate(dev, model, r, np.random.default_rng(7), T)
    S = np.cov(sim.absorbance, rowvar=False)
    C = b.total
    rel = np.diag(S) / np.diag(C)
    assert np.all(np.abs(rel - 1) < 5 * np.sqrt(2 / T) + 0.01), rel
    sd = np.sqrt(np.diag(C))
    corr_pred = C / np.outer(sd, sd)
    sds = np.sqrt(np.diag(S))
    corr_mc = S / np.outer(sds, sds)
    np.testing.assert_allclose(corr_mc, corr_pred, atol=0.03)
    # and the mean reading is unbiased to first order
    np.testing.assert_allclose(
        sim.absorbance.mean(axis=0), st.absorbance, atol=5 * sd.max() / np.sqrt(T) + 1e-3
    )


def test_monte_carlo_parts_separately(teaching_plan):
    model = build_model(teaching_plan)
    r = even_series(teaching_plan)
    st = expected_state(model, r)
    dev = compile_bench(teaching_plan)
    b = error_budget(teaching_plan, model, r, st, dev.devices)
    T = 40000
    only_stock = simulate(dev, model, r, np.random.default_rng(1), T, photometric=False, delivery=False)
    np.testing.assert_allclose(np.var(only_stock.absorbance, axis=0), np.diag(b.stock), rtol=0.05)
    only_delivery = simulate(dev, model, r, np.random.default_rng(2), T, photometric=False, stock=False)
    np.testing.assert_allclose(np.var(only_delivery.absorbance, axis=0), np.diag(b.delivery), rtol=0.05)


def test_same_seed_same_experiments(teaching_plan):
    model = build_model(teaching_plan)
    r = even_series(teaching_plan)
    dev = compile_bench(teaching_plan)
    a = simulate(dev, model, r, np.random.default_rng(3), 50).absorbance
    b = simulate(dev, model, r, np.random.default_rng(3), 50).absorbance
    np.testing.assert_array_equal(a, b)


def test_glassware_problems(teaching_plan):
    r = parse_recipe_csv("tube,CU,DY\nT1,1.00,0.52\nT2,0.20,1.00\nT3,1.00,1.00\n", teaching_plan)
    probs = dict(glassware_problems(compile_bench(teaching_plan), r))
    assert "off the 0.05 mL grid in T1" in probs["stock DY"]
    assert "below min_volume" in probs["stock CU"]
    with pytest.raises(RecipeError):
        require_glassware_fits(compile_bench(teaching_plan), r)
    ok = parse_recipe_csv("tube,CU,DY\nT1,1.00,0.50\n", teaching_plan)
    assert glassware_problems(compile_bench(teaching_plan), ok) == []


def test_capacity_and_missing_dispenser(teaching_text):
    plan = parse_plan_text(teaching_text.replace('stocks = ["CU", "DY"]', 'stocks = ["CU"]'))
    r = make_recipe(plan, {"CU": np.array([1.0]), "DY": np.array([1.0])})
    probs = dict(glassware_problems(compile_bench(plan), r))
    assert "no dispenser" in probs["stock DY"]
    small = parse_plan_text(
        teaching_text.replace(
            'kind = "burette"\ncapacity = "10 mL"', 'kind = "graduated-pipette"\ncapacity = "1 mL"'
        )
    )
    r2 = make_recipe(small, {"CU": np.array([1.0]), "DY": np.array([2.0])})
    probs2 = dict(glassware_problems(compile_bench(small), r2))
    assert "more than" in probs2["stock DY"] and "stock CU" not in probs2
