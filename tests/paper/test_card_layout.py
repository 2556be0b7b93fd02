"""Cards laid out with their repeated parts stamped (planner.paper.card_layout, planner.paper.stamp): the
printed page is the page of the whole card — the same pixels, the same words — and the file holds each
repeated part once."""

from __future__ import annotations

import io
import shutil
from types import SimpleNamespace

import pytest

from planner.inputs.recipe import parse_recipe_csv
from planner.inputs.roster import parse_roster_csv, roster_of_count
from planner.jobs.classroom.cards import class_set_study
from planner.paper import card_layout as cl
from planner.paper import cards as pc

from ._print import same_print as _same_print
from ._print import words as _words

pytestmark = pytest.mark.skipif(shutil.which("pdftoppm") is None, reason="pdftoppm (poppler-utils) missing")

LONG_NAME = "Maximiliane-Friederike Adelheid von Hohenzollern-Sigmaringen-Vöhringen"  # invented
RTL = "\u05e2\u05d3\u05d4 \u05e8\u05d5\u05e0\u05e1\u05e8"  # an invented name in Hebrew letters
ROSTER = f"id,name,section,bench\nw1,{LONG_NAME},Monday-afternoon,12\nw2,{RTL},Tue,3\nw3,Ana Li,Tue,4\n"


def _whole(plan, cs, paper: str):
    """The same cards laid out whole, every card complete (the reference)."""
    return cl.whole_cards(pc.cards_context(plan, cs, paper=paper))


@pytest.mark.parametrize("paper", ["A4", "Letter"])
def test_stamped_cards_print_as_whole_cards(plan, study, paper, tmp_path):
    cs = class_set_study(study, roster_of_count(3), seed=0)
    lay, density = pc.card_layout(plan, cs, paper=paper)
    whole = _whole(plan, cs, paper)
    ctx = pc.cards_context(plan, cs, paper=paper)
    steps = {tuple(s["text"] for s in c["steps"]) for c in ctx["cards"]}  # the cards differ in steps only
    # the head, each distinct order of addition, the tube table, the bottom and the footer: once each
    assert lay.frames is not None and len(lay.frames.pages) == 1 + len(steps) + 3
    assert density == whole.density and len(lay.pages.pages) == 3
    _same_print(lay.write_pdf(), whole.write_pdf(), tmp_path)


def test_long_names_and_scripts_print_as_on_the_whole_card(plan, study, tmp_path):
    # a long name takes two lines: every card's name slot is two lines tall, as the whole card with
    # that name is; the right-to-left name prints its letters as the whole card does
    cs = class_set_study(study, parse_roster_csv(ROSTER), seed=2)
    lay, _ = pc.card_layout(plan, cs, paper="A4")
    assert lay.frames is not None
    stamped, whole = lay.write_pdf(), _whole(plan, cs, "A4").write_pdf()
    _same_print(stamped, whole, tmp_path, pages=[0])  # the long name's card: the same header height
    assert _words(stamped)[1] == _words(whole)[1]
    assert RTL.split()[0] in _words(stamped)[1][-1] or any(RTL.split()[0] in w for w in _words(stamped)[1])


def _draft(plan, student: str, section: str, rows: str):
    recipe = parse_recipe_csv("tube,CU,DY\n" + rows, plan)
    return SimpleNamespace(student=student, name="", section=section, bench="", recipe=recipe, series=None)


def test_cards_that_differ_in_their_steps_or_fields_get_frames_of_their_own(plan, tmp_path):
    # the first step ("about … mL of BG first") follows each card's least make-up volume, and a card
    # with a section has a header of five fields: two heads, two orders of addition, each laid out once
    small = "".join(f"T{i + 1},0.50,0.50\n" for i in range(6))
    large = "".join(f"T{i + 1},4.00,4.50\n" for i in range(6))
    drafts = [
        _draft(plan, "d1", "", small),
        _draft(plan, "d2", "", large),
        _draft(plan, "d3", "A", small),
        _draft(plan, "d4", "", small),
    ]
    lay, _ = pc.card_layout(plan, drafts, paper="A4")
    assert lay.frames is not None and len(lay.frames.pages) == 2 + 2 + 3  # and table, bottom, footer
    assert [tuple(k for k, _, _ in s[:3]) for s in lay.stamps] == [(0, 1, 2), (0, 3, 2), (4, 1, 2), (0, 1, 2)]
    _same_print(lay.write_pdf(), _whole(plan, drafts, "A4").write_pdf(), tmp_path)


