"""Memory and time of ``kplan design`` as stocks are added (issue 22: no full product of the grids).

The plan is ``examples/six-stocks.toml`` (metal, dilute metal, ligand, buffer, salt, diluent); for the
growth series, more ligand stocks (Dy at other concentrations) are added to it one at a time, up to 11
stocks. Each design runs in a fresh interpreter (the model check off, so the design search alone is
measured); its peak resident memory comes from the operating system (``wait4``'s ru_maxrss).

Printed first, the baselines measured in the same run: the same interpreter importing the package and
compiling the plan (the floor a design cannot go below), and what listing the full product of the searched
stocks' grids would allocate (the candidate matrix alone, 8 bytes a volume: what the design did before).
Goals: peak memory ≤ 300 MiB for six stocks; time growing at most linearly with the number of stocks (the
CPU seconds each added stock costs stay about the same).

Run: ``python benchmarks/many_stocks.py [--max-stocks 11]``
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
SIX = ROOT / "examples" / "six-stocks.toml"

FLOOR = """
import sys
from planner.inputs.plan import load_plan
from planner.jobs.compile import compile_study
compile_study(load_plan(sys.argv[1]))
"""
DESIGN = """
import sys
from planner.inputs.plan import load_plan
from planner.jobs.plan.candidates import designed_stocks, grid_count, stock_levels
from planner.jobs.compile import compile_study
from planner.jobs.plan.design import design
plan = load_plan(sys.argv[1])
study = compile_study(plan)
chem, medium = designed_stocks(study)
g = study.bench
levels = [stock_levels(study, s, g.step_mL) for s in chem + medium]
room = g.room_mL - sum(g.fixed_mL.values())
print(len(chem) + len(medium), grid_count(levels, room, g.step_mL))
d = design(plan, seed=0, check_model=False)
print(d.se_target)
"""


def with_more_ligands(text: str, extra: int) -> str:
    """The six-stock plan with ``extra`` more ligand stocks (invented concentrations), on the burette."""
    ids = []
    block = ""
    for i in range(extra):
        sid = f"DY{i + 2}"
        ids.append(sid)
        conc = 3.0 * (i + 2)
        block += (
            f'[[stock]]\nid = "{sid}"\nlabel = "dye ligand Dy, {conc:g} mM"\nconc = {{ L = "{conc:g} mM" }}\n'
            f'ions = {{ "Na+" = "{conc:g} mM" }}\nconc_rsd = 0.01\non_hand = "200 mL"\n\n'
        )
    text = text.replace('[[stock]]\nid = "BG"', block + '[[stock]]\nid = "BG"', 1)
    return text.replace(
        'stocks = ["CU", "CUD", "DY"]', 'stocks = ["CU", "CUD", "DY"' + "".join(f', "{s}"' for s in ids) + "]"
    )


def run(code: str, plan: Path) -> tuple[float, float, str]:
    """(CPU seconds, peak RSS MiB, stdout) of ``code`` in a fresh interpreter (CPU time, user + system,
    so that other load on the machine distorts the growth less than wall time would)."""
    proc = subprocess.Popen([sys.executable, "-c", code, str(plan)], stdout=subprocess.PIPE, text=True)
    out = proc.stdout.read() if proc.stdout else ""
    _, status, usage = os.wait4(proc.pid, 0)
    proc.returncode = os.waitstatus_to_exitcode(status)
    if proc.returncode:
        raise SystemExit(f"{plan.name}: the design failed (exit {proc.returncode})")
    return usage.ru_utime + usage.ru_stime, usage.ru_maxrss / 1024.0, out


def main(max_stocks: int) -> None:
    t_floor, rss_floor, _ = run(FLOOR, SIX)
    print(f"floor: import and compile the six-stock plan: {t_floor:.2f} s CPU, peak {rss_floor:.0f} MiB")
    text = SIX.read_text(encoding="utf-8")
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        for n_stocks in range(6, max_stocks + 1):
            plan = Path(tmp) / f"plan{n_stocks}.toml"
            plan.write_text(with_more_ligands(text, n_stocks - 6), encoding="utf-8")
            t, rss, out = run(DESIGN, plan)
            lines = out.split()
            n_designed, count = int(lines[0]), int(lines[1])
            listed_gib = count * n_designed * 8 / 2**30
            rows.append((n_stocks, t, rss, listed_gib, float(lines[2])))
    print(f"{'stocks':>6} {'CPU s':>9} {'peak MiB':>9} {'× floor':>8} {'full grid would take':>22} {'SE':>8}")
    for n_stocks, t, rss, listed, se in rows:
        print(f"{n_stocks:>6} {t:>9.2f} {rss:>9.0f} {rss / rss_floor:>8.2f} {listed:>18.3g} GiB {se:>8.4f}")
    # linear growth: the time each added stock costs stays about the same along the series
    adds = [b[1] - a[1] for a, b in zip(rows, rows[1:], strict=False)]
    if adds:
        half = max(len(adds) // 2, 1)
        first, last = sum(adds[:half]) / half, sum(adds[-half:]) / half
        print(
            f"seconds per added stock: first half {first:.2f}, second half {last:.2f} "
            f"(ratio {last / first if first > 0 else float('nan'):.2f}; about 1 for linear growth, 2 or more "
            f"for quadratic)"
        )
    print(f"peak at 6 stocks {rows[0][2]:.0f} MiB (goal ≤ 300)")


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--max-stocks", type=int, default=11)
    main(parser.parse_args().max_stocks)
