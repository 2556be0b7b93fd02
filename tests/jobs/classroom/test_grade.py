"""Grading a class by consensus (kplan grade): right when the truth is not the guess.

Classes are simulated with every error source: one bottle of each stock for the class (its concentration
error drawn once), each student's own dispensers and readings, at a truth off the plan's guess by up to
the plan's own uncertainty; the key is made at the guess, as kplan cards makes it before the lab.
"""

from __future__ import annotations

import csv
import io
import json
import sys

import numpy as np
import pytest

from planner import cli
from planner.inputs.errors import KplanError
from planner.inputs.gradebook import parse_results_csv
from planner.inputs.plan import parse_plan_text
from planner.inputs.recipe import RecipeError
from planner.jobs.classroom.grade import grade_class
from planner.jobs.classroom.practice import key_cards, simulate_class, student_recipes, world
from planner.jobs.compile import compile_study
from planner.jobs.plan.even import even_series_for

from ...conftest import scenario_text

CLEAN = 100
SLIPS = ("swapped-tubes", "dilute-stock", "not-made-up", "percent-T")
# the truth against the plan's guess (log β 3.30 ± 0.50, ε(ML) 950 ± 30 %): issue 19's four worlds
WORLDS = ((0.0, 1.08), (0.1, 0.92), (0.3, 1.08), (-0.3, 0.92))


def _study():
    return compile_study(parse_plan_text(scenario_text("teaching")))


def _class(study, shift: float, eps: float, seed: int, clean: int = CLEAN, slips=SLIPS):
    rng = np.random.default_rng(seed)
    n = clean + len(slips)
    ids = [f"S{k:03d}" for k in range(n)]
    cards = key_cards(study, student_recipes(even_series_for(study, 8), study, n, rng), ids)
    slipped = dict(zip(ids[clean:], slips, strict=True))
    truth = world(study, rng, log_beta_shift=shift, epsilon_factor=eps)
    results, tags = simulate_class(study, cards, slipped, rng, truth=truth)
    return cards, results, slipped, tags, truth


@pytest.fixture(scope="module")
def classes():
    study = _study()
    out = {}
    for k, (shift, eps) in enumerate(WORLDS):
        cards, results, slipped, tags, truth = _class(study, shift, eps, seed=100 + k)
        out[(shift, eps)] = (grade_class(study, cards, results), slipped, tags, truth)
    return study, out


@pytest.mark.parametrize("world_", WORLDS)
def test_class_constant_is_the_truth_not_the_guess(classes, world_):
    study, out = classes
    g, _, _, truth = out[world_]
    p = g.summary()["pooled"]["parameters"][0]
    assert p["name"] == "log_beta[ML]"
    assert abs(p["estimate"] - truth.log_beta[0]) <= 3 * p["se"]  # within 3 SE [derived: normal, 99.7 %]
    assert p["profile_ci95"][0] < p["estimate"] < p["profile_ci95"][1]
    assert p["guess"] == pytest.approx(3.3) and p["off_by"] == pytest.approx(p["estimate"] - 3.3)
    assert "the plan guessed 3.30" in g.summary()["guess_note"]


def test_each_injected_mixup_is_found(classes):
    # every visible slip (its whitened size ≥ 3: smaller ones hide in the noise, e.g. two tubes swapped
    # that read alike) is flagged, left out of the class's fit and named — or, when the readings still fail
    # χ² at 1 % after it, shown as the candidate (about 1 in 100 true slips [derived]): of the slips over
    # the four worlds at most one may be a candidate only (binomial(16, 0.01): P(≥ 2) = 1.1 % [derived])
    _, out = classes
    named = seen = 0
    for world_, (g, slipped, tags, _) in out.items():
        by = {s.card.student: s for s in g.students}
        for sid, kind in slipped.items():
            tag, size = tags[sid]
            if size < 3.0:
                continue
            seen += 1
            s = by[sid]
            assert s.verdict == "flagged" and sid in {x for x, _ in g.excluded}, (world_, kind)
            d = s.diagnosis
            group = ([d.best] + list(d.ties)) if d.best is not None else [d.candidate]
            want = "wrong-stock" if kind == "dilute-stock" else kind
            assert any(e.kind == want and tag in e.text for e in group), (world_, kind, d.evidence)
            named += d.best is not None
    assert seen >= 4 * len(SLIPS) - 2 and named >= seen - 1


def test_clean_students_are_flagged_at_the_test_level_whatever_the_guess(classes):
    # issue 19: ≤ 7 % of clean students flagged in every world (nominal 5 %). Pooled over the four worlds,
    # 400 clean students: binomial(400, 0.05) has sd 1.1 %, so 5 ± 2 % holds with 93 % probability and the
    # seeded run must land inside [derived]; each class of 100 alone: ≤ 12 % (binomial 99.9 % bound)
    _, out = classes
    rates = []
    for g, slipped, _, _ in out.values():
        clean = [s for s in g.students if s.card.student not in slipped]
        rates.append(np.mean([s.verdict == "flagged" for s in clean]))
        assert rates[-1] <= 0.12
    pooled = float(np.mean(rates))
    assert 0.03 <= pooled <= 0.07, rates


