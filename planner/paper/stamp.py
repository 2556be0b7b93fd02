"""Pages that repeat most of their content: the repeated parts laid out once and drawn on every page.

WeasyPrint spends about a millisecond on each line of text it lays out, so thirty cards that each repeat
the same stocks, checklist and safety box cost thirty times the same work. Here a repeated part (a
*frame*) is laid out once, on a page of its own; its page content becomes a PDF form XObject — a content
stream drawn by reference, as many times as wanted [source: ISO 32000-1:2008, §8.10 "Form XObjects"] —
and every page that shows it draws it at the offset of its slot. The file holds each frame once.

:func:`write_runs` does the same for text made of a few glyphs (the instructor's key's numbers): each
glyph is laid out once, on a page of its own, and every line of such text is written as one run of those
glyphs in the document's own font — a text object placing its first glyph with the text matrix and
advancing each glyph by its width in the font's widths array [source: ISO 32000-1:2008, §9.4 "Text
objects", §9.2.4 "Glyph positioning and metrics", §9.7.4.3 "Glyph metrics in CIDFonts"] — so it prints
as WeasyPrint's own lines and reads back as text.

The slots' positions come from WeasyPrint's laid-out boxes (:mod:`planner.paper.boxes`), the layout the
PDF is drawn from, so a slot and its frame line up to the CSS pixel; the layout tests compare the pages.
"""

from __future__ import annotations

import functools
import re
from collections.abc import Sequence

__all__ = ["PT_PER_PX", "write_runs", "write_stamped"]

PT_PER_PX = 0.75  # PDF points per CSS pixel (72 / 96) [source: CSS Values and Units Level 3, §5.2]
FRAME_NAME = "KplanFrame{}"  # the XObject names: WeasyPrint names its own images otherwise


def write_stamped(frames, pages, stamps, glyphs=None, runs=None) -> bytes:
    """The PDF of ``pages`` (a WeasyPrint document) with the frames drawn on them, and runs of text
    written from ``glyphs`` (:func:`write_runs`) where given.

    Parameters
    ----------
    frames : WeasyPrint document, one page per frame, laid out with the same page size as ``pages``.
    pages : WeasyPrint document, the pages to print.
    stamps : for each page of ``pages``, the frames it shows as ``(frame, dx, dy)``: frame ``frame``'s
        page is drawn shifted by (dx, dy) CSS px, under the page's own content.
    glyphs, runs : as in :func:`write_runs` (``runs`` one list a page), or None.

    The documents must have been laid out with one ``FontConfiguration`` (their fonts are embedded
    once, subset to the glyphs of all). The bytes depend on the inputs only.
    """
    n = len(pages.pages)
    if len(stamps) != n or (runs is not None and len(runs) != n):
        raise ValueError(f"{len(stamps)} stamp lists for {n} pages")
    extra = [] if glyphs is None else list(glyphs.pages)
    doc = pages.copy([*frames.pages, *extra, *pages.pages])
    finish = functools.partial(
        _finish,
        len(frames.pages),
        [tuple(s) for s in stamps],
        len(extra),
        [tuple(r) for r in runs] if runs is not None else [()] * n,
    )
    return doc.write_pdf(finisher=finish)


def write_runs(glyphs, pages, runs: Sequence[Sequence[tuple[Sequence[int], float, float]]]) -> bytes:
    """The PDF of ``pages`` with lines of text written on them from the glyphs of ``glyphs``.

    Parameters
    ----------
    glyphs : WeasyPrint document holding one glyph a page (drawn as WeasyPrint draws a line of text: its
        colour, font and size, a text matrix at its origin).
    pages : WeasyPrint document, the pages to print, laid out with the same ``FontConfiguration``.
    runs : for each page of ``pages``, its lines as ``(glyph pages, dx, dy)``: the glyphs of those pages,
        all of one colour, font and size, written as one run of text whose origin is the first glyph's
        origin moved by (dx, dy) CSS px. Within a run each glyph follows the one before by its width in
        the embedded font, as in the lines WeasyPrint writes itself, so a line prints as WeasyPrint would
        print it, and reads back as one word.

    The glyphs' pages are left out of the file; the fonts hold their glyphs. The bytes depend on the
    inputs only.
    """
    from types import SimpleNamespace

    return write_stamped(SimpleNamespace(pages=[]), pages, [()] * len(pages.pages), glyphs, runs)


def _number(reference) -> int:
    """The object number of an indirect reference as pydyf writes it (b"12 0 R")."""
    return int(bytes(reference).split()[0])


def _offset(value_px: float) -> str:
    pt = round(value_px * PT_PER_PX, 4) + 0.0  # + 0.0: no "-0.0" in the file
    return f"{pt:.4f}"


def _num(value: float) -> str:
    return f"{round(value, 6) + 0.0:.6f}"  # as WeasyPrint writes its own; + 0.0: no "-0.0"


