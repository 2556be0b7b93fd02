"""The students' cards laid out in one pass, what repeats from card to card laid out once.

A card is mostly the same for every student: the title, the header box's labels, the stocks, the order
of addition, the tube table's headings and rules, the checklist, the safety box and the footer. Its own
values are few: the name, id, section and bench, the volumes in the tube table and the sentence on its
series. Laying out all that text again on every page was ~0.13 s a card; so the set is laid out in two
(three) WeasyPrint documents drawn from one template (``templates/cards.html.j2``):

- the *frames*, one page each, each distinct part laid out and measured once: the head (title, header
  box with its value slots empty, stocks), the order of addition (cards differ only where their first
  step does), the tube table with its volumes left out, the bottom (measuring and safety), the footer;
- the *cards*, one page each: a slot as tall as each frame, the card's values placed at the positions
  measured in the frame, and the card's series in the flow between the table and the bottom. The
  volumes are not laid out at all: a third document, the *atlas*, holds each of their glyphs once, and
  each volume is written as a run of those glyphs where the frame's cell puts its text
  (:mod:`planner.paper.glyphs`); where a volume holds another character, or the font kerns a pair of
  them, each stock's volumes are placed as one block of lines at the table's row pitch instead.

:func:`planner.paper.stamp.write_stamped` then draws each frame in its slots and writes the runs, so the
PDF shows every card whole — the same pixels as the card laid out whole (tested) — and holds the
repeated text once. A value
slot of the header box is as tall as its tallest value in the set (a second layout where a name runs
onto two lines). Where the tube table's rows are not evenly spaced (a tube name that wraps), or a card
does not fit its page at any type size, the cards are laid out whole instead. Everything is a pure
function of the context: the same set gives the same bytes.
"""

from __future__ import annotations

import logging
from collections.abc import Callable
from dataclasses import dataclass, field, replace

from .boxes import Rect, border_rect, boxes_of, content_rect
from .stamp import write_stamped

__all__ = ["DENSITIES", "FIRST_DENSITY", "CardLayout", "lay_out", "render_cards", "whole_cards"]

_log = logging.getLogger(__name__)

TEMPLATE = "cards.html.j2"
DENSITIES = 4  # type sizes tried until every card fits on one page (0: the normal size)
FIRST_DENSITY = {"A4": 0, "Letter": 1}  # Letter is 18 mm shorter than A4: its cards start one size smaller
VALUE_CLASS = {"name": "v nm", "student": "v id", "section": "v", "bench": "v"}  # as in the whole card
STAMP_ERRORS = (AttributeError, KeyError, TypeError, ValueError)  # WeasyPrint's boxes or PDF not as read here
TOL_PX = 0.01  # rows count as evenly spaced to a hundredth of a CSS pixel
PARTS = ("head", "steps", "table")  # the template's macros for a card's parts above its series


class _Overflow(Exception):
    """A card or a frame does not fit its page at this type size."""


class _Irregular(Exception):
    """The frame's tube table cannot take its values as blocks of lines."""


@dataclass(frozen=True)
class Column:
    """One stock's volumes in a frame: the cells' content box (left, width), the top of the block of
    lines that puts its first line where the first row's text goes, and the rows' pitch (CSS px,
    relative to the frame)."""

    x: float
    w: float
    top: float
    pitch: float
    text_top: float = 0.0  # the top of the first row's text (its placeholder's), relative to the frame


@dataclass(frozen=True)
class Frame:
    rect: Rect  # the frame's border box on its page
    slots: dict[str, Rect]  # the header box's value slots, relative to the frame
    columns: tuple[Column, ...]


