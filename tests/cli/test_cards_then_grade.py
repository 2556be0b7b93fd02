"""A class from `kplan cards` graded by `kplan grade` against the key it wrote."""

from __future__ import annotations

import csv
import json

from ..conftest import ROOT
from .test_design_after import run

PLAN = ROOT / "planner" / "data" / "scenarios" / "teaching.toml"


def test_cards_key_grades_a_class(tmp_path, capsys, monkeypatch):
    out = tmp_path / "class"
    code, _, err = run(capsys, monkeypatch, "cards", PLAN, "--count", "4", "--out", out, "--seed", "1")
    assert code == 0, err
    rows = list(csv.DictReader((out / "key.csv").open(encoding="utf-8")))
    results = tmp_path / "results.csv"
    with results.open("w", encoding="utf-8") as f:
        f.write("student,tube,absorbance\n")
        for r in rows:  # every student reads what the key expects; S02 forgot the blank (+0.05)
            a = float(r["absorbance"]) + (0.05 if r["student"] == "S02" else 0.0)
            f.write(f"{r['student']},{r['tube']},{a:.4f}\n")
    code, stdout, err = run(capsys, monkeypatch, "grade", PLAN, out, results, "--json")
    assert code == 0, err
    g = json.loads(stdout)
    verdicts = {s["student"]: s["verdict"] for s in g["students"]}
    assert verdicts == {"S01": "ok", "S02": "flagged", "S03": "ok", "S04": "ok"}
    s02 = next(s for s in g["students"] if s["student"] == "S02")
    assert "blank" in s02["explanation"]
    assert (
        abs(g["pooled"]["parameters"][0]["estimate"] - 3.3) < 1e-3
    )  # noise-free readings give the guess back
