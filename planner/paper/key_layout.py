"""The instructor's key laid out with its numbers set from one layout of their glyphs.

Most of the key is numbers: every tube of every card has its expected absorbance and its acceptance band,
two lines of text in its cell, beside the card's distinct compositions, saturation and SE; WeasyPrint
spends about half a millisecond laying out and drawing each line — 200 cards of 8 tubes are over 3800
lines. Those numbers are written with a dozen glyphs (the digits, the point, the dash and the minus), so
the key is laid out in two WeasyPrint documents from one template (``templates/key.html.j2``):

- the *atlas*: each glyph the numbers use, in each of their styles (a value, a band, a failing card's
  SE), alone on a page, then a probe line of every pair of those glyphs in each style;
- the *frame*: the key as it prints with each student's numbers left out — one cell across their columns
  holding an empty block as tall as a tube's two lines — so every row, page break and other word is where
  the key laid out whole puts it.

:func:`planner.paper.stamp.write_runs` then writes each number as one run of text in the key's own font,
the glyphs read from the atlas: the run starts where the layout puts the cell's text (right-aligned on
its column, as the cell's text is) and each glyph follows by its width in the font, as WeasyPrint writes
every line — which is what the text shaper does when no pair of the glyphs is kerned: the probe lines
check that on every run, their width against the sum of their glyphs'. The printed key is the key laid
out whole (tested pixel by pixel, and word by word) and reads back as text. Where a number holds a
character outside :data:`GLYPHS`, the fonts kern a pair, the placeholder's height differs from the
lines', or the PDF writer does not take the runs, the key is laid out whole instead. The same class set
gives the same bytes.
"""

from __future__ import annotations

import logging

from .boxes import boxes_of, content_rect
from .glyphs import GLYPHS, NotSettable, atlas_glyphs, read_atlas, run
from .stamp import write_runs

__all__ = ["GLYPHS", "key_pdf", "whole_key"]

_log = logging.getLogger(__name__)

TEMPLATE = "key.html.j2"
STAMP_ERRORS = (AttributeError, KeyError, TypeError, ValueError, IndexError)  # boxes or PDF not as read here
TOL_PX = 1e-3  # line heights agree to a thousandth of a CSS pixel


def key_pdf(ctx: dict) -> bytes:
    """``key.pdf`` from the key's template context (:func:`planner.paper.cards.key_context`)."""
    try:
        return _stamped(ctx)
    except STAMP_ERRORS as e:  # NotSettable among them
        _log.info("key laid out whole: %s", e)
        return whole_key(ctx).write_pdf()


def whole_key(ctx: dict, fonts=None):
    """The key laid out whole, every number as text (the reference the stamped key is tested against)."""
    from .render import lay_out_template

    return lay_out_template(TEMPLATE, {**ctx, "mode": "full"}, fonts)


def _rows(ctx: dict) -> list[list[list[tuple[str, str]]]]:
    """For each student, the lines of each numeric column — distinct, saturation, SE, then each tube's
    value and band — as (text, style)."""
    return [
        [
            [(str(s["distinct"]), "value")],
            [(s["saturation"], "value")],
            [(s["se"], "value" if s["passes"] else "bad")],
            *([(c["a"], "value"), (c["band"], "band")] for c in s["cells"]),
        ]
        for s in ctx["students"]
    ]


def _stamped(ctx: dict) -> bytes:
    from weasyprint.text.fonts import FontConfiguration

    from .render import lay_out_template

    rows = _rows(ctx)
    glyphs, probes = atlas_glyphs(line for row in rows for col in row for line in col)
    fonts = FontConfiguration()  # one for both documents: their fonts are embedded together
    atlas = lay_out_template(TEMPLATE, {**ctx, "mode": "atlas", "glyphs": glyphs, "probes": probes}, fonts)
    place, line_h = read_atlas(atlas, glyphs, probes)
    frame = lay_out_template(TEMPLATE, {**ctx, "mode": "frame"}, fonts)
    runs = [_page_runs(page, rows, place, line_h) for page in frame.pages]
    return write_runs(atlas.copy(atlas.pages[: len(glyphs)]), frame, runs)


def _page_runs(page, rows, place: dict, line_h: dict) -> tuple[tuple[tuple[int, ...], float, float], ...]:
    """The runs of text on a frame page, one for each line of each student's numbers: a column's lines
    right-aligned on the content box of its heading, one under the other from the top of the row's
    content box."""
    found = boxes_of(page, "data-col", "data-row", "data-ph")
    cols = {int(el.get("data-col")): content_rect(th) for el, th in found["data-col"].items()}
    tall = line_h["value"] + line_h.get("band", 0.0)
    if any(abs(b.border_height() - tall) > TOL_PX for b in found["data-ph"].values()):
        raise NotSettable("the placeholder is not as tall as a tube's lines")
    runs = []
    for el, td in found["data-row"].items():
        top0 = content_rect(td).y
        for j, lines in enumerate(rows[int(el.get("data-row"))]):
            top = top0
            for text, style in lines:
                if text:
                    runs.append(run(text, style, cols[j].x + cols[j].w, top, place))
                top += line_h[style]
    return tuple(runs)
