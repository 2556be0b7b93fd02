"""Complete stock recipes: every solute the plan's conc and ions imply, paired into common salts with
masses from molmass, the solvent and the flask, and a warning when the listed ions do not balance
(issue 10, item 2)."""

from __future__ import annotations

import pytest

from planner.inputs.plan import parse_plan_text
from planner.jobs.stocks.needs import ion_core, stock_needs, stock_solutes
from planner.uncertainty.stocks import formula_weight_g_mol

from ...conftest import scenario_text


def _by_id(plan):
    return {n.id: n for n in stock_needs(plan)}


def test_demo_stocks_name_every_solute(teaching_plan):
    needs = _by_id(teaching_plan)
    cu = needs["CU"]
    salts = {x.formula: x for x in cu.solutes if x.role == "salt"}
    # derived: Cu(NO3)2 brings 2 × 10 mM NO3-, so 90 − 20 = 70 mM NO3- pairs with the 70 mM K+
    assert set(salts) == {"KNO3"}
    assert salts["KNO3"].conc_M == pytest.approx(0.070)
    assert salts["KNO3"].mass_g == pytest.approx(0.070 * 0.100 * formula_weight_g_mol("KNO3"))  # 0.7077 g
    assert cu.flask_mL == 100 and cu.solvent == "deionised water" and cu.charge_gap is None
    comp = next(x for x in cu.solutes if x.role == "component")
    assert comp.ions == ("Cu2+", "NO3-") and comp.formula == "Cu(NO3)2.3H2O"
    # DY: the ligand's Na+ (10 mM, exactly its charge) is its counter-ion; 90 mM KNO3 remains
    dy = needs["DY"]
    assert next(x for x in dy.solutes if x.role == "component").ions == ("Dy-", "Na+")
    assert [x.formula for x in dy.solutes if x.role == "salt"] == ["KNO3"]
    # BG, the background electrolyte, now gets a recipe: 0.10 M KNO3 in its flask
    bg = needs["BG"]
    kno3 = next(x for x in bg.solutes if x.role == "salt")
    assert kno3.mass_g == pytest.approx(0.10 * bg.flask_mL / 1000 * formula_weight_g_mol("KNO3"))


def test_background_stock_with_its_own_formula(teaching_text):
    text = teaching_text.replace(
        'reagent = "potassium nitrate"', 'reagent = "potassium nitrate"\nformula = "KNO3"'
    )
    bg = _by_id(parse_plan_text(text))["BG"]
    assert bg.problem is None  # was "holds neither M nor L: its mass is not computed"
    assert [x.formula for x in bg.solutes] == ["KNO3"] and bg.solutes[0].mass_g > 0


def test_unbalanced_stock_names_the_missing_counter_ion():
    # a 0.1 M M2+ stock with no anion listed: the nitrate of its formula is missing
    comps = {"M": (0.10, 2, "Cu2+")}
    solutes, gap = stock_solutes(comps, {}, "Cu(NO3)2.3H2O", 100.0)
    assert gap is not None and gap.ion == "NO3-"
    assert gap.conc_M == pytest.approx(0.20)
    # derived: I = ½·0.1·4 = 0.2 listed against 0.2 + ½·0.2 = 0.3 with the nitrate: 33 % low
    assert gap.ionic_strength_low == pytest.approx(1 / 3)


def test_balanced_stocks_have_no_gap_and_pair_organic_salts():
    solutes, gap = stock_solutes(
        {"L": (0.0003, -2, "Zc2-")}, {"Na+": (0.0256, 1), "HEPES-": (0.025, -1)}, None, 50.0
    )
    assert gap is None
    salt = next(x for x in solutes if x.role == "salt")
    assert salt.name == "HEPES sodium salt" and salt.conc_M == pytest.approx(0.025)
    assert salt.formula_weight_g_mol == pytest.approx(
        260.29, abs=0.02
    )  # from memory: HEPES Na salt 260.3 g/mol
    solutes, gap = stock_solutes({}, {"Na+": (0.10, 1), "OAc-": (0.10, -1)}, None, 50.0)
    assert gap is None and solutes[0].formula == "CH3COONa"


@pytest.mark.parametrize(
    ("spelling", "written"),
    [("OAc-", "OAc-"), ("Ac-", "OAc-"), ("CH3COO-", "OAc-"), ("ClCH2COO-", "ClAc-")],
)
def test_every_spelling_of_an_anion_makes_the_same_salt(spelling, written):
    one, _ = stock_solutes({}, {"Na+": (0.10, 1), spelling: (0.10, -1)}, None, 50.0)
    other, _ = stock_solutes({}, {"Na+": (0.10, 1), written: (0.10, -1)}, None, 50.0)
    assert len(one) == len(other) == 1 and one[0].role == "salt"
    # the same salt, weighed the same; only the ions keep the plan's spelling
    assert (one[0].formula, one[0].name, one[0].mass_g) == (other[0].formula, other[0].name, other[0].mass_g)


def test_acid_is_added_from_a_solution_not_weighed():
    solutes, gap = stock_solutes({}, {"H+": (0.50, 1), "NO3-": (0.50, -1)}, None, 100.0)
    assert gap is None and solutes[0].role == "solution" and solutes[0].name == "nitric acid"
    assert solutes[0].mass_g is None


def test_ion_cores():
    for name, z, core in (
        ("Cu2+", 2, "cu"),
        ("NO3-", -1, "no3"),
        ("SO4 2-", -2, "so4"),
        ("[SO4]2-", -2, "so4"),
        ("SO4-2", -2, "so4"),
        ("Ca++", 2, "ca"),
    ):
        assert ion_core(name, z) == core, name


def test_shipped_scenarios_balance_their_charges():
    # the proton scenario's ligand stock now lists the sodium of its salt beside the acetate buffer's
    # (0.102 M Na+ against 0.100 M acetate and 2.00 mM Ox-): no stock of a shipped scenario has a charge gap
    for name in ("teaching", "stepwise", "proton"):
        plan = parse_plan_text(scenario_text(name))
        assert all(n.charge_gap is None for n in _by_id(plan).values()), name
    # and an unbalanced copy is still caught
    text = scenario_text("proton").replace('"Na+" = "0.102 M"', '"Na+" = "0.10 M"')
    ox = _by_id(parse_plan_text(text))["OX"]
    assert ox.charge_gap is not None and ox.charge_gap.conc_M == pytest.approx(0.002)