def test_uneven_rows_fall_back_to_whole_cards(plan):
    # a tube name that wraps makes its row taller: the volumes cannot be one block of evenly spaced
    # lines, so the cards are laid out whole (and still one page each)
    rows = "Tube-one-with-a-long-name,1.00,1.00\n" + "".join(f"T{i + 2},2.00,1.00\n" for i in range(5))
    drafts = [_draft(plan, "u1", "", rows), _draft(plan, "u2", "", rows)]
    lay, _ = pc.card_layout(plan, drafts, paper="A4")
    assert lay.frames is None and len(lay.pages.pages) == 2
    from pypdf import PdfReader

    assert len(PdfReader(io.BytesIO(lay.write_pdf())).pages) == 2


def test_each_repeated_part_is_held_once(plan, study):
    from pypdf import PdfReader

    cs = class_set_study(study, roster_of_count(8), seed=0, tubes=5)
    lay, _ = pc.card_layout(plan, cs, paper="A4")
    stamped = lay.write_pdf()
    reader = PdfReader(io.BytesIO(stamped))
    forms = set()
    for page in reader.pages:
        xo = page["/Resources"]["/XObject"]
        forms |= {name for name in xo if name.startswith("/KplanFrame")}
        assert "/KplanFrame" in page.get_contents().get_data().decode("latin-1")
    assert forms == {f"/KplanFrame{k}" for k in range(len(lay.frames.pages))} and len(forms) < 8
    assert [o["/Title"] for o in reader.outline] == [c.student for c in cs.cards]  # a bookmark per card


def test_a_pdf_writer_that_does_not_take_the_frames_gets_whole_cards(plan, study, monkeypatch):
    # should a WeasyPrint build its PDF otherwise (the finisher cannot find one stream per page), the
    # same cards are laid out whole: slower, never missing
    from pypdf import PdfReader

    from planner.paper import stamp

    cs = class_set_study(study, roster_of_count(2), seed=0, tubes=5)
    lay, _ = pc.card_layout(plan, cs, paper="A4")

    def refuse(*args):
        raise ValueError("the PDF does not hold the pages laid out")

    monkeypatch.setattr(stamp, "_finish", refuse)
    reader = PdfReader(io.BytesIO(lay.write_pdf()))
    assert len(reader.pages) == 2
    assert not any("/KplanFrame" in str(p["/Resources"].get("/XObject", {})) for p in reader.pages)


def test_the_volumes_are_runs_of_glyphs_and_blocks_of_lines_where_they_cannot_be(
    plan, study, monkeypatch, tmp_path
):
    # the volumes are written from one layout of their glyphs (no line of them laid out on any card);
    # where a glyph is not one the numbers are set from, each column is a block of lines as before:
    # the same print either way
    from planner.paper import glyphs

    cs = class_set_study(study, roster_of_count(4), seed=1)
    lay, _ = pc.card_layout(plan, cs, paper="A4")
    assert lay.glyphs is not None and len(lay.runs) == 4
    stocks = len(pc.cards_context(plan, cs)["seq"])
    assert all(len(r) == cs.best.n_tubes * stocks for r in lay.runs)  # a run for every volume
    monkeypatch.setattr(glyphs, "GLYPHS", glyphs.GLYPHS.replace(".", ""))
    blocks, _ = pc.card_layout(plan, cs, paper="A4")
    assert blocks.glyphs is None and blocks.frames is not None
    _same_print(lay.write_pdf(), blocks.write_pdf(), tmp_path)
    _same_print(lay.write_pdf(), _whole(plan, cs, "A4").write_pdf(), tmp_path)
