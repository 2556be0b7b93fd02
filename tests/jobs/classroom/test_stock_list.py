"""The class stock list is made by the code behind ``kplan stocks``: every solute with its mass, the
background salts, the solvent and the flask, scaled to the class's volumes."""

from __future__ import annotations

import json

import numpy as np
import pytest

from planner.inputs.roster import roster_of_count
from planner.jobs.classroom.cards import class_set
from planner.jobs.classroom.stock_list import class_stocks
from planner.jobs.stocks.needs import stock_needs

from ...conftest import ROOT

# source: IUPAC standard atomic weights (abridged, 2013): K 39.098, N 14.007, O 15.999, Cu 63.546, H 1.008
M_KNO3 = 39.098 + 14.007 + 3 * 15.999  # g/mol


@pytest.fixture(scope="module")
def stocks(plan):
    roster = roster_of_count(24)
    from dataclasses import replace

    roster = replace(roster, sections=tuple("A" if i < 12 else "B" for i in range(24)))
    cs = class_set(plan, roster, seed=0)
    return class_stocks(plan, [c.recipe for c in cs.cards], roster)


def _masses(need) -> dict[str, float]:
    out = {need.preparation.formula: need.preparation.mass_g} if need.preparation is not None else {}
    out.update({x.formula: x.mass_g for x in need.solutes if x.role == "salt"})
    return out


def test_every_solute_scaled_from_kplan_stocks(plan, stocks):
    one = {n.id: n for n in stock_needs(plan)}  # what `kplan stocks` prints for the plan
    for s in stocks:
        ref = one[s.id]
        for need in [s.need, *(sn[0] for sn in s.section_needs if sn is not None)]:
            assert need is not None
            # same salts: the copper and dye stocks' KNO3 and the background stock's KNO3 included
            assert [(x.role, x.formula) for x in need.solutes] == [(x.role, x.formula) for x in ref.solutes]
            assert need.solvent == ref.solvent
            scale = need.flask_mL / ref.flask_mL  # derived: m = c·V·M/purity is proportional to V
            got, want = _masses(need), _masses(ref)
            assert set(got) == set(want) and got
            for f in want:
                assert got[f] == pytest.approx(want[f] * scale, rel=5e-5), (s.id, f)  # to 4 digits


def test_background_salts_are_on_the_list(stocks):
    by = {s.id: s for s in stocks}
    for sid, kno3_M in (("CU", 0.070), ("DY", 0.090), ("BG", 0.100)):
        need = by[sid].need
        kno3 = next(x for x in need.solutes if x.formula == "KNO3")
        # derived: m = c·V·M(KNO3), M from the IUPAC atomic weights above
        assert kno3.mass_g == pytest.approx(kno3_M * need.flask_mL / 1000 * M_KNO3, rel=1e-4)
        assert by[sid].need.flask_mL * by[sid].batches >= by[sid].total_mL


def test_copper_stock_from_the_list_has_the_planned_ionic_strength(stocks):
    # the issue: without its KNO3 a copper stock made from the list sat at I ≈ 0.03 M instead of 0.10 M
    cu = next(s for s in stocks if s.id == "CU").need
    V_L = cu.flask_mL / 1000
    p = cu.preparation
    c_cu = p.mass_g * p.purity / p.formula_weight_g_mol / V_L
    kno3 = next(x for x in cu.solutes if x.formula == "KNO3")
    c_k = kno3.mass_g / kno3.formula_weight_g_mol / V_L
    ions = {"Cu2+": (c_cu, 2), "K+": (c_k, 1), "NO3-": (2 * c_cu + c_k, -1)}
    I = 0.5 * sum(c * z * z for c, z in ions.values())  # derived: I = ½ Σ c z²
    assert I == pytest.approx(0.10, rel=2e-3)


def test_volumes_are_scaled_per_section(stocks):
    for s in stocks:
        assert sum(t for *_, t in s.sections) == pytest.approx(s.total_mL)
        for (_, _, _, t), sn in zip(s.sections, s.section_needs, strict=True):
            assert sn[0].flask_mL * sn[1] >= t - 1e-9  # each section's own batch covers its need


def test_cli_masses_match_kplan_stocks(tmp_path, capsys, monkeypatch):
    from ...cli.test_cli import run

    plan = ROOT / "planner" / "data" / "scenarios" / "teaching.toml"
    code, out, err = run(capsys, monkeypatch, "stocks", plan, "--json")
    assert code == 0, err
    ref = {s["id"]: s for s in json.loads(out)["stocks"]}
    code, out, err = run(capsys, monkeypatch, "cards", plan, "--count", 6, "--out", tmp_path / "o", "--json")
    assert code == 0, err
    for s in json.loads(out)["stocks"]:
        make, want = s["make"], ref[s["id"]]
        scale = make["flask_mL"] / want["flask_mL"]
        got_m = {x["formula"]: x["mass_g"] for x in make["solutes"] if x["mass_g"] is not None}
        want_m = {x["formula"]: x["mass_g"] for x in want["solutes"] if x["mass_g"] is not None}
        assert set(got_m) == set(want_m)
        for f, m in want_m.items():
            assert float(f"{got_m[f]:.4g}") == float(f"{m * scale:.4g}"), (s["id"], f)
        if want["preparation"]:
            assert make["preparation"]["mass_g"] == pytest.approx(
                want["preparation"]["mass_g"] * scale, rel=5e-5
            )
    text = (tmp_path / "o" / "stocks.csv").read_text(encoding="utf-8")
    assert "KNO3" in text and "deionised water" in text
    assert np.isfinite(scale)
