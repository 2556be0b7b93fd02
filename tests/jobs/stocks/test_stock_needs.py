"""Stocks for a plan: preparation from the plan's keys and the volumes a recipe needs."""

from __future__ import annotations

import numpy as np
import pytest

from planner.inputs.recipe import make_recipe
from planner.jobs.stocks.needs import stock_needs
from planner.uncertainty.stocks import formula_weight_g_mol


def test_mass_to_weigh_follows_the_formula(teaching_plan):
    needs = {n.id: n for n in stock_needs(teaching_plan)}
    cu = needs["CU"].preparation
    assert cu is not None
    # derived: m = c·V·FW/purity, FW from molmass (no hand-typed atomic weights)
    fw = formula_weight_g_mol("Cu(NO3)2.3H2O")
    assert cu.conc_M == pytest.approx(0.010)
    assert cu.mass_g == pytest.approx(
        cu.weighed_conc_M * cu.weighed_flask.capacity_mL / 1000 * fw / 0.99, rel=1e-9
    )
    # USP <41>: with 0.1 mg repeatability the minimum weight is 2000 × 0.1 mg = 0.2 g; 0.244 g is above it
    assert cu.min_weight_g == pytest.approx(0.2)
    assert cu.mass_g >= cu.min_weight_g and not cu.steps
    assert needs["DY"].preparation is None  # no formula given: nothing to weigh
    assert needs["BG"].preparation is None


def test_dilution_chain_below_minimum_weight(teaching_text):
    from planner.inputs.plan import parse_plan_text

    plan = parse_plan_text(teaching_text.replace('conc = { M = "10.0 mM" }', 'conc = { M = "1.00 mM" }'))
    cu = {n.id: n for n in stock_needs(plan)}["CU"].preparation
    # 1 mM in 100 mL would need 24 mg, below the 0.2 g minimum weight: weigh a concentrate and dilute
    assert cu.steps and cu.mass_g >= cu.min_weight_g
    assert cu.steps[-1].to_conc_M == pytest.approx(1.0e-3, rel=1e-12)


def test_volumes_needed_with_allowance(teaching_plan):
    r = make_recipe(teaching_plan, {"CU": np.full(8, 1.0), "DY": np.linspace(0.5, 4.0, 8)})
    needs = {n.id: n for n in stock_needs(teaching_plan, r)}
    g = teaching_plan.glassware
    # common practice: recipe total + rinse + dead volume
    assert needs["CU"].needed_mL == pytest.approx(8.0 + g.rinse_mL + g.dead_volume_mL)
    assert needs["CU"].enough is True
    assert needs["DY"].deliveries == 8


def test_not_enough_on_hand(teaching_text):
    from planner.inputs.plan import parse_plan_text

    plan = parse_plan_text(
        teaching_text.replace('on_hand = "100 mL"\nreagent = "copper', 'on_hand = "9 mL"\nreagent = "copper')
    )
    r = make_recipe(plan, {"CU": np.full(8, 1.0), "DY": np.full(8, 1.0)})
    needs = {n.id: n for n in stock_needs(plan, r)}
    assert needs["CU"].enough is False


# --------------------------------------------------------------------------------------------------
# what sets each mass, and a scarce reagent (issue 20, item 5)
# --------------------------------------------------------------------------------------------------
def _cuvette():
    from planner.inputs.plan import load_plan
    from planner.inputs.recipe import read_recipe_csv

    from ...conftest import ROOT

    plan = load_plan(ROOT / "examples" / "cuvette-1to1.toml")
    return plan, read_recipe_csv(ROOT / "examples" / "cuvette-1to1.csv", plan)


def test_the_minimum_weight_sets_a_dilute_stocks_mass():
    plan, rec = _cuvette()
    zn = {n.id: n for n in stock_needs(plan, rec)}["ZN"]
    b = zn.mass_basis
    fw = formula_weight_g_mol("ZnSO4.7H2O")
    # derived: m = c·V·M — 0.500 mM in the usual 50 mL flask is 7.19 mg, below the 200 mg USP <41>
    # minimum weight of a balance with s = 0.1 mg (2000 × s), so a concentrate is weighed and diluted
    assert b.direct_mass_g == pytest.approx(0.500e-3 * 0.050 * fw, rel=1e-9)
    assert b.min_weight_g == pytest.approx(0.2)
    assert b.set_by == "minimum-weight" and b.flask_reason == "default" and zn.preparation.steps
    # derived: the tubes take 1.60 mL + 0.5 rinse + 0.1 dead volume = 2.2 mL, i.e. 0.316 mg of the salt
    assert b.recipe_mass_g == pytest.approx(0.500e-3 * 2.2e-3 * fw, rel=1e-9)
    # USP <41>: the balance that would weigh the 7.19 mg directly has s ≤ m/2000
    assert b.repeatability_to_weigh_directly_g == pytest.approx(b.direct_mass_g / 2000.0)


