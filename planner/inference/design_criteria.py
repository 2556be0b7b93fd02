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

from ..inputs.choices import CRITERIA  # noqa: E402  (defined once, light for the command line)
from ..inputs.errors import KplanError

# Ridge per tube, relative to the average per-tube information of each parameter (module docstring).
_RIDGE = 1e-10
# Smallest eigenvalue of the scaled uniform-design information for the parameters to count as
# identifiable (100 × the ridge).
_IDENTIFIABLE = 1e-8


class DesignError(KplanError):
    """Invalid input to the optimal-design functions; the message names the fix."""


# --------------------------------------------------------------------------------------------------
# Results
# --------------------------------------------------------------------------------------------------


# --------------------------------------------------------------------------------------------------
# Problem set-up and validation
# --------------------------------------------------------------------------------------------------


class _Axis:
    """The length of one axis of a :class:`Problem`'s rows ``F`` (G, C, R, P), read as an attribute."""

    def __init__(self, index: int) -> None:
        self.index = index

    def __get__(self, problem: Problem, owner: type | None = None) -> int:
        return int(problem.F.shape[self.index])


@dataclass(frozen=True, eq=False)
class Problem:
    """Validated, rescaled problem. Internal loss L (minimised): D ``−Σν log det M̃``, target
    ``Σν log ṽ``, with ``M̃ = M_fixed + Σ x_c F̃_cᵀF̃_c`` in scaled parameters."""

    F: np.ndarray  # (G, C, R, P) scaled
    nu: np.ndarray  # (G,)
    M_fixed: np.ndarray  # (G, P, P) scaled M0 + ridge
    n: float
    criterion: str
    target: int | None
    offset: float  # reported value = sign · L + offset (see value_of)
    has_prior: bool

    G = _Axis(0)  # prior nodes averaged over (1 for a local design)
    C = _Axis(1)  # candidate tubes
    R = _Axis(2)  # readings per tube
    P = _Axis(3)  # parameters

    @property
    def k(self) -> float:
        return float(self.P) if self.criterion == "all" else 1.0


def as_rows(F) -> np.ndarray:
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


def _node_weights(node_weights, G: int) -> np.ndarray:
    """The prior nodes' weights (uniform when not given), checked: G non-negative numbers summing to 1."""
    if node_weights is None:
        return np.full(G, 1.0 / G)
    nu = np.asarray(node_weights, dtype=float).reshape(-1)
    if nu.shape != (G,):
        raise DesignError(f"node_weights has {nu.size} entries but F has {G} prior nodes")
    if np.any(~np.isfinite(nu)) or np.any(nu < 0) or abs(nu.sum() - 1.0) > 1e-9:
        raise DesignError("node_weights must be non-negative and sum to 1; normalise them")
    return nu


def _prior_information(M0, G: int, P: int) -> tuple[np.ndarray, bool]:
    """(M0 per node (G, P, P), whether it holds any information), checked: finite, symmetric, PSD."""
    if M0 is None:
        return np.zeros((G, P, P)), False
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
    return M0, bool(np.abs(M0).max() > 0)


def _parameter_scales(F: np.ndarray, M0: np.ndarray, n: float, criterion: str, t: int | None) -> np.ndarray:
    """(G, P) scale of each parameter at each node: the root of its per-tube information under the uniform
    design over all candidates (the prior spread per tube); refuses parameters no design can determine."""
    G, C, R, P = F.shape
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
    return s


def problem_of(F, criterion, target, M0, node_weights, n, n_given: bool) -> Problem:
    """The checked, scaled design problem (see the module docstring) from the functions' arguments."""
    F = as_rows(F)
    G, C, R, P = F.shape
    t = _check_criterion(criterion, target, P)
    nu = _node_weights(node_weights, G)
    M0, has_prior = _prior_information(M0, G, P)
    if has_prior and not n_given:
        raise DesignError(
            "n_tubes is required when M0 is given: the prior's weight relative to the tubes depends on "
            "how many tubes there are"
        )
    if not (np.isfinite(n) and n > 0):
        raise DesignError(f"n_tubes must be positive (got {n})")
    s = _parameter_scales(F, M0, n, criterion, t)
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
    return Problem(Fs, nu, M_fixed, float(n), criterion, t, offset, has_prior)


def _singular(prob: Problem, Linv: np.ndarray) -> bool:
    """Whether the ridge, not the tubes, sets the criterion. The ridge's share of the criterion is
    ``d log φ / d log δ``: D ``n δ / λ`` per eigen-direction of M̃; target ``n δ ‖M̃⁻¹e_t‖² / ṽ``. It
    is ~δ/λ for a determinable quantity and → 1 for an undeterminable one; flag shares above 1 %."""
    if prob.criterion == "all":
        share = prob.n * _RIDGE * np.linalg.norm(Linv, 2, axis=(1, 2)) ** 2  # n δ λ_max(M̃⁻¹)
    else:
        u, v = target_vector(prob, Linv)
        share = prob.n * _RIDGE * (u * u).sum(axis=1) / v
    return bool(np.any(share > 1e-2))


