"""Assessment: precision of log K, identifiability, checks and verdicts, against external results."""

from __future__ import annotations

import math

import numpy as np
import pytest

from planner.inputs.plan import parse_plan_text
from planner.inputs.recipe import make_recipe
from planner.jobs.plan.assess import assess
from planner.jobs.plan.checks import fraction_converted
from planner.jobs.plan.even import even_series
from planner.paper.json_out import to_json

from ...conftest import scenario_text

BASELINE_KEYS = {"title", "verdict", "parameters", "tubes", "checks"}
TUBE_KEYS = {
    "tube",
    "volumes_mL",
    "total_M",
    "species_M",
    "absorbance",
    "absorbance_sd",
    "saturation",
    "ionic_strength_M",
}
PARAM_KEYS = {"name", "guess", "se", "mc_sd", "mc_bias", "mc_ci95"}


def _well_posed_recipe(plan):
    # metal fixed, ligand spread over the binding curve and inside the linear range
    return make_recipe(
        plan, {"CU": np.full(8, 1.0), "DY": np.array([0.5, 0.75, 1.0, 1.5, 2.0, 2.5, 3.0, 3.5])}
    )


def test_summary_has_baseline_keys(teaching_plan):
    a = assess(teaching_plan, _well_posed_recipe(teaching_plan), trials=100, seed=1)
    s = to_json(a)
    assert BASELINE_KEYS <= s.keys()
    assert all(TUBE_KEYS <= t.keys() for t in s["tubes"])
    assert all(PARAM_KEYS <= p.keys() for p in s["parameters"])
    assert {"photometric", "delivery", "stock"} == set(s["tubes"][0]["absorbance_sd_parts"])
    assert s["verdict"] in ("resolved", "bounded", "unresolved")
    assert all(c["status"] in ("pass", "warn", "fail") for c in s["checks"])


def test_monte_carlo_agrees_with_cramer_rao(teaching_plan):
    # source: Cramér–Rao is attained asymptotically by least squares; with a relative SE ≲ 10 % the
    # Monte-Carlo sd should match it (Tellinghuisen 2000, J. Phys. Chem. A 104:2834 — from memory)
    T = 3000
    a = assess(teaching_plan, _well_posed_recipe(teaching_plan), trials=T, seed=11)
    t = a.params.target
    se, sd = a.cramer_rao.se[t], a.mc.sd[t]
    # sampling sd of a sample sd ≈ sd/√(2T) ≈ 1.3 %; allow 4 of those plus a little non-linearity
    assert abs(sd / se - 1) < 4 / math.sqrt(2 * T) + 0.03
    assert abs(a.mc.bias[t]) < 4 * se / math.sqrt(T) + 0.1 * se
    assert a.mc.failed_fraction == 0.0
    assert a.verdict == "resolved"


def test_same_seed_same_assessment(teaching_plan):
    r = _well_posed_recipe(teaching_plan)
    a = to_json(assess(teaching_plan, r, trials=200, seed=5))
    b = to_json(assess(teaching_plan, r, trials=200, seed=5))
    assert a == b


def test_person_1965_weak_binding_only_product_determined(teaching_plan):
    # source: Person 1965, JACS 87:167 — with K·[L] ≪ 1 in every tube only K·ε is determined:
    # |corr(log K, ε)| → 1 and K is not resolved
    r = _well_posed_recipe(teaching_plan)
    a = assess(teaching_plan, r, trials=0, at={"ML": 0.5})  # K = 3 M⁻¹, K·[M] ≈ 0.003
    t = a.params.target
    e = a.params.names.index("epsilon[ML]")
    assert abs(a.cramer_rao.corr[t, e]) > 0.999
    assert a.verdict != "resolved"
    corr = next(c for c in a.checks if c.id == "correlation")
    assert corr.status in ("warn", "fail") and "Person 1965" in corr.message


def test_weber_window_in_units_of_K_times_L():
    # source: Weber 1975 — the 0.2–0.8 saturation window is 0.25 ≤ K[L]free ≤ 4 (derived: s = KL/(1+KL))
    assert fraction_converted(1.0, 0.25) == pytest.approx(0.2)
    assert fraction_converted(1.0, 4.0) == pytest.approx(0.8)


def test_strong_binding_is_only_bounded(teaching_plan):
    # derived: with K → ∞ every tube is at stoichiometric conversion and the data cannot tell K from ∞
    r = _well_posed_recipe(teaching_plan)
    a = assess(teaching_plan, r, trials=0, at={"ML": 9.0})
    assert a.profile.high_unbounded and not a.profile.low_unbounded
    assert a.verdict == "bounded"


def _calibration_plan(analysis: str = "one-to-one"):
    # a hand analysis is planned (the bias of a 'complete conversion' tube is reported only then)
    text = scenario_text("teaching")
    text = text.replace("log_beta = 3.30 ", f"log_beta = {math.log10(140.0)!r} ")
    text = text.replace('conc = { M = "10.0 mM" }', 'conc = { M = "1.000 M" }')
    text = text.replace('conc = { L = "10.0 mM" }', 'conc = { L = "1.00 mM" }')
    text = text.replace("goal_se = 0.05", f'goal_se = 0.05\nanalysis = "{analysis}"')
    return parse_plan_text(text)