def _least_chain_mass_g(conc_M, fw, need_mL, min_wt_g, max_steps=3):
    """Brute force over the catalogue: the least mass ≥ the minimum weight of any weighing plus chain of
    one-mark pipettes and flasks (aliquot ≤ half its source, diluted ≥ twofold) ending in a flask that
    holds ``need_mL`` — independent of prepare_stock's search."""
    from planner.uncertainty.catalogue import catalogue

    F = np.array([it.capacity_mL for it in catalogue() if it.kind == "flask"])
    P = np.array([it.capacity_mL for it in catalogue() if it.kind == "pipette"])
    finals = F[F >= need_mL]
    best = np.inf
    direct = conc_M * finals * 1e-3 * fw
    if np.any(direct >= min_wt_g):
        best = direct[direct >= min_wt_g].min()
    # states: (volume of the solution in hand, factor from it to the final conc); grow the chain backwards
    for steps in range(1, max_steps + 1):
        grids = np.meshgrid(*([F] + [P, F] * (steps - 1) + [P, finals]), indexing="ij", sparse=True)
        V = [grids[0]] + [grids[2 + 2 * j] for j in range(steps - 1)] + [grids[-1]]  # V0 … V_final
        v = [grids[1 + 2 * j] for j in range(steps)]
        ok = np.ones(np.broadcast_shapes(*(g.shape for g in grids)), dtype=bool)
        factor = np.ones_like(ok, dtype=float)
        for j in range(steps):
            ok &= (v[j] <= 0.5 * V[j]) & (V[j + 1] >= 2 * v[j])
            factor = factor * V[j + 1] / v[j]
        mass = conc_M * factor * V[0] * 1e-3 * fw
        good = ok & (mass >= min_wt_g)
        if good.any():
            best = min(best, mass[good].min())
    return best


def test_a_scarce_stock_weighs_the_least_the_balance_allows():
    from planner.jobs.stocks.needs import stock_needs as needs_of

    plan, rec = _cuvette()
    usual = {n.id: n for n in needs_of(plan, rec)}["ZN"]
    scarce = {n.id: n for n in needs_of(plan, rec, scarce=("ZN",))}["ZN"]
    fw = formula_weight_g_mol("ZnSO4.7H2O")
    least = _least_chain_mass_g(0.500e-3, fw, scarce.needed_mL, 0.2)
    assert scarce.scarce and scarce.preparation.mass_g >= 0.2  # never below the minimum weight
    # within the 5 % the search treats as equally frugal (SCARCE_MASS_SLACK) of the exhaustive least
    assert least <= scarce.preparation.mass_g <= 1.05 * least
    assert scarce.preparation.mass_g < usual.preparation.mass_g
    assert usual.mass_basis.least_mass_g == pytest.approx(scarce.preparation.mass_g)
    assert scarce.preparation.steps[-1].to_conc_M == pytest.approx(0.500e-3, rel=1e-12)


def test_a_scarce_concentrated_stock_goes_in_the_smallest_flask(teaching_text):
    from planner.inputs.plan import parse_plan_text

    plan = parse_plan_text(
        teaching_text.replace('conc = { M = "10.0 mM" }', 'conc = { M = "0.500 M" }').replace(
            'formula = "Cu(NO3)2.3H2O"', 'formula = "Cu(NO3)2.3H2O"\nscarce = true'
        )
    )
    r = make_recipe(plan, {"CU": np.full(2, 0.5), "DY": np.full(2, 1.0)})
    cu = {n.id: n for n in stock_needs(plan, r)}["CU"]
    # derived: 1.0 mL in the tubes + 2 rinse + 1 dead volume = 4.0 mL → the 5 mL flask (new in the catalogue);
    # 0.500 M × 5 mL × 241.60 g/mol / 0.99 = 0.610 g, above the 0.2 g minimum weight: weighed directly
    assert cu.flask_mL == 5.0 and not cu.preparation.steps
    assert cu.mass_basis.set_by == "recipe"
    assert cu.preparation.mass_g == pytest.approx(0.500 * 5e-3 * formula_weight_g_mol("Cu(NO3)2.3H2O") / 0.99)


@pytest.mark.parametrize(
    ("on_hand", "flask", "need", "reason", "size"),
    [
        (None, None, 14.0, "default", 50.0),
        (None, None, 60.0, "recipe", 100.0),
        (200.0, None, 14.0, "on-hand", 250.0),
        (None, 25.0, 14.0, "plan", 25.0),
    ],
)
def test_what_sizes_the_flask(on_hand, flask, need, reason, size):
    from planner.jobs.stocks.mass_basis import choose_flask

    c = choose_flask(flask, need, on_hand)
    assert (c.reason, c.flask_mL) == (reason, size)


def test_unknown_scarce_stock_is_refused(teaching_plan):
    from planner.inputs.plan import PlanError

    with pytest.raises(PlanError, match="scarce"):
        stock_needs(teaching_plan, scarce=("XX",))


def test_stocks_cli_says_what_sets_the_mass(capsys, monkeypatch):
    import json

    from ...conftest import ROOT, run_cli

    plan, csv = ROOT / "examples" / "cuvette-1to1.toml", ROOT / "examples" / "cuvette-1to1.csv"
    code, out, _ = run_cli(capsys, monkeypatch, "stocks", plan, csv)
    assert code == 0 and "Mass set by the" in out and "minimum weight" in out and "Planned as" in out
    code, out, _ = run_cli(capsys, monkeypatch, "stocks", plan, csv, "--scarce", "ZN", "--json")
    zn = next(s for s in json.loads(out)["stocks"] if s["id"] == "ZN")
    assert code == 0 and zn["scarce"] and zn["mass_set_by"]["set_by"] == "minimum-weight"
    code, _, err = run_cli(capsys, monkeypatch, "stocks", plan, "--scarce", "NOPE")
    assert code == 2 and "NOPE" in err
