"""Optimal designs on a finite candidate set: approximate (weights) and exact (tube counts).

Generic design mathematics, free of chemistry. Candidate ``c`` (a possible tube) brings the
information ``I_c = F_cᵀ F_c`` where ``F_c`` (R, P) holds its whitened Jacobian rows (R readings,
P parameters). A design of ``n`` tubes has information ``M = M0 + Σ_c n_c I_c``, where ``M0`` is a
fixed prior / nuisance information (it may be zero). A robust (pseudo-Bayesian) design averages the
criterion over G prior nodes with weights ``ν_g`` (Chaloner & Larntz 1989, J. Stat. Plan. Inference
21:191): ``F`` is then (G, C, R, P) and ``M0`` (G, P, P).

Criteria (``CRITERIA``)
-----------------------
``"all"``    D-optimality: maximise ``Σ_g ν_g log det M_g`` (all parameters).
``"target"`` c-optimality with ``c = e_t``: minimise the variance ``v_g = e_tᵀ M_g⁻¹ e_t`` of one
             parameter, the others being nuisance. Robust designs minimise ``Σ_g ν_g log v_g``: the
             logarithm makes each node count by its *relative* variance, so a node where the
             parameter is poorly determined in absolute terms cannot swamp the others (the average
             is invariant to rescaling the parameter at any node), and the problem stays convex
             (``1/v`` is concave in M, so ``log v`` is convex in the weights).

Normalisation (``criterion_value``)
-----------------------------------
Values are per unit tube, so they compare designs of different sizes:
D: ``Σ ν_g log det(M_g / n)``; target: ``Σ ν_g log(n v_g)``, i.e. the log of the variance that one
tube would give (the variance with ``n`` tubes is ``exp(value) / n`` for a local design).
An approximate design for a total of ``n`` tubes has ``M = M0 + n Σ_c w_c I_c``; ``n`` matters
only when ``M0 ≠ 0`` and is then required.

Numerical safeguards (documented choices)
-----------------------------------------
* Parameters are rescaled internally so that the information of the uniform design over all
  candidates has a unit diagonal; reported values are transformed back exactly.
* A ridge ``δ n I`` (δ = 1e-10, in those scaled units: 1e-10 of the average per-tube information of
  each parameter) is added to every ``M``. It keeps singular designs finite: random exchange starts
  with fewer tubes than parameters, and c-optimal designs, which are often singular (fewer support
  points than parameters; the variance of an estimable ``e_t`` is then the limit of the ridge
  variance). Its effect on a value is of order δ / λ_min(M / n) in the scaled units: negligible
  unless the design is nearly singular.

Algorithms
----------
Approximate designs (:func:`approximate_design`): rounds of (1) sensitivities of all candidates,
(2) a watch list of the candidates of highest sensitivity, (3) on the watch list, a few iterations
of the multiplicative algorithm ``w_c ← w_c (d_c / Σ w d)^ρ`` (Silvey, Titterington & Torsney
1978, Commun. Stat. A 7:1379; ρ = 1 for D, ρ = 1/2 for c-optimality after Fellman 1974, Comment.
Phys.-Math. Soc. Sci. Fenn. 44) to locate the support, then vertex-direction additions with
Newton steps on the support weights, in the spirit of Yang, Biedermann & Tang (2013, JASA
108:1411); each Newton step minimises the quadratic model over the simplex exactly (active-set QP,
Nocedal & Wright 2006, Alg. 16.3), so points leave and re-enter the support freely. A round ends
when the equivalence theorem (Kiefer & Wolfowitz 1960, Canad. J. Math. 12:363; Pukelsheim 1993,
Optimal Design of Experiments, for c-optimality and prior information) holds on the watch list;
the next full scan certifies it on all candidates, with Atwood's (1969, Ann. Math. Stat. 40:1570)
efficiency bound.

Exact designs (:func:`exact_design`): exchange with rank-R (one tube) and rank-2R (a tube moved)
determinant and variance updates (matrix determinant lemma, Woodbury identity), replicates
allowed. Greedy steps add the best candidate and remove the then-worst tube (Wynn 1970, Ann. Math.
Stat. 41:1655; Mitchell 1974, Technometrics 16:203); when they stall, a sweep over the support
points moves a tube to its best candidate whenever that improves (Fedorov 1972, Theory of Optimal
Experiments; Cook & Nachtsheim 1980, Technometrics 22:315). Starts: efficient rounding of the
approximate design (Pukelsheim & Rieder 1992, Biometrika 79:763) and seeded random starts, run on
the candidates the approximate design rates highest; the best design is then polished against all
candidates, so no single move of a tube to any candidate improves it.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

__all__ = [
    "CRITERIA",
    "ApproximateDesign",
    "DesignError",
    "ExactDesign",
    "approximate_design",
    "criterion_of_counts",
    "exact_design",
    "sensitivity",
]

CRITERIA = ("target", "all")

# Ridge per tube, relative to the average per-tube information of each parameter (module docstring).
_RIDGE = 1e-10
# Smallest eigenvalue of the scaled uniform-design information for the parameters to count as
# identifiable (100 × the ridge).
_IDENTIFIABLE = 1e-8
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
# The exchange searches the _POOL_MIN (or _POOL_PER_TUBE × n) candidates of highest sensitivity
# under the approximate optimum before the final polish over all candidates.
_POOL_MIN = 600
_POOL_PER_TUBE = 40
# An exchange is accepted when it lowers the internal loss (log units) by more than this.
_IMPROVE = 1e-11


class DesignError(ValueError):
    """Invalid input to the optimal-design functions; the message names the fix."""


# --------------------------------------------------------------------------------------------------
# Results
# --------------------------------------------------------------------------------------------------


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

    def summary(self) -> dict:
        """JSON-safe fields: support indices and weights, value, equivalence check."""
        idx = self.support
        return {
            "criterion": self.criterion,
            "target": self.target,
            "support": [int(i) for i in idx],
            "weights": [float(w) for w in self.weights[idx]],
            "criterion_value": float(self.criterion_value),
            "max_sensitivity": float(self.max_sensitivity),
            "bound": float(self.bound),
            "efficiency_lower_bound": self.efficiency_lower_bound,
            "n_iter": int(self.n_iter),
            "converged": bool(self.converged),
        }

    def __repr__(self) -> str:
        idx = self.support
        pts = ", ".join(f"{i}: {w:.4f}" for i, w in zip(idx[:8], self.weights[idx[:8]], strict=True))
        more = ", ..." if idx.size > 8 else ""
        return (
            f"ApproximateDesign({self.criterion!r}, value={self.criterion_value:.6g}, "
            f"support={{{pts}{more}}}, max_sensitivity={self.max_sensitivity:.6g} vs "
            f"bound={self.bound:.6g}, converged={self.converged})"
        )


@dataclass(frozen=True, eq=False)
class ExactDesign:
    """Exact design: a number of tubes at each candidate.

    Attributes
    ----------
    counts : ndarray of int, (C,)
        Tubes at each candidate; sums to ``n``.
    criterion_value : float
        Criterion per unit tube, same normalisation as :class:`ApproximateDesign`.
    efficiency : float
        Against the approximate optimum for the same ``n``: D ``(det M_exact / det M_approx)^(1/p)``
        (geometric mean over nodes); target ``v_approx / v_exact`` (geometric mean over nodes).
        In (0, 1] up to the approximate design's convergence tolerance.
    starts : int
        Exchange starts run (the first is the rounded approximate design, the rest random).
    """

    counts: np.ndarray
    criterion_value: float
    efficiency: float
    starts: int

    @property
    def n_tubes(self) -> int:
        return int(self.counts.sum())

    def summary(self) -> dict:
        """JSON-safe fields: support indices and counts, value, efficiency."""
        idx = np.flatnonzero(self.counts)
        return {
            "support": [int(i) for i in idx],
            "counts": [int(c) for c in self.counts[idx]],
            "n_tubes": self.n_tubes,
            "criterion_value": float(self.criterion_value),
            "efficiency": float(self.efficiency),
            "starts": int(self.starts),
        }

    def __repr__(self) -> str:
        idx = np.flatnonzero(self.counts)
        pts = ", ".join(f"{i}: {c}" for i, c in zip(idx[:12], self.counts[idx[:12]], strict=True))
        more = ", ..." if idx.size > 12 else ""
        return (
            f"ExactDesign(n={self.n_tubes}, value={self.criterion_value:.6g}, "
            f"efficiency={self.efficiency:.4f}, counts={{{pts}{more}}})"
        )


# --------------------------------------------------------------------------------------------------
# Problem set-up and validation
# --------------------------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class _Problem:
    """Validated, rescaled problem. Internal loss L (minimised): D ``−Σν log det M̃``, target
    ``Σν log ṽ``, with ``M̃ = M_fixed + Σ x_c F̃_cᵀF̃_c`` in scaled parameters."""

    F: np.ndarray  # (G, C, R, P) scaled
    nu: np.ndarray  # (G,)
    M_fixed: np.ndarray  # (G, P, P) scaled M0 + ridge
    n: float
    criterion: str
    target: int | None
    offset: float  # reported value = sign · L + offset (see _value)
    has_prior: bool

    @property
    def G(self) -> int:
        return self.F.shape[0]

    @property
    def C(self) -> int:
        return self.F.shape[1]

    @property
    def R(self) -> int:
        return self.F.shape[2]

    @property
    def P(self) -> int:
        return self.F.shape[3]

    @property
    def k(self) -> float:
        return float(self.P) if self.criterion == "all" else 1.0


def _as_F(F) -> np.ndarray:
    F = np.asarray(F, dtype=float)
    if F.ndim == 3:
        F = F[None]
    if F.ndim != 4:
        raise DesignError(
            f"F has shape {F.shape}; pass (C, R, P) Jacobian rows per candidate, or (G, C, R, P) "
            "for G prior nodes (use R = 1 for one reading per tube)"
        )
    if min(F.shape) == 0:
        raise DesignError(f"F has an empty axis (shape {F.shape}); give at least one candidate and parameter")
    if not np.all(np.isfinite(F)):
        raise DesignError("F contains NaN or infinite values; check the Jacobian of the candidates")
    return F


def _check_criterion(criterion: str, target, P: int) -> int | None:
    if criterion not in CRITERIA:
        raise DesignError(f"unknown criterion {criterion!r}; choose one of {', '.join(CRITERIA)}")
    if criterion == "target":
        if target is None or isinstance(target, bool) or not isinstance(target, (int, np.integer)):
            raise DesignError(f"criterion 'target' needs target=<parameter index 0..{P - 1}>")
        if not 0 <= int(target) < P:
            raise DesignError(f"target={target} is out of range; the model has parameters 0..{P - 1}")
        return int(target)
    return None


def _problem(F, criterion, target, M0, node_weights, n, n_given: bool) -> _Problem:
    F = _as_F(F)
    G, C, R, P = F.shape
    t = _check_criterion(criterion, target, P)
    if node_weights is None:
        nu = np.full(G, 1.0 / G)
    else:
        nu = np.asarray(node_weights, dtype=float).reshape(-1)
        if nu.shape != (G,):
            raise DesignError(f"node_weights has {nu.size} entries but F has {G} prior nodes")
        if np.any(~np.isfinite(nu)) or np.any(nu < 0) or abs(nu.sum() - 1.0) > 1e-9:
            raise DesignError("node_weights must be non-negative and sum to 1; normalise them")
    if M0 is None:
        M0 = np.zeros((G, P, P))
        has_prior = False
    else:
        M0 = np.asarray(M0, dtype=float)
        if M0.shape == (P, P):
            M0 = np.broadcast_to(M0, (G, P, P))
        if M0.shape != (G, P, P):
            raise DesignError(f"M0 has shape {M0.shape}; expected ({P}, {P}) or ({G}, {P}, {P})")
        if not np.all(np.isfinite(M0)):
            raise DesignError("M0 contains NaN or infinite values")
        scale = max(float(np.abs(M0).max()), 1e-300)
        if np.abs(M0 - M0.transpose(0, 2, 1)).max() > 1e-10 * scale:
            raise DesignError("M0 is not symmetric; pass an information matrix (e.g. a prior precision)")
        if np.linalg.eigvalsh(M0).min() < -1e-10 * scale:
            raise DesignError("M0 is not positive semi-definite; pass an information matrix")
        has_prior = bool(np.abs(M0).max() > 0)
    if has_prior and not n_given:
        raise DesignError(
            "n_tubes is required when M0 is given: the prior's weight relative to the tubes depends on "
            "how many tubes there are"
        )
    if not (np.isfinite(n) and n > 0):
        raise DesignError(f"n_tubes must be positive (got {n})")
    # Per-tube information of the uniform design over all candidates, with the prior spread per tube.
    F2 = F.reshape(G, C * R, P)
    avg = np.matmul(F2.transpose(0, 2, 1), F2) / C + M0 / n
    diag = np.diagonal(avg, axis1=1, axis2=2)
    if np.any(diag <= 0):
        g, p = np.argwhere(diag <= 0)[0]
        raise DesignError(
            f"no candidate (nor M0) carries information on parameter {p} at prior node {g}; remove "
            "that parameter, add prior information for it in M0, or widen the candidate set"
        )
    s = np.sqrt(diag)  # (G, P)
    scaled = avg / (s[:, :, None] * s[:, None, :])
    # The uniform design over all candidates is as informative as any design in every direction
    # (up to a factor C), so its degeneracy means no design can determine the parameters. Below
    # _IDENTIFIABLE the ridge, not the data, would set the answer.
    if criterion == "all" and np.linalg.eigvalsh(scaled).min() < _IDENTIFIABLE:
        raise DesignError(
            "the parameters are not all identifiable from the candidates (the information of the uniform "
            "design is singular); remove redundant parameters, add prior information in M0, or use "
            "criterion 'target' for the parameter of interest"
        )
    if criterion == "target":
        # Ridge share of the target variance under the uniform design (see _singular).
        u = np.linalg.inv(scaled + _RIDGE * np.eye(P))[:, :, t]
        if np.any(_RIDGE * (u * u).sum(axis=1) / u[:, t] > 1e-2):
            raise DesignError(
                f"parameter {t} cannot be determined from any design on these candidates (it is confounded "
                "with other parameters); add candidates that separate it, or prior information in M0"
            )
    Fs = F / s[:, None, None, :]
    M_fixed = M0 / (s[:, :, None] * s[:, None, :]) + n * _RIDGE * np.eye(P)
    # Nodes of zero weight do not enter the criterion: drop them (0 × log 0 would be NaN).
    live = nu > 0
    Fs, M_fixed, nu, s = Fs[live], M_fixed[live], nu[live], s[live]
    logs = np.log(s)
    if criterion == "all":
        offset = float(nu @ (2.0 * logs.sum(axis=1))) - P * np.log(n)
    else:
        offset = float(nu @ (-2.0 * logs[:, t])) + np.log(n)
    return _Problem(Fs, nu, M_fixed, float(n), criterion, t, offset, has_prior)


def _singular(prob: _Problem, Linv: np.ndarray) -> bool:
    """Whether the ridge, not the tubes, sets the criterion. The ridge's share of the criterion is
    ``d log φ / d log δ``: D ``n δ / λ`` per eigen-direction of M̃; target ``n δ ‖M̃⁻¹e_t‖² / ṽ``. It
    is ~δ/λ for a determinable quantity and → 1 for an undeterminable one; flag shares above 1 %."""
    if prob.criterion == "all":
        share = prob.n * _RIDGE * np.linalg.norm(Linv, 2, axis=(1, 2)) ** 2  # n δ λ_max(M̃⁻¹)
    else:
        u, v = _target_vec(prob, Linv)
        share = prob.n * _RIDGE * (u * u).sum(axis=1) / v
    return bool(np.any(share > 1e-2))


def _value(prob: _Problem, loss: float, Linv: np.ndarray) -> float:
    """Reported per-tube criterion from the internal loss: −inf (D) or +inf (target) for a design
    that cannot determine what the criterion measures."""
    if _singular(prob, Linv):
        return -np.inf if prob.criterion == "all" else np.inf
    return (-loss if prob.criterion == "all" else loss) + prob.offset


# --------------------------------------------------------------------------------------------------
# Core linear algebra (vectorised over nodes and candidates)
# --------------------------------------------------------------------------------------------------


def _moment(prob: _Problem, x: np.ndarray, idx: np.ndarray | None) -> np.ndarray:
    """``M̃ = M_fixed + Σ_{c∈idx} x_c I_c`` for each node (idx None: all candidates), (G, P, P)."""
    Fi = _rows(prob, idx)
    xw = np.repeat(x, prob.R)[:, None]
    # (x·F)ᵀF with the weights applied to a contiguous copy, so the product goes to BLAS.
    return prob.M_fixed + np.matmul((Fi * xw).transpose(0, 2, 1), Fi)


def _factor(M: np.ndarray):
    """Inverse Cholesky factor ``L⁻¹`` (M⁻¹ = L⁻ᵀL⁻¹) and log det per node."""
    L = np.linalg.cholesky(M)
    logdet = 2.0 * np.log(np.diagonal(L, axis1=1, axis2=2)).sum(axis=1)
    return np.linalg.inv(L), logdet


def _loss(prob: _Problem, Linv: np.ndarray, logdet: np.ndarray) -> float:
    if prob.criterion == "all":
        return float(-(prob.nu @ logdet))
    v = (Linv[:, :, prob.target] ** 2).sum(axis=1)
    return float(prob.nu @ np.log(v))


def _target_vec(prob: _Problem, Linv: np.ndarray):
    """``u = M̃⁻¹ e_t`` (G, P) and ``ṽ = e_tᵀ M̃⁻¹ e_t`` (G,)."""
    col = Linv[:, :, prob.target]
    u = np.einsum("gqp,gq->gp", Linv, col)
    return u, (col**2).sum(axis=1)


def _rows(prob: _Problem, idx) -> np.ndarray:
    """Scaled rows of the candidates ``idx`` (or all), as (G, c·R, P) for batched BLAS."""
    G, C, R, P = prob.F.shape
    if idx is None:
        return prob.F.reshape(G, C * R, P)
    return prob.F[:, idx].reshape(G, len(idx) * R, P)


def _sens(prob: _Problem, Linv: np.ndarray, idx=None) -> np.ndarray:
    """Directional derivatives ``d_c`` (see :func:`sensitivity`) for candidates ``idx`` (all if None)."""
    G, _, R, P = prob.F.shape
    rows = _rows(prob, idx)
    c = rows.shape[1] // R
    if prob.criterion == "all":
        Z = np.matmul(rows, Linv.transpose(0, 2, 1))
        q = np.einsum("gkp,gkp->gk", Z, Z).reshape(G, c, R).sum(axis=2)
        return prob.n * (prob.nu @ q)
    u, v = _target_vec(prob, Linv)
    y = np.matmul(rows, u[:, :, None])[:, :, 0]
    b = (y * y).reshape(G, c, R).sum(axis=2)
    return prob.n * ((prob.nu / v) @ b)


def _grad_hess(prob: _Problem, Linv: np.ndarray, S: np.ndarray):
    """Gradient and Hessian of the loss w.r.t. the weights on the active set S (Newton phase)."""
    G, _, R, P = prob.F.shape
    m = S.size
    n = prob.n
    Z = np.matmul(_rows(prob, S), Linv.transpose(0, 2, 1))  # (G, mR, P)
    K = np.matmul(Z, Z.transpose(0, 2, 1))  # F_S M⁻¹ F_Sᵀ, (G, mR, mR)
    if prob.criterion == "all":
        q = np.diagonal(K, axis1=1, axis2=2).reshape(G, m, R).sum(axis=2)
        d = n * (prob.nu @ q)
        H = n * n * np.einsum("g,gab->ab", prob.nu, (K * K).reshape(G, m, R, m, R).sum(axis=(2, 4)))
        return -d, H
    u, v = _target_vec(prob, Linv)
    y = np.matmul(_rows(prob, S), u[:, :, None])[:, :, 0]  # (G, mR)
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


def _loss_at(prob: _Problem, w: np.ndarray, S: np.ndarray):
    Linv, logdet = _factor(_moment(prob, prob.n * w, S))
    return _loss(prob, Linv, logdet), Linv


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


def _newton(prob: _Problem, S: np.ndarray, w: np.ndarray, budget: int):
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


def _restrict(prob: _Problem, idx: np.ndarray) -> _Problem:
    """The same problem on the candidates ``idx`` only (rows copied once, contiguous)."""
    return replace(prob, F=np.ascontiguousarray(prob.F[:, idx]))


def _top(values: np.ndarray, k: int) -> np.ndarray:
    """Indices of the k largest values, largest first (ties: lower index first)."""
    if k >= values.size:
        return np.argsort(-values, kind="stable")
    part = np.argpartition(-values, k - 1)[:k]
    return part[np.lexsort((part, -values[part]))]


def _vertex_newton(prob: _Problem, S: np.ndarray, w: np.ndarray, budget: int, tol: float):
    """Newton on the active set S, adding the candidates of largest sensitivity until the
    equivalence gap on ``prob``'s candidates is at most ``tol · k``. Returns (S, w, iterations)."""
    it = 0
    while True:
        S, w, used = _newton(prob, S, w, max(budget - it, 1))
        it += used
        Linv, _ = _factor(_moment(prob, prob.n * w, S))
        d = _sens(prob, Linv)
        bound = float(w @ d[S])
        if d.max() - bound <= tol * prob.k or it >= budget:
            return S, w, it
        it += 1
        d[S] = -np.inf
        new = _top(d, _ADD_PER_STEP)
        new = new[d[new] > bound]
        if new.size == 0:
            return S, w, it
        # New points enter at zero weight; the simplex QP of the next Newton step releases them.
        S = np.concatenate([S, new])
        w = np.concatenate([w, np.zeros(new.size)])


