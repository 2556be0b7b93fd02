"""What limits the precision: the shares of Var(log β[target]) by source against a Monte Carlo with one
source at a time, the changes priced by assessing again, and the design's verdict on goal_se.

Plans are the shipped scenarios and invented variants of them.
"""

from __future__ import annotations

import numpy as np
import pytest

from planner.inference.lm import fit_many
from planner.inference.precision import ReadingModel, free_parameters, whitening_of
from planner.inputs.files import write_atomic
from planner.inputs.plan import load_plan, parse_plan_text
from planner.inputs.recipe import concat_recipes
from planner.jobs.compile import compile_study, expected_state
from planner.jobs.plan.assess import assess_study
from planner.jobs.plan.design import design
from planner.jobs.plan.even import even_series, even_series_for
from planner.jobs.plan.limits import target_se
from planner.model.compiled import predict, tube_ions_M
from planner.paper.json_out import to_json
from planner.uncertainty import catalogue
from planner.uncertainty.budget import delivery_sds
from planner.uncertainty.sources import error_sources

from ...conftest import ROOT, run_cli, scenario_text


@pytest.mark.parametrize(
    "plan_path",
    [
        *(ROOT / "planner" / "data" / "scenarios").glob("*.toml"),
        *(ROOT / "examples").glob("*.toml"),
    ],
    ids=lambda p: p.stem,
)
def test_shares_sum_to_one_and_sources_add_up_to_the_budget(plan_path):
    from planner.jobs.titration.titrate import read_points

    plan = load_plan(plan_path)
    study = compile_study(plan)
    csv = plan_path.with_suffix(".csv")
    recipe = read_points(csv, plan, study) if csv.exists() else even_series_for(study, study.tubes)
    a = assess_study(study, recipe, trials=0)
    shares = to_json(a)["error_shares"]
    assert sum(s["share"] for s in shares) == pytest.approx(1.0, abs=1e-6)
    assert [s["share"] for s in shares] == sorted((s["share"] for s in shares), reverse=True)
    assert all(s["share"] >= -1e-12 for s in shares)
    # the sources are a partition of the budget's covariance (GUM §5.1: independent sources add)
    src = error_sources(study.bench, study.model, recipe, a.state, a.budget)
    np.testing.assert_allclose(np.sum([s.cov for s in src], axis=0), a.budget.total, rtol=1e-10, atol=1e-18)


def _simulate_one_source(study, recipe, source: str, k: int | None, rng, T: int) -> np.ndarray:
    """T noise-free-but-one-source experiments: volumes, flask, stock concentration or photometer
    perturbed as the error model states (delivery: random per tube and calibration shared per device)."""
    model, bench = study.model, study.bench
    n, K = recipe.volumes_mL.shape
    V = np.broadcast_to(recipe.volumes_mL, (T, n, K)).copy()
    C = np.broadcast_to(model.stock_conc_M, (T, K, 2)).copy()
    Vtot = np.broadcast_to(recipe.total_volume_mL, (T, n)).copy()
    sds = delivery_sds(bench, recipe)
    if source == "device":
        on = bench.devices.stock_device == k
        z = rng.standard_normal((T, n, K))
        zs = rng.standard_normal((T, 1, 1))
        V = np.where(on & (recipe.volumes_mL > 0), V + sds.random_mL * z + sds.systematic_mL * zs, V)
    elif source == "flask":
        Vtot = Vtot + sds.flask_mL * rng.standard_normal((T, n))
    elif source == "stock":
        C[:, k, :] *= 1.0 + model.stock_conc_rsd[k] * rng.standard_normal((T, 1))
    tot = np.einsum("tnk,tkc->tnc", V, C) / Vtot[..., None]
    st = predict(model, tot, tube_ions_M(model, V, Vtot), warn=False)
    a = st.absorbance
    if source == "photometric":
        a = a + expected_state(model, recipe).absorbance_sd * rng.standard_normal((T, n))
    return a


def _refit(reading: ReadingModel, data: np.ndarray, W):
    """Every simulated experiment fitted at once, weighted as the real fit (the whole budget)."""
    lo, hi = reading.bounds()
    T = data.shape[0]
    guess = np.tile(reading.params.guess, (T, 1))
    return fit_many(reading.f, guess, data, jac=reading.jac, whiten=W, scale_cov=False, lower=lo, upper=hi)


