"""How fast each command answers, against what any Python command line pays anyway.

Times (best of ``--repeats`` runs, wall clock, a fresh interpreter each) of ``kplan --help``, ``check``,
``assess`` (2000 Monte-Carlo trials) and ``design`` on the demo scenario, beside two baselines measured in
the same run: a bare typer app that prints its help, and ``python -c "import numpy"``. Goals (issue 11):
--help ≤ 0.3 s, check ≤ 0.6 s, assess ≤ 1.0 s, design ≤ 1.0 s on a 2-core machine.

Run: ``python benchmarks/startup.py [--repeats 5]``
"""

from __future__ import annotations

import argparse
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
BARE_TYPER = """
import typer
app = typer.Typer(add_completion=False)
@app.command()
def hello(name: str = "x") -> None:
    print(name)
app()
"""


def best(cmd: list[str], repeats: int) -> float:
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        subprocess.run(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, check=False)
        times.append(time.perf_counter() - t0)
    return min(times)


def main(repeats: int) -> None:
    py = sys.executable
    kplan = [py, "-m", "planner"]
    teaching = str(ROOT / "planner" / "data" / "scenarios" / "teaching.toml")
    with tempfile.TemporaryDirectory() as tmp:
        bare = Path(tmp) / "bare.py"
        bare.write_text(BARE_TYPER, encoding="utf-8")
        recipe = Path(tmp) / "even.csv"
        subprocess.run(
            [*kplan, "demo", "--out", tmp], stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, check=True
        )
        recipe = Path(tmp) / "recipe-even.csv"
        base_typer = best([py, str(bare), "--help"], repeats)
        base_numpy = best([py, "-c", "import numpy"], repeats)
        rows = [
            ("kplan --help", [*kplan, "--help"], 0.3),
            ("kplan check", [*kplan, "check", teaching], 0.6),
            ("kplan assess", [*kplan, "assess", teaching, str(recipe)], 1.0),
            ("kplan design", [*kplan, "design", teaching], 1.0),
        ]
        print(
            f"baselines: bare typer app --help {base_typer:.3f} s; python -c 'import numpy' "
            f"{base_numpy:.3f} s"
        )
        print(f"{'command':<14} {'s':>6} {'goal':>5} {'× typer':>8} {'× numpy':>8}")
        for name, cmd, goal in rows:
            t = best(cmd, repeats)
            print(
                f"{name:<14} {t:>6.3f} {goal:>5.1f} {t / base_typer:>8.1f} {t / base_numpy:>8.1f}"
                + ("" if t <= goal else "   over the goal")
            )


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=5)
    main(parser.parse_args().repeats)