@dataclass(frozen=True)
class CardLayout:
    """Laid-out cards: ``pages`` (one page per card) and, unless the cards were laid out whole, the
    ``frames`` drawn on them by ``stamps`` (for each page, ``(frame, dx, dy)`` in CSS px); ``whole``
    lays them out whole should the PDF writer not take the frames."""

    pages: object
    frames: object | None
    stamps: tuple[tuple[tuple[int, float, float], ...], ...]
    density: int
    whole: Callable[[], CardLayout] | None = field(default=None, compare=False, repr=False)
    glyphs: object | None = None  # the volumes' glyphs, one a page, where the volumes are runs of them
    runs: tuple | None = None  # for each page, its volumes as runs of glyphs (planner.paper.glyphs.run)

    def write_pdf(self) -> bytes:
        if self.frames is None:
            return self.pages.write_pdf()
        try:
            return write_stamped(self.frames, self.pages, self.stamps, self.glyphs, self.runs)
        except STAMP_ERRORS as e:  # a WeasyPrint whose PDF is built otherwise: the same cards, unstamped
            if self.whole is None:
                raise
            _log.warning("cards laid out whole: the frames could not be stamped (%s)", e)
            return self.whole().write_pdf()


def render_cards(ctx: dict, density: int, mode: str = "full", fonts=None, **extra):
    """One WeasyPrint layout of ``templates/cards.html.j2`` in ``mode`` (full, frames or overlay)."""
    from .render import lay_out_template

    return lay_out_template(TEMPLATE, {**ctx, "density": density, "mode": mode, **extra}, fonts)


def lay_out(ctx: dict) -> CardLayout:
    """The cards of ``ctx`` (:func:`planner.paper.cards.cards_context`) laid out, one page each, at the
    first type size where every card fits (at most DENSITIES − 1 sizes smaller than the first)."""
    from weasyprint.text.fonts import FontConfiguration

    fonts = FontConfiguration()  # one for both documents: their fonts are embedded together
    first = FIRST_DENSITY.get(ctx["paper"], 0)
    for density in range(first, DENSITIES):
        try:
            lay = _stamped(ctx, density, fonts)
        except _Overflow:
            continue
        except _Irregular:
            first = density
            break
        except STAMP_ERRORS as e:  # a WeasyPrint whose boxes are kept otherwise: lay the cards out whole
            _log.warning("cards laid out whole: the frames could not be measured (%s)", e)
            first = density
            break
        return replace(lay, whole=lambda d=density: whole_cards(ctx, d))
    return whole_cards(ctx, first, fonts)


def whole_cards(ctx: dict, first: int | None = None, fonts=None) -> CardLayout:
    """Every card laid out whole (nothing stamped), from type size ``first`` (default: the paper's first)
    in smaller type until each fits on one page: where the cards cannot be stamped, and the reference the
    stamped cards are tested against."""
    first = FIRST_DENSITY.get(ctx["paper"], 0) if first is None else first
    want = len(ctx["cards"])
    for density in range(first, DENSITIES):
        doc = render_cards(ctx, density, "full", fonts)
        if len(doc.pages) <= want:
            break
    return CardLayout(doc, None, (), density)


def _stamped(ctx: dict, density: int, fonts) -> CardLayout:
    """Frames and cards at one type size; raises _Overflow or _Irregular."""
    heights: dict[str, float] = {}
    atlas = _atlas(ctx, density, fonts)
    for _ in range(2):  # a second pass only where a value needs a taller slot than one line
        frames, index = _frames(ctx, density, heights)
        fdoc = render_cards(ctx, density, "frames", fonts, frames=frames, slot_height_px=_px(heights))
        if len(fdoc.pages) != len(frames) + 1:  # and the footer
            raise _Overflow
        geo = [_measure(page, k) for k, page in enumerate(fdoc.pages)]
        cards = [
            _overlay(c, geo, k, i > 0, columns=atlas is None)
            for i, (c, k) in enumerate(zip(ctx["cards"], index, strict=True))
        ]
        pages = render_cards(ctx, density, "overlay", fonts, cards=cards)
        if len(pages.pages) != len(cards):
            raise _Overflow
        stamps, tallest = _read(pages, geo, [len(PARTS) + 1] * len(cards))
        short = {
            s: h for s, h in tallest.items() if any(h > g.slots[s].h + TOL_PX for g in geo if s in g.slots)
        }
        if not short:
            if atlas is None:
                return CardLayout(pages, fdoc, stamps, density)
            runs = _runs(ctx, geo, index, stamps, atlas[1])
            return CardLayout(pages, fdoc, stamps, density, glyphs=atlas[0], runs=runs)
        heights.update(short)
    raise _Irregular  # taller slots still too short: lay the cards out whole


