"""Each student's own fit: their tubes alone, with the stock errors in their covariance (a student cannot
tell a stock's error from the constant), from several starts over the guess's range, batched over the
students who read the same number of tubes."""

from __future__ import annotations

import numpy as np

from ...inference.lm import fit_many
from ...inference.precision import ReadingModel
from ...inference.study import Study
from ..measure.core import N_STARTS, determined_mask
from .consensus import Tubes, factors_at


def own_fits(study: Study, tubes: Tubes, usable: np.ndarray) -> dict[int, tuple[np.ndarray, np.ndarray]]:
    """student index (in ``tubes``) → (estimates, SEs) (P,) where their own tubes determine every
    parameter."""
    params = study.params
    fac = factors_at(study, tubes, params.guess)
    shared = np.concatenate([fac.device, fac.stock], axis=1)
    starts = np.concatenate([[0], np.cumsum(tubes.sizes)[:-1]])
    out: dict[int, tuple[np.ndarray, np.ndarray]] = {}
    for n in np.unique(tubes.sizes[usable]):  # one batch per tube count
        who = np.flatnonzero(usable & (tubes.sizes == n))
        if n <= params.size or who.size == 0:
            continue
        idx = starts[who][:, None] + np.arange(n)  # (S, n)
        cov = shared[idx] @ np.swapaxes(shared[idx], 1, 2)
        cov[:, np.arange(n), np.arange(n)] += fac.var[idx]
        W = np.linalg.solve(np.linalg.cholesky(cov), np.broadcast_to(np.eye(n), cov.shape))
        theta, se, ok = _fits(study, tubes, idx, W, starts=1)
        again = np.flatnonzero(~ok)  # from the guess alone some fits stray: several starts for those
        if again.size:
            t2, s2, ok2 = _fits(study, tubes, idx[again], W[again], starts=N_STARTS)
            theta[again], se[again], ok[again] = t2, s2, ok2
        for j in np.flatnonzero(ok):
            out[int(who[j])] = (theta[j], se[j])
    return out


def _fits(study: Study, tubes: Tubes, idx: np.ndarray, W: np.ndarray, *, starts: int):
    """Fits of the students whose tubes are ``idx`` (S, n), from ``starts`` starts over ±3 sd of the
    target's guess (one: the guess itself); the best per student, and whether it determines θ."""
    params = study.params
    k, S = starts, idx.shape[0]
    reading = ReadingModel(
        study.model, params, np.repeat(tubes.totals[idx], k, axis=0), np.repeat(tubes.ions[idx], k, axis=0)
    )
    theta0 = np.tile(params.guess, (S * k, 1))
    if params.target >= 0 and k > 1:
        theta0[:, params.target] += np.tile(np.linspace(-3, 3, k), S) * params.prior_sd[params.target]
    lo, hi = reading.bounds()
    res = fit_many(
        reading.f,
        theta0,
        np.repeat(tubes.y[idx], k, axis=0),
        jac=reading.jac,
        whiten=np.repeat(W, k, axis=0),
        scale_cov=False,
        lower=lo,
        upper=hi,
    )
    chi = np.where(res.converged, res.chi2, np.inf).reshape(S, k)
    best = np.argmin(chi, axis=1) + np.arange(S) * k
    theta, se = np.asarray(res.theta)[best].copy(), np.asarray(res.se)[best].copy()
    return theta, se, determined_mask(params, theta, se, np.asarray(res.converged)[best], lo, hi)
