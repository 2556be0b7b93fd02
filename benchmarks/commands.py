"""Where people wait: each command's CPU time against its floor, measured in one run (issue 25).

Every command runs in a fresh interpreter with a bytecode cache (as ``pip install .`` leaves it: the
first, untimed run writes it), and its cost is the CPU seconds of the whole process (user + system, from
``wait4``), the best of ``--repeats``; CPU time rather than wall time, so a busy machine distorts the
ratios less. Printed first, the floors measured in the same run:

* the import floor named by the issue: ``python -c "import numpy, pydantic, rich, typer"``;
* a working floor, what a minimal command of this kind pays anyway: a bare typer app whose command takes
  a path, reads the TOML file into a three-field pydantic model and prints a rich table (typer builds a
  pydantic adapter per parameter when a command runs, and ``import pydantic`` alone loads none of it).

Then the ratios and their goals: ``check`` ≤ 1.5 × the import floor; ``design`` on each example ≤ 2 ×
``assess`` of the designed recipe (also shown with the plan's model check off, ``design.check =
"none"``, to separate the model check's share); ``demo`` ≤ 5 × one prep sheet; a 20-addition titration
design ≤ 2 s.

Run: ``python benchmarks/commands.py [--repeats 3]``
"""

from __future__ import annotations

import argparse
import os
import re
import subprocess
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
EXAMPLES = ROOT / "examples"

BARE = """
import sys, tomllib
from pathlib import Path
from typing import Annotated
import numpy
import typer
from pydantic import BaseModel
from rich.console import Console
from rich.table import Table
app = typer.Typer(add_completion=False)
class Plan(BaseModel):
    title: str
    temperature_C: float = 25.0
    extra: dict = {}
@app.command()
def check(plan: Annotated[Path, typer.Argument(help="plan file")]) -> None:
    data = tomllib.loads(plan.read_text())
    p = Plan(title=data["title"], extra={k: str(v)[:20] for k, v in data.items()})
    t = Table(title=p.title)
    for c in ("key", "value"):
        t.add_column(c)
    for k, v in p.extra.items():
        t.add_row(k, v)
    Console().print(t)
@app.command()
def other() -> None:
    pass
app()
"""


def cpu(cmd: list[str], repeats: int, cwd: Path) -> float:
    """Best CPU seconds (user + system) of the process over ``repeats`` runs, after one untimed run."""
    env = {k: v for k, v in os.environ.items() if k != "PYTHONDONTWRITEBYTECODE"}
    best = float("inf")
    for i in range(repeats + 1):
        proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, cwd=cwd, env=env)
        _, status, usage = os.wait4(proc.pid, 0)
        code = os.waitstatus_to_exitcode(status)
        if code not in (0, 1):
            raise SystemExit(f"{' '.join(cmd)} failed (exit {code})")
        if i:
            best = min(best, usage.ru_utime + usage.ru_stime)
    return best


def without_check(plan: Path, tmp: Path) -> Path:
    """A copy of the plan with the model check off."""
    text = plan.read_text(encoding="utf-8")
    text = re.sub(r"^check\s*=.*$", "", text, flags=re.M)
    out = tmp / f"{plan.stem}-nocheck.toml"
    for table in plan.parent.glob("*.csv"):  # the files a plan names (an ε table) sit beside the copy
        if not (tmp / table.name).exists():
            (tmp / table.name).write_bytes(table.read_bytes())
    out.write_text(text.replace("[design]\n", '[design]\ncheck = "none"\n', 1), encoding="utf-8")
    return out


def main(repeats: int) -> None:  # noqa: C901 - a flat script of measurements
    py = sys.executable
    kplan = [py, "-m", "planner"]
    with tempfile.TemporaryDirectory() as tmp_name:
        tmp = Path(tmp_name)
        bare = tmp / "bare.py"
        bare.write_text(BARE, encoding="utf-8")
        cuvette = EXAMPLES / "cuvette-1to1.toml"
        floor = cpu([py, "-c", "import numpy, pydantic, rich, typer"], repeats, tmp)
        working = cpu([py, str(bare), "check", str(cuvette)], repeats, tmp)
        print(f"import floor (numpy, pydantic, rich, typer): {floor:.2f} s CPU")
        print(
            f"working floor (bare typer command: TOML -> pydantic model -> rich table): {working:.2f} s CPU"
        )
        print(f"{'command':<44} {'CPU s':>6} {'ratio':>7}  goal")
        t_help = cpu([*kplan, "--help"], repeats, tmp)
        print(f"{'kplan --help':<44} {t_help:>6.2f} {t_help / floor:>6.2f}x  (× import floor)")
        for plan in sorted(EXAMPLES.glob("*.toml")):
            t = cpu([*kplan, "check", str(plan)], repeats, tmp)
            print(
                f"{'check ' + plan.name:<44} {t:>6.2f} {t / floor:>6.2f}x  ≤ 1.5 × import floor; "
                f"{t / working:.2f}x the working floor"
            )
        for plan in sorted(EXAMPLES.glob("*.toml")):
            if "[titration]" in plan.read_text(encoding="utf-8"):
                continue
            out = tmp / plan.stem
            t_design = cpu([*kplan, "design", str(plan), "--out", str(out)], repeats, tmp)
            t_assess = cpu([*kplan, "assess", str(plan), str(out / "recipe.csv")], repeats, tmp)
            t_bare = cpu(
                [*kplan, "design", str(without_check(plan, tmp)), "--out", str(tmp / "x")], repeats, tmp
            )
            print(
                f"{'design ' + plan.name:<44} {t_design:>6.2f} {t_design / t_assess:>6.2f}x  ≤ 2 × assess "
                f"({t_assess:.2f} s); without the model check {t_bare:.2f} s = {t_bare / t_assess:.2f}x"
            )
        t_demo = cpu([*kplan, "demo", "--out", str(tmp / "demo")], repeats, tmp)
        t_sheet = cpu(
            [*kplan, "sheet", str(tmp / "demo" / "plan.toml"), str(tmp / "demo" / "recipe.csv"), "--out",
             str(tmp / "sheet.pdf")],
            repeats,
            tmp,
        )  # fmt: skip
        print(
            f"{'demo':<44} {t_demo:>6.2f} {t_demo / t_sheet:>6.2f}x  ≤ 5 × one prep sheet ({t_sheet:.2f} s)"
        )
        titration = (EXAMPLES / "titration-cuvette.toml").read_text(encoding="utf-8")
        twenty = tmp / "titration-20.toml"
        twenty.write_text(
            re.sub(r"^additions\s*=.*$", "additions = 20", titration, flags=re.M), encoding="utf-8"
        )
        t_tit = cpu([*kplan, "design", str(twenty), "--out", str(tmp / "t20")], repeats, tmp)
        print(f"{'design, titration of 20 additions':<44} {t_tit:>6.2f} {'':>7}  ≤ 2 s")


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=3)
    main(parser.parse_args().repeats)
