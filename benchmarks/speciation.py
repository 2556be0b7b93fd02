"""Speed of planner.model.speciation.speciate against plain per-tube scipy root finding, measured in one run.

System: M + L with ML (log beta1 = 4) and ML2 (log beta2 = 7); totals log-uniform over 1e-7..1e-1 M,
seeded. The vectorised solver does 1e6 tubes; the baselines loop over the first 1e3 tubes:

* ``scipy.optimize.root`` (MINPACK hybrd) on the two mass balances in (ln[M], ln[L]), written as log
  ratios ln(computed/given total) so the default tolerance means a relative accuracy;
* ``scipy.optimize.brentq`` on the one-dimensional free-ligand balance (possible here because every
  species has p <= 1, so [M] = M_tot / (1 + beta1 [L] + beta2 [L]^2)), a stricter baseline;
* the fair baseline, what a competent user writes: a vectorised numpy bisection on ln[L] of that same
  one-dimensional balance, over all 1e6 tubes at once (about 20 lines, no per-tube loop).

Prints time per tube for each, the ratios, and the largest relative difference of [ML] and [ML2]
between the solver and each baseline. Run: ``python benchmarks/speciation.py [--tubes N]``.
"""

from __future__ import annotations

import argparse
import math
import time

import numpy as np
from scipy import optimize

from planner.model.speciation import speciate

STOICH = np.array([[1, 1], [1, 2]])
LOG_BETA = np.array([4.0, 7.0])


def totals(n_tubes: int, rng: np.random.Generator):
    M = 10.0 ** rng.uniform(-7.0, -1.0, n_tubes)
    L = 10.0 ** rng.uniform(-7.0, -1.0, n_tubes)
    return M, L


def _lse(*terms: float) -> float:
    top = max(terms)
    return top + math.log(sum(math.exp(t - top) for t in terms))


def species_root(M: float, L: float) -> np.ndarray:
    b1, b2 = 10.0**LOG_BETA
    lb1, lb2 = LOG_BETA * math.log(10.0)
    lnM, lnL, ln2 = math.log(M), math.log(L), math.log(2.0)

    def resid(u):
        x, y = float(u[0]), float(u[1])
        # log-sum-exp keeps trial points far from the root finite
        return [
            _lse(x, lb1 + x + y, lb2 + x + 2.0 * y) - lnM,
            _lse(y, lb1 + x + y, ln2 + lb2 + x + 2.0 * y) - lnL,
        ]

    sol = optimize.root(resid, [math.log(M), math.log(L)], method="hybr", options={"xtol": 1e-13})
    m, lf = math.exp(sol.x[0]), math.exp(sol.x[1])
    return np.array([b1 * m * lf, b2 * m * lf * lf])


def species_brentq(M: float, L: float) -> np.ndarray:
    b1, b2 = 10.0**LOG_BETA

    def h(lnl):
        lf = math.exp(lnl)
        m = M / (1.0 + b1 * lf + b2 * lf * lf)
        return lf + b1 * m * lf + 2.0 * b2 * m * lf * lf - L

    lnl = optimize.brentq(h, math.log(L) - 60.0, math.log(L), xtol=1e-14, rtol=1e-15)
    lf = math.exp(lnl)
    m = M / (1.0 + b1 * lf + b2 * lf * lf)
    return np.array([b1 * m * lf, b2 * m * lf * lf])


def species_bisection(M: np.ndarray, L: np.ndarray, tol: float = 1e-14) -> np.ndarray:
    """Vectorised bisection on ln[L] of the free-ligand balance (every species has p <= 1 here)."""
    b1, b2 = 10.0**LOG_BETA
    lo = np.log(L) - 60.0  # h(lo) < 0: almost no free ligand
    hi = np.log(L)  # h(hi) >= 0: all ligand free
    for _ in range(200):  # 60 / 2^k < tol after ~53 halvings
        mid = 0.5 * (lo + hi)
        lf = np.exp(mid)
        m = M / (1.0 + b1 * lf + b2 * lf * lf)
        h = lf + b1 * m * lf + 2.0 * b2 * m * lf * lf - L
        neg = h < 0
        lo = np.where(neg, mid, lo)
        hi = np.where(neg, hi, mid)
        if np.max(hi - lo) < tol:
            break
    lf = np.exp(0.5 * (lo + hi))
    m = M / (1.0 + b1 * lf + b2 * lf * lf)
    return np.stack([b1 * m * lf, b2 * m * lf * lf], axis=-1)


def best_time(fn, repeats: int) -> float:
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return min(times)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--tubes", type=int, default=1_000_000)
    parser.add_argument("--baseline-tubes", type=int, default=1_000)
    parser.add_argument("--repeats", type=int, default=3)
    args = parser.parse_args()

    rng = np.random.default_rng(20240611)
    M, L = totals(args.tubes, rng)
    nb = min(args.baseline_tubes, args.tubes)

    speciate(M[:1000], L[:1000], STOICH, LOG_BETA)  # warm-up (imports, caches)
    result = {}

    def run_vectorised():
        result["spec"] = speciate(M, L, STOICH, LOG_BETA)

    t_vec = best_time(run_vectorised, args.repeats)
    ours = result["spec"].species_M[:nb]

    def run_root():
        result["root"] = np.array([species_root(M[i], L[i]) for i in range(nb)])

    def run_brentq():
        result["brentq"] = np.array([species_brentq(M[i], L[i]) for i in range(nb)])

    def run_bisection():
        result["bisection"] = species_bisection(M, L)

    # every timing is the best of the same number of repeats, measured in this run
    t_bis = best_time(run_bisection, args.repeats)
    t_root = best_time(run_root, args.repeats)
    t_brentq = best_time(run_brentq, args.repeats)
    ref_root, ref_brentq = result["root"], result["brentq"]

    per_vec = t_vec / args.tubes
    per_root = t_root / nb
    per_brentq = t_brentq / nb
    print(
        f"speciate, {args.tubes} tubes: {t_vec:.3f} s total, {per_vec * 1e6:.3f} us per tube "
        f"(best of {args.repeats})"
    )
    per_bis = t_bis / args.tubes
    print(
        f"fair baseline, vectorised numpy bisection, {args.tubes} tubes: {per_bis * 1e6:.3f} us per tube; "
        f"speed-up {per_bis / per_vec:.1f}x"
    )
    print("naive baselines (per-tube Python loops):")
    print(
        f"scipy.optimize.root loop, {nb} tubes: {per_root * 1e6:.1f} us per tube (best of {args.repeats}); "
        f"speed-up {per_root / per_vec:.0f}x"
    )
    print(
        f"scipy.optimize.brentq loop, {nb} tubes: {per_brentq * 1e6:.1f} us per tube (best of "
        f"{args.repeats}); "
        f"speed-up {per_brentq / per_vec:.0f}x"
    )
    for name, ref in (("bisection", result["bisection"][:nb]), ("root", ref_root), ("brentq", ref_brentq)):
        rel = np.max(np.abs(ours - ref) / np.maximum(ref, 1e-300))
        print(f"max relative difference of [ML], [ML2] vs {name}: {rel:.2e}")


if __name__ == "__main__":
    main()
