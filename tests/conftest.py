"""Shared fixtures: the built-in scenarios as text and as validated plans."""

from __future__ import annotations

from importlib import resources
from pathlib import Path

import pytest

from planner.inputs.plan import parse_plan_text

ROOT = Path(__file__).resolve().parents[1]


def scenario_text(name: str) -> str:
    return resources.files("planner.data").joinpath("scenarios", f"{name}.toml").read_text(encoding="utf-8")


@pytest.fixture
def teaching_text() -> str:
    return scenario_text("teaching")


@pytest.fixture
def teaching_plan():
    return parse_plan_text(scenario_text("teaching"))


@pytest.fixture(params=["teaching", "stepwise", "proton"])
def any_scenario(request):
    return parse_plan_text(scenario_text(request.param))
