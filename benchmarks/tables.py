"""What the one table reader's rules cost: a class's results file and key read by kplan, against what a
competent user would write for the same file with the standard library (``csv.reader`` and ``float``,
no line numbers, no guard, no checks), measured in the same run.

Files: a results file (student, tube, absorbance) and a key (student, name, section, tube, three stocks,
absorbance, band_low, band_high) for 2000 students × 8 tubes (16 000 rows, within the limits), written by
kplan's own writer (so ids that look like formulas are guarded).

Run: ``python benchmarks/tables.py [--students 2000] [--repeats 5]``
"""

from __future__ import annotations

import argparse
import csv
import io
import time
from importlib import resources

from planner.inputs.gradebook import parse_key_csv, parse_results_csv
from planner.inputs.plan import parse_plan_text
from planner.inputs.tables import write_csv


def files(students: int, tubes: int = 8) -> tuple[str, str]:
    ids = [("@" if k % 7 == 0 else "s") + f"{k:04d}" for k in range(students)]  # some need the guard
    results = write_csv(
        ["student", "tube", "absorbance"],
        ([sid, f"T{t + 1}", f"{0.1 + 0.1 * t:.4f}"] for sid in ids for t in range(tubes)),
    )
    key = write_csv(
        ["student", "name", "section", "tube", "CU", "DY", "BG", "absorbance", "band_low", "band_high"],
        (
            [
                sid,
                f"Student {sid}",
                "A",
                f"T{t + 1}",
                "1.0000",
                f"{0.5 * (t + 1):.4f}",
                f"{9 - 0.5 * (t + 1):.4f}",
            ]
            + [f"{0.1 + 0.1 * t:.4f}", f"{0.08 + 0.1 * t:.4f}", f"{0.12 + 0.1 * t:.4f}"]
            for sid in ids
            for t in range(tubes)
        ),
    )
    return results, key


def plain_results(text: str) -> dict[str, dict[str, float]]:
    """The fair baseline: the standard library's reader and float(), nothing else."""
    rows = csv.reader(io.StringIO(text))
    next(rows)
    out: dict[str, dict[str, float]] = {}
    for sid, tube, a in rows:
        out.setdefault(sid, {})[tube] = float(a)
    return out


def best(fn, repeats: int) -> float:
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return min(times)


def main(students: int, repeats: int) -> None:
    plan = parse_plan_text(resources.files("planner.data").joinpath("scenarios", "teaching.toml").read_text())
    results, key = files(students)
    t_plain = best(lambda: plain_results(results), repeats)
    t_results = best(lambda: parse_results_csv(results), repeats)
    t_key = best(lambda: parse_key_csv(key, plan), repeats)
    rows = results.count("\n") - 1
    print(f"{students} students, {rows} rows")
    print(f"  results, csv.reader + float (baseline): {t_plain * 1e3:8.1f} ms")
    print(
        f"  results, kplan's reader:                {t_results * 1e3:8.1f} ms  (×{t_results / t_plain:.1f})"
    )
    print(f"  key, kplan's reader (checked recipes):  {t_key * 1e3:8.1f} ms  (×{t_key / t_plain:.1f})")


if __name__ == "__main__":
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--students", type=int, default=2000)
    ap.add_argument("--repeats", type=int, default=5)
    a = ap.parse_args()
    main(a.students, a.repeats)
