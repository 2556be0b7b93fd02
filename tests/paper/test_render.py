"""Tests for the printed sheets: planner.paper.render, planner.paper.sheets, planner.paper.figures and the
fmt helpers they use. PDFs are read back with pypdf; page 1 is rasterised with pdftoppm where it exists."""

from __future__ import annotations

import io
import math
import re
import shutil
import subprocess

import numpy as np
import pypdf
import pytest
import tomllib
from hypothesis import given, settings
from hypothesis import strategies as st

from planner.inputs.plan import load_plan, parse_plan
from planner.inputs.recipe import make_recipe, parse_recipe_csv, read_recipe_csv
from planner.jobs.compile import compile_study
from planner.jobs.demo import demo_recipe_csv
from planner.jobs.plan import curves
from planner.jobs.plan.assess import assess, assess_recipe
from planner.jobs.stocks.needs import stock_needs
from planner.paper import figures, fmt, render, safety, sheets
from planner.paper.json_out import to_json

from ..conftest import ROOT, scenario_text

DATE = "2026-12-01"
TRIALS = 200


def norm(text: str) -> str:
    return re.sub(r"\s+", " ", text)


def pdf_text(pdf: bytes) -> str:
    return norm("\n".join(p.extract_text() for p in pypdf.PdfReader(io.BytesIO(pdf)).pages))


def setup(plan):
    recipe = parse_recipe_csv(demo_recipe_csv(plan), plan)
    return plan, recipe, assess(plan, recipe, trials=TRIALS, seed=0), stock_needs(plan, recipe)


def patched_plan(top: dict | None = None, stocks: dict[str, dict] | None = None):
    data = tomllib.loads(scenario_text("teaching"))
    data.update(top or {})
    for s in data["stock"]:
        s.update((stocks or {}).get(s["id"], {}))
    return parse_plan(data)


@pytest.fixture(scope="module")
def teaching():
    return setup(patched_plan())


@pytest.fixture(scope="module")
def prep_pdf(teaching):
    return render.prep_sheet(*teaching, date=DATE)


@pytest.fixture(scope="module")
def prep_txt(prep_pdf):
    return pdf_text(prep_pdf)


@pytest.fixture(scope="module")
def report_pdf(teaching):
    plan, recipe, a, _ = teaching
    return render.report(
        plan,
        recipe,
        a,
        date=DATE,
        design={"criterion": "target", "efficiency_bound": 0.93, "se_ratio_vs_even": 0.71},
    )


# --------------------------------------------------------------------------------------------------
# prep sheet: the numbers on paper are the recipe's and the JSON's
# --------------------------------------------------------------------------------------------------
def test_tube_rows_carry_volumes_band_and_complex(teaching, prep_txt):
    plan, recipe, a, _ = teaching
    summary = to_json(a)
    order = sheets.addition_order(plan, recipe)
    assert order == ("DY", "CU")  # common practice: ligand before the metal, diluent first and last
    step = plan.glassware.step_mL
    tubes = summary["tubes"]
    unit, cplx = fmt.conc_column([t["species_M"][plan.target] for t in tubes])
    assert f"[ML] expected / {unit}" in prep_txt  # one unit for the whole column
    for i, row in enumerate(tubes):
        vols = " ".join(fmt.volume(recipe.column(s)[i], step) for s in order)
        # derived: the display step 0.001 sets three decimals for every expected A and its band
        band = f"{row['absorbance']:.3f} ± {2 * row['absorbance_sd']:.3f}"
        rest = fmt.volume(recipe.column("BG")[i], step)  # the diluent each flask should take
        flag = "" if 0.1 <= row["absorbance"] <= 1.0 else " (out of range)"  # the plan's linear range
        assert f"{row['tube']} {vols} ≈ {rest} {band}{flag} {cplx[i]}" in prep_txt, row["tube"]


def test_printed_absorbance_rounds_the_json_value(teaching, prep_txt):
    _, _, a, _ = teaching
    for row in to_json(a)["tubes"]:
        m = re.search(rf"{re.escape(row['tube'])} [\d. —]+≈ [\d.]+ (\d+\.\d+) ± (\d+\.\d+)", prep_txt)
        assert m, row["tube"]
        x, u = m.group(1), m.group(2)
        half_ulp = 0.5 * 10.0 ** -len(x.split(".")[1])  # derived: rounding moves a value ≤ half a digit
        assert abs(float(x) - row["absorbance"]) <= half_ulp + 1e-12
        assert abs(float(u) - 2 * row["absorbance_sd"]) <= half_ulp + 1e-12
        assert len(x.split(".")[1]) == len(u.split(".")[1]) == 3  # one rule per column: the 0.001 display


