"""Optimal approximate designs (weights on the candidates): multiplicative seeding, vertex-direction additions
and simplex Newton steps, certified by the equivalence theorem (see :mod:`planner.inference.design_criteria`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .design_criteria import (
    DesignError,
    Problem,
    as_rows,
    design_vector,
    factor,
    loss_of,
    moment,
    problem_of,
    restrict,
    rows_of,
    sensitivities,
    target_vector,
    top_k,
    value_of,
)

# Approximate designs work on a watch list of the candidates of highest sensitivity (at least
# _WATCH_MIN, or _WATCH_PER_PARAM per parameter), rescanning all candidates between rounds.
_WATCH_MIN = 1000
_WATCH_PER_PARAM = 100
# Multiplicative iterations that seed the first round (they locate the support; Newton finishes).
_MULT_ITER = 5
# Active set handed to Newton: weights above this fraction of the largest, at most _ACTIVE_MAX points.
_ACTIVE_KEEP = 1e-3
_ACTIVE_MAX = 60
# Candidates added per vertex-direction step.
_ADD_PER_STEP = 3


@dataclass(frozen=True, eq=False)
class ApproximateDesign:
    """Optimal approximate design (a probability measure on the candidates).

    Attributes
    ----------
    weights : ndarray, (C,)
        Fraction of the tubes at each candidate; non-negative, sums to 1, exact zeros off support.
    criterion_value : float
        Criterion at ``weights``, per unit tube (module docstring): D ``Σ ν log det(M/n)``,
        target ``Σ ν log(n v)``.
    max_sensitivity : float
        ``max_c d_c``, the largest directional derivative (see :func:`sensitivity`).
    bound : float
        Equivalence-theorem bound ``Σ_c w_c d_c``; the design is optimal iff
        ``max_sensitivity ≤ bound``. Equals p (D) or 1 (target) for a local design with M0 = 0.
    n_iter : int
        Iterations used (multiplicative + Newton steps).
    converged : bool
        ``max_sensitivity − bound ≤ tol × k`` (k = p for D, 1 for target).
    criterion : str
        The criterion optimised (an entry of ``CRITERIA``).
    target : int or None
        Parameter index for ``"target"``.
    n_tubes : float
        Number of tubes ``n`` in ``M = M0 + n Σ w I`` (1 when none was given).
    n_params : int
        Number of parameters p.
    """

    weights: np.ndarray
    criterion_value: float
    max_sensitivity: float
    bound: float
    n_iter: int
    converged: bool
    criterion: str = "all"
    target: int | None = None
    n_tubes: float = 1.0
    n_params: int = 0

    @property
    def support(self) -> np.ndarray:
        """Indices of the candidates with positive weight."""
        return np.flatnonzero(self.weights > 0)

    @property
    def efficiency_lower_bound(self) -> float:
        """Guaranteed efficiency against the true optimum, ``k / (k − bound + max_sensitivity)``.

        For D with M0 = 0 this is Atwood's (1969) ``p / max_c d_c``; the general form follows from
        ``tr(M⁻¹ M*) ≤ tr(M⁻¹M0) + max d`` and Jensen's inequality over nodes (D), or the
        Cauchy–Schwarz bound ``v* ≥ v² / (e_tᵀM⁻¹M*M⁻¹e_t)`` (target). [derived]
        """
        k = float(self.n_params) if self.criterion == "all" else 1.0
        return float(k / (k - self.bound + self.max_sensitivity))

    def __repr__(self) -> str:
        idx = self.support
        pts = ", ".join(f"{i}: {w:.4f}" for i, w in zip(idx[:8], self.weights[idx[:8]], strict=True))
        more = ", ..." if idx.size > 8 else ""
        return (
            f"ApproximateDesign({self.criterion!r}, value={self.criterion_value:.6g}, "
            f"support={{{pts}{more}}}, max_sensitivity={self.max_sensitivity:.6g} vs "
            f"bound={self.bound:.6g}, converged={self.converged})"
        )


def _grad_hess(prob: Problem, Linv: np.ndarray, S: np.ndarray):
    """Gradient and Hessian of the loss w.r.t. the weights on the active set S (Newton phase)."""
    G, _, R, P = prob.F.shape
    m = S.size
    n = prob.n
    Z = np.matmul(rows_of(prob, S), Linv.transpose(0, 2, 1))  # (G, mR, P)
    K = np.matmul(Z, Z.transpose(0, 2, 1))  # F_S M⁻¹ F_Sᵀ, (G, mR, mR)
    if prob.criterion == "all":
        q = np.diagonal(K, axis1=1, axis2=2).reshape(G, m, R).sum(axis=2)
        d = n * (prob.nu @ q)
        H = n * n * np.einsum("g,gab->ab", prob.nu, (K * K).reshape(G, m, R, m, R).sum(axis=(2, 4)))
        return -d, H
    u, v = target_vector(prob, Linv)
    y = np.matmul(rows_of(prob, S), u[:, :, None])[:, :, 0]  # (G, mR)
    b = (y * y).reshape(G, m, R).sum(axis=2)
    d = n * ((prob.nu / v) @ b)
    yKy = (y[:, :, None] * K * y[:, None, :]).reshape(G, m, R, m, R).sum(axis=(2, 4))
    H = (
        n
        * n
        * (np.einsum("g,gab->ab", 2.0 * prob.nu / v, yKy) - np.einsum("g,ga,gb->ab", prob.nu / v**2, b, b))
    )
    return -d, H


# --------------------------------------------------------------------------------------------------
# Approximate designs
# --------------------------------------------------------------------------------------------------


def _loss_at(prob: Problem, w: np.ndarray, S: np.ndarray):
    Linv, logdet = factor(moment(prob, prob.n * w, S))
    return loss_of(prob, Linv, logdet), Linv


def _simplex_qp(H: np.ndarray, g: np.ndarray, w: np.ndarray) -> np.ndarray:
    """Minimise ``gᵀ(z − w) + ½ (z − w)ᵀH(z − w)`` over the simplex ``z ≥ 0, Σz = 1``.

    Primal active-set method for convex QP (Nocedal & Wright 2006, Numerical Optimization,
    Alg. 16.3), started at the feasible point ``w``; ``H`` must be positive definite. After each
    unblocked step z minimises the model on its face, so the bound multipliers decide at once
    whether a zero weight should be released (no test on a step length that ill-conditioning
    would keep from reaching zero)."""
    m = w.size
    z = w.copy()
    free = z > 0
    tiny = 1e-12 * max(float(np.abs(g).max()), 1e-300)
    for _ in range(4 * m + 20):
        fi = np.flatnonzero(free)
        grad = g + H @ (z - w)
        sol = np.linalg.solve(H[np.ix_(fi, fi)], np.column_stack([grad[fi], np.ones(fi.size)]))
        a, b = sol[:, 0], sol[:, 1]
        lam = a.sum() / b.sum()
        p = -(a - lam * b)
        neg = p < 0
        ratios = np.where(neg, -z[fi] / np.where(neg, p, -1.0), np.inf)
        j = int(np.argmin(ratios))
        alpha = min(1.0, float(ratios[j]))
        z[fi] = np.maximum(z[fi] + alpha * p, 0.0)
        if alpha < 1.0:
            z[fi[j]] = 0.0
            free[fi[j]] = False
            continue
        fixed = np.flatnonzero(~free)
        if fixed.size == 0:
            break
        reduced = (g + H @ (z - w))[fixed] - lam  # multipliers of z_i >= 0: release the most negative
        j = int(np.argmin(reduced))
        if reduced[j] >= -tiny:
            break
        free[fixed[j]] = True
    return z / z.sum()


def _newton(prob: Problem, S: np.ndarray, w: np.ndarray, budget: int):
    """Sequential-QP Newton on the weights of the active set S (in the spirit of Yang, Biedermann &
    Tang 2013, JASA 108:1411): each step minimises the quadratic model of the loss over the simplex
    (:func:`_simplex_qp`: points enter and leave the support freely), then an Armijo line search
    along the segment. Points still at zero weight at the end leave S. Returns (S, w, iterations)."""
    it = 0
    loss, Linv = _loss_at(prob, w, S)
    while it < budget and S.size > 1:
        it += 1
        g, H = _grad_hess(prob, Linv, S)
        m = S.size
        # Tiny Levenberg damping: H is only semi-definite when S holds more points than the
        # information has degrees of freedom (duplicates, crowded neighbours on a fine grid).
        H = H + (1e-10 * max(np.trace(H) / m, 1e-300)) * np.eye(m)
        step = _simplex_qp(H, g, w) - w
        slope = float(g @ step)
        if not slope < -1e-15 * prob.k:
            break
        alpha = 1.0
        while True:
            w_new = np.maximum(w + alpha * step, 0.0)
            w_new /= w_new.sum()
            loss_new, Linv_new = _loss_at(prob, w_new, S)
            if loss_new <= loss + 1e-4 * alpha * slope or alpha < 1e-10:
                break
            alpha *= 0.5
        if not loss_new < loss:  # no progress possible at this precision
            break
        w, loss, Linv = w_new, loss_new, Linv_new
        if alpha == 1.0 and -slope < 1e-13 * prob.k:
            break
    keep = w > 1e-15
    return S[keep], w[keep] / w[keep].sum(), it


def _vertex_newton(prob: Problem, S: np.ndarray, w: np.ndarray, budget: int, tol: float):
    """Newton on the active set S, adding the candidates of largest sensitivity until the
    equivalence gap on ``prob``'s candidates is at most ``tol · k``. Returns (S, w, iterations)."""
    it = 0
    while True:
        S, w, used = _newton(prob, S, w, max(budget - it, 1))
        it += used
        Linv, _ = factor(moment(prob, prob.n * w, S))
        d = sensitivities(prob, Linv)
        bound = float(w @ d[S])
        if d.max() - bound <= tol * prob.k or it >= budget:
            return S, w, it
        it += 1
        d[S] = -np.inf
        new = top_k(d, _ADD_PER_STEP)
        new = new[d[new] > bound]
        if new.size == 0:
            return S, w, it
        # New points enter at zero weight; the simplex QP of the next Newton step releases them.
        S = np.concatenate([S, new])
        w = np.concatenate([w, np.zeros(new.size)])


