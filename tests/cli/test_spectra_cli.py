"""The commands on a plan with whole spectra: assess, design, fit (long and wide readings, the report),
new and the bad inputs, each with its exit code."""

from __future__ import annotations

import json
import shutil

import numpy as np

from planner.inputs.plan import load_plan
from planner.inputs.recipe import parse_recipe_csv
from planner.inputs.spectra_readings import spectra_readings_to_csv
from planner.jobs.compile import compile_study
from planner.jobs.spectra.simulated import simulated_spectra

from ..conftest import ROOT, run_cli
from ..jobs.spectra.helpers import DESIGNED

EX = ROOT / "examples"


def _copy(tmp_path):
    for name in ("spectra-ml-ml2.toml", "spectra-ml-ml2.csv", "spectra-ml-ml2-epsilon.csv"):
        shutil.copy(EX / name, tmp_path / name)
    return tmp_path / "spectra-ml-ml2.toml"


def test_assess_json_has_the_spectra_and_the_exit_code(tmp_path, capsys, monkeypatch):
    plan = _copy(tmp_path)
    code, out, err = run_cli(
        capsys, monkeypatch, "assess", plan, tmp_path / "spectra-ml-ml2.csv", "--json", "--trials", "60"
    )
    s = json.loads(out)
    assert s["spectra"]["se_whole_spectrum"] < s["spectra"]["se_best_single_wavelength"]
    assert code == (0 if s["verdict"] == "resolved" else 1)
    code, out, _ = run_cli(
        capsys, monkeypatch, "assess", plan, tmp_path / "spectra-ml-ml2.csv", "--trials", "0"
    )
    assert "best single wavelength" in out and "Where the information" in out


def test_design_writes_its_recipe_and_reports_the_gain(tmp_path, capsys, monkeypatch):
    plan = _copy(tmp_path)
    code, out, err = run_cli(capsys, monkeypatch, "design", plan, "--out", tmp_path / "d", "--json")
    assert code == 0, err
    s = json.loads(out)
    assert s["spectra"]["se_single_wavelength_design"] > s["se_target"]
    assert (tmp_path / "d" / "recipe.csv").exists() and (tmp_path / "d" / "design.json").exists()


def test_fit_reads_wide_and_long_spectra_and_writes_its_report(tmp_path, capsys, monkeypatch):
    plan_path = _copy(tmp_path)
    plan = load_plan(plan_path)
    study = compile_study(plan)
    rec = parse_recipe_csv(DESIGNED, plan)
    data = simulated_spectra(study, rec, np.random.default_rng(4))
    wide = tmp_path / "wide.csv"
    wide.write_text(spectra_readings_to_csv(data, plan), encoding="utf-8")
    code, out, err = run_cli(
        capsys, monkeypatch, "fit", plan_path, wide, "--json", "--report", tmp_path / "f.pdf"
    )
    assert code == 0, err
    s = json.loads(out)
    assert s["determined"] and s["factors"]["significant_indicator"] == s["factors"]["above_noise"]
    assert s["target_fitted"] is True
    assert (tmp_path / "f.pdf").read_bytes()[:4] == b"%PDF"
    long = tmp_path / "long.csv"
    rows = ["tube,wavelength_nm,absorbance"] + [
        f"{t},{w:g},{a:.5f}"
        for i, t in enumerate(data.tubes)
        for w, a in zip(data.wavelength_nm, data.absorbance[i], strict=True)
    ]
    long.write_text("\n".join(rows) + "\n", encoding="utf-8")
    (tmp_path / "rec.csv").write_text(DESIGNED, encoding="utf-8")
    code, out2, err = run_cli(
        capsys, monkeypatch, "fit", plan_path, long, "--recipe", tmp_path / "rec.csv", "--json"
    )
    assert code == 0, err
    assert json.loads(out2)["parameters"][0]["estimate"] == s["parameters"][0]["estimate"]
    # long readings without the recipe: one line, exit 2, nothing written
    code, out3, err = run_cli(capsys, monkeypatch, "fit", plan_path, long, "--report", tmp_path / "g.pdf")
    assert code == 2 and "--recipe" in err and len(err.strip().splitlines()) == 1
    assert not (tmp_path / "g.pdf").exists()


def test_bad_table_and_new_scenario(tmp_path, capsys, monkeypatch):
    plan = _copy(tmp_path)
    (tmp_path / "spectra-ml-ml2-epsilon.csv").write_text("wavelength_nm,ML\n400,1\n400,2\n", encoding="utf-8")
    code, out, err = run_cli(capsys, monkeypatch, "check", plan)
    assert code == 2 and "optics.spectra" in err and len(err.strip().splitlines()) == 1
    (tmp_path / "n").mkdir()
    code, out, err = run_cli(capsys, monkeypatch, "new", tmp_path / "n" / "p.toml", "--scenario", "spectra")
    assert code == 0, err
    assert (tmp_path / "n" / "spectra-ml-ml2-epsilon.csv").exists()
    code, out, err = run_cli(capsys, monkeypatch, "check", tmp_path / "n" / "p.toml")
    assert code == 0 and "Whole spectra" in out


def test_example_and_shipped_scenario_are_the_same():
    data = ROOT / "planner" / "data" / "scenarios"
    assert (data / "spectra.toml").read_text() == (EX / "spectra-ml-ml2.toml").read_text()
    assert (data / "spectra-ml-ml2-epsilon.csv").read_text() == (
        EX / "spectra-ml-ml2-epsilon.csv"
    ).read_text()


def test_fit_of_spectra_with_the_target_held_says_so_and_exits_1(tmp_path, capsys, monkeypatch):
    """Only the spectra and K2 are fitted when the plan holds K1 (the target) fixed: the readings did not
    measure it, so the fit says so and exits 1, as assess calls such a plan unresolved."""
    plan_path = _copy(tmp_path)
    text = plan_path.read_text(encoding="utf-8")
    held = tmp_path / "held.toml"
    held.write_text(text.replace("log_beta_sd = 0.50", "log_beta_sd = 0.0", 1), encoding="utf-8")
    plan = load_plan(held)
    assert plan.species[0].name == plan.target and plan.species[0].log_beta_sd == 0
    study = compile_study(plan)
    data = simulated_spectra(study, parse_recipe_csv(DESIGNED, plan), np.random.default_rng(4))
    wide = tmp_path / "wide.csv"
    wide.write_text(spectra_readings_to_csv(data, plan), encoding="utf-8")
    code, out, err = run_cli(capsys, monkeypatch, "fit", held, wide, "--json")
    s = json.loads(out)
    assert code == 1, err
    assert s["target_fitted"] is False and f"log_beta[{plan.target}]" not in [
        q["name"] for q in s["parameters"]
    ]
    code, out, _ = run_cli(capsys, monkeypatch, "fit", held, wide)
    assert code == 1 and "target not fitted" in out and "held at the plan's value 3.30" in out
