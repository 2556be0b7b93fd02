"""A fit that cannot be fooled: readings out of range, excluded tubes, undetermined constants, both tails of
χ², the profile interval, and readings files from decimal-comma spreadsheets."""

from __future__ import annotations

import numpy as np
import pytest

from planner.inference.simulate import simulate
from planner.inputs.plan import parse_plan_text
from planner.inputs.readings import Readings, parse_readings_csv
from planner.inputs.recipe import RecipeError, make_recipe, recipe_to_csv
from planner.jobs.compile import compile_study
from planner.jobs.measure.fit import fit_readings

from ...conftest import scenario_text

DY = np.array([0.5, 0.75, 1.0, 1.5, 2.0, 2.5, 3.0, 3.5])


@pytest.fixture(scope="module")
def plan():
    return parse_plan_text(scenario_text("teaching"))


def _readings(plan, log_beta=3.3, seed=4, noise=True):
    r = make_recipe(plan, {"CU": np.full(8, 1.0), "DY": DY})
    st = compile_study(plan)
    lb = st.model.log_beta.copy()
    lb[0] = log_beta
    sim = simulate(
        st.bench,
        st.model,
        r,
        np.random.default_rng(seed),
        1,
        log_beta=lb,
        photometric=noise,
        delivery=noise,
        stock=noise,
    )
    return Readings(r, sim.absorbance[0].copy())


def test_an_out_of_range_reading_is_left_out(plan):
    rd = _readings(plan)
    good = fit_readings(plan, rd)
    a = rd.absorbance.copy()
    a[3] = 1.250  # above the linear range (0.1–1.0)
    bad = Readings(rd.recipe, a)
    f = fit_readings(plan, bad)
    assert f.determined and not f.used[3]
    assert [t for t, _ in f.excluded] == ["T4"] and "linear range" in f.excluded[0][1]
    assert f.estimate[0] == pytest.approx(good.estimate[0], abs=3 * good.se[0])
    kept = fit_readings(plan, bad, keep_out_of_range=True)
    # kept in, it is named as the one wild reading (alone), χ² fails and the SEs are widened by √(χ²/dof)
    assert kept.determined and kept.p_value < 0.05 and list(kept.outliers) == [k == 3 for k in range(8)]
    assert kept.interval_scale == pytest.approx(np.sqrt(kept.chi2 / kept.dof))
    assert kept.se[0] == pytest.approx(kept.se_error_model[0] * kept.interval_scale)


def test_exclude_by_label(plan):
    rd = _readings(plan)
    f = fit_readings(plan, rd, exclude=("T2", "T7"))
    assert list(f.used) == [True, False, True, True, True, True, False, True] and f.dof == 4
    with pytest.raises(RecipeError, match="no tube 'T9'"):
        fit_readings(plan, rd, exclude=("T9",))


def test_saturated_readings_are_not_determined(plan):
    # derived: at log β = 12 every tube is fully converted (K·[L] ≫ 1), so the readings fix ε but not K:
    # the constant runs to the edge of its range or its information is singular
    f = fit_readings(plan, _readings(plan, log_beta=12.0, noise=False))
    assert not f.determined and f.reason
    assert np.all(np.isnan(f.se))
    assert f.summary()["determined"] is False


def test_too_good_to_be_true_is_flagged(plan):
    # noise-free readings: χ² ≈ 0 on 6 dof, far in the lower tail (p_low ≈ 0)
    f = fit_readings(plan, _readings(plan, noise=False))
    assert f.determined and f.p_low < 0.05 and "suspiciously small" in f.chi2_verdict


def test_no_degrees_of_freedom_is_said_plainly(plan):
    rd = _readings(plan)
    f = fit_readings(plan, rd, exclude=tuple(f"T{k}" for k in range(3, 9)))
    assert f.dof == 0 and "no degrees of freedom" in f.chi2_verdict


def test_profile_interval_brackets_the_estimate_like_the_se(plan):
    # derived: where the likelihood is nearly quadratic (SE small against the curvature of the model) the
    # profile 95 % interval is about estimate ± 1.96 SE
    f = fit_readings(plan, _readings(plan))
    lo, hi = f.profile_ci95
    assert lo < f.estimate[0] < hi
    assert (hi - lo) / 2 == pytest.approx(1.96 * f.se[0], rel=0.25)


def test_decimal_comma_semicolon_file_reads_the_same(plan):
    rd = _readings(plan)
    lines = recipe_to_csv(rd.recipe, plan).splitlines()
    comma = (
        "\n".join(
            [lines[0] + ",absorbance,note"]
            + [f"{ln},{a:.4f},ok" for ln, a in zip(lines[1:], rd.absorbance, strict=True)]
        )
        + "\n"
    )
    semi = comma.replace(",", ";").replace(".", ",")
    a = parse_readings_csv(comma, plan)
    b = parse_readings_csv(semi, plan)
    np.testing.assert_allclose(a.absorbance, b.absorbance)
    np.testing.assert_allclose(a.recipe.volumes_mL, b.recipe.volumes_mL)
    with pytest.raises(RecipeError, match="mixes ';' and ','"):
        parse_readings_csv("tube;CU,DY,absorbance\nT1;1,1,0.3\n", plan)
