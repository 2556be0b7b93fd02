"""Vectorised Levenberg–Marquardt fitting of many independent least-squares problems at once.

A Monte-Carlo assessment fits thousands of simulated experiments that share the number of
observations N and parameters P. Instead of looping over them, :func:`fit_many` runs one
Levenberg–Marquardt iteration on the whole batch: every trial keeps its own trust region, damping
parameter and stopping state, and the linear algebra is done on stacked ``(T, N, P)`` arrays.

Algorithm
---------
Levenberg (1944, Q. Appl. Math. 2:164) and Marquardt (1963, J. SIAM 11:431), in the trust-region
form with adaptive diagonal scaling of Moré (1978, "The Levenberg–Marquardt algorithm:
implementation and theory", Springer LNM 630:105): the damping parameter λ of each
trial is chosen so that the scaled step ``‖D p‖`` matches the trust radius Δ (Moré's safeguarded
Newton iteration, §5), Δ is updated from the ratio of actual to predicted reduction, and the
convergence tests are those of Moré's implementation (ftol, xtol, gtol). Where Moré factorises
``J`` by QR, this module takes one batched SVD of the column-scaled Jacobian per accepted step
(vectorised one-sided Jacobi rotations for P ≤ 3, Hestenes 1958; LAPACK above): the step for any λ
is then a closed form, so the λ search costs only O(P) per trial, and ``JᵀJ`` is never formed (its
condition number would be the square of ``J``'s).

Before that, every trial takes plain Gauss–Newton passes (:mod:`planner.inference.gauss_newton`):
trials that converge cleanly (each step confirmed by χ², a well-conditioned scaled normal matrix,
inside the bounds) finish there without the trust-region bookkeeping, and only the others continue
from their last accepted point through the iteration above.

The model is evaluated once per pass, on the whole batch unless it is declared ``rowwise``, so it may
close over per-trial data; trials that have stopped are passed their final parameters unchanged.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

from . import gauss_newton
from .fit_result import (
    CONVERGED_CODES,
    FitError,
    FitResult,
    batch_shapes,
    bounds_of,
    checked_shape,
    read_only,
    weighting,
)
from .gauss_newton import Batch, all_over_params, max_over_params, min_over_params
from .gauss_newton import put_rows as put
from .gauss_newton import take_rows as take
from .lm_steps import EPS, dot_p, factorise, finite_difference_jac, lm_parameter, row_norms

# Initial trust radius = _FACTOR * ‖D θ0‖: Moré's (1978) recommended factor.
_FACTOR = 100.0
# A step is accepted when actual/predicted reduction >= 1e-4 (Moré 1978, §4).
_ACCEPT_RATIO = 1e-4
# Trials first take plain Gauss–Newton passes (planner.inference.gauss_newton); only those that do not
# converge cleanly there go through the trust-region iteration. False: every trial takes the
# trust-region path (for comparing the two).
_FAST_PATH = True
# Covariances come from the inverse of the column-scaled normal matrix where its smallest pivot exceeds
# this (relative error ≤ ε/1e-6 ≈ 2e-10), from the SVD of the scaled Jacobian elsewhere.
_COV_PIVOT_MIN = 1e-6

# ----------------------------------------------------------------------------------------------
# the batched driver
# ----------------------------------------------------------------------------------------------


def fit_many(
    model: Callable[[np.ndarray], np.ndarray],
    theta0,
    y,
    *,
    jac: Callable[[np.ndarray], np.ndarray] | str | None = None,
    sigma=None,
    whiten=None,
    scale_cov: bool = True,
    max_iter: int = 200,
    xtol: float = 1e-10,
    ftol: float = 1e-12,
    gtol: float = 1e-10,
    lower=None,
    upper=None,
    rowwise: bool = False,
) -> FitResult:
    """Fit T independent nonlinear least-squares problems at once by Levenberg–Marquardt.

    Minimises ``‖W (y_t − f_t(θ_t))‖²`` for every trial t, with the trust-region
    Levenberg–Marquardt method and adaptive scaling of Moré (1978, Springer LNM
    630:105), after Levenberg (1944) and Marquardt (1963). Each trial has its own damping, trust
    radius and stopping; a trial that has stopped no longer changes.

    Parameters
    ----------
    model : callable
        ``model(theta)`` maps parameters (T, P) to predictions (T, N). It is always called with the
        whole batch (rows of stopped trials held fixed), so it may close over per-trial data such
        as each trial's own concentrations; see ``rowwise`` for models that do not.
    theta0 : array_like, (T, P) or (P,)
        Starting values (a single row is shared by every trial).
    y : array_like, (T, N) or (N,)
        Observations (a single row is shared by every trial, e.g. one data set from T starts).
    jac : callable, "2-point", "3-point" or None
        ``jac(theta)`` returning ∂f/∂θ of shape (T, N, P); None or "2-point" for forward
        differences (P extra model calls per Jacobian), "3-point" for central ones (2P).
    sigma : array_like, (N,) or (T, N), optional
        Standard deviations of y; residuals are divided by them.
    whiten : array_like, (N, N), optional
        Whitening matrix W, residual ``W (y − f)``; for correlated errors with covariance Σ use
        ``W = inv(cholesky(Σ))``. At most one of sigma and whiten.
    scale_cov : bool
        True: ``cov = (chi2/dof) (JᵀWᵀWJ)⁻¹`` (errors known up to a factor; NIST StRD convention).
        False: ``cov = (JᵀWᵀWJ)⁻¹`` (sigma / whiten are absolute).
    max_iter : int
        Maximum trial steps (model evaluations) per trial.
    xtol, ftol, gtol : float
        Moré's tests: trust radius ≤ xtol ‖Dθ‖; actual and predicted relative reduction of chi2
        ≤ ftol; largest cosine between the residual and a Jacobian column ≤ gtol.
    lower, upper : array_like, (P,), optional
        Simple bounds: each trial step is projected onto the box, and a parameter sitting on a
        bound that the descent direction pushes against is held fixed for the step (a simple
        active-set rule, cf. Bertsekas 1982, SIAM J. Control Optim. 20:221). Covariances of
        estimates that end on a bound are not meaningful.
    rowwise : bool
        True when ``model`` (and ``jac``) compute each row from that row of θ alone, closing over no
        per-trial data: they are then called with the rows of the trials still running only, which
        saves the work on finished trials. False (default): always the whole batch.

    Returns
    -------
    FitResult

    Raises
    ------
    FitError
        On inconsistent shapes, non-finite data, non-positive sigma, both sigma and whiten, fewer
        observations than parameters, or a start outside the bounds.
    """
    theta, yy = batch_shapes(theta0, y)
    n_trials, n_params = theta.shape
    n_obs = yy.shape[1]
    dof = _checked_settings(n_obs, n_params, scale_cov, max_iter, {"xtol": xtol, "ftol": ftol, "gtol": gtol})
    lo, hi = bounds_of(lower, upper, n_params)
    if np.any((theta < lo) | (theta > hi)):
        raise FitError("theta0 lies outside [lower, upper]; start inside the bounds.")
    weigh_res, weigh_jac = weighting(sigma, whiten, n_trials, n_obs)
    jac_kind = _jacobian_kind(jac)
    rcond = _rank_cutoff(jac_kind, n_obs, n_params)
    tols = (int(max_iter), float(xtol), float(ftol), float(gtol))
    with np.errstate(all="ignore"):  # wild trial points may overflow; such steps are rejected
        ev = _Evaluator(model, jac, jac_kind, bool(rowwise), (n_trials, n_obs, n_params), lo, hi)
        b = ev.start(theta, yy, weigh_res)
        slow = _iterate(b, ev, yy, weigh_res, weigh_jac, lo, hi, tols, rcond)
        return _finish(b, ev, slow, weigh_jac, dof, bool(scale_cov), rcond)


def _checked_settings(n_obs: int, n_params: int, scale_cov: bool, max_iter, tolerances: dict) -> int:
    """The degrees of freedom, after refusing too few observations and bad iteration or tolerance settings."""
    if n_obs < n_params:
        raise FitError(f"{n_obs} observations cannot determine {n_params} parameters; add observations.")
    dof = n_obs - n_params
    if scale_cov and dof == 0:
        raise FitError(
            "scale_cov=True needs N > P to estimate the error variance; pass scale_cov=False with "
            "absolute sigma, or add observations."
        )
    if int(max_iter) < 1:
        raise FitError(f"max_iter must be >= 1; got {max_iter}.")
    for name, tol in tolerances.items():
        if not (np.isfinite(tol) and tol >= 0):
            raise FitError(f"{name} must be a finite number >= 0; got {tol}.")
    return dof


def _jacobian_kind(jac) -> str:
    """The Jacobian's kind: "analytic" for a callable, else the difference formula ("2-point" by default)."""
    if callable(jac):
        return "analytic"
    if jac in (None, "2-point", "3-point"):
        return "3-point" if jac == "3-point" else "2-point"
    raise FitError(f"jac must be a callable, '2-point', '3-point' or None; got {jac!r}.")