def _approximate(prob: _Problem, max_iter: int, tol: float):
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
        Linv, logdet = _factor(_moment(prob, prob.n * w, None if first else S))
        d = _sens(prob, Linv)
        bound = float(w @ d[S])
        gap = float(d.max() - bound)
        converged = gap <= tol * k
        if converged or it >= max_iter:
            break
        it += 1  # a round counts as an iteration, so max_iter always ends the loop
        watch = _top(d, watch_size)
        if not first:
            watch = np.concatenate([watch, np.setdiff1d(S, watch)])
        sub = _restrict(prob, watch)
        if first:
            # Multiplicative algorithm (Silvey, Titterington & Torsney 1978) from the uniform design
            # on the watch list: a few iterations locate the support; Newton then converges fast.
            ws = np.full(watch.size, 1.0 / watch.size)
            for _ in range(min(_MULT_ITER, max_iter)):
                it += 1
                Ls, _ = _factor(_moment(sub, sub.n * ws, None))
                ds = _sens(sub, Ls)
                ws = ws * (np.maximum(ds, 0.0) / (ws @ ds)) ** rho
                ws /= ws.sum()
            order = _top(ws, _ACTIVE_MAX)
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
    return weights, _loss(prob, Linv, logdet), float(d.max()), bound, it, bool(converged), Linv