def _finish(n_frames: int, stamps: list, n_glyphs: int, runs: list, document, pdf) -> None:
    """WeasyPrint finisher: the first ``n_frames`` pages become form XObjects drawn on the pages after
    the glyphs; the next ``n_glyphs`` pages are read for their glyphs; both are left out of the page tree.

    WeasyPrint writes one content stream per page and one resources dictionary for every page; a
    frame's stream keeps those resources as the form's own and its page's media box as the form's
    bounding box, and the runs use the fonts in them.
    """
    import pydyf

    kids = list(pdf.pages["Kids"])
    numbers = kids[::3]
    skip = n_frames + n_glyphs
    if len(numbers) != skip + len(stamps):
        raise ValueError("the PDF does not hold the pages laid out")
    resources_ref = pdf.objects[numbers[0]]["Resources"]
    if any(pdf.objects[n]["Resources"] != resources_ref for n in numbers):
        raise ValueError("pages with resources of their own")
    for k, n in enumerate(numbers[:n_frames]):
        page = pdf.objects[n]
        form = pdf.objects[_number(page["Contents"])]
        form.extra.update({"Type": "/XObject", "Subtype": "/Form", "BBox": page["MediaBox"]})
        form.extra["Resources"] = resources_ref
        pdf.objects[_number(resources_ref)]["XObject"][FRAME_NAME.format(k)] = form.reference
    glyph = [_glyph_ops(pdf.objects[n], pdf) for n in numbers[n_frames:skip]]
    for n in numbers[:skip]:
        pdf.objects[n].clear()  # an orphan now (pydyf writes every object it holds)
    for number, marks, lines in zip(numbers[skip:], stamps, runs, strict=True):
        page = pdf.objects[number]
        head: list[bytes] = []
        for k, dx, dy in marks:
            # PDF space runs upwards: a frame moved dy px down the page is translated by -dy
            move = f"1 0 0 1 {_offset(dx)} {_offset(-dy)} cm"
            head += [b"q", move.encode("ascii"), f"/{FRAME_NAME.format(k)} Do".encode("ascii"), b"Q"]
        if lines:
            head += _run_ops(glyph, lines, float(page["MediaBox"][3]))
        stream = pdf.objects[_number(page["Contents"])]
        stream.stream[:0] = [*head, b"q"]  # the frames and runs first: the page's own content over them
        stream.stream.append(b"Q")
    pdf.pages["Kids"] = pydyf.Array(kids[3 * skip :])
    pdf.pages["Count"] = len(numbers) - skip


_GLYPH = re.compile(
    rb"(?P<state>(?:/\S+ gs\n)?[\d.]+ [\d.]+ [\d.]+ rg\n)BT\n1 0 0 -1 (?P<x>-?[\d.]+) (?P<y>-?[\d.]+) Tm\n"
    rb"(?P<font>/\S+ [\d.]+ Tf)\n\[<(?P<gid>[0-9a-f]+)>-?\d*\] TJ\nET"
)


def _glyph_ops(page, pdf) -> dict:
    """A glyph page's drawing state, origin and glyph id, read from its content stream (one glyph, drawn in
    the page's own coordinates: nothing moved but by the page's two transforms)."""
    stream = pdf.objects[_number(page["Contents"])]
    text = b"\n".join(op if isinstance(op, bytes) else str(op).encode("latin-1") for op in stream.stream)
    found = list(_GLYPH.finditer(text))
    if len(found) != 1 or text.count(b" cm\n") != 2:
        raise ValueError("a glyph page does not hold one glyph drawn as expected")
    m = found[0]
    return {"state": m["state"], "font": m["font"], "gid": m["gid"], "x": float(m["x"]), "y": float(m["y"])}


def _run_ops(glyph: list[dict], lines, height_pt: float) -> list[bytes]:
    """The operators writing ``lines`` (runs of glyphs) on a page ``height_pt`` tall."""
    # the page's coordinates as WeasyPrint sets them: CSS px from the top-left corner, y downwards
    ops = [b"q", f"1 0 0 -1 0 {_num(height_pt)} cm".encode("ascii")]
    ops.append(f"{PT_PER_PX:g} 0 0 {PT_PER_PX:g} 0 0 cm".encode("ascii"))
    for ks, dx, dy in lines:
        g0 = glyph[ks[0]]
        if any(glyph[k]["state"] != g0["state"] or glyph[k]["font"] != g0["font"] for k in ks):
            raise ValueError("a run of glyphs of more than one colour, font or size")
        x, y = _num(g0["x"] + dx), _num(g0["y"] + dy)
        hexes = b"".join(glyph[k]["gid"] for k in ks)
        ops += [b"q", g0["state"].rstrip(b"\n"), b"BT", f"1 0 0 -1 {x} {y} Tm".encode("ascii")]
        ops += [g0["font"], b"<" + hexes + b"> Tj", b"ET", b"Q"]
    ops.append(b"Q")
    return ops
