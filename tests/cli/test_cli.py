"""The command line as a user meets it: exit codes, one-line errors, files written atomically."""

from __future__ import annotations

import json
import os
import re
import sys
from pathlib import Path

import pytest

from planner import cli
from planner.inputs.files import OutputError, write_atomic

from ..conftest import ROOT
from ..conftest import run_cli as run


def test_help(capsys, monkeypatch):
    code, out, _ = run(capsys, monkeypatch, "--help")
    assert code == 0 and "assess" in out and "demo" in out


def test_every_command_module_is_named_in_commands():
    """A command module left out of COMMANDS would never be registered."""
    from planner.cli import COMMANDS

    cli_dir = ROOT / "planner" / "cli"
    with_command = {f.stem for f in cli_dir.glob("*.py") if "@app.command" in f.read_text(encoding="utf-8")}
    assert with_command == set(COMMANDS)


def test_fresh_process_registers_what_the_line_needs(tmp_path):
    """In a fresh interpreter (as installed), help lists every command in alphabetical order, a command
    named on the line runs with only its own module registered, and a misspelt name gets typer's
    suggestion from the whole list."""
    import subprocess
    import sys

    from planner.cli import COMMANDS

    def kplan(*args):
        env = {**os.environ, "COLUMNS": "200"}
        return subprocess.run(
            [sys.executable, "-m", "planner", *args], capture_output=True, text=True, cwd=tmp_path, env=env
        )

    shown = kplan("--help").stdout.split("Commands", 1)[1]
    listed = [m.group(1) for m in re.finditer(r"^│ (\w+)  ", shown, flags=re.M)]
    assert listed == sorted(COMMANDS)
    sub = kplan("check", "--help")
    assert sub.returncode == 0 and "Validate a plan" in sub.stdout
    typo = kplan("chek")
    assert typo.returncode == 2 and "Did you mean 'check'" in typo.stderr


def test_demo_writes_files(tmp_path, capsys, monkeypatch):
    code, out, err = run(capsys, monkeypatch, "demo", "--out", tmp_path / "d")
    assert code == 0, err
    for name in (
        "plan.toml",
        "recipe.csv",
        "recipe-even.csv",
        "design.json",
        "assessment.json",
        "prep.pdf",
        "report.pdf",
    ):
        assert (tmp_path / "d" / name).is_file()
    data = json.loads((tmp_path / "d" / "assessment.json").read_text())
    assert data["tubes"] and data["verdict"] in ("resolved", "bounded", "unresolved")
    assert "Wrote" in out
    # the whole-spectrum example only on request, and the output says how to ask
    assert not list((tmp_path / "d").glob("spectra-*")) and "kplan demo --spectra" in out


def test_demo_with_spectra_plans_assesses_and_fits_whole_spectra(tmp_path, capsys, monkeypatch):
    code, out, err = run(capsys, monkeypatch, "demo", "--out", tmp_path / "d", "--spectra")
    assert code == 0, err
    d = tmp_path / "d"
    for name in ("spectra-plan.toml", "spectra-recipe.csv", "spectra-readings.csv", "spectra-report.pdf"):
        assert (d / name).is_file(), name
    a = json.loads((d / "spectra-assessment.json").read_text())
    assert a["verdict"] in ("resolved", "bounded", "unresolved") and a["spectra"]["wavelengths"] > 1
    f = json.loads((d / "spectra-fit.json").read_text())
    assert f["parameters"] and f["target_fitted"]
    assert "Whole spectra" in out and "kplan demo --spectra" not in out


def test_new_then_check(tmp_path, capsys, monkeypatch):
    for name in cli.SCENARIOS:
        path = tmp_path / f"{name}.toml"
        code, out, err = run(capsys, monkeypatch, "new", path, "--scenario", name)
        assert code == 0, err
        code, out, err = run(capsys, monkeypatch, "check", path)
        assert code == 0 and "plan OK" in out, err
    code, _, err = run(capsys, monkeypatch, "new", tmp_path / "teaching.toml")
    assert code == 2 and "exists" in err


