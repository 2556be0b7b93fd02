"""Optimal exact designs (tube counts on the candidates): exchange with rank-one updates, started from the
efficient rounding of the approximate design and from random starts (see
:mod:`planner.inference.design_criteria`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..inputs.text import plural
from . import design_criteria as dc
from .approximate import ApproximateDesign, approximate_design
from .design_criteria import DesignError, Problem

# The exchange searches the _POOL_MIN (or _POOL_PER_TUBE × n) candidates of highest sensitivity
# under the approximate optimum before the final polish over all candidates.
_POOL_MIN = 600
_POOL_PER_TUBE = 40
# An exchange is accepted when it lowers the internal loss (log units) by more than this.
_IMPROVE = 1e-11


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

    def __repr__(self) -> str:
        idx = np.flatnonzero(self.counts)
        pts = ", ".join(f"{i}: {c}" for i, c in zip(idx[:12], self.counts[idx[:12]], strict=True))
        more = ", ..." if idx.size > 12 else ""
        return (
            f"ExactDesign(n={self.n_tubes}, value={self.criterion_value:.6g}, "
            f"efficiency={self.efficiency:.4f}, counts={{{pts}{more}}})"
        )


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

    def __init__(self, prob: Problem, x: np.ndarray, defer: bool = False):
        self.prob = prob
        self.x = x
        if not defer:
            self.refresh()

    def refresh(self):
        sup = np.flatnonzero(self.x)
        self.Linv, logdet = dc.factor(dc.moment(self.prob, self.x[sup].astype(float), sup))
        self.loss = dc.loss_of(self.prob, self.Linv, logdet)
        if self.prob.criterion == "target":
            self.u, self.v = dc.target_vector(self.prob, self.Linv)

    def parts(self, idx: np.ndarray | None = None):
        """For candidates idx (all if None): Z = F L⁻ᵀ (G, c, R, P), A = F M⁻¹ Fᵀ blocks
        (G, c, R, R), b = F u (G, c, R) (target only, else None)."""
        G, C, R, P = self.prob.F.shape
        c = C if idx is None else len(idx)
        rows = dc.rows_of(self.prob, idx)
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


def _exchange(prob: Problem, x: np.ndarray, max_steps: int) -> _State:
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


def efficient_rounding(w: np.ndarray, n: int) -> np.ndarray:
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


def _check_exact_args(n_tubes, rng, starts, max_sweeps) -> None:
    for name, v in (("n_tubes", n_tubes), ("starts", starts), ("max_sweeps", max_sweeps)):
        if isinstance(v, bool) or not isinstance(v, (int, np.integer)) or v < 1:
            raise DesignError(f"{name} must be a positive integer (got {v!r})")
    if not isinstance(rng, np.random.Generator):
        raise DesignError("rng must be a numpy.random.Generator, e.g. numpy.random.default_rng(seed)")


def _initial_counts(initial, C: int, n: int) -> np.ndarray | None:
    if initial is None:
        return None
    x = np.asarray(initial, dtype=np.int64).reshape(-1)
    if x.shape != (C,) or x.min() < 0 or x.sum() != n:
        raise DesignError(f"initial must be {C} non-negative counts summing to {n}")
    return x


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
    initial=None,
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
    initial : array_like of int, (C,), optional
        Counts of a design found otherwise (e.g. by :func:`coordinate_exchange`), run as one more
        start: the result is then never worse than it.

    Returns
    -------
    ExactDesign
    """
    _check_exact_args(n_tubes, rng, starts, max_sweeps)
    n = int(n_tubes)
    prob = dc.problem_of(F, criterion, target, M0, node_weights, float(n), True)
    if criterion == "all":
        _check_rank(prob, M0, n)
    approx = _approximate_for(
        prob, approx, n, F=F, criterion=criterion, target=target, M0=M0, node_weights=node_weights
    )
    w = approx.weights
    # Reference: the approximate design's loss at this n (identical scaling and ridge).
    sup_w = np.flatnonzero(w)
    Linv_a, logdet_a = dc.factor(dc.moment(prob, n * w[sup_w], sup_w))
    loss_approx = dc.loss_of(prob, Linv_a, logdet_a)
    x_init = _initial_counts(initial, prob.C, n)
    pool = _candidate_pool(prob, Linv_a, sup_w, n, x_init)
    max_steps = int(max_sweeps) * n
    best = _best_start(
        dc.restrict(prob, pool),
        w[pool],
        n,
        x_init if x_init is None else x_init[pool],
        (int(starts), rng),
        max_steps,
    )
    x = np.zeros(prob.C, dtype=np.int64)
    x[pool] = best.x
    if pool.size < prob.C:
        best = _exchange(prob, x, max_steps)
        x = best.x
    counts = x.astype(np.int64)
    value = dc.value_of(prob, best.loss, best.Linv)
    eff = float(np.exp((loss_approx - best.loss) / prob.k)) if np.isfinite(value) else 0.0
    return ExactDesign(counts, value, eff, int(starts))


