"""Cards, key and stock list on paper: students' words only, the key equal to the assessment, hostile
roster text printed as text, deterministic bytes."""

from __future__ import annotations

import csv
import io
import re

import pytest

from planner.inputs.roster import parse_roster_csv
from planner.jobs.classroom.cards import class_set_study
from planner.jobs.classroom.stock_list import class_stocks
from planner.jobs.plan.assess import assess_study
from planner.paper import cards as pc
from planner.paper.json_out import to_json

LONG = "Q" * 200  # the longest name a roster takes (planner.inputs.limits.MAX_TEXT)
RTL = "\u05e2\u05d3\u05d4 \u05e8\u05d5\u05e0\u05e1\u05e8"  # an invented name in Hebrew letters
# invented roster, hostile on purpose: markup, template syntax, a right-to-left script, a long name
# (a right-to-left override or a control character is refused by the roster reader: tests/inputs)
HOSTILE = (
    "id,name,section\n"
    "h1,\"<img src='http://example.invalid/x.png'><script>alert(1)</script>\",A\n"
    'h2,"{{ 7*7 }} {% raw %}Ludovika{% endraw %}",A\n'
    f"h3,{RTL},B\n"
    f"h4,{LONG},B\n"
)
PLAN_KEYS = (
    "conc_rsd",
    "reagent =",
    "on_hand",
    "goal_se",
    "log_beta",
    "linear_range",
    "min_volume",
    "dead_volume",
    "epsilon",
)


@pytest.fixture(scope="module")
def cset(study):
    return class_set_study(study, parse_roster_csv(HOSTILE), seed=1)


@pytest.fixture(scope="module")
def card_html(plan, cset):
    return pc.cards_document(plan, cset, fmt_="html").decode("utf-8")


def test_cards_speak_to_students(card_html):
    low = card_html.lower()
    for key in PLAN_KEYS:
        assert key not in low, key
    assert "expected" not in low and "band" not in low  # no expected absorbances on a student's card
    assert "Measured A" in card_html and card_html.count('class="l write"') == 4 * 8


def test_hostile_roster_text_is_text(card_html):
    assert "<img" not in card_html and "<script" not in card_html
    assert "&lt;img src=" in card_html and "&lt;scr" in card_html
    assert "{{ 7*7 }}" in card_html and "49" not in re.sub(
        r"\d+\.\d+", "", card_html.split("Ludovika")[0][-40:]
    )
    assert f"<bdi>{RTL}</bdi>" in card_html  # right-to-left text stays inside its own box
    assert LONG not in card_html and ("Q" * (pc.NAME_MAX - 1) + "…") in card_html


def test_cards_pdf_one_page_per_student(plan, cset):
    from pypdf import PdfReader

    pdf = pc.cards_document(plan, cset)
    assert len(PdfReader(io.BytesIO(pdf)).pages) == len(cset.cards)
    assert b"example.invalid" not in pdf


def test_key_equals_the_assessment(plan, study, cset):
    rows = list(csv.DictReader(io.StringIO(pc.key_csv(plan, cset))))
    ids = [s.id for s in plan.stock]
    assert list(rows[0].keys()) == [
        "student",
        "name",
        "section",
        "tube",
        *ids,
        "absorbance",
        "band_low",
        "band_high",
    ]
    assert len(rows) == sum(c.recipe.n_tubes for c in cset.cards)
    assert rows[-1]["name"] == LONG  # the key keeps the roster text whole
    i = 0
    for c in cset.cards:
        a = assess_study(study, c.recipe, trials=0)
        for t in to_json(a)["tubes"]:
            r = rows[i]
            assert r["student"] == c.student and r["tube"] == t["tube"]
            assert float(r["absorbance"]) == pytest.approx(t["absorbance"], abs=5e-5)
            # derived: the band is ±2 sd of the tube's full error budget
            assert float(r["band_low"]) == pytest.approx(t["absorbance"] - 2 * t["absorbance_sd"], abs=5e-5)
            assert float(r["band_high"]) == pytest.approx(t["absorbance"] + 2 * t["absorbance_sd"], abs=5e-5)
            for s in ids:
                assert float(r[s]) == pytest.approx(t["volumes_mL"][s], abs=5e-5)
            i += 1


