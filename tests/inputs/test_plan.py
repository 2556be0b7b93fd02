"""Plan loading and validation: every bad input gives one PlanError naming the key and the fix."""

from __future__ import annotations

import pytest

from planner.inputs.plan import PlanError, ion_charge, load_plan, parse_plan_text


def _err(text: str) -> PlanError:
    with pytest.raises(PlanError) as exc:
        parse_plan_text(text)
    return exc.value


def test_scenarios_load(any_scenario):
    p = any_scenario
    assert p.species and p.stock and p.glassware.tube_volume_mL > 0


def test_units_are_resolved(teaching_plan):
    cu = teaching_plan.stock_by_id("CU")
    assert cu.conc["M"] == pytest.approx(0.010)  # "10.0 mM"
    assert cu.on_hand == pytest.approx(100.0)  # "100 mL"
    assert teaching_plan.glassware.step_mL == pytest.approx(0.05)


def test_microlitres(teaching_text):
    p = parse_plan_text(teaching_text.replace('step = "0.05 mL"', 'step = "50 uL"'))
    assert p.glassware.step_mL == pytest.approx(0.05)


def test_toml_syntax_error_names_line(teaching_text):
    bad = teaching_text.replace("wavelength_nm = 580", "wavelength_nm = = 580")
    e = _err(bad)
    assert "TOML syntax error" in str(e) and "line" in str(e)


def test_unknown_key_suggests_nearest(teaching_text):
    e = _err(teaching_text.replace("wavelength_nm = 580", "wavelenght_nm = 580\nwavelength_nm = 580"))
    assert e.key == "optics.wavelenght_nm"
    assert "did you mean 'wavelength_nm'" in e.message


def test_unknown_key_in_list_item(teaching_text):
    e = _err(teaching_text.replace("conc_rsd = 0.005", "conc_rds = 0.005"))
    assert e.key == "stock[0].conc_rds" and "conc_rsd" in e.message


@pytest.mark.parametrize("value", ['"-10 mM"', '"0 mM"', "0", "-0.01"])
def test_non_positive_concentration(teaching_text, value):
    e = _err(teaching_text.replace('conc = { M = "10.0 mM" }', f"conc = {{ M = {value} }}"))
    assert e.key == "stock[0].conc.M" and "positive" in e.message


def test_unknown_unit(teaching_text):
    e = _err(teaching_text.replace('conc = { M = "10.0 mM" }', 'conc = { M = "10.0 mQ" }'))
    assert e.key == "stock[0].conc.M" and "unknown unit" in e.message


def test_wrong_dimension(teaching_text):
    e = _err(teaching_text.replace('tube_volume = "10.00 mL"', 'tube_volume = "10 mM"'))
    assert e.key == "glassware.tube_volume" and "not a volume" in e.message


def test_undefined_stock_in_dispenser(teaching_text):
    e = _err(teaching_text.replace('stocks = ["CU", "DY"]', 'stocks = ["CU", "DX"]'))
    assert e.key == "glassware.dispenser[0].stocks[1]"
    assert "unknown stock id 'DX'" in e.message and "did you mean 'DY'" in e.message


def test_undefined_stock_in_fixed(teaching_text):
    e = _err(teaching_text.replace("goal_se = 0.05", 'goal_se = 0.05\nfixed = { CX = "1 mL" }'))
    assert e.key == "design.fixed.CX"


def test_formula_with_unknown_component(teaching_text):
    e = _err(teaching_text.replace("formula = { M = 1, L = 1 }", "formula = { M = 1, X = 1 }"))
    assert e.key == "species[0].formula" and "unknown component 'X'" in e.message


def test_formula_with_H_but_no_pH(teaching_text):
    e = _err(teaching_text.replace("formula = { M = 1, L = 1 }", "formula = { M = 1, L = 1, H = 1 }"))
    assert e.key == "species[0].formula" and "components.H" in e.message


def test_species_without_constant(teaching_text):
    e = _err(teaching_text.replace("log_beta = 3.30 ", "# no constant "))
    assert e.key == "species[0].log_beta" and "missing" in e.message


def test_linear_range_inverted(teaching_text):
    e = _err(teaching_text.replace("linear_range = [0.10, 1.00]", "linear_range = [1.0, 0.1]"))
    assert e.key == "optics.linear_range" and "below" in e.message


