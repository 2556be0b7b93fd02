"""The package's shape: one layer per folder, imports going down only, no import circle, and no Plan
below the jobs (DEVELOPERS.md)."""

from __future__ import annotations

import ast
import os
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
PACKAGE = ROOT / "planner"
NUMERICAL_LAYERS = ("model", "uncertainty", "inference")


def test_import_contracts_are_kept(capsys):
    # import-linter reads the contracts from pyproject.toml; a broken one names the importer and the
    # imported module in its report, shown here on failure
    from importlinter.cli import lint_imports

    cwd = os.getcwd()
    os.chdir(ROOT)
    try:
        code = lint_imports(config_filename=str(ROOT / "pyproject.toml"), no_cache=True)
    finally:
        os.chdir(cwd)
    report = capsys.readouterr().out
    assert code == 0, report
    assert "0 broken" in report


def _plan_parameters(path: Path) -> list[str]:
    tree = ast.parse(path.read_text(encoding="utf-8"))
    found = []
    for node in ast.walk(tree):
        if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef)):
            args = node.args.posonlyargs + node.args.args + node.args.kwonlyargs
            for a in args:
                ann = ast.unparse(a.annotation) if a.annotation is not None else ""
                if a.arg == "plan" or "Plan" in ann.replace("Planner", ""):
                    found.append(f"{node.name}({a.arg}: {ann})")
    return found


@pytest.mark.parametrize("layer", NUMERICAL_LAYERS)
def test_no_plan_below_the_jobs(layer):
    bad = {str(p.relative_to(ROOT)): _plan_parameters(p) for p in (PACKAGE / layer).glob("*.py")}
    bad = {k: v for k, v in bad.items() if v}
    assert not bad, f"functions below planner/jobs take the plan (compile it in the job instead): {bad}"
