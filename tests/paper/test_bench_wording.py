"""The bench sheet speaks to people at the bench: no plan-file keys, allowances spelled out, complete
stock recipes and charge warnings; the notes for the plan's author go to the report (issue 10, item 3)."""

from __future__ import annotations

import re

import pytest

from planner.inputs.plan import parse_plan_text
from planner.inputs.recipe import parse_recipe_csv
from planner.jobs.demo import demo_recipe_csv
from planner.jobs.plan.assess import assess
from planner.jobs.stocks.needs import stock_needs
from planner.paper import render
from planner.uncertainty.stocks import formula_weight_g_mol

from ..conftest import scenario_text

# plan-file keys that must never reach a bench sheet (they are the report's business)
PLAN_KEYS = ("conc_rsd", "reagent =", "formula =", "on_hand", "make_up_min", "log_beta", "glassware.")


def _sheet_and_report(text: str):
    plan = parse_plan_text(text)
    recipe = parse_recipe_csv(demo_recipe_csv(plan), plan)
    a = assess(plan, recipe, trials=0)
    sheet = render.prep_sheet(plan, recipe, a, stock_needs(plan, recipe), fmt="html", date="2026-12-01")
    rep = render.report(plan, recipe, a, fmt="html", date="2026-12-01")
    return plan, sheet.decode("utf-8"), rep.decode("utf-8")


@pytest.fixture(scope="module")
def low_rsd():
    # conc_rsd below what the weighing gives, a ligand with no reagent named: both need plan edits
    return _sheet_and_report(scenario_text("teaching").replace("conc_rsd = 0.005", "conc_rsd = 0.001"))


def _body(html: str) -> str:
    return re.sub(r"<[^>]+>", " ", html.split("<body", 1)[1])


def test_no_plan_keys_on_the_bench_sheet(low_rsd):
    _, sheet, _ = low_rsd
    body = _body(sheet)
    for key in PLAN_KEYS:
        assert key not in body, key
    assert "u from the plan" not in body and "raise" not in body


def test_those_notes_go_to_the_report(low_rsd):
    _, _, rep = low_rsd
    assert "Notes for the plan&#39;s author" in rep or "Notes for the plan's author" in rep
    assert "raise conc_rsd" in rep and "reagent = " in rep


def test_allowance_is_rinse_plus_dead_volume(low_rsd):
    plan, sheet, _ = low_rsd
    g = plan.glassware
    assert f"+ {g.rinse_mL:.1f} rinse" in sheet and f"+ {g.dead_volume_mL:.1f} dead volume" in sheet


def test_every_stock_has_a_recipe(low_rsd):
    plan, sheet, _ = low_rsd
    body = _body(sheet)
    recipe = parse_recipe_csv(demo_recipe_csv(plan), plan)
    bg = next(n for n in stock_needs(plan, recipe) if n.id == "BG")
    fw = formula_weight_g_mol("KNO3")
    # derived: 0.10 M KNO3 in BG's flask; 70 mM KNO3 beside the copper salt in 100 mL
    assert f"{0.10 * bg.flask_mL / 1000 * fw:.4f} g of KNO₃" in body
    assert f"{0.070 * 0.100 * fw:.4f} g of KNO₃" in body
    assert "deionised water" in body and "not computed" not in body


def test_charge_gap_is_said_at_the_bench():
    text = scenario_text("teaching").replace('ions = { "K+" = "0.070 M", "NO3-" = "0.090 M" }', "")
    _, sheet, rep = _sheet_and_report(text)
    body = _body(sheet)
    assert "do not balance in charge" in body and "NO3-" in body
    assert "add NO3-" in rep


@pytest.mark.parametrize("n", range(3, 9))
def test_footnotes_stay_with_their_tables(n):
    # tables of 3–8 tubes: for some length the table ends at the foot of a page, where its note used
    # to start the next page on its own
    import io

    import pypdf

    plan = parse_plan_text(scenario_text("teaching"))
    recipe = parse_recipe_csv(
        "tube,CU,DY\n" + "".join(f"T{i + 1},0.70,{0.50 + 0.05 * i:.2f}\n" for i in range(n)), plan
    )
    pdf = render.prep_sheet(
        plan, recipe, assess(plan, recipe, trials=0), stock_needs(plan, recipe), date="2026-12-01"
    )
    pages = [re.sub(r"\s+", " ", p.extract_text()) for p in pypdf.PdfReader(io.BytesIO(pdf)).pages]
    for note, last_row in (("Volumes in mL, on a", f"T{n} "), ("Needed: what the tubes take", "BG ")):
        page = next(i for i, t in enumerate(pages) if note in t)
        assert last_row in pages[page].split(note)[0], note  # the table's last row is on the note's page
