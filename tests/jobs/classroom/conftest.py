"""The teaching scenario, compiled once per test module (the class-set tests share it)."""

from __future__ import annotations

import pytest

from planner.inputs.plan import parse_plan_text
from planner.jobs.compile import compile_study

from ...conftest import scenario_text


@pytest.fixture(scope="module")
def plan():
    return parse_plan_text(scenario_text("teaching"))


@pytest.fixture(scope="module")
def study(plan):
    return compile_study(plan)
