"""Separable nonlinear least squares by variable projection, for data matrices whose columns share a basis.

The problem (one per trial, many trials at once): data Y (n, W) — n rows (tubes), W columns
(wavelengths) — modelled as

    Y ≈ K(θ) + C(θ) E,

with θ (P) the nonlinear parameters, C(θ) (n, s) a basis shared by every column, E (s, W) free linear
parameters (one column per column of Y) and K(θ) (n, W) a known part. The errors have the covariance

    Cov(vec Y) = diag(σ²) + S Sᵀ,   S[i, λ, :] = Σ_c g[i, λ, c] R[i, c, :]   (the same for every trial),

i.e. independent errors per entry plus errors correlated across entries: each row i has m causes of its
own (loadings g[i, λ, c] on column λ) and the n m causes are correlated across rows with covariance
R Rᵀ (R of rank r ≤ n m). A plain low-rank S is the case g = S, R[i] = I. Generalised least squares
minimises (y − m)ᵀ Σ⁻¹ (y − m), which equals the minimum over latent
z (r) of ‖D^(−½)(y − m) − S̃ z‖² + ‖z‖² (S̃ = D^(−½) S; the mixed-model identity, e.g. Henderson 1975,
Biometrics 31:423). Both E and z enter linearly, so for any θ they are eliminated exactly (Golub &
Pereyra 1973, SIAM J. Numer. Anal. 10:413; review Golub & Pereyra 2003, Inverse Problems 19:R1): E by
a QR factorisation of the weighted basis at each column, then z from an r × r system built from what the
per-column projections leave of S̃. The nonlinear search then runs over θ alone
(:func:`planner.inference.lm.fit_many`), with Kaufman's (1975, BIT 15:49) Jacobian of the projected
residual, −P⊥ ∂(K + C E)/∂θ: it gives the exact gradient of the reduced objective, and JᵀJ is the
Fisher information of θ with E and z as nuisance parameters (the Schur complement) at the solution.

Everything is vectorised over trials; the basis is orthogonalised by classical Gram–Schmidt applied twice
("twice is enough", Giraud, Langou & Rozložník 2005, Comput. Math. Appl. 50:1069), one column at a time
over the whole stack, since s is a handful.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

_BLOCK = 64  # trials computed together: their temporaries stay in cache
_RANK_TOL = 1e-10  # a basis column whose remainder is below this share of its norm adds nothing new

Basis = Callable[[np.ndarray], tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]]
"""θ (T, P) → (C (T, n, s), ∂C/∂θ (T, n, s, P), K (T, n, W), ∂K/∂θ (T, n, W, P))."""


@dataclass(frozen=True)
class Weights:
    """The error model of the data, whitened once for every trial.

    Attributes
    ----------
    w : (n, W) 1/σ of each entry's independent error; 0 for an entry left out.
    h : (W, n, m) the rows' causes' loadings, whitened (w · g), column-major; 0 where w = 0.
    R : (n m, r) how the causes are correlated across rows (R Rᵀ their covariance).
    B : (n m, n m) Σ over columns of h hᵀ, block-diagonal by row (S̃ᵀ S̃ = Rᵀ B R).
    StS : (r, r) S̃ᵀ S̃ over every entry.
    """

    w: np.ndarray
    h: np.ndarray
    R: np.ndarray
    B: np.ndarray
    StS: np.ndarray

    @classmethod
    def of(cls, sd: np.ndarray, g: np.ndarray, R: np.ndarray, used: np.ndarray | None = None) -> Weights:
        """From the independent sd (n, W), the loadings g (n, W, m) and the mixing R (n, m, r) or
        (n m, r), and the entries used (default: every entry with a finite positive sd)."""
        sd = np.asarray(sd, dtype=float)
        ok = np.isfinite(sd) & (sd > 0) if used is None else np.asarray(used, dtype=bool) & (sd > 0)
        w = np.where(ok, 1.0 / np.where(ok, sd, 1.0), 0.0)
        h = np.ascontiguousarray((np.asarray(g, dtype=float) * w[..., None]).transpose(1, 0, 2))
        n, m = h.shape[1], h.shape[2]
        R = np.asarray(R, dtype=float).reshape(n * m, -1)
        blocks = np.einsum("win,wio->ino", h, h)  # (n, m, m)
        B = np.zeros((n * m, n * m))
        for i in range(n):
            B[i * m : (i + 1) * m, i * m : (i + 1) * m] = blocks[i]
        return cls(w, h, R, B, R.T @ B @ R)

    @classmethod
    def low_rank(cls, sd: np.ndarray, S: np.ndarray, used: np.ndarray | None = None) -> Weights:
        """From the independent sd (n, W) and a plain factor S (n, W, r) (S Sᵀ the correlated part)."""
        n, r = S.shape[0], S.shape[-1]
        return cls.of(sd, S, np.broadcast_to(np.eye(r), (n, r, r)), used)

    @property
    def rank(self) -> int:
        return int(self.R.shape[-1])

    @property
    def h_by_row(self) -> np.ndarray:
        """(n, W, m) the loadings row by row (for S̃ᵀ x as one product per row)."""
        return np.ascontiguousarray(self.h.transpose(1, 0, 2))

    @property
    def used(self) -> np.ndarray:
        return self.w > 0

    def factors(self) -> np.ndarray:
        """(n, W, r) the whitened S̃ itself (for checks and small problems)."""
        n, m = self.h.shape[1], self.h.shape[2]
        return np.einsum("win,inr->iwr", self.h, self.R.reshape(n, m, -1))

    def causes(self, x: np.ndarray) -> np.ndarray:
        """S̃ᵀ x for data x (..., W, n) column-major: (..., r)."""
        hx = np.matmul(np.swapaxes(x, -1, -2)[..., None, :], self.h_by_row)[..., 0, :]  # (..., n, m)
        return hx.reshape(hx.shape[:-2] + (-1,)) @ self.R

    def spread(self, z: np.ndarray) -> np.ndarray:
        """S̃ z for latent values z (..., r): (..., W, n)."""
        n, m = self.h.shape[1], self.h.shape[2]
        u = (z @ self.R.T).reshape(z.shape[:-1] + (n, m))
        return sum(self.h[..., c] * u[..., None, :, c] for c in range(m))


def _orthonormalise(A: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """QR of stacked tall-thin matrices given column-wise, A (..., s, n): Q (..., s, n) with orthonormal
    (or zero, where a column adds nothing new) rows, R (..., s, s) upper triangular with A = Rᵀ Q."""
    Q = np.zeros_like(A)
    s = A.shape[-2]
    R = np.zeros(A.shape[:-2] + (s, s))
    for j in range(s):
        v = A[..., j, :].copy()
        size = np.sqrt(np.einsum("...n,...n->...", v, v))
        for _ in range(2):  # classical Gram–Schmidt, twice
            if j:
                c = np.einsum("...in,...n->...i", Q[..., :j, :], v)
                R[..., :j, j] += c
                v -= np.einsum("...i,...in->...n", c, Q[..., :j, :])
        nv = np.sqrt(np.einsum("...n,...n->...", v, v))
        ok = nv > _RANK_TOL * np.maximum(size, np.finfo(float).tiny)
        R[..., j, j] = np.where(ok, nv, 0.0)
        Q[..., j, :] = np.where(ok[..., None], v / np.where(ok, nv, 1.0)[..., None], 0.0)
    return Q, R


@dataclass(frozen=True)
class Projection:
    """The weighted basis at every column, orthonormalised, and the latent system it leaves.

    Arrays are trial-major and column-major inside a trial: (T, W, ...).

    Attributes
    ----------
    Q : (T, W, s, n) orthonormal rows spanning w ∘ C at each column (zero rows where rank is lost).
    R : (T, W, s, s) upper-triangular factor, w ∘ C = (Rᵀ Q)ᵀ at each column.
    M_chol : (T, r, r) lower Cholesky factor of M = I + S̃ᵀ P⊥ S̃.
    rank : (T,) number of linear parameters the basis determines (Σ over columns of rank(w ∘ C)).
    """

    Q: np.ndarray
    R: np.ndarray
    M_chol: np.ndarray
    rank: np.ndarray


def project(C: np.ndarray, weights: Weights) -> Projection:
    """Orthonormalise the weighted basis C (T, n, s) at every column and factor the latent system.

    S̃ᵀ P S̃ (P the per-column projection on the basis) = Rᵀ (Σ_λ Y_λᵀ Y_λ) R with
    Y_λ[a, (i, c)] = Q_λ[a, i] h[λ, i, c]: an elementwise product, then one matrix product per trial.
    """
    C = np.asarray(C, dtype=float)
    T, n, s = C.shape
    W, r = weights.w.shape[1], weights.rank
    A = weights.w.T[None, :, None, :] * np.swapaxes(C, 1, 2)[:, None, :, :]  # (T, W, s, n)
    Q, Rf = _orthonormalise(A)
    if r:
        m = weights.h.shape[-1]
        h_cm = np.ascontiguousarray(weights.h.transpose(0, 2, 1))  # (W, m, n)
        # Y_λ with the causes c-major (contiguous products) ...
        Y = (Q[:, :, :, None, :] * h_cm[None, :, None, :, :]).reshape(T, W * s, m * n)
        back = (np.arange(m)[None, :] * n + np.arange(n)[:, None]).ravel()  # ... and (i, c) again
        G = np.matmul(np.swapaxes(Y, 1, 2), Y)[:, back][:, :, back]
        PS = weights.R.T @ G @ weights.R
        L = np.linalg.cholesky(np.eye(r) + weights.StS - PS)
    else:
        L = np.zeros((T, 0, 0))
    rank = np.sum(np.abs(np.diagonal(Rf, axis1=-2, axis2=-1)) > 0, axis=(1, 2))
    return Projection(Q, Rf, L, rank)


def _cho_solve(L: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Solve (L Lᵀ) x = b for stacked lower-triangular L (T, r, r) and b (T, ..., r)."""
    if L.shape[-1] == 0:
        return np.zeros_like(b)
    extra = b.ndim - 2
    Lx = L.reshape(L.shape[:1] + (1,) * extra + L.shape[1:])
    y = np.linalg.solve(Lx, b[..., None])
    return np.linalg.solve(np.swapaxes(Lx, -1, -2), y)[..., 0]


