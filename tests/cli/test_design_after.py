"""`kplan design --after READINGS`: the next tubes from the readings so far, through the command line."""

from __future__ import annotations

import json

import numpy as np

from planner.inference.simulate import simulate
from planner.inputs.plan import parse_plan_text
from planner.inputs.recipe import parse_recipe_csv, recipe_to_csv
from planner.jobs.compile import compile_study
from planner.jobs.plan.even import even_series_for

from ..conftest import run_cli as run
from ..conftest import scenario_text


def test_design_after_readings(tmp_path, capsys, monkeypatch):
    text = scenario_text("teaching")
    plan_path = tmp_path / "plan.toml"
    plan_path.write_text(text, encoding="utf-8")
    plan = parse_plan_text(text)
    st = compile_study(plan)
    first = even_series_for(st, 5)
    lb = st.model.log_beta.copy()
    lb[0] = 4.3
    A = simulate(st.bench, st.model, first, np.random.default_rng(1), 1, log_beta=lb).absorbance[0]
    lines = recipe_to_csv(first, plan).splitlines()
    readings = tmp_path / "first.csv"
    readings.write_text(
        "\n".join([lines[0] + ",absorbance"] + [f"{r},{a:.4f}" for r, a in zip(lines[1:], A, strict=True)])
        + "\n",
        encoding="utf-8",
    )
    out_dir = tmp_path / "next"
    code, out, err = run(
        capsys,
        monkeypatch,
        "design",
        plan_path,
        "--after",
        readings,
        "--tubes",
        "4",
        "--json",
        "--out",
        out_dir,
    )
    assert code == 0, err
    summary = json.loads(out)
    seq = summary["sequential"]
    assert seq["tubes_measured"] == 5 and seq["se_after"] < seq["se_now"] and not seq["stop"]
    rec = parse_recipe_csv((out_dir / "recipe.csv").read_text(encoding="utf-8"), plan)
    assert rec.n_tubes == 4
    assert json.loads((out_dir / "design.json").read_text(encoding="utf-8"))["sequential"] == seq


def test_design_after_missing_file(tmp_path, capsys, monkeypatch):
    plan_path = tmp_path / "plan.toml"
    plan_path.write_text(scenario_text("teaching"), encoding="utf-8")
    code, _, err = run(capsys, monkeypatch, "design", plan_path, "--after", tmp_path / "nope.csv")
    assert code == 2 and "not found" in err and len(err.strip().splitlines()) == 1
