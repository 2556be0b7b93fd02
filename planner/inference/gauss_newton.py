"""The fast path of :func:`planner.inference.lm.fit_many`: lean Gauss–Newton / Marquardt passes.

Most trials of a Monte Carlo assessment start close to their optimum and converge in a handful of
full Gauss–Newton steps (Björck 1996, Numerical Methods for Least Squares Problems, §9.2), each of
which lowers χ². For them the trust region, the damping search, the SVD and the bound handling of
Moré's (1978) Levenberg–Marquardt are overhead. A pass here takes, for every trial on this path, the
step of the column-scaled normal equations (columns scaled to unit norm, van der Sluis 1969, Numer.
Math. 14:14) with Marquardt's (1963, J. SIAM 11:431) damping ``A + λI`` (λ = 0 first: a Gauss–Newton
step; ×10 after a step χ² does not confirm, ÷10 after one it does), solved by a vectorised LDLᵀ over
the few parameters, and keeps it when χ² drops by at least 10⁻⁴ of the predicted reduction (Moré's
acceptance rule). The convergence tests are Moré's, evaluated as his implementation would for such a
step (an accepted step with ratio ≥ 3/4 sets the trust radius to 2‖D p‖).

A trial leaves this path, unchanged at its last accepted point, as soon as it is not clean: a nearly
singular scaled normal matrix (a relative pivot below ``PIVOT_MIN``, i.e. cond(J D⁻¹)² above 10¹⁰,
where the normal equations would lose the step's accuracy), a step that leaves the box, a non-finite
value, λ above ``LAMBDA_MAX`` (χ² keeps refusing the steps) or ``MAX_PASSES`` passes. The caller then
finishes it with the full trust-region machinery. The optimum does not depend on how the steps are
found (Jᵀ r = 0 is evaluated from the residuals directly), so both paths agree within their shared
tolerances.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import reduce

import numpy as np

_EPS = float(np.finfo(float).eps)
PIVOT_MIN = 1e-10  # see the module docstring
# Marquardt's damping of the fast path: λ starts at 0 (Gauss–Newton), becomes LAMBDA_START after the
# first step χ² does not confirm, ×10 per further rejection, ÷10 per accepted step (0 below LAMBDA_MIN,
# where the step is Gauss–Newton's to rounding); past LAMBDA_MAX the trial is handed over.
LAMBDA_START = 1e-3
LAMBDA_MIN = 1e-7
LAMBDA_MAX = 1e4
MAX_PASSES = 30  # a trial still running after this many clean steps converges slowly: hand it over
_ACCEPT_RATIO = 1e-4  # Moré (1978, §4)


@dataclass
class Batch:
    """The mutable state of one batched fit, shared by the fast path and the trust-region driver.

    theta (T, P), f (T, N) model values, r (T, N) weighted residuals, fnorm (T,) ‖r‖, status (T,)
    (0 running, else a STATUS_MESSAGES code), n_iter (T,), jac (T, N, P) the raw Jacobian of the
    trust-region trials, jac_at (T,) True where the Jacobian at the current theta is in hand, and
    damping (T,). A trial on the fast path keeps no Jacobian, only what its steps and covariance need
    (the normal equations of :func:`store_normal`: colnorm (T, P), normal (T, P, P), grad (T, P)); the
    trust-region path computes the Jacobian again for a trial it takes over. ``f`` is kept up to date
    only where the model is evaluated on the whole batch or differentiated numerically (``keep_f``).
    """

    theta: np.ndarray
    f: np.ndarray
    r: np.ndarray
    fnorm: np.ndarray
    status: np.ndarray
    n_iter: np.ndarray
    jac: np.ndarray
    jac_at: np.ndarray
    damping: np.ndarray  # (T,) Marquardt's λ of the fast path, 0 for a Gauss–Newton step
    colnorm: np.ndarray  # (T, P) column norms D of the weighted Jacobian (fast path)
    normal: np.ndarray  # (T, P, P) scaled normal matrix D⁻¹ JᵀJ D⁻¹ (fast path)
    grad: np.ndarray  # (T, P) scaled gradient D⁻¹ Jᵀ r (fast path)
    keep_f: bool = True

    @classmethod
    def empty(cls, theta, f, r, fnorm, status, n_obs: int, keep_f: bool) -> Batch:
        """A batch at its starting values, no step taken and no Jacobian in hand."""
        n_trials, n_params = theta.shape
        return cls(
            theta,
            f,
            r,
            fnorm,
            status,
            np.zeros(n_trials, dtype=int),
            np.zeros((n_trials, n_obs, n_params)),
            np.zeros(n_trials, dtype=bool),
            np.zeros(n_trials),
            np.ones((n_trials, n_params)),
            np.zeros((n_trials, n_params, n_params)),
            np.zeros((n_trials, n_params)),
            keep_f,
        )


def _column_dots(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """``Σ_n a[k, n] b[k, n]`` (einsum over the short axis is faster than a reduction)."""
    return np.einsum("kn,kn->k", a, b)


# Reductions over the short parameter axis of (k, P) arrays, column by column: numpy's reduce along a
# short last axis is an order of magnitude slower on tall stacks.
def max_over_params(a: np.ndarray) -> np.ndarray:
    return reduce(np.maximum, a.T)


def min_over_params(a: np.ndarray) -> np.ndarray:
    return reduce(np.minimum, a.T)


def all_over_params(a: np.ndarray) -> np.ndarray:
    return reduce(np.logical_and, a.T)


def dot_p(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Row dot products of (k, P) stacks: column by column for P ≤ 2 (several times faster than einsum,
    and the same sum in the same order), einsum above (whose summation order differs)."""
    if a.shape[-1] <= 2:
        return reduce(np.add, (a * b).T)
    return np.einsum("kp,kp->k", a, b)