def test_fixed_volumes_exceed_tube(teaching_text):
    e = _err(teaching_text.replace("goal_se = 0.05", 'goal_se = 0.05\nfixed = { CU = "6 mL", DY = "5 mL" }'))
    assert e.key == "design.fixed" and "more than tube_volume" in e.message


def test_epsilon_for_unknown_species(teaching_text):
    e = _err(teaching_text.replace("ML = { value = 950.0", "MX = { value = 950.0"))
    assert e.key == "optics.epsilon.MX" and "did you mean" in e.message and "ML" in e.message


def test_to_mark_needs_diluent(teaching_text):
    e = _err(teaching_text.replace("diluent = true", "diluent = false"))
    assert e.key == "stock" and "diluent" in e.message


def test_unknown_make_up(teaching_text):
    e = _err(teaching_text.replace('make_up = "to-mark"', 'make_up = "to-the-brim"'))
    assert e.key == "glassware.make_up" and "to-mark" in e.message


def test_missing_file(tmp_path):
    with pytest.raises(PlanError, match="not found"):
        load_plan(tmp_path / "nope.toml")


@pytest.mark.parametrize(
    "ion,z",
    [
        ("K+", 1),
        ("NO3-", -1),
        ("SO4 2-", -2),
        ("SO4-2", -2),
        ("Ca2+", 2),
        ("[SO4]2-", -2),
        ("Ca++", 2),
        ("Al3+", 3),
        ("Ca+2", 2),
        ("PO4 3-", -3),
        ("OAc-", -1),
    ],
)
def test_ion_charge(ion, z):
    assert ion_charge(ion) == z


def test_ion_without_charge(teaching_text):
    e = _err(teaching_text.replace('"Na+" = "10.0 mM"', '"Na" = "10.0 mM"'))
    assert e.key == "stock[1].ions.Na" and "no readable charge" in e.message


# -- values past validation, limits, and messages that name the key written ------------------------------
def test_byte_order_mark_is_accepted(tmp_path, teaching_text):
    path = tmp_path / "bom.toml"
    path.write_bytes(b"\xef\xbb\xbf" + teaching_text.encode("utf-8"))
    assert load_plan(path).title.startswith("Copper(II)")
    assert parse_plan_text("\ufeff" + teaching_text).title.startswith("Copper(II)")


@pytest.mark.parametrize(
    "old,new,key",
    [
        ("temperature_C = 25.0", "temperature_C = true", "temperature_C"),
        ("temperature_C = 25.0", "temperature_C = -inf", "temperature_C"),
        ("log_beta = 3.30 ", "log_beta = nan ", "species[0].log_beta"),
        ("path_cm = 1.000", "path_cm = true", "optics.path_cm"),
        ('on_hand = "100 mL"', "on_hand = inf", "stock[0].on_hand"),
        ("formula = { M = 1, L = 1 }", "formula = { M = true, L = 1 }", "species[0].formula.M"),
        ("tubes = 8", "tubes = 201", "design.tubes"),
    ],
)
def test_non_finite_bool_and_out_of_range_numbers(teaching_text, old, new, key):
    e = _err(teaching_text.replace(old, new))
    assert e.key == key


def test_bounds_are_generous_enough_for_real_plans(teaching_text):
    # derived: the edges of each documented range are accepted
    text = (
        teaching_text.replace("temperature_C = 25.0", "temperature_C = 150")
        .replace("log_beta = 3.30 ", "log_beta = -50 ")
        .replace("path_cm = 1.000", "path_cm = 100")
        .replace("wavelength_nm = 580", "wavelength_nm = 2000")
        .replace("goal_se = 0.05", "goal_se = 5")
    )
    p = parse_plan_text(text)
    assert p.temperature_C == 150 and p.optics.path_cm == 100 and p.design.goal_se == 5


def test_misspelt_required_key_names_what_was_written(teaching_text):
    e = _err(teaching_text.replace("wavelength_nm = 580", "wavelenght_nm = 580"))
    assert e.key == "optics.wavelenght_nm" and "did you mean 'wavelength_nm'" in e.message


def test_grid_level_limit(teaching_text):
    ok = parse_plan_text(teaching_text.replace('step = "0.05 mL"', 'step = "0.0005 mL"'))  # 20 000 levels
    assert ok.glassware.step_mL == pytest.approx(5e-4)
    e = _err(teaching_text.replace('step = "0.05 mL"', 'step = "0.0001 mL"'))
    assert e.key == "glassware.step" and "20000" in e.message


