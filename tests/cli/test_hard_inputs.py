"""Hard inputs, round two: one case per finding of the hostile corpus on the newer surfaces (rosters,
keys, results, series options, output paths), run through the console entry point.

Every refusal: exit code 2, exactly one line on stderr naming what is wrong, no traceback, no file
written, and promptly (a limit refuses before the work, a pipe is not waited on). Every accepted hostile
input: the correct verdict, and every spreadsheet cell written is a value, never a formula.
"""

from __future__ import annotations

import csv
import io
import json
import os
import signal
import time
from contextlib import contextmanager
from pathlib import Path

import pytest
from openpyxl import load_workbook

from planner.inputs.tables import formula_risk

from ..conftest import ROOT, scenario_text
from ..conftest import run_cli as run
from .test_bad_inputs import assert_refused, listing

EXAMPLES = ROOT / "examples"
CUVETTE = EXAMPLES / "cuvette-1to1.toml"
CUVETTE_RECIPE = EXAMPLES / "cuvette-1to1.csv"
PROMPT_S = 20.0  # a refusal comes before the work: far below what the refused work would take


@pytest.fixture
def workdir(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    return tmp_path


@contextmanager
def deadline(seconds: float = PROMPT_S):
    """Fail (instead of hanging the suite) if the block blocks or spins."""

    def expired(*_):
        raise AssertionError(f"did not return within {seconds:g} s")

    old = signal.signal(signal.SIGALRM, expired)
    signal.setitimer(signal.ITIMER_REAL, seconds)
    try:
        yield
    finally:
        signal.setitimer(signal.ITIMER_REAL, 0)
        signal.signal(signal.SIGALRM, old)


def teaching(old: str = "", new: str = "") -> str:
    text = scenario_text("teaching")
    if old:
        assert old in text, old
        text = text.replace(old, new)
    return text


def refused(capsys, monkeypatch, workdir: Path, *args, needle: str) -> None:
    before = listing(workdir)
    t0 = time.perf_counter()
    with deadline():
        code, _, err = run(capsys, monkeypatch, *args)
    assert_refused(code, err, needle)
    assert listing(workdir) == before, "a file was written"
    assert time.perf_counter() - t0 < PROMPT_S


# ---------------------------------------------------------------------------------------------------
# Security: spreadsheets that cannot run formulas, keys that round-trip, text printed as text
# ---------------------------------------------------------------------------------------------------
HOSTILE_TITLE = '=HYPERLINK("http://example.invalid/x","open me")'
HOSTILE_ROSTER = (
    "id,name,section\n"
    '=1+2,"=HYPERLINK(""http://example.invalid"",""x"")",@A\n'
    "@ann,Ann Quilliam,+B\n"
    "-q,Quintus Marr,-C\n"
    "+r,Rhona Vell,=D\n"
)


def csv_cells(path: Path) -> list[str]:
    return [c for row in csv.reader(io.StringIO(path.read_text(encoding="utf-8"))) for c in row]


def xlsx_cells(path: Path):
    for ws in load_workbook(path).worksheets:
        for row in ws.iter_rows():
            yield from row


def assert_no_formula_anywhere(folder: Path) -> int:
    """Every cell of every CSV and XLSX in ``folder`` is a value (source: OWASP, "CSV Injection")."""
    n = 0
    for p in sorted(folder.glob("*.csv")):
        for c in csv_cells(p):
            assert not formula_risk(c), (p.name, c)
            n += 1
    for p in sorted(folder.glob("*.xlsx")):
        for cell in xlsx_cells(p):
            assert cell.data_type != "f", (p.name, cell.coordinate, cell.value)
            if isinstance(cell.value, str) and formula_risk(cell.value):
                assert cell.quotePrefix, (p.name, cell.coordinate, cell.value)
            n += 1
    return n


def test_hostile_class_round_trip_every_cell_a_value(workdir, capsys, monkeypatch):
    # title, stock id, student ids, names and sections that a spreadsheet would run as formulas
    plan = workdir / "plan.toml"
    plan.write_text(
        teaching('"CU"', '"=CU+1"').replace(
            'title = "Copper(II) with the dye ligand Dy: 1:1 formation constant (teaching lab)"',
            f"title = '{HOSTILE_TITLE}'",
        ),
        encoding="utf-8",
    )
    roster = workdir / "roster.csv"
    roster.write_text(HOSTILE_ROSTER, encoding="utf-8")
    code, _, err = run(
        capsys, monkeypatch, "cards", plan, "--roster", roster, "--tubes", 5, "--out", "k", "--json"
    )
    assert code == 0, err
    key = list(csv.DictReader(io.StringIO((workdir / "k" / "key.csv").read_text(encoding="utf-8"))))
    assert {r["student"] for r in key} == {"'=1+2", "'@ann", "'-q", "'+r"}  # guarded, so a spreadsheet
    assert "'=CU+1" in (workdir / "k" / "key.csv").read_text().splitlines()[0]  # keeps them as text
    # the students' results, as the instructor types the ids (unguarded): every one is matched
    results = workdir / "results.csv"
    results.write_text(
        "student,tube,absorbance\n"
        + "".join(
            f"{r['student'][1:]},{r['tube']},{float(r['absorbance']):.4f}\n" for r in key
        ),  # the expected readings: every student inside the band
        encoding="utf-8",
    )
    code, out, err = run(capsys, monkeypatch, "grade", plan, "k", results, "--json", "--out", "g")
    assert code == 0, err
    g = json.loads(out)
    assert g["unknown_students"] == []
    assert sorted(s["student"] for s in g["students"]) == sorted(["=1+2", "@ann", "-q", "+r"])
    assert all(s["verdict"] == "ok" and s["tubes_in_band"] == s["tubes"] for s in g["students"])
    assert g["pooled"] is not None and g["pooled"]["determined"]
    assert assert_no_formula_anywhere(workdir / "k") > 100
    assert assert_no_formula_anywhere(workdir / "g") > 10
    about = load_workbook(workdir / "k" / "key.xlsx")["about"]
    assert about["B1"].value == HOSTILE_TITLE and about["B1"].data_type == "s"


def test_control_characters_in_a_title_do_not_break_the_workbook(workdir, capsys, monkeypatch):
    plan = workdir / "plan.toml"
    plan.write_text(
        teaching(
            'title = "Copper(II) with the dye ligand Dy: 1:1 formation constant (teaching lab)"',
            'title = "Lab\\u0007 \\u001b[2J\\u202e title\\u0000"',
        ),
        encoding="utf-8",
    )
    code, out, err = run(capsys, monkeypatch, "cards", plan, "--count", 2, "--tubes", 5, "--out", "k")
    assert code == 0, err
    assert not any(ch in out + err for ch in "\x07\x1b\u202e\x00")
    about = load_workbook(workdir / "k" / "key.xlsx")["about"]
    assert about["B1"].value == "Lab\\u0007 \\u001b[2J\\u202e title\\u0000"  # shown, not obeyed


def test_series_prints_the_title_as_text(workdir, capsys, monkeypatch):
    plan = workdir / "plan.toml"
    plan.write_text(
        teaching(
            'title = "Copper(II) with the dye ligand Dy: 1:1 formation constant (teaching lab)"',
            'title = "\\u001b[2J\\u001b]8;;http://example.invalid\\u0007link\\u001b]8;;\\u0007 '
            '\\u202e[bold]x"',
        ),
        encoding="utf-8",
    )
    code, out, err = run(capsys, monkeypatch, "series", plan, "--method", "calibration")
    assert code in (0, 1), err
    assert not any(ch in out + err for ch in "\x1b\x07\u202e")
    assert "\\u001b[2J" in out and "[bold]x" in out


@pytest.mark.parametrize(
    "row, needle",
    [
        ('k2,"Bea\nOtt"', "line 3: a quoted cell runs over several lines"),
        ("k2,Bea\tOtt", "U+0009"),
        ("k2,Bea\x85Ott", "U+0085"),
        ("k2,\u202eBea Ott", "U+202E"),
        ("k2,Bea\x1b[31mOtt", "U+001B"),
        ("k\u200f2,Bea Ott", "U+200F"),
    ],
)
def test_rosters_refuse_what_recipes_refuse(workdir, capsys, monkeypatch, row, needle):
    roster = workdir / "roster.csv"
    roster.write_text(f"id,name\nk1,Ama Oduya\n{row}\n", encoding="utf-8")
    refused(capsys, monkeypatch, workdir, "cards", CUVETTE, "--roster", roster, "--out", "k", needle=needle)


# ---------------------------------------------------------------------------------------------------
# Memory and time: limits refuse before the work, in one line
# ---------------------------------------------------------------------------------------------------
@pytest.mark.parametrize(
    "args, needle",
    [
        (["cards", CUVETTE, "--count", "2000"], "--count"),
        (["cards", CUVETTE, "--count", "3", "--tubes", "1000000000"], "--tubes"),
        (["series", CUVETTE, "--method", "job", "--points", "1000000"], "--points"),
        (["series", CUVETTE, "--method", "calibration", "--tubes", "1000000"], "--tubes"),
        (["series", CUVETTE, "--method", "calibration", "--replicates", "1000000"], "--replicates"),
        (["design", CUVETTE, "--additions", "5"], "--additions applies to titration plans"),
        (["assess", CUVETTE, CUVETTE_RECIPE, "--trials", "100000000"], "--trials"),
    ],
)
def test_counts_beyond_the_limits(workdir, capsys, monkeypatch, args, needle):
    refused(capsys, monkeypatch, workdir, *args, needle=needle)


def test_library_callers_meet_the_same_limits(teaching_plan):
    from planner.inputs.errors import LimitError
    from planner.inputs.recipe import make_recipe
    from planner.inputs.roster import roster_of_count
    from planner.jobs.classic import run_series
    from planner.jobs.classroom.cards import class_set
    from planner.jobs.plan.assess import assess
    from planner.jobs.plan.design import design

    rec = make_recipe(teaching_plan, {"CU": [1.0, 1.0], "DY": [0.5, 1.0]})
    with deadline(), pytest.raises(LimitError, match="students = 600: at most 500"):
        class_set(teaching_plan, roster_of_count(600))
    with deadline(), pytest.raises(LimitError, match="60 students × 200 tubes"):
        class_set(teaching_plan, roster_of_count(60), tubes=200)
    with deadline(), pytest.raises(LimitError, match="tubes = 1000000: at most 200"):
        design(teaching_plan, tubes=1_000_000)
    with deadline(), pytest.raises(LimitError, match="points = 1000000"):
        run_series(teaching_plan, "job", points=1_000_000)
    with deadline(), pytest.raises(LimitError, match=r"tubes = 1000000: at most 20$"):
        run_series(teaching_plan, "calibration", tubes=1_000_000)
    with deadline(), pytest.raises(LimitError, match="trials = 10000000"):
        assess(teaching_plan, rec, trials=10_000_000)


def _species_plan(n: int) -> str:
    """The teaching plan with n species (complexes M_a L_b) — every one absorbing and fitted."""
    pairs = [(a, b) for a in range(1, 21) for b in range(1, 21)][:n]
    extra = "".join(
        f'\n[[species]]\nname = "X{a}_{b}"\nformula = {{ M = {a}, L = {b} }}\nlog_beta = {a + b}\n'
        f"log_beta_sd = 0.5\n"
        for a, b in pairs[1:]
    )
    eps = "".join(f"X{a}_{b} = {{ value = 1000.0, rsd = 0.1 }}\n" for a, b in pairs[1:])
    text = teaching().replace("[optics]", extra.lstrip("\n") + "\n[optics]", 1)
    return text.replace("[optics.epsilon]\n", "[optics.epsilon]\n" + eps, 1)


def _many_species(n: int) -> str:
    body = "".join(
        f'[[species]]\nname = "Y{k}"\nformula = {{ M = 1, L = 2 }}\nlog_beta = 4\n\n' for k in range(n)
    )
    return teaching().replace("[optics]", body + "[optics]", 1)


@pytest.mark.parametrize(
    "text", [lambda: _species_plan(400), lambda: _many_species(6000)], ids=["400-absorbing", "6000-fitted"]
)
def test_hundreds_of_species_refused(workdir, capsys, monkeypatch, text):
    plan = workdir / "plan.toml"
    plan.write_text(text(), encoding="utf-8")
    refused(capsys, monkeypatch, workdir, "assess", plan, CUVETTE_RECIPE, needle="at most 40")


def test_forty_species_still_load(teaching_plan):
    from planner.inputs.plan import parse_plan_text

    assert len(parse_plan_text(_species_plan(40)).species) == 40


@pytest.mark.parametrize(
    "quantity, needle",
    [
        ('"9**9**9 mM"', "cannot read '9**9**9 mM'"),
        ('"10**400 mM"', "cannot read '10**400 mM'"),
        ("1" + "0" * 400, "a 401-digit number"),
        ('"1e400 mM"', "stock[0].conc.M"),
    ],
)
def test_quantities_that_spin_or_overflow(workdir, capsys, monkeypatch, quantity, needle):
    plan = workdir / "plan.toml"
    plan.write_text(teaching('conc = { M = "10.0 mM" }', f"conc = {{ M = {quantity} }}"), encoding="utf-8")
    refused(capsys, monkeypatch, workdir, "check", plan, needle=needle)


@pytest.mark.parametrize("kind", ["fifo-plan", "fifo-roster", "dev-zero-roster", "dev-zero-plan"])
def test_pipes_and_devices_are_not_read(workdir, capsys, monkeypatch, kind):
    target = "/dev/zero"
    if kind.startswith("fifo"):
        target = workdir / "pipe"
        os.mkfifo(target)  # no writer: opening it to read would wait for ever
    if kind.endswith("plan"):
        args = ["check", target]
    else:
        args = ["cards", CUVETTE, "--roster", target, "--out", "k"]
    refused(capsys, monkeypatch, workdir, *args, needle="not a regular file")


# ---------------------------------------------------------------------------------------------------
# Silent wrong answers
# ---------------------------------------------------------------------------------------------------
@pytest.mark.parametrize(
    "old, new",
    [
        ("log_beta_sd = 0.40", "log_beta_sd = 0"),  # the target held fixed
        ("log_beta_sd = 0.40", "log_beta_sd = 0"),  # …and nothing fitted at all (ε known below)
    ],
    ids=["target-fixed", "nothing-fitted"],
)
def test_nothing_fitted_for_the_target_is_never_resolved(workdir, capsys, monkeypatch, request, old, new):
    text = CUVETTE.read_text(encoding="utf-8").replace(old, new)
    if request.node.callspec.id == "nothing-fitted":
        text = text.replace("rsd = 0.15", "rsd = 0.0")
    plan = workdir / "plan.toml"
    plan.write_text(text, encoding="utf-8")
    code, out, err = run(capsys, monkeypatch, "assess", plan, CUVETTE_RECIPE, "--json", "--trials", "50")
    assert code == 1, err
    a = json.loads(out)
    assert a["verdict"] == "unresolved" and "species[0].log_beta_sd = 0" in a["verdict_reason"]


PLAN_CASES = [
    ("bare-component", "formula = { M = 1, L = 1 }", "formula = { M = 1, L = 0 }", "the free component M"),
    ("bare-ligand", "formula = { M = 1, L = 1 }", "formula = { L = 1 }", "the free component L"),
    ("junk-solid", 'formula = "Cu(NO3)2.3H2O"', 'formula = "Xx9Qq"', "stock[0].formula: cannot read"),
    ("path-tiny", "path_cm = 1.000", "path_cm = 1e-300", "optics.path_cm"),
    ("range-narrow", "linear_range = [0.10, 1.00]", "linear_range = [0.5, 0.5000001]", "at least 0.05"),
    ("purity-tiny", "purity = 0.99", "purity = 1e-9", "stock[0].purity"),
]


@pytest.mark.parametrize("old,new,needle", [c[1:] for c in PLAN_CASES], ids=[c[0] for c in PLAN_CASES])
def test_unphysical_plans_refused(workdir, capsys, monkeypatch, old, new, needle):
    plan = workdir / "plan.toml"
    plan.write_text(teaching(old, new), encoding="utf-8")
    refused(capsys, monkeypatch, workdir, "check", plan, needle=needle)


def test_titration_cannot_overfill_the_cuvette(workdir, capsys, monkeypatch):
    plan = workdir / "plan.toml"
    text = (EXAMPLES / "titration-cuvette.toml").read_text(encoding="utf-8")
    plan.write_text(text.replace('max_volume = "3.000 mL"', 'max_volume = "3.5 mL"'), encoding="utf-8")
    refused(capsys, monkeypatch, workdir, "check", plan, needle="titration.max_volume")


@pytest.fixture(scope="module")
def class_key(tmp_path_factory):
    """A key.csv kplan cards wrote (teaching scenario, 3 students, 5 tubes)."""
    from planner.inputs.plan import parse_plan_text
    from planner.inputs.roster import roster_of_count
    from planner.jobs.classroom.cards import class_set
    from planner.paper.cards import key_csv

    plan = parse_plan_text(teaching())
    return key_csv(plan, class_set(plan, roster_of_count(3), tubes=5, seed=0))


def _damage(key: str, how: str) -> str:
    lines = key.splitlines()
    if how == "missing-stock-column":
        rows = list(csv.reader(lines))
        k = rows[0].index("DY")
        return "\n".join(",".join(c for j, c in enumerate(r) if j != k) for r in rows) + "\n"
    if how == "inverted-bands":
        rows = list(csv.reader(lines))
        lo, hi = rows[0].index("band_low"), rows[0].index("band_high")
        for r in rows[1:]:
            r[lo], r[hi] = r[hi], r[lo]
        return "\n".join(",".join(r) for r in rows) + "\n"
    if how == "header-only":
        return lines[0] + "\n"
    raise AssertionError(how)


@pytest.mark.parametrize(
    "how, needle",
    [
        ("missing-stock-column", "no column for stock(s) DY"),
        ("inverted-bands", "does not hold the expected absorbance"),
        ("header-only", "no students"),
    ],
)
def test_a_damaged_key_is_not_graded(workdir, capsys, monkeypatch, class_key, how, needle):
    plan = workdir / "plan.toml"
    plan.write_text(teaching(), encoding="utf-8")
    (workdir / "k").mkdir()
    (workdir / "k" / "key.csv").write_text(_damage(class_key, how), encoding="utf-8")
    (workdir / "results.csv").write_text("student,tube,absorbance\nS01,T1,0.3\n", encoding="utf-8")
    refused(capsys, monkeypatch, workdir, "grade", plan, "k", "results.csv", "--out", "g", needle=needle)


def test_out_may_not_overwrite_an_input(workdir, capsys, monkeypatch):
    plan = workdir / "plan.toml"
    plan.write_text(CUVETTE.read_text(encoding="utf-8"), encoding="utf-8")
    recipe = workdir / "d" / "recipe.csv"
    recipe.parent.mkdir()
    recipe.write_text(CUVETTE_RECIPE.read_text(encoding="utf-8"), encoding="utf-8")
    before = {p: p.read_bytes() for p in (plan, recipe)}
    refused(
        capsys, monkeypatch, workdir, "sheet", plan, recipe, "--out", plan, needle="an input of this command"
    )
    refused(capsys, monkeypatch, workdir, "report", plan, recipe, "--out", recipe, needle="an input")
    refused(
        capsys,
        monkeypatch,
        workdir,
        "series",
        plan,
        "--method",
        "survey",
        "--recipe",
        recipe,
        "--out",
        "d",
        needle="d/recipe.csv: it is an input",
    )
    assert {p: p.read_bytes() for p in (plan, recipe)} == before


def test_out_onto_a_device_or_pipe_is_refused(workdir, capsys, monkeypatch):
    node = workdir / "node"
    os.mkfifo(node)  # stands in for a device node: writing must not replace it (nor wait on it)
    refused(
        capsys, monkeypatch, workdir, "sheet", CUVETTE, CUVETTE_RECIPE, "--out", node, needle="not a file"
    )
    (workdir / "d").mkdir()
    os.mkfifo(workdir / "d" / "recipe.csv")
    refused(capsys, monkeypatch, workdir, "design", CUVETTE, "--out", "d", needle="not a file")
    assert node.is_fifo() and (workdir / "d" / "recipe.csv").is_fifo()


def test_series_leaves_no_partial_files(workdir, capsys, monkeypatch):
    (workdir / "s" / "series.json").mkdir(parents=True)  # the second file cannot be written
    code, _, err = run(capsys, monkeypatch, "series", CUVETTE, "--method", "calibration", "--out", "s")
    assert_refused(code, err, "series.json")
    assert sorted(p.name for p in (workdir / "s").iterdir()) == ["series.json"]  # no recipe.csv alone