def test_a_clean_class_is_flagged_five_percent():
    # 400 clean students, the truth off the guess (log β + 0.2, ε − 5 %): flagged at 5 ± 2 % (binomial(400,
    # 0.05) has sd 1.1 %: the band is ±1.8 sd [derived]); before, every student of such a class was flagged
    study = _study()
    cards, results, _, _, _ = _class(study, 0.2, 0.95, seed=7, clean=400, slips=())
    g = grade_class(study, cards, results)
    rate = np.mean([s.verdict == "flagged" for s in g.students])
    assert 0.03 <= rate <= 0.07, rate


def test_clean_students_get_no_explanation(classes):
    _, out = classes
    for g, slipped, _, _ in out.values():
        for s in g.students:
            if s.card.student not in slipped and s.diagnosis is not None:
                assert s.diagnosis.best is None or s.diagnosis.best.kind == "noise" and s.p_value < 1e-6


def test_the_key_bands_are_explained_when_the_guess_was_off(classes):
    # log β 0.3 above the guess: the key's bands (made at the guess) miss many clean readings, the bands at
    # the class's constants hold about 95 % of them (±2 sd) [derived]
    _, out = classes
    g, _, _, _ = out[(0.3, 1.08)]
    s = g.summary()
    assert s["band_shares"]["class"] > 0.9 > s["band_shares"]["key"]
    assert "the guess was off, not the students" in s["key_note"]
    r = s["students"][0]["readings"][0]
    assert {"class_expected", "class_band_low", "class_band_high", "in_class_band"} <= set(r)


def test_without_a_usable_student_the_guess_is_used():
    study = _study()
    cards, results, _, _, _ = _class(study, 0.0, 1.0, seed=3, clean=2, slips=())
    for sid in results:  # every student forgot a tube
        results[sid].pop("T8")
    g = grade_class(study, cards, results)
    assert g.pooled is None and all(s.verdict == "incomplete" for s in g.students)
    assert g.summary()["judged_against"] == "plan's guess"


def test_not_a_reading_is_refused_naming_the_student():
    study = _study()
    cards, results, _, _, _ = _class(study, 0.0, 1.0, seed=4, clean=3, slips=())
    results["S001"]["T3"] = 1e308
    with pytest.raises(KplanError, match="student S001, tube T3"):
        grade_class(study, cards, results)
    results["S001"]["T3"] = 55.0  # one %T-like number among absorbances, and a negative one
    results["S001"]["T1"] = -0.01
    with pytest.raises(KplanError, match="S001"):
        grade_class(study, cards, results)


def test_bad_results_are_refused():
    with pytest.raises(RecipeError, match="missing column"):
        parse_results_csv("student,absorbance\nS1,0.3\n")
    with pytest.raises(RecipeError, match="read twice"):
        parse_results_csv("student,tube,absorbance\nS1,T1,0.3\nS1,T1,0.4\n")
    with pytest.raises(RecipeError, match="nan. is not an absorbance"):
        parse_results_csv("student,tube,absorbance\nS1,T1,nan\n")


def _key_csv(cards) -> str:
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    ids = ("CU", "DY")
    w.writerow(["student", "name", "section", "tube", *ids, "absorbance", "band_low", "band_high"])
    for c in cards:
        for i, t in enumerate(c.recipe.tubes):
            vols = [f"{c.recipe.column(s)[i]:.2f}" for s in ids]
            w.writerow(
                [c.student, c.name, c.section, t, *vols]
                + [f"{x:.4f}" for x in (c.expected[i], c.band_low[i], c.band_high[i])]
            )
    return buf.getvalue()


def _results_csv(results) -> str:
    return "student,tube,absorbance\n" + "".join(
        f"{s},{t},{a:.4f}\n" for s, tubes in results.items() for t, a in tubes.items()
    )


def test_grade_command_writes_the_grade_book(tmp_path, capsys, monkeypatch):
    text = scenario_text("teaching")
    study = _study()
    cards, results, _, _, _ = _class(study, 0.2, 1.0, seed=3, clean=8, slips=("swapped-tubes",))
    (tmp_path / "plan.toml").write_text(text, encoding="utf-8")
    keydir = tmp_path / "key"
    keydir.mkdir()
    (keydir / "key.csv").write_text(_key_csv(cards), encoding="utf-8")
    (tmp_path / "results.csv").write_text(_results_csv(results), encoding="utf-8")
    outs = []
    for run in range(2):
        argv = ["kplan", "grade", tmp_path / "plan.toml", keydir, tmp_path / "results.csv", "--json"]
        monkeypatch.setattr(sys, "argv", [*map(str, argv), "--out", str(tmp_path / f"o{run}"), "--html"])
        try:
            cli.main()
        except SystemExit as exc:
            assert not exc.code
        outs.append(json.loads(capsys.readouterr().out))
    s = outs[0]
    assert s["students"][-1]["verdict"] == "flagged" and "swapped" in s["students"][-1]["explanation"]
    assert s["pooled"]["parameters"][0]["guess"] == pytest.approx(3.3)
    for name in ("grades.csv", "grades.xlsx", "grades.html"):
        assert (tmp_path / "o0" / name).read_bytes() == (tmp_path / "o1" / name).read_bytes(), name
    rows = list(csv.DictReader(io.StringIO((tmp_path / "o0" / "grades.csv").read_text(encoding="utf-8"))))
    assert len(rows) == 9 and rows[-1]["verdict"] == "flagged"
    from openpyxl import load_workbook

    wb = load_workbook(tmp_path / "o0" / "grades.xlsx")
    assert wb["grades"].max_row == 10