def test_new_unknown_scenario(tmp_path, capsys, monkeypatch):
    code, _, err = run(capsys, monkeypatch, "new", tmp_path / "x.toml", "--scenario", "nope")
    assert code == 2 and "unknown scenario" in err and not (tmp_path / "x.toml").exists()


@pytest.mark.parametrize(
    "old,new,needle",
    [
        ("wavelength_nm = 580", "wavelength_nm = = 580", "TOML syntax error"),
        ('conc = { M = "10.0 mM" }', 'conc = { M = "10.0 mQ" }', "stock[0].conc.M"),
        ('stocks = ["CU", "DY"]', 'stocks = ["CU", "DX"]', "glassware.dispenser[0].stocks[1]"),
        ("wavelength_nm = 580", "wavelenght_nm = 580\nwavelength_nm = 580", "did you mean 'wavelength_nm'"),
    ],
)
def test_bad_plan_one_line_exit_2(tmp_path, capsys, monkeypatch, teaching_text, old, new, needle):
    plan = tmp_path / "bad.toml"
    plan.write_text(teaching_text.replace(old, new))
    code, out, err = run(capsys, monkeypatch, "check", plan)
    assert code == 2
    assert needle in err and "Traceback" not in err and len(err.strip().splitlines()) <= 3


def test_assess_json(tmp_path, capsys, monkeypatch):
    code, out, err = run(
        capsys,
        monkeypatch,
        "assess",
        ROOT / "examples" / "cuvette-1to1.toml",
        ROOT / "examples" / "cuvette-1to1.csv",
        "--json",
        "--trials",
        "100",
    )
    data = json.loads(out)
    assert code == (0 if data["verdict"] == "resolved" else 1), err  # 1: the recipe does not resolve K
    assert {"title", "verdict", "parameters", "tubes", "checks"} <= data.keys()


def test_assess_bad_recipe(tmp_path, capsys, monkeypatch):
    bad = tmp_path / "r.csv"
    bad.write_text("tube,CU,DX\nT1,1,1\n")
    code, _, err = run(capsys, monkeypatch, "assess", ROOT / "planner/data/scenarios/teaching.toml", bad)
    assert code == 2 and "unknown stock 'DX'" in err


def test_assess_bad_at(capsys, monkeypatch, tmp_path):
    code, _, err = run(
        capsys,
        monkeypatch,
        "assess",
        ROOT / "examples/cuvette-1to1.toml",
        ROOT / "examples/cuvette-1to1.csv",
        "--at",
        "MX=3",
    )
    assert code == 2 and "unknown species 'MX'" in err
    code, _, err = run(
        capsys,
        monkeypatch,
        "assess",
        ROOT / "examples/cuvette-1to1.toml",
        ROOT / "examples/cuvette-1to1.csv",
        "--at",
        "ML",
    )
    assert code == 2 and "NAME=LOGBETA" in err


def test_stocks_command(capsys, monkeypatch):
    code, out, err = run(capsys, monkeypatch, "stocks", ROOT / "planner/data/scenarios/teaching.toml")
    assert code == 0, err
    assert "Cu(NO₃)₂·3H₂O" in out and "Weigh" in out and "KNO₃" in out  # every solute, as on the prep sheet


def test_atomic_write_leaves_nothing_on_failure(tmp_path, monkeypatch):
    target = tmp_path / "out.txt"
    target.write_text("old")

    def boom(*a, **k):
        raise OSError("disk full")

    monkeypatch.setattr("planner.inputs.files.os.replace", boom)
    with pytest.raises(OutputError, match="disk full"):
        write_atomic(target, "new")
    assert target.read_text() == "old"
    assert [p.name for p in tmp_path.iterdir()] == ["out.txt"]


def test_module_entry_point():
    import subprocess

    res = subprocess.run(
        [sys.executable, "-m", "planner", "--help"], capture_output=True, text=True, timeout=120
    )
    assert res.returncode == 0 and "kplan" in res.stdout.lower() or "Usage" in res.stdout


