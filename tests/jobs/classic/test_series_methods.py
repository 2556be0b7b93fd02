"""kplan series: the classic hand-made series checked against published results and closed forms.

Every plan here is an invented scenario (metal "Q", ligand "Z"); numbers are chosen for the checks.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from planner.inputs.files import write_atomic
from planner.inputs.plan import parse_plan_text
from planner.inputs.recipe import parse_recipe_csv
from planner.jobs.classic import (
    SeriesInfeasible,
    calibration,
    common,
    job,
    mole_ratio,
    plan_model,
    run_series,
    survey,
)
from planner.jobs.classic import rivals as rv
from planner.jobs.plan.checks import hand_bias, hand_bias_summary
from planner.model.compiled import predict, tube_ions_M
from planner.paper.json_out import to_json

from ...conftest import run_cli as run

PLAN = """
title = "Invented metal Q with invented ligand Z (test scenario)"
[components]
M = {{ label = "Q2+", charge = 2 }}
L = {{ label = "Z", charge = 0 }}
{species}
[medium]
activity_model = "none"
[optics]
wavelength_nm = 500
path_cm = 1.0
linear_range = [0.05, 1.2]
noise = {{ k1 = 0.002, k2 = 0.0, k3 = 0.001 }}
[optics.epsilon]
{epsilon}
[[stock]]
id = "MS"
conc = {{ M = "{cM}" }}
conc_rsd = 0.002
on_hand = "500 mL"
[[stock]]
id = "LS"
conc = {{ L = "{cL}" }}
conc_rsd = 0.002
on_hand = "500 mL"
[[stock]]
id = "W"
diluent = true
[glassware]
tube_volume = "10.00 mL"
flask = {{ capacity = "10 mL", class = "A" }}
step = "0.05 mL"
min_volume = "0.50 mL"
[[glassware.dispenser]]
kind = "burette"
capacity = "10 mL"
stocks = ["MS", "LS"]
"""


def species(*items: tuple[str, int, int, float, float]) -> str:
    return "\n".join(
        f'[[species]]\nname = "{n}"\nformula = {{ M = {p}, L = {q} }}\nlog_beta = {lb}\nlog_beta_sd = {sd}'
        for n, p, q, lb, sd in items
    )


def make_plan(spec: str, eps: str, cM: str = "2.0 mM", cL: str = "2.0 mM"):
    return parse_plan_text(PLAN.format(species=spec, epsilon=eps, cM=cM, cL=cL))


def strict_json(text: str):
    def bad(name):
        raise ValueError(f"non-standard JSON constant {name}")

    return json.loads(text, parse_constant=bad)


# -- Job's method ---------------------------------------------------------------------------------


@pytest.mark.parametrize("n", [1, 2, 3])
@pytest.mark.parametrize(
    "eps",
    ["X = {{ value = 800.0 }}", "X = {{ value = 3000.0 }}\nL = {{ value = 400.0 }}\nM = {{ value = 50.0 }}"],
)
def test_job_extremum_at_one_over_n_plus_one(n, eps):
    # source: Job 1928, Ann. Chim. 9:113 — a single ML_n puts the extremum at x_M = 1/(n+1); with the free
    # reagents' absorbance subtracted (corrected Y) this holds for any ε
    name = "ML" if n == 1 else f"ML{n}"
    plan = make_plan(species((name, 1, n, 6.0 * n, 0.3)), eps.format().replace("X", name))
    model = plan_model(plan)
    x = job.extremum_at(model, 2e-3)  # K·C ≫ 1: β·C^n = 10^(6n)·(2e-3)^n ≥ 10^(3.3 n)
    assert x == pytest.approx(1 / (n + 1), abs=0.004)


def test_job_extremum_moves_to_half_as_concentration_falls_for_stepwise_ml2():
    # derived: with ML and ML2 (stepwise K1, K2), at low C [ML] ≈ K1·M0·L0 and [ML2]/[ML] ≈ K2·L0 → 0, so
    # Y ∝ x(1 − x) and the extremum → 0.5; as C rises ML2 takes over on the ligand side and the extremum moves
    # toward 1/3 (a single ML2 keeps it at 1/3 for every K: the shift needs both complexes)
    plan = make_plan(
        species(("ML", 1, 1, 4.0, 0.3), ("ML2", 1, 2, 8.0, 0.3)),
        "ML = { value = 500.0 }\nML2 = { value = 1500.0 }",
    )
    model = plan_model(plan)
    totals = [1e-1, 1e-2, 1e-3, 1e-4, 1e-5, 1e-6]
    xs = [job.extremum_at(model, c) for c in totals]
    assert np.all(np.diff(xs) >= -1e-4)  # moves toward 0.5 as C falls
    assert xs[-1] == pytest.approx(0.5, abs=0.01)  # derived limit K·C → 0
    assert xs[0] < 0.36  # near 1/3 when ML2 dominates (derived)


def test_job_single_ml2_keeps_one_third_when_weak():
    # derived: for a single ML2 at K·C ≪ 1, [ML2] ≈ β·M0·L0² ∝ x(1 − x)², whose maximum is at x = 1/3 — the
    # shift toward 0.5 of the previous test needs ML beside ML2 (Job 1928: one complex, any K)
    plan = make_plan(species(("ML2", 1, 2, 2.0, 0.3)), "ML2 = { value = 1500.0 }")
    assert job.extremum_at(plan_model(plan), 1e-3) == pytest.approx(1 / 3, abs=0.003)


def test_job_series_on_grid_with_rivals_separated():
    plan = make_plan(species(("ML", 1, 1, 6.0, 0.3)), "ML = { value = 1000.0, rsd = 0.2 }")
    r = job.continuous_variation(plan, points=9)
    s = to_json(r)
    vols = r.recipe.volumes_mL[:, :2]
    assert np.allclose(np.round(vols / 0.05), vols / 0.05)  # on the 0.05 mL grid
    assert np.ptp(vols.sum(axis=1)) < 1e-9  # constant total
    assert s["extremum_mole_fraction"] == pytest.approx(0.5, abs=0.01)  # source: Job 1928
    seps = {d["model"]: d["separation_sd"] for d in s["discrimination"]}
    assert set(seps) == {"1:2", "2:1", "1:1+1:2"}
    assert seps["1:2"] > 10 and seps["2:1"] > 10  # a sharp 1:1 triangle
    assert max(t["absorbance"] for t in s["tubes"]) <= 1.2  # default total stays in range


def test_rival_fit_recovers_own_model():
    # derived: fitting the plan's own stoichiometry to its own noise-free readings leaves no residual
    plan = make_plan(species(("ML", 1, 1, 4.5, 0.3)), "ML = { value = 1000.0 }\nL = { value = 100.0 }")
    model = plan_model(plan)
    x = np.linspace(0.1, 0.9, 9)
    tot = np.stack([x * 2e-3, (1 - x) * 2e-3], axis=1)
    st = predict(model, tot, warn=False)
    W = np.diag(1 / np.full(9, 0.003))
    fit = rv.fit_rival(model, "1:1", ((1, 1),), tot, np.zeros((9, 0)), st.absorbance_true, W)
    assert fit.separation_sd < 0.05
    assert fit.log_beta[0] == pytest.approx(4.5, abs=0.01)
    assert fit.epsilon_M_cm[0] == pytest.approx(1000.0, rel=1e-3)


def test_job_needs_equimolar_stocks_exit_1(tmp_path, capsys, monkeypatch):
    # stocks that are not equimolar are no bad input: the series cannot be made, and says what would
    plan = tmp_path / "p.toml"
    write_atomic(
        plan,
        PLAN.format(
            species=species(("ML", 1, 1, 5.0, 0.3)),
            epsilon="ML = { value = 900.0 }",
            cM="2.0 mM",
            cL="4.0 mM",
        ),
    )
    code, out, err = run(capsys, monkeypatch, "series", plan, "--method", "job")
    assert code == 1 and not err and "equimolar" in out and "dilute LS" in out and "50.00 mL" in out
    with pytest.raises(SeriesInfeasible):
        job.continuous_variation(parse_plan_text(plan.read_text()))
    r = run_series(parse_plan_text(plan.read_text()), "job")
    assert not r.answers and r.recipe.n_tubes == 0 and r.checks[0].id == "feasible"
    code, out, err = run(capsys, monkeypatch, "series", plan, "--method", "job", "--json")
    assert code == 1 and strict_json(out)["tubes"] == []


def test_job_cli_writes_recipe_that_assess_accepts(tmp_path, capsys, monkeypatch):
    plan = tmp_path / "p.toml"
    write_atomic(
        plan,
        PLAN.format(
            species=species(("ML", 1, 1, 6.0, 0.3)),
            epsilon="ML = { value = 1000.0, rsd = 0.2 }",
            cM="2.0 mM",
            cL="2.0 mM",
        ),
    )
    code, out, err = run(
        capsys, monkeypatch, "series", plan, "--method", "job", "--out", tmp_path / "o", "--json"
    )
    data = strict_json(out)
    assert code == (0 if data["answers"] else 1), err
    assert data["method"] == "job" and len(data["tubes"]) == 9
    assert {"tube", "volumes_mL", "absorbance", "absorbance_sd"} <= set(data["tubes"][0])
    assert strict_json((tmp_path / "o" / "series.json").read_text()) == data
    text = (tmp_path / "o" / "recipe.csv").read_text()
    assert parse_recipe_csv(text, parse_plan_text(plan.read_text())).n_tubes == 9
    code, out, err = run(capsys, monkeypatch, "assess", plan, tmp_path / "o" / "recipe.csv", "--trials", "0")
    assert code in (0, 1), err  # accepted (1: it does not resolve K on its own, as a series need not)


def test_series_bad_method_and_total_exit_2(tmp_path, capsys, monkeypatch):
    plan = tmp_path / "p.toml"
    write_atomic(
        plan,
        PLAN.format(
            species=species(("ML", 1, 1, 6.0, 0.3)),
            epsilon="ML = { value = 1000.0 }",
            cM="2.0 mM",
            cL="2.0 mM",
        ),
    )
    code, _, err = run(capsys, monkeypatch, "series", plan, "--method", "nope")
    assert code == 2 and "--method" in err
    code, _, err = run(capsys, monkeypatch, "series", plan, "--method", "job", "--total", "3 furlongs")
    assert code == 2 and "--total" in err
    code, _, err = run(capsys, monkeypatch, "series", plan, "--method", "job", "--total", "50 mM")
    assert code == 2 and "--total" in err and len(err.strip().splitlines()) == 1


# -- the "complete conversion" calibration tube ------------------------------------------------------


def weak_plan(log_k: float = 2.5, sd: float = 0.2, cM: str = "0.5 M"):
    return make_plan(
        species(("ML", 1, 1, log_k, sd)),
        "ML = { value = 1000.0, rsd = 0.1 }\nM = { value = 1.0 }",
        cM=cM,
        cL="2 mM",
    )


def test_fraction_converted_matches_closed_form():
    plan = weak_plan()
    r = calibration.conversion_tube(plan)
    s = to_json(r)
    M0, L0, K = s["excess_conc_M"], s["limiting_conc_M"], 10**2.5
    # derived: f = ((M+L+1/K) − sqrt((M+L+1/K)² − 4ML))/(2L), ligand limiting
    sq = M0 + L0 + 1 / K
    f = (sq - math.sqrt(sq * sq - 4 * M0 * L0)) / (2 * L0)
    assert s["fraction_converted"]["at_guess"] == pytest.approx(f, rel=1e-6)
    assert calibration.fraction_converted_1to1(M0, L0, K) == pytest.approx(f, rel=1e-12)
    # the worst case is the weak end of the guess's range, log K − 2 sd (derived: f rises with K)
    K_lo = 10 ** (2.5 - 2 * 0.2)
    assert s["fraction_converted"]["worst"] == pytest.approx(
        calibration.fraction_converted_1to1(M0, L0, K_lo), rel=1e-6
    )


def test_excess_needed_over_the_guess_range_closed_form():
    plan = weak_plan()
    s = to_json(calibration.conversion_tube(plan))
    L0 = s["limiting_conc_M"]
    K_lo = 10 ** (2.5 - 2 * 0.2)
    for f in (0.99, 0.999):
        # derived from K = [ML]/([M][L]): M0 = f/((1 − f)·K) + f·L0, at the weakest K of the range
        want = f / ((1 - f) * K_lo) + f * L0
        assert s["excess_needed_M"][f"{f:g}"] == pytest.approx(want, rel=1e-4)


def test_domain_worked_case_and_hand_bias():
    # domain notes §5 (derived there from the 1:1 formula): K = 140 M⁻¹ with 0.1 M excess metal converts ~93 %
    f = calibration.fraction_converted_1to1(0.1, 1e-5, 140.0)
    assert f == pytest.approx(14 / 15, abs=2e-4)  # derived: K·x/(1 + K·x) in the excess limit
    b = hand_bias_summary(f)
    assert b["epsilon"] == pytest.approx(f - 1)  # derived: ε_hand = f·ε
    assert b["K_dilute"] == pytest.approx(1 / f - 1)  # derived: K_hand/K → 1/f as y → 0
    y = 0.2
    assert float(hand_bias(f, y)) == pytest.approx(0.09, abs=0.01)  # "about +9 %" [domain notes §5, derived]
    assert np.isnan(hand_bias(f, 0.95))  # beyond the calibration's conversion the hand formula has no answer


def test_calibration_strong_complex_answers_and_weak_one_does_not(tmp_path, capsys, monkeypatch):
    strong = make_plan(
        species(("ML", 1, 1, 6.0, 0.3)), "ML = { value = 1000.0, rsd = 0.1 }", cM="20 mM", cL="2 mM"
    )
    r = calibration.conversion_tube(strong)
    assert r.answers and to_json(r)["fraction_converted"]["worst"] >= 0.99
    weak = calibration.conversion_tube(weak_plan(log_k=1.5, sd=0.3, cM="0.1 M"))
    assert not weak.answers
    ids = {c.id: c for c in weak.checks}
    assert ids["conversion"].status == "fail" and "global" in ids["global-fit"].message
    plan = tmp_path / "w.toml"
    write_atomic(
        plan,
        PLAN.format(
            species=species(("ML", 1, 1, 1.5, 0.3)),
            epsilon="ML = { value = 1000.0 }\nM = { value = 1.0 }",
            cM="0.1 M",
            cL="2 mM",
        ),
    )
    code, out, err = run(
        capsys, monkeypatch, "series", plan, "--method", "calibration", "--json", "--out", tmp_path / "c"
    )
    data = strict_json(out)
    assert code == 1 and data["method"] == "calibration"
    assert set(data["excess_needed_M"]) == {"0.99", "0.999"} and "fraction_converted" in data
    code, _, err = run(capsys, monkeypatch, "assess", plan, tmp_path / "c" / "recipe.csv", "--trials", "0")
    assert code in (0, 1), err  # accepted (1: it does not resolve K on its own, as a series need not)
    code, _, err = run(capsys, monkeypatch, "series", plan, "--method", "calibration", "--limiting", "X")
    assert code == 2 and "--limiting" in err


# -- mole-ratio -------------------------------------------------------------------------------------


@pytest.mark.parametrize("name,q,log_beta", [("ML", 1, 7.0), ("ML2", 2, 13.0)])
def test_mole_ratio_break_at_stoichiometric_ratio_for_strong_k(name, q, log_beta):
    # source: the mole-ratio method's premise — for a strong complex ML_q the two lines meet at L/M = q
    plan = make_plan(
        species((name, 1, q, log_beta, 0.2)),
        f"{name} = {{ value = 1000.0 }}\nL = {{ value = 30.0 }}",
        cM="2 mM",
        cL=f"{2 * q} mM",
    )
    s = to_json(mole_ratio.mole_ratio_series(plan))
    assert s["break_ratio"] == pytest.approx(q, rel=0.02)
    assert s["break_ratio_expected"] == q and s["resolvable"] is True and s["answers"] is True


def test_mole_ratio_shortfall_matches_one_over_sqrt_kc():
    # derived: for 1:1 at fixed metal C the curve at L/M = 1 falls short of the complete-conversion corner
    # H = b·Δε·C by x/C with K·x² = C − x, i.e. (√(1 + 4KC) − 1)/(2KC) ≈ 1/√(KC). The code measures against
    # the curve's own tangents: the initial one has slope H·KC/(1 + KC) (at r → 0 the metal is all free), the
    # final one is the plateau H far past the break, so its corner is H·KC/(1 + KC) at r = 1.
    K, C = 10**5.0, 1e-3
    plan = make_plan(species(("ML", 1, 1, 5.0, 0.2)), "ML = { value = 1000.0 }")
    model = plan_model(plan)
    rf = np.linspace(0, 50, 50001)  # far past the break: the end tangent is the plateau
    tot = np.stack([np.full(rf.size, C), rf * C], axis=1)
    yf = common.corrected(model, predict(model, tot, warn=False))
    frac, _ = mole_ratio._shortfall(rf, yf, 1.0, 0.001)
    short = (math.sqrt(1 + 4 * K * C) - 1) / (2 * K * C)
    assert short == pytest.approx(1 / math.sqrt(K * C), rel=0.1)
    corner = K * C / (1 + K * C)
    assert frac == pytest.approx((corner - (1 - short)) / corner, rel=2e-3)


def test_mole_ratio_weak_complex_not_resolvable_and_concentration_offered():
    plan = make_plan(species(("ML", 1, 1, 3.5, 0.2)), "ML = { value = 1000.0 }", cM="2 mM", cL="2 mM")
    r = mole_ratio.mole_ratio_series(plan)
    s = to_json(r)
    assert not r.answers and s["resolvable"] is False and s["shortfall_fraction"] > 0.1
    # the concentration offered makes K·C of order 100 (derived: shortfall ≤ 10 % ⟺ K·C ≳ 80 for 1:1)
    kc = 10**3.5 * s["conc_needed_M"]
    assert 30 < kc < 300


def test_mole_ratio_cli_reverse_and_recipe(tmp_path, capsys, monkeypatch):
    plan = tmp_path / "p.toml"
    write_atomic(
        plan,
        PLAN.format(
            species=species(("ML", 1, 1, 7.0, 0.3)),
            epsilon="ML = { value = 1000.0 }",
            cM="2.0 mM",
            cL="2.0 mM",
        ),
    )
    code, out, err = run(
        capsys,
        monkeypatch,
        "series",
        plan,
        "--method",
        "mole-ratio",
        "--vary",
        "M",
        "--json",
        "--out",
        tmp_path / "m",
    )
    data = strict_json(out)
    assert code == 0, err
    assert data["fixed_reagent"] == "L" and data["break_ratio"] == pytest.approx(1.0, rel=0.02)
    code, _, err = run(capsys, monkeypatch, "assess", plan, tmp_path / "m" / "recipe.csv", "--trials", "0")
    assert code in (0, 1), err  # accepted (1: it does not resolve K on its own, as a series need not)
    code, _, err = run(capsys, monkeypatch, "series", plan, "--method", "mole-ratio", "--vary", "Q")
    assert code == 2 and "--vary" in err


# -- wavelength survey --------------------------------------------------------------------------------


def band_plan(extra_bands: str = "", eps_ml: float = 1500.0):
    eps = (
        f"ML = {{ value = {eps_ml}, rsd = 0.2 }}\n[optics.bands]\n"
        f"ML = {{ peak_nm = 520, fwhm_nm = 100, epsilon_max = {eps_ml} }}\n" + extra_bands
    )
    return make_plan(species(("ML", 1, 1, 3.0, 0.3)), eps, cM="2 mM", cL="20 mM")


def test_survey_picks_band_maximum_when_readings_are_small():
    # derived: with only the complex absorbing and every reading well below 0.434 (where σ_A/A is smallest,
    # Ringbom 1939), SE(log β) ∝ σ_A/ε falls as ε rises, so the band maximum carries the most information
    r = survey.wavelength_survey(band_plan())
    s = to_json(r)
    assert s["wavelength_nm"] == pytest.approx(520, abs=1)
    assert max(t["absorbance"] for t in s["tubes"]) < 0.434
    assert r.answers


def test_survey_moves_away_from_a_free_ligand_band():
    # derived: a free ligand absorbing on the short side adds readings (noise) without information about K,
    # and pushes the tubes out of the linear range there, so the best wavelength moves to the long side
    r = survey.wavelength_survey(band_plan("L = { peak_nm = 470, fwhm_nm = 80, epsilon_max = 100.0 }\n"))
    s = to_json(r)
    assert s["wavelength_nm"] > 525
    best = min((d for d in s["se_by_wavelength"] if d["in_range"]), key=lambda d: d["se"])
    assert best["wavelength_nm"] == s["wavelength_nm"]


def test_survey_without_bands_exit_2_and_cli_json(tmp_path, capsys, monkeypatch):
    plan = tmp_path / "p.toml"
    write_atomic(
        plan,
        PLAN.format(
            species=species(("ML", 1, 1, 3.0, 0.3)), epsilon="ML = { value = 150.0 }", cM="2 mM", cL="20 mM"
        ),
    )
    code, _, err = run(capsys, monkeypatch, "series", plan, "--method", "survey")
    assert code == 2 and "optics.bands" in err and len(err.strip().splitlines()) == 1
    write_atomic(
        plan,
        PLAN.format(
            species=species(("ML", 1, 1, 3.0, 0.3)),
            cM="2 mM",
            cL="20 mM",
            epsilon="ML = { value = 1500.0, rsd = 0.2 }\n[optics.bands]\n"
            "ML = { peak_nm = 520, fwhm_nm = 100, epsilon_max = 1500.0 }",
        ),
    )
    code, out, err = run(
        capsys, monkeypatch, "series", plan, "--method", "survey", "--json", "--out", tmp_path / "s"
    )
    data = strict_json(out)
    assert code == 0, err
    assert data["method"] == "survey" and data["se_by_wavelength"] and "wavelength_nm" in data
    code, out, err = run(
        capsys,
        monkeypatch,
        "series",
        plan,
        "--method",
        "survey",
        "--recipe",
        tmp_path / "s" / "recipe.csv",
        "--json",
    )
    assert code == 0 and strict_json(out)["wavelength_nm"] == data["wavelength_nm"]
    code, _, err = run(capsys, monkeypatch, "assess", plan, tmp_path / "s" / "recipe.csv", "--trials", "0")
    assert code in (0, 1), err  # accepted (1: it does not resolve K on its own, as a series need not)


def test_survey_se_equals_one_cramer_rao_per_wavelength():
    # derived: the vectorised survey must give the SE of the ordinary path (model, error budget, Jacobian,
    # F⁻¹) on the plan moved to each wavelength
    from planner.inference.precision import ReadingModel, cramer_rao, free_parameters, pack
    from planner.jobs.compile import error_budget

    plan = band_plan("L = { peak_nm = 470, fwhm_nm = 80, epsilon_max = 100.0 }\n")
    model = plan_model(plan)
    recipe = survey.even_series(plan)
    lam = np.array([480.0, 520.0, 575.0])
    eps = survey._epsilon_by_wavelength(plan, model, lam)
    ours = survey._se_by_wavelength(plan, model, recipe, eps)[0]
    for k, w in enumerate(lam):
        p = survey._plan_at(plan, model, float(w), eps[k])
        m = plan_model(p)
        st = common.predict_volumes(m, recipe.volumes_mL, recipe.total_volume_mL)
        cov = error_budget(p, m, recipe, st).total
        params = free_parameters(m, p.target, blank_offset=p.design.blank_offset)
        reading = ReadingModel(
            m, params, st.totals_M, tube_ions_M(m, recipe.volumes_mL, recipe.total_volume_mL)
        )
        cr = cramer_rao(reading.jac(pack(m, params)[None, :])[0], cov)
        assert ours[k] == pytest.approx(cr.se[params.target], rel=1e-9)


def test_job_total_offered_does_separate():
    # the total the search offers, planned again, separates the non-nested rivals by ≥ 3 sd (derived: the
    # search and the verdict use the same fit; 10 % margin for the volume grid)
    plan = make_plan(
        species(("ML", 1, 1, 3.0, 0.3)), "ML = { value = 1000.0, rsd = 0.2 }", cM="0.2 mM", cL="0.2 mM"
    )
    s = to_json(job.continuous_variation(plan, total_M=1e-4))
    assert any(d["separation_sd"] < rv.SEPARATION_WANTED and not d["nested"] for d in s["discrimination"])
    need = s["total_needed_M"]
    assert need is not None and need > 1e-4
    again = to_json(job.continuous_variation(plan, total_M=1.1 * need))
    assert all(d["separation_sd"] >= rv.SEPARATION_WANTED for d in again["discrimination"] if not d["nested"])


def test_library_errors_name_parameters_and_the_command_its_options(tmp_path, capsys, monkeypatch):
    # issue 23: below the command line a message names the parameter the caller passed (total_M, not
    # --total); kplan series writes it as its option
    from planner.inputs.plan import PlanError

    text = PLAN.format(
        species=species(("ML", 1, 1, 6.0, 0.3)), epsilon="ML = { value = 1000.0 }", cM="2.0 mM", cL="2.0 mM"
    )
    plan = parse_plan_text(text)
    for method, kw, key in (
        ("job", {"total_M": 0.05}, "total_M"),
        ("calibration", {"excess_M": 5.0}, "excess_M"),
        ("calibration", {"total_M": 1.0}, "total_M"),
        ("mole-ratio", {"max_ratio": 1.1}, "max_ratio"),
        ("mole-ratio", {"vary": "X"}, "vary"),
    ):
        with pytest.raises(PlanError) as info:
            run_series(plan, method, **kw)
        assert info.value.key == key and "--" not in str(info.value), str(info.value)
    path = tmp_path / "p.toml"
    write_atomic(path, text)
    code, _, err = run(capsys, monkeypatch, "series", path, "--method", "job", "--total", "50 mM")
    assert code == 2 and err.startswith("error: --total:") and "lower --total or" in err
    assert "total_M" not in err
    code, _, err = run(capsys, monkeypatch, "series", path, "--method", "mole-ratio", "--max-ratio", "1.1")
    assert code == 2 and "--max-ratio: 1.1 does not reach past the break" in err


def test_option_of_another_method_exit_2(tmp_path, capsys, monkeypatch):
    plan = tmp_path / "p.toml"
    write_atomic(
        plan,
        PLAN.format(
            species=species(("ML", 1, 1, 6.0, 0.3)),
            epsilon="ML = { value = 1000.0 }",
            cM="2.0 mM",
            cL="2.0 mM",
        ),
    )
    code, _, err = run(capsys, monkeypatch, "series", plan, "--method", "job", "--vary", "M")
    assert code == 2 and "--vary applies to --method mole-ratio" in err


def test_series_recipes_feed_sheet_and_report(tmp_path, capsys, monkeypatch):
    plan = tmp_path / "p.toml"
    write_atomic(
        plan,
        PLAN.format(
            species=species(("ML", 1, 1, 5.0, 0.3)),
            epsilon="ML = { value = 1000.0, rsd = 0.2 }\nM = { value = 2.0 }",
            cM="20 mM",
            cL="2 mM",
        ),
    )
    code, _, err = run(
        capsys, monkeypatch, "series", plan, "--method", "calibration", "--out", tmp_path / "c"
    )
    assert code in (0, 1), err
    recipe = tmp_path / "c" / "recipe.csv"
    code, _, err = run(
        capsys,
        monkeypatch,
        "sheet",
        plan,
        recipe,
        "--html",
        "--out",
        tmp_path / "c" / "prep.html",
        "--trials",
        "0",
    )
    assert code == 0, err
    code, _, err = run(
        capsys, monkeypatch, "report", plan, recipe, "--html", "--out", tmp_path / "c" / "r.html"
    )
    assert code == 0, err
    assert (tmp_path / "c" / "prep.html").is_file() and (tmp_path / "c" / "r.html").is_file()