def _atlas(ctx: dict, density: int, fonts):
    """The tube tables' volumes' glyphs laid out one a page (the document) and where each sits
    (:func:`planner.paper.glyphs.read_atlas`), or None where the volumes must be laid out as text."""
    from .glyphs import NotSettable, atlas_glyphs, read_atlas

    try:
        cells = ((v, "volume") for c in ctx["cards"] for r in c["rows"] for v in r["cells"])
        glyphs, probes = atlas_glyphs(cells)
        doc = render_cards(ctx, density, "atlas", fonts, glyphs=glyphs, probes=probes)
        place, _ = read_atlas(doc, glyphs, probes)
    except NotSettable as e:
        _log.info("the cards' volumes laid out as text: %s", e)
        return None
    return doc.copy(doc.pages[: len(glyphs)]), place


def _runs(ctx: dict, geo: list[Frame], index, stamps, place: dict) -> tuple:
    """Each card page's volumes as runs of glyphs: right-aligned on its table frame's cells, each row's
    text where the frame's placeholder put it."""
    from .glyphs import run

    out = []
    for card, parts, marks in zip(ctx["cards"], index, stamps, strict=True):
        k = parts["table"]
        g = geo[k]
        dx, dy = next((mx, my) for f, mx, my in marks if f == k)
        lines = []
        for j, col in enumerate(g.columns):
            right, top = g.rect.x + dx + col.x + col.w, g.rect.y + dy + col.text_top
            for i, row in enumerate(card["rows"]):
                if row["cells"][j]:
                    lines.append(run(row["cells"][j], "volume", right, top + i * col.pitch, place))
        out.append(tuple(lines))
    return tuple(out)


def _px(heights: dict[str, float]) -> dict[str, str]:
    return {k: f"{v:.4f}" for k, v in heights.items()}


def _frames(ctx: dict, density: int, heights: dict[str, float]):
    """The distinct parts of the cards (markup), then the bottom; and for each card, the frame of each of
    its parts. The page's footer follows them as a frame of its own (the template adds it)."""
    from .render import template_macros

    mod = template_macros(TEMPLATE, {**ctx, "density": density, "slot_height_px": _px(heights)})
    frames: dict = {}
    index = [
        {part: frames.setdefault(getattr(mod, part)(c, False), len(frames)) for part in PARTS}
        for c in ctx["cards"]
    ]
    return [*frames, mod.bottom()], index


def _measure(page, k: int) -> Frame:
    """Where frame ``k`` puts the values: its header slots and the rows of each stock column."""
    found = boxes_of(page, "data-frame", "data-slot", "data-col", "data-ph")
    segs = list(found["data-frame"].items())
    if len(segs) != 1 or segs[0][0].get("data-frame") != str(k):
        raise _Overflow  # a frame split over pages
    seg = border_rect(segs[0][1])
    slots = {el.get("data-slot"): _rel(content_rect(b), seg) for el, b in found["data-slot"].items()}
    cells: dict[int, list] = {}
    for el, td in found["data-col"].items():
        ph = found["data-ph"][el[0]]  # the cell's hidden placeholder: where a value's text goes
        cells.setdefault(int(el.get("data-col")), []).append((int(el.get("data-row")), td, ph))
    return Frame(seg, slots, tuple(_column(sorted(cells[j], key=lambda r: r[0]), seg) for j in sorted(cells)))


def _rel(r: Rect, origin: Rect) -> Rect:
    return Rect(r.x - origin.x, r.y - origin.y, r.w, r.h)


