"""Benchmark of planner.inference.approximate and exchange on a tube-design-sized problem, against textbook
baselines run here.

Problem: a 1:1 complex, 6 parameters (log10 K, ε_ML, ε_L, blank, metal and ligand stock factors with
a 1 % prior), 20,000 candidate tubes (100 metal × 200 ligand concentrations), 9 prior nodes over
two decades of K, 20 or 30 tubes.

Baselines, measured in the same run (so the ratios do not depend on the machine):
* approximate: the plain multiplicative algorithm (Silvey, Titterington & Torsney 1978) on all
  candidates for a fixed number of iterations;
* exact: the same exchange as ``exact_design`` but searching all candidates from every start
  (no reduced pool).

Run: ``python benchmarks/optimal_algorithms.py``.
"""

from __future__ import annotations

import time

import numpy as np

from planner.inference import design_criteria, exchange
from planner.inference.approximate import approximate_design
from planner.inference.exchange import exact_design

SIGMA_A = 0.003  # absorbance noise, for whitening


def absorbance(theta, metal_M, ligand_M):
    """A = blank + ε_L [L] + ε_ML [ML] (1 cm), 1:1 equilibrium by the cancellation-free root."""
    log10K, eps_ML, eps_L, blank, s_M, s_L = theta
    K = 10.0**log10K
    M0, L0 = s_M * metal_M, s_L * ligand_M
    s = M0 + L0 + 1.0 / K
    disc = (M0 - L0) ** 2 + (2.0 * (M0 + L0) + 1.0 / K) / K
    ML = 2.0 * M0 * L0 / (s + np.sqrt(disc))
    return blank + eps_L * (L0 - ML) + eps_ML * ML


def jacobian_rows(metal_M, ligand_M, log10K):
    """Whitened Jacobian rows (C, 1, 6) by central differences."""
    theta = np.array([log10K, 5000.0, 50.0, 0.0, 1.0, 1.0])
    cols = []
    for j in range(theta.size):
        h = 1e-6 * max(1.0, abs(theta[j]))
        up, down = theta.copy(), theta.copy()
        up[j] += h
        down[j] -= h
        cols.append((absorbance(up, metal_M, ligand_M) - absorbance(down, metal_M, ligand_M)) / (2 * h))
    return (np.stack(cols, axis=-1) / SIGMA_A)[:, None, :]


def problem(G=9):
    m, lig = np.meshgrid(np.linspace(5e-5, 1e-3, 100), np.logspace(-5, -1.5, 200), indexing="ij")
    nodes = 3.0 + np.linspace(-1.0, 1.0, G) if G > 1 else np.array([3.0])
    F = np.stack([jacobian_rows(m.ravel(), lig.ravel(), k) for k in nodes])
    M0 = np.zeros((6, 6))
    M0[4, 4] = M0[5, 5] = 1.0 / 0.01**2
    return F, M0


def best_of(fn, repeat=3):
    times, out = [], None
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t0)
    return min(times), out


def multiplicative_baseline(F, M0, n, criterion, target, iterations):
    prob = design_criteria.problem_of(F, criterion, target, M0, None, float(n), True)
    rho = 1.0 if criterion == "all" else 0.5
    idx = np.arange(prob.C)
    w = np.full(prob.C, 1.0 / prob.C)
    for _ in range(iterations):
        Linv, _ = design_criteria.factor(design_criteria.moment(prob, n * w, idx))
        d = design_criteria.sensitivities(prob, Linv)
        w = w * (d / (w @ d)) ** rho
        w /= w.sum()
    Linv, _ = design_criteria.factor(design_criteria.moment(prob, n * w, idx))
    d = design_criteria.sensitivities(prob, Linv)
    return (d.max() - w @ d) / prob.k


def full_pool_baseline(F, M0, n, criterion, target, approx, seed, starts):
    prob = design_criteria.problem_of(F, criterion, target, M0, None, float(n), True)
    rng = np.random.default_rng(seed)
    best = None
    for s in range(starts):
        x0 = (
            exchange.efficient_rounding(approx.weights, n)
            if s == 0
            else np.bincount(rng.integers(0, prob.C, size=n), minlength=prob.C).astype(np.int64)
        )
        st = exchange._exchange(prob, x0, 100 * n)
        best = st if best is None or st.loss < best.loss else best
    return best


def run_case(F, M0, criterion, target, n, iters=200):
    k = F.shape[3] if criterion == "all" else 1
    t_ours, ad = best_of(lambda: approximate_design(F, criterion=criterion, target=target, M0=M0, n_tubes=n))
    t_base, gap_base = best_of(lambda: multiplicative_baseline(F, M0, n, criterion, target, iters), repeat=1)
    print(
        f"[{criterion:6s} n={n}] approximate: {t_ours * 1e3:7.1f} ms, gap "
        f"{(ad.max_sensitivity - ad.bound) / k:.1e}"
        f" | multiplicative x{iters}: {t_base * 1e3:7.1f} ms, gap {gap_base:.1e}"
        f" | time ratio baseline/ours {t_base / t_ours:5.1f}"
    )
    t_ex, ex = best_of(
        lambda: exact_design(
            F, n, criterion=criterion, target=target, M0=M0, rng=np.random.default_rng(1), approx=ad
        )
    )
    t_full, st = best_of(lambda: full_pool_baseline(F, M0, n, criterion, target, ad, 1, 8), repeat=1)
    prob = design_criteria.problem_of(F, criterion, target, M0, None, float(n), True)
    sup = np.flatnonzero(ad.weights)
    Linv, logdet = design_criteria.factor(design_criteria.moment(prob, n * ad.weights[sup], sup))
    eff_full = float(np.exp((design_criteria.loss_of(prob, Linv, logdet) - st.loss) / prob.k))
    print(
        f"[{criterion:6s} n={n}] exact:       {t_ex * 1e3:7.1f} ms, efficiency {ex.efficiency:.5f}"
        f" | full-pool exchange: {t_full * 1e3:7.1f} ms, efficiency {eff_full:.5f}"
        f" | time ratio baseline/ours {t_full / t_ex:5.1f}"
    )


def main():
    F, M0 = problem()
    print(f"candidates {F.shape[1]}, prior nodes {F.shape[0]}, parameters {F.shape[3]}")
    for criterion, target in (("all", None), ("target", 0)):
        for n in (20, 30):
            run_case(F, M0, criterion, target, n)
    F1 = F[F.shape[0] // 2][None]
    print(f"local design (one node), candidates {F1.shape[1]}")
    for criterion, target in (("all", None), ("target", 0)):
        run_case(F1, M0, criterion, target, 30)


if __name__ == "__main__":
    main()
