"""The likely mix-up behind readings that do not match their recipe."""

from __future__ import annotations

import numpy as np
import pytest

from planner.inputs.plan import parse_plan_text
from planner.jobs.classroom.mixup import KINDS, _transposed, diagnose, inject
from planner.jobs.compile import compile_study
from planner.jobs.plan.even import even_series_for

from ...conftest import scenario_text


@pytest.fixture(scope="module")
def setup():
    study = compile_study(parse_plan_text(scenario_text("teaching")))
    return study, even_series_for(study, 8)


def test_transposed_digits():
    # derived: the two last digits of the volume written to 0.01 mL, swapped
    assert _transposed(2.15) == pytest.approx(2.51)
    assert _transposed(1.0) is None  # 1.00: the digits are equal
    assert _transposed(3.33) is None


@pytest.mark.parametrize("kind", KINDS)
def test_injected_slips_are_recovered(setup, kind):
    # seeded simulated students with one slip each (at the plan's noise): the diagnosis names it, alone or
    # among the explanations the readings cannot decisively rule out, in at least 90 % of the visible cases
    # (benchmarks/mixups.py reports the rates over more trials)
    study, recipe = setup
    rng = np.random.default_rng(11)
    ok = seen = 0
    for _ in range(30):
        a, expected, size = inject(study, recipe, kind, rng)
        if size < 3.0:
            continue
        seen += 1
        d = diagnose(study, recipe, a)
        group = ([d.best] + list(d.ties)) if d.best is not None else []
        ok += any(e.kind == kind and expected in e.text for e in group)
    assert seen >= 25 and ok / seen >= 0.9, (kind, ok, seen)


def test_clean_readings_are_unexplained(setup):
    study, recipe = setup
    rng = np.random.default_rng(12)
    explained = sum(
        diagnose(study, recipe, inject(study, recipe, None, rng)[0]).best is not None for _ in range(40)
    )
    assert explained <= 2
    d = diagnose(study, recipe, inject(study, recipe, None, rng)[0])
    assert d.summary()["explanation"] == "unexplained"