def value_of(prob: Problem, loss: float, Linv: np.ndarray) -> float:
    """Reported per-tube criterion from the internal loss: −inf (D) or +inf (target) for a design
    that cannot determine what the criterion measures."""
    if _singular(prob, Linv):
        return -np.inf if prob.criterion == "all" else np.inf
    return (-loss if prob.criterion == "all" else loss) + prob.offset


# --------------------------------------------------------------------------------------------------
# Core linear algebra (vectorised over nodes and candidates)
# --------------------------------------------------------------------------------------------------


def moment(prob: Problem, x: np.ndarray, idx: np.ndarray | None) -> np.ndarray:
    """``M̃ = M_fixed + Σ_{c∈idx} x_c I_c`` for each node (idx None: all candidates), (G, P, P)."""
    Fi = rows_of(prob, idx)
    xw = np.repeat(x, prob.R)[:, None]
    # (x·F)ᵀF with the weights applied to a contiguous copy, so the product goes to BLAS.
    return prob.M_fixed + np.matmul((Fi * xw).transpose(0, 2, 1), Fi)


def factor(M: np.ndarray):
    """Inverse Cholesky factor ``L⁻¹`` (M⁻¹ = L⁻ᵀL⁻¹) and log det per node."""
    L = np.linalg.cholesky(M)
    logdet = 2.0 * np.log(np.diagonal(L, axis1=1, axis2=2)).sum(axis=1)
    return np.linalg.inv(L), logdet


def loss_of(prob: Problem, Linv: np.ndarray, logdet: np.ndarray) -> float:
    if prob.criterion == "all":
        return float(-(prob.nu @ logdet))
    v = (Linv[:, :, prob.target] ** 2).sum(axis=1)
    return float(prob.nu @ np.log(v))


def target_vector(prob: Problem, Linv: np.ndarray):
    """``u = M̃⁻¹ e_t`` (G, P) and ``ṽ = e_tᵀ M̃⁻¹ e_t`` (G,)."""
    col = Linv[:, :, prob.target]
    u = np.einsum("gqp,gq->gp", Linv, col)
    return u, (col**2).sum(axis=1)


def rows_of(prob: Problem, idx) -> np.ndarray:
    """Scaled rows of the candidates ``idx`` (or all), as (G, c·R, P) for batched BLAS."""
    G, C, R, P = prob.F.shape
    if idx is None:
        return prob.F.reshape(G, C * R, P)
    return prob.F[:, idx].reshape(G, len(idx) * R, P)


def sensitivities(prob: Problem, Linv: np.ndarray, idx=None) -> np.ndarray:
    """Directional derivatives ``d_c`` (see :func:`sensitivity`) for candidates ``idx`` (all if None)."""
    G, _, R, P = prob.F.shape
    rows = rows_of(prob, idx)
    c = rows.shape[1] // R
    if prob.criterion == "all":
        Z = np.matmul(rows, Linv.transpose(0, 2, 1))
        q = np.einsum("gkp,gkp->gk", Z, Z).reshape(G, c, R).sum(axis=2)
        return prob.n * (prob.nu @ q)
    u, v = target_vector(prob, Linv)
    y = np.matmul(rows, u[:, :, None])[:, :, 0]
    b = (y * y).reshape(G, c, R).sum(axis=2)
    return prob.n * ((prob.nu / v) @ b)


def restrict(prob: Problem, idx: np.ndarray) -> Problem:
    """The same problem on the candidates ``idx`` only (rows copied once, contiguous)."""
    return replace(prob, F=np.ascontiguousarray(prob.F[:, idx]))


def top_k(values: np.ndarray, k: int) -> np.ndarray:
    """Indices of the k largest values, largest first (ties: lower index first)."""
    if k >= values.size:
        return np.argsort(-values, kind="stable")
    part = np.argpartition(-values, k - 1)[:k]
    return part[np.lexsort((part, -values[part]))]


# --------------------------------------------------------------------------------------------------
# Public API
# --------------------------------------------------------------------------------------------------


def design_vector(design, C: int, name: str) -> np.ndarray:
    x = np.asarray(design, dtype=float).reshape(-1)
    if x.shape != (C,):
        raise DesignError(f"{name} has {x.size} entries but there are {C} candidates")
    if np.any(~np.isfinite(x)) or np.any(x < 0) or x.sum() <= 0:
        raise DesignError(f"{name} must be non-negative with a positive sum")
    return x


def criterion_of_counts(
    F, counts, *, criterion: str, target: int | None = None, M0=None, node_weights=None
) -> float:
    """Per-tube criterion value of a design of ``n = Σ counts`` tubes (module docstring).

    ``counts`` may be real (an approximate design scaled to n tubes), e.g. ``n · weights``.
    """
    Fa = as_rows(F)
    x = design_vector(counts, Fa.shape[1], "counts")
    prob = problem_of(Fa, criterion, target, M0, node_weights, float(x.sum()), True)
    sup = np.flatnonzero(x)
    Linv, logdet = factor(moment(prob, x[sup], sup))
    return value_of(prob, loss_of(prob, Linv, logdet), Linv)
