"""Every cell of every CSV and XLSX the tool writes is a value, never a formula (source: OWASP, "CSV
Injection": a cell a spreadsheet would evaluate must start with an apostrophe; in XLSX it must be stored
as text), whatever text the plan, the roster or the readings carry."""

from __future__ import annotations

import csv
import io
from dataclasses import replace

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from openpyxl import load_workbook

from planner.inputs.plan import parse_plan_text
from planner.inputs.recipe import make_recipe, recipe_to_csv
from planner.inputs.roster import roster_of_count
from planner.inputs.schedule import Schedule, schedule_to_csv
from planner.inputs.tables import formula_risk
from planner.jobs.classroom.cards import class_set
from planner.jobs.classroom.stock_list import class_stocks
from planner.paper import cards as pc
from planner.paper.grades import grades_csv, grades_xlsx

from ..conftest import scenario_text

# text a spreadsheet would run, mixed with ordinary text and control characters (which XML cannot hold)
HOSTILE = st.one_of(
    st.sampled_from(['=HYPERLINK("http://example.invalid","x")', "=1+2", "@SUM(A1)", "+x", "-1+2", "-0.5"]),
    st.text(alphabet=st.sampled_from(list("=+-@'\t\r\x00\x07 aZ,\"1.")), min_size=1, max_size=12),
)


def csv_cells(text: str) -> list[str]:
    return [c for row in csv.reader(io.StringIO(text)) for c in row]


def assert_csv_values(text: str) -> None:
    for cell in csv_cells(text):
        assert not formula_risk(cell), cell


def assert_xlsx_values(data: bytes) -> None:
    wb = load_workbook(io.BytesIO(data))
    for ws in wb.worksheets:
        for row in ws.iter_rows():
            for cell in row:
                assert cell.data_type != "f", (ws.title, cell.coordinate, cell.value)
                if isinstance(cell.value, str) and formula_risk(cell.value):
                    assert cell.quotePrefix, (ws.title, cell.coordinate, cell.value)


@pytest.fixture(scope="module")
def plan():
    return parse_plan_text(scenario_text("teaching"))


@pytest.fixture(scope="module")
def cset(plan):
    return class_set(plan, roster_of_count(2), tubes=5, seed=0)


@given(st.lists(st.tuples(HOSTILE, HOSTILE, HOSTILE), min_size=2, max_size=2), HOSTILE)
@settings(max_examples=60, deadline=None)
def test_key_and_stock_list_cells_are_values(plan, cset, people, title):
    cards = tuple(
        replace(c, student=s, name=n, section=sec) for c, (s, n, sec) in zip(cset.cards, people, strict=True)
    )
    cs = replace(cset, cards=cards)
    hostile_plan = plan.model_copy(update={"title": title})
    assert_csv_values(pc.key_csv(hostile_plan, cs))
    assert_xlsx_values(pc.key_xlsx(hostile_plan, cs))
    roster = replace(roster_of_count(2), sections=tuple(sec for _, _, sec in people))
    stocks = class_stocks(plan, [c.recipe for c in cs.cards], roster)
    assert_csv_values(pc.stocks_csv(plan, stocks))


@given(st.lists(st.tuples(HOSTILE, HOSTILE, HOSTILE), min_size=1, max_size=3), HOSTILE)
@settings(max_examples=60, deadline=None)
def test_grade_book_cells_are_values(people, parameter):
    students = [
        {
            "student": s,
            "name": n,
            "section": "A",
            "verdict": "flagged",
            "tubes_in_band": 3,
            "tubes": 5,
            "chi2": 12.5,
            "p_value": 0.01,
            "own_fit": {"log_beta": 4.1, "se": 0.2},
            "explanation": e,
            "candidate": e,
            "tubes_in_class_band": 4,
            "judged_against": "class",
            "readings": [
                {
                    "tube": n,
                    "absorbance": 0.5,
                    "expected": 0.4,
                    "band_low": 0.38,
                    "band_high": 0.42,
                    "class_expected": 0.5,
                    "class_band_low": 0.48,
                    "class_band_high": 0.52,
                    "in_class_band": True,
                }
            ],
        }
        for s, n, e in people
    ]
    summary = {
        "students": students,
        "pooled": {
            "parameters": [{"name": parameter, "estimate": 4.0, "se": 0.1, "profile_ci95": [3.8, 4.2]}]
        },
    }
    assert_csv_values(grades_csv(summary))
    assert_xlsx_values(grades_xlsx(summary))


@given(st.lists(HOSTILE, min_size=1, max_size=4, unique=True))
@settings(max_examples=60, deadline=None)
def test_recipe_and_schedule_cells_are_values(plan, labels):
    n = len(labels)
    rec = make_recipe(plan, {"CU": np.full(n, 1.0), "DY": np.full(n, 0.5)}, labels)
    assert_csv_values(recipe_to_csv(rec, plan))
    assert_csv_values(schedule_to_csv(Schedule(tuple(labels), np.full(n, 0.01), np.full(n, -0.002))))


# text a key holds: printable, no control or direction characters, trimmed, not empty
TEXT = st.text(
    alphabet=st.characters(blacklist_categories=("Cc", "Cs", "Cf", "Zl", "Zp"))
    | st.sampled_from(list("=+-@',\"")),
    min_size=1,
    max_size=30,
).filter(lambda s: s == s.strip())


@given(st.lists(st.tuples(TEXT, TEXT, TEXT), min_size=2, max_size=2, unique_by=lambda p: p[0]))
@settings(max_examples=60, deadline=None)
def test_the_key_reads_back_identically(plan, cset, people):
    from planner.inputs.gradebook import parse_key_csv

    cards = tuple(
        replace(c, student=s, name=n, section=sec) for c, (s, n, sec) in zip(cset.cards, people, strict=True)
    )
    back = parse_key_csv(pc.key_csv(plan, replace(cset, cards=cards)), plan)
    assert [(k.student, k.name, k.section) for k in back] == list(people)
    for k, c in zip(back, cards, strict=True):
        assert k.recipe.tubes == c.recipe.tubes
        np.testing.assert_allclose(k.recipe.volumes_mL, c.recipe.volumes_mL, atol=5e-5)
