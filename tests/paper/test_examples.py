"""Every shipped example (``examples/*.toml`` with its ``.csv``) goes through assess, the prep sheet
(HTML) and the design report (HTML), and fits its glassware, as a user printing it would need."""

from __future__ import annotations

import pytest
from markupsafe import escape

from planner.inputs.plan import load_plan
from planner.jobs.compile import compile_study
from planner.jobs.plan.assess import assess_study
from planner.jobs.stocks.needs import stock_needs
from planner.jobs.titration.titrate import read_points
from planner.paper import render, safety
from planner.paper.json_out import to_json
from planner.paper.titration_sheet import titration_sheet
from planner.uncertainty.budget import glassware_problems

from ..conftest import ROOT

EXAMPLES = sorted((ROOT / "examples").glob("*.toml"))


def test_examples_are_shipped():
    assert EXAMPLES, "no examples/*.toml found"
    for plan_path in EXAMPLES:
        assert plan_path.with_suffix(".csv").exists(), plan_path.name


@pytest.mark.parametrize("plan_path", EXAMPLES, ids=[p.stem for p in EXAMPLES])
def test_example_assesses_and_prints(plan_path):
    plan = load_plan(plan_path)
    study = compile_study(plan)
    recipe = read_points(plan_path.with_suffix(".csv"), plan, study)  # a recipe, or a titration schedule
    a = assess_study(study, recipe, trials=50, seed=0)
    # the CLI refuses to print a sheet whose volumes the glassware cannot deliver
    assert glassware_problems(a.study.bench, recipe) == [], plan_path.name
    checks = {c["id"]: c["status"] for c in to_json(a)["checks"]}
    assert checks["glassware"] == "pass"
    if plan.titration is not None:
        sheet = titration_sheet(plan, recipe, a, fmt_="html", date="2026-12-01").decode("utf-8")
    else:
        sheet = render.prep_sheet(
            plan, recipe, a, stock_needs(plan, recipe), fmt="html", date="2026-12-01"
        ).decode("utf-8")
    assert str(escape(plan.title)) in sheet and str(escape(safety.ALWAYS)) in sheet  # the safety box stays
    rep = render.report(plan, recipe, a, fmt="html", date="2026-12-01").decode("utf-8")
    assert "<svg" in rep and to_json(a)["verdict"] in rep and str(escape(plan.title)) in rep
