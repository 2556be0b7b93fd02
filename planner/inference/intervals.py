"""Profile-likelihood intervals: the Δχ² crossings found by root-finding, batched over experiments.

The 95 % profile interval of one parameter ψ is the set where χ²(ψ, others refitted) − χ²_min ≤ 3.84
(Venzon & Moolgavkar 1988, Appl. Stat. 37:87). Its ends are roots of g(ψ) = Δχ²(ψ) − 3.84 on each side
of the estimate, found here by bracketing and the Illinois variant of regula falsi (Dowell & Jarratt 1971,
BIT 11:168), so the interval is right at any precision: a fixed grid with linear interpolation between
its points shrinks the interval when the grid is coarse against the SE. The search starts at the
quadratic prediction ψ̂ ± √3.84·SE and doubles outwards until Δχ² passes the threshold; a side where it
never does before the parameter's bound is open (the parameter is only bounded on the other side; Raue
et al. 2009, Bioinformatics 25:1923).

Every experiment and both sides are one batch: each evaluation of the profile is one call of
:func:`planner.inference.lm.fit_many` with the other parameters refitted from their nearest solution.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

from .lm import fit_many

CHI2_95_1DOF = 3.841458820694124  # source: χ²(1) 95 % quantile (scipy.stats.chi2.ppf(0.95, 1))
MAX_DOUBLINGS = 24  # the bracket grows to 2^24 × the quadratic half-width at most (then the bound)
MAX_ITER = 60
RTOL = 1e-6  # the crossing to within 1e-6 × SE


def profile_interval(
    f: Callable[[np.ndarray], np.ndarray],
    jac: Callable[[np.ndarray], np.ndarray],
    W,
    y,
    theta,
    t: int,
    *,
    se,
    chi2_min,
    lower,
    upper,
    threshold=CHI2_95_1DOF,
) -> tuple[np.ndarray, np.ndarray]:
    """Profile interval ends of parameter ``t`` for T experiments of the same tubes.

    Parameters
    ----------
    f, jac : the model on full parameter batches, (m, P) → (m, n) and (m, n, P); the same tubes for every
        experiment.
    W : the whitening, (n, n), a structured whitening, or one (T, n, n) per experiment.
    y : (T, n) or (n,) readings; theta : (T, P) or (P,) the estimates; chi2_min : (T,) their χ².
    se : (T,) standard error of parameter ``t`` (sets the first step).
    lower, upper : (P,) bounds of the parameters.
    threshold : (T,) or scalar Δχ² of the interval (3.84 for 95 %; × s² to widen it by s).

    Returns
    -------
    (low, high) : (T,) each, NaN on a side where Δχ² never reaches the threshold within the bounds.
    """
    theta = np.atleast_2d(np.asarray(theta, dtype=float))
    T, P = theta.shape
    y = np.broadcast_to(np.asarray(y, dtype=float), (T, np.shape(y)[-1]))
    lo_b, hi_b = np.asarray(lower, dtype=float), np.asarray(upper, dtype=float)
    prof = _Profile(f, jac, W, y, theta, t, lo_b, hi_b)
    thr = np.broadcast_to(np.asarray(threshold, dtype=float), (T,))
    base = np.broadcast_to(np.asarray(chi2_min, dtype=float), (T,))
    trial = np.tile(np.arange(T), 2)  # problem k: side -1 for k < T, +1 for k ≥ T
    side = np.repeat([-1.0, 1.0], T)
    centre = theta[trial, t]
    step = np.sqrt(thr[trial]) * np.maximum(np.asarray(se, dtype=float)[trial], 1e-12)
    step = np.where(np.isfinite(step), step, 1.0)
    edge = np.where(side < 0, lo_b[t], hi_b[t])

    def g(k, x, nuis):
        chi2, nu = prof.chi2(trial[k], x, nuis)
        return chi2 - base[trial[k]] - thr[trial[k]], nu

    inner = (centre.copy(), -thr[trial].copy(), prof.others_of(theta[trial]))
    inner, outer, found = _bracket(g, side, step, edge, inner)
    x = _illinois(g, inner, outer, found, tol=RTOL * step / np.sqrt(thr[trial]))
    x = np.where(found, x, np.nan)
    return x[:T], x[T:]


class _Profile:
    """χ² of each experiment with parameter t fixed at given values and the others refitted."""

    def __init__(self, f, jac, W, y, theta, t, lo, hi):
        self.f, self.jac, self.W, self.y, self.t = f, jac, W, y, t
        self.others = [p for p in range(theta.shape[1]) if p != t]
        self.P = theta.shape[1]
        self.lo, self.hi = lo, hi

    def others_of(self, th: np.ndarray) -> np.ndarray:
        return th[:, self.others].copy()

    def _full(self, x, nuis):
        th = np.empty((x.size, self.P))
        th[:, self.others] = nuis
        th[:, self.t] = x
        return th

    def _whiten_rows(self, rows):
        W = self.W
        if isinstance(W, np.ndarray) and W.ndim == 3:
            return W[rows]
        return W

    def chi2(self, rows, x, nuis):
        """(χ², refitted others) at ``x`` (m,) for experiments ``rows`` (m,), starting from ``nuis``."""
        W = self._whiten_rows(rows)
        y = self.y[rows]
        if not self.others:
            r = self.f(self._full(x, nuis)) - y
            r = np.einsum("kij,kj->ki", W, r) if isinstance(W, np.ndarray) and W.ndim == 3 else r @ W.T
            return np.sum(r * r, axis=1), nuis
        o = self.others
        res = fit_many(
            lambda s: self.f(self._full(x, s)),
            np.clip(nuis, self.lo[o], self.hi[o]),
            y,
            jac=lambda s: self.jac(self._full(x, s))[..., o],
            whiten=W,
            scale_cov=False,
            lower=self.lo[o],
            upper=self.hi[o],
        )
        chi2 = np.where(np.isfinite(res.chi2), res.chi2, np.inf)
        return chi2, np.asarray(res.theta)


def _bracket(g, side, step, edge, inner):
    """Walk out from the estimate, doubling the step, until g > 0 (found) or the bound is passed; the
    inner end follows the walk (the last point still below the threshold)."""
    centre = inner[0]
    a, ga, nu_a = (v.copy() for v in inner)
    K = centre.size
    b, gb, nu_b = np.full(K, np.nan), np.full(K, np.nan), nu_a.copy()
    found = np.zeros(K, dtype=bool)
    done = np.zeros(K, dtype=bool)
    for k in range(MAX_DOUBLINGS):
        act = np.flatnonzero(~done)
        if act.size == 0:
            break
        x = centre[act] + side[act] * step[act] * 2.0**k
        at_edge = side[act] * (x - edge[act]) >= 0
        x = np.where(at_edge, edge[act], x)
        val, nu = g(act, x, nu_a[act])
        up = val > 0
        b[act[up]], gb[act[up]], nu_b[act[up]] = x[up], val[up], nu[up]
        a[act[~up]], ga[act[~up]], nu_a[act[~up]] = x[~up], val[~up], nu[~up]
        found[act[up]] = True
        done[act[up | at_edge]] = True
    return (a, ga, nu_a), (b, gb, nu_b), found


def _illinois(g, inner, outer, found, *, tol):
    """Illinois regula falsi on [a, b] with g(a) < 0 < g(b), every bracket at once."""
    a, ga, nu_a = (v.copy() for v in inner)
    b, gb, nu_b = (v.copy() for v in outer)
    last = np.zeros(a.size, dtype=int)  # which end was replaced last: -1 a, +1 b
    act = np.flatnonzero(found)
    x = np.where(found, b, np.nan)
    for _ in range(MAX_ITER):
        if act.size == 0:
            break
        den = gb[act] - ga[act]
        xk = np.where(den > 0, b[act] - gb[act] * (b[act] - a[act]) / np.where(den > 0, den, 1.0), b[act])
        xk = np.clip(xk, np.minimum(a[act], b[act]), np.maximum(a[act], b[act]))
        nu0 = np.where((np.abs(xk - a[act]) < np.abs(xk - b[act]))[:, None], nu_a[act], nu_b[act])
        val, nu = g(act, xk, nu0)
        x[act] = xk
        pos = val > 0
        ia, ib = act[~pos], act[pos]
        # Illinois: halve the function value at the end kept twice in a row
        gb[ia] = np.where(last[ia] == -1, gb[ia] / 2, gb[ia])
        ga[ib] = np.where(last[ib] == 1, ga[ib] / 2, ga[ib])
        a[ia], ga[ia], nu_a[ia], last[ia] = xk[~pos], val[~pos], nu[~pos], -1
        b[ib], gb[ib], nu_b[ib], last[ib] = xk[pos], val[pos], nu[pos], 1
        conv = (np.abs(b[act] - a[act]) <= tol[act]) | (np.abs(val) <= 1e-10)
        act = act[~conv]
    return x


def profile_crossings_of(
    chi2_at: Callable[[np.ndarray], np.ndarray],
    centre: float,
    se: float,
    chi2_min: float,
    lower: float,
    upper: float,
    *,
    threshold: float = CHI2_95_1DOF,
) -> tuple[float | None, float | None]:
    """Profile interval ends of one parameter of one experiment, given its profile χ² as a function.

    ``chi2_at(values)`` returns χ² with the parameter held at each of ``values`` (every other parameter
    refitted), all values in one call. The ends are bracketed outwards from ``centre ± √threshold·se``
    (doubling) and refined by Illinois regula falsi, both sides in every call, as
    :func:`profile_interval` does for problems given by a model and its Jacobian. None on a side that
    never crosses within the bound (Raue et al. 2009).
    """
    side = np.array([-1.0, 1.0])
    edge = np.array([lower, upper], dtype=float)
    step = np.full(2, np.sqrt(threshold) * (se if np.isfinite(se) and se > 0 else 1.0))

    def g(x):
        return np.asarray(chi2_at(np.clip(x, lower, upper)), dtype=float) - chi2_min - threshold

    a = np.full(2, float(centre))
    ga = np.full(2, -threshold)
    b = np.clip(centre + side * step, lower, upper)
    gb = g(b)
    found = gb > 0
    for _ in range(MAX_DOUBLINGS):
        open_ = ~found & (b != edge)
        if not open_.any():
            break
        a = np.where(open_, b, a)
        ga = np.where(open_, gb, ga)
        step = np.where(open_, 2 * step, step)
        b = np.where(open_, np.clip(centre + side * step, lower, upper), b)
        gb = np.where(open_, g(b), gb)
        found = gb > 0
    tol = RTOL * max(float(se) if np.isfinite(se) and se > 0 else 1.0, 1e-12)
    last = np.zeros(2)
    for _ in range(MAX_ITER):
        if np.all(~found | (np.abs(b - a) <= tol)):
            break
        x = np.where(found, b - gb * (b - a) / np.where(gb != ga, gb - ga, 1.0), a)
        gx = g(x)
        left = np.sign(gx) == np.sign(ga)  # the root lies between x and b
        ga = np.where(found & ~left & (last < 0), ga / 2, ga)  # Illinois: halve the stale end's value
        gb = np.where(found & left & (last > 0), gb / 2, gb)
        a, ga = np.where(found & left, x, a), np.where(found & left, gx, ga)
        b, gb = np.where(found & ~left, x, b), np.where(found & ~left, gx, gb)
        last = np.where(left, 1.0, -1.0)
    ends = np.where(found, 0.5 * (a + b), np.nan)
    lo, hi = (float(v) if np.isfinite(v) else None for v in ends)
    return lo, hi
