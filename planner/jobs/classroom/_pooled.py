"""Information of many students' tubes: one student's recipe alone, and the whole class fitted together.

Every reading is ``A = f(θ) + e + S z``: ``e`` independent per tube (photometric noise, random delivery
and make-up errors), ``z`` unit-variance shared errors with loadings ``S`` (each stock's concentration
error, each dispenser's calibration error). Treating ``z`` as nuisance parameters with a unit
Gaussian prior gives the same Cramér–Rao bound for θ as the full covariance ``D + S Sᵀ`` (Woodbury
identity), and keeps the information additive over tubes: that is how the design works
(:mod:`planner.jobs.plan.design`) and how the class is pooled here.

Who shares which error when the class's data are fitted together:

- a stock's concentration error is shared by everyone who pipettes from the same bottle. The class
  stock list makes each stock once for the whole class, so the pooled fit carries one set of stock
  factors for the class: replicates across students never average it out (the conservative choice);
- a dispenser's calibration error is shared by the students who use the same dispenser: one set of
  device factors per bench (a bench being set up once per section; a student without a bench has their
  own), marginalised bench by bench (Schur complement), so the sums stay vectorised over benches.

All arrays are whitened by the independent sd of each reading, so information is ``XᵀX``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ...inference.precision import ReadingModel
from ...inference.priors import Nodes
from ...inference.study import Study
from ...inputs.recipe import Recipe
from ...model.compiled import tube_ions_M
from ...model.jacobians import absorbance_derivatives
from ...uncertainty.budget import error_factors
from ..compile import expected_at

__all__ = ["Rows", "pooled_target_se", "recipe_rows", "student_target_var"]


@dataclass(frozen=True)
class Rows:
    """Whitened information rows of C tubes at G parameter nodes.

    Attributes
    ----------
    theta : (G, C, P) rows for the fitted parameters.
    stock : (G, C, k) rows for each stock's concentration error (1 sd).
    device : (G, C, d) rows for each dispenser's calibration error (1 sd).
    absorbance : (G, C) expected readings at each node.
    band : (G, C) sd of each reading from the absorptivities' uncertainty (for the range screen).
    """

    theta: np.ndarray
    stock: np.ndarray
    device: np.ndarray
    absorbance: np.ndarray
    band: np.ndarray

    def take(self, idx: np.ndarray) -> Rows:
        """Rows of the tubes ``idx`` (any shape; the tube axes replace C)."""
        return Rows(
            self.theta[:, idx],
            self.stock[:, idx],
            self.device[:, idx],
            self.absorbance[:, idx],
            self.band[:, idx],
        )


def recipe_rows(study: Study, recipe: Recipe, nodes: Nodes) -> Rows:
    """Information rows of every tube of ``recipe`` at every node (vectorised over tubes)."""
    model, params = study.model, study.params
    st, eps = expected_at(model, params, recipe, nodes.theta)
    ions = tube_ions_M(model, recipe.volumes_mL, recipe.total_volume_mL)
    J = ReadingModel(model, params, st.totals_M[0], ions).jac(nodes.theta)  # (G, C, P)
    der = absorbance_derivatives(model, st, eps)
    th, sk, dv = [], [], []
    for g in range(nodes.theta.shape[0]):  # a handful of nodes, each vectorised over the tubes
        f = error_factors(study.bench, model, recipe, st[g], dA_dtotals=der.dA_dtotals[g])
        sd = np.sqrt(f.independent_var)[:, None]
        th.append(J[g] / sd)
        sk.append(f.J_stock / sd)
        dv.append(f.J_device / sd)
    band = np.sqrt(np.sum((der.dA_depsilon * model.epsilon_M_cm * model.epsilon_rsd) ** 2, axis=-1))
    return Rows(np.stack(th), np.stack(sk), np.stack(dv), st.absorbance, band)


def _target_var(M: np.ndarray, t: int) -> np.ndarray:
    """``[M⁻¹]_tt`` for a stack of information matrices (..., Q, Q), scale-invariant and safe for
    (nearly) singular stacks: unit-diagonal scaling plus a 1e-12 ridge; inf where t is not estimable."""
    d = np.sqrt(np.maximum(np.einsum("...ii->...i", M), 1e-300))
    Ms = M / (d[..., :, None] * d[..., None, :]) + 1e-12 * np.eye(M.shape[-1])
    e = np.zeros(M.shape[:-1])
    e[..., t] = 1.0
    x = np.linalg.solve(Ms, e[..., None])[..., 0]
    v = x[..., t] / d[..., t] ** 2
    return np.where(v > 0, v, np.inf)


def student_target_var(rows: Rows, t: int) -> np.ndarray:
    """Variance of the target for recipes whose tubes are ``rows`` (G, B, n, ·): each recipe alone,
    with its own stock and device factors as unit-prior nuisance (what :func:`assess_study` computes
    from the full covariance). Returns (G, B)."""
    X = np.concatenate([rows.theta, rows.stock, rows.device], axis=-1)  # (G, B, n, Q)
    M = np.einsum("gbnp,gbnq->gbpq", X, X)
    P = rows.theta.shape[-1]
    Q = X.shape[-1]
    M[..., np.arange(P, Q), np.arange(P, Q)] += 1.0
    return _target_var(M, t)


def pooled_target_se(
    theta: np.ndarray,
    stock: np.ndarray,
    device: np.ndarray,
    bench: np.ndarray,
    t: int,
    *,
    stock_shared: bool = True,
    stock_group: np.ndarray | None = None,
) -> float:
    """SE of the target when every student's tubes are fitted together.

    Parameters
    ----------
    theta, stock, device : (N, n, ·) whitened rows of each student's tubes (at one node).
    bench : (N,) bench index of each student (students at one bench share its dispensers).
    t : index of the target among the fitted parameters.
    stock_shared : True: one set of stock factors for the class (one bottle of each stock);
        False: the stock errors left out (stocks standardised, or known exactly), for comparison.
    stock_group : (N,) optional group of each student whose stocks are made separately (e.g. the
        section): one set of stock factors per group, marginalised group by group. Benches must nest
        in the groups (a bench belongs to one group).
    """
    N, n, P = theta.shape
    k = stock.shape[-1] if stock_shared else 0
    X = np.concatenate([theta, stock], axis=-1) if stock_shared else theta  # (N, n, P + k)
    A = np.einsum("snp,snq->spq", X, X)
    B = np.einsum("snp,snd->spd", X, device)
    C = np.einsum("snd,sne->sde", device, device)
    _, b = np.unique(np.asarray(bench), return_inverse=True)
    nb = int(b.max()) + 1
    Ab = np.zeros((nb,) + A.shape[1:])
    Bb = np.zeros((nb,) + B.shape[1:])
    Cb = np.zeros((nb,) + C.shape[1:])
    np.add.at(Ab, b, A)
    np.add.at(Bb, b, B)
    np.add.at(Cb, b, C)
    d = device.shape[-1]
    if d:
        Cb = Cb + np.eye(d)
        Ab = Ab - Bb @ np.linalg.solve(Cb, np.swapaxes(Bb, 1, 2))
    if stock_group is None or not k:
        M = Ab.sum(axis=0)
        M[np.arange(P, P + k), np.arange(P, P + k)] += 1.0
        return float(np.sqrt(_target_var(M, t)))
    _, grp = np.unique(np.asarray(stock_group), return_inverse=True)
    bench_grp = np.zeros(nb, dtype=int)
    bench_grp[b] = grp
    Ms = np.zeros((int(grp.max()) + 1,) + Ab.shape[1:])
    np.add.at(Ms, bench_grp, Ab)
    tt, ts, ss = Ms[:, :P, :P], Ms[:, :P, P:], Ms[:, P:, P:] + np.eye(k)
    M = (tt - ts @ np.linalg.solve(ss, np.swapaxes(ts, 1, 2))).sum(axis=0)
    return float(np.sqrt(_target_var(M, t)))