def test_shares_agree_with_a_monte_carlo_one_source_at_a_time():
    # each source's share of Var(log β) against the variance of refits (ε free, as the real fit) of
    # experiments with that one source switched on; and the factor fitting ε costs against the same draws
    # refitted with ε known (held at its true value)
    plan = parse_plan_text(scenario_text("teaching"))
    study = compile_study(plan)
    recipe = even_series(plan)
    a = assess_study(study, recipe, trials=0)
    var = float(a.cramer_rao.se[a.params.target]) ** 2
    shares = {s.source: s for s in a.limits.shares}
    src = error_sources(study.bench, study.model, recipe, a.state, a.budget)
    model = study.model
    W = whitening_of(a.budget)
    state = expected_state(model, recipe)
    ions = tube_ions_M(model, recipe.volumes_mL, recipe.total_volume_mL)
    full = a.params
    reading = ReadingModel(model, full, state.totals_M, ions)
    rng = np.random.default_rng(20)
    T = 3000
    runs = [(s.label, s.kind, s.index) for s in src]
    data = np.concatenate(
        [_simulate_one_source(study, recipe, kind, idx, rng, T) for _, kind, idx in runs], axis=0
    )
    res = _refit(reading, data, W)
    assert res.converged.all()
    est = res.theta[:, full.target].reshape(len(runs), T)
    for (label, _, _), e in zip(runs, est, strict=True):
        want = shares[label].share * var
        # sd of a variance estimate from T normal draws: √(2/T) = 2.6 %; 4 sd, and an absolute floor for
        # the shares that are nearly nothing
        assert np.var(e, ddof=1) == pytest.approx(want, rel=0.11, abs=2e-3 * var), label
    # all sources at once: the whole variance, and the same draws with ε known
    known = free_parameters(
        type(model)(**{**model.__dict__, "epsilon_rsd": np.zeros_like(model.epsilon_rsd)}), "ML"
    )
    reading0 = ReadingModel(model, known, state.totals_M, ions)
    rng_mix = np.random.default_rng(7)
    mix = state.absorbance + sum(
        _simulate_one_source(study, recipe, kind, idx, rng_mix, T) - state.absorbance for _, kind, idx in runs
    )
    r_free, r_known = _refit(reading, mix, W), _refit(reading0, mix, W)
    v_free = np.var(r_free.theta[:, full.target], ddof=1)
    v_known = np.var(r_known.theta[:, known.target], ddof=1)
    assert v_free == pytest.approx(var, rel=0.11)
    assert v_free / v_known == pytest.approx(a.limits.epsilon_factor, rel=0.15)
    assert to_json(a)["epsilon_fitted"]["variance_factor"] == pytest.approx(a.limits.epsilon_factor)


PIPETTE_PLAN = (
    scenario_text("teaching")
    .replace(
        """[[glassware.dispenser]]
kind = "burette"
capacity = "10 mL"
class = "A"
stocks = ["CU", "DY"]""",
        """[[glassware.dispenser]]
kind = "burette"
capacity = "10 mL"
class = "A"
stocks = ["DY"]

[[glassware.dispenser]]
kind = "graduated-pipette"
capacity = "5 mL"
class = "B"
stocks = ["CU"]""",
    )
    .replace("goal_se = 0.05", 'goal_se = 0.05\nfixed = { CU = "0.50 mL" }')
)


def test_a_coarse_pipette_is_named_and_the_better_device_priced_by_assessing_again():
    # the case: a 5 mL pipette delivering 0.5 mL carries most of the variance
    plan = parse_plan_text(PIPETTE_PLAN)
    study = compile_study(plan)
    recipe = even_series_for(study, 8)
    a = assess_study(study, recipe, trials=0, suggest=True)
    top = a.limits.shares[0]
    assert top.kind == "device" and "5 mL" in top.source and top.source.endswith("(CU)")
    dev = [c for c in a.limits.changes if c.kind == "device" and "CU" in c.change]
    assert dev and dev[0].se < a.limits.se
    # priced by assessing again: the plan with that device from the catalogue gives the same SE
    item = next(it for it in catalogue.catalogue() if f"with a {it.label} instead" in dev[0].change)
    text = PIPETTE_PLAN.replace(
        'kind = "graduated-pipette"\ncapacity = "5 mL"\nclass = "B"',
        f'kind = "{item.kind}"\ncapacity = "{item.capacity_mL:g} mL"'
        + (f'\nclass = "{item.cls}"' if item.cls else ""),
    )
    again = assess_study(compile_study(parse_plan_text(text)), recipe, trials=0)
    assert again.target_se == pytest.approx(dev[0].se, rel=1e-9)
    # and the change that helps most is printed by assess
    assert a.limits.best is not None and a.limits.best.se <= dev[0].se


def test_more_tubes_priced_and_the_number_that_reaches_the_goal():
    plan = parse_plan_text(scenario_text("teaching").replace("goal_se = 0.05", "goal_se = 0.02"))
    study = compile_study(plan)
    recipe = even_series_for(study, 8)
    a = assess_study(study, recipe, trials=0, suggest=True)
    tubes = [c for c in a.limits.changes if c.kind == "tubes"]
    assert any("16 tubes (each tube made twice)" in c.change for c in tubes)
    reach = [c for c in tubes if c.se <= 0.02]
    assert reach and set(reach) <= set(a.limits.reaches_goal)
    # the fewest repeats that reach the goal: r repeats do, r − 1 do not (assessed again here)
    r = int(reach[0].change.split()[0]) // 8
    assert target_se(study, recipe) > 0.02
    assert target_se(study, concat_recipes([recipe] * r, [str(i) for i in range(r)])) <= 0.02
    assert target_se(study, concat_recipes([recipe] * (r - 1), [str(i) for i in range(r - 1)])) > 0.02


def test_design_says_when_the_goal_is_out_of_reach_and_exits_1(tmp_path, capsys, monkeypatch):
    text = scenario_text("teaching").replace("goal_se = 0.05", "goal_se = 0.002")
    d = design(parse_plan_text(text), seed=0, check_model=False)
    assert d.verdict == "unresolved" and "misses the goal by ×" in d.verdict_reason
    s = to_json(d)
    assert s["verdict"] == "unresolved" and abs(sum(x["share"] for x in s["error_shares"]) - 1) < 1e-6
    assert "best_change" in s
    path = tmp_path / "p.toml"
    write_atomic(path, text)
    code, out, err = run_cli(capsys, monkeypatch, "design", path)
    assert code == 1, err
    assert "Verdict: unresolved" in out and "misses the goal by ×" in out and "what limits" in out
    code, _, _ = run_cli(capsys, monkeypatch, "design", ROOT / "planner/data/scenarios/teaching.toml")
    assert code == 0