def test_calibration_tube_fraction_converted():
    # derived from the 1:1 closed form: K = 140 M⁻¹ with 0.10 M free metal converts
    # K[M]/(1 + K[M]) = 14/15 of the ligand, not all of it
    plan = _calibration_plan()
    L0 = 1e-4
    M0 = 0.1 + L0 * 14 / 15  # total metal that leaves exactly 0.10 M free
    r = make_recipe(plan, {"CU": np.array([0.01, M0 * 10.0]), "DY": np.array([1.0, 1.0])})
    a = assess(plan, r, trials=0, precision=False)
    frac = a.state.species_M[1, 0] / a.state.totals_M[1, 1]
    assert frac == pytest.approx(14 / 15, rel=1e-10)
    conv = next(c for c in a.checks if c.id == "conversion")
    assert conv.status == "fail" and "93.3% converted" in conv.message
    # 99 % needs K·x = 99 free: x = 99/140 = 0.707 M (plus the bound share) [derived]
    assert "0.707 M" in conv.message


def test_calibration_bias_limit():
    # derived: when the other tubes are barely complexed, K_hand = [ML]/(f·M0·L0) → K/f, so the bias of
    # the 'complete conversion' hand analysis tends to 1/f − 1 = 1/14 = +7.1 % for f = 14/15
    plan = _calibration_plan()
    L0 = 1e-4
    M0 = 0.1 + L0 * 14 / 15
    r = make_recipe(plan, {"CU": np.array([1e-5 * 10 / 1.0, M0 * 10.0]), "DY": np.array([1.0, 1.0])})
    a = assess(plan, r, trials=0, precision=False)
    conv = next(c for c in a.checks if c.id == "conversion")
    bias = float(conv.message.split(" and K by ")[1].split("%")[0]) / 100
    assert bias == pytest.approx(1 / 14, abs=0.0006)


def test_double_reciprocal_excess(teaching_text):
    plan = parse_plan_text(
        teaching_text.replace('criterion = "target"', 'criterion = "target"\nanalysis = "double-reciprocal"')
    )
    a = assess(plan, even_series(plan), trials=0, precision=False)
    dr = next(c for c in a.checks if c.id == "double-reciprocal")
    # source: Wang & Yu 2007 — about 100× excess is needed, not 10×
    assert dr.status == "fail" and "100×" in dr.message


def test_second_complex_share():
    plan = parse_plan_text(
        scenario_text("stepwise").replace('criterion = "all"', 'criterion = "all"\nanalysis = "one-to-one"')
    )
    a = assess(plan, even_series(plan), trials=0, precision=False)
    sc = next(c for c in a.checks if c.id == "second-complex")
    assert sc.status in ("warn", "fail") and "ML2" in sc.message


def test_hydrolysis_and_protonation_reported():
    plan = parse_plan_text(scenario_text("proton"))
    a = assess(plan, even_series(plan), trials=0, precision=False)
    ids = {c.id: c for c in a.checks}
    assert ids["hydrolysis"].status == "pass"
    assert "protonated" in ids["protonation"].message


def test_at_changes_the_truth(teaching_plan):
    r = _well_posed_recipe(teaching_plan)
    a = assess(teaching_plan, r, trials=0, at={"ML": 4.3})
    assert a.parameters[0].true == 4.3 and a.parameters[0].guess == 3.3


def test_stock_budget_shortfall(teaching_text):
    plan = parse_plan_text(
        teaching_text.replace('on_hand = "100 mL"\nreagent = "copper', 'on_hand = "5 mL"\nreagent = "copper')
    )
    a = assess(plan, even_series(plan), trials=0, precision=False)
    sb = next(c for c in a.checks if c.id == "stock-budget")
    assert sb.status == "fail" and "CU" in sb.message


def test_too_few_tubes_is_unresolved_not_a_crash(teaching_plan):
    r = make_recipe(teaching_plan, {"CU": np.array([1.0]), "DY": np.array([1.0])})
    a = assess(teaching_plan, r, trials=100)
    assert a.verdict == "unresolved" and "add tubes" in a.verdict_reason


def test_without_the_shares_the_same_verdict_checks_and_numbers(teaching_plan):
    # the class set's cards skip what limits the precision (no card prints it): everything else is the
    # assessment's own
    recipe = _well_posed_recipe(teaching_plan)
    full = assess(teaching_plan, recipe, trials=0, model_check=False)
    lean = assess(teaching_plan, recipe, trials=0, model_check=False, shares=False)
    assert full.limits is not None and lean.limits is None
    assert (lean.verdict, lean.verdict_reason) == (full.verdict, full.verdict_reason)
    assert [(c.id, c.status, c.message) for c in lean.checks] == [
        (c.id, c.status, c.message) for c in full.checks
    ]
    assert lean.target_se == full.target_se
    assert np.array_equal(lean.absorbance_sd, full.absorbance_sd)
