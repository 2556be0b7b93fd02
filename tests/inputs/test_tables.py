"""The one table reader: the same rules for every CSV, true line numbers, limits, and every table the
tool writes reads back identically (hypothesis)."""

from __future__ import annotations

import os
import signal
import string

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from planner.inputs.gradebook import parse_key_csv, parse_results_csv
from planner.inputs.plan import PlanError, parse_plan_text
from planner.inputs.readings import parse_readings_csv
from planner.inputs.recipe import RecipeError, make_recipe, parse_recipe_csv, recipe_to_csv
from planner.inputs.roster import RosterError, parse_roster_csv, read_roster_csv
from planner.inputs.schedule import Schedule, parse_schedule_csv, schedule_to_csv
from planner.inputs.spectra_readings import parse_spectra_readings
from planner.inputs.spectra_table import parse_spectra_table
from planner.inputs.tables import (
    TableError,
    TableSpec,
    formula_risk,
    guard_cell,
    parse_table,
    read_table_text,
    unguard_cell,
    write_csv,
)
from planner.inputs.text import first_unsafe

from ..conftest import scenario_text

SPEC = TableSpec(what="table", header_example="a,b")


@pytest.fixture(scope="module")
def plan():
    return parse_plan_text(scenario_text("teaching"))  # stocks CU, DY and the diluent BG (to-mark)


# ---------------------------------------------------------------------------------------------------
# the true line of the file in every error, whatever the kind of table
# ---------------------------------------------------------------------------------------------------
HEAD = "# measured on the bench, 2 June\n\n"  # two lines above the header: the header is line 3


def test_readings_error_names_the_file_line(plan):
    text = HEAD + "tube,CU,DY,absorbance\nT1,1,0.5,0.2\n\nT2,1,1.0,oops\n"
    with pytest.raises(RecipeError, match=r"r\.csv line 6, absorbance: 'oops'"):
        parse_readings_csv(text, plan, "r.csv")


def test_results_error_names_the_file_line():
    text = HEAD + "student,tube,absorbance\nS1,T1,0.3\nS1,T2,x\n"
    with pytest.raises(RecipeError, match=r"res\.csv line 5, absorbance"):
        parse_results_csv(text, "res.csv")


def test_schedule_error_names_the_file_line():
    text = HEAD + "step,aliquot_mL\n0,0\n1,0.01\n\n2,abc\n"
    with pytest.raises(RecipeError, match=r"s\.csv line 7, aliquot_mL"):
        parse_schedule_csv(text, "s.csv")


def test_recipe_and_roster_errors_name_the_file_line(plan):
    with pytest.raises(RecipeError, match=r"line 5, DY"):
        parse_recipe_csv(HEAD + "tube,CU,DY\nT1,1,0.5\nT2,1,-\n", plan)
    with pytest.raises(RosterError, match=r"line 6, name"):
        parse_roster_csv(HEAD + "id,name\nk1,Ama\n\nk2,\n")


def test_quoted_line_break_is_refused_on_its_first_line(plan):
    with pytest.raises(RosterError, match=r"line 3: a quoted cell runs over several lines"):
        parse_roster_csv('id,name\nk1,Ama\nk2,"Bea\nOtt"\n')


# ---------------------------------------------------------------------------------------------------
# one set of rules
# ---------------------------------------------------------------------------------------------------
@pytest.mark.parametrize("ch", ["\x1b", "\x07", "\t", "\x85", "\u202e", "\u2066", "\u200f", "\x00"])
def test_control_and_direction_characters_refused_in_every_table(plan, ch):
    cases = [
        (lambda t: parse_recipe_csv(t, plan), f"tube,CU,DY\nT{ch}1,1,0.5\n"),
        (parse_roster_csv, f"id,name\nk1,Ama{ch} Oduya\n"),
        (parse_results_csv, f"student,tube,absorbance\nS{ch}1,T1,0.3\n"),
        (lambda t: parse_schedule_csv(t), f"step,aliquot_mL\n0{ch},0\n"),
        (lambda t: parse_readings_csv(t, plan), f"tube,CU,DY,absorbance,note\nT1,1,0.5,0.3,ok{ch}\n"),
    ]
    for parse, text in cases:
        with pytest.raises(ValueError, match=rf"line 2, .*U\+{ord(ch):04X}"):
            parse(text)