def test_examples_are_checked_and_assessed(capsys, monkeypatch):
    plans = sorted((ROOT / "examples").glob("*.toml"))
    assert len(plans) >= 3
    for p in plans:
        csv = p.with_suffix(".csv")
        code, out, err = run(capsys, monkeypatch, "assess", p, csv, "--trials", "100", "--json")
        data = json.loads(out)
        # exit 0 when the recipe resolves K, 1 when it does not (unresolved or bounded), never 2 here
        assert code == (0 if data["verdict"] in ("resolved", None) else 1), (p, err)
        lines = [ln for ln in Path(csv).read_text().strip().splitlines() if not ln.startswith("#")]
        assert len(data["tubes"]) == len(lines) - 1


def test_fit_command(tmp_path, capsys, monkeypatch):
    csv = tmp_path / "readings.csv"
    csv.write_text(
        "tube,CU,DY,absorbance\nT1,1.00,0.50,0.290\nT2,1.00,1.00,0.452\nT3,1.00,1.50,0.560\n"
        "T4,1.00,2.00,0.629\nT5,1.00,3.00,0.712\nT6,1.00,4.00,0.760\n"
    )
    code, out, err = run(
        capsys, monkeypatch, "fit", ROOT / "planner/data/scenarios/teaching.toml", csv, "--json"
    )
    assert code == 0, err
    data = json.loads(out)
    assert data["parameters"][0]["name"] == "log_beta[ML]" and data["dof"] == 4
    assert 2.5 < data["parameters"][0]["estimate"] < 4.5


def test_sheet_and_report_commands(tmp_path, capsys, monkeypatch):
    from planner.paper.render import PAPERS

    assert tuple(PAPERS) == cli.PAPER_CHOICES
    plan = ROOT / "planner/data/scenarios/teaching.toml"
    rec = tmp_path / "r.csv"
    rec.write_text("tube,CU,DY\nT1,1.00,0.50\nT2,1.00,1.00\nT3,1.00,2.00\nT4,1.00,3.00\n")
    code, out, err = run(
        capsys, monkeypatch, "sheet", plan, rec, "--out", tmp_path / "prep.pdf", "--trials", "100"
    )
    assert code == 0, err
    assert (tmp_path / "prep.pdf").read_bytes()[:5] == b"%PDF-"
    code, out, err = run(
        capsys,
        monkeypatch,
        "report",
        plan,
        rec,
        "--out",
        tmp_path / "rep.html",
        "--html",
        "--trials",
        "100",
        "--paper",
        "Letter",
    )
    assert code == 0, err
    assert "<html" in (tmp_path / "rep.html").read_text().lower()
    code, _, err = run(capsys, monkeypatch, "sheet", plan, rec, "--paper", "A5", "--out", tmp_path / "x.pdf")
    assert code == 2 and "A5" in err and not (tmp_path / "x.pdf").exists()


def test_sheet_refuses_undeliverable_volumes(tmp_path, capsys, monkeypatch):
    plan = ROOT / "planner/data/scenarios/teaching.toml"
    rec = tmp_path / "r.csv"
    rec.write_text("tube,CU,DY\nT1,1.00,0.52\n")
    code, _, err = run(capsys, monkeypatch, "sheet", plan, rec, "--out", tmp_path / "prep.pdf")
    assert code == 2 and "grid" in err and not (tmp_path / "prep.pdf").exists()


def test_bare_command_prints_help(capsys, monkeypatch):
    code, out, err = run(capsys, monkeypatch)
    assert code == 2 and "assess" in out and "Traceback" not in err


def test_usage_error_is_one_line(capsys, monkeypatch):
    code, _, err = run(capsys, monkeypatch, "design", ROOT / "examples/cuvette-1to1.toml", "--tubes", "0")
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert code == 2 and len(lines) == 1 and "--tubes" in lines[0] and "kplan design --help" in lines[0]