def test_plan_file_size_and_depth_limits(tmp_path, teaching_text):
    from planner.inputs.plan import MAX_DEPTH, MAX_PLAN_BYTES

    big = tmp_path / "big.toml"
    big.write_text(teaching_text + "#" * MAX_PLAN_BYTES)
    with pytest.raises(PlanError, match="larger than 1 MB"):
        load_plan(big)
    ok = teaching_text.replace(
        "temperature_C", "x = " + "[" * (MAX_DEPTH - 2) + "]" * (MAX_DEPTH - 2) + "\ntemperature_C"
    )
    assert "unknown key" in _err(ok).message  # deep but within the limit: reaches the schema
    e = _err(teaching_text.replace("temperature_C", "x = " + "[" * 5000 + "]" * 5000 + "\ntemperature_C"))
    assert "nested too deeply" in str(e)


def test_identifiers_refuse_control_and_bidi_characters(teaching_text):
    e = _err(teaching_text.replace('id = "CU"', 'id = "C\\u202eU"'))
    assert e.key == "stock[0].id" and "U+202E" in e.message
    e = _err(teaching_text.replace('name = "ML"', 'name = "M\\u0000L"'))
    assert e.key == "species[0].name" and "U+0000" in e.message


def test_free_text_keeps_unicode_but_is_shown_visibly(teaching_text):
    from planner.inputs.text import visible

    p = parse_plan_text(teaching_text.replace('title = "Copper(II)', 'title = "Cu\\u202e(II) ±'))
    assert "\u202e" in p.title  # stored as written
    assert visible(p.title).startswith("Cu\\u202e(II) ±")  # shown as a visible escape, ± kept


# --------------------------------------------------------------------------------------------------
# a dispenser's own figures (issue 20, item 0)
# --------------------------------------------------------------------------------------------------
_BURETTE = 'kind = "burette"\ncapacity = "10 mL"\nclass = "A"\nstocks = ["CU", "DY"]'


def _dispenser(teaching_text, body: str):
    assert _BURETTE in teaching_text
    return parse_plan_text(teaching_text.replace(_BURETTE, body))


def test_dispenser_figures_are_read(teaching_text):
    p = _dispenser(
        teaching_text,
        'kind = "burette"\ncapacity = "10 mL"\ngraduation = "0.02 mL"\nrepeatability = "0.006 mL"\n'
        'stocks = ["CU", "DY"]',
    )
    d = p.glassware.dispenser[0]
    assert (d.graduation_mL, d.repeatability_mL, d.cls) == (0.02, 0.006, None)
    m = _dispenser(
        teaching_text,
        'kind = "micropipette"\ncapacity = "1000 uL"\nsystematic = "4 uL"\nrepeatability = "1.5 uL"\n'
        'stocks = ["CU", "DY"]',
    )
    assert m.glassware.dispenser[0].limit_mL == pytest.approx(0.004)


@pytest.mark.parametrize(
    ("body", "key", "words"),
    [
        ('kind = "burette"\ncapacity = "10 mL"\nsystematic = "0.02 mL"', "systematic", "tolerance"),
        ('kind = "micropipette"\ncapacity = "1000 uL"\nclass = "A"', "class", "no class"),
        ('kind = "pipette"\ncapacity = "5 mL"\ngraduation = "0.1 mL"', "graduation", "no graduation"),
        ('kind = "burette"\ncapacity = "10 mL"\ngraduation = "20 mL"', "graduation", "smallest subdivision"),
        ('kind = "burette"\ncapacity = "10 mL"\nrepeatability = "2 mL"', "repeatability", "one delivery"),
        (
            'kind = "micropipette"\ncapacity = "1000 uL"\nsystematic = "4 uL"\ntolerance = "8 uL"',
            "systematic",
            "not both",
        ),
    ],
)
def test_dispenser_figures_are_validated(teaching_text, body, key, words):
    with pytest.raises(PlanError) as err:
        _dispenser(teaching_text, body + '\nstocks = ["CU", "DY"]')
    assert err.value.key == f"glassware.dispenser[0].{key}"
    assert words in err.value.message
