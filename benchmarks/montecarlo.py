"""Benchmark: batched Levenberg–Marquardt (planner.inference.lm.fit_many) against a fair batched baseline.

Scenario: 10,000 simulated 8-tube 1:1 titrations (metal total fixed at 1e-4 M, ligand totals
log-spaced across the binding curve, K = 1e4 M⁻¹, ε(ML) = 5000 L mol⁻¹ cm⁻¹, path 1 cm), parameters
(log10 K, ε). Two problems: "easy" (photometric sd 0.003, start log K −0.4 and ε −20 %: what a Monte Carlo
assessment fits) and "hard" (sd 0.01, start log K −2 and ε +140 %: steps overshoot, damping needed).

Printed first, the fair baseline: what a competent user writes, a ~30-line batched numpy
Levenberg–Marquardt (normal equations, Marquardt's λ ×10 / ÷10, only the unfinished trials evaluated,
stopping when χ² falls by less than 1e-10 relative). ``fit_many`` runs with the same relative χ²
tolerance (ftol = 1e-10) and ``rowwise=True`` (it too evaluates only the running trials); it also returns
covariances, status codes and bound handling. The ratio baseline / fit_many is printed for each problem
(goal: ≥ 1.5 on the easy problem, ≥ 1 on the hard one; issue 25), with the largest |Δ log10 K| against
the baseline and, at the default tolerances, between fit_many's fast path and its trust-region path
alone (goal ≤ 1e-8). Last, the naive loop: ``scipy.optimize.least_squares(method="lm")`` one fit at a
time on ``--baseline`` trials.

Run:  python benchmarks/montecarlo.py [--trials 10000] [--baseline 200] [--seed 1] [--repeats 5]
Timings are the best of ``--repeats`` interleaved runs on each side, so a busy machine distorts the
ratio less.
"""

from __future__ import annotations

import argparse
import time

import numpy as np
from scipy.optimize import least_squares

from planner.inference import lm
from planner.inference.lm import fit_many

try:  # the project's cancellation-free 1:1 solver, when present
    from planner.model.closed_forms import one_to_one
except ImportError:  # pragma: no cover - early in the project's life

    def one_to_one(M_tot_M, L_tot_M, K):
        """Exact [ML] of a 1:1 complex, cancellation-free root of K(M0−c)(L0−c) = c."""
        m0, l0, k = np.asarray(M_tot_M), np.asarray(L_tot_M), np.asarray(K)
        s = m0 + l0 + 1.0 / k
        disc = (m0 - l0) ** 2 + (2.0 * (m0 + l0) + 1.0 / k) / k
        return 2.0 * m0 * l0 / (s + np.sqrt(disc))


M_TOT_M = 1e-4
L_TOT_M = np.geomspace(1e-5, 3e-3, 8)  # K·L0 from 0.1 to 30: across the binding curve
LOG_K_TRUE = 4.0
EPSILON_TRUE_M_CM = 5000.0
PATH_CM = 1.0
SD_ABS = 0.003
THETA_START = np.array([3.6, 4000.0])  # deliberately off: log K −0.4, ε −20 %
PROBLEMS = {  # name: (start, photometric sd)
    "easy": (THETA_START, SD_ABS),
    "hard": (np.array([2.0, 12000.0]), 0.01),
}
BASELINE_TOL = 1e-10  # the baseline's relative χ² tolerance; fit_many gets the same ftol


def absorbance(theta):
    """A (T, 8) for parameters theta (T, 2) = (log10 K, ε / L mol⁻¹ cm⁻¹)."""
    k = 10.0 ** theta[:, :1]
    return theta[:, 1:2] * PATH_CM * one_to_one(M_TOT_M, L_TOT_M, k)


def absorbance_jac(theta):
    """∂A/∂(log10 K, ε), (T, 8, 2); d[ML]/dK from implicit differentiation of K(M0−c)(L0−c) = c."""
    k = 10.0 ** theta[:, :1]
    c = one_to_one(M_TOT_M, L_TOT_M, k)
    m_free, l_free = M_TOT_M - c, L_TOT_M - c
    dc_dk = m_free * l_free / (1.0 + k * (m_free + l_free))
    d_logk = theta[:, 1:2] * PATH_CM * dc_dk * k * np.log(10.0)
    return np.stack([d_logk, PATH_CM * c], axis=-1)


def plain_batched_lm(f, jac, theta0, y, sd, max_iter: int = 100, tol: float = 1e-10):
    """The fair baseline: textbook batched Levenberg–Marquardt on the normal equations (Marquardt 1963),
    λ ÷10 on an accepted step and ×10 on a rejected one; only the unfinished trials are evaluated."""
    T, P = y.shape[0], theta0.size
    theta = np.broadcast_to(theta0, (T, P)).astype(float).copy()
    lam = np.full(T, 1e-3)
    r = (f(theta) - y) / sd
    chi2 = np.sum(r * r, axis=1)
    act = np.arange(T)
    eye = np.eye(P)
    for _ in range(max_iter):
        th, ra = theta[act], r[act]
        J = jac(th) / sd  # (t, N, P)
        A = np.einsum("tnp,tnq->tpq", J, J)
        g = np.einsum("tnp,tn->tp", J, ra)
        damp = lam[act, None, None] * np.einsum("tpp->tp", A)[:, :, None] * eye
        step = -np.linalg.solve(A + damp, g[..., None])[..., 0]
        trial = th + step
        r_new = (f(trial) - y[act]) / sd
        chi2_new = np.sum(r_new * r_new, axis=1)
        better = np.isfinite(chi2_new) & (chi2_new < chi2[act])
        done = better & (
            (chi2[act] - chi2_new <= tol * chi2_new)
            | (np.max(np.abs(step) / (np.abs(th) + 1e-12), axis=1) < tol)
        )
        ok = act[better]
        theta[ok], r[ok], chi2[ok] = trial[better], r_new[better], chi2_new[better]
        lam[act] = np.where(better, lam[act] / 10.0, lam[act] * 10.0)
        act = act[~done & (lam[act] < 1e12)]
        if act.size == 0:
            break
    return theta