def _approximate(prob: Problem, max_iter: int, tol: float):
    """Rounds of: sensitivities on all candidates → watch list of the highest → multiplicative
    start (first round) and vertex-direction / Newton on the watch list. Sensitivities change
    smoothly as the design converges, so the candidates far below the bound rarely matter; the
    full scan at the start of every round certifies the result (Kiefer & Wolfowitz 1960)."""
    C, k = prob.C, prob.k
    rho = 1.0 if prob.criterion == "all" else 0.5
    watch_size = max(_WATCH_MIN, _WATCH_PER_PARAM * prob.P)
    S, w = np.arange(C), np.full(C, 1.0 / C)
    it = 0
    first = True
    while True:
        Linv, logdet = factor(moment(prob, prob.n * w, None if first else S))
        d = sensitivities(prob, Linv)
        bound = float(w @ d[S])
        gap = float(d.max() - bound)
        converged = gap <= tol * k
        if converged or it >= max_iter:
            break
        it += 1  # a round counts as an iteration, so max_iter always ends the loop
        watch = top_k(d, watch_size)
        if not first:
            watch = np.concatenate([watch, np.setdiff1d(S, watch)])
        sub = restrict(prob, watch)
        if first:
            # Multiplicative algorithm (Silvey, Titterington & Torsney 1978) from the uniform design
            # on the watch list: a few iterations locate the support; Newton then converges fast.
            ws = np.full(watch.size, 1.0 / watch.size)
            for _ in range(min(_MULT_ITER, max_iter)):
                it += 1
                Ls, _ = factor(moment(sub, sub.n * ws, None))
                ds = sensitivities(sub, Ls)
                ws = ws * (np.maximum(ds, 0.0) / (ws @ ds)) ** rho
                ws /= ws.sum()
            order = top_k(ws, _ACTIVE_MAX)
            local = order[ws[order] >= _ACTIVE_KEEP * ws[order[0]]]
            w_local = ws[local] / ws[local].sum()
            first = False
        else:
            pos = np.full(C, -1)
            pos[watch] = np.arange(watch.size)
            local, w_local = pos[S], w
        local, w_local, used = _vertex_newton(sub, local, w_local, max(max_iter - it, 1), 0.5 * tol)
        it += used
        S, w = watch[local], w_local
    weights = np.zeros(C)
    weights[S] = w
    return weights, loss_of(prob, Linv, logdet), float(d.max()), bound, it, bool(converged), Linv


