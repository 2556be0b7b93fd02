"""The fit's 95 % interval covers the truth as often as it says, at every precision, also with one wild
reading; a clean tube next to a wild one is not marked; standardised residuals keep their sign.

Every experiment is simulated with every error source (stocks, dispensers, make-up, photometric noise)
at a truth off the plan's guess (log β + 0.3, ε(ML) + 8 %: within the plan's own uncertainty) and fitted by
the same batched code ``kplan fit`` runs (:func:`planner.jobs.measure.core.fit_batch`).
"""

from __future__ import annotations

import numpy as np
import pytest

from planner.inference.simulate import simulate
from planner.inputs.plan import parse_plan_text
from planner.inputs.readings import Readings
from planner.jobs.compile import compile_study
from planner.jobs.measure.core import fit_batch
from planner.jobs.measure.fit import fit_study
from planner.jobs.plan.even import even_series_for

from ...conftest import scenario_text

TRIALS = 500
Z95 = 1.959963984540054  # source: standard normal 97.5 % quantile (scipy.stats.norm.ppf(0.975))
# binomial: 500 experiments at a true coverage of 0.95 give a sd of √(0.95·0.05/500) = 0.0097, so 95 ± 2 %
# is ±2 sd [derived]


def _big(text: str) -> str:
    """The teaching scenario in 100 mL flasks with a 50 mL burette: deliveries ten times larger, so their
    relative errors are small enough for a precise fit."""
    return (
        text.replace('tube_volume = "10.00 mL"', 'tube_volume = "100.00 mL"')
        .replace(
            'flask = { capacity = "10 mL", class = "A" }', 'flask = { capacity = "100 mL", class = "A" }'
        )
        .replace('min_volume = "0.50 mL"', 'min_volume = "5.0 mL"')
        .replace('capacity = "10 mL"\nclass = "A"\nstocks', 'capacity = "50 mL"\nclass = "A"\nstocks')
        .replace('on_hand = "100 mL"', 'on_hand = "2000 mL"')
    )


def _noise(text: str, k1: float, k3: float, rsd: float | None, step: float) -> str:
    text = text.replace(
        "noise = { k1 = 0.003, k2 = 0.0, k3 = 0.002 }", f"noise = {{ k1 = {k1}, k2 = 0.0, k3 = {k3} }}"
    ).replace("display_step = 0.001", f"display_step = {step}")
    if rsd is not None:
        text = text.replace("conc_rsd = 0.005", f"conc_rsd = {rsd}").replace(
            "conc_rsd = 0.01", f"conc_rsd = {rsd}"
        )
    return text


PLANS = {  # SE of log β about 0.005, 0.02 and 0.1 for 8 evenly stepped tubes at the truth below
    0.005: _noise(_big(scenario_text("teaching")), 0.0003, 0.0002, 0.0005, 0.0001),
    0.02: _noise(_big(scenario_text("teaching")), 0.002, 0.0013, 0.004, 0.0005),
    0.1: _noise(scenario_text("teaching"), 0.01, 0.007, None, 0.001),
}


def _experiments(se: float, seed: int):
    study = compile_study(parse_plan_text(PLANS[se]))
    recipe = even_series_for(study, 8)
    lb = study.model.log_beta + 0.3
    eps = study.model.epsilon_M_cm.copy()
    eps[study.model.absorbers.index("ML")] *= 1.08
    Y = simulate(
        study.bench, study.model, recipe, np.random.default_rng(seed), TRIALS, log_beta=lb, epsilon_M_cm=eps
    )
    return study, recipe, Y.absorbance, float(lb[0])


def _coverage(ci: np.ndarray, truth: float) -> float:
    lo = np.where(np.isnan(ci[:, 0]), -np.inf, ci[:, 0])  # an open side holds everything beyond it
    hi = np.where(np.isnan(ci[:, 1]), np.inf, ci[:, 1])
    return float(np.mean((lo <= truth) & (truth <= hi)))


