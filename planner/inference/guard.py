"""Exact designs for a compound criterion: precision of one parameter and the power to detect
alternative models (generic design mathematics, no chemistry).

The criterion, minimised over tube counts x on the candidates,

    Ψ(x) = (1 − w) · log Var_t(x) − (w / A) · Σ_a log(1 + λ_a(x)),

mixes the c-optimal term of the target parameter t (Var_t = (M⁻¹)_tt, M = M0 + Σ x_c F_cᵀF_c) with a
T-optimal term for each of A alternative models (λ_a the linearised noncentrality of the main model's
lack of fit when alternative a is true; Atkinson & Fedorov 1975, Biometrika 62:57), in the spirit of the
compound DT-criteria of Atkinson (2008, J. Stat. Plan. Inference 138:56) and of López-Fidalgo,
Tommasi & Trandafir (2007, JRSS B 69:231). log(1 + λ) rather than log λ keeps designs that cannot detect
an alternative at all (λ = 0) finite. At w = 0 it is the target criterion alone.

The search is an exchange (Fedorov 1972): from a starting design, move the one tube whose move to
another candidate lowers Ψ most, until no move does; every move is evaluated for all candidates at once
with batched P'×P' solves.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

MAX_MOVES = 200
IMPROVE = 1e-9  # a move must lower Ψ by more than this (log units)


@dataclass(frozen=True)
class GuardedDesign:
    """An exact design for the compound criterion.

    Attributes
    ----------
    counts : (C,) tubes at each candidate.
    var_target : Var of the target parameter (M⁻¹)_tt of the design.
    noncentrality : (A,) linearised λ of each alternative.
    value : Ψ at the design.
    moves : tube moves made from the start.
    """

    counts: np.ndarray
    var_target: float
    noncentrality: np.ndarray
    value: float
    moves: int


def _parts(M: np.ndarray, b: np.ndarray, s: np.ndarray, t: int):
    """Var_t and λ (..., A) for information M (..., P, P), b (..., A, P), s (..., A)."""
    P = M.shape[-1]
    rhs = np.concatenate(
        [np.eye(P)[t][..., None] * np.ones(M.shape[:-2] + (1, 1)), np.swapaxes(b, -1, -2)], axis=-1
    )  # (..., P, 1 + A)
    sol = np.linalg.solve(M, rhs)
    var = sol[..., t, 0]
    lam = s - np.einsum("...ap,...pa->...a", b, sol[..., 1:])
    return var, np.maximum(lam, 0.0)


def _psi(var, lam, w: float):
    with np.errstate(divide="ignore", invalid="ignore"):
        v = (1.0 - w) * np.log(var) - (w / max(lam.shape[-1], 1)) * np.sum(np.log1p(lam), axis=-1)
    return np.where(np.isfinite(v) & (var > 0), v, np.inf)


def guarded_design(
    F: np.ndarray,
    R: np.ndarray,
    M0: np.ndarray | None,
    target: int,
    counts0: np.ndarray,
    weight: float,
    *,
    ridge: float = 1e-10,
) -> GuardedDesign:
    """Exchange from ``counts0`` (same number of tubes) to a local minimum of Ψ.

    Parameters
    ----------
    F : (C, P') whitened Jacobian rows (one reading per candidate).
    R : (A, C) whitened misfit of each alternative at each candidate.
    M0 : (P', P') prior information, or None.
    target : index of the target parameter among the P' columns.
    counts0 : (C,) starting tube counts (e.g. the target-optimal exact design).
    weight : w in [0, 1): 0 keeps the target criterion alone.
    ridge : added to M's diagonal relative to its mean diagonal, so designs with fewer distinct tubes than
        parameters stay finite.
    """
    F = np.asarray(F, dtype=float)
    R = np.atleast_2d(np.asarray(R, dtype=float))
    C, P = F.shape
    x = np.asarray(counts0, dtype=int).copy()
    base = np.zeros((P, P)) if M0 is None else np.asarray(M0, dtype=float)
    scale = max(float(np.mean(np.einsum("cp,cp->p", F, F))), 1e-300)
    base = base + ridge * scale * np.eye(P)
    FF = np.einsum("cp,cq->cpq", F, F)  # (C, P, P)
    RF = R[:, :, None] * F[None, :, :]  # (A, C, P)

    def state(xc):
        M = base + np.tensordot(xc.astype(float), FF, axes=1)
        b = np.einsum("c,acp->ap", xc.astype(float), RF)
        s = (R**2) @ xc.astype(float)
        return M, b, s

    M, b, s = state(x)
    var, lam = _parts(M, b, s, target)
    value = float(_psi(var, lam, weight))
    moves = 0
    if weight <= 0.0:
        return GuardedDesign(x, float(var), lam, value, 0)
    for _ in range(MAX_MOVES):
        best: tuple[float, int | None, int | None] = (value - IMPROVE, None, None)
        for i in np.flatnonzero(
            x
        ).tolist():  # the design's distinct tubes (a handful); each move batched over C
            Mi = M - FF[i]
            bi = b - RF[:, i, :]
            si = s - R[:, i] ** 2
            Mc = Mi[None] + FF  # (C, P, P)
            bc = bi[None] + np.swapaxes(RF, 0, 1)  # (C, A, P)
            sc = si[None] + (R**2).T  # (C, A)
            vc, lc = _parts(Mc, bc, sc, target)
            psi = _psi(vc, lc, weight)
            psi[i] = np.inf
            c = int(np.argmin(psi))
            if psi[c] < best[0]:
                best = (float(psi[c]), int(i), c)
        if best[1] is None:
            break
        _, i_best, c_best = best
        assert i_best is not None and c_best is not None
        i, c = int(i_best), int(c_best)
        x[i] -= 1
        x[c] += 1
        moves += 1
        M, b, s = state(x)
        var, lam = _parts(M, b, s, target)
        value = float(_psi(var, lam, weight))
    return GuardedDesign(x, float(var), lam, value, moves)
