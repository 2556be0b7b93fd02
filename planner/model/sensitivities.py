"""Analytic derivatives of the equilibrium (implicit function theorem), batched over tubes."""

from __future__ import annotations

from dataclasses import dataclass
from typing import NamedTuple

import numpy as np

from .closed_forms import EquilibriumError
from .newton import LN10, LN_ZERO, SolverSystem, balance_jacobian
from .speciation import Speciation, as_stoich_pq, prepare_totals


@dataclass(frozen=True)
class Sensitivity:
    """Derivatives of the equilibrium composition (implicit function theorem).

    ``ln`` is the natural logarithm; to get derivatives per log10 unit of beta multiply the
    ``*_dlnbeta`` fields by ln(10). ``*_dMtot`` / ``*_dLtot`` are per mol/L of total.

    Attributes
    ----------
    dlnc_dlnbeta : numpy.ndarray, shape (..., S, S)
        d ln[species_s] / d ln(beta_j), s along the second-to-last axis, j along the last.
    dlnc_dMtot, dlnc_dLtot : numpy.ndarray, shape (..., S)
        d ln[species_s] / d M_tot and / d L_tot, L/mol.
    dlnfree_M_dlnbeta, dlnfree_L_dlnbeta : numpy.ndarray, shape (..., S)
        d ln[M]free / d ln(beta_j) and d ln[L]free / d ln(beta_j).
    dlnfree_M_dMtot, dlnfree_M_dLtot, dlnfree_L_dMtot, dlnfree_L_dLtot : numpy.ndarray, shape (...)
        Derivatives of ln of the free concentrations with respect to the totals, L/mol.
    dc_dMtot, dc_dLtot : numpy.ndarray, shape (..., S)
        d[species_s] / d M_tot and / d L_tot (dimensionless). Unlike the log derivatives these are
        finite in tubes where a total is zero (the one-sided limit at that total), which is what a
        chain rule to delivered volumes needs for blank tubes.
    dfree_M_dMtot, dfree_M_dLtot, dfree_L_dMtot, dfree_L_dLtot : numpy.ndarray, shape (...)
        The same absolute derivatives for the free concentrations.

    Notes
    -----
    A quantity that is identically zero because a total is zero has no logarithmic derivative; it is
    reported as 0 there (its contribution c * dln c to any absorbance derivative is 0), and its
    first-order response to the zero total is carried by ``dc_dMtot`` / ``dc_dLtot``.
    """

    dlnc_dlnbeta: np.ndarray
    dlnc_dMtot: np.ndarray
    dlnc_dLtot: np.ndarray
    dlnfree_M_dlnbeta: np.ndarray
    dlnfree_L_dlnbeta: np.ndarray
    dlnfree_M_dMtot: np.ndarray
    dlnfree_M_dLtot: np.ndarray
    dlnfree_L_dMtot: np.ndarray
    dlnfree_L_dLtot: np.ndarray
    dc_dMtot: np.ndarray
    dc_dLtot: np.ndarray
    dfree_M_dMtot: np.ndarray
    dfree_M_dLtot: np.ndarray
    dfree_L_dMtot: np.ndarray
    dfree_L_dLtot: np.ndarray

    def __repr__(self) -> str:
        return (
            f"Sensitivity(batch shape {np.shape(self.dlnfree_M_dMtot)}, {np.shape(self.dc_dMtot)[-1]} "
            f"species)"
        )


