"""``kplan cards`` as a user meets it: files, exit codes, one-line errors, byte-identical reruns."""

from __future__ import annotations

import io
import json

import pytest

from ..conftest import ROOT
from .test_cli import run

PLAN = ROOT / "planner" / "data" / "scenarios" / "teaching.toml"
FILES = ("cards.pdf", "key.pdf", "key.csv", "key.xlsx", "stocks.pdf", "stocks.csv")


def test_count_writes_every_file_and_reruns_identically(tmp_path, capsys, monkeypatch):
    from pypdf import PdfReader

    outs = []
    for k in (1, 2):
        d = tmp_path / f"run{k}"
        code, out, err = run(
            capsys, monkeypatch, "cards", PLAN, "--count", 4, "--sections", 2, "--out", d, "--seed", 5
        )
        assert code == 0, err
        outs.append({n: (d / n).read_bytes() for n in FILES})
    assert outs[0] == outs[1]  # derived: same seed and roster -> byte-identical files
    assert len(PdfReader(io.BytesIO(outs[0]["cards.pdf"])).pages) == 4
    assert "stocks.csv" in out and "class pooled" in out
    head = outs[0]["key.csv"].decode().splitlines()[0]
    assert head == "student,name,section,tube,CU,DY,BG,absorbance,band_low,band_high"
    assert "section B" in outs[0]["stocks.csv"].decode()


def test_json(tmp_path, capsys, monkeypatch):
    code, out, err = run(
        capsys, monkeypatch, "cards", PLAN, "--count", 3, "--tubes", 6, "--out", tmp_path, "--json"
    )
    assert code == 0, err
    data = json.loads(out)
    assert data["students"] == 3 and data["tubes_per_student"] == 6 and data["sound"] is True
    assert data["se"]["pooled"] < data["se"]["pooled_even_copies"]
    assert {s["id"] for s in data["stocks"]} == {"CU", "DY", "BG"}


@pytest.mark.parametrize(
    "text, needle",
    [
        ("id,name\nx1,Ama Oduya\nx1,Bertil Sand\n", "line 3, id"),  # duplicate id (the file's line)
        ("id,name\nx1,\n", "line 2, name"),  # empty name
        ("id,section\nx1,A\n", "column 'name'"),  # missing column
        ("id;name\nx1;Ama Oduya\n", "semicolons"),  # semicolons
        ("id,name,colour\nx1,Ama Oduya,red\n", "column 'colour'"),  # unknown column
        ("id,name\n", "no students"),  # header only
    ],
)
def test_bad_roster_one_line_exit_2(tmp_path, capsys, monkeypatch, text, needle):
    path = tmp_path / "roster.csv"
    path.write_text(text, encoding="utf-8")
    code, out, err = run(capsys, monkeypatch, "cards", PLAN, "--roster", path, "--out", tmp_path / "o")
    assert code == 2
    assert needle in err and len(err.strip().splitlines()) == 1, err
    assert not (tmp_path / "o").exists()


def test_bom_roster_is_read(tmp_path, capsys, monkeypatch):
    path = tmp_path / "roster.csv"
    path.write_bytes("\ufeffid,name,bench\nb1,Ingrid Vasquez-Ohlin,3\nb2,Teodor Malik,3\n".encode())
    code, out, err = run(
        capsys, monkeypatch, "cards", PLAN, "--roster", path, "--out", tmp_path / "o", "--json"
    )
    assert code == 0, err
    data = json.loads(out)
    assert [c["student"] for c in data["cards"]] == ["b1", "b2"]
    assert data["stocks"][0]["benches"] == 1  # one shared bench: one rinse allowance


def test_roster_and_count_together_exit_2(tmp_path, capsys, monkeypatch):
    code, _, err = run(capsys, monkeypatch, "cards", PLAN, "--count", 2, "--roster", tmp_path / "r.csv")
    assert code == 2 and "either --roster" in err
    code, _, err = run(capsys, monkeypatch, "cards", PLAN)
    assert code == 2


def test_unsound_class_exits_1(tmp_path, capsys, monkeypatch):
    # an impossible goal: no card of 8 tubes can resolve log K to 0.001 -> not sound, exit 1, says why
    text = PLAN.read_text(encoding="utf-8").replace("goal_se = 0.05", "goal_se = 0.001")
    plan = tmp_path / "plan.toml"
    plan.write_text(text, encoding="utf-8")
    code, out, err = run(capsys, monkeypatch, "cards", plan, "--count", 2, "--out", tmp_path / "o")
    assert code == 1
    assert "fails" in err and "not sound" in err