def test_key_csv_is_not_a_formula(plan, study):
    cs = class_set_study(study, parse_roster_csv('id,name\nf1,=HYPERLINK("x")\nf2,Maelle Orsk\n'), seed=0)
    text = pc.key_csv(plan, cs)
    names = {r["name"] for r in csv.DictReader(io.StringIO(text))}
    assert names == {'\'=HYPERLINK("x")', "Maelle Orsk"}  # source: OWASP, CSV injection (quote the cell)
    from openpyxl import load_workbook

    ws = load_workbook(io.BytesIO(pc.key_xlsx(plan, cs)))["key"]
    cell = ws.cell(row=2, column=2)
    assert cell.value == '=HYPERLINK("x")' and cell.data_type == "s"  # stored as text, not a formula


def test_key_xlsx_deterministic_and_readable(plan, cset):
    from openpyxl import load_workbook

    a = pc.key_xlsx(plan, cset)
    b = pc.key_xlsx(plan, cset)
    assert a == b
    ws = load_workbook(io.BytesIO(a))["key"]
    head = [c.value for c in next(ws.iter_rows(max_row=1))]
    assert head[:4] == ["student", "name", "section", "tube"] and head[-3:] == [
        "absorbance",
        "band_low",
        "band_high",
    ]
    assert ws.cell(row=2, column=2).value.startswith("<img")  # text, as typed


def test_stocks_csv_and_pdf(plan, cset):
    from pypdf import PdfReader

    roster_sections = [c.section for c in cset.cards]
    st = class_stocks(plan, [c.recipe for c in cset.cards], parse_roster_csv(HOSTILE))
    rows = list(csv.DictReader(io.StringIO(pc.stocks_csv(plan, st))))
    whole = {r["stock"]: r for r in rows if r["scope"] == "class"}
    assert set(whole) == {s.id for s in plan.stock}
    for s in plan.stock:
        parts = [float(r["total_mL"]) for r in rows if r["stock"] == s.id and r["scope"] != "class"]
        assert sum(parts) == pytest.approx(float(whole[s.id]["total_mL"]), abs=0.02)
    assert len(parts) == len(set(roster_sections))
    assert len(PdfReader(io.BytesIO(pc.stocks_document(plan, cset, st))).pages) >= 1


def test_many_tubes_still_one_page_each(plan, study):
    from pypdf import PdfReader

    from planner.inputs.roster import roster_of_count

    cs = class_set_study(study, roster_of_count(2), seed=0, tubes=14)
    pdf = pc.cards_document(plan, cs)
    assert len(PdfReader(io.BytesIO(pdf)).pages) == 2  # set in smaller type until each card fits


def test_plan_advice_goes_to_the_instructors_key(plan, cset, card_html):
    st = class_stocks(plan, [c.recipe for c in cset.cards], parse_roster_csv(HOSTILE))
    key = pc.key_document(plan, cset, st, fmt_="html").decode("utf-8")
    assert "raise conc_rsd" in key and "reagent = " in key  # the teaching plan leaves both to fix
    assert "raise conc_rsd" not in card_html and "add reagent" not in card_html


# --------------------------------------------------------------------------------------------------
# layout: columns aligned, stocks in the order of addition with their labels, names wrapped, the header
# box holding every field at A4 and Letter
# --------------------------------------------------------------------------------------------------
LONG_NAME = (
    "Maximiliane-Friederike Adelheid von Hohenzollern-Sigmaringen-Vöhringen"  # invented, 70 characters
)
WIDE_ROSTER = f"id,name,section,bench\nw1,{LONG_NAME},Monday-afternoon,12\nw2,Ana Li,Tue,3\n"


@pytest.fixture(scope="module")
def wide_set(study):
    return class_set_study(study, parse_roster_csv(WIDE_ROSTER), seed=2)


def _tube_table(html: str) -> str:
    return html.split('<table class="t">', 1)[1].split("</table>", 1)[0]


def _cell_classes(row_html: str, tag: str) -> list[str]:
    return re.findall(rf'<{tag} class="([^"]*)"', row_html)  # class names of the row's cells


