"""Numbers set from one layout of their glyphs: where each glyph of an *atlas* (a WeasyPrint document
holding one glyph a page, each in the style of the text it stands for) sits, and the runs of text that put
a number where the layout would have put it, right-aligned.

A page of numbers — the instructor's key's readings, the cards' volumes — is mostly a dozen glyphs
(:data:`GLYPHS`); laying each number out as a line of text costs WeasyPrint about half a millisecond, so
the page is laid out with the numbers left out and each number is written as one run of glyphs
(:func:`planner.paper.stamp.write_runs`): it starts where the text would start (the right edge of its
place less the run's width, the widths the shaper gives) and each glyph follows by its width in the font,
as WeasyPrint writes every line. That is the shaper's own placement when no pair of the glyphs is kerned,
so the atlas ends with a *probe* line for each style holding every ordered pair of its glyphs, and
:func:`read_atlas` refuses (:class:`NotSettable`) when a probe is not as wide as its glyphs together.
"""

from __future__ import annotations

from .boxes import boxes_of, content_rect

__all__ = ["GLYPHS", "NotSettable", "atlas_glyphs", "read_atlas", "run"]

GLYPHS = "0123456789.–−-+e—"  # what the numbers are written with; anything else is laid out as text
TOL_PX = 1e-3  # widths agree to a thousandth of a CSS pixel


class NotSettable(ValueError):
    """The numbers cannot be set from the atlas: lay the page out whole."""


def atlas_glyphs(lines) -> tuple[list[dict], list[tuple[str, str]]]:
    """The atlas's glyphs (``{"char", "style"}``, one a page) and its probe lines ``(style, text)`` for
    the ``(text, style)`` pairs in ``lines``; raises :class:`NotSettable` for a character outside
    :data:`GLYPHS`."""
    used: dict[str, set[str]] = {}
    for text, style in lines:
        used.setdefault(style, set()).update(text)
    if any(ch not in GLYPHS for chars in used.values() for ch in chars):
        raise NotSettable(f"a number holds a character other than {GLYPHS}")
    glyphs = [{"char": ch, "style": st} for st, chars in sorted(used.items()) for ch in sorted(chars)]
    probes = [(st, "".join(a + b for a in sorted(ch) for b in sorted(ch))) for st, ch in sorted(used.items())]
    return glyphs, probes


def _text_boxes(box) -> list:
    from weasyprint.formatting_structure.boxes import TextBox

    return [d for d in box.descendants() if isinstance(d, TextBox)]


def read_atlas(atlas, glyphs: list[dict], probes: list[tuple[str, str]]):
    """Each glyph's place on its page of ``atlas`` — ``(page, left of its text, top of the element marked
    data-line, advance)`` keyed by (char, style) — and the height of that element for each style; the
    page after the glyphs holds the probe lines (elements marked ``data-probe`` = style)."""
    if len(atlas.pages) != len(glyphs) + 1:
        raise NotSettable("the atlas does not hold one page per glyph")
    place, height = {}, {}
    for k, g in enumerate(glyphs):
        (line,) = boxes_of(atlas.pages[k], "data-line")["data-line"].values()
        (text,) = _text_boxes(line)
        r = content_rect(line)
        place[g["char"], g["style"]] = (k, text.position_x, r.y, text.width)
        height.setdefault(g["style"], r.h)
    found = boxes_of(atlas.pages[-1], "data-probe")["data-probe"]
    widths = {el.get("data-probe"): sum(t.width for t in _text_boxes(box)) for el, box in found.items()}
    for style, probe in probes:
        if abs(widths[style] - sum(place[ch, style][3] for ch in probe)) > TOL_PX:
            raise NotSettable("the font kerns a pair of the numbers' glyphs")
    return place, height


def run(text: str, style: str, right: float, top: float, place: dict) -> tuple[tuple[int, ...], float, float]:
    """The run of ``text`` right-aligned on ``right`` with its data-line element's top at ``top`` (CSS px):
    its glyphs' atlas pages and the move (dx, dy) of the first glyph from its place in the atlas."""
    k0, x0, y0, _ = place[text[0], style]
    x = right - sum(place[ch, style][3] for ch in text)
    return tuple(place[ch, style][0] for ch in text), x - x0, top - y0