def _rank_cutoff(jac_kind: str, n_obs: int, n_params: int) -> float:
    """Relative cut-off rcond of the singular values."""
    # Singular values below rcond·s_max are indistinguishable from zero given how accurately the
    # Jacobian is known: rounding for an analytic one (as in numpy.linalg.matrix_rank), the
    # truncation/rounding error of the difference formula otherwise.
    return {
        "analytic": max(n_obs, n_params) * EPS,
        "2-point": 10.0 * np.sqrt(EPS),
        "3-point": 10.0 * EPS ** (2.0 / 3.0),
    }[jac_kind]


class _Evaluator:
    """The model and its Jacobian at chosen rows of the batch.

    ``rowwise`` models are called with those rows only; the others always with the whole batch, the
    rows not asked for holding their current parameters (final ones for stopped trials)."""

    def __init__(self, model, jac, kind: str, rowwise: bool, shape, lo, hi):
        self.model, self.jac, self.kind, self.rowwise = model, jac, kind, rowwise
        self.n_trials, self.n_obs, self.n_params = shape
        self.lo, self.hi = lo, hi
        self.batch: Batch | None = None

    def _full(self, th: np.ndarray, rows: np.ndarray, current: np.ndarray) -> np.ndarray:
        if rows.size == self.n_trials:
            return th
        full = current.copy()
        full[rows] = th
        return full

    def _call_model(self, th: np.ndarray) -> np.ndarray:
        return checked_shape(self.model(th), (th.shape[0], self.n_obs), "model")

    def model_rows(self, th: np.ndarray, rows: np.ndarray) -> np.ndarray:
        if self.rowwise:
            return self._call_model(th)
        assert self.batch is not None
        full = self._call_model_whole(self._full(th, rows, self.batch.theta))
        return full if rows.size == self.n_trials else full.take(rows, axis=0)

    def _call_model_whole(self, th: np.ndarray) -> np.ndarray:
        return checked_shape(self.model(th), (self.n_trials, self.n_obs), "model")

    def jac_rows(self, th: np.ndarray, rows: np.ndarray, f_rows: np.ndarray) -> np.ndarray:
        if not self.rowwise:
            assert self.batch is not None
            th = self._full(th, rows, self.batch.theta)
            f_rows = self._full(f_rows, rows, self.batch.f)
        if self.kind == "analytic":
            out = checked_shape(self.jac(th), (th.shape[0], self.n_obs, self.n_params), "jac")
        else:
            call = self._call_model if self.rowwise else self._call_model_whole
            out = finite_difference_jac(call, th, f_rows, self.lo, self.hi, central=self.kind == "3-point")
        return out if self.rowwise or rows.size == self.n_trials else out.take(rows, axis=0)

    def start(self, theta: np.ndarray, yy: np.ndarray, weigh_res) -> Batch:
        """Model and residuals at the starting values (the Jacobians follow in ``refresh``)."""
        f = self._call_model(theta) if self.rowwise else self._call_model_whole(theta)
        r = weigh_res(f - yy, np.arange(self.n_trials))
        fnorm = row_norms(r)
        status = np.where(np.isfinite(fnorm), 0, -1)
        keep_f = not self.rowwise or self.kind != "analytic"  # f is read back only then
        self.batch = Batch.empty(theta, f, r, fnorm, status, self.n_obs, keep_f)
        return self.batch

    def refresh(self, rows: np.ndarray, slow: np.ndarray, weigh_jac) -> None:
        """The Jacobian at the current point of trials ``rows``, in one call: kept whole for the
        trust-region trials, as its normal equations for those on the fast path."""
        b = self.batch
        assert b is not None
        jac = self.jac_rows(take(b.theta, rows), rows, take(b.f, rows))
        on_tr = take(slow, rows)
        if not on_tr.any():
            gauss_newton.store_normal(b, rows, weigh_jac(jac, rows))
            return
        tr_rows = rows[on_tr]
        put(b.jac, tr_rows, jac[on_tr])
        b.jac_at[tr_rows] = True
        if not on_tr.all():
            fast_rows = rows[~on_tr]
            gauss_newton.store_normal(b, fast_rows, weigh_jac(jac[~on_tr], fast_rows))