def test_semicolons_where_allowed_and_refused_elsewhere(plan):
    a = parse_readings_csv("tube;CU;DY;absorbance\nT1;1,5;0,5;0,312\n", plan)
    assert a.absorbance[0] == 0.312 and a.recipe.column("CU")[0] == 1.5
    assert parse_results_csv("student;tube;absorbance\nS1;T1;0,25\n") == {"S1": {"T1": 0.25}}
    assert parse_schedule_csv("step;aliquot_mL\n0;0\n1;0,015\n").aliquot_mL[1] == 0.015
    spectra = parse_spectra_readings("tube;wavelength_nm;absorbance\nT1;450;0,25\n", plan)
    assert spectra.wavelength_nm[0] == 450 and spectra.absorbance[0, 0] == 0.25
    # a wavelength with a decimal comma, in a cell (long form) and as a column name (wide form)
    spectra = parse_spectra_readings("tube;wavelength_nm;absorbance\nT1;450,5;0,25\n", plan)
    assert spectra.wavelength_nm[0] == 450.5
    spectra = parse_spectra_readings("tube;450,5 nm;451,5\nT1;0,25;0,5\n", plan)
    assert list(spectra.wavelength_nm) == [450.5, 451.5] and spectra.absorbance[0, 1] == 0.5
    with pytest.raises(RecipeError, match="'450,5' is not a wavelength in nm; write a decimal point"):
        parse_spectra_readings("tube,wavelength_nm,absorbance\nT1,\"450,5\",0.25\n", plan)
    with pytest.raises(PlanError, match="semicolon-separated"):
        parse_spectra_table("wavelength_nm;ML\n400;1,5\n410;2,5\n")
    with pytest.raises(RecipeError, match="semicolon-separated"):
        parse_recipe_csv("tube;CU;DY\nT1;1,5;0,5\n", plan)
    with pytest.raises(RosterError, match="semicolon-separated"):
        parse_roster_csv("id;name\nk1;Ama\n")
    with pytest.raises(RecipeError, match="tab-separated"):
        parse_results_csv("student\ttube\tabsorbance\nS1\tT1\t0.2\n")


def test_comments_only_above_the_header_bom_and_quotes(plan):
    t = parse_table('\ufeff# note\n\na,b\n#3,"x, ""y"""\n', SPEC)
    assert t.header == ("a", "b") and t.header_line == 3
    assert [(r.line, r.cells) for r in t.rows] == [(4, ("#3", 'x, "y"'))]


def test_limits(plan, tmp_path):
    with pytest.raises(TableError, match="more than 3 rows"):
        parse_table("a\n" + "x\n" * 4, TableSpec("table", "a", max_rows=3))
    with pytest.raises(TableError, match="line 2, a: a cell of 1001 characters"):
        parse_table("a\n" + "x" * 1001 + "\n", SPEC)
    with pytest.raises(TableError, match="line 2: a cell is longer"):
        parse_table('a\n"' + "9" * 200_000 + "\n", SPEC)
    big = tmp_path / "big.csv"
    big.write_bytes(b"a\n" + b"x\n" * 600)
    with pytest.raises(TableError, match="larger than"):
        read_table_text(big, TableSpec("table", "a", max_bytes=1000))


@pytest.mark.parametrize("kind", ["fifo", "device"])
def test_pipes_and_devices_are_refused_without_blocking(tmp_path, kind):
    if kind == "fifo":
        path = tmp_path / "roster.csv"
        os.mkfifo(path)  # nobody writes to it: reading it would wait forever
    else:
        path = "/dev/zero"  # never ends
    old = signal.signal(signal.SIGALRM, lambda *a: pytest.fail("the reader blocked"))
    signal.alarm(10)
    try:
        with pytest.raises(RosterError, match="not a regular file"):
            read_roster_csv(path)
    finally:
        signal.alarm(0)
        signal.signal(signal.SIGALRM, old)


def test_width_must_match_the_header(plan):
    with pytest.raises(RecipeError, match="line 2: expected 3 fields, got 4; a decimal comma"):
        parse_recipe_csv("tube,CU,DY\nT1,1,0,5\n", plan)
    with pytest.raises(RosterError, match="line 2: expected 2 fields, got 1"):
        parse_roster_csv("id,name\nk1\n")


# ---------------------------------------------------------------------------------------------------
# the formula guard (OWASP, "CSV Injection"): data, never a formula, and the guard round-trips
# ---------------------------------------------------------------------------------------------------
@given(st.text(max_size=30))
@settings(max_examples=400, deadline=None)
def test_guard_round_trips_and_is_never_a_formula(text):
    cell = guard_cell(text)
    assert unguard_cell(cell) == text
    assert not formula_risk(cell)