def _check_rank(prob: Problem, M0, n: int) -> None:
    """Refuse a D-optimal ("all") problem that n tubes and the prior information cannot determine."""
    rank0 = (
        0
        if not prob.has_prior
        else int(np.linalg.matrix_rank(np.asarray(M0, dtype=float).reshape(-1, prob.P, prob.P)).min())
    )
    if rank0 + n * prob.R < prob.P:
        raise DesignError(
            f"{plural(n, 'tube')} × {plural(prob.R, 'reading')} cannot determine {prob.P} parameters; "
            "use at least "
            f"{plural(-(-(prob.P - rank0) // prob.R), 'tube')} or add prior information M0"
        )


def _approximate_for(prob: Problem, approx: ApproximateDesign | None, n: int, **problem) -> ApproximateDesign:
    """The approximate optimum for this problem: computed when omitted, else checked to belong to it."""
    if approx is None:
        return approximate_design(**problem, n_tubes=n)
    if (
        approx.weights.shape != (prob.C,)
        or approx.criterion != problem["criterion"]
        or approx.target != prob.target
    ):
        raise DesignError(
            "approx was computed for another problem; pass the approximate design of this "
            "F, criterion and target (or omit it)"
        )
    if prob.has_prior and not np.isclose(approx.n_tubes, n):
        raise DesignError(
            f"approx was computed for {approx.n_tubes:g} tubes but n_tubes={n}; with M0 the "
            f"optimum depends on n: recompute it with n_tubes={n}"
        )
    return approx


def _candidate_pool(prob: Problem, Linv_a, sup_w: np.ndarray, n: int, x_init) -> np.ndarray:
    """The candidates the starts run on: highest sensitivity under the approximate optimum (ordered, so
    that a permutation of the candidates permutes the pool), always including its support and the
    support of the given initial design."""
    d = dc.sensitivities(prob, Linv_a)
    size = min(prob.C, max(_POOL_MIN, _POOL_PER_TUBE * n))
    pool = dc.top_k(d, size)
    pool = np.concatenate([pool, np.setdiff1d(sup_w, pool)])
    if x_init is not None:
        pool = np.concatenate([pool, np.setdiff1d(np.flatnonzero(x_init), pool)])
    return pool


def _best_start(sub: Problem, w_pool, n: int, x_init_pool, runs, max_steps: int) -> _State:
    """The best of the exchange runs on the pool: from the efficient rounding of the approximate design,
    from ``starts − 1`` random designs and (when given) from the initial design; ``runs`` = (starts, rng)."""
    starts, rng = runs
    best = None
    for s in range(starts + (x_init_pool is not None)):
        if s == 0:
            x0 = efficient_rounding(w_pool, n)
        elif s == starts:
            assert x_init_pool is not None
            x0 = x_init_pool
        else:
            x0 = np.bincount(rng.integers(0, w_pool.size, size=n), minlength=w_pool.size).astype(np.int64)
        st = _exchange(sub, x0, max_steps)
        if best is None or st.loss < best.loss - _IMPROVE:
            best = st
    assert best is not None  # starts >= 1
    return best


# --------------------------------------------------------------------------------------------------
# Coordinate exchange: exact designs without a candidate list
# --------------------------------------------------------------------------------------------------


def _variants(pts: np.ndarray, move, levels, shifts) -> np.ndarray:
    """Every point's variants along one move, point after point: coordinate j at each of its levels (with
    "swap", the other coordinates of its group at 0), or coordinates j and k shifted together (k by
    ``sign`` times the shift)."""
    n = pts.shape[0]
    if move[0] in ("set", "swap"):
        j = move[1]
        lv = np.asarray(levels[j], dtype=float)
        var = np.repeat(pts, lv.size, axis=0)
        var[:, j] = np.tile(lv, n)
        if move[0] == "swap":  # the coordinates j stands in for go to 0
            var[:, [o for o in move[2] if o != j]] = 0.0
        return var
    _, j, k, sign = move
    var = np.repeat(pts, shifts.size, axis=0)
    var[:, j] += np.tile(shifts, n)
    var[:, k] += sign * np.tile(shifts, n)
    return var


