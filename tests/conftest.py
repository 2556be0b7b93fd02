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


def run_cli(capsys, monkeypatch, *args) -> tuple[int, str, str]:
    """Run ``kplan *args`` through the console entry point (as installed); return (exit code, stdout,
    stderr). Tables are laid out 200 columns wide so that names are not wrapped."""
    import sys

    from planner import cli

    monkeypatch.setattr(sys, "argv", ["kplan", *map(str, args)])
    monkeypatch.setenv("COLUMNS", "200")
    # the consoles read COLUMNS when first imported, which may be before this test: set their width too
    import importlib

    consoles = importlib.import_module("planner.cli.app")
    for console in (consoles.out, consoles.err):
        monkeypatch.setattr(console, "width", 200)
    code = 0
    try:
        cli.main()
    except SystemExit as exc:
        code = exc.code if isinstance(exc.code, int) else (0 if exc.code is None else 1)
    cap = capsys.readouterr()
    return code, cap.out, cap.err