def approximate_design(
    F,
    *,
    criterion: str,
    target: int | None = None,
    M0=None,
    node_weights=None,
    n_tubes: float | None = None,
    max_iter: int = 5000,
    tol: float = 1e-6,
) -> ApproximateDesign:
    """Optimal approximate design: weights on the candidates maximising the (robust) criterion.

    Multiplicative algorithm (Silvey, Titterington & Torsney 1978; Fellman 1974 for c-optimality)
    to locate the support, then Newton steps on the support weights with vertex-direction
    additions (Yang, Biedermann & Tang 2013), until the equivalence theorem (Kiefer & Wolfowitz
    1960) holds: ``max_c d_c − Σ w_c d_c ≤ tol · k`` (k = p for D, 1 for target).

    Parameters
    ----------
    F : array (C, R, P) or (G, C, R, P)
        Whitened Jacobian rows of each candidate (per prior node).
    criterion : {"target", "all"}
        ``"all"``: D-optimality; ``"target"``: minimise the variance of parameter ``target``.
    target : int, optional
        Parameter index, required for ``"target"``.
    M0 : array (P, P) or (G, P, P), optional
        Fixed prior / nuisance information added to every design.
    node_weights : array (G,), optional
        Prior node weights summing to 1 (default uniform).
    n_tubes : float, optional
        Total number of tubes ``n`` in ``M = M0 + n Σ w I``; required when M0 is non-zero.
    max_iter : int
        Cap on multiplicative + Newton iterations.
    tol : float
        Relative equivalence-theorem tolerance.

    Returns
    -------
    ApproximateDesign
    """
    prob = problem_of(
        F,
        criterion,
        target,
        M0,
        node_weights,
        1.0 if n_tubes is None else float(n_tubes),
        n_tubes is not None,
    )
    if not (isinstance(max_iter, (int, np.integer)) and max_iter >= 1):
        raise DesignError(f"max_iter must be a positive integer (got {max_iter!r})")
    if not (tol > 0):
        raise DesignError(f"tol must be positive (got {tol!r})")
    w, loss, max_d, bound, it, conv, Linv = _approximate(prob, int(max_iter), float(tol))
    return ApproximateDesign(
        w, value_of(prob, loss, Linv), max_d, bound, it, conv, criterion, prob.target, prob.n, prob.P
    )