def test_cards_printed_in_a_second_process_are_the_same_bytes(tmp_path, capsys, monkeypatch):
    # eight cards or more: cards.pdf comes from the printing process; it must equal printing here
    from planner.inputs.plan import load_plan
    from planner.inputs.roster import roster_of_count
    from planner.jobs.classroom.cards import class_set
    from planner.jobs.classroom.stock_list import class_stocks
    from planner.paper.cards import cards_document, stocks_document

    code, _, err = run(capsys, monkeypatch, "cards", PLAN, "--count", 8, "--tubes", 5, "--out", tmp_path)
    assert code == 0, err
    plan = load_plan(PLAN)
    roster = roster_of_count(8)
    cs = class_set(plan, roster, tubes=5, seed=0)
    assert (tmp_path / "cards.pdf").read_bytes() == cards_document(plan, cs)
    # the class stock list too is printed there
    stocks = stocks_document(plan, cs, class_stocks(plan, [c.recipe for c in cs.cards], roster))
    assert (tmp_path / "stocks.pdf").read_bytes() == stocks


def test_teaching_series_by_default_and_pooled_on_request(tmp_path, capsys, monkeypatch):
    code, out, err = run(capsys, monkeypatch, "cards", PLAN, "--count", 4, "--out", tmp_path / "t", "--json")
    assert code == 0, err
    data = json.loads(out)
    assert data["lab"] == "binding-curve" and data["efficiency_vs_best_copies"] >= 0.8
    assert 0 < data["efficiency_vs_best_copies_without_stock"] <= 1
    for c in data["cards"]:
        assert c["distinct_compositions"] >= 5 and c["ratio_span"] >= 4
        assert c["series"]["kind"] == "binding-curve" and c["series"]["varied"] in ("CU", "DY")
        assert set(c["saturation"]) == {"minus_1sd", "guess", "plus_1sd"}
    code, out, err = run(
        capsys, monkeypatch, "cards", PLAN, "--count", 4, "--out", tmp_path / "p", "--json", "--pooled"
    )
    assert code == 0, err
    data = json.loads(out)
    assert data["lab"] == "pooled" and all(c["series"] is None for c in data["cards"])


@pytest.mark.parametrize(
    "args, needle",
    [
        (("--series", "foo"), "--series foo"),
        (("--series", "job", "--pooled"), "--series and --pooled"),
        (("--series", "mole-ratio"), "no mole-ratio card"),  # the teaching plan's range leaves no room
    ],
)
def test_series_refusals_one_line_exit_2(tmp_path, capsys, monkeypatch, args, needle):
    code, out, err = run(capsys, monkeypatch, "cards", PLAN, "--count", 2, "--out", tmp_path / "o", *args)
    assert code == 2 and needle in err and len(err.strip().splitlines()) == 1, err
    assert not (tmp_path / "o").exists()


def test_job_cards_short_of_the_goal_exit_1(tmp_path, capsys, monkeypatch):
    code, out, err = run(
        capsys, monkeypatch, "cards", PLAN, "--count", 2, "--out", tmp_path / "o", "--series", "job"
    )
    assert code == 1 and "not sound" in err
    assert "no job card of 8 tubes reaches design.goal_se" in out
    assert (tmp_path / "o" / "key.pdf").exists()


def test_progress_line_appears_after_the_delay(monkeypatch):
    # a class set over 2 s shows one rich progress line, updated per card assessed
    from planner.cli import cards as cli_cards

    monkeypatch.setattr(cli_cards._Bar, "DELAY_S", 0.0)
    with cli_cards._Bar(True, 3) as bar:
        bar.start()
        bar.timer.join()
        bar.assessed(1, 3)
        assert bar.bar is not None and bar.what == "card 1 of 3 assessed"
        bar.stage("key.pdf")
        assert bar.what == "printing key.pdf"
    assert bar.closed
    quiet = cli_cards._Bar(False, 3)
    quiet.start()
    assert quiet.timer is None  # not a terminal, or --json: no progress line
