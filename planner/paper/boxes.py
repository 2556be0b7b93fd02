"""Where WeasyPrint put things: the laid-out boxes of marked elements, read back from a rendered page.

Templates mark the elements whose place matters with a ``data-`` attribute; these helpers find their
boxes in a WeasyPrint document (``Page._page_box``, the box tree WeasyPrint draws the PDF from), so a
layout can be checked (a table inside the page) or reused (a frame and its slots, :mod:`.stamp`).
Positions are CSS px from the page's top-left corner.
"""

from __future__ import annotations

from typing import NamedTuple

__all__ = ["Rect", "border_rect", "boxes_of", "content_rect", "overflowing"]

OVERFLOW_TOL_PX = 0.5  # half a CSS pixel: rounding, not a column past the edge


class Rect(NamedTuple):
    """A box in CSS px from the page's top-left corner."""

    x: float
    y: float
    w: float
    h: float


def boxes_of(page, *attributes: str) -> dict[str, dict]:
    """The laid-out box of every element carrying one of ``attributes`` on a WeasyPrint page: for each
    attribute, a dict element → box in document order.

    The first box met in document order is the element's own; the anonymous boxes WeasyPrint makes
    inside it (its lines, its text) come after. An absolutely positioned box is met as the placeholder
    WeasyPrint leaves in the flow, which answers for the box.
    """
    found: dict[str, dict] = {a: {} for a in attributes}
    for b in page._page_box.descendants():
        el = getattr(b, "element", None)
        if el is None:
            continue
        for a in attributes:
            if el.get(a) is not None and el not in found[a]:
                found[a][el] = b
    return found


def border_rect(b) -> Rect:
    """The border box of a laid-out box."""
    return Rect(b.border_box_x(), b.border_box_y(), b.border_width(), b.border_height())


def content_rect(b) -> Rect:
    """The content box of a laid-out box."""
    return Rect(b.content_box_x(), b.content_box_y(), b.width, b.height)


def page_area(page) -> Rect:
    """The page area (inside the page margins) of a laid-out page."""
    return content_rect(page._page_box)


def overflowing(doc, attribute: str) -> list[tuple[int, str]]:
    """(page number from 1, the attribute's value) of every element marked with ``attribute`` whose box
    or any box inside it runs past the right edge of its page area."""
    out = []
    for number, page in enumerate(doc.pages, 1):
        right = page_area(page).x + page_area(page).w + OVERFLOW_TOL_PX
        for el, b in boxes_of(page, attribute)[attribute].items():
            if any(
                d.border_box_x() + d.border_width() > right
                for d in b.descendants()
                if hasattr(d, "border_width")
            ):
                out.append((number, el.get(attribute)))
    return out