def test_tube_table_headers_align_with_their_numbers(plan, wide_set):
    html = pc.cards_document(plan, wide_set, fmt_="html").decode("utf-8")
    table = _tube_table(html)
    head = table.split("</thead>", 1)[0]
    body_row = table.split("<tbody>", 1)[1].split("</tr>", 1)[0]
    th = [c.split()[0] for c in _cell_classes(head, "th")]
    td = [c.split()[0] for c in _cell_classes(body_row, "td")]
    assert len(th) == len(td) and th == td  # each header aligned like the numbers under it
    assert th.count("r") == len(wide_set.cards[0].recipe.dispensed_ids(plan))  # the stock columns


def test_stock_columns_in_the_order_of_addition_with_labels(plan, wide_set):
    from planner.paper.sheets import addition_order

    html = pc.cards_document(plan, wide_set, fmt_="html").decode("utf-8")
    head = _tube_table(html).split("</thead>", 1)[0]
    ids = re.findall(r'<th class="r">([^ <]+) / mL<span class="lab">([^<]*)</span>', head)
    order = addition_order(plan, wide_set.cards[0].recipe, plan.glassware.order)
    assert [i for i, _ in ids] == list(order)
    for sid, label in ids:
        assert plan.stock_by_id(sid).label.startswith(label.rstrip("…"))


def test_long_names_are_printed_whole(plan, study, wide_set):
    html = pc.cards_document(plan, wide_set, fmt_="html").decode("utf-8")
    assert LONG_NAME in html  # wrapped on two lines by the page, not cut
    st = class_stocks(plan, [c.recipe for c in wide_set.cards], parse_roster_csv(WIDE_ROSTER))
    key = pc.key_document(plan, wide_set, st, fmt_="html").decode("utf-8")
    assert LONG_NAME in key


def _boxes(page, dx: float = 0.0, dy: float = 0.0):
    """(box, class, x, y) of every laid-out box of a page, into absolutely placed ones, moved by -dx, -dy."""
    for b in page._page_box.descendants(placeholders=True):
        el = getattr(b, "element", None)
        yield b, (el.get("class") or "") if el is not None else "", b.position_x - dx, b.position_y - dy


@pytest.mark.parametrize("paper", ["A4", "Letter"])
def test_header_box_holds_every_field(plan, wide_set, paper):
    lay, density = pc.card_layout(plan, wide_set, paper=paper)
    assert lay.frames is not None  # the repeated parts laid out once (planner.paper.card_layout)
    assert len(lay.pages.pages) == len(wide_set.cards) and density <= 1  # at most one size smaller
    k, dx, dy = lay.stamps[0][0]  # the first card's top frame and where it is drawn
    frame = lay.frames.pages[k]
    who = next(b for b, cls, _, _ in _boxes(frame) if cls == "who" and type(b).__name__ == "TableBox")
    left, right = who.border_box_x(), who.border_box_x() + who.border_width()
    top, bottom = who.border_box_y(), who.border_box_y() + who.border_height()
    # the header's labels and rules (the frame) and the card's own values (its page, in frame coordinates)
    mine = [
        (b, cls, x, y)
        for b, cls, x, y in [*_boxes(frame), *_boxes(lay.pages.pages[0], dx, dy)]
        if cls in ("k", "line") or cls.startswith("v ") or type(b).__name__ == "TextBox"
    ]
    inside = [
        (b, cls, x, y) for b, cls, x, y in mine if y >= top - 0.5 and y + b.margin_height() <= bottom + 0.5
    ]
    inside = [(b, cls, x, y) for b, cls, x, y in inside if x >= left]
    assert inside, "no field found in the header box"
    for b, _, x, _ in inside:  # every field's box ends inside the header box (the date rule included)
        assert x + b.margin_width() <= right + 0.5, (paper, type(b).__name__)
    lines = [(b, x) for b, cls, x, _ in _boxes(frame) if cls == "line"]
    assert lines and all(x + b.margin_width() <= right + 0.5 for b, x in lines)
    # the long name wraps onto two lines inside the header box, every word of it printed
    name = [
        (b, y)
        for b, _, _, y in inside
        if type(b).__name__ == "TextBox" and b.text.strip() and b.text.strip() in LONG_NAME
    ]
    assert " ".join(b.text.strip() for b, _ in name).replace("- ", "-") == LONG_NAME
    assert len({round(y, 1) for _, y in name}) == 2
