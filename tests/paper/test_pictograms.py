"""GHS pictograms drawn as symbols (red-bordered diamond, black symbol), not numbered diamonds
(issue 10, item 5)."""

from __future__ import annotations

import re
import xml.etree.ElementTree as ET

import pytest

from planner.paper import safety
from planner.paper.pictograms import BORDER_RED, SYMBOLS, pictogram_svg

SVG = "{http://www.w3.org/2000/svg}"


def test_every_ghs_pictogram_has_a_symbol():
    # source: UN GHS Annex 3 §A3.4: nine pictograms GHS01–GHS09
    assert set(SYMBOLS) == set(safety.PICTOGRAMS) == {f"GHS0{i}" for i in range(1, 10)}


@pytest.mark.parametrize("code", sorted(SYMBOLS))
def test_pictogram_is_a_red_diamond_with_a_black_symbol(code):
    svg = pictogram_svg(code)
    root = ET.fromstring(svg)  # well-formed, inline
    frame = root.find(f"{SVG}polygon")
    # source: UN GHS §1.4.10.5.2: a square set on a point with a red frame, black symbol on white
    assert frame.get("points") == "50,4 96,50 50,96 4,50"
    assert frame.get("stroke") == BORDER_RED and frame.get("fill") == "#ffffff"
    shapes = [e for e in root.iter() if e.tag in {f"{SVG}{t}" for t in ("path", "circle", "rect", "g")}]
    assert any("#000000" in (e.get("fill", "") + e.get("stroke", "")) for e in shapes)
    # not a numbered diamond: the only text is the accessible title
    assert [e.tag for e in root.iter() if e.tag == f"{SVG}text"] == []
    assert root.find(f"{SVG}title").text == code
    assert pictogram_svg(code) == svg  # deterministic


def test_symbols_differ():
    assert len({SYMBOLS[c] for c in SYMBOLS}) == 9


def test_sheet_prints_the_drawn_pictograms(teaching_plan):
    from planner.paper.sheets import safety_context

    ctx = safety_context(teaching_plan)
    codes = [p["code"] for c in ctx["cards"] if c["known"] for p in c["pictograms"]]
    assert codes
    for c in ctx["cards"]:
        for p in c.get("pictograms", []):
            assert str(p["svg"]) == pictogram_svg(p["code"])
            assert not re.search(r"<text", str(p["svg"]))