def _iterate(b: Batch, ev: _Evaluator, yy, weigh_res, weigh_jac, lo, hi, tol, rcond) -> np.ndarray:
    """Passes over the running trials until every one has stopped; updates ``b`` in place and returns
    which trials ended on the trust-region path.

    Each pass moves every running trial by one step, one model call for all of them: a Gauss–Newton
    step for the trials on the fast path, a trust-region step (Moré 1978) for the others. A trial moves
    to the trust-region path for good as soon as its Gauss–Newton step is not clean; it sits out the
    pass while its Jacobian is computed (the steps it takes, and so its result, are the same)."""
    n_trials = b.theta.shape[0]
    tr = _TrustRegion(b, lo, hi, rcond, tol)
    slow = np.full(n_trials, not _FAST_PATH)  # trials on the trust-region path
    no_rows = np.zeros(0, dtype=int)
    need = np.flatnonzero(b.status == 0)
    while True:
        if need.size:  # Jacobians at the points the last pass moved to (all, on the first pass)
            ev.refresh(need, slow, weigh_jac)
        fast = np.flatnonzero((b.status == 0) & ~slow)
        prop = None
        if fast.size:
            tired = b.n_iter[fast] >= gauss_newton.MAX_PASSES
            out = fast[tired]
            prop, unclean = gauss_newton.propose(b, fast[~tired], lo, hi, tol[3])
            out = np.union1d(out, unclean) if out.size else unclean
            slow[out] = True
            b.jac_at[out] = False  # the trust-region path needs the Jacobian itself
        tr.factorise(np.flatnonzero((b.status == 0) & slow & tr.fresh & b.jac_at), weigh_jac)
        act = np.flatnonzero((b.status == 0) & slow & b.jac_at)
        g_rows = no_rows if prop is None else prop.act
        if act.size == 0 and g_rows.size == 0:
            need = np.flatnonzero((b.status == 0) & ~b.jac_at)
            if need.size:
                continue
            return slow
        th_tr = tr.propose(act) if act.size else np.zeros((0, b.theta.shape[1]))
        if prop is None or not act.size:
            rows, th = (act, th_tr) if prop is None else (g_rows, prop.theta)
            f_new = ev.model_rows(th, rows)
            y_rows = take(yy, rows)
        else:  # both paths: one call, rows in batch order
            rows = np.concatenate([g_rows, act])
            order = np.argsort(rows, kind="stable")
            back = np.empty_like(order)
            back[order] = np.arange(order.size)
            f_new = ev.model_rows(np.concatenate([prop.theta, th_tr])[order], rows[order])[back]
            y_rows = yy.take(rows, axis=0)
        r_new = weigh_res(f_new - y_rows, rows)
        k = g_rows.size
        if prop is not None and k:
            moved, rejected = gauss_newton.conclude(b, prop, f_new[:k], r_new[:k], tol)
            handed = gauss_newton.damp(b, moved, rejected)
            slow[handed] = True
            b.jac_at[handed] = False
        if act.size:
            tr.conclude(act, th_tr, f_new[k:], r_new[k:])
        need = np.flatnonzero((b.status == 0) & ~b.jac_at)


