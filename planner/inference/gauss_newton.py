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
    (0 running, else a STATUS_MESSAGES code), n_iter (T,), jac (T, N, P) the raw Jacobian,
    jac_at (T,) True where ``jac`` holds the Jacobian at the current theta, and damping (T,).
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


def _column_dots(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """``Σ_n a[k, n] b[k, n]`` (einsum over the short axis is faster than a reduction)."""
    return np.einsum("kn,kn->k", a, b)


# Reductions over the short parameter axis of (k, P) arrays, column by column: numpy's reduce along a
# short last axis is an order of magnitude slower on tall stacks.
def _max_p(a: np.ndarray) -> np.ndarray:
    return reduce(np.maximum, a.T)


def _min_p(a: np.ndarray) -> np.ndarray:
    return reduce(np.minimum, a.T)


def _all_p(a: np.ndarray) -> np.ndarray:
    return reduce(np.logical_and, a.T)


def _normal_equations(jw: np.ndarray, r: np.ndarray):
    """Column norms c (k, P), scaled normal matrix A (k, P, P) (unit diagonal) and gradient g = Jsᵀr."""
    k, _, n_params = jw.shape
    cols = [jw[:, :, p] for p in range(n_params)]
    c = np.empty((k, n_params))
    g = np.empty((k, n_params))
    for p, x in enumerate(cols):  # column by column: einsum over the short axis beats a reduction
        c[:, p] = _column_dots(x, x)
        g[:, p] = _column_dots(x, r)
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
    return x, _min_p(d / np.diagonal(a, axis1=1, axis2=2))


def scaled_inverse(jw: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(column norms c (k, P), inverse of the scaled normal matrix (k, P, P), smallest LDLᵀ pivot (k,)).

    ``(JᵀJ)⁻¹ = D⁻¹ A⁻¹ D⁻¹`` with ``A = D⁻¹ JᵀJ D⁻¹``; the inverse has relative error about
    ε / pivot (Higham 2002, Accuracy and Stability of Numerical Algorithms, §10.1), so the caller uses
    it only where the pivot is comfortably large."""
    c, a, _ = _normal_equations(jw, jw[:, :, 0])
    k, n_params = c.shape
    if n_params == 2:
        a01 = a[:, 0, 1]
        piv = 1.0 - a01 * a01
        inv = np.empty((k, 2, 2))
        inv[:, 0, 0] = inv[:, 1, 1] = 1.0 / np.where(piv > 0, piv, 1.0)
        inv[:, 0, 1] = inv[:, 1, 0] = -a01 * inv[:, 0, 0]
        return c, inv, piv
    cols = [_ldl_solve(a, np.broadcast_to(np.eye(n_params)[j], (k, n_params))) for j in range(n_params)]
    return c, np.stack([x for x, _ in cols], axis=2), cols[0][1]


def _get(a: np.ndarray, rows: np.ndarray) -> np.ndarray:
    """Rows of ``a`` for reading: ``take`` (several times faster than fancy indexing on tall stacks), or
    ``a`` itself when ``rows`` (sorted and unique, as from flatnonzero) is every row."""
    return a if rows.size == a.shape[0] else a.take(rows, axis=0)


def _set(a: np.ndarray, rows: np.ndarray, values) -> None:
    """``a[rows] = values`` (``rows`` sorted and unique)."""
    if rows.size == a.shape[0]:
        a[...] = values
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


def propose(b: Batch, act: np.ndarray, weigh_jac, lo, hi, gtol: float) -> tuple[Proposal, np.ndarray]:
    """Gauss–Newton steps for the fast trials ``act``; returns (the clean proposals, rows handed over).

    Trials whose gradient already passes Moré's gtol test stop here (status 4) at their current point;
    trials whose step is not clean are returned for the trust-region iteration, unchanged."""
    jw = weigh_jac(_get(b.jac, act), act)
    fn0 = _get(b.fnorm, act)
    c, a, g = _normal_equations(jw, _get(b.r, act))
    # Moré's gtol: largest |cos| between the residual and a Jacobian column, at the current point
    gnorm = np.where(fn0 > 0, _max_p(np.abs(g)) / np.where(fn0 > 0, fn0, 1.0), 0.0)
    lam = _get(b.damping, act)
    if lam.any():  # Marquardt's damping on the scaled normal matrix: A + λ diag(A) = A + λ I
        a = a + lam[:, None, None] * np.eye(a.shape[1])
    q, pivot = _ldl_solve(a, -g)
    th1 = _get(b.theta, act) + q / np.where(c > 0, c, 1.0)
    # NaN fails every comparison, so a non-finite norm or step is not clean
    clean = (pivot > PIVOT_MIN) & _all_p((c > 0) & (th1 >= lo) & (th1 <= hi))
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
    fn0 = _get(b.fnorm, act)
    n_iter = _get(b.n_iter, act) + 1
    _set(b.n_iter, act, n_iter)
    fn1 = np.sqrt(np.einsum("kn,kn->k", r1, r1))
    shrink = fn1 / fn0
    actred = np.where(shrink < 10.0, 1.0 - shrink * shrink, -1.0)  # NaN: −1, as Moré
    qq = np.einsum("kp,kp->k", q, q)
    prered = (_get(b.damping, act) * qq - np.einsum("kp,kp->k", g, q)) / (fn0 * fn0)
    ratio = actred / prered
    accept = ratio >= _ACCEPT_RATIO
    dth = c * p.theta
    # Moré's xtol test for an accepted undamped step with ratio >= 3/4: Δ = 2‖D p‖ <= xtol ‖D θ‖
    x_ok = (ratio >= 0.75) & (4.0 * qq <= xtol**2 * np.einsum("kp,kp->k", dth, dth))
    small = (np.abs(actred) <= ftol) & (prered <= ftol) & (ratio <= 2.0)
    code = np.where(small, np.where(x_ok, 3, 1), np.where(x_ok, 2, 0))
    rest = code == 0
    if rest.any():
        code[rest & (np.abs(actred) <= _EPS) & (prered <= _EPS) & (ratio <= 2.0)] = 6
        code[(code == 0) & (n_iter >= max_iter)] = 5
    if accept.all():
        acc = act
        _set(b.theta, acc, p.theta)
        _set(b.f, acc, f1)
        _set(b.r, acc, r1)
        _set(b.fnorm, acc, fn1)
        _set(b.jac_at, acc, False)
    else:
        acc = act[accept]
        b.theta[acc], b.f[acc], b.r[acc], b.fnorm[acc] = p.theta[accept], f1[accept], r1[accept], fn1[accept]
        b.jac_at[acc] = False
    _set(b.status, act, code)
    return acc, act[~accept & (code == 0)]
