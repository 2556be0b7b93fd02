"""Tests for planner.uncertainty.stocks: formula weights, USP <41>, QUAM A1, dilution chains, volumes on
hand."""

import json
import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from planner.paper.json_out import to_json
from planner.uncertainty.catalogue import lookup
from planner.uncertainty.stocks import (
    ACS_REAGENT_ASSAY_HALF_WIDTH,
    StockError,
    conc_from_weighing_M,
    flask_for_volume,
    formula_weight_g_mol,
    mass_for_conc_g,
    minimum_weight_g,
    prepare_stock,
    volume_needed_mL,
)


# --------------------------------------------------------------------------------------------------
# formula weights
# --------------------------------------------------------------------------------------------------
@pytest.mark.parametrize(
    ("ours", "theirs"),
    [
        ("KSCN", "KSCN"),
        ("Fe(NO3)3.9H2O", "Fe(NO3)3(H2O)9"),
        ("CuSO4·5H2O", "CuSO4(H2O)5"),
        ("Cu(NO3)2.3H2O", "Cu(NO3)2(H2O)3"),
        ("NiSO4.6H2O", "NiSO4(H2O)6"),
        ("C7H6O3", "C7H6O3"),
        ("Cd", "Cd"),
    ],
)
def test_formula_weight_against_periodictable(ours, theirs):
    import periodictable

    # source: periodictable's own atomic-weight table; the two libraries use different IUPAC
    # editions, so agreement to 1e-4 relative is what to expect [derived: differences ≈ 3e-5].
    assert formula_weight_g_mol(ours) == pytest.approx(periodictable.formula(theirs).mass, rel=1e-4)


@pytest.mark.parametrize(("anhydrous", "n"), [("CuSO4", 5), ("Fe(NO3)3", 9), ("Cu(NO3)2", 3), ("CuCl2", 2)])
def test_hydrate_is_anhydrous_plus_water(anhydrous, n):
    # derived: M(X·nH2O) = M(X) + n·M(H2O), for both hydrate notations
    expected = formula_weight_g_mol(anhydrous) + n * formula_weight_g_mol("H2O")
    assert formula_weight_g_mol(f"{anhydrous}.{n}H2O") == pytest.approx(expected, rel=1e-12)
    assert formula_weight_g_mol(f"{anhydrous}·{n}H2O") == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize("bad", ["", "   ", "Xy2", "cuso4", "123"])
def test_unreadable_formula_raises_stock_error(bad):
    with pytest.raises(StockError, match="formula"):
        formula_weight_g_mol(bad)


# --------------------------------------------------------------------------------------------------
# USP <41> and weighing
# --------------------------------------------------------------------------------------------------
def test_usp41_minimum_weight():
    assert minimum_weight_g(0.15e-3) == pytest.approx(0.300)  # source: USP <41>, s = 0.15 mg → 0.300 g


def test_usp41_readability_floor():
    # from memory: USP <41> replaces s < 0.41·d by 0.41·d; d = 0.1 mg → 0.041 mg → 2000 × that
    assert minimum_weight_g(0.01e-3, readability_g=0.1e-3) == pytest.approx(2000 * 0.41 * 0.1e-3)
    assert minimum_weight_g(0.15e-3, readability_g=0.1e-3) == pytest.approx(0.300)  # source: USP <41>


def test_quam_a1_concentration_from_weighing():
    # source: QUAM A1, 100.28 mg, purity 0.9999, 100 mL → 1002.7 mg/L (independent of the molar mass)
    fw = formula_weight_g_mol("Cd")
    c_mg_L = conc_from_weighing_M(100.28e-3, fw, 100.0, purity=0.9999) * fw * 1e3
    assert round(c_mg_L, 1) == pytest.approx(1002.7)


def _quam_a1():
    fw = formula_weight_g_mol("Cd")
    flask = lookup("flask", 100, tolerance_mL=0.1)  # source: QUAM A1, 100 mL ± 0.1 mL
    prep = prepare_stock(
        1002.7e-3 / fw,  # source: QUAM A1, c = 1002.7 mg/L
        flask,
        "Cd",
        purity=0.9999,  # source: QUAM A1, 0.9999 ± 0.0001
        u_mass_g=0.05e-3,  # source: QUAM A1, u(m) = 0.05 mg from the balance calibration
        flask_repeatability_mL=0.02,  # source: QUAM A1
        delta_T_C=4.0,  # source: QUAM A1, ±4 °C
        balance_repeatability_g=1e-5,  # common practice: a semi-micro balance, min weight 20 mg
        balance_readability_g=1e-5,
    )
    return prep, fw