def sensitivity(
    F,
    weights_or_counts,
    *,
    criterion: str,
    target: int | None = None,
    M0=None,
    node_weights=None,
    n_tubes: float | None = None,
) -> np.ndarray:
    """Directional derivatives of the criterion from a design towards each candidate, (C,).

    ``weights_or_counts`` is a weight or count vector x ≥ 0; ``n = n_tubes`` if given, else ``Σ x``, and
    ``M_g = M0_g + n Σ_c (x_c / Σx) I_gc``. With ``w = x / Σx``:

    * D: ``d_c = n Σ_g ν_g tr(M_g⁻¹ I_gc)``;
    * target: ``d_c = n Σ_g ν_g e_tᵀM_g⁻¹ I_gc M_g⁻¹e_t / v_g`` (divided by the variance because
      the robust criterion averages log v).

    The derivative of the criterion towards candidate c is ``d_c − Σ_c' w_c' d_c'`` (up to sign),
    so ``w`` is optimal iff ``max_c d_c ≤ Σ w d`` (the bound), which is p (D) or 1 (target) for a
    local design with M0 = 0: the classic ``f_cᵀM⁻¹f_c ≤ p`` of Kiefer & Wolfowitz (1960) and
    ``(f_cᵀM⁻¹e_t)² ≤ e_tᵀM⁻¹e_t`` for c-optimality (Pukelsheim 1993, Optimal Design of Experiments, ch. 2).
    """
    Fa = as_rows(F)
    x = design_vector(weights_or_counts, Fa.shape[1], "weights_or_counts")
    n = float(x.sum()) if n_tubes is None else float(n_tubes)
    prob = problem_of(Fa, criterion, target, M0, node_weights, n, True)
    sup = np.flatnonzero(x)
    Linv, _ = factor(moment(prob, n * x[sup] / x.sum(), sup))
    return sensitivities(prob, Linv)