def test_volumes_on_the_dispenser_grid(teaching, prep_txt):
    plan, recipe, _, _ = teaching
    # derived: step 0.05 mL → two decimals on paper, e.g. the first DY volume of the demo series
    assert fmt.volume(recipe.column("DY")[0], plan.glassware.step_mL) == f"{recipe.column('DY')[0]:.2f}"
    assert re.search(r"T1 \d+\.\d{2} \d+\.\d{2} ≈ \d+\.\d{2}", prep_txt)


def test_stock_table(teaching, prep_txt):
    plan, _, _, needs = teaching
    for n in needs:
        assert f"{fmt.fixed(n.needed_mL, 0.1)} mL" in prep_txt, n.id
    cu = next(n for n in needs if n.id == "CU")
    # derived: m = c·V·M/P = 0.0100 M × 0.100 L × 241.60 g/mol / 0.99 = 0.2440 g (0.1 mg balance)
    assert math.isclose(cu.preparation.mass_g, 0.0100 * 0.100 * 241.60 / 0.99, rel_tol=2e-4)
    assert "Weigh 0.2440 g" in prep_txt
    assert "Cu2+: 10.000 ± 0.050 mM" in prep_txt  # derived: conc_rsd 0.005 of 10.0 mM = 0.050 mM
    assert "class A 10 mL burette" in prep_txt  # the plan's dispenser for CU and DY
    assert "to the mark of each flask" in prep_txt  # BG under make_up = "to-mark"


def test_header_blank_and_order(teaching, prep_txt):
    plan, _, _, _ = teaching
    assert "zero the instrument on a tube of BG (0.10 M potassium nitrate)" in prep_txt
    assert "580 nm" in prep_txt and "1.000 cm" in prep_txt and "A 0.10–1.00" in prep_txt
    assert DATE in prep_txt and plan.title in prep_txt
    i_bg, i_dy, i_cu = (prep_txt.index(s) for s in ("of BG first", "DY (ligand)", "CU (metal)"))
    assert i_bg < i_dy < i_cu and "BG to the mark" in prep_txt


def test_measuring_checklist(prep_txt):
    for phrase in (
        "zero the instrument on it at 580 nm",
        "rinse the cuvette",
        "Read each tube",
        "“measured A” column",
    ):
        assert phrase in prep_txt


def test_safety_box_matches_the_library(teaching, prep_txt):
    plan = teaching[0]
    reagents = safety.hazards_for(plan)
    assert any(r.hazards is not None for r in reagents)
    for r in reagents:
        if r.hazards is None:
            assert norm(r.message) in prep_txt
            continue
        assert r.hazards.name in prep_txt
        for code, text in r.hazards.statements():
            assert f"{code} {text}" in prep_txt, code
        for p in r.hazards.pictograms:
            assert f"{p} {safety.PICTOGRAMS[p]}" in prep_txt
        assert r.hazards.signal_word.upper() in prep_txt
    assert safety.ALWAYS in prep_txt
    assert safety.NO_DATA in prep_txt  # the dye ligand is not in the library
    for caution in ("eye protection", "add acid to water", "metal waste"):
        assert caution in prep_txt


def test_cmr_reagent_is_flagged():
    plan, recipe, a, needs = setup(patched_plan(stocks={"CU": {"reagent": "nickel(II) sulfate hexahydrate"}}))
    txt = pdf_text(render.prep_sheet(plan, recipe, a, needs, date=DATE))
    assert "CMR reagent in this plan" in txt
    assert "CMR: H341, H350i, H360D" in txt  # from memory: nickel salts
    assert "substitute" in txt and "May cause cancer by inhalation." in txt


def test_not_enough_stock_is_flagged():
    plan, recipe, a, needs = setup(patched_plan(stocks={"CU": {"on_hand": "5 mL"}}))
    html = render.prep_sheet(plan, recipe, a, needs, date=DATE, fmt="html").decode("utf-8")
    assert "NOT ENOUGH on hand" in html