def test_quam_a1_stock_uncertainty():
    prep, fw = _quam_a1()
    assert prep.steps == ()
    assert prep.mass_g * 1e3 == pytest.approx(100.28, abs=0.005)  # source: QUAM A1, 100.28 mg
    assert round(prep.u_conc_M * fw * 1e3, 2) == pytest.approx(0.84)  # source: QUAM A1, u = 0.84 mg/L
    assert prep.u_parts["purity"] == pytest.approx(
        0.0001 / math.sqrt(3) / 0.9999
    )  # source: QUAM A1, rectangular
    assert prep.u_parts["balance"] == pytest.approx(0.05 / 100.28, rel=1e-3)  # derived from QUAM A1's u(m)
    assert round(prep.u_parts["flask"] * 100.0, 4) == pytest.approx(
        0.0665
    )  # source: QUAM A1, u(V) = 0.0665 mL


def test_summary_is_json_safe_and_parts_add_up():
    prep, _ = _quam_a1()
    s = json.loads(json.dumps(to_json(prep)))
    assert s["mass_g"] == pytest.approx(prep.mass_g)
    # derived: relative parts combine in quadrature (QUAM A1 equation)
    assert prep.u_rel == pytest.approx(math.sqrt(sum(v * v for v in prep.u_parts.values())))
    assert "StockPreparation" in repr(prep)


# --------------------------------------------------------------------------------------------------
# purity model
# --------------------------------------------------------------------------------------------------
def test_purity_defaults():
    unstated = prepare_stock(0.1, 100, "KSCN")
    # source: ACS Reagent Chemicals, 98–102 % assay → ±0.02, rectangular
    assert unstated.purity_half_width == ACS_REAGENT_ASSAY_HALF_WIDTH == 0.02
    assert unstated.u_parts["purity"] == pytest.approx(0.02 / math.sqrt(3))
    certified = prepare_stock(0.1, 100, "KSCN", purity=0.995)
    assert certified.purity_half_width == pytest.approx(0.005)  # derived: |1 − purity|
    assert certified.mass_g == pytest.approx(unstated.mass_g / 0.995)  # derived: m = c·V·M / P
    own = prepare_stock(0.1, 100, "KSCN", purity=0.98, purity_half_width=0.001)
    assert own.purity_half_width == 0.001


def test_direct_weighing_mass():
    prep = prepare_stock(0.05, 250, "CuSO4·5H2O")
    assert prep.steps == ()
    # derived: m = c·V·M
    assert prep.mass_g == pytest.approx(0.05 * 0.250 * formula_weight_g_mol("CuSO4.5H2O"))
    assert prep.mass_g == pytest.approx(mass_for_conc_g(0.05, 250, formula_weight_g_mol("CuSO4·5H2O")))
    assert prep.weighed_flask == prep.flask == lookup("flask", 250)


@pytest.mark.parametrize("bad", [dict(conc_M=0.0), dict(conc_M=-1.0), dict(purity=0.0), dict(purity=99.5)])
def test_bad_inputs_raise(bad):
    args = dict(conc_M=0.1, flask=100, formula="KSCN") | bad
    with pytest.raises(StockError):
        prepare_stock(args.pop("conc_M"), args.pop("flask"), args.pop("formula"), **args)


def test_flask_argument_must_be_a_flask():
    with pytest.raises(StockError, match="volumetric flask"):
        prepare_stock(0.1, lookup("pipette", 10), "KSCN")
    with pytest.raises(StockError, match="20"):
        prepare_stock(0.1, 20, "KSCN")


# --------------------------------------------------------------------------------------------------
# dilution chains
# --------------------------------------------------------------------------------------------------
def _check_chain(prep):
    steps = prep.steps
    assert steps, "a chain was expected"
    # derived: the chain's concentrations follow c_{j+1} = c_j · v_j / V_j, ending at conc_M
    c = prep.weighed_conc_M
    for s in steps:
        assert s.from_conc_M == pytest.approx(c, rel=1e-12)
        c = c * s.pipette.capacity_mL / s.flask.capacity_mL
        assert s.to_conc_M == pytest.approx(c, rel=1e-12)
        assert s.pipette.kind == "pipette" and s.flask.kind == "flask"
    assert c == pytest.approx(prep.conc_M, rel=1e-12)
    assert steps[-1].flask == prep.flask
    # derived: the weighed mass makes the weighed stock, and it reaches the USP <41> minimum weight
    assert prep.mass_g == pytest.approx(
        mass_for_conc_g(
            prep.weighed_conc_M, prep.weighed_flask.capacity_mL, prep.formula_weight_g_mol, prep.purity
        )
    )
    assert prep.mass_g >= prep.min_weight_g
    # common practice: each aliquot leaves enough solution behind to rinse the pipette
    sources = [prep.weighed_flask] + [s.flask for s in steps[:-1]]
    for src, s in zip(sources, steps, strict=True):
        assert s.pipette.capacity_mL <= src.capacity_mL / 2
    assert prep.u_rel == pytest.approx(math.sqrt(sum(v * v for v in prep.u_parts.values())))
    assert {f"dilution_{j + 1}" for j in range(len(steps))} <= set(prep.u_parts)


