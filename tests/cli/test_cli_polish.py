"""What a new user meets on the command line: version, help, warnings from check, piped tables."""

from __future__ import annotations

import subprocess
import sys

from ..conftest import ROOT, scenario_text
from .test_design_after import run


def test_version(capsys, monkeypatch):
    code, out, _ = run(capsys, monkeypatch, "--version")
    assert code == 0 and out.startswith("kplan ")


def test_help_shows_plain_metavars(capsys, monkeypatch):
    code, out, _ = run(capsys, monkeypatch, "assess", "--help")
    assert code == 0 and "INTEGER" in out and "NAME=LOGBETA" in out
    assert "<list" not in out and "<bool>" not in out and "<path>" not in out and "PATH" in out
    code, out, _ = run(capsys, monkeypatch, "--help")  # the app's own options too
    assert code == 0 and "--version" in out and "<bool>" not in out


def test_check_warns_about_a_stock_without_dispenser(tmp_path, capsys, monkeypatch):
    text = scenario_text("teaching").replace('stocks = ["CU", "DY"]', 'stocks = ["CU"]')
    plan = tmp_path / "p.toml"
    plan.write_text(text, encoding="utf-8")
    code, out, _ = run(capsys, monkeypatch, "check", plan)
    assert code == 0 and "no dispenser delivers DY" in out and "plan OK, with the warning" in out


def test_check_shows_a_titration_s_additions_not_tubes(capsys, monkeypatch):
    code, out, _ = run(capsys, monkeypatch, "check", ROOT / "examples/titration-burette.toml")
    flat = " ".join(out.split())
    assert code == 0 and "plan OK" in out
    assert "Titration: 25.00 mL of ZN in the cell, then 12 additions of BQ" in flat
    assert "on a 0.05 mL grid, up to 35.00 mL in the cell" in flat and "stir for 1 min" in flat
    assert "Design: target ML" in flat and "tubes," not in flat and "Tubes:" not in flat
    code, out, _ = run(capsys, monkeypatch, "check", ROOT / "planner/data/scenarios/teaching.toml")
    assert code == 0 and "Design: 8 tubes, target ML" in " ".join(out.split()) and "Titration" not in out


def test_piped_tables_keep_their_names(tmp_path):
    # a file or a pipe gets wide tables, not rich's 80 columns that cut the stock recipes into slivers
    env = {k: v for k, v in __import__("os").environ.items() if k != "COLUMNS"}
    res = subprocess.run(
        [sys.executable, "-m", "planner", "stocks", str(ROOT / "planner/data/scenarios/teaching.toml")],
        capture_output=True,
        text=True,
        env=env,
        check=True,
    )
    assert max(len(line) for line in res.stdout.splitlines()) > 100
    assert "Weigh 0.2440 g of Cu(NO₃)₂·3H₂O" in res.stdout
