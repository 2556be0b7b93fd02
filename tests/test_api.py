"""The public API: the README's "Use it from Python" example runs as written, every exported name
resolves, and the compiled study is read-only."""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pytest

import planner

ROOT = Path(__file__).resolve().parents[1]


def test_readme_python_example_runs(monkeypatch, capsys):
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    section = text[text.index("## Use it from Python") :]
    code = re.search(r"```python\n(.*?)```", section, re.S).group(1)
    monkeypatch.chdir(ROOT)
    exec(compile(code, "README.md", "exec"), {})
    out = capsys.readouterr().out.splitlines()
    assert out[0].startswith(("resolved", "bounded", "unresolved")) and "SE(log K)" in out[0]
    assert "determined" in out[1]
    assert out[2].startswith("refused:") and "no-such-plan.toml" in out[2]


@pytest.mark.parametrize("name", planner.__all__)
def test_every_exported_name_resolves(name):
    assert getattr(planner, name) is not None


def test_errors_share_one_base():
    for name in (
        "PlanError",
        "RecipeError",
        "DesignError",
        "FitError",
        "EquilibriumError",
        "InputError",
        "LimitError",
    ):
        assert issubclass(getattr(planner, name), planner.KplanError), name


def test_study_arrays_are_read_only(teaching_plan):
    study = planner.compile_study(teaching_plan)
    with pytest.raises(ValueError, match="read-only"):
        study.model.log_beta[0] = 9.0
    with pytest.raises(ValueError, match="read-only"):
        study.params.guess[0] = 9.0
    assert np.all(np.isfinite(study.model.log_beta))
