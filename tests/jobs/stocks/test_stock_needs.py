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
