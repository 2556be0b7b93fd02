"""Pages that repeat most of their content: the repeated parts laid out once and drawn on every page.

WeasyPrint spends about a millisecond on each line of text it lays out, so thirty cards that each repeat
the same stocks, checklist and safety box cost thirty times the same work. Here a repeated part (a
*frame*) is laid out once, on a page of its own; its page content becomes a PDF form XObject — a content
stream drawn by reference, as many times as wanted [source: ISO 32000-1:2008, §8.10 "Form XObjects"] —
and every page that shows it draws it at the offset of its slot. The file holds each frame once.

The slots' positions come from WeasyPrint's laid-out boxes (:mod:`planner.paper.boxes`), the layout the
PDF is drawn from, so a slot and its frame line up to the CSS pixel; the layout tests compare the pages.
"""

from __future__ import annotations

import functools
from collections.abc import Sequence

__all__ = ["PT_PER_PX", "write_stamped"]

PT_PER_PX = 0.75  # PDF points per CSS pixel (72 / 96) [source: CSS Values and Units Level 3, §5.2]
FRAME_NAME = "KplanFrame{}"  # the XObject names: WeasyPrint names its own images otherwise


def write_stamped(frames, pages, stamps: Sequence[Sequence[tuple[int, float, float]]]) -> bytes:
    """The PDF of ``pages`` (a WeasyPrint document) with the frames drawn on them.

    Parameters
    ----------
    frames : WeasyPrint document, one page per frame, laid out with the same page size as ``pages``.
    pages : WeasyPrint document, the pages to print.
    stamps : for each page of ``pages``, the frames it shows as ``(frame, dx, dy)``: frame ``frame``'s
        page is drawn shifted by (dx, dy) CSS px, under the page's own content.

    The two documents must have been laid out with one ``FontConfiguration`` (their fonts are embedded
    once, subset to the glyphs of both). The bytes depend on the inputs only.
    """
    if len(stamps) != len(pages.pages):
        raise ValueError(f"{len(stamps)} stamp lists for {len(pages.pages)} pages")
    doc = pages.copy([*frames.pages, *pages.pages])
    finish = functools.partial(_stamp, len(frames.pages), [tuple(s) for s in stamps])
    return doc.write_pdf(finisher=finish)


def _number(reference) -> int:
    """The object number of an indirect reference as pydyf writes it (b"12 0 R")."""
    return int(bytes(reference).split()[0])


def _offset(value_px: float) -> str:
    pt = round(value_px * PT_PER_PX, 4) + 0.0  # + 0.0: no "-0.0" in the file
    return f"{pt:.4f}"


def _stamp(n_frames: int, stamps: list, document, pdf) -> None:
    """WeasyPrint finisher: the first ``n_frames`` pages become form XObjects drawn on the other pages.

    WeasyPrint writes one content stream per page and one resources dictionary for every page; a
    frame's stream keeps those resources as the form's own and its page's media box as the form's
    bounding box. The frames' page objects are emptied and left out of the page tree.
    """
    import pydyf

    kids = list(pdf.pages["Kids"])
    numbers = kids[::3]
    if len(numbers) != n_frames + len(stamps):
        raise ValueError("the PDF does not hold the pages laid out")
    frame_pages = [pdf.objects[n] for n in numbers[:n_frames]]
    resources_ref = frame_pages[0]["Resources"] if frame_pages else None
    xobjects = pdf.objects[_number(resources_ref)]["XObject"] if frame_pages else {}
    for k, page in enumerate(frame_pages):
        if page["Resources"] != resources_ref:
            raise ValueError("frames with resources of their own")
        form = pdf.objects[_number(page["Contents"])]
        form.extra.update({"Type": "/XObject", "Subtype": "/Form", "BBox": page["MediaBox"]})
        form.extra["Resources"] = resources_ref
        xobjects[FRAME_NAME.format(k)] = form.reference
        page.clear()  # an orphan now (pydyf writes every object it holds)
    for number, marks in zip(numbers[n_frames:], stamps, strict=True):
        stream = pdf.objects[_number(pdf.objects[number]["Contents"])]
        head: list[bytes] = []
        for k, dx, dy in marks:
            # PDF space runs upwards: a frame moved dy px down the page is translated by -dy
            move = f"1 0 0 1 {_offset(dx)} {_offset(-dy)} cm"
            head += [b"q", move.encode("ascii"), f"/{FRAME_NAME.format(k)} Do".encode("ascii"), b"Q"]
        stream.stream[:0] = [*head, b"q"]  # the frames first: the page's own content is drawn over them
        stream.stream.append(b"Q")
    pdf.pages["Kids"] = pydyf.Array(kids[3 * n_frames :])
    pdf.pages["Count"] = len(numbers) - n_frames