class _TrustRegion:
    """The batched Moré (1978) iteration: per-trial scaling D, trust radius Δ and damping λ, for the
    trials that leave the Gauss–Newton path. Every per-trial quantity is an array over all trials."""

    def __init__(self, b: Batch, lo, hi, rcond: float, tol) -> None:
        n_trials, n_params = b.theta.shape
        self.b, self.lo, self.hi, self.rcond, self.tol = b, lo, hi, rcond, tol
        self.diag = np.ones((n_trials, n_params))  # Moré's D, grown as max of Jacobian column norms
        self.delta = np.zeros(n_trials)  # trust radius, in the scaled variables D θ
        self.xnorm = np.zeros(n_trials)  # ‖D θ‖
        self.par = np.zeros(n_trials)  # λ of the last step, the next λ search starts from it
        self.first = np.ones(n_trials, dtype=bool)  # no step accepted yet
        self.fresh = np.ones(n_trials, dtype=bool)  # has a new Jacobian to factorise
        self.sv = np.ones((n_trials, n_params))
        self.bvec = np.zeros((n_trials, n_params))  # Vᵀ Jsᵀ r, the gradient in the singular basis
        self.vt = np.broadcast_to(np.eye(n_params), (n_trials, n_params, n_params)).copy()
        self.keep = np.ones((n_trials, n_params), dtype=bool)
        self.bounded = bool(np.isfinite(lo).any() or np.isfinite(hi).any())
        self.lam = np.zeros(0)  # λ of the steps last proposed

    def factorise(self, rows: np.ndarray, weigh_jac) -> None:
        """SVD of the scaled Jacobians of trials that moved (or just joined), and Moré's gtol test."""
        b, lo, hi = self.b, self.lo, self.hi
        if rows.size:
            jw = weigh_jac(take(b.jac, rows), rows)
            colnorm = np.sqrt(np.einsum("knp,knp->kp", jw, jw))  # NaN/inf if any entry is
            bad = ~all_over_params(np.isfinite(colnorm))
            if bad.any():
                b.status[rows[bad]] = -1
                rows, jw, colnorm = rows[~bad], jw[~bad], colnorm[~bad]
        if not rows.size:
            return
        new = take(self.first, rows)
        d = np.where(
            new[:, None], np.where(colnorm > 0, colnorm, 1.0), np.maximum(take(self.diag, rows), colnorm)
        )
        put(self.diag, rows, d)
        js = jw / d[:, None, :]
        if self.bounded:
            # a parameter on its bound whose descent direction points out of the box is held
            # fixed for this step (its column dropped), so the others take the step that is
            # optimal given it, instead of a clipped copy of the unconstrained step
            th_rows, grad = take(b.theta, rows), np.einsum("knp,kn->kp", js, take(b.r, rows))
            frozen = ((th_rows <= lo) & (grad > 0)) | ((th_rows >= hi) & (grad < 0))
            js = np.where(frozen[:, None, :], 0.0, js)
        s, v_t, bb = factorise(js, take(b.r, rows))
        put(self.sv, rows, s)
        put(self.vt, rows, v_t)
        put(self.bvec, rows, bb)
        put(self.keep, rows, s > self.rcond * max_over_params(s)[:, None])
        xn = row_norms(d * take(b.theta, rows))
        put(self.xnorm, rows, xn)
        dl = np.where(new, np.where(xn > 0, _FACTOR * xn, _FACTOR), take(self.delta, rows))
        put(self.delta, rows, dl)
        # gtol: largest |cos| between the residual vector and a Jacobian column (Moré 1978);
        # Jᵀr = D Jsᵀr = D V b
        jtr = np.abs(d * np.einsum("kij,ki->kj", v_t, bb))
        fn = take(b.fnorm, rows)
        denom = np.where(colnorm > 0, colnorm, np.inf) * fn[:, None]
        gnorm = np.where(fn > 0, max_over_params(jtr / np.where(denom > 0, denom, np.inf)), 0.0)
        code = np.where(gnorm <= self.tol[3], 4, np.where(gnorm <= EPS, 8, 0))
        put(b.status, rows, code)
        put(self.fresh, rows, False)

    def propose(self, act: np.ndarray) -> np.ndarray:
        """The trial points of the running trials ``act``: Moré's λ for the trust radius, projected
        onto the box."""
        s, bb, dg = take(self.sv, act), take(self.bvec, act), take(self.diag, act)
        lam, c = lm_parameter(s, bb, take(self.delta, act), take(self.par, act), take(self.keep, act))
        self.lam = lam
        q = -np.einsum("kij,ki->kj", take(self.vt, act), c)  # scaled step D p = −V c
        return np.clip(take(self.b.theta, act) + q / dg, self.lo, self.hi)

    def conclude(self, act: np.ndarray, th_new: np.ndarray, f_act: np.ndarray, r_try: np.ndarray) -> None:
        """Accept or reject the steps to ``th_new`` (model ``f_act``, weighted residuals ``r_try``), update
        the trust radii and apply the convergence tests (Moré 1978; MINPACK lmder)."""
        b = self.b
        max_iter, xtol, ftol, _ = self.tol
        s, bb, dg, lam = (
            take(self.sv, act),
            take(self.bvec, act),
            take(self.diag, act),
            self.lam,
        )
        vt_act = take(self.vt, act)
        q = dg * (th_new - take(b.theta, act))  # the projected step actually taken
        pnorm = row_norms(q)
        d_act = take(self.delta, act)
        d_act = np.where(take(self.first, act), np.minimum(d_act, pnorm), d_act)
        b.n_iter[act] += 1
        fn0 = take(b.fnorm, act)
        fn1 = row_norms(r_try)
        finite1 = np.isfinite(fn1)
        actred = np.where(finite1 & (0.1 * fn1 < fn0), 1.0 - (fn1 / fn0) ** 2, -1.0)
        # predicted reduction of the linear model, ‖r‖² − ‖r + Js q‖² = −(2 rᵀJs q + ‖Js q‖²),
        # in the singular basis w = Vᵀq: rᵀJs q = b·w and ‖Js q‖² = Σ s² w² (valid for the
        # projected step too)
        w = np.einsum("kij,kj->ki", vt_act, q)
        fn0_sq = np.where(fn0 > 0, fn0**2, 1.0)
        bw = dot_p(bb, w)
        sw = s * w
        prered = -(2.0 * bw + dot_p(sw, sw)) / fn0_sq
        dirder = bw / fn0_sq
        ratio = np.where(prered != 0, actred / prered, 0.0)
        # trust-radius update (Moré 1978, §4, with the quadratic-interpolation factor μ)
        shrink = ratio <= 0.25
        mu = np.where(actred >= 0, 0.5, 0.5 * dirder / (dirder + 0.5 * actred))
        mu = np.where(~finite1 | (0.1 * fn1 >= fn0) | ~(mu >= 0.1), 0.1, mu)
        mu = np.minimum(mu, 0.5)
        grow = ~shrink & ((lam == 0) | (ratio >= 0.75))
        new_delta = np.where(shrink, mu * np.minimum(d_act, pnorm / 0.1), np.where(grow, pnorm / 0.5, d_act))
        put(self.delta, act, new_delta)
        put(self.par, act, np.where(shrink, lam / mu, np.where(grow, 0.5 * lam, lam)))
        accept = (ratio >= _ACCEPT_RATIO) & finite1
        xn = self.xnorm.take(act, axis=0)
        if accept.all():
            acc, sel = act, slice(None)
        else:
            acc, sel = act[accept], accept
        if acc.size:
            put(b.theta, acc, th_new[sel])
            put(b.f, acc, f_act[sel])
            put(b.r, acc, r_try[sel])
            put(b.fnorm, acc, fn1[sel])
            xn_acc = row_norms(dg[sel] * th_new[sel])
            put(self.xnorm, acc, xn_acc)
            xn[accept] = xn_acc  # xn is a copy (take)
            put(self.first, acc, False)
            put(self.fresh, acc, True)
            b.jac_at[acc] = False
        # --- convergence tests, on accepted and rejected steps ---
        half_ratio_ok = 0.5 * ratio <= 1.0
        f_ok = (np.abs(actred) <= ftol) & (prered <= ftol) & half_ratio_ok
        x_ok = new_delta <= xtol * xn
        code = np.where(f_ok & x_ok, 3, np.where(x_ok, 2, np.where(f_ok, 1, 0)))
        f_eps = (np.abs(actred) <= EPS) & (prered <= EPS) & half_ratio_ok
        x_eps = new_delta <= EPS * xn
        code = np.where(code == 0, np.where(f_eps, 6, np.where(x_eps, 7, 0)), code)
        code = np.where((code == 0) & (take(b.n_iter, act) >= max_iter), 5, code)
        put(b.status, act, code)