def _projected(proj: Projection, weights: Weights, V: np.ndarray, out: np.ndarray | None = None):
    """For whitened data V (T, ..., W, n): QV, a = P⊥V (the per-column projection, into ``out`` if given)
    and b = S̃ᵀ a (None when ``out`` is given: the caller takes b of the whole stack).

    The augmented projection of [V; 0] is [a − P⊥S̃ M⁻¹ b; −M⁻¹ b], so inner products of two such vectors
    are aᵀa' − bᵀ M⁻¹ b' (the r × r system replaces every residual of length W n)."""
    extra = V.ndim - 3
    Q = proj.Q.reshape(proj.Q.shape[:1] + (1,) * extra + proj.Q.shape[1:])
    QV = np.einsum("...sn,...n->...s", Q, V)
    a = np.subtract(V, np.einsum("...sn,...s->...n", Q, QV), out=out)
    return QV, a, weights.causes(a) if out is None else None


@dataclass(frozen=True)
class Solution:
    """The linear parameters for given θ and the weighted residual they leave.

    Attributes
    ----------
    residual : (T, W, n) P⊥(ỹ − S̃ z), the whitened residual of the independent part, column-major.
    z : (T, r) the latent correlated errors (their residual is −z).
    coef : (T, W, s) Q (ỹ − S̃ z): the linear parameters in the orthonormal basis.
    """

    residual: np.ndarray
    z: np.ndarray
    coef: np.ndarray

    @property
    def chi2(self) -> np.ndarray:
        """(T,) the generalised least-squares χ² at these θ (linear parameters at their best)."""
        return np.einsum("twn,twn->t", self.residual, self.residual) + np.einsum("tr,tr->t", self.z, self.z)

    def augmented(self) -> np.ndarray:
        """(T, W n + r) the whole residual vector [P⊥(ỹ − S̃ z); −z] (column by column of Y, then the
        latent part)."""
        T = self.z.shape[0]
        return np.concatenate([self.residual.reshape(T, -1), -self.z], axis=1)


