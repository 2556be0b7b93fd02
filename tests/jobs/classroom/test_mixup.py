"""The likely mix-up behind readings that do not match their recipe."""

from __future__ import annotations

import numpy as np
import pytest

from planner.inputs.plan import parse_plan_text
from planner.jobs.classroom.mixup import KINDS, diagnose
from planner.jobs.classroom.practice import inject
from planner.jobs.classroom.slips import transposed
from planner.jobs.compile import compile_study
from planner.jobs.plan.even import even_series_for

from ...conftest import scenario_text


@pytest.fixture(scope="module")
def setup():
    study = compile_study(parse_plan_text(scenario_text("teaching")))
    return study, even_series_for(study, 8)


def test_transposed_digits():
    # derived: the two last digits of the volume written to 0.01 mL, swapped
    assert transposed(2.15) == pytest.approx(2.51)
    assert transposed(1.0) is None  # 1.00: the digits are equal
    assert transposed(3.33) is None


def _named(d):
    return ([d.best] + list(d.ties)) if d.best is not None else []


@pytest.mark.parametrize("kind", KINDS)
def test_injected_slips_are_recovered(setup, kind):
    # seeded simulated students with one slip each (at the plan's noise): the diagnosis names it, alone or
    # among the explanations the readings cannot decisively rule out, in at least 85 % of the visible cases
    # (an explanation is named only when the readings pass χ² at 1 % after it, so about 1 % of true slips
    # stay "unexplained" with it as the candidate [derived]; benchmarks/mixups.py reports more trials)
    study, recipe = setup
    rng = np.random.default_rng(11)
    ok = seen = 0
    for _ in range(30):
        a, expected, size = inject(study, recipe, kind, rng)
        if size < 3.0:
            continue
        seen += 1
        d = diagnose(study, recipe, a)
        ok += any(e.kind == kind and expected in e.text for e in _named(d))
    assert seen >= 25 and ok / seen >= 0.85, (kind, ok, seen)


def test_clean_readings_are_unexplained(setup):
    study, recipe = setup
    rng = np.random.default_rng(12)
    explained = sum(
        diagnose(study, recipe, inject(study, recipe, None, rng)[0]).best is not None for _ in range(40)
    )
    assert explained <= 2
    d = diagnose(study, recipe, inject(study, recipe, None, rng)[0])
    assert d.summary()["explanation"] == "unexplained"


def test_slips_outside_the_old_menu_get_no_decisive_wrong_name(setup):
    # issue 19: a baseline drifting 0.01 A per reading was called a wrong wavelength in 41 of 42 students,
    # noise ×5 a specific slip in 31 of 42, a ten-fold dilute ligand stock ranked behind "wavelength ×0.13"
    # in 26 of 26. Now: drift is named (or tied), noise is noise or unexplained, the stock is named.
    study, recipe = setup
    rng = np.random.default_rng(13)
    wrong = {"drift": 0, "noise": 0, "dilute-stock": 0}
    for kind in wrong:
        for _ in range(20):
            a, tag, _ = inject(study, recipe, kind, rng)
            d = diagnose(study, recipe, a)
            names = _named(d)
            if kind == "drift":
                wrong[kind] += bool(names) and not any(e.kind == "drift" for e in names)
            elif kind == "noise":
                wrong[kind] += d.best is not None and d.best.kind != "noise"
            else:
                wrong[kind] += bool(names) and not any(
                    e.kind == "wrong-stock" and tag in e.text for e in names
                )
    assert wrong == {"drift": 0, "noise": 0, "dilute-stock": 0}


def test_percent_t_is_recognised(setup):
    # a student who wrote %T (values 1–100): converted as A = −log10(%T/100) the readings match, and the
    # diagnosis says so; numbers that are not %T either are called "not absorbances"
    study, recipe = setup
    rng = np.random.default_rng(14)
    a, _, _ = inject(study, recipe, "percent-T", rng)
    assert np.all((a > 1) & (a < 100))
    d = diagnose(study, recipe, a)
    assert d.best is not None and d.best.kind == "percent-T" and "look like %T" in d.text
    junk = np.linspace(20.0, 90.0, recipe.n_tubes)  # rising %T: falling absorbance, no curve of this recipe
    d = diagnose(study, recipe, junk)
    assert d.best is None and "not absorbances" in d.summary()["candidate"]


def test_the_named_explanation_leaves_the_readings_passing(setup):
    # the rule: an explanation is named only when, after it, the readings pass the χ² acceptance point at
    # 1 % on n − k degrees of freedom (8 tubes; k = 0 or 1 fitted numbers)
    accept = {0: 20.090, 1: 18.475}  # source: χ²(8) and χ²(7) 99 % points, standard tables
    study, recipe = setup
    rng = np.random.default_rng(15)
    for kind in ("swapped-tubes", "misread-volume", "not-made-up", "blank"):
        for _ in range(5):
            d = diagnose(study, recipe, inject(study, recipe, kind, rng)[0])
            for e in _named(d):
                assert e.passes and e.chi2_after <= accept[e.k] + 1e-3
