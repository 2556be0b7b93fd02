"""Grading a class against the instructor's key (kplan grade)."""

from __future__ import annotations

import csv
import io
import json
import sys

import numpy as np
import pytest

from planner import cli
from planner.inputs.gradebook import parse_key_csv, parse_results_csv
from planner.inputs.plan import parse_plan_text
from planner.inputs.recipe import RecipeError
from planner.jobs.classroom.grade import grade_class
from planner.jobs.classroom.mixup import inject
from planner.jobs.compile import compile_study
from planner.jobs.plan.assess import assess_study
from planner.jobs.plan.even import even_series_for

from ...conftest import scenario_text

KINDS = (None,) * 40 + ("swapped-tubes", "wrong-stock", "blank", "not-made-up")


def make_class(study, plan, kinds, seed=0):
    """A key.csv (as kplan cards writes it: ±2 sd bands of the full budget) and results with injected
    slips."""
    rec = even_series_for(study, 8)
    a = assess_study(study, rec, trials=0, precision=False)
    sd = np.sqrt(np.diag(a.budget.total))
    dispensed = study.bench.dispensed_ids(rec)
    key, res = io.StringIO(), io.StringIO()
    kw, rw = csv.writer(key, lineterminator="\n"), csv.writer(res, lineterminator="\n")
    kw.writerow(["student", "name", "section", "tube", *dispensed, "absorbance", "band_low", "band_high"])
    rw.writerow(["student", "tube", "absorbance"])
    rng = np.random.default_rng(seed)
    for k, kind in enumerate(kinds):
        sid = f"S{k:02d}"
        x, _, _ = inject(study, rec, kind, rng)
        for i, t in enumerate(rec.tubes):
            kw.writerow(
                [
                    sid,
                    f"Student {k}",
                    "A" if k % 2 else "B",
                    t,
                    *(f"{rec.column(s)[i]:.2f}" for s in dispensed),
                    f"{a.state.absorbance[i]:.4f}",
                    f"{a.state.absorbance[i] - 2 * sd[i]:.4f}",
                    f"{a.state.absorbance[i] + 2 * sd[i]:.4f}",
                ]
            )
            rw.writerow([sid, t, f"{x[i]:.4f}"])
    return key.getvalue(), res.getvalue()


@pytest.fixture(scope="module")
def graded():
    plan = parse_plan_text(scenario_text("teaching"))
    study = compile_study(plan)
    key, res = make_class(study, plan, KINDS)
    return study, grade_class(study, parse_key_csv(key, plan), parse_results_csv(res))


def test_pooled_fit_reproduces_the_constant(graded):
    # the readings were simulated at the plan's log β = 3.3 (every error source, seeded)
    study, g = graded
    p = g.summary()["pooled"]["parameters"][0]
    assert p["estimate"] == pytest.approx(3.3, abs=3 * p["se"])
    assert p["profile_ci95"][0] < 3.3 < p["profile_ci95"][1] or abs(p["estimate"] - 3.3) < 3 * p["se"]


def test_slips_are_flagged_and_explained(graded):
    _, g = graded
    by = {s.card.student: s for s in g.students}
    for k, kind in enumerate(KINDS):
        if kind is None:
            continue
        s = by[f"S{k:02d}"]
        assert s.verdict == "flagged", kind
        assert s.diagnosis is not None and s.diagnosis.best is not None and s.diagnosis.best.kind == kind
    clean_flagged = sum(by[f"S{k:02d}"].verdict == "flagged" for k, kind in enumerate(KINDS) if kind is None)
    assert clean_flagged <= 5  # nominal 5 % of 40 is 2; binomial 99th percentile is 6 [derived]
    assert {e[0] for e in g.excluded} >= {f"S{k:02d}" for k, kind in enumerate(KINDS) if kind is not None}


def test_own_fit_where_the_tubes_allow(graded):
    _, g = graded
    own = [s.own for s in g.students if s.verdict == "ok" and s.own is not None]
    assert len(own) >= 30
    est = np.array([o[0] for o in own])
    se = np.array([o[1] for o in own])
    z = (est - 3.3) / se
    assert abs(np.mean(z)) < 0.6 and 0.5 < np.std(z) < 1.6  # the students' own fits scatter as their SEs say


def test_bad_results_are_refused():
    with pytest.raises(RecipeError, match="missing column"):
        parse_results_csv("student,absorbance\nS1,0.3\n")
    with pytest.raises(RecipeError, match="read twice"):
        parse_results_csv("student,tube,absorbance\nS1,T1,0.3\nS1,T1,0.4\n")


def test_grade_command_writes_the_grade_book(tmp_path, capsys, monkeypatch):
    text = scenario_text("teaching")
    plan = parse_plan_text(text)
    key, res = make_class(compile_study(plan), plan, (None,) * 6 + ("blank",), seed=3)
    (tmp_path / "plan.toml").write_text(text, encoding="utf-8")
    keydir = tmp_path / "key"
    keydir.mkdir()
    (keydir / "key.csv").write_text(key, encoding="utf-8")
    (tmp_path / "results.csv").write_text(res, encoding="utf-8")
    outs = []
    for run in range(2):
        monkeypatch.setattr(
            sys,
            "argv",
            [
                "kplan",
                "grade",
                str(tmp_path / "plan.toml"),
                str(keydir),
                str(tmp_path / "results.csv"),
                "--json",
                "--out",
                str(tmp_path / f"o{run}"),
                "--html",
            ],
        )
        try:
            cli.main()
        except SystemExit as exc:
            assert not exc.code
        outs.append(json.loads(capsys.readouterr().out))
    s = outs[0]
    assert [x["verdict"] for x in s["students"]][-1] == "flagged"
    assert "shifted" in s["students"][-1]["explanation"]
    for name in ("grades.csv", "grades.xlsx", "grades.html"):
        assert (tmp_path / "o0" / name).read_bytes() == (tmp_path / "o1" / name).read_bytes(), name
    rows = list(csv.DictReader(io.StringIO((tmp_path / "o0" / "grades.csv").read_text(encoding="utf-8"))))
    assert len(rows) == 7 and rows[-1]["verdict"] == "flagged"
    from openpyxl import load_workbook

    wb = load_workbook(tmp_path / "o0" / "grades.xlsx")
    assert wb["grades"].max_row == 8
