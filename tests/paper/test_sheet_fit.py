"""Wide tables fit the page (planner.paper.render.fit_layout): every column of the prep sheet's tube table
and of the report's recipe lies inside the page box — for every example at A4 and Letter, and for plans with
many stocks (smaller type, a landscape page, a split table) — checked on WeasyPrint's laid-out boxes."""

from __future__ import annotations

import pytest

from planner.inputs.plan import load_plan, parse_plan_text
from planner.inputs.recipe import parse_recipe_csv
from planner.jobs.plan.assess import assess
from planner.jobs.stocks.needs import stock_needs
from planner.paper import render
from planner.paper.sheets import prep_context, report_context

from ..conftest import ROOT

SHEETS = [p for p in sorted((ROOT / "examples").glob("*.toml")) if "titration" not in p.stem]
DATE = "2026-12-01"


def _fitted(doc) -> list[dict]:
    """Every table marked data-fit, with its page: the page area, the cells' boxes, its class and headings."""
    out = []
    for page in doc.pages:
        pb = page._page_box
        left, right = pb.content_box_x(), pb.content_box_x() + pb.width
        for b in pb.descendants():
            el = getattr(b, "element", None)
            if el is None or el.get("data-fit") is None or type(b).__name__ != "TableBox":
                continue
            cells = [c for c in b.descendants() if type(c).__name__ == "TableCellBox"]
            heads = [c for c in cells if c.element_tag == "th"]
            text = [" ".join(t.text for t in h.descendants() if type(t).__name__ == "TextBox") for h in heads]
            out.append(
                {
                    "left": left,
                    "right": right,
                    "cells": cells,
                    "class": el.get("class"),
                    "heads": [t.replace("\u00a0", " ") for t in text],
                    "landscape": page.width > page.height,
                }
            )
    return out


def _inside(tables: list[dict]) -> None:
    assert tables, "no table marked data-fit"
    for t in tables:
        for c in t["cells"]:  # every column's every cell, the write-in boxes included
            assert c.border_box_x() >= t["left"] - 0.5
            assert c.border_box_x() + c.border_width() <= t["right"] + 0.5, (t["class"], t["heads"])


def _layouts(plan, recipe, paper: str):
    a = assess(plan, recipe, trials=0)
    needs = stock_needs(plan, recipe)
    sheet = render.fit_layout(
        "prep_sheet.html.j2", prep_context(plan, recipe, a, needs, date=DATE, paper=paper)
    )
    ctx = report_context(plan, recipe, a, date=DATE, paper=paper, figures=[], design=None, notes=[])
    return sheet, render.fit_layout("report.html.j2", ctx)


@pytest.mark.parametrize("paper", ["A4", "Letter"])
@pytest.mark.parametrize("plan_path", SHEETS, ids=[p.stem for p in SHEETS])
def test_every_example_prints_every_column_at_its_normal_size(plan_path, paper):
    plan = load_plan(plan_path)
    recipe = parse_recipe_csv(plan_path.with_suffix(".csv").read_text(encoding="utf-8"), plan)
    for doc in _layouts(plan, recipe, paper):
        tables = _fitted(doc)
        _inside(tables)
        assert all("dense" not in t["class"] and not t["landscape"] for t in tables)  # wrapped headings do it
        heads = " ".join(h for t in tables for h in t["heads"])
        for sid in recipe.dispensed_ids(plan):
            assert f"{sid} / mL" in heads  # every dispensed stock has its column


def _many_stocks(extra: int):
    """The six-stock example with ``extra`` more ligand stocks (invented), each 0.50 mL in every tube."""
    text = (ROOT / "examples" / "six-stocks.toml").read_text(encoding="utf-8")
    ids = [f"DY{i + 2}" for i in range(extra)]
    block = "".join(
        f'[[stock]]\nid = "{sid}"\nlabel = "dye ligand Dy, {c} mM"\nconc = {{ L = "{c} mM" }}\n'
        f'ions = {{ "Na+" = "{c} mM" }}\nconc_rsd = 0.01\non_hand = "200 mL"\n\n'
        for sid, c in zip(ids, range(6, 6 + 3 * extra, 3), strict=True)
    )
    text = text.replace('[[stock]]\nid = "BG"', block + '[[stock]]\nid = "BG"', 1)
    plan = parse_plan_text(
        text.replace('stocks = ["CU", "CUD", "DY"]', f"stocks = {['CU', 'CUD', 'DY', *ids]}")
    )
    cols = ["CU", "DY", "CUD", "BUF", "SALT", *ids]
    rows = "".join(
        f"T{t + 1}," + ",".join(f"{0.5 + 0.25 * t if c == 'CU' else 0.5:.2f}" for c in cols) + "\n"
        for t in range(8)
    )
    return plan, parse_recipe_csv("tube," + ",".join(cols) + "\n" + rows, plan), cols


@pytest.mark.parametrize(("extra", "paper"), [(3, "Letter"), (10, "A4")])
def test_many_stocks_still_print_every_column(extra, paper):
    plan, recipe, cols = _many_stocks(extra)
    sheet, report = _layouts(plan, recipe, paper)
    for doc in (sheet, report):
        tables = _fitted(doc)
        _inside(tables)
        heads = [h for t in tables for h in t["heads"]]
        for sid in cols:
            assert sum(h == f"{sid} / mL" for h in heads) == 1  # each stock once, in one of the parts
        assert all(t["landscape"] for t in tables)  # too wide for a portrait page, even in smaller type
        if extra == 10:  # 15 stock columns: split, each part with the tubes
            assert len(tables) >= 2 and all(t["heads"][0] == "Tube" for t in tables)