# --------------------------------------------------------------------------------------------------
# Exact designs
# --------------------------------------------------------------------------------------------------


def _small_logdet(X: np.ndarray) -> np.ndarray:
    """log det of a stack of small matrices (…, r, r); −inf where det ≤ 0. Closed forms for r ≤ 2."""
    r = X.shape[-1]
    if r == 1:
        det = X[..., 0, 0]
    elif r == 2:
        det = X[..., 0, 0] * X[..., 1, 1] - X[..., 0, 1] * X[..., 1, 0]
    else:
        sign, ld = np.linalg.slogdet(X)
        return np.where(sign > 0, ld, -np.inf)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(det > 0, np.log(np.where(det > 0, det, 1.0)), -np.inf)


def _small_quad_inv(K: np.ndarray, beta: np.ndarray) -> np.ndarray:
    """``βᵀ K⁻¹ β`` for stacks of small symmetric K (…, r, r) and β (…, r); closed forms for r ≤ 2."""
    r = K.shape[-1]
    with np.errstate(divide="ignore", invalid="ignore"):
        if r == 1:
            return beta[..., 0] ** 2 / K[..., 0, 0]
        if r == 2:
            det = K[..., 0, 0] * K[..., 1, 1] - K[..., 0, 1] * K[..., 1, 0]
            num = (
                beta[..., 0] ** 2 * K[..., 1, 1]
                - beta[..., 0] * beta[..., 1] * (K[..., 0, 1] + K[..., 1, 0])
                + beta[..., 1] ** 2 * K[..., 0, 0]
            )
            return num / det
    return np.einsum("...i,...i->...", beta, np.linalg.solve(K, beta[..., None])[..., 0])


