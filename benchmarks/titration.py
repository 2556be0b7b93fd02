"""Design of an in-cuvette titration schedule: time, and the designed schedule's SE against equal aliquots.

Scenario: ``examples/titration-cuvette.toml`` (invented), with 12 and 20 additions. Prints the time of
``design_titration``, the schedules tried, and SE(log β) of the designed schedule and of the usual
equal-aliquot schedule of the same number of additions, with their ratio (goal: a 20-addition design
in ≤ 5 s).

Run: ``python benchmarks/titration.py``
"""

from __future__ import annotations

import time
from pathlib import Path

from planner.inputs.plan import load_plan
from planner.jobs.compile import compile_study
from planner.jobs.titration.titrate import design_titration

EXAMPLE = Path(__file__).resolve().parents[1] / "examples" / "titration-cuvette.toml"


def main() -> None:
    study = compile_study(load_plan(EXAMPLE))
    for n in (12, 20):
        t0 = time.perf_counter()
        d = design_titration(study, additions=n)
        dt = time.perf_counter() - t0
        print(
            f"{n} additions: designed in {dt:.2f} s ({d.candidates} schedules tried, {d.feasible} feasible); "
            f"SE {d.se_target:.4f} vs equal aliquots {d.se_equal:.4f}: ratio {d.se_equal_over_design:.2f}; "
            f"aliquots {', '.join(f'{v * 1000:.0f}' for v in d.schedule.aliquot_mL)} µL"
        )


if __name__ == "__main__":
    main()