def _column(rows: list, seg: Rect) -> Column:
    """A column's values as one block of lines with line-height = the rows' pitch. A line box of
    height ``pitch`` puts its text (``h`` high) (pitch − h) / 2 below its top, as the cell's line puts it
    at the placeholder's content top: the block starts that much above the first placeholder."""
    tops = [ph.content_box_y() for _, _, ph in rows]
    h = rows[0][2].height
    pitch = tops[1] - tops[0] if len(rows) > 1 else h
    x, w = rows[0][1].content_box_x(), rows[0][1].width
    for i, (_, td, ph) in enumerate(rows):
        even = abs(tops[i] - tops[0] - i * pitch) <= TOL_PX and abs(ph.height - h) <= TOL_PX
        if not even or abs(td.content_box_x() - x) > TOL_PX or abs(td.width - w) > TOL_PX:
            raise _Irregular
    return Column(x - seg.x, w, tops[0] - (pitch - h) / 2 - seg.y, pitch, tops[0] - seg.y)


def _f(v: float) -> str:
    return f"{round(v, 4) + 0.0:.4f}"


def _values(card: dict, g: Frame, dy: float, columns: bool = True) -> list[dict]:
    """A card's values in frame ``g`` drawn ``dy`` below its slot's top: the header's fields, and unless
    ``columns`` is False (the volumes are written as runs of glyphs), each stock's volumes as a block of
    lines."""
    values = [
        {"slot": s, "cls": VALUE_CLASS[s], "text": card[s], "bdi": True, "lh": None}
        | {"x": _f(r.x), "y": _f(r.y + dy), "w": _f(r.w), "label": card["label"] if s == "student" else None}
        for s, r in g.slots.items()
        if card[s]
    ]
    for j, col in enumerate(g.columns if columns else ()):
        values.append(
            {
                "slot": f"col{j}",
                "cls": "r col",
                "text": "\n".join(row["cells"][j] for row in card["rows"]),
                "bdi": False,
                "x": _f(col.x),
                "y": _f(col.top + dy),
                "w": _f(col.w),
                "lh": _f(col.pitch),
                "label": None,
            }
        )
    return values


def _slot(card: dict, geo: list[Frame], frames: list[int], first: bool, columns: bool = True) -> dict:
    """One slot for frames drawn one under the other, with the card's values in them."""
    values, dy = [], 0.0
    for k in frames:
        values += _values(card, geo[k], dy, columns)
        dy += geo[k].rect.h
    return {
        "frames": " ".join(map(str, frames)),
        "height": _f(dy),
        "values": values,
        "series": None,
        "next": first,
    }


def _overlay(card: dict, geo: list[Frame], index: dict[str, int], first: bool, columns: bool = True) -> dict:
    """A card's page: one slot for the frames of its parts with the card's values in them, the card's
    series, then the bottom's slot (the footer's frame is drawn on the page as it is); ``first``: the
    card is not the set's first, so its page starts here."""
    slots = [_slot(card, geo, [index[part] for part in PARTS], first, columns)]
    if card["series"]:
        slots.append({"frames": None, "series": card["series"]})
    slots.append(_slot(card, geo, [len(geo) - 2], False))
    return {"slots": slots}


def _read(pages, geo: list[Frame], want: list[int]):
    """Each page's stamps (where its slots landed: a slot's frames one under the other) and the tallest
    value of each header slot."""
    stamps, tallest = [], {}
    for page, n in zip(pages.pages, want, strict=True):
        found = boxes_of(page, "data-frame", "data-value")
        marks = []
        for el, b in found["data-frame"].items():
            r, dy = border_rect(b), 0.0
            for k in map(int, el.get("data-frame").split()):
                home = geo[k].rect
                marks.append((k, r.x - home.x, r.y + dy - home.y))
                dy += home.h
        if len(marks) != n:
            raise _Overflow
        marks.append((len(geo) - 1, 0.0, 0.0))  # the footer, where it was laid out
        for el, b in found["data-value"].items():
            s = el.get("data-value")
            if s in VALUE_CLASS:
                tallest[s] = max(tallest.get(s, 0.0), b.border_height())
        stamps.append(tuple(marks))
    return tuple(stamps), tallest
