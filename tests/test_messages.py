"""Messages below the command line name parameters and plan keys, never command-line flags.

A library user calls ``run_series(plan, "job", total_M=…)`` and has no ``--total`` to change; the
command line translates a parameter back to its option where it prints the error
(``planner/cli/series.py: OPTION_OF``). This scans every string literal of every module below
``planner/cli`` (docstrings and bare string statements aside: they are documentation, not messages).
"""

from __future__ import annotations

import ast
import re

from .conftest import ROOT

FLAG = re.compile(r"--[A-Za-z]")
# modules allowed to name a flag (none)
PENDING: set[str] = set()


def _documentation(tree: ast.AST) -> set[int]:
    """ids of the string constants that are docstrings or bare string statements."""
    out = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Expr) and isinstance(node.value, ast.Constant):
            out.add(id(node.value))
    return out


def flags_in(source: str) -> list[tuple[int, str]]:
    """(line, text) of every string literal of ``source`` that names a ``--flag``, f-string parts
    included."""
    tree = ast.parse(source)
    docs = _documentation(tree)
    return [
        (node.lineno, node.value)
        for node in ast.walk(tree)
        if isinstance(node, ast.Constant)
        and isinstance(node.value, str)
        and id(node) not in docs
        and FLAG.search(node.value)
    ]


def test_the_scan_finds_a_flag_in_a_message_and_not_in_a_docstring():
    source = (
        'def f(x):\n    """Say ``--at`` here."""\n    "a note on --total"\n'
        '    raise ValueError(f"{x}: use --total instead")\n'
    )
    assert [line for line, _ in flags_in(source)] == [4]
    assert flags_in('raise ValueError("total_M: lower it; a range 1--2 is no flag")') == []


def test_no_module_below_the_command_line_names_a_flag():
    found = []
    for path in sorted((ROOT / "planner").rglob("*.py")):
        rel = path.relative_to(ROOT).as_posix()
        if rel.startswith("planner/cli/") or rel in PENDING:
            continue
        found += [f"{rel}:{line}: {text!r}" for line, text in flags_in(path.read_text(encoding="utf-8"))]
    assert not found, "\n".join(found)
