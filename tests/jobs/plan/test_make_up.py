"""Make-up room under ``make_up = "to-mark"``: the plan key, the design's candidates, the glassware
check and the prep sheet's expected diluent volume (issue 10, item 1)."""

from __future__ import annotations

import numpy as np
import pytest

from planner.inputs.plan import PlanError, parse_plan_text
from planner.inputs.recipe import parse_recipe_csv
from planner.jobs.compile import MAKE_UP_MIN_FRACTION, compile_bench, compile_study
from planner.jobs.plan.candidates import candidate_tubes
from planner.uncertainty.budget import glassware_problems

from ...conftest import scenario_text

# The demo's old designed recipe: T5 holds 0.70 + 9.30 mL in a 10 mL flask, so no diluent fits.
FULL = "tube,CU,DY\nT1,0.70,0.65\nT5,9.30,0.70\n"


def _plan(extra: str = ""):
    text = scenario_text("teaching")
    if extra:
        text = text.replace('rinse = "2 mL"', f'rinse = "2 mL"\n{extra}')
    return parse_plan_text(text)


def test_default_is_five_percent_of_the_tube():
    bench = compile_bench(_plan())
    assert MAKE_UP_MIN_FRACTION == 0.05  # common practice: room to bring the meniscus to the mark
    assert bench.make_up_min_mL == pytest.approx(0.5)  # derived: 5 % of 10 mL
    assert bench.room_mL == pytest.approx(9.5)  # derived


def test_plan_key_is_read_and_checked():
    assert compile_bench(_plan('make_up_min = "1.0 mL"')).make_up_min_mL == pytest.approx(1.0)
    with pytest.raises(PlanError, match="make_up_min"):
        _plan('make_up_min = "12 mL"')


def test_candidates_leave_room_for_the_diluent():
    study = compile_study(_plan('make_up_min = "1.0 mL"'))
    cand = candidate_tubes(study)
    dil = cand.recipe.column(study.bench.diluent_id)
    assert dil.min() >= 1.0 - 1e-9  # derived: 10 mL flask less 9.0 mL dispensed at most
    dispensed = sum(cand.recipe.column(s) for s in study.bench.dispensed_ids(cand.recipe))
    assert np.all(dispensed <= 9.0 + 1e-9)


def test_glassware_check_flags_a_full_flask():
    plan = _plan()
    problems = glassware_problems(compile_bench(plan), parse_recipe_csv(FULL, plan))
    keys = [k for k, _ in problems]
    assert "glassware.make_up_min" in keys
    msg = dict(problems)["glassware.make_up_min"]
    assert "T5" in msg and "T1" not in msg


def test_added_mode_has_no_reserve():
    # every volume is dispensed into the cuvette: nothing is made up to a mark
    from planner.inputs.plan import load_plan

    from ...conftest import ROOT

    bench = compile_bench(load_plan(ROOT / "examples" / "cuvette-1to1.toml"))
    assert bench.make_up == "added" and bench.make_up_min_mL == 0.0 and bench.room_mL == bench.tube_volume_mL


def test_sheet_shows_the_diluent_to_expect():
    from planner.jobs.plan.assess import assess
    from planner.jobs.stocks.needs import stock_needs
    from planner.paper.render import prep_sheet

    plan = _plan()
    rec = parse_recipe_csv("tube,CU,DY\nT1,0.70,0.65\nT2,8.80,0.70\n", plan)
    html = prep_sheet(
        plan, rec, assess(plan, rec, trials=0), stock_needs(plan, rec), fmt="html", date="2026-12-01"
    ).decode()
    assert "BG to the mark /\u00a0mL" in html  # a heading may wrap, never between "/" and its unit
    assert "≈ 8.65" in html and "≈ 0.50" in html  # derived: 10.00 − 0.70 − 0.65; 10.00 − 8.80 − 0.70
    assert "dilute to the mark" not in html