def test_added_make_up_lists_the_buffer_and_no_mark():
    plan = load_plan(ROOT / "examples" / "cuvette-1to1.toml")
    recipe = read_recipe_csv(ROOT / "examples" / "cuvette-1to1.csv", plan)
    html = render.prep_sheet(
        plan, recipe, assess_recipe(plan, recipe), stock_needs(plan, recipe), date=DATE, fmt="html"
    ).decode("utf-8")
    assert "to the mark / mL" not in html and "≈ " not in html
    assert sheets.addition_order(plan, recipe) == ("BUF", "ZC", "ZN")  # common practice: metal last
    assert "zero the instrument on a tube of BUF" in html
    assert "1000 µL micropipette" in html and "5000 µL micropipette" in html  # the plan's dispensers


def test_custom_order_and_bad_order(teaching):
    plan, recipe, _, _ = teaching
    assert sheets.addition_order(plan, recipe, ["CU", "DY"]) == ("CU", "DY")
    with pytest.raises(sheets.RenderError, match="missing: DY"):
        sheets.addition_order(plan, recipe, ["CU"])
    with pytest.raises(sheets.RenderError, match="unknown: XX"):
        sheets.addition_order(plan, recipe, ["CU", "DY", "XX"])
    html = render.prep_sheet(*teaching, date=DATE, fmt="html", order=["CU", "DY"]).decode("utf-8")
    assert html.index("CU /&nbsp;mL") < html.index("DY /&nbsp;mL")
    assert "cannot precipitate" not in html  # the metal-last reason belongs to the default order only


def test_bad_arguments_raise_clear_errors(teaching):
    with pytest.raises(render.RenderError, match="paper = 'B5'.*A4, Letter"):
        render.prep_sheet(*teaching, paper="B5")
    with pytest.raises(render.RenderError, match="fmt = 'docx'.*pdf, html"):
        render.prep_sheet(*teaching, fmt="docx")
    with pytest.raises(render.RenderError, match="date"):
        render.prep_sheet(*teaching, date=20261201, fmt="html")


# --------------------------------------------------------------------------------------------------
# paper, determinism, image
# --------------------------------------------------------------------------------------------------
def _page_size_pt(pdf: bytes) -> tuple[float, float]:
    box = pypdf.PdfReader(io.BytesIO(pdf)).pages[0].mediabox
    return float(box.width), float(box.height)


def test_paper_sizes(teaching, prep_pdf):
    # source: ISO 216 A4 = 210 × 297 mm; US Letter = 8.5 × 11 in (72 pt per inch)
    w, h = _page_size_pt(prep_pdf)
    assert w == pytest.approx(210 / 25.4 * 72, abs=0.5) and h == pytest.approx(297 / 25.4 * 72, abs=0.5)
    w, h = _page_size_pt(render.prep_sheet(*teaching, date=DATE, paper="Letter"))
    assert (w, h) == (pytest.approx(612, abs=0.5), pytest.approx(792, abs=0.5))


def test_same_input_same_bytes(teaching, prep_pdf):
    assert render.prep_sheet(*teaching, date=DATE) == prep_pdf
    html = render.prep_sheet(*teaching, date=DATE, fmt="html")
    assert html == render.prep_sheet(*teaching, date=DATE, fmt="html")
    assert html.decode("utf-8").startswith("<!DOCTYPE html>")