@pytest.mark.parametrize(
    "text, written",
    [
        ("=1+2", "'=1+2"),  # source: OWASP, CSV Injection — a leading apostrophe keeps it text
        ('=HYPERLINK("x")', '\'=HYPERLINK("x")'),
        ("@ann", "'@ann"),
        ("+x", "'+x"),
        ("-1+2", "'-1+2"),
        ("-0.012", "-0.012"),  # a number stays a number
        ("1e-3", "1e-3"),
        ("'q", "'q"),  # an apostrophe before an ordinary character is kept as written
        ("'=q", "''=q"),  # …but doubled where the reader would otherwise take it for the guard
        ("ann", "ann"),
    ],
)
def test_guard_examples(text, written):
    assert guard_cell(text) == written and unguard_cell(written) == text


# text a table holds: printable, no control or direction characters, trimmed (cells are trimmed)
CELL = st.text(
    alphabet=st.characters(blacklist_categories=("Cc", "Cs")) | st.sampled_from(list("=+-@',\"; #")),
    max_size=40,
).filter(lambda s: s == s.strip() and first_unsafe(s) is None)
NAME = CELL.filter(bool)


@given(
    st.lists(NAME, min_size=1, max_size=4, unique=True).filter(lambda h: not h[0].startswith("#")),
    st.data(),
)
@settings(max_examples=150, deadline=None)
def test_every_table_written_reads_back_identically(header, data):
    rows = data.draw(st.lists(st.lists(CELL, min_size=len(header), max_size=len(header)), max_size=5))
    rows = [r for r in rows if any(r)]  # a row of empty cells is a blank line
    text = write_csv(header, rows)
    t = parse_table(text, SPEC)
    assert t.header == tuple(header)
    assert [list(r.cells) for r in t.rows] == rows


LABEL = st.text(
    alphabet=string.ascii_letters + string.digits + "=+-@'#,\"/ ._", min_size=1, max_size=12
).filter(lambda s: s == s.strip())


@given(st.lists(LABEL, min_size=1, max_size=6, unique=True), st.data())
@settings(max_examples=80, deadline=None)
def test_recipe_written_reads_back_identically(plan, labels, data):
    n = len(labels)
    grid = st.integers(0, 80).map(lambda k: k * 0.05)  # the teaching plan's 0.05 mL grid, ≤ 4 mL each
    cu = np.array(data.draw(st.lists(grid, min_size=n, max_size=n)))
    dy = np.array(data.draw(st.lists(grid, min_size=n, max_size=n)))
    rec = make_recipe(plan, {"CU": cu, "DY": dy}, labels)
    back = parse_recipe_csv(recipe_to_csv(rec, plan), plan)
    assert back.tubes == rec.tubes
    np.testing.assert_allclose(back.volumes_mL, rec.volumes_mL, atol=1e-12)


@given(
    st.lists(LABEL, min_size=1, max_size=8, unique=True),
    st.lists(st.integers(0, 400), min_size=8, max_size=8),
    st.booleans(),
)
@settings(max_examples=80, deadline=None)
def test_schedule_written_reads_back_identically(steps, grid, with_a):
    n = len(steps)
    vol = np.array(grid[:n]) * 0.0025
    a = np.round(np.linspace(0.05, 0.9, n), 4) if with_a else None
    s = Schedule(tuple(steps), vol, a)
    back = parse_schedule_csv(schedule_to_csv(s))
    assert back.steps == s.steps
    np.testing.assert_allclose(back.aliquot_mL, vol, atol=1e-12)
    assert (back.absorbance is None) == (a is None)


def test_key_and_results_match_students_whose_ids_look_like_formulas(plan):
    ids = ["=1+2", "@ann", "-x", "+y", "'z"]
    rows = [
        [sid, f"name {k}", "", "T1", "1.0000", "0.5000", "8.5000", "0.2000", "0.1500", "0.2500"]
        for k, sid in enumerate(ids)
    ]
    key = write_csv(
        ["student", "name", "section", "tube", "CU", "DY", "BG", *("absorbance", "band_low", "band_high")],
        rows,
    )
    assert "'=1+2" in key and "'@ann" in key
    cards = parse_key_csv(key, plan)
    assert [c.student for c in cards] == ids
    res = parse_results_csv(write_csv(["student", "tube", "absorbance"], [[s, "T1", "0.2"] for s in ids]))
    assert list(res) == ids
    typed = parse_results_csv("student,tube,absorbance\n@ann,T1,0.2\n'@ann,T2,0.3\n")  # as typed by hand
    assert typed == {"@ann": {"T1": 0.2, "T2": 0.3}}