def timed(runs: dict, repeats: int) -> dict:
    """Best time and last result of each callable, the runs interleaved so that load hits all alike."""
    best: dict = {}
    for _ in range(repeats):
        for name, fn in runs.items():
            t0 = time.perf_counter()
            out = fn()
            t = time.perf_counter() - t0
            if name not in best or t < best[name][0]:
                best[name] = (t, out)
    return best


def fast_vs_trust_region(start, a_obs, sd) -> float:
    """Largest |Δ log10 K| between fit_many's fast path and its trust-region path alone (default tol)."""
    kw = dict(jac=absorbance_jac, sigma=np.full(L_TOT_M.size, sd), rowwise=True)
    fast = fit_many(absorbance, start, a_obs, **kw)
    lm._FAST_PATH = False
    try:
        slow = fit_many(absorbance, start, a_obs, **kw)
    finally:
        lm._FAST_PATH = True
    both = fast.converged & slow.converged
    return float(np.max(np.abs(fast.theta[both, 0] - slow.theta[both, 0])))


def compare(name: str, start, sd, n_trials: int, rng, repeats: int):
    truth = np.array([[LOG_K_TRUE, EPSILON_TRUE_M_CM]])
    a_obs = absorbance(truth) + sd * rng.standard_normal((n_trials, L_TOT_M.size))
    tol = dict(xtol=1e-10, ftol=BASELINE_TOL, gtol=1e-10)
    kw = dict(jac=absorbance_jac, sigma=np.full(L_TOT_M.size, sd), rowwise=True, **tol)
    fit_many(absorbance, start, a_obs[:10], **kw)  # warm-up: first-call costs are not timed
    best = timed(
        {
            "plain": lambda: plain_batched_lm(absorbance, absorbance_jac, start, a_obs, sd, tol=BASELINE_TOL),
            "fit_many": lambda: fit_many(absorbance, start, a_obs, **kw),
        },
        repeats,
    )
    (t_plain, plain), (t_batch, batch) = best["plain"], best["fit_many"]
    both = batch.converged & np.all(np.isfinite(plain), axis=1)
    d_plain = float(np.max(np.abs(batch.theta[both, 0] - plain[both, 0])))
    print(
        f"[{name}] plain batched numpy LM (fair baseline): {n_trials} fits in {t_plain:.3f} s "
        f"({t_plain / n_trials * 1e6:.1f} us/fit)"
    )
    print(
        f"[{name}] fit_many: {t_batch:.3f} s ({t_batch / n_trials * 1e6:.1f} us/fit; "
        f"{batch.converged.mean():.2%} converged, median {np.median(batch.n_iter):.0f} steps, "
        f"max {batch.n_iter.max()})"
    )
    print(
        f"[{name}] ratio plain / fit_many: {t_plain / t_batch:.2f}x; max |Δ log10 K| vs plain {d_plain:.1e}; "
        f"fast path vs trust region alone {fast_vs_trust_region(start, a_obs, sd):.1e}"
    )
    return a_obs, batch, t_batch


def main(n_trials: int, n_baseline: int, seed: int, repeats: int) -> None:
    rng = np.random.default_rng(seed)
    out = {name: compare(name, start, sd, n_trials, rng, repeats) for name, (start, sd) in PROBLEMS.items()}
    a_obs, batch, t_batch = out["easy"]
    tol = dict(xtol=1e-10, ftol=1e-12, gtol=1e-10)

    def one(a_row):
        return least_squares(
            lambda th: (absorbance(th[None])[0] - a_row) / SD_ABS,
            THETA_START,
            jac=lambda th: absorbance_jac(th[None])[0] / SD_ABS,
            method="lm",
            **tol,
        )

    one(a_obs[0])
    t_ref = np.inf
    for _ in range(repeats):
        t0 = time.perf_counter()
        ref = [one(a_obs[i]) for i in range(n_baseline)]  # the naive loop: one fit per call
        t_ref = min(t_ref, time.perf_counter() - t0)
    ref_logk = np.array([r.x[0] for r in ref])
    ref_ok = np.array([r.status > 0 for r in ref])
    common = batch.converged[:n_baseline] & ref_ok
    max_dlogk = float(np.max(np.abs(batch.theta[:n_baseline, 0] - ref_logk)[common]))
    per_batch, per_ref = t_batch / n_trials, t_ref / n_baseline
    print(
        f"naive loop, scipy least_squares(lm) one fit at a time: {per_ref * 1e6:.1f} us/fit "
        f"({ref_ok.mean():.2%} converged); scipy / fit_many {per_ref / per_batch:.1f}x; "
        f"max |Δ log10 K| {max_dlogk:.1e} on {int(common.sum())} fits"
    )
    print(
        f"MC sd of log10 K (easy): {batch.theta[batch.converged, 0].std(ddof=1):.4f}; "
        f"median asymptotic se: {np.median(batch.se[batch.converged, 0]):.4f}"
    )


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--trials", type=int, default=10_000)
    parser.add_argument("--baseline", type=int, default=200)
    parser.add_argument("--seed", type=int, default=1)
    parser.add_argument("--repeats", type=int, default=5, help="timings are the best of this many runs")
    args = parser.parse_args()
    main(args.trials, args.baseline, args.seed, args.repeats)