@pytest.mark.parametrize("se", sorted(PLANS))
def test_interval_covers_the_truth_95_percent_at_every_precision(se):
    study, recipe, Y, truth = _experiments(se, seed=19)
    b = fit_batch(study, recipe, Y)
    assert np.median(b.se[:, 0]) == pytest.approx(se, rel=0.35)  # the precision the case is named for
    assert b.determined.mean() > 0.99
    assert 0.93 <= _coverage(b.ci, truth) <= 0.97  # 95 ± 2 % [derived, binomial above]
    # where the likelihood is nearly quadratic the profile interval is about ±1.96 SE (Venzon & Moolgavkar
    # 1988, Appl. Stat. 37:87); the fixed grid of before gave 0.58× that at SE ≈ 0.007
    if se <= 0.02:
        half = (b.ci[:, 1] - b.ci[:, 0]) / 2 / (b.se[:, 0] * b.scale)
        assert np.median(half) == pytest.approx(Z95, rel=0.03)


@pytest.mark.parametrize("se", sorted(PLANS))
def test_one_wild_reading_does_not_break_the_interval(se):
    # one reading per experiment, at a random tube, 0.15 absorbance off (a copying slip): the χ² test fails,
    # the interval is widened by √(χ²/dof) and holds the fit without the suspect too: ≥ 90 % coverage
    # (issue 19's check) where the unwidened interval covered 0.6–0.8 [derived by this simulation]
    study, recipe, Y, truth = _experiments(se, seed=23)
    rng = np.random.default_rng(5)
    wild = rng.integers(recipe.n_tubes, size=TRIALS)
    Y[np.arange(TRIALS), wild] += 0.15
    b = fit_batch(study, recipe, Y)
    assert _coverage(b.ci, truth) >= 0.90
    # the wild tube is the (first) suspect wherever one is named, and it is named in most experiments where
    # 0.15 is many sd (at SE 0.1 the noise is ten times larger and half the slips hide in it)
    named = b.suspects[:, 0] >= 0
    assert named.mean() > (0.9 if se <= 0.02 else 0.4)
    assert np.mean(b.suspects[named, 0] == wild[named]) > (0.99 if se <= 0.02 else 0.9)


def test_a_clean_tube_next_to_a_wild_one_is_not_marked():
    # one wild reading made three clean tubes "outliers" when each residual of the bent fit was judged on
    # its own; the backward search names the wild one alone
    study = compile_study(parse_plan_text(scenario_text("teaching")))
    recipe = even_series_for(study, 8)
    lb = study.model.log_beta + 0.1
    Y = simulate(study.bench, study.model, recipe, np.random.default_rng(3), 40, log_beta=lb).absorbance
    Y[:, 2] += 0.12  # T3, read 0.12 high (still inside the linear range)
    b = fit_batch(study, recipe, Y, interval=False)
    assert np.all(b.suspects[:, 0] == 2)
    assert np.all(b.suspects[:, 1:] < 0)  # nobody else
    f = fit_study(study, Readings(recipe, Y[0]))
    assert [t for t, _, _ in f.suspects] == ["T3"] and list(np.flatnonzero(f.outliers)) == [2]
    assert f.interval_scale > 1 and "widened" in f.interval_note


def test_standardised_residuals_keep_the_sign_of_the_raw_ones():
    # derived: each residual over its own sd has its sign; a whitened residual mixes the tubes through the
    # shared stock errors and need not (the case of before)
    study = compile_study(parse_plan_text(scenario_text("teaching")))
    recipe = even_series_for(study, 8)
    Y = simulate(study.bench, study.model, recipe, np.random.default_rng(8), 30).absorbance
    for y in Y[:30]:
        f = fit_study(study, Readings(recipe, y), exclude=("T2",))
        ok = np.isfinite(f.standardised)
        assert ok.sum() == 8  # the excluded tube too, as a prediction error
        assert np.all(np.sign(f.standardised[ok]) == np.sign(f.residual[ok]))


def test_clean_fits_mark_a_suspect_rarely():
    # the critical value is Bonferroni's over the tubes at 5 % (never below |z| = 3), so clean experiments get
    # a suspect in at most about 5 % of cases [derived]; 500 experiments: ≤ 8 % (binomial 99.9 % bound)
    study, recipe, Y, _ = _experiments(0.1, seed=29)
    b = fit_batch(study, recipe, Y, interval=False)
    assert np.mean(b.suspects[:, 0] >= 0) <= 0.08