def test_chain_proposed_below_minimum_weight():
    fw = formula_weight_g_mol("KSCN")
    direct_mass = mass_for_conc_g(1e-4, 100.0, fw)
    prep = prepare_stock(1e-4, 100, "KSCN", balance_repeatability_g=1e-4)
    assert direct_mass < prep.min_weight_g == pytest.approx(0.2)  # source: USP <41> 2000 × 0.1 mg
    _check_chain(prep)


def test_two_step_chain_for_very_dilute_stock():
    prep = prepare_stock(1e-6, 100, "KSCN", purity=0.9999)
    _check_chain(prep)
    # derived: 0.2 g needs a weighed stock ≥ 0.2 / (97 g/mol · 1 L) ≈ 2e-3 M, a factor ≥ 2000 over 1e-6 M;
    # one step into a 100 mL flask dilutes at most 100/1, so two steps at least
    assert len(prep.steps) >= 2


def test_chain_uses_only_allowed_glassware():
    prep = prepare_stock(1e-4, 100, "KSCN", flasks_mL=[100, 250], pipettes_mL=[10])
    _check_chain(prep)
    assert {s.pipette.capacity_mL for s in prep.steps} == {10.0}
    assert prep.weighed_flask.capacity_mL in (100.0, 250.0)


def test_no_chain_possible_raises():
    with pytest.raises(StockError, match="minimum weight"):
        prepare_stock(1e-9, 10, "KSCN", max_chain=1)
    with pytest.raises(StockError, match="max_chain"):
        prepare_stock(1e-4, 100, "KSCN", max_chain=0)


def test_dilution_adds_uncertainty():
    # derived: same weighed stock, one extra pipette + flask → larger relative u than the stock itself
    prep = prepare_stock(1e-4, 100, "KSCN", purity=0.9999)
    weighed_only = math.sqrt(sum(prep.u_parts[k] ** 2 for k in ("balance", "purity", "flask")))
    assert prep.u_rel > weighed_only


@settings(max_examples=30, deadline=None)
@given(
    log_c=st.floats(-6.5, 0.0),
    cap=st.sampled_from([10, 25, 50, 100, 250, 500, 1000]),
    purity=st.sampled_from([1.0, 0.999, 0.9999]),
)
def test_prepare_stock_invariants(log_c, cap, purity):
    conc = 10.0**log_c
    prep = prepare_stock(conc, cap, "CuSO4·5H2O", purity=purity)
    assert prep.mass_g >= prep.min_weight_g
    assert prep.u_conc_M > 0 and all(v >= 0 for v in prep.u_parts.values())
    if prep.steps:
        _check_chain(prep)
    else:
        assert prep.mass_g == pytest.approx(mass_for_conc_g(conc, cap, prep.formula_weight_g_mol, purity))


# --------------------------------------------------------------------------------------------------
# volumes on hand
# --------------------------------------------------------------------------------------------------
def test_volume_needed():
    # derived: total + rinse + dead volume + n · per-delivery loss
    assert volume_needed_mL(50.0, 10) == pytest.approx(53.0)
    got = volume_needed_mL(np.array([50.0, 10.0]), np.array([10, 4]), per_delivery_mL=0.1, rinse_mL=3.0)
    assert got == pytest.approx(np.array([50 + 3 + 1 + 1.0, 10 + 3 + 1 + 0.4]))
    with pytest.raises(StockError):
        volume_needed_mL(-1.0, 2)
    with pytest.raises(StockError):
        volume_needed_mL(10.0, 2.5)


def test_flask_for_volume():
    assert flask_for_volume(53.0).capacity_mL == 100.0  # derived: smallest catalogue flask ≥ 53 mL
    assert flask_for_volume(25.0).capacity_mL == 25.0
    with pytest.raises(StockError, match="batches"):
        flask_for_volume(5000.0)
