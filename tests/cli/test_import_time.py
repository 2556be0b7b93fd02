"""Each command imports only what it uses (issue 25): ``python -X importtime`` in a fresh interpreter.

A command that pulls a heavy library it does not print with (scipy, the PDF stack, spreadsheets, the
unit registry) starts slower for every user; this fails the suite when one does, naming the module and
the chain that imported it.
"""

from __future__ import annotations

import subprocess
import sys

import pytest

from ..conftest import ROOT

OTHER_COMMANDS = tuple(f"planner.cli.{c}" for c in ("assess", "cards", "design", "fit", "grade", "series"))
HEAVY = ("scipy", "matplotlib", "weasyprint", "jinja2", "pandas", "openpyxl", "pint")
EX = ROOT / "examples"

# command line -> heavy modules it must not import (its own work needs none of them). Reading a plan
# uses molmass (a stock's solid formula is checked), so only --help must do without it.
CASES = {
    "--help": ("numpy", "molmass", *HEAVY),
    # check prints what the plan says and the glassware's figures: none of the numerics' layers, and no
    # other command's module (only the command named on the line is registered)
    f"check {EX / 'cuvette-1to1.toml'}": (
        *HEAVY,
        "planner.inference",
        "planner.jobs.compile",
        *OTHER_COMMANDS,
    ),
    f"assess {EX / 'cuvette-1to1.toml'} {EX / 'cuvette-1to1.csv'} --trials 20": HEAVY,
    f"design {EX / 'stepwise-weak.toml'} --json": HEAVY,
    # a design with a model check: its JSON names each alternative's detection
    f"design {EX / 'cuvette-1to1.toml'} --json": HEAVY,
}


def imported_modules(args: list[str], cwd) -> dict[str, str]:
    """Every module the command imports -> the chain of top-level imports that brought it in."""
    proc = subprocess.run(
        [sys.executable, "-X", "importtime", "-m", "planner", *args],
        capture_output=True,
        text=True,
        cwd=cwd,
        check=False,
    )
    assert proc.returncode in (0, 1), proc.stderr[-2000:]
    chain: list[str] = []
    found: dict[str, str] = {}
    for line in reversed(proc.stderr.splitlines()):  # importtime prints children before parents
        if not line.startswith("import time:") or line.endswith("| imported package"):
            continue
        name = line.rsplit("|", 1)[1]
        depth = (len(name) - len(name.lstrip())) // 2
        chain = chain[:depth] + [name.strip()]
        found.setdefault(name.strip(), " <- ".join(reversed(chain)))
    return found


@pytest.mark.parametrize("command", list(CASES), ids=[c.split()[0] for c in CASES])
def test_command_imports_no_heavy_module_it_does_not_use(command, tmp_path):
    mods = imported_modules(command.split(), tmp_path)
    assert "planner" in mods  # the parse worked
    banned = CASES[command]
    pulled = {m: chain for m, chain in mods.items() if any(m == b or m.startswith(b + ".") for b in banned)}
    assert not pulled, "\n".join(f"{m}: {chain}" for m, chain in sorted(pulled.items())[:5])
