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
from planner.jobs.classic import run_series
from planner.jobs.compile import compile_study
from planner.jobs.plan.assess import assess
from planner.jobs.plan.checks import hand_bias, hand_bias_summary
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


@pytest.mark.parametrize("plan_path", SHIPPED, ids=[p.stem for p in SHIPPED])
def test_default_series_agree_with_assess_on_the_linear_range(plan_path):
    plan = load_plan(plan_path)
    for method in ("job", "mole-ratio", "calibration"):
        r = run_series(plan, method)
        if r.recipe.n_tubes == 0:  # cannot be made from these stocks: says so, and what would
            assert r.checks[0].id == "feasible" and not r.answers
            continue
        mine = next(c for c in r.checks if c.id == "linear-range")
        theirs = next(c for c in assess(plan, r.recipe, trials=0).checks if c.id == "linear-range")
        assert mine.status == theirs.status, (method, mine.message, theirs.message)
        if mine.status != "pass":  # it names the readings and says what would keep them in range
            msg = mine.message
            assert any(k in msg for k in ("what would", "at least:", "narrower series")), msg


def test_teaching_job_default_gives_up_points_to_stay_inside_at_the_guess():
    # 9 mole fractions at ≥ 0.5 mL each need ≥ 4.8 mL of the 10 mM stocks: the peak reads 1.47 (out); the
    # default plans fewer points so that every reading is inside at the guess, and says so
    plan = parse_plan_text(scenario_text("teaching"))
    r = run_series(plan, "job")
    assert r.recipe.n_tubes < 9 and any("cannot all stay inside" in n for n in r.notes)
    assert max(t["absorbance"] for t in to_json(r)["tubes"]) <= 1.0
    assert next(c for c in r.checks if c.id == "linear-range").status in ("pass", "warn")


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
