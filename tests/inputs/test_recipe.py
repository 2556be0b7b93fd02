"""Recipes: CSV in/out, totals after dilution, clear errors."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from planner.inputs.plan import parse_plan_text
from planner.inputs.recipe import (
    RecipeError,
    make_recipe,
    parse_recipe_csv,
    recipe_to_csv,
    stock_matrix,
    totals_M,
)

from ..conftest import scenario_text  # noqa: E402

CSV = "tube,CU,DY\nT1,1.00,0.50\nT2,1.00,1.25\n"


def test_parse_and_totals(teaching_plan):
    r = parse_recipe_csv(CSV, teaching_plan)
    assert r.tubes == ("T1", "T2")
    np.testing.assert_allclose(r.column("BG"), [8.5, 7.75])  # diluent is the remainder to 10 mL
    tot = totals_M(r, stock_matrix(teaching_plan))
    # derived: c1 V1 = c2 V2 — 1.00 mL of 10 mM in 10 mL is 1.0 mM
    np.testing.assert_allclose(tot[:, 0], [1.0e-3, 1.0e-3], rtol=1e-14)
    np.testing.assert_allclose(tot[:, 1], [0.5e-3, 1.25e-3], rtol=1e-14)


def test_round_trip(teaching_plan):
    r = parse_recipe_csv(CSV, teaching_plan)
    r2 = parse_recipe_csv(recipe_to_csv(r, teaching_plan), teaching_plan)
    np.testing.assert_array_equal(r.volumes_mL, r2.volumes_mL)
    assert r.tubes == r2.tubes


def test_unknown_column(teaching_plan):
    with pytest.raises(RecipeError, match="unknown stock .DX.; did you mean"):
        parse_recipe_csv("tube,CU,DX\nT1,1,1\n", teaching_plan)


def test_negative_volume(teaching_plan):
    with pytest.raises(RecipeError, match="negative volume"):
        parse_recipe_csv("tube,CU,DY\nT1,1,-0.5\n", teaching_plan)


def test_volume_exceeds_tube(teaching_plan):
    with pytest.raises(RecipeError, match="more than the 10 mL tube"):
        parse_recipe_csv("tube,CU,DY\nT1,6,5\n", teaching_plan)


def test_not_a_number(teaching_plan):
    with pytest.raises(RecipeError, match="line 2, DY"):
        parse_recipe_csv("tube,CU,DY\nT1,1,abc\n", teaching_plan)


def test_header_must_start_with_tube(teaching_plan):
    with pytest.raises(RecipeError, match="first column must be 'tube'"):
        parse_recipe_csv("CU,DY\n1,1\n", teaching_plan)


@settings(max_examples=50, deadline=None)
@given(st.lists(st.tuples(st.floats(0, 5), st.floats(0, 5)), min_size=1, max_size=12))
def test_dilution_is_exact(vols):
    teaching_plan = parse_plan_text(scenario_text("teaching"))
    v = np.array(vols)
    r = make_recipe(teaching_plan, {"CU": v[:, 0], "DY": v[:, 1]})
    tot = totals_M(r, stock_matrix(teaching_plan))
    # c1·V1 = c2·V2 for each stock, tube volume constant under to-mark
    np.testing.assert_allclose(tot[:, 0] * 10.0, 0.010 * v[:, 0], rtol=1e-13, atol=1e-18)
    np.testing.assert_allclose(tot[:, 1] * 10.0, 0.010 * v[:, 1], rtol=1e-13, atol=1e-18)
    assert np.all(r.volumes_mL >= 0)
    np.testing.assert_allclose(r.volumes_mL.sum(axis=1), 10.0, rtol=1e-12)


# -- CSV edge cases: see the rules in planner.inputs.recipe's docstring ---------------------------------
def test_quoted_label_with_comma_round_trips(teaching_plan):
    r = parse_recipe_csv('tube,CU,DY\n"P,3",1.00,0.50\n', teaching_plan)
    assert r.tubes == ("P,3",)
    text = recipe_to_csv(r, teaching_plan)
    assert '"P,3"' in text
    assert parse_recipe_csv(text, teaching_plan).tubes == ("P,3",)


def test_hash_label_below_header_is_a_tube_comments_above_are_comments(teaching_plan):
    text = "# made for the teaching lab\n\n#,another comment\ntube,CU,DY\n#3,1.00,0.50\nT4,1.00,1.00\n"
    r = parse_recipe_csv(text, teaching_plan)
    assert r.tubes == ("#3", "T4")


def test_byte_order_mark_and_crlf(teaching_plan):
    r = parse_recipe_csv("\ufefftube,CU,DY\r\nT1,1.00,0.50\r\n", teaching_plan)
    assert r.tubes == ("T1",)


def test_diluent_column_under_to_mark_is_checked(teaching_plan):
    r = parse_recipe_csv("tube,CU,DY,BG\nT1,1.00,0.50,8.50\n", teaching_plan)  # 10 - 1.5 = 8.5: consistent
    np.testing.assert_allclose(r.column("BG"), [8.5])
    with pytest.raises(RecipeError, match="under make_up = 'to-mark' the diluent") as exc:
        parse_recipe_csv("tube,CU,DY,BG\nT1,1.00,0.50,8.00\n", teaching_plan)
    assert exc.value.key == "tube T1, BG" and "8.5 mL" in exc.value.message


def test_only_tube_column(teaching_plan):
    with pytest.raises(RecipeError, match="only a 'tube' column: add one column per dispensed stock"):
        parse_recipe_csv("tube\nT1\n", teaching_plan)


def test_volume_cells_are_plain_decimals(teaching_plan):
    for cell in ("nan", "inf", "1_0", "0x1", "1,5"):
        with pytest.raises(RecipeError, match="is not a volume in mL"):
            parse_recipe_csv(f'tube,CU,DY\nT1,1.00,"{cell}"\n', teaching_plan)
    r = parse_recipe_csv("tube,CU,DY\nT1,+1.0e0,.5\n", teaching_plan)
    np.testing.assert_allclose(r.column("DY"), [0.5])


def test_row_limit(teaching_plan):
    from planner.inputs.recipe import MAX_ROWS

    rows = "".join(f"T{i},1.00,0.50\n" for i in range(MAX_ROWS))
    assert parse_recipe_csv("tube,CU,DY\n" + rows, teaching_plan).n_tubes == MAX_ROWS
    with pytest.raises(RecipeError, match=f"more than {MAX_ROWS} tubes"):
        parse_recipe_csv("tube,CU,DY\n" + rows + "X,1,1\n", teaching_plan)