def solve(proj: Projection, weights: Weights, V: np.ndarray) -> Solution:
    """Eliminate E and z for whitened data V (T, W, n) (already multiplied by w, column-major)."""
    _, a, b = _projected(proj, weights, V)
    z = _cho_solve(proj.M_chol, b)
    QV, res, _ = _projected(proj, weights, V - weights.spread(z))
    return Solution(res, z, QV)


def linear_parameters(proj: Projection, coef: np.ndarray) -> np.ndarray:
    """E (T, s, W) from the coefficients in the orthonormal basis (T, W, s) (back substitution through
    R; a lost column gives 0)."""
    R = proj.R
    s = R.shape[-1]
    E = np.zeros(coef.shape)
    for j in range(s - 1, -1, -1):
        acc = coef[..., j] - np.einsum("twi,twi->tw", R[..., j, j + 1 :], E[..., j + 1 :])
        d = R[..., j, j]
        E[..., j] = np.where(d != 0, acc / np.where(d != 0, d, 1.0), 0.0)
    return np.swapaxes(E, 1, 2)


def _at(
    parts: tuple, Yw: np.ndarray, weights: Weights, wT: np.ndarray, proj: Projection | None = None
) -> dict:
    """Everything at one θ batch from the basis ``parts`` (C, ∂C/∂θ, K, ∂K/∂θ) and the whitened data
    Yw (T, W, n): projection (unless given), the data's projection (QV, a, b), z and χ²."""
    C, dC, K, dK = parts
    proj = project(C, weights) if proj is None else proj
    V = Yw - np.swapaxes(K, 1, 2) * wT
    QV, a, b = _projected(proj, weights, V)
    z = _cho_solve(proj.M_chol, b)
    chi2 = np.einsum("twn,twn->t", a, a) - np.einsum("tr,tr->t", b, z)
    return dict(proj=proj, V=V, a=a, b=b, z=z, QV=QV, chi2=np.maximum(chi2, 0.0), dC=dC, dK=dK)