def coordinate_exchange(
    info,
    levels,
    start,
    *,
    criterion: str,
    target: int | None = None,
    M0=None,
    node_weights=None,
    shifts=None,
    groups=None,
    max_sweeps: int = 20,
) -> tuple[np.ndarray, np.ndarray]:
    """Improve an exact design one coordinate of one point at a time (Meyer & Nachtsheim 1995,
    Technometrics 37:60), without ever listing the product of all coordinates' levels.

    A sweep visits each coordinate j: every point's variants — the point with coordinate j at each of
    its levels — are rated in one call of ``info``; then, point by point, the point moves to its best
    variant when that lowers the loss (the rank-2R exchange update of :class:`_State`, the same scores
    as :func:`exact_design`). With ``shifts``, a sweep also shifts neighbouring coordinates together
    (j and j+1, cyclically; by the same amount, or by opposite amounts), diagonal moves a single
    coordinate cannot make, as along a constraint on the total volume. With ``groups`` (coordinates that
    stand in for one another), a sweep also tries each coordinate in place of the others of its group
    (those set to 0, it at each of its levels). Sweeps repeat until none moves a
    point. A sweep's work grows linearly with the number of coordinates and of levels, not with their
    product.

    Parameters
    ----------
    info : callable
        ``info(points (m, d)) -> (F (G, m, R, P), ok (m,) bool)``: information rows of candidate points
        and whether each is allowed (False rows are never moved to, whatever their rows hold).
    levels : sequence of d arrays
        The values each coordinate may take.
    start : array_like, (n, d)
        The starting design's points (each a tube; replicates are separate rows); they must be allowed.
    criterion, target, M0, node_weights
        As in :func:`exact_design`.
    shifts : array_like, optional
        Amounts by which neighbouring coordinates are shifted together (none: coordinate moves only).
    groups : sequence of sequences of int, optional
        Coordinates that can replace one another (e.g. stocks of the same reagent at other
        concentrations).
    max_sweeps : int
        Cap on sweeps.

    Returns
    -------
    (points (n, d), F (G, n, R, P)) of the improved design.
    """
    pts = np.array(start, dtype=float, ndmin=2)
    n, d = pts.shape
    F_pts, ok = info(pts)
    if not np.all(ok):
        raise DesignError("coordinate_exchange: every starting point must be allowed")
    sh = None if shifts is None else np.asarray(shifts, dtype=float)
    moves = _moves(d, sh, groups)
    problem = (criterion, target, M0, node_weights)
    for _ in range(int(max_sweeps)):
        moved = False
        for mv in moves:
            var = _variants(pts, mv, levels, sh)
            pts, F_pts, moved_now = _move_points(info, pts, F_pts, var, problem)
            moved = moved or moved_now
        if not moved:
            break
    return pts, F_pts


def _moves(d: int, sh, groups) -> list[tuple]:
    """A sweep's moves: set each coordinate; with shifts, move neighbouring pairs together (both signs);
    with groups, put each coordinate in place of the others of its group."""
    moves: list[tuple] = [("set", j) for j in range(d)]
    if sh is not None and d >= 2:
        pairs = [(j, (j + 1) % d) for j in range(d if d > 2 else 1)]
        moves += [("move", j, k, sign) for j, k in pairs for sign in (-1.0, 1.0)]
    for group in groups or ():
        if len(group) > 1:
            moves += [("swap", j, tuple(group)) for j in group]
    return moves


def _move_points(info, pts: np.ndarray, F_pts: np.ndarray, var: np.ndarray, problem):
    """Point by point, move each point to its best allowed variant (``var``: m per point, in order) when
    that lowers the loss; returns the points, their rows and whether any moved. ``problem`` =
    (criterion, target, M0, node_weights)."""
    n = pts.shape[0]
    m = var.shape[0] // n
    Fv, okv = info(var)
    # one problem holds the design's points and every variant; the design is counts on it
    criterion, target, M0, node_weights = problem
    prob = dc.problem_of(
        np.concatenate([F_pts, Fv], axis=1), criterion, target, M0, node_weights, float(n), True
    )
    at = np.arange(n)  # where each point of the design sits among the problem's rows
    x = np.zeros(prob.C, dtype=np.int64)
    x[:n] = 1
    st = _State(prob, x)
    moved = False
    for i in range(n):
        block = np.arange(n + i * m, n + (i + 1) * m)
        delta = st.pair_delta(st.parts(block), st.parts(at[[i]]))[0]
        delta = np.where(okv[i * m : (i + 1) * m], delta, np.inf)
        b = int(np.argmin(delta))
        if delta[b] < -_IMPROVE:
            x[at[i]] -= 1
            at[i] = block[b]
            x[at[i]] += 1
            st = _State(prob, x)
            moved = True
    pts = np.where((at >= n)[:, None], var[np.maximum(at - n, 0)], pts)
    F_pts = np.where((at >= n)[None, :, None, None], Fv[:, np.maximum(at - n, 0)], F_pts)
    return pts, F_pts, moved
