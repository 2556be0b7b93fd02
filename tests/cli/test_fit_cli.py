"""`kplan fit` exit codes: 0 determined, 1 not determined, 2 bad input."""

from __future__ import annotations

import json

import numpy as np

from planner.inference.simulate import simulate
from planner.inputs.plan import parse_plan_text
from planner.inputs.recipe import make_recipe, recipe_to_csv
from planner.jobs.compile import compile_study

from ..conftest import run_cli, scenario_text
from .test_design_after import run


def _write(tmp_path, log_beta: float, *, held: bool = False):
    text = scenario_text("teaching")
    if held:  # the target's constant held at the guess: only ε(ML) is fitted
        text = text.replace("log_beta_sd = 0.50", "log_beta_sd = 0.0", 1)
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
    assert s["target_fitted"] is True
    assert s["parameters"][0]["profile_ci95"][0] < s["parameters"][0]["estimate"]
    plan, readings = _write(tmp_path, 12.0)
    code, out, _ = run(capsys, monkeypatch, "fit", plan, readings)
    assert code == 1 and "not determined" in out
    code, _, err = run(capsys, monkeypatch, "fit", plan, readings, "--exclude", "T99")
    assert code == 2 and "T99" in err


def test_fit_with_the_target_held_fixed_says_so_and_exits_1(tmp_path, capsys, monkeypatch):
    """A plan that holds the target's log β fixed fits only ε: that is no measurement of K, so the fit
    says so in the text and the JSON and exits 1 (assess calls such a plan unresolved)."""
    plan, readings = _write(tmp_path, 3.3, held=True)
    code, out, err = run_cli(capsys, monkeypatch, "fit", plan, readings, "--json")
    assert code == 1, err
    s = json.loads(out)
    assert s["target_fitted"] is False and s["determined"]
    assert [q["name"] for q in s["parameters"]] == ["epsilon[ML]"]
    code, out, _ = run_cli(capsys, monkeypatch, "fit", plan, readings)
    assert code == 1
    assert "target not fitted" in out and "held at the plan's value 3.30" in out
    assert "species[0].log_beta_sd = 0" in out
