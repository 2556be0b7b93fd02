"""`kplan fit` exit codes: 0 determined, 1 not determined, 2 bad input."""

from __future__ import annotations

import json

import numpy as np

from planner.inference.simulate import simulate
from planner.inputs.plan import parse_plan_text
from planner.inputs.recipe import make_recipe, recipe_to_csv
from planner.jobs.compile import compile_study

from ..conftest import scenario_text
from .test_design_after import run


def _write(tmp_path, log_beta: float):
    text = scenario_text("teaching")
    plan = parse_plan_text(text)
    (tmp_path / "plan.toml").write_text(text, encoding="utf-8")
    r = make_recipe(plan, {"CU": np.full(6, 1.0), "DY": np.array([0.5, 1.0, 1.5, 2.0, 2.5, 3.0])})
    st = compile_study(plan)
    lb = st.model.log_beta.copy()
    lb[0] = log_beta
    a = simulate(st.bench, st.model, r, np.random.default_rng(0), 1, log_beta=lb).absorbance[0]
    lines = recipe_to_csv(r, plan).splitlines()
    path = tmp_path / "readings.csv"
    path.write_text(
        "\n".join([lines[0] + ",absorbance"] + [f"{ln},{x:.4f}" for ln, x in zip(lines[1:], a, strict=True)])
        + "\n",
        encoding="utf-8",
    )
    return tmp_path / "plan.toml", path


def test_fit_exit_codes(tmp_path, capsys, monkeypatch):
    plan, readings = _write(tmp_path, 3.3)
    code, out, err = run(capsys, monkeypatch, "fit", plan, readings, "--json", "--exclude", "T6")
    assert code == 0, err
    s = json.loads(out)
    assert s["determined"] and [e["tube"] for e in s["excluded"]] == ["T6"]
    assert s["parameters"][0]["profile_ci95"][0] < s["parameters"][0]["estimate"]
    plan, readings = _write(tmp_path, 12.0)
    code, out, _ = run(capsys, monkeypatch, "fit", plan, readings)
    assert code == 1 and "not determined" in out
    code, _, err = run(capsys, monkeypatch, "fit", plan, readings, "--exclude", "T99")
    assert code == 2 and "T99" in err