def _spectra(c: dict, weights: Weights) -> np.ndarray:
    """E (T, s, W) from what :func:`_at` computed (stored in ``c`` on first use)."""
    if "E" not in c:
        coef = c["QV"] - np.einsum("twsn,twn->tws", c["proj"].Q, weights.spread(c["z"]))
        c["E"] = linear_parameters(c["proj"], coef)
    return c["E"]


def _information(c: dict, weights: Weights, wT: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(JᵀJ (T, P, P), Jᵀr (T, P)) with Kaufman's Jacobian J = P⊥_aug[w ∘ ∂(K + C E)/∂θ; 0], from what
    :func:`_at` computed (one parameter at a time: P is a handful)."""
    E = _spectra(c, weights)
    dC, dK = c["dC"], c["dK"]
    T, n, s, P = dC.shape
    # a (T, P, W, n) laid out (T, W, P, n): the sums below run in the same order as over one stacked array
    a = np.empty((T, wT.shape[0], P, n)).transpose(0, 2, 1, 3)
    for k in range(P):
        v = np.swapaxes(dK[..., k], 1, 2) + sum(E[:, j, :, None] * dC[:, None, :, j, k] for j in range(s))
        _projected(c["proj"], weights, v * wT, out=a[:, k])
    b = weights.causes(a)  # (T, P, r)
    Mb = _cho_solve(c["proj"].M_chol, b)
    H = np.einsum("tkwn,tlwn->tkl", a, a) - np.einsum("tkr,tlr->tkl", b, Mb)
    g = np.einsum("tkwn,twn->tk", a, c["a"]) - np.einsum("tkr,tr->tk", Mb, c["b"])
    return 0.5 * (H + np.swapaxes(H, 1, 2)), g


class _RowCache:
    """χ², JᵀJ and Jᵀr of every trial at the last two θ rows it was evaluated at.

    fit_many calls the model and the Jacobian with the whole batch, the rows of stopped trials (and of
    trials whose step was refused) held at θ already seen: those rows are looked up, only the others
    computed. Two entries per trial cover a refused step (back at the θ before the trial point)."""

    def __init__(self, T: int, P: int):
        self.theta = np.full((2, T, P), np.nan)  # NaN matches nothing
        self.chi2 = np.zeros((2, T))
        self.H = np.zeros((2, T, P, P))
        self.g = np.zeros((2, T, P))
        self.newest = np.zeros(T, dtype=int)

    def lookup(self, theta: np.ndarray) -> np.ndarray:
        """(T,) the entry holding each row of θ (T, P), −1 where neither does."""
        hit = np.all(self.theta == theta[None], axis=2)  # (2, T)
        return np.where(hit[0], 0, np.where(hit[1], 1, -1))

    def store(self, rows: np.ndarray, theta, chi2, H, g) -> None:
        """Put the rows' new values in place of their older entry."""
        slot = 1 - self.newest[rows]
        self.theta[slot, rows], self.chi2[slot, rows] = theta, chi2
        self.H[slot, rows], self.g[slot, rows] = H, g
        self.newest[rows] = slot

    def get(self, slot: np.ndarray):
        """(χ², JᵀJ, Jᵀr) of every row from its entry ``slot`` (T,), which becomes its newest."""
        t = np.arange(slot.size)
        self.newest = slot.copy()
        return self.chi2[slot, t], self.H[slot, t], self.g[slot, t]


class SeparableProblem:
    """A batch of separable problems as the model and Jacobian :func:`planner.inference.lm.fit_many`
    wants over θ alone: ``fit_many(problem.f, theta0, problem.y, jac=problem.jac, scale_cov=False)``.

    Levenberg–Marquardt needs of the residual r and the Jacobian J only ‖r‖², Jᵀr and JᵀJ, which are
    invariant under any orthogonal change of coordinates. So the residual is handed over compressed to
    P + 1 coordinates — r ↦ (‖r‖, 0, …, 0), J ↦ (Jᵀr/‖r‖; U) with UᵀU = JᵀJ − (Jᵀr)(Jᵀr)ᵀ/‖r‖² — and
    every inner product is taken through the r × r latent system (:func:`_projected`): no residual of
    length W n is ever formed in the search. fit_many's χ², gradient tests and covariance (JᵀJ)⁻¹ are
    those of the full problem. The full residuals at a solution: :meth:`residuals`.

    :meth:`f` computes χ², JᵀJ and Jᵀr together, once per trial and θ (one projection serves both), and
    only for the rows of θ that changed (:class:`_RowCache`); :meth:`jac` then finds them in the cache.

    Parameters
    ----------
    basis : θ (T, P) → (C, ∂C/∂θ, K, ∂K/∂θ), see :data:`Basis`.
    Y : (T, n, W) data of every trial.
    weights : the error model (:class:`Weights`).
    rowwise : True when ``basis`` computes each row from that row of θ alone (then it is called with the
        changed rows only); False: always with the whole batch.
    """

    def __init__(self, basis: Basis, Y: np.ndarray, weights: Weights, *, rowwise: bool = True):
        self.basis = basis
        self.weights = weights
        self.rowwise = rowwise
        Y = np.asarray(Y, dtype=float)
        self._wT = np.ascontiguousarray(weights.w.T)
        self._Yw = np.ascontiguousarray(np.swapaxes(Y, 1, 2)) * self._wT  # (T, W, n)
        self._key: bytes | None = None
        self._cache: dict = {}
        self._rows: _RowCache | None = None

    def y(self, n_params: int) -> np.ndarray:
        """The observations fit_many compares with :meth:`f`: zeros, (T, P + 1)."""
        return np.zeros((self._Yw.shape[0], n_params + 1))

    def evaluate(self, theta: np.ndarray) -> dict:
        """Everything at θ (T, P), cached for the calls that follow at the same θ: projection, the data's
        projection (a, b), χ² and the linear parameters."""
        theta = np.ascontiguousarray(np.atleast_2d(theta), dtype=float)
        key = theta.tobytes()
        if key != self._key:
            self._cache = _at(self.basis(theta), self._Yw, self.weights, self._wT)
            self._key = key
        return self._cache

    def linear_parameters(self, theta: np.ndarray) -> np.ndarray:
        """E (T, s, W) at θ."""
        return _spectra(self.evaluate(theta), self.weights)

    def information(self, theta: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """(JᵀJ (T, P, P), Jᵀr (T, P)) with Kaufman's Jacobian J = P⊥_aug[w ∘ ∂(K + C E)/∂θ; 0]."""
        return _information(self.evaluate(theta), self.weights, self._wT)

    def _search(self, theta: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(χ², JᵀJ, Jᵀr) at θ (T, P), computed only for the rows not in the row cache."""
        theta = np.ascontiguousarray(np.atleast_2d(theta), dtype=float)
        T, P = theta.shape
        if T != self._Yw.shape[0]:  # one data set for many θ: nothing to reuse
            Yw = np.broadcast_to(self._Yw, (T,) + self._Yw.shape[1:])
            c = _at(self.basis(theta), Yw, self.weights, self._wT)
            return (c["chi2"],) + _information(c, self.weights, self._wT)
        if self._rows is None or self._rows.theta.shape[2] != P:
            self._rows = _RowCache(T, P)
        slot = self._rows.lookup(theta)
        new = np.flatnonzero(slot < 0)
        for start in range(0, new.size, _BLOCK):
            rows = new[start : start + _BLOCK]
            parts, proj = self._basis(theta, rows)
            c = _at(parts, self._Yw[rows], self.weights, self._wT, proj)
            self._rows.store(rows, theta[rows], c["chi2"], *_information(c, self.weights, self._wT))
            slot[rows] = self._rows.newest[rows]
        return self._rows.get(slot)

    def _basis(self, theta: np.ndarray, rows: np.ndarray) -> tuple[tuple, Projection | None]:
        """The basis at the rows ``rows`` of θ, and its projection when several rows share their θ (as
        every trial does at the start): the basis and its projection depend on θ alone, so they are
        computed once per distinct θ."""
        if not self.rowwise:
            return tuple(x[rows] for x in self.basis(theta)), None
        th = theta[rows]
        uniq, inv = np.unique(th, axis=0, return_inverse=True)
        if 2 * uniq.shape[0] > th.shape[0]:
            return self.basis(th), None
        inv = inv.reshape(-1)
        parts = self.basis(uniq)
        p = project(parts[0], self.weights)
        return tuple(x[inv] for x in parts), Projection(p.Q[inv], p.R[inv], p.M_chol[inv], p.rank[inv])

    def f(self, theta: np.ndarray) -> np.ndarray:
        chi2, _, _ = self._search(theta)
        T, P = np.atleast_2d(theta).shape
        out = np.zeros((T, P + 1))
        out[:, 0] = -np.sqrt(chi2)
        return np.where(np.isfinite(out), out, np.nan)

    def jac(self, theta: np.ndarray) -> np.ndarray:
        """The compressed Jacobian of :meth:`f` (see the class docstring), (T, P + 1, P)."""
        chi2, H, g = self._search(theta)
        rho = np.sqrt(chi2)
        T, P = g.shape
        out = np.zeros((T, P + 1, P))
        safe = rho > 0
        first = np.where(safe[:, None], g / np.where(safe, rho, 1.0)[:, None], 0.0)
        out[:, 0, :] = first
        rest = H - np.einsum("tk,tl->tkl", first, first)
        w, U = np.linalg.eigh(rest)
        out[:, 1:, :] = np.swapaxes(U * np.sqrt(np.maximum(w, 0.0))[:, None, :], 1, 2)
        return out

    def full_jacobian(self, theta: np.ndarray) -> np.ndarray:
        """(T, W n + r, P) Kaufman's Jacobian with every row (column by column of Y, then the latent
        part): for one data set, where the rows themselves are wanted."""
        c = self.evaluate(theta)
        E = self.linear_parameters(theta)
        cols = []
        for k in range(c["dK"].shape[-1]):
            v = (
                np.swapaxes(c["dK"][..., k], 1, 2) + np.einsum("tsw,tns->twn", E, c["dC"][..., k])
            ) * self._wT
            cols.append(solve(c["proj"], self.weights, v).augmented())
        return np.stack(cols, axis=-1)

    def residuals(self, theta: np.ndarray) -> Solution:
        """The full whitened residuals at θ (for reports and standardised residuals)."""
        c = self.evaluate(theta)
        return solve(c["proj"], self.weights, c["V"])

    def dof(self, theta: np.ndarray) -> np.ndarray:
        """(T,) entries used − linear parameters determined − P."""
        proj = self.evaluate(theta)["proj"]
        return int(self.weights.used.sum()) - proj.rank - np.atleast_2d(theta).shape[-1]