def sensitivities(spec: Speciation, stoich_pq, log_beta_cond) -> Sensitivity:
    """Analytic derivatives of the equilibrium by the implicit function theorem.

    With u = (ln[M], ln[L]) and F(u; theta) = (TM - M_tot, TL - L_tot) = 0, du/dtheta = -J^-1 dF/dtheta
    (e.g. Krantz & Parks 2002, *The Implicit Function Theorem*, Birkhaeuser, th. 3.3.1), J the 2x2
    Jacobian of the balances (see :func:`speciate`), dF/d ln beta_j = (p_j [j], q_j [j]),
    dF/dM_tot = (-1, 0), dF/dL_tot = (0, -1); then d ln[s] = delta_sj d ln beta_j + p_s dx + q_s dy.
    Batched closed-form 2x2 solves with the determinant from Lagrange's identity (no cancellation).

    Where a total is zero the log of that component is no coordinate; the balances are linearised in
    its concentration instead. With M_tot = 0 < L_tot: dTM/d[M] = 1 + Sum_{p=1} beta [L]^q = alpha,
    dTL/d[M] = Sum_{p=1} q beta [L]^q = g, dTM/dy = 0, dTL/dy = J_LL; the triangular system gives
    d[M]/dM_tot = 1/alpha, dy/dM_tot = -g/(alpha J_LL), dy/dL_tot = 1/J_LL, dy/d ln beta_j = -q_j [j]/J_LL
    and d[s]/dM_tot = beta_s [L]^q_s / alpha for p_s = 1 (0 for p_s >= 2). Likewise with L and M swapped.
    These one-sided limits fill the absolute fields (``dc_*``, ``dfree_*_d*tot``).

    Parameters
    ----------
    spec : Speciation
        A result of :func:`speciate` for the same stoichiometry and constants.
    stoich_pq, log_beta_cond
        As passed to :func:`speciate`.

    Returns
    -------
    Sensitivity
    """
    p, q = as_stoich_pq(stoich_pq)
    sy = SolverSystem(p, q)
    S = p.size
    batch = np.shape(spec.free_M)
    M, L, lb10, batch2 = prepare_totals(spec.M_tot_M, spec.L_tot_M, log_beta_cond, S)
    lnb = lb10 * LN10
    if batch2 != batch:
        raise EquilibriumError(
            f"log_beta_cond (shape {np.shape(log_beta_cond)}) does not broadcast to the speciation's batch "
            f"shape {batch}; pass the constants used for speciate()"
        )
    n = M.size
    c = np.asarray(spec.species_M, dtype=float).reshape(n, S).T  # (S, n)
    m = np.asarray(spec.free_M, dtype=float).reshape(n)
    fl = np.asarray(spec.free_L, dtype=float).reshape(n)
    zM = M == 0.0
    zL = L == 0.0
    P = p[:, None]
    Q = q[:, None]

    a, b, d, det = balance_jacobian(c, m, fl, zM.astype(float), zL.astype(float), sy)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        du = _regular_derivatives(a, b, d, det, P * c, Q * c)
        du, per_m, per_l, alpha_m, alpha_l = _zero_total_limits(
            du, c, m, fl, lnb, p, q, sy, zM & ~zL, zL & ~zM
        )
    # the log of a zero component has no derivative: report 0 (see Sensitivity, Notes)
    du = _without_zero_logs(du, zM, zL)
    dlnc_db, dlnc_dM, dlnc_dL = _species_log_derivatives(du, c, P, Q)
    dc_dM, dc_dL, free = _absolute_responses(
        du, c, m, fl, (dlnc_dM, dlnc_dL), zM, zL, (per_m, per_l), (alpha_m, alpha_l)
    )

    def out(arr, tail=()):
        # (..., n) species-major -> batch + tail
        return np.moveaxis(arr.reshape(tail + (n,)), -1, 0).reshape(batch + tail)

    return Sensitivity(
        dlnc_dlnbeta=out(dlnc_db, (S, S)),
        dlnc_dMtot=out(dlnc_dM, (S,)),
        dlnc_dLtot=out(dlnc_dL, (S,)),
        dlnfree_M_dlnbeta=out(du.dx_db, (S,)),
        dlnfree_L_dlnbeta=out(du.dy_db, (S,)),
        dlnfree_M_dMtot=out(du.dx_dM),
        dlnfree_M_dLtot=out(du.dx_dL),
        dlnfree_L_dMtot=out(du.dy_dM),
        dlnfree_L_dLtot=out(du.dy_dL),
        dc_dMtot=out(dc_dM, (S,)),
        dc_dLtot=out(dc_dL, (S,)),
        **{k: out(v) for k, v in free.items()},
    )


def _species_log_derivatives(du: _FreeLogDerivatives, c, P, Q):
    """d ln[s] = delta_sj d ln beta_j + p_s dx + q_s dy, by ln β (S, S, n) and by each total (S, n); 0 for
    absent species."""
    present = c > 0.0
    S = c.shape[0]
    dlnc_db = np.eye(S)[:, :, None] + P[:, :, None] * du.dx_db[None] + Q[:, :, None] * du.dy_db[None]
    dlnc_db = np.where(present[:, None, :], dlnc_db, 0.0)  # (S species, S constants, n)
    dlnc_dM = np.where(present, P * du.dx_dM + Q * du.dy_dM, 0.0)
    dlnc_dL = np.where(present, P * du.dx_dL + Q * du.dy_dL, 0.0)
    return dlnc_db, dlnc_dM, dlnc_dL


