"""Design benchmark: our exchange design against scipy's differential evolution, in one run.

Problem: an 8-tube robust design (criterion "target") for the built-in teaching scenario — two dispensed
stocks plus diluent on a 0.05 mL grid in a 10 mL tube — and the same with three dispensed stocks (a
second, concentrated ligand stock). The baseline optimises continuous volumes with
scipy.optimize.differential_evolution (vectorised objective), rounds them to the grid and scores them
with the same robust criterion. Prints both criterion values (mean over prior nodes of log(n·Var(log K)),
lower is better) and times. Goals: ours ≤ 2 s (≤ 10 s with three stocks) and a criterion at least as
good as the general optimiser's.

Run: python benchmarks/design.py
"""

from __future__ import annotations

import time
from importlib import resources

import numpy as np
from scipy.optimize import differential_evolution

from planner.inference.design_criteria import criterion_of_counts
from planner.inputs.plan import parse_plan_text
from planner.inputs.recipe import make_recipe
from planner.jobs.compile import compile_study
from planner.jobs.plan.candidates import Candidates, information_rows, range_mask
from planner.jobs.plan.design import design


def teaching_text() -> str:
    return resources.files("planner.data").joinpath("scenarios", "teaching.toml").read_text(encoding="utf-8")


def three_stock_text() -> str:
    text = teaching_text()
    extra = """
[[stock]]
id = "DYC"
label = "dye ligand Dy, 100 mM in 0.10 M KNO3"
conc = { L = "100 mM" }
ions = { "Na+" = "100 mM", "K+" = "0.10 M", "NO3-" = "0.10 M" }
conc_rsd = 0.01
on_hand = "100 mL"
"""
    text = text.replace('[[stock]]\nid = "BG"', extra.strip() + '\n\n[[stock]]\nid = "BG"')
    return text.replace('stocks = ["CU", "DY"]', 'stocks = ["CU", "DY", "DYC"]')


def score(plan, vols: np.ndarray, ids: tuple[str, ...]) -> np.ndarray:
    """Robust target criterion of many 8-tube designs at once; vols (designs, 8, d) mL."""
    D, n, d = vols.shape
    flat = vols.reshape(D * n, d)
    g = plan.glassware
    flat = np.round(np.round(flat / g.step_mL) * g.step_mL, 10)
    flat = np.where(flat < g.min_volume_mL, 0.0, flat)
    over = flat.sum(axis=1) > g.tube_volume_mL
    flat[over] *= g.tube_volume_mL / flat[over].sum(axis=1, keepdims=True) * 0.999
    flat = np.floor(flat / g.step_mL + 1e-9) * g.step_mL
    study = compile_study(plan)
    model, params = study.model, study.params
    rec = make_recipe(plan, {sid: flat[:, j] for j, sid in enumerate(ids)})
    cand = Candidates(rec, ids, rec.n_tubes, g.step_mL)
    nodes = study.nodes(True)
    F, M0, st, band = information_rows(study, cand, nodes, "target")
    # the same robust linear-range screen the design uses
    inside = range_mask(model, st, nodes.weights, band).reshape(D, n)
    outside = ~inside.all(axis=1)
    out = np.empty(D)
    for k in range(D):  # baseline only: the general optimiser's population
        counts = np.zeros(D * n, dtype=int)
        counts[k * n : (k + 1) * n] = 1
        try:
            out[k] = criterion_of_counts(
                F, counts, criterion="target", target=params.target, M0=M0, node_weights=nodes.weights
            )
        except Exception as exc:  # a degenerate design the criterion refuses
            print("criterion refused:", exc) if k == 0 and D == 1 else None
            out[k] = np.inf
    # graded penalty so the general optimiser can climb towards feasible designs
    lo, hi = model.linear_range
    dist = (np.maximum(lo - st.absorbance, 0) + np.maximum(st.absorbance - hi, 0)).max(axis=0).reshape(D, n)
    penalty = 100.0 + 100.0 * dist.sum(axis=1)
    return np.where(outside | ~np.isfinite(out), penalty, out)


def our_score(plan, d) -> float:
    ids = tuple(s for s in d.recipe.dispensed_ids(plan))
    return float(score(plan, np.stack([d.recipe.column(s) for s in ids], axis=1)[None], ids)[0])


def run(text: str, label: str, de_maxiter: int) -> None:
    plan = parse_plan_text(text)
    ids = tuple(s.id for s in plan.stock if not s.diluent)
    t0 = time.perf_counter()
    d = design(plan, seed=0)
    t_ours = time.perf_counter() - t0
    c_ours = our_score(plan, d)
    n, dd = plan.design.tubes, len(ids)
    bounds = [(0.0, plan.glassware.tube_volume_mL / dd)] * (n * dd)

    def f(x):  # vectorised: x is (n·d, S)
        v = np.asarray(x).T.reshape(-1, n, dd)
        return score(plan, v, ids)

    t0 = time.perf_counter()
    res = differential_evolution(
        f,
        bounds,
        maxiter=de_maxiter,
        popsize=10,
        seed=0,
        vectorized=True,
        updating="deferred",
        polish=False,
        tol=0,
        atol=-1,
    )
    t_de = time.perf_counter() - t0
    print(
        f"{label}: ours {t_ours:.2f} s, criterion {c_ours:.4f} | differential evolution {t_de:.2f} s, "
        f"criterion {float(res.fun):.4f} | time ratio DE/ours {t_de / t_ours:.1f}; "
        f"ours {'at least as good' if c_ours <= res.fun + 1e-9 else 'WORSE'}"
    )


if __name__ == "__main__":
    run(teaching_text(), "two dispensed stocks", de_maxiter=150)
    run(three_stock_text(), "three dispensed stocks", de_maxiter=150)