class _State:
    """Current exact design with its factor; quantities for scoring a candidate pool."""

    def __init__(self, prob: _Problem, x: np.ndarray, defer: bool = False):
        self.prob = prob
        self.x = x
        if not defer:
            self.refresh()

    def refresh(self):
        sup = np.flatnonzero(self.x)
        self.Linv, logdet = _factor(_moment(self.prob, self.x[sup].astype(float), sup))
        self.loss = _loss(self.prob, self.Linv, logdet)
        if self.prob.criterion == "target":
            self.u, self.v = _target_vec(self.prob, self.Linv)

    def parts(self, idx: np.ndarray | None = None):
        """For candidates idx (all if None): Z = F L⁻ᵀ (G, c, R, P), A = F M⁻¹ Fᵀ blocks
        (G, c, R, R), b = F u (G, c, R) (target only, else None)."""
        G, C, R, P = self.prob.F.shape
        c = C if idx is None else len(idx)
        rows = _rows(self.prob, idx)
        Zf = np.matmul(rows, self.Linv.transpose(0, 2, 1))
        Z = Zf.reshape(G, c, R, P)
        if R == 1:  # a stack of 1 × 1 blocks: a row sum beats 10⁵ tiny matrix products
            A = np.einsum("gkp,gkp->gk", Zf, Zf).reshape(G, c, 1, 1)
        else:
            A = np.matmul(Z, Z.transpose(0, 1, 3, 2))
        b = None
        if self.prob.criterion == "target":
            b = np.matmul(rows, self.u[:, :, None])[:, :, 0].reshape(G, c, R)
        return Z, A, b

    def add_delta(self, parts) -> np.ndarray:
        """Loss change for adding one tube at each pooled candidate (determinant lemma / Woodbury)."""
        _, A, b = parts
        eye = np.eye(A.shape[-1])
        if self.prob.criterion == "all":
            return -(self.prob.nu @ _small_logdet(eye + A))
        v_new = self.v[:, None] - _small_quad_inv(eye + A, b)
        return self.prob.nu @ self._log_ratio(v_new)

    def remove_delta(self, parts) -> np.ndarray:
        """Loss change for removing one tube from each given (support) candidate."""
        _, A, b = parts
        eye = np.eye(A.shape[-1])
        if self.prob.criterion == "all":
            return -(self.prob.nu @ _small_logdet(eye - A))
        # Removal is only defined while I − A stays positive definite.
        ok = np.isfinite(_small_logdet(eye - A))
        v_new = np.where(ok, self.v[:, None] + _small_quad_inv(eye - A, b), np.inf)
        return self.prob.nu @ self._log_ratio(v_new)

    def pair_delta(self, pool_parts, sup_parts) -> np.ndarray:
        """Loss change for moving one tube from each support point i to each pooled candidate j, (m, c).

        ``M' = M + F_jᵀF_j − F_iᵀF_i``: det M'/det M = det [[I + A_jj, A_ji], [−A_ij, I − A_ii]]
        and ``v' = v − βᵀ [[I + A_jj, A_ji], [A_ij, A_ii − I]]⁻¹ β`` with ``β = (F_j u, F_i u)``
        (matrix determinant lemma and Woodbury identity, rank 2R)."""
        Zj, Aj, bj = pool_parts
        Zi, Ai, bi = sup_parts
        G, c, R, P = Zj.shape
        m = Zi.shape[1]
        nu = self.prob.nu
        if R == 1:
            # Closed forms of the 2 × 2 determinant and quadratic form (Fedorov 1972, Δ function).
            aij = np.matmul(Zi[:, :, 0], Zj[:, :, 0].transpose(0, 2, 1))  # (G, m, c)
            ajj = Aj[:, None, :, 0, 0]
            aii = Ai[:, :, None, 0, 0]
            delta = (1.0 + ajj) * (1.0 - aii) + aij * aij
            if self.prob.criterion == "all":
                with np.errstate(divide="ignore", invalid="ignore"):
                    logd = np.where(delta > 0, np.log(np.where(delta > 0, delta, 1.0)), -np.inf)
                return -np.einsum("g,gmc->mc", nu, logd)
            bj_, bi_ = bj[:, None, :, 0], bi[:, :, None, 0]
            with np.errstate(divide="ignore", invalid="ignore"):
                quad = (bi_ * bi_ * (1.0 + ajj) - 2.0 * bi_ * bj_ * aij - bj_ * bj_ * (1.0 - aii)) / -delta
            ok = (1.0 - aii > 0) & (delta > 0)
            v_new = np.where(ok, self.v[:, None, None] - quad, np.inf)
            return np.einsum("g,gmc->mc", nu, self._log_ratio(v_new))
        # General R: explicit 2R × 2R blocks, (G, m, c, 2R, 2R).
        Aji = np.matmul(Zj[:, None], Zi.transpose(0, 1, 3, 2)[:, :, None])  # F_j M⁻¹ F_iᵀ
        eye = np.eye(R)
        Ajj = np.broadcast_to(Aj[:, None], (G, m, c, R, R))
        Aii = np.broadcast_to(Ai[:, :, None], (G, m, c, R, R))
        top = np.concatenate([eye + Ajj, Aji], axis=4)
        if self.prob.criterion == "all":
            bottom = np.concatenate([-Aji.transpose(0, 1, 2, 4, 3), eye - Aii], axis=4)
            return -np.einsum("g,gmc->mc", nu, _small_logdet(np.concatenate([top, bottom], axis=3)))
        bottom = np.concatenate([Aji.transpose(0, 1, 2, 4, 3), Aii - eye], axis=4)
        K = np.concatenate([top, bottom], axis=3)
        beta = np.concatenate(
            [np.broadcast_to(bj[:, None], (G, m, c, R)), np.broadcast_to(bi[:, :, None], (G, m, c, R))],
            axis=3,
        )
        ok = np.isfinite(_small_logdet(eye - Aii))
        v_new = np.where(ok, self.v[:, None, None] - _small_quad_inv(K, beta), np.inf)
        return np.einsum("g,gmc->mc", nu, self._log_ratio(v_new))

    def _log_ratio(self, v_new: np.ndarray) -> np.ndarray:
        """``log(v_new / v)`` per node (node axis first), +inf where the new variance is not positive."""
        v = self.v.reshape((-1,) + (1,) * (v_new.ndim - 1))
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.where(v_new > 0, np.log(np.where(v_new > 0, v_new, 1.0) / v), np.inf)