def _absolute_responses(du, c, m, fl, dlnc, zM, zL, per, alpha):
    """Absolute first-order responses to the totals (species (S, n), free components (n,)), including the
    limits at a zero total."""
    dlnc_dM, dlnc_dL = dlnc
    per_m, per_l = per
    alpha_m, alpha_l = alpha
    dc_dM = c * dlnc_dM + np.where(zM, per_m / alpha_m, 0.0)
    dc_dL = c * dlnc_dL + np.where(zL, per_l / alpha_l, 0.0)
    free = {
        "dfree_M_dMtot": np.where(zM, 1.0 / alpha_m, m * du.dx_dM),
        "dfree_M_dLtot": np.where(zM, 0.0, m * du.dx_dL),
        "dfree_L_dMtot": np.where(zL, 0.0, fl * du.dy_dM),
        "dfree_L_dLtot": np.where(zL, 1.0 / alpha_l, fl * du.dy_dL),
    }
    return dc_dM, dc_dL, free


class _FreeLogDerivatives(NamedTuple):
    """Derivatives of x = ln[M] and y = ln[L] by ln β_j (S, n) and by each total (n,)."""

    dx_db: np.ndarray
    dy_db: np.ndarray
    dx_dM: np.ndarray
    dy_dM: np.ndarray
    dx_dL: np.ndarray
    dy_dL: np.ndarray


def _regular_derivatives(a, b, d, det, pc, qc) -> _FreeLogDerivatives:
    """Tubes with both totals positive: J^-1 = [[d, -b], [-b, a]] / det applied to -dF/dθ."""
    inv = 1.0 / det
    return _FreeLogDerivatives(
        dx_db=(b * qc - d * pc) * inv,  # (S, n): d ln[M] / d ln beta_j
        dy_db=(b * pc - a * qc) * inv,
        dx_dM=d * inv,
        dy_dM=-b * inv,
        dx_dL=-b * inv,
        dy_dL=a * inv,
    )


def _zero_total_limits(du: _FreeLogDerivatives, c, m, fl, lnb, p, q, sy, onlyM0, onlyL0):
    """The one-sided limits where one total is zero (the triangular systems of the docstring) in place of
    the regular derivatives, with the concentrations per unit of a zero component and their sums α."""
    P = p[:, None]
    Q = q[:, None]
    # concentrations per unit of a zero component: beta [L]^q for p = 1 species, beta [M]^p for q = 1
    lnm = np.where(m > 0.0, np.log(np.where(m > 0.0, m, 1.0)), LN_ZERO)
    lnl = np.where(fl > 0.0, np.log(np.where(fl > 0.0, fl, 1.0)), LN_ZERO)
    per_m = np.where(P == 1, np.exp(lnb + Q * lnl), 0.0)
    per_l = np.where(Q == 1, np.exp(lnb + P * lnm), 0.0)
    alpha_m = 1.0 + per_m.sum(0)
    alpha_l = 1.0 + per_l.sum(0)
    JLL = fl + sy.q2 @ c
    JMM = m + sy.p2 @ c
    pc, qc = P * c, Q * c
    du = _FreeLogDerivatives(
        # L_tot = 0 < M_tot (only q = 0 species are present): the x row
        dx_db=np.where(onlyL0, -pc / JMM, du.dx_db),
        # M_tot = 0 < L_tot (only p = 0 species are present): the y row
        dy_db=np.where(onlyM0, -qc / JLL, du.dy_db),
        dx_dM=np.where(onlyL0, 1.0 / JMM, du.dx_dM),
        dy_dM=np.where(onlyM0, -(q @ per_m) / (alpha_m * JLL), du.dy_dM),
        dx_dL=np.where(onlyL0, -(p @ per_l) / (alpha_l * JMM), du.dx_dL),
        dy_dL=np.where(onlyM0, 1.0 / JLL, du.dy_dL),
    )
    return du, per_m, per_l, alpha_m, alpha_l


def _without_zero_logs(du: _FreeLogDerivatives, zM, zL) -> _FreeLogDerivatives:
    """Zero where the component's total is zero: the log of a zero component has no derivative."""
    return _FreeLogDerivatives(
        dx_db=np.where(zM, 0.0, du.dx_db),
        dy_db=np.where(zL, 0.0, du.dy_db),
        dx_dM=np.where(zM, 0.0, du.dx_dM),
        dy_dM=np.where(zL, 0.0, du.dy_dM),
        dx_dL=np.where(zM, 0.0, du.dx_dL),
        dy_dL=np.where(zL, 0.0, du.dy_dL),
    )
