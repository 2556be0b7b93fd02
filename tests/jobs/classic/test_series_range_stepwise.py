"""Classic series honest before measurement: in range by assess's own screen, and sound on plans with
stepwise complexes (1:1 + 1:2, 2:1, a protonated ligand, a weak 1:1).

Every plan here is an invented scenario (cobalt(II) with an imaginary weak ligand "Pz").
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from scipy.optimize import brentq

from planner.inputs.files import write_atomic
from planner.inputs.plan import load_plan, parse_plan_text
from planner.jobs.classic import common, plan_model, run_series
from planner.jobs.compile import compile_study
from planner.jobs.plan.assess import assess
from planner.jobs.plan.checks import RANGE_RISK, hand_bias, hand_bias_summary
from planner.paper.json_out import to_json

from ...conftest import ROOT, run_cli, scenario_text

SHIPPED = [
    *(ROOT / "planner" / "data" / "scenarios").glob("*.toml"),
    *(p for p in (ROOT / "examples").glob("*.toml") if "titration" not in p.stem),
]

STEPWISE = """
title = "Co(II) with Pz: weak stepwise complexes (invented test scenario)"
[components]
M = {{ label = "Co2+", charge = 2 }}
L = {{ label = "Pz", charge = 0 }}
{components}
[[species]]
name = "ML"
formula = {{ M = 1, L = 1 }}
log_beta = {log_beta}
log_beta_sd = 0.5
{second}
[medium]
activity_model = "none"
[optics]
wavelength_nm = 520
path_cm = 5.0
linear_range = [0.05, 1.0]
noise = {{ k1 = 0.003, k2 = 0.0, k3 = 0.002 }}
[optics.epsilon]
M = {{ value = 5.0, rsd = 0.0 }}
ML = {{ value = 30.0, rsd = 0.3 }}
{second_eps}
[optics.bands]
M = {{ peak_nm = 510, fwhm_nm = 120, epsilon_max = 5.5 }}
ML = {{ peak_nm = 530, fwhm_nm = 130, epsilon_max = 31.0 }}
{second_band}
[[stock]]
id = "CO"
conc = {{ M = "{c_metal}" }}
ions = {{ "Na+" = "0.5 M", "ClO4-" = "0.504 M" }}
conc_rsd = 0.005
[[stock]]
id = "PZ"
conc = {{ L = "{c_ligand}" }}
ions = {{ "Na+" = "0.5 M", "ClO4-" = "0.5 M" }}
conc_rsd = 0.01
[[stock]]
id = "NA"
ions = {{ "Na+" = "0.5 M", "ClO4-" = "0.5 M" }}
diluent = true
[glassware]
tube_volume = "10 mL"
flask = {{ capacity = "10 mL", class = "A" }}
step = "0.05 mL"
min_volume = "0.5 mL"
[[glassware.dispenser]]
kind = "burette"
capacity = "10 mL"
class = "A"
stocks = ["CO", "PZ"]
[design]
tubes = 8
target = "ML"
goal_se = 0.03
"""


def stepwise_text(kind: str, c_metal: str = "2 mM", c_ligand: str = "0.5 M") -> str:
    """ML with a second species: "ML2" (the issue's weak stepwise system, K1 = 100, K2 ≈ 7 L/mol), "M2L",
    "HL" (a protonated ligand at a buffered pH) or "" (a weak 1:1 alone, log β 2.0 ± 0.5)."""
    second = second_eps = second_band = components = ""
    if kind == "ML2":
        second = '[[species]]\nname = "ML2"\nformula = { M = 1, L = 2 }\nlog_beta = 2.85\nlog_beta_sd = 0.6'
        second_eps = "ML2 = { value = 55.0, rsd = 0.3 }"
        second_band = "ML2 = { peak_nm = 560, fwhm_nm = 140, epsilon_max = 60.0 }"
    elif kind == "M2L":
        second = '[[species]]\nname = "M2L"\nformula = { M = 2, L = 1 }\nlog_beta = 3.2\nlog_beta_sd = 0.6'
        second_eps = "M2L = { value = 55.0, rsd = 0.3 }"
        second_band = "M2L = { peak_nm = 560, fwhm_nm = 140, epsilon_max = 60.0 }"
    elif kind == "HL":
        components = "H = { pH = 5.0 }"
        second = '[[species]]\nname = "HL"\nformula = { L = 1, H = 1 }\nlog_beta = 5.2\nlog_beta_sd = 0.0'
    return STEPWISE.format(
        components=components,
        log_beta=2.0,
        second=second,
        second_eps=second_eps,
        second_band=second_band,
        c_metal=c_metal,
        c_ligand=c_ligand,
    )


# -- item 1: in range by assess's own screen ------------------------------------------------------------


# series that cannot apply to a shipped plan's stocks, and why (the message must say so): Job's method needs
# equimolar metal and ligand stocks, and these plans ship unequal ones
CANNOT_APPLY = {
    ("proton", "job"): "equimolar",
    ("stepwise", "job"): "equimolar",
    ("cuvette-1to1", "job"): "equimolar",
    ("proton-competition", "job"): "equimolar",
    ("titration-burette", "job"): "equimolar",
    ("titration-cuvette", "job"): "equimolar",
}
TITRATIONS = sorted((ROOT / "examples").glob("titration-*.toml"))


@pytest.mark.parametrize("plan_path", SHIPPED, ids=[p.stem for p in SHIPPED])
def test_default_series_of_every_shipped_plan_pass_the_linear_range(plan_path):
    # issue 20's check: the default series of every shipped scenario and example pass assess's own
    # linear-range check — or, where the method cannot apply to the plan's stocks, say why and exit 1
    plan = load_plan(plan_path)
    methods = ["job", "mole-ratio", "calibration"] + (["survey"] if plan.optics.bands else [])
    for method in methods:
        r = run_series(plan, method)
        why = CANNOT_APPLY.get((plan_path.stem, method))
        if why is not None:
            assert r.recipe.n_tubes == 0 and r.exit_code == 1
            assert r.checks[0].id == "feasible" and why in r.checks[0].message
            continue
        mine = next(c for c in r.checks if c.id == "linear-range")
        theirs = next(c for c in assess(plan, r.recipe, trials=0).checks if c.id == "linear-range")
        assert mine.status == theirs.status == "pass", (method, mine.message, theirs.message)


@pytest.mark.parametrize("plan_path", TITRATIONS, ids=[p.stem for p in TITRATIONS])
def test_series_on_titration_plans_agree_with_assess_and_say_what_would_keep_them_in_range(plan_path):
    # a titration plan's stocks are made for the cell: a series on them may not stay in range (the
    # 0.2 mM zinc stock reads below 0.02 at the weak end of the guess); it then says what would
    plan = load_plan(plan_path)
    for method in ("mole-ratio", "calibration"):
        r = run_series(plan, method)
        mine = next(c for c in r.checks if c.id == "linear-range")
        theirs = next(c for c in assess(plan, r.recipe, trials=0).checks if c.id == "linear-range")
        assert mine.status == theirs.status, (method, mine.message, theirs.message)
        if mine.status != "pass":
            ways = ("what would", "at least:", "narrower series")
            assert any(k in mine.message for k in ways), mine.message


def test_teaching_job_keeps_nine_points_by_narrowing_the_mole_fractions():
    # 9 mole fractions i/10 at ≥ 0.5 mL each need ≥ 5 mL of the 10 mM stocks (C ≥ 5 mM): the peak would
    # leave the range. The series keeps 9 evenly spaced points over a narrower span at a lower total,
    # its first tube at the least volume, and says why the span is narrower.
    plan = parse_plan_text(scenario_text("teaching"))
    r = run_series(plan, "job")
    s = to_json(r)
    x = np.array([t["mole_fraction"] for t in s["series"]])
    assert r.recipe.n_tubes == 9 and x[0] > 0.1 + 0.01
    assert x == pytest.approx(1 - x[::-1], abs=1e-9)  # symmetric about 1/2
    assert np.diff(x) == pytest.approx(np.full(8, x[1] - x[0]), rel=1e-6)  # evenly spaced
    assert s["mole_fraction_span"] == pytest.approx([x[0], x[-1]])
    assert r.recipe.column("CU")[0] == pytest.approx(plan.glassware.min_volume_mL)
    assert any("instead of the usual 0.10–0.90" in n and "least volume" in n for n in r.notes)
    assert next(c for c in r.checks if c.id == "linear-range").status == "pass"


def test_teaching_job_span_is_the_widest_any_evenly_spaced_series_keeps_in_range():
    # an independent search: every symmetric, evenly spaced 9-point series on the grid (metal volumes
    # a, a + b, …, a + 8b grid steps, the ligand's mirrored) screened by assess's own range screen; none
    # in range spans wider than the series planned (to the 0.01 in mole fraction the choice rounds to)
    plan = parse_plan_text(scenario_text("teaching"))
    r = run_series(plan, "job")
    x_lo = to_json(r)["mole_fraction_span"][0]
    g = plan.glassware
    a, b = np.meshgrid(np.arange(10, 40), np.arange(1, 20), indexing="ij")
    a, b = a.ravel(), b.ravel()
    total = 2 * a + 8 * b
    ok = (total * g.step_mL <= 9.0) & (a >= b)
    a, b, total = a[ok], b[ok], total[ok]
    vm = (a[:, None] + b[:, None] * np.arange(9)) * g.step_mL
    vl = total[:, None] * g.step_mL - vm
    vol, tot = common.fill_volumes(plan, {"CU": vm, "DY": vl})
    worst, _ = common.screen(plan, plan_model(plan), vol, tot)
    inside = worst <= RANGE_RISK + 1e-12
    assert inside.any()
    assert (a / total)[inside].min() >= x_lo - 0.01 - 1e-9


def test_job_says_so_when_five_points_cannot_stay_in_range():
    # a window too narrow for the rise and fall of any 5-point curve: the least risky series is planned,
    # the note says the points could not all stay inside, and the range check says what would
    text = scenario_text("teaching").replace("linear_range = [0.10, 1.00]", "linear_range = [0.45, 0.60]")
    r = run_series(parse_plan_text(text), "job")
    assert any("no series of 9 down to 5 mole fractions can all stay inside" in n for n in r.notes), r.notes
    check = next(c for c in r.checks if c.id == "linear-range")
    assert check.status != "pass" and any(k in check.message for k in ("what would", "at least:", "narrower"))


def test_teaching_mole_ratio_stays_in_range_with_tubes_on_both_sides_of_the_break():
    plan = parse_plan_text(scenario_text("teaching"))
    r = run_series(plan, "mole-ratio")
    s = to_json(r)
    assert next(c for c in r.checks if c.id == "linear-range").status == "pass"
    assert len(s["lines_tubes"]["before"]) >= 2 and len(s["lines_tubes"]["after"]) >= 2
    ratios = np.array([t["ratio"] for t in s["series"]])
    assert np.diff(ratios) == pytest.approx(np.full(9, ratios[1] - ratios[0]), rel=1e-6)
    assert r.recipe.column("DY").min() >= plan.glassware.min_volume_mL - 1e-12
    assert s["ratio_span"] == pytest.approx([ratios[0], ratios[-1]])
    assert any("instead of the usual 0.25–2.5" in n for n in r.notes)


def test_teaching_mole_ratio_is_the_most_concentrated_with_three_tubes_per_line_in_range():
    # an independent search over every fixed volume on the grid and every evenly spaced rising series
    # (first volume a, stride b grid steps): of those in range with three tubes on each hand line none
    # holds more of the fixed metal than the series planned
    plan = parse_plan_text(scenario_text("teaching"))
    r = run_series(plan, "mole-ratio")
    s = to_json(r)
    step = plan.glassware.step_mL
    vf, a, b = np.meshgrid(np.arange(10, 120), np.arange(10, 40), np.arange(1, 12), indexing="ij")
    vf, a, b = (v.ravel() * step for v in (vf, a, b))
    vv = a[:, None] + b[:, None] * np.arange(10)
    ratio = vv / vf[:, None]  # both stocks 10 mM
    lines = np.minimum((ratio <= 0.75 + 1e-9).sum(axis=1), (ratio >= 1.25 - 1e-9).sum(axis=1))
    ok = (vf + vv[:, -1] <= 10.0) & (vv[:, -1] <= 10.0)
    vol, tot = common.fill_volumes(plan, {"CU": np.broadcast_to(vf[ok, None], vv[ok].shape), "DY": vv[ok]})
    worst, _ = common.screen(plan, plan_model(plan), vol, tot)
    inside = worst <= RANGE_RISK + 1e-12
    planned_lines = min(len(s["lines_tubes"]["before"]), len(s["lines_tubes"]["after"]))
    same = inside & (np.minimum(lines[ok], 3) >= min(planned_lines, 3))
    assert same.any()
    assert vf[ok][same].max() <= s["fixed_conc_M"] * 10.0 / 0.010 + 1e-9


@pytest.mark.parametrize("method", ["job", "mole-ratio"])
def test_range_risk_of_the_planned_tubes_against_an_independent_monte_carlo(method):
    # derived: for a 1:1 complex (no activity model, no stray light) [ML] solves the quadratic
    # [ML]² − (M0 + L0 + 1/K)[ML] + M0·L0 = 0, and A = b(ε_ML[ML] + ε_M([M]0 − [ML])). Drawing log β and
    # ε_ML from the guess's normal uncertainty, the share of draws outside the window is each tube's risk;
    # the series (a Gauss–Hermite quadrature with ε entering linearly) keeps it ≤ RANGE_RISK.
    text = stepwise_text("", "10 mM", "10 mM").replace("log_beta = 2.0", "log_beta = 2.3")
    plan = parse_plan_text(text.replace("path_cm = 5.0", "path_cm = 10.0"))
    r = run_series(plan, method)
    assert next(c for c in r.checks if c.id == "linear-range").status == "pass"
    tot = r.assessment.state.totals_M
    rng = np.random.default_rng(20)
    draws = 40_000
    K = 10.0 ** rng.normal(2.3, 0.5, draws)[:, None]
    eps = 30.0 * (1 + 0.3 * rng.normal(size=draws))[:, None]
    M0, L0 = tot[None, :, 0], tot[None, :, 1]
    s = M0 + L0 + 1 / K
    ml = (s - np.sqrt(s * s - 4 * M0 * L0)) / 2
    A = 10.0 * (eps * ml + 5.0 * (M0 - ml))
    risk = ((A < 0.05) | (A > 1.0)).mean(axis=0)
    tol = 3 * np.sqrt(RANGE_RISK * (1 - RANGE_RISK) / draws) + 0.01  # MC noise + quadrature error
    assert risk.max() <= RANGE_RISK + tol, risk
    assert risk.max() > 0.02  # the window binds the series planned: the check is not vacuous


def test_range_check_uses_the_guess_uncertainty_not_only_the_guess():
    # a top reading just under the ceiling at the guess, with ε uncertain by 30 %, may well pass it: the
    # series must warn as assess does (the 1.197 under 1.2 called "pass")
    text = stepwise_text("", c_metal="10 mM", c_ligand="10 mM").replace("path_cm = 5.0", "path_cm = 10.0")
    plan = parse_plan_text(text.replace("log_beta = 2.0", "log_beta = 5.0"))
    r = run_series(plan, "job", total_M=7e-3)  # the peak near the ceiling at the guess
    mine = next(c for c in r.checks if c.id == "linear-range")
    theirs = next(c for c in assess(plan, r.recipe, trials=0).checks if c.id == "linear-range")
    assert mine.status == theirs.status != "pass"


# -- item 2: stepwise plans through every method ------------------------------------------------------


@pytest.mark.parametrize("kind", ["ML2", "M2L", "HL", ""])
def test_stepwise_plans_through_every_series_method(kind, tmp_path, capsys, monkeypatch):
    path = tmp_path / "plan.toml"
    for stocks in (("2 mM", "0.5 M"), ("10 mM", "10 mM")):
        write_atomic(path, stepwise_text(kind, *stocks))
        for args in (
            ["--method", "job"],
            ["--method", "mole-ratio"],
            ["--method", "calibration"],
            ["--method", "calibration", "--limiting", "M"],
            ["--method", "survey"],
        ):
            code, out, err = run_cli(capsys, monkeypatch, "series", path, *args, "--json")
            assert code in (0, 1), (kind, stocks, args, err)
            assert "Traceback" not in err and not err.strip(), err
            data = json.loads(out)
            assert data["answers"] == (code == 0)


def test_calibration_warns_when_the_excess_forms_the_higher_complex():
    plan = parse_plan_text(stepwise_text("ML2", "10 mM", "10 mM"))
    r = run_series(plan, "calibration", limiting="M")
    s = to_json(r)
    other = s["other_complexes"]
    assert other["species"] == ["ML2"]
    check = next(c for c in r.checks if c.id == "other-complexes")
    assert check.status == "warn" and "ML2" in check.message
    # derived: with M limiting at c and L total x, free L solves x = l + c·(β1 l + 2 β2 l²)/(1 + β1 l + β2 l²)
    # and the share of M in ML2 is β2 l²/(1 + β1 l + β2 l²)
    c, x = s["limiting_conc_M"], s["excess_conc_M"]
    b1, b2 = 10.0**2.0, 10.0**2.85

    def balance(lf):
        den = 1 + b1 * lf + b2 * lf**2
        return lf + c * (b1 * lf + 2 * b2 * lf**2) / den - x

    lf = brentq(balance, 0.0, x)
    share = b2 * lf**2 / (1 + b1 * lf + b2 * lf**2)
    assert other["share_at_guess"] == pytest.approx(share, rel=1e-6)
    assert other["share_worst"] >= other["share_at_guess"]


def test_job_and_mole_ratio_say_what_the_second_complex_does():
    plan = parse_plan_text(stepwise_text("ML2", "10 mM", "10 mM"))
    job = run_series(plan, "job")
    ext = next(c for c in job.checks if c.id == "extremum")
    assert "moves with C" in ext.message and "0.333 (1:2)" in ext.message and "0.500 (1:1)" in ext.message
    mr = run_series(plan, "mole-ratio", total_M=2e-3, max_ratio=3.0)
    other = to_json(mr)["other_complexes"]
    # the break "with ML alone" is the break of the same tubes on a plan without ML2 (an independent run)
    alone_text = stepwise_text("", "10 mM", "10 mM")
    alone = run_series(parse_plan_text(alone_text), "mole-ratio", total_M=2e-3, max_ratio=3.0)
    assert other["break_ratio_target_alone"] == pytest.approx(to_json(alone)["break_ratio"], rel=1e-6)
    assert any(c.id == "other-complexes" for c in mr.checks)


# -- item 5: one definition of the hand-analysis bias -----------------------------------------------------


def _nearly_converted_recipe(plan):
    from planner.inputs.recipe import make_recipe

    # a 98 %-converted 'calibration' tube (metal in 40-fold excess) beside tubes up to near saturation
    return make_recipe(
        plan,
        {"CO": np.array([0.5, 1.0, 2.0, 4.0, 9.0]), "PZ": np.array([2.0, 2.0, 2.0, 2.0, 0.225])},
    )


def test_conversion_bias_only_where_a_hand_analysis_is_planned():
    text = stepwise_text("", "10 mM", "10 mM").replace("log_beta = 2.0", "log_beta = 3.95")
    global_fit = parse_plan_text(text)
    conv = next(
        c
        for c in assess(global_fit, _nearly_converted_recipe(global_fit), trials=0).checks
        if c.id == "conversion"
    )
    assert conv.status == "pass" and "bias" not in conv.message and "global" in conv.message
    hand = parse_plan_text(text.replace("goal_se = 0.03", 'goal_se = 0.03\nanalysis = "one-to-one"'))
    a = assess(hand, _nearly_converted_recipe(hand), trials=0)
    conv = next(c for c in a.checks if c.id == "conversion")
    assert conv.status != "pass"
    # the same numbers as the calibration series' definition for this conversion (one definition)
    st = a.state
    f = float(st.species_M[-1, 0] / st.totals_M[-1, 1])
    b = hand_bias_summary(f)
    assert f"K by {b['K_dilute']:+.1%} in dilute tubes" in conv.message
    per = hand_bias(f, st.saturation[:-1])
    finite = per[np.isfinite(per)]
    assert f"{finite.min():+.1%} to {finite.max():+.1%}" in conv.message
    assert all(abs(float(x)) < 10 for x in finite)  # never the +43165 % of a mean over near-saturated tubes


def test_stepwise_study_compiles_for_every_kind():
    for kind in ("ML2", "M2L", "HL", ""):
        assert compile_study(parse_plan_text(stepwise_text(kind))).target == "ML"
