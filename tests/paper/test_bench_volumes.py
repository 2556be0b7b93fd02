"""Volumes at the bench (issue 20, item 0): every volume is printed with the decimals its grid needs, so the
text read back is the recipe's volume, and the sheets say what each dispenser is read to."""

from __future__ import annotations

import re
from types import SimpleNamespace

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from planner.inputs.plan import parse_plan_text
from planner.inputs.recipe import parse_recipe_csv
from planner.jobs.plan.assess import assess
from planner.jobs.stocks.needs import stock_needs
from planner.paper import fmt
from planner.paper.bench_volumes import grid_finer_than_reading, reading_note
from planner.paper.cards import cards_context
from planner.paper.sheets import prep_context
from planner.uncertainty.delivery import snap_to_grid, volume_grid

from ..conftest import ROOT, run_cli, scenario_text

# grid steps from 1 µL to 1 mL, the decimal ones a plan or a dispenser uses [common practice]
STEPS = (0.001, 0.002, 0.0025, 0.005, 0.01, 0.02, 0.025, 0.05, 0.1, 0.125, 0.2, 0.25, 0.5, 1.0)


@pytest.mark.parametrize(
    ("step", "decimals"),
    [(0.25, 2), (0.05, 2), (0.001, 3), (0.2, 1), (1.0, 0), (0.125, 3), (0.0025, 4), (0.5, 1), (2.0, 0)],
)
def test_decimals_are_those_of_the_step(step, decimals):
    # derived: every multiple k·step has at most the step's own decimals, and the step needs all of them
    assert fmt.step_decimals(step) == decimals


def test_the_reported_rounding_is_gone():
    # issue 20: on a 0.25 mL grid 0.75 printed as "0.8", 1.25 as "1.2", 8.75 as "8.8"
    assert [fmt.volume(v, 0.25) for v in (0.75, 1.25, 8.75, 3.0)] == ["0.75", "1.25", "8.75", "3.00"]


@pytest.mark.parametrize("step", STEPS)
def test_every_grid_volume_reads_back(step):
    # every volume of a 10 mL tube's grid, from the same integer × step construction the design uses
    grid = volume_grid(0.0, 10.0, step)
    texts = [fmt.volume(v, step) for v in grid]
    np.testing.assert_array_equal(np.array([float(t) for t in texts]), grid)
    decimals = {len(t.partition(".")[2]) for t in texts}
    assert decimals == {fmt.step_decimals(step)}  # one column, one number of decimals


@settings(max_examples=300, deadline=None)
@given(k=st.integers(0, 100_000), step=st.sampled_from(STEPS), drift=st.floats(-1e-12, 1e-12))
def test_volumes_with_float_drift_read_back(k, step, drift):
    # volumes that went through arithmetic (a sum of aliquots, 0.1 + 0.2) still print as the grid volume
    v = float(snap_to_grid(k * step, step)) + drift
    assert abs(float(fmt.volume(v, step)) - v) < 1e-9


def test_an_off_grid_volume_is_not_rounded_onto_the_grid():
    # a user's recipe may be off the grid (the glassware check says so): the sheet must not hide it
    assert fmt.volume(0.333, 0.01) == "0.333"


# --------------------------------------------------------------------------------------------------
# the printed sheets, cards, design table and titration sheet
# --------------------------------------------------------------------------------------------------
def _plan_on_grid(step: float):
    text = scenario_text("teaching").replace('step = "0.05 mL"', f'step = "{step} mL"')
    text = text.replace('min_volume = "0.50 mL"', 'min_volume = "0"')
    return parse_plan_text(text)


def _grid_recipe(plan, step: float, rng):
    room = plan.glassware.tube_volume_mL * 0.9
    k = rng.integers(1, int(round(room / 2 / step)), size=(6, 2))
    v = snap_to_grid(k * step, step)
    rows = "".join(f"T{i + 1},{float(a)!r},{float(b)!r}\n" for i, (a, b) in enumerate(v))
    return parse_recipe_csv("tube,CU,DY\n" + rows, plan)


@pytest.mark.parametrize("step", (0.001, 0.005, 0.025, 0.05, 0.125, 0.25, 0.5, 1.0))
def test_prep_sheet_and_cards_volumes_read_back(step):
    plan = _plan_on_grid(step)
    recipe = _grid_recipe(plan, step, np.random.default_rng(int(step * 1000)))
    a = assess(plan, recipe, trials=0, precision=False)
    ctx = prep_context(plan, recipe, a, stock_needs(plan, recipe), date="2026-12-01", paper="A4")
    cols = ctx["columns"]
    for i, row in enumerate(ctx["rows"]):
        for sid, cell in zip(cols, row["cells"], strict=True):
            v = recipe.column(sid)[i]
            assert (cell == "—") if v == 0 else float(cell) == pytest.approx(v, abs=1e-12), (step, cell, v)
        assert float(row["makeup"]) == pytest.approx(recipe.column("BG")[i], abs=1e-9)  # the diluent's share
    drafts = [SimpleNamespace(student="S01", name="A. Student", section="A", bench="1", recipe=recipe)]
    card = cards_context(plan, drafts)
    for i, row in enumerate(card["cards"][0]["rows"]):
        for sid, cell in zip(card["seq"], row["cells"], strict=True):
            v = recipe.column(sid)[i]
            assert (cell == "—") if v == 0 else float(cell) == pytest.approx(v, abs=1e-12)
    # the note under the table: the grid as it is, and the burette's reading from its real graduation
    assert f"on a {fmt.volume(step, step)} mL grid" in ctx["reading_note"]
    assert "read the class A 10 mL burette (marks every 0.05 mL) to 0.01 mL" in ctx["reading_note"]
    assert ctx["reading_note"] == card["reading_note"]