def _exchange(prob: _Problem, x: np.ndarray, max_steps: int) -> _State:
    """Exchange over all of ``prob``'s candidates until no single move of one tube improves.

    Greedy steps while they improve: add the best candidate j, remove the tube whose loss is then
    smallest (Wynn 1970; Mitchell 1974), both scored at once as the pair (i, j) by the rank-2R
    update. When that stalls, a sweep over the support points moves one tube from each to its best
    candidate whenever that improves (the modified Fedorov exchange of Cook & Nachtsheim 1980,
    Technometrics 22:315; pair scores as in Fedorov 1972). The search ends after a sweep without a
    move: the design is then optimal against every (support point, candidate) exchange. Every
    accepted move lowers the loss, so the search terminates."""
    st = _State(prob, x.copy())
    parts = st.parts()
    steps = 0

    def move(i: int, j: int) -> bool:
        nonlocal st, parts, steps
        trial = _State(prob, st.x.copy(), defer=True)
        trial.x[i] -= 1
        trial.x[j] += 1
        trial.refresh()
        if not trial.loss < st.loss - _IMPROVE:  # the update formula's prediction did not hold
            return False
        st, parts, steps = trial, trial.parts(), steps + 1
        return True

    while steps < max_steps:
        j = int(np.argmin(st.add_delta(parts)))
        sup = np.flatnonzero(st.x)
        col = st.pair_delta(tuple(None if p is None else p[:, [j]] for p in parts), st.parts(sup))[:, 0]
        col[sup == j] = np.inf  # removing the tube just added is no move
        a = int(np.argmin(col))
        if col[a] < -_IMPROVE and move(int(sup[a]), j):
            continue
        # Stalled: sweep the support points.
        moved = False
        for i in sup:
            if st.x[i] == 0 or steps >= max_steps:
                continue
            delta = st.pair_delta(parts, st.parts(np.array([i])))[0]
            delta[i] = np.inf  # moving a tube onto itself is no move
            j = int(np.argmin(delta))
            if delta[j] < -_IMPROVE and move(int(i), j):
                moved = True
        if not moved:
            break
    return st