@pytest.mark.skipif(shutil.which("pdftoppm") is None, reason="pdftoppm (poppler-utils) not installed")
def test_page_one_renders_as_a_printed_page(prep_pdf, tmp_path):
    Image = pytest.importorskip("PIL.Image")
    src = tmp_path / "sheet.pdf"
    src.write_bytes(prep_pdf)
    subprocess.run(
        ["pdftoppm", "-r", "30", "-f", "1", "-l", "1", "-png", str(src), str(tmp_path / "p")],
        check=True,
        capture_output=True,
        timeout=60,
    )
    png = next(tmp_path.glob("p*.png"))
    img = np.asarray(Image.open(png).convert("L"), dtype=float)
    h, w = img.shape
    assert h / w == pytest.approx(297 / 210, rel=0.03)  # source: ISO 216
    ink = img < 200
    assert 0.02 < ink.mean() < 0.5  # a page of text and rules: neither blank nor black
    assert ink[: h // 4].mean() > 0.01  # the header sits at the top
    margin = int(w * 10 / 210)  # 10 mm: inside the 13 mm page margins nothing is printed
    assert ink[:, :margin].mean() < 0.002 and ink[:, -margin:].mean() < 0.002


# --------------------------------------------------------------------------------------------------
# nothing is fetched; user text stays text
# --------------------------------------------------------------------------------------------------
HOSTILE_TITLE = 'Cu <img src="file:///etc/passwd"> & <b>bold</b> study'
HOSTILE_LABEL = '<img src="file:///etc/hostname">copper nitrate'


@pytest.fixture
def fetch_log(monkeypatch):
    asked: list[str] = []
    real = render._serve_data_url

    def recording(url):
        asked.append(url)
        return real(url)

    monkeypatch.setattr(render, "_serve_data_url", recording)
    return asked


def test_markup_in_plan_text_prints_as_text(fetch_log):
    plan = patched_plan(top={"title": HOSTILE_TITLE}, stocks={"CU": {"label": HOSTILE_LABEL}})
    recipe0 = parse_recipe_csv(demo_recipe_csv(plan), plan)
    tubes = ["<i>T1</i>", *recipe0.tubes[1:]]
    recipe = make_recipe(plan, {s: recipe0.column(s) for s in recipe0.dispensed_ids(plan)}, tubes)
    a = assess(plan, recipe, trials=TRIALS, seed=0)
    needs = stock_needs(plan, recipe)
    txt = pdf_text(render.prep_sheet(plan, recipe, a, needs, date=DATE))
    squeeze = txt.replace(" ", "")  # a narrow cell may wrap the label after a '/'
    assert HOSTILE_TITLE in txt and HOSTILE_LABEL.replace(" ", "") in squeeze and "<i>T1</i>" in txt
    rtxt = pdf_text(render.report(plan, recipe, a, date=DATE))
    assert HOSTILE_TITLE in rtxt
    assert not any(u.lower().startswith("file:") for u in fetch_log)
    assert fetch_log == []  # nothing at all is fetched: stylesheet and figures are inline
    html = render.prep_sheet(plan, recipe, a, needs, date=DATE, fmt="html").decode("utf-8")
    assert '<img src="file:' not in html and "&lt;img src=&#34;file:///etc/passwd&#34;&gt;" in html


def test_fetcher_refuses_everything_but_data_urls():
    f = render.DataOnlyFetcher()
    assert f.fetch("data:text/plain;base64,aGk=").read() == b"hi"  # RFC 2397 base64
    assert f.fetch("data:,a%20b").read() == b"a b"  # RFC 2397 percent-encoded
    for url in (
        "file:///etc/passwd",
        "http://example.com/a.png",
        "https://example.com/x.css",
        "/etc/passwd",
        "FILE:///etc/passwd",
    ):
        with pytest.raises(render.FetchRefused, match="refused"):
            f.fetch(url)


def test_hostile_html_cannot_read_files(fetch_log):
    html = (
        '<p>plain text</p><img src="file:///etc/passwd">'
        '<link rel="stylesheet" href="http://example.com/evil.css">'
        '<img src="data:image/svg+xml;base64,PHN2ZyB4bWxucz0naHR0cDovL3d3dy53My5vcmcvMjAwMC9zdmcnIHdpZHRoPScxJyBoZWlnaHQ9JzEnLz4=">'  # noqa: E501  (one data URL)
    )
    txt = pdf_text(render.html_to_pdf(html))
    assert "plain text" in txt and "root:" not in txt
    schemes = {u.split(":", 1)[0].lower() for u in fetch_log}
    assert {"file", "http", "data"} <= schemes  # asked, and only the data: URL was served


# --------------------------------------------------------------------------------------------------
# design report
# --------------------------------------------------------------------------------------------------
def test_report_verdict_first_then_sections(teaching, report_pdf):
    _, _, a, _ = teaching
    s = to_json(a)
    txt = pdf_text(report_pdf)
    assert (
        txt.index(s["verdict"].upper()) < txt.index("Recipe") < txt.index("Checks") < txt.index("Parameters")
    )
    assert norm(fmt.chem_text(s["verdict_reason"])) in txt
    for c in s["checks"]:
        assert c["id"] in txt
        assert norm(fmt.chem_text(c["message"]))[:60] in txt  # parameter names in chemical notation
    for p in s["parameters"]:
        assert fmt.param_label(p["name"]) in txt
    corr = s["correlation"]["matrix"][0][1]
    assert fmt.fixed(corr, 0.01) in txt  # correlations to two decimals
    assert "0.930" in txt and "0.710" in txt  # the design keys, three significant figures


def test_report_rows_match_json(teaching, report_pdf):
    _, _, a, _ = teaching
    txt = pdf_text(report_pdf)
    for row in to_json(a)["tubes"]:
        # one precision rule per column: A to the 0.001 display, saturation to 0.01 [derived]
        assert f"{row['absorbance']:.3f} ± {2 * row['absorbance_sd']:.3f}" in txt
        assert f"{row['saturation']:.2f}" in txt


def test_report_html_has_inline_svg_with_unique_ids(teaching):
    plan, recipe, a, _ = teaching
    html = render.report(plan, recipe, a, date=DATE, fmt="html").decode("utf-8")
    assert html.count("<svg") >= 4  # absorbance, binding curve, Monte Carlo, SE scan (+ no pictograms here)
    ids = re.findall(r'\bid="([^"]+)"', html)
    assert len(ids) == len(set(ids))
    for ref in re.findall(r"url\(#([^)]+)\)", html):
        assert ref in ids
    assert "evenly spaced" not in html  # no design given
    assert re.search(r'(src|href)="(?!#|data:)', html) is None  # nothing external to fetch


def test_report_without_precision(teaching):
    plan, recipe, _, _ = teaching
    html = render.report(plan, recipe, assess_recipe(plan, recipe), date=DATE, fmt="html").decode("utf-8")
    assert html.count("<svg") == 3  # no Monte-Carlo histogram without a Monte Carlo
    assert "Parameters" not in html


# --------------------------------------------------------------------------------------------------
# figures
# --------------------------------------------------------------------------------------------------
def test_binding_curve_is_the_one_to_one_isotherm(teaching):
    plan, recipe, a, _ = teaching
    curve = curves.binding_curve_data(compile_study(plan), a)
    K = 10.0**3.3  # the teaching scenario's guess; no ionic-strength correction is configured
    # derived: for M + L ⇌ ML the limiting reagent's fraction bound is K·x/(1 + K·x), x the free excess
    # reagent, at any limiting total: every curve and every tube lie on the same isotherm
    for ln in curve.lines:
        np.testing.assert_allclose(
            ln.saturation, K * ln.free_excess_M / (1 + K * ln.free_excess_M), rtol=1e-6
        )
        assert np.all(np.diff(ln.free_excess_M) >= 0)
    x = curve.tube_free_excess_M
    np.testing.assert_allclose(curve.tube_saturation, K * x / (1 + K * x), rtol=1e-6)
    # derived: 1:1 curves at different limiting totals coincide, so one curve per limiting component
    # (the demo series keeps the metal at 1.00 mM and raises the ligand past it)
    assert sorted(ln.limiting for ln in curve.lines) == sorted(set(curve.tube_limiting))


def test_saturation_is_one_number_in_table_check_and_figure():
    # a recipe with both kinds of tubes: metal limiting (T1) and ligand limiting with metal in excess
    # (T2), where the fraction of metal bound (≈ 0.07) and of ligand bound (≈ 0.95) differ
    plan = patched_plan()
    recipe = parse_recipe_csv("tube,CU,DY\nT1,0.70,0.65\nT2,8.80,0.70\nT3,8.80,0.70\n", plan)
    a = assess(plan, recipe, trials=0)
    summ = to_json(a)
    curve = curves.binding_curve_data(compile_study(plan), a)
    table = [t["saturation"] for t in summ["tubes"]]
    np.testing.assert_allclose(curve.tube_saturation, table)
    t2 = summ["tubes"][1]
    bound = t2["species_M"]["ML"]
    assert t2["saturation"] == pytest.approx(bound / t2["total_M"]["L"])  # derived: ligand is limiting
    assert t2["saturation"] > 0.9 and bound / t2["total_M"]["M"] < 0.1
    check = next(c for c in summ["checks"] if c["id"] == "saturation")
    assert f"{max(table):.2f}" in check["message"]  # the check quotes the same numbers
    assert ("T2", "T3") in curve.replicates  # replicates are one point with one label
    svg = figures.binding_svg(curve, {"M": "Cu2+", "L": "Dy-"})
    assert svg.count(">T2, T3<") == 1 and ">T2<" not in svg
    assert "free Cu2+ / M" in svg and "log_beta" not in svg


def test_report_uses_chemical_notation_and_no_colour_beside_a_pass(teaching):
    plan, recipe, a, _ = teaching
    html = render.report(plan, recipe, a, date=DATE, fmt="html").decode("utf-8")
    assert "log β(ML)" in html and "ε(ML)" in html
    assert "log_beta[" not in html.split("<body")[1]
    if next(c for c in to_json(a)["checks"] if c["id"] == "saturation")["status"] == "pass":
        assert 'class="num warn"' not in html  # a pass is not contradicted by coloured saturations


def test_binding_labels_do_not_overlap():
    # ten distinct tubes crowded on one stretch of the curve: every label box must be distinct
    n = 10
    x = np.geomspace(1e-4, 2e-4, n)
    line = curves.CurveLine("M", (1e-3,), np.geomspace(1e-6, 1e-1, 50), np.linspace(0, 1, 50))
    curve = curves.BindingCurve(
        (line,),
        ("M",) * n,
        x,
        np.linspace(0.40, 0.5, n),
        tuple(f"T{i + 1}" for i in range(n)),
        tuple((f"T{i + 1}",) for i in range(n)),
    )
    svg = figures.binding_svg(curve)
    assert all(f">T{i + 1}<" in svg for i in range(n))
    assert svg == figures.binding_svg(curve)  # deterministic
    # the label boxes themselves: on a crowded stretch no two overlap
    centres = np.column_stack([np.linspace(60, 90, n), np.linspace(50, 60, n)])  # points, 3 pt apart
    boxes = [b for _, _, b in figures.place_labels(centres, [f"T{i + 1}" for i in range(n)], 200, 130)]
    for i in range(n):
        for j in range(i):
            a, b = boxes[i], boxes[j]
            assert not (a[0] < b[2] and b[0] < a[2] and a[1] < b[3] and b[1] < a[3]), (i, j)


def test_se_scan_equals_assess(teaching):
    plan, recipe, _, _ = teaching
    scan = curves.se_scan_data(compile_study(plan), recipe)
    sd = plan.species[0].log_beta_sd
    np.testing.assert_allclose(scan.log_beta[[0, -1]], [3.3 - 2 * sd, 3.3 + 2 * sd])
    for k in (0, 4, 8):
        ref = assess(plan, recipe, trials=0, at={"ML": float(scan.log_beta[k])}).target_se
        assert scan.se[k] == pytest.approx(ref, rel=1e-9)


def test_se_scan_none_when_target_fixed():
    data = tomllib.loads(scenario_text("teaching"))
    data["species"][0]["log_beta_sd"] = 0.0
    plan = parse_plan(data)
    assert curves.se_scan_data(compile_study(plan), parse_recipe_csv(demo_recipe_csv(plan), plan)) is None


def test_svg_is_deterministic_and_literal():
    tubes = ["$x^2$ & <b>"]
    a = figures.absorbance_svg(tubes, [0.5], [0.01], (0.1, 1.0))
    assert a == figures.absorbance_svg(tubes, [0.5], [0.01], (0.1, 1.0))
    assert "&lt;b&gt;" in a and "<b>" not in a  # matplotlib escapes, and no mathtext on user labels
    assert a.startswith("<svg") and "<?xml" not in a


def test_mc_histogram_skips_failed_fits():
    est = np.array([3.2, 3.3, np.nan, 3.4, 3.31, 3.29])
    svg = figures.mc_histogram_svg(est, 3.3, 0.05, name="log_beta[ML]")
    assert "Monte Carlo (5 fits)" in svg


# --------------------------------------------------------------------------------------------------
# fmt helpers used on paper
# --------------------------------------------------------------------------------------------------
@settings(max_examples=60, deadline=None)
@given(x=st.floats(1e-9, 10.0), rel=st.floats(1e-4, 0.3))
def test_conc_with_uncertainty_round_trip(x, rel):
    text = fmt.conc_with_uncertainty(x, rel * x)
    m = re.fullmatch(r"(-?\d+(?:\.\d+)?) ± (\d+(?:\.\d+)?) (M|mM|µM|nM|pM)", text)
    assert m, text
    f = {"M": 1, "mM": 1e3, "µM": 1e6, "nM": 1e9, "pM": 1e12}[m.group(3)]
    assert 1 <= x * f < 1000 * (1 + 1e-9) or m.group(3) in ("M", "pM")
    # derived: value and uncertainty rounded at the same digit, the uncertainty's second significant one
    unit = 10.0 ** (math.floor(math.log10(rel * x * f)) - 1)
    assert abs(float(m.group(1)) - x * f) <= 0.5 * unit * (1 + 1e-9)
    assert abs(float(m.group(2)) - rel * x * f) <= 0.5 * unit * (1 + 1e-9)


def test_fmt_reference_values():
    assert fmt.conc_with_uncertainty(0.0100, 5.0e-5) == "10.000 ± 0.050 mM"  # derived: GUM 7.2.6 style
    assert fmt.conc_with_uncertainty(0.0100, 0.0) == fmt.conc(0.0100) == "10.0 mM"
    assert fmt.mass(0.244042, 1e-4) == "0.2440 g" and fmt.mass(0.244042, 1e-3) == "0.244 g"
    assert fmt.percent(0.005857) == "0.59 %" and fmt.percent(None) == "—"
    assert fmt.band(0.28802, 0.011192) == "0.288 ± 0.011"
    assert fmt.fixed(0.1, 0.01) == "0.10"


def test_pretty_formula():
    assert sheets.pretty_formula("Cu(NO3)2.3H2O") == "Cu(NO₃)₂·3H₂O"
    assert sheets.pretty_formula("CuSO4·5H2O") == "CuSO₄·5H₂O"
    assert sheets.pretty_formula("HNO3 (aq, ≈ 6 %)") == "HNO₃ (aq, ≈ 6 %)"


def test_plan_order_and_levelling_reach_the_sheet(tmp_path):
    """The plan's glassware.order sets the order of addition; a background stock is named in the header."""
    from planner.inputs.plan import parse_plan_text
    from planner.inputs.recipe import make_recipe
    from planner.jobs.plan.assess import assess as run_assess
    from planner.jobs.stocks.needs import stock_needs
    from planner.paper.render import prep_sheet

    from ..conftest import scenario_text

    text = (
        scenario_text("stepwise")
        .replace(
            '[[stock]]\nid = "W"',
            '''[[stock]]
id = "NA"
label = "2.00 M sodium nitrate"
ions = { "Na+" = "2.00 M", "NO3-" = "2.00 M" }
background = true

[[stock]]
id = "W"''',
        )
        .replace('stocks = ["CU", "AM"]', 'stocks = ["CU", "AM", "NA"]')
        .replace('min_volume = "0.50 mL"', 'min_volume = "0.50 mL"\norder = ["NA", "CU", "AM"]')
    )
    plan = parse_plan_text(text)
    r = make_recipe(
        plan, {"CU": np.full(5, 2.0), "AM": np.array([1.0, 2.0, 4.0, 8.0, 12.0]), "NA": np.full(5, 5.0)}
    )
    a = run_assess(plan, r, trials=0)
    html = prep_sheet(plan, r, a, stock_needs(plan, r), fmt="html", order=plan.glassware.order).decode()
    assert "the NA volumes level it" in html
    steps = html[html.index("Order of addition") :]
    steps = steps[: steps.index("</ol>")]
    assert steps.index("NA") < steps.index("CU") < steps.index("AM")


def test_parameter_names_in_chemical_notation():
    assert fmt.param_label("log_beta[ML2]") == "log β(ML₂)"  # common practice: counts as subscripts
    assert fmt.param_label("epsilon[ML]") == "ε(ML)"
    assert fmt.param_label("blank") == "blank"
    assert fmt.chem_text("|corr(log_beta[ML], epsilon[ML])| = 0.63") == "|corr(log β(ML), ε(ML))| = 0.63"


def test_ion_labels_in_chemical_notation():
    # common practice: counts as subscripts, charge as a superscript; digits before the sign are a
    # charge only after a bare element symbol (the rule the plan's ion names are read by)
    for text, shown in (
        ("Cu2+", "Cu²⁺"),
        ("NO3-", "NO₃⁻"),
        ("SO4 2-", "SO₄²⁻"),
        ("[SO4]2-", "SO₄²⁻"),
        ("K+", "K⁺"),
        ("Am", "Am"),
    ):
        assert fmt.ion(text) == shown, text
