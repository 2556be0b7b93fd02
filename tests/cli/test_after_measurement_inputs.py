"""Hard inputs after the measurement (issue 22): `kplan grade` and `kplan design --after` refuse numbers
that are not readings as `kplan fit` does, refuse --after on a titration plan, print output paths as
text, and leave no partial files."""

from __future__ import annotations

import json

import numpy as np
import pytest

from planner.inputs.plan import parse_plan_text
from planner.inputs.readings import readings_to_csv
from planner.jobs.classroom.practice import key_cards, simulate_class, student_recipes, world
from planner.jobs.compile import compile_study
from planner.jobs.plan.even import even_series_for

from ..conftest import ROOT, run_cli, scenario_text
from ..jobs.classroom.test_grade import _key_csv, _results_csv


@pytest.fixture
def graded_class(tmp_path):
    text = scenario_text("teaching")
    study = compile_study(parse_plan_text(text))
    rng = np.random.default_rng(9)
    ids = [f"S{k}" for k in range(6)]
    cards = key_cards(study, student_recipes(even_series_for(study, 8), study, 6, rng), ids)
    results, _ = simulate_class(study, cards, {}, rng, truth=world(study, rng, log_beta_shift=0.1))
    (tmp_path / "plan.toml").write_text(text, encoding="utf-8")
    (tmp_path / "key").mkdir()
    (tmp_path / "key" / "key.csv").write_text(_key_csv(cards), encoding="utf-8")
    return tmp_path, results


def _one_line_exit_2(code, out, err):
    assert code == 2, (out, err)
    assert len(err.strip().splitlines()) == 1 and "Traceback" not in err


@pytest.mark.parametrize("bad", ["1e308", "-1e308", "inf", "nan"])
def test_grade_refuses_numbers_that_are_not_readings(graded_class, capsys, monkeypatch, bad):
    tmp, results = graded_class
    results["S2"]["T4"] = 0.0  # replaced in the text below
    text = _results_csv(results).replace("S2,T4,0.0000", f"S2,T4,{bad}")
    (tmp / "results.csv").write_text(text, encoding="utf-8")
    code, out, err = run_cli(
        capsys, monkeypatch, "grade", tmp / "plan.toml", tmp / "key", tmp / "results.csv", "--out", tmp / "g"
    )
    _one_line_exit_2(code, out, err)
    assert not (tmp / "g").exists() or not any((tmp / "g").iterdir())  # no partial files


def test_grade_prints_an_output_path_with_markup_as_text(graded_class, capsys, monkeypatch):
    tmp, results = graded_class
    (tmp / "results.csv").write_text(_results_csv(results), encoding="utf-8")
    out_dir = tmp / "g[/]"
    code, out, err = run_cli(
        capsys,
        monkeypatch,
        "grade",
        tmp / "plan.toml",
        tmp / "key",
        tmp / "results.csv",
        "--out",
        out_dir,
        "--html",
    )
    assert code == 0, err
    assert "g[/]" in out and {p.name for p in out_dir.iterdir()} == {
        "grades.csv",
        "grades.xlsx",
        "grades.html",
    }


def _first_readings(tmp_path, bad: str | None = None):
    text = scenario_text("teaching").replace("goal_se = 0.05", "goal_se = 0.02")
    plan = parse_plan_text(text)
    study = compile_study(plan)
    first = even_series_for(study, 8).take(np.arange(5))
    a = np.array([0.25, 0.45, 0.6, 0.7, 0.78])
    csv_text = readings_to_csv(first, plan, a)
    if bad is not None:
        csv_text = csv_text.replace(",0.6\n", f",{bad}\n")
    (tmp_path / "plan.toml").write_text(text, encoding="utf-8")
    (tmp_path / "first.csv").write_text(csv_text, encoding="utf-8")
    return tmp_path / "plan.toml", tmp_path / "first.csv"


@pytest.mark.parametrize("bad", ["1e308", "-1e308", "55"])
def test_design_after_refuses_numbers_that_are_not_readings(tmp_path, capsys, monkeypatch, bad):
    plan, readings = _first_readings(tmp_path, bad)
    code, out, err = run_cli(
        capsys, monkeypatch, "design", plan, "--after", readings, "--out", tmp_path / "n"
    )
    _one_line_exit_2(code, out, err)
    assert "T3" in err and not (tmp_path / "n").exists()


def test_design_after_on_a_titration_plan_is_refused(tmp_path, capsys, monkeypatch):
    plan = ROOT / "examples" / "titration-cuvette.toml"
    for after in (tmp_path / "missing.csv", ROOT / "examples" / "titration-cuvette.csv"):
        code, out, err = run_cli(capsys, monkeypatch, "design", plan, "--after", after)
        _one_line_exit_2(code, out, err)
        assert "--after" in err and "titration" in err


def test_design_after_writes_the_next_recipe_and_the_template_of_every_tube(tmp_path, capsys, monkeypatch):
    plan, readings = _first_readings(tmp_path)
    code, out, err = run_cli(
        capsys,
        monkeypatch,
        "design",
        plan,
        "--after",
        readings,
        "--tubes",
        "3",
        "--out",
        tmp_path / "n",
        "--json",
    )
    assert code == 0, err
    s = json.loads(out)
    assert s["sequential"]["next_tubes"] == ["T6", "T7", "T8"]
    assert s["se_target"] == pytest.approx(s["sequential"]["se_after"]) and len(s["tubes"]) == 8
    rows = (tmp_path / "n" / "all-readings.csv").read_text(encoding="utf-8").splitlines()
    assert rows[0].endswith(",absorbance") and [r.split(",")[0] for r in rows[1:]] == [
        f"T{k}" for k in range(1, 9)
    ]
    assert [r.endswith(",") for r in rows[1:]] == [False] * 5 + [True] * 3
    filled = "\n".join(rows[:6] + [r + "0.5" for r in rows[6:]]) + "\n"
    (tmp_path / "all.csv").write_text(filled, encoding="utf-8")
    code, out, err = run_cli(capsys, monkeypatch, "fit", plan, tmp_path / "all.csv", "--json")
    assert code in (0, 1) and "tubes" in json.loads(out), err  # one file, all eight tubes
    assert len(json.loads(out)["tubes"]) == 8
