"""Design time on every shipped plan, against `assess` of the result, and the model check's exchange
against a plain batched one, all in one run.

For each example and scenario (titrations aside): the CPU time of ``design`` (the job, after imports),
the CPU time of ``assess`` of the designed recipe with the default 2000 Monte-Carlo trials, and their
ratio (issue 25's goal: ≤ 2). Then the model check's move scoring: for the guarded exchange, every move
of one tube of the design to every candidate must be scored; the fair baseline is what a competent user
would write in numpy — one batched ``np.linalg.solve`` of the (C, P, P) information matrices per support
point, as the model check did before — against the rank-one (Sherman–Morrison) updates it uses now. Both
score the same moves; the script checks that they agree.

Before this change (same machine, same plans, design CPU seconds): cuvette-1to1 1.90, proton-competition
2.24, stepwise-weak 0.50, proton 1.78, stepwise 1.88, teaching 0.78 — the model check's 400-trial power
simulation of two designs per alternative and the batched-solve exchange were most of it.

Run: python benchmarks/design_vs_assess.py
"""

from __future__ import annotations

import time
from pathlib import Path

import numpy as np

from planner.inference.guard import _moves_from, _State, column_ridge
from planner.inputs.plan import load_plan
from planner.jobs.compile import compile_study
from planner.jobs.plan.assess import assess_study
from planner.jobs.plan.design import design_study

ROOT = Path(__file__).resolve().parents[1]
PLANS = [
    *sorted((ROOT / "examples").glob("*.toml")),
    *sorted((ROOT / "planner" / "data" / "scenarios").glob("*.toml")),
]


def cpu(f):
    t0 = time.process_time()
    out = f()
    return out, time.process_time() - t0


def design_against_assess() -> None:
    print(f"{'plan':<22} {'design s':>9} {'assess s':>9} {'ratio':>6}  model check")
    for path in PLANS:
        plan = load_plan(path)
        if plan.titration is not None:
            continue
        study = compile_study(plan)
        d, t_design = cpu(lambda s=study: design_study(s, seed=0))
        _, t_assess = cpu(lambda s=study, r=d.recipe: assess_study(s, r))
        mc = d.model_check
        what = "none" if mc is None else ("guarded design" if mc.replaced else "target-only design stands")
        print(f"{path.stem:<22} {t_design:9.2f} {t_assess:9.2f} {t_design / t_assess:6.2f}  {what}")


def batched_solve_scores(F, R, base, x, t):
    """The baseline: for each support point, the (C, P, P) matrices after the move, solved in one batch."""
    FF = np.einsum("cp,cq->cpq", F, F)
    M = base + np.tensordot(x.astype(float), FF, axes=1)
    b = (R * x) @ F
    s = (R**2) @ x
    out = []
    for i in np.flatnonzero(x):
        Mc = (M - FF[i])[None] + FF
        bc = (b - R[:, i, None] * F[i])[None] + np.swapaxes(R[:, :, None] * F[None], 0, 1)
        sc = (s - R[:, i] ** 2)[None] + (R**2).T
        rhs = np.concatenate(
            [
                np.broadcast_to(np.eye(F.shape[1])[t][None, :, None], (F.shape[0], F.shape[1], 1)),
                np.swapaxes(bc, 1, 2),
            ],
            axis=2,
        )
        sol = np.linalg.solve(Mc, rhs)
        var = sol[:, t, 0]
        lam = sc - np.einsum("cap,cpa->ca", bc, sol[:, :, 1:])
        out.append((var, lam))
    return out


def move_scoring(C: int = 5000, P: int = 8, A: int = 2, n: int = 8, repeats: int = 5) -> None:
    rng = np.random.default_rng(0)
    F = rng.standard_normal((C, P))
    R = rng.standard_normal((A, C))
    x = np.zeros(C, dtype=int)
    x[rng.choice(C, n, replace=False)] = 1
    base = column_ridge(F) + np.eye(P)  # a unit prior on the nuisance columns, as the design has
    t = 0
    t_base = min(cpu(lambda: batched_solve_scores(F, R, base, x, t))[1] for _ in range(repeats))
    st = _State(F, R, base, x)
    t_ours = min(
        cpu(lambda: [_moves_from(st, F, R, i, t) for i in np.flatnonzero(x)])[1] for _ in range(repeats)
    )
    ref = batched_solve_scores(F, R, base, x, t)
    ours = [_moves_from(st, F, R, i, t) for i in np.flatnonzero(x)]
    err = max(float(np.max(np.abs(a[0] - b[0]) / np.abs(a[0]))) for a, b in zip(ref, ours, strict=True))
    print(
        f"move scoring, {C} candidates × {n} support points, P = {P}: batched solves "
        f"{t_base * 1e3:.0f} ms, rank-one updates {t_ours * 1e3:.0f} ms — ×{t_base / t_ours:.1f} (largest "
        f"relative difference of the variances {err:.1e})"
    )


if __name__ == "__main__":
    move_scoring()
    design_against_assess()