def test_sheet_html_shows_the_volumes_as_the_recipe_has_them():
    from planner.paper import render

    plan = _plan_on_grid(0.25)
    recipe = parse_recipe_csv("tube,CU,DY\nT1,0.75,1.25\nT2,1.25,7.75\nT3,3.25,0.25\n", plan)
    a = assess(plan, recipe, trials=0)
    html = render.prep_sheet(plan, recipe, a, stock_needs(plan, recipe), fmt="html", date="2026-12-01")
    body = re.sub(r"\s+", " ", re.sub(r"<[^>]+>", " ", html.decode("utf-8").split("<body", 1)[1]))
    for row in ("T1 1.25 0.75", "T2 7.75 1.25", "T3 0.25 3.25"):  # the sheet's order: ligand, then metal
        assert row in body, row
    assert "read to 0.2 mL" not in body and " 0.8 " not in body


def test_design_table_prints_the_grid_volumes(capsys, monkeypatch, tmp_path):
    plan = tmp_path / "plan.toml"
    plan.write_text(
        scenario_text("teaching").replace('step = "0.05 mL"', 'step = "0.25 mL"'), encoding="utf-8"
    )
    code, out, err = run_cli(capsys, monkeypatch, "design", plan, "--out", tmp_path / "d", "--seed", "1")
    assert code in (0, 1), err
    written = parse_recipe_csv(
        (tmp_path / "d" / "recipe.csv").read_text(encoding="utf-8"), parse_plan_text(plan.read_text("utf-8"))
    )
    rows = {m.group(1): m.group(2, 3) for m in re.finditer(r"│\s+(T\d+) │\s+([\d.]+) │\s+([\d.]+) │", out)}
    assert len(rows) == written.n_tubes
    for i, tube in enumerate(written.tubes):
        cu, dy = rows[tube]
        assert float(cu) == written.column("CU")[i] and float(dy) == written.column("DY")[i]
        assert len(cu.partition(".")[2]) == 2 and len(dy.partition(".")[2]) == 2
    assert "1 tubes" not in out


def test_titration_sheets_print_the_schedule_as_designed():
    from planner.inputs.plan import load_plan
    from planner.jobs.compile import compile_study
    from planner.jobs.plan.assess import assess_study
    from planner.jobs.titration.titrate import read_points
    from planner.paper.titration_sheet import titration_context

    for name, unit in (("titration-cuvette", 1000.0), ("titration-burette", 1.0)):
        path = ROOT / "examples" / f"{name}.toml"
        plan = load_plan(path)
        study = compile_study(plan)
        rec = read_points(path.with_suffix(".csv"), plan, study)
        a = assess_study(study, rec, trials=0, profile_chi2=False, model_check=False)
        ctx = titration_context(plan, rec, a, date="2026-12-01", paper="A4")
        added = rec.volumes_mL[:, rec.stock_ids.index(plan.titration.titrant)]
        portions = np.diff(np.concatenate([[0.0], added]))
        assert ctx["unit"] == ("µL" if unit == 1000.0 else "mL")
        for row, v, p in zip(ctx["rows"], added, portions, strict=True):
            assert float(row["added"]) / unit == pytest.approx(v, abs=1e-12)
            assert float(row["aliquot"]) / unit == pytest.approx(p, abs=1e-12)
            assert float(row["cell"]) == pytest.approx(plan.titration.start_volume_mL + v, abs=1e-12)
    # the burette is read along the titration: the sheet says so, and how finely it is read
    assert "read it (marks every 0.05 mL) to 0.01 mL" in " ".join(ctx["steps"])
    assert ctx["added_head"].startswith("Added so far (reading")


def test_a_grid_finer_than_the_burette_reads_is_named(capsys, monkeypatch, tmp_path):
    text = scenario_text("teaching").replace('step = "0.05 mL"', 'step = "0.005 mL"')
    plan = parse_plan_text(text)
    assert grid_finer_than_reading(plan) == [("class A 10 mL burette", 0.005, pytest.approx(0.01))]
    path = tmp_path / "plan.toml"
    path.write_text(text, encoding="utf-8")
    code, out, _ = run_cli(capsys, monkeypatch, "check", path)
    assert code == 0 and "finer than the class A 10 mL burette is read (0.01 mL)" in out
    # a stated graduation changes what the sheet says the burette is read to
    text2 = text.replace(
        'class = "A"\nstocks = ["CU", "DY"]', 'class = "A"\ngraduation = "0.02 mL"\nstocks = ["CU", "DY"]'
    )
    assert text2 != text
    note = reading_note(parse_plan_text(text2), ["CU"])
    assert "marks every 0.02 mL) to 0.004 mL" in note