def _efficient_rounding(w: np.ndarray, n: int) -> np.ndarray:
    """Efficient apportionment of n tubes to weights w (Pukelsheim & Rieder 1992, Biometrika 79:763)."""
    sup = np.flatnonzero(w > 0)
    ws = w[sup]
    c = np.maximum(np.ceil((n - sup.size / 2.0) * ws), 0).astype(int)
    while c.sum() < n:
        c[np.argmin(c / ws)] += 1
    while c.sum() > n:
        ratio = np.where(c > 0, (c - 1) / ws, -np.inf)
        c[np.argmax(ratio)] -= 1
    x = np.zeros(w.size, dtype=np.int64)
    x[sup] = c
    return x


# --------------------------------------------------------------------------------------------------
# Public API
# --------------------------------------------------------------------------------------------------


def _design_vector(design, C: int, name: str) -> np.ndarray:
    x = np.asarray(design, dtype=float).reshape(-1)
    if x.shape != (C,):
        raise DesignError(f"{name} has {x.size} entries but there are {C} candidates")
    if np.any(~np.isfinite(x)) or np.any(x < 0) or x.sum() <= 0:
        raise DesignError(f"{name} must be non-negative with a positive sum")
    return x


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
    prob = _problem(
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
        w, _value(prob, loss, Linv), max_d, bound, it, conv, criterion, prob.target, prob.n, prob.P
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
    Fa = _as_F(F)
    x = _design_vector(weights_or_counts, Fa.shape[1], "weights_or_counts")
    n = float(x.sum()) if n_tubes is None else float(n_tubes)
    prob = _problem(Fa, criterion, target, M0, node_weights, n, True)
    sup = np.flatnonzero(x)
    Linv, _ = _factor(_moment(prob, n * x[sup] / x.sum(), sup))
    return _sens(prob, Linv)


def criterion_of_counts(
    F, counts, *, criterion: str, target: int | None = None, M0=None, node_weights=None
) -> float:
    """Per-tube criterion value of a design of ``n = Σ counts`` tubes (module docstring).

    ``counts`` may be real (an approximate design scaled to n tubes), e.g. ``n · weights``.
    """
    Fa = _as_F(F)
    x = _design_vector(counts, Fa.shape[1], "counts")
    prob = _problem(Fa, criterion, target, M0, node_weights, float(x.sum()), True)
    sup = np.flatnonzero(x)
    Linv, logdet = _factor(_moment(prob, x[sup], sup))
    return _value(prob, _loss(prob, Linv, logdet), Linv)


def exact_design(
    F,
    n_tubes: int,
    *,
    criterion: str,
    target: int | None = None,
    M0=None,
    node_weights=None,
    rng: np.random.Generator,
    starts: int = 8,
    max_sweeps: int = 100,
    approx: ApproximateDesign | None = None,
) -> ExactDesign:
    """Optimal exact design of ``n_tubes`` tubes (replicates allowed) by exchange.

    Starts: efficient rounding of the approximate design (Pukelsheim & Rieder 1992), then
    ``starts − 1`` random designs drawn with ``rng``. Each start runs add-best / remove-worst
    steps (Wynn 1970; Mitchell 1974) and sweeps of single-tube moves (Fedorov 1972; Cook &
    Nachtsheim 1980) scored by rank-R / rank-2R determinant and Woodbury updates, on the
    candidates best rated by the approximate design; the best design is then polished against
    all candidates, so no move of one tube to any candidate improves it (a local optimum: exact
    design is NP-hard in general, hence the several starts). Same ``rng`` state → identical counts.

    Parameters
    ----------
    F, criterion, target, M0, node_weights
        As in :func:`approximate_design`.
    n_tubes : int
        Number of tubes n ≥ 1.
    rng : numpy.random.Generator
        Source of the random starts.
    starts : int
        Number of exchange starts (≥ 1).
    max_sweeps : int
        Cap on exchange steps per start, in units of n.
    approx : ApproximateDesign, optional
        The approximate optimum for the same F, criterion, target, M0, node weights and n
        (computed when omitted); ``efficiency`` is measured against it.

    Returns
    -------
    ExactDesign
    """
    if isinstance(n_tubes, bool) or not isinstance(n_tubes, (int, np.integer)) or n_tubes < 1:
        raise DesignError(f"n_tubes must be a positive integer (got {n_tubes!r})")
    if not isinstance(rng, np.random.Generator):
        raise DesignError("rng must be a numpy.random.Generator, e.g. numpy.random.default_rng(seed)")
    if isinstance(starts, bool) or not isinstance(starts, (int, np.integer)) or starts < 1:
        raise DesignError(f"starts must be a positive integer (got {starts!r})")
    if isinstance(max_sweeps, bool) or not isinstance(max_sweeps, (int, np.integer)) or max_sweeps < 1:
        raise DesignError(f"max_sweeps must be a positive integer (got {max_sweeps!r})")
    n = int(n_tubes)
    prob = _problem(F, criterion, target, M0, node_weights, float(n), True)
    if criterion == "all":
        rank0 = (
            0
            if not prob.has_prior
            else int(np.linalg.matrix_rank(np.asarray(M0, dtype=float).reshape(-1, prob.P, prob.P)).min())
        )
        if rank0 + n * prob.R < prob.P:
            raise DesignError(
                f"{n} tubes × {prob.R} reading(s) cannot determine {prob.P} parameters; use at least "
                f"{-(-(prob.P - rank0) // prob.R)} tubes or add prior information M0"
            )
    if approx is None:
        approx = approximate_design(
            F, criterion=criterion, target=target, M0=M0, node_weights=node_weights, n_tubes=n
        )
    else:
        if approx.weights.shape != (prob.C,) or approx.criterion != criterion or approx.target != prob.target:
            raise DesignError(
                "approx was computed for another problem; pass the approximate design of this "
                "F, criterion and target (or omit it)"
            )
        if prob.has_prior and not np.isclose(approx.n_tubes, n):
            raise DesignError(
                f"approx was computed for {approx.n_tubes:g} tubes but n_tubes={n}; with M0 the "
                f"optimum depends on n: recompute it with n_tubes={n}"
            )
    w = approx.weights
    # Reference: the approximate design's loss at this n (identical scaling and ridge).
    sup_w = np.flatnonzero(w)
    Linv_a, logdet_a = _factor(_moment(prob, n * w[sup_w], sup_w))
    loss_approx = _loss(prob, Linv_a, logdet_a)
    # Candidate pool: highest sensitivity under the approximate optimum (ordered, so that a permutation
    # of the candidates permutes the pool), always including its support. The starts run on the
    # pool; the best is then polished on all candidates.
    d = _sens(prob, Linv_a)
    size = min(prob.C, max(_POOL_MIN, _POOL_PER_TUBE * n))
    pool = _top(d, size)
    pool = np.concatenate([pool, np.setdiff1d(sup_w, pool)])
    sub = _restrict(prob, pool)
    max_steps = int(max_sweeps) * n
    best = None
    for s in range(int(starts)):
        if s == 0:
            x0 = _efficient_rounding(w[pool], n)
        else:
            x0 = np.bincount(rng.integers(0, pool.size, size=n), minlength=pool.size).astype(np.int64)
        st = _exchange(sub, x0, max_steps)
        if best is None or st.loss < best.loss - _IMPROVE:
            best = st
    x = np.zeros(prob.C, dtype=np.int64)
    x[pool] = best.x
    if pool.size < prob.C:
        best = _exchange(prob, x, max_steps)
        x = best.x
    counts = x.astype(np.int64)
    value = _value(prob, best.loss, best.Linv)
    eff = float(np.exp((loss_approx - best.loss) / prob.k)) if np.isfinite(value) else 0.0
    return ExactDesign(counts, value, eff, int(starts))