def _finish(b: Batch, ev: _Evaluator, slow, weigh_jac, dof: int, scale_cov: bool, rcond: float) -> FitResult:
    """Covariance from the Jacobian at the final estimates (computed only where not yet in hand)."""
    theta, status, n_trials, n_params = b.theta, b.status, ev.n_trials, ev.n_params
    chi2 = b.fnorm**2
    cov = np.full((n_trials, n_params, n_params), np.nan)
    finite = all_over_params(np.isfinite(theta)) & np.isfinite(chi2)
    missing = np.flatnonzero(finite & ~b.jac_at)
    if missing.size:
        ev.refresh(missing, slow, weigh_jac)
    rows = np.flatnonzero(finite)
    colnorm = np.zeros((0, n_params))
    if rows.size:
        # the scaled normal matrices: kept by the fast path, from the Jacobian for the trust-region trials
        c, a = take(b.colnorm, rows), take(b.normal, rows)
        on_tr = take(slow, rows)
        if on_tr.any():
            c, a = c.copy(), a.copy()
            c[on_tr], a[on_tr] = gauss_newton.normal_matrix(weigh_jac(b.jac[rows[on_tr]], rows[on_tr]))
        # well-conditioned rows (most of a Monte Carlo batch): the inverse of the column-scaled normal
        # matrix is accurate to ε / pivot; the others take the SVD route below
        inv, pivot = gauss_newton.inverse_of(a)
        easy = (pivot > _COV_PIVOT_MIN) & all_over_params(c > 0)
        if easy.any():
            e_rows, d = rows[easy], c[easy]
            unit = inv[easy] / (d[:, :, None] * d[:, None, :])
            if scale_cov:
                unit = unit * (take(chi2, e_rows) / dof)[:, None, None]
            put(cov, e_rows, unit)
        rows, colnorm = rows[~easy], c[~easy]
        ok = all_over_params(np.isfinite(colnorm))
        rows, colnorm = rows[ok], colnorm[ok]
    if rows.size:
        fast = rows[~slow[rows]]  # ill-conditioned on the fast path (rare): the Jacobian itself
        if fast.size:
            b.jac[fast] = ev.jac_rows(take(theta, fast), fast, take(b.f, fast))
        jw = weigh_jac(b.jac[rows], rows)
    if rows.size:
        # column equilibration before the SVD keeps the inverse accurate when parameters differ
        # in magnitude by many decades (van der Sluis 1969, Numer. Math. 14:14)
        d = np.where(colnorm > 0, colnorm, 1.0)
        s, v_t, _ = factorise(jw / d[:, None, :], np.zeros(jw.shape[:2]))
        regular = min_over_params(s) > rcond * max_over_params(s)
        inv_s2 = np.where(regular[:, None], 1.0 / np.where(s > 0, s, 1.0) ** 2, np.nan)
        unit = np.einsum("kip,ki,kiq->kpq", v_t, inv_s2, v_t) / (d[:, :, None] * d[:, None, :])
        if scale_cov:
            unit = unit * (take(chi2, rows) / dof)[:, None, None]
        put(cov, rows, unit)
        singular = rows[~regular]
        status[singular] = np.where(status[singular] == 5, 5, -2)
    se = np.sqrt(np.diagonal(cov, axis1=1, axis2=2))
    converged = np.isin(status, CONVERGED_CODES) & finite & all_over_params(np.isfinite(se))
    return FitResult(
        theta=read_only(theta),
        cov=read_only(cov),
        se=read_only(se),
        chi2=read_only(chi2),
        dof=int(dof),
        n_iter=read_only(b.n_iter),
        converged=read_only(converged),
        status=read_only(status),
    )


