"""The instructor's key with its numbers stamped glyph by glyph (planner.paper.key_layout): it prints as
the key laid out whole — the same pixels, the same words — and is laid out whole where it cannot be."""

from __future__ import annotations

import io
import shutil
import subprocess

import pytest

from planner.inputs.roster import parse_roster_csv, roster_of_count
from planner.jobs.classroom.cards import class_set_study
from planner.jobs.classroom.stock_list import class_stocks
from planner.paper import cards as pc
from planner.paper import key_layout as kl

from ._print import same_print

pytestmark = pytest.mark.skipif(shutil.which("pdftoppm") is None, reason="pdftoppm (poppler-utils) missing")

LONG_NAME = "Maximiliane-Friederike Adelheid von Hohenzollern-Sigmaringen-Vöhringen"  # invented
RTL = "\u05e2\u05d3\u05d4 \u05e8\u05d5\u05e0\u05e1\u05e8"  # an invented name in Hebrew letters


def _ctx(plan, study, roster, paper="A4", **kw):
    cs = class_set_study(study, roster, seed=kw.pop("seed", 0), **kw)
    stocks = class_stocks(plan, [c.recipe for c in cs.cards], roster)
    return pc.key_context(plan, cs, stocks, paper=paper)


def _text(pdf: bytes, tmp_path, tag: str) -> str:
    """The words of every page as poppler lays them out (columns kept), to compare two keys line by line."""
    src = tmp_path / f"{tag}.pdf"
    src.write_bytes(pdf)
    done = subprocess.run(["pdftotext", "-layout", str(src), "-"], check=True, capture_output=True)
    return done.stdout.decode()


def _forms(pdf: bytes) -> set[str]:
    """The stamped parts (form XObjects) a PDF's pages draw."""
    from pypdf import PdfReader

    found: set[str] = set()
    for page in PdfReader(io.BytesIO(pdf)).pages:
        found |= {n for n in page["/Resources"].get("/XObject", {}) if n.startswith("/KplanFrame")}
    return found


@pytest.mark.parametrize("paper", ["A4", "Letter"])
def test_stamped_key_prints_as_the_key_laid_out_whole(plan, study, paper, tmp_path):
    roster = parse_roster_csv(
        "id,name,section\n"
        + f"w1,{LONG_NAME},Monday-afternoon\nw2,{RTL},Tue\n"
        + "".join(f"s{i},Student {i},Tue\n" for i in range(3, 40))
    )
    ctx = _ctx(plan, study, roster, paper)
    # a failing card prints its SE in bold red and its problems on a row of their own
    ctx["students"][2] |= {"passes": False, "problems": ["verdict bounded: an invented problem"]}
    stamped, whole = kl._stamped(ctx), kl.whole_key(ctx).write_pdf()  # _stamped: never laid out whole
    same_print(stamped, whole, tmp_path)
    assert _text(stamped, tmp_path, "s") == _text(whole, tmp_path, "w")
    assert "0." in _text(stamped, tmp_path, "s2") and LONG_NAME.split()[0] in _text(stamped, tmp_path, "s3")


def test_the_numbers_are_text_and_the_key_is_the_same_for_the_same_set(plan, study):
    ctx = _ctx(plan, study, roster_of_count(12))
    a = kl._stamped(ctx)
    assert not _forms(a)  # the numbers are text in the key's fonts: no glyph is held as a drawing
    assert len(a) < 1.5 * len(kl.whole_key(ctx).write_pdf())
    assert kl.key_pdf(_ctx(plan, study, roster_of_count(12))) == a


def test_a_number_with_other_characters_gets_the_key_laid_out_whole(plan, study):
    ctx = _ctx(plan, study, roster_of_count(3))
    ctx["students"][1]["cells"][0] |= {"a": "n/a"}
    assert kl.key_pdf(ctx) == kl.whole_key(ctx).write_pdf()


def test_a_kerned_pair_gets_the_key_laid_out_whole(plan, study, monkeypatch):
    # the probe line measures every pair of the glyphs used: "AV" is kerned in the sheets' typeface, so
    # glyph-by-glyph placement would move the V; the key is laid out whole instead
    from planner.paper import glyphs

    monkeypatch.setattr(glyphs, "GLYPHS", glyphs.GLYPHS + "AV")
    ctx = _ctx(plan, study, roster_of_count(3))
    ctx["students"][0]["cells"][0] |= {"a": "AV"}
    with pytest.raises(glyphs.NotSettable, match="kerns"):
        kl._stamped(ctx)
    assert kl.key_pdf(ctx) == kl.whole_key(ctx).write_pdf()


def test_the_key_document_is_set_from_the_atlas(plan, study, monkeypatch):
    roster = roster_of_count(4)
    cs = class_set_study(study, roster, seed=0)
    stocks = class_stocks(plan, [c.recipe for c in cs.cards], roster)

    def whole(*args, **kw):
        raise AssertionError("the key was laid out whole")

    monkeypatch.setattr(kl, "whole_key", whole)
    assert pc.key_document(plan, cs, stocks).startswith(b"%PDF")


def test_a_pdf_writer_that_does_not_take_the_runs_gets_the_key_laid_out_whole(plan, study, monkeypatch):
    from planner.paper import stamp

    ctx = _ctx(plan, study, roster_of_count(2))

    def refuse(*args):
        raise ValueError("a glyph page does not hold one glyph drawn as expected")

    monkeypatch.setattr(stamp, "_finish", refuse)
    assert kl.key_pdf(ctx) == kl.whole_key(ctx).write_pdf()