def _normal_equations(jw: np.ndarray, r: np.ndarray | None):
    """Column norms c (k, P), scaled normal matrix A (k, P, P) (unit diagonal) and gradient g = Jsᵀr
    (zeros when r is None)."""
    k, _, n_params = jw.shape
    cols = [jw[:, :, p] for p in range(n_params)]
    c = np.empty((k, n_params))
    g = np.empty((k, n_params))
    for p, x in enumerate(cols):  # column by column: einsum over the short axis beats a reduction
        c[:, p] = _column_dots(x, x)
        g[:, p] = 0.0 if r is None else _column_dots(x, r)
    np.sqrt(c, out=c)
    safe = np.where(c > 0, c, 1.0)
    g /= safe
    a = np.empty((k, n_params, n_params))
    for i in range(n_params):
        a[:, i, i] = 1.0
        for j in range(i + 1, n_params):
            a[:, i, j] = a[:, j, i] = _column_dots(cols[i], cols[j]) / (safe[:, i] * safe[:, j])
    return c, a, g


def _ldl_solve(a: np.ndarray, rhs: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Solve A x = rhs for stacks of small symmetric positive definite A (k, P, P) by LDLᵀ (closed
    form for P ≤ 2).

    Returns (x (k, P), smallest relative pivot d_j / A_jj (k,)); a pivot ≤ 0 leaves x meaningless (the
    caller checks)."""
    k, n = rhs.shape
    if n == 1:
        d0 = a[:, 0, 0]
        return rhs / d0[:, None], np.ones(k)
    if n == 2:
        d0 = a[:, 0, 0]
        low = a[:, 0, 1] / d0
        d1 = a[:, 1, 1] - low * a[:, 0, 1]
        x1 = (rhs[:, 1] - low * rhs[:, 0]) / np.where(d1 > 0, d1, 1.0)
        return np.stack([rhs[:, 0] / d0 - low * x1, x1], axis=1), d1 / a[:, 1, 1]
    lower = np.zeros((k, n, n))
    d = np.empty((k, n))
    for j in range(n):  # loops over the parameters only; each line acts on every trial
        dj = a[:, j, j] - np.einsum("kp,kp,kp->k", lower[:, j, :j], lower[:, j, :j], d[:, :j])
        d[:, j] = dj
        safe = np.where(dj > 0, dj, 1.0)
        for i in range(j + 1, n):
            s = a[:, i, j] - np.einsum("kp,kp,kp->k", lower[:, i, :j], lower[:, j, :j], d[:, :j])
            lower[:, i, j] = s / safe
    y = np.empty((k, n))
    for i in range(n):
        y[:, i] = rhs[:, i] - np.einsum("kp,kp->k", lower[:, i, :i], y[:, :i])
    z = y / np.where(d > 0, d, 1.0)
    x = np.empty((k, n))
    for i in reversed(range(n)):
        x[:, i] = z[:, i] - np.einsum("kp,kp->k", lower[:, i + 1 :, i], x[:, i + 1 :])
    return x, min_over_params(d / np.diagonal(a, axis1=1, axis2=2))


def scaled_inverse(jw: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(column norms c (k, P), inverse of the scaled normal matrix (k, P, P), smallest LDLᵀ pivot (k,)).

    ``(JᵀJ)⁻¹ = D⁻¹ A⁻¹ D⁻¹`` with ``A = D⁻¹ JᵀJ D⁻¹``; the inverse has relative error about
    ε / pivot (Higham 2002, Accuracy and Stability of Numerical Algorithms, §10.1), so the caller uses
    it only where the pivot is comfortably large."""
    c, a, _ = _normal_equations(jw, None)
    inv, piv = inverse_of(a)
    return c, inv, piv


def inverse_of(a: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(inverse (k, P, P), smallest LDLᵀ pivot (k,)) of scaled normal matrices A (unit diagonal)."""
    k, n_params = a.shape[:2]
    if n_params == 2:
        a01 = a[:, 0, 1]
        piv = 1.0 - a01 * a01
        inv = np.empty((k, 2, 2))
        inv[:, 0, 0] = inv[:, 1, 1] = 1.0 / np.where(piv > 0, piv, 1.0)
        inv[:, 0, 1] = inv[:, 1, 0] = -a01 * inv[:, 0, 0]
        return inv, piv
    cols = [_ldl_solve(a, np.broadcast_to(np.eye(n_params)[j], (k, n_params))) for j in range(n_params)]
    return np.stack([x for x, _ in cols], axis=2), cols[0][1]


def normal_matrix(jw: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(column norms c (k, P), scaled normal matrix A (k, P, P)) of weighted Jacobians."""
    c, a, _ = _normal_equations(jw, None)
    return c, a


def store_normal(b: Batch, rows: np.ndarray, jw: np.ndarray) -> None:
    """Keep the normal equations of the weighted Jacobians ``jw`` of fast trials ``rows`` at their current
    point: all their Gauss–Newton steps (while χ² refuses a step, the point and these stay) and their
    covariance need."""
    c, a, g = _normal_equations(jw, take_rows(b.r, rows))
    put_rows(b.colnorm, rows, c)
    put_rows(b.normal, rows, a)
    put_rows(b.grad, rows, g)
    put_rows(b.jac_at, rows, True)


def take_rows(a: np.ndarray, rows: np.ndarray) -> np.ndarray:
    """Rows of ``a`` for reading: ``take`` (several times faster than fancy indexing on tall stacks), or
    ``a`` itself when ``rows`` (sorted and unique, as from flatnonzero) is every row."""
    return a if rows.size == a.shape[0] else a.take(rows, axis=0)


def put_rows(a: np.ndarray, rows: np.ndarray, values) -> None:
    """``a[rows] = values`` (``rows`` sorted and unique)."""
    if rows.size == a.shape[0]:
        a[...] = values
    elif a.ndim > 1 and a.flags.c_contiguous and rows.size:
        # each row copied as one opaque item: numpy's fancy assignment of whole rows of a few numbers
        # is several times slower than copying rows as single items of their byte length
        row = np.dtype((np.void, a.itemsize * (a.size // a.shape[0])))
        v = np.ascontiguousarray(np.broadcast_to(values, (rows.size,) + a.shape[1:]), dtype=a.dtype)
        a.reshape(a.shape[0], -1).view(row)[rows, 0] = v.reshape(rows.size, -1).view(row)[:, 0]
    else:
        a[rows] = values


@dataclass
class Proposal:
    """Steps proposed for rows ``act``: the trial points and what judging them needs."""

    act: np.ndarray
    theta: np.ndarray
    q: np.ndarray  # scaled step D p
    g: np.ndarray  # scaled gradient Jsᵀ r
    c: np.ndarray  # column norms D


def propose(b: Batch, act: np.ndarray, lo, hi, gtol: float) -> tuple[Proposal, np.ndarray]:
    """Gauss–Newton steps for the fast trials ``act`` (from their stored normal equations); returns (the
    clean proposals, rows handed over).

    Trials whose gradient already passes Moré's gtol test stop here (status 4) at their current point;
    trials whose step is not clean are returned for the trust-region iteration, unchanged."""
    fn0 = take_rows(b.fnorm, act)
    c, a, g = take_rows(b.colnorm, act), take_rows(b.normal, act), take_rows(b.grad, act)
    # Moré's gtol: largest |cos| between the residual and a Jacobian column, at the current point
    gnorm = np.where(fn0 > 0, max_over_params(np.abs(g)) / np.where(fn0 > 0, fn0, 1.0), 0.0)
    lam = take_rows(b.damping, act)
    if lam.any():  # Marquardt's damping on the scaled normal matrix: A + λ diag(A) = A + λ I
        a = a + lam[:, None, None] * np.eye(a.shape[1])
    q, pivot = _ldl_solve(a, -g)
    th1 = take_rows(b.theta, act) + q / np.where(c > 0, c, 1.0)
    # NaN fails every comparison, so a non-finite norm or step is not clean
    clean = (pivot > PIVOT_MIN) & all_over_params((c > 0) & (th1 >= lo) & (th1 <= hi))
    stop_g = gnorm <= gtol
    if stop_g.any():
        b.status[act[stop_g]] = 4
        go = ~stop_g & clean
    else:
        go = clean
    if go.all():
        return Proposal(act, th1, q, g, c), act[:0]
    return Proposal(act[go], th1[go], q[go], g[go], c[go]), act[~stop_g & ~clean]


def damp(b: Batch, accepted: np.ndarray, rejected: np.ndarray) -> np.ndarray:
    """Marquardt's (1963) update of λ: ÷10 after an accepted step (0 below LAMBDA_MIN, a Gauss–Newton
    step again), ×10 after a rejected one (from LAMBDA_START). Returns the rejected rows whose λ passed
    LAMBDA_MAX: they are handed over to the trust-region iteration."""
    lam = b.damping
    if accepted.size and lam.any():
        la = lam[accepted] / 10.0
        lam[accepted] = np.where(la < LAMBDA_MIN, 0.0, la)
    if rejected.size:
        lam[rejected] = np.maximum(10.0 * lam[rejected], LAMBDA_START)
        return rejected[lam[rejected] > LAMBDA_MAX]
    return rejected


def conclude(b: Batch, p: Proposal, f1: np.ndarray, r1: np.ndarray, tol) -> tuple[np.ndarray, np.ndarray]:
    """Judge the proposed steps against the model values there (f1) and their weighted residuals r1.

    Accepted steps move their trials (the Jacobian there is left to the caller); convergence tests set
    the status (Moré 1978, as for an undamped step). Returns (rows that moved, rows whose step χ² did
    not confirm: handed over)."""
    max_iter, xtol, ftol, _ = tol
    act, q, g, c = p.act, p.q, p.g, p.c
    # every proposing trial has ‖r‖ > 0 and g ≠ 0 (else it stopped on gtol), so the predicted
    # reduction −(2 gᵀq + qᵀAq)/‖r‖² = (−gᵀq + λ qᵀq)/‖r‖² ((A + λI) q = −g) is positive
    fn0 = take_rows(b.fnorm, act)
    n_iter = take_rows(b.n_iter, act) + 1
    put_rows(b.n_iter, act, n_iter)
    fn1 = np.sqrt(np.einsum("kn,kn->k", r1, r1))
    shrink = fn1 / fn0
    actred = np.where(shrink < 10.0, 1.0 - shrink * shrink, -1.0)  # NaN: −1, as Moré
    qq = dot_p(q, q)
    prered = (take_rows(b.damping, act) * qq - dot_p(g, q)) / (fn0 * fn0)
    ratio = actred / prered
    accept = ratio >= _ACCEPT_RATIO
    dth = c * p.theta
    # Moré's xtol test for an accepted undamped step with ratio >= 3/4: Δ = 2‖D p‖ <= xtol ‖D θ‖
    x_ok = (ratio >= 0.75) & (4.0 * qq <= xtol**2 * dot_p(dth, dth))
    small = (np.abs(actred) <= ftol) & (prered <= ftol) & (ratio <= 2.0)
    code = np.where(small, np.where(x_ok, 3, 1), np.where(x_ok, 2, 0))
    rest = code == 0
    if rest.any():
        code[rest & (np.abs(actred) <= _EPS) & (prered <= _EPS) & (ratio <= 2.0)] = 6
        code[(code == 0) & (n_iter >= max_iter)] = 5
    if accept.all():
        acc = act
        put_rows(b.theta, acc, p.theta)
        if b.keep_f:
            put_rows(b.f, acc, f1)
        put_rows(b.r, acc, r1)
        put_rows(b.fnorm, acc, fn1)
        put_rows(b.jac_at, acc, False)
    else:
        acc = act[accept]
        put_rows(b.theta, acc, p.theta[accept])
        put_rows(b.r, acc, r1[accept])
        b.fnorm[acc] = fn1[accept]
        if b.keep_f:
            put_rows(b.f, acc, f1[accept])
        b.jac_at[acc] = False
    put_rows(b.status, act, code)
    return acc, act[~accept & (code == 0)]