def fit_one(model, theta0, y, **kwargs) -> FitResult:
    """:func:`fit_many` on a single problem (T = 1), with the trial axis removed from the result.

    ``model`` keeps the batched signature (1, P) → (1, N); a 1-D (N,) return is accepted, and
    likewise (N, P) from ``jac``. Keyword arguments are those of :func:`fit_many`; ``sigma`` is (N,).

    Returns
    -------
    FitResult
        theta (P,), cov (P, P), se (P,), chi2 (), n_iter (), converged (), status ().
    """
    theta = np.array(theta0, dtype=float, ndmin=1)
    if theta.ndim != 1:
        raise FitError(f"fit_one takes theta0 of shape (P,); got {theta.shape}. Use fit_many for batches.")
    y1 = np.array(y, dtype=float, ndmin=1)
    if y1.ndim != 1:
        raise FitError(f"fit_one takes y of shape (N,); got {y1.shape}. Use fit_many for batches.")

    def model1(th):
        out = np.asarray(model(th), dtype=float)
        return out[None, :] if out.ndim == 1 else out

    jac = kwargs.pop("jac", None)
    if callable(jac):
        jac_user = jac

        def jac(th):
            out = np.asarray(jac_user(th), dtype=float)
            return out[None] if out.ndim == 2 else out

    res = fit_many(model1, theta[None, :], y1[None, :], jac=jac, **kwargs)
    assert res.cov is not None and res.status is not None  # fit_many fills them
    return FitResult(
        theta=read_only(res.theta[0]),
        cov=read_only(res.cov[0]),
        se=read_only(res.se[0]),
        chi2=read_only(res.chi2[0]),
        dof=res.dof,
        n_iter=read_only(res.n_iter[0]),
        converged=read_only(res.converged[0]),
        status=read_only(res.status[0]),
    )
