"""The step pieces of the batched Levenberg–Marquardt fit: finite-difference Jacobians, the batched SVD of
the scaled Jacobians and Moré's damping parameter."""

from __future__ import annotations

import numpy as np

from .gauss_newton import all_over_params, dot_p

EPS = float(np.finfo(float).eps)
TINY = float(np.finfo(float).tiny)
# Moré's λ iteration stops when | ‖D p‖ − Δ | <= 0.1 Δ, or after 10 iterations (§5).
_LAMBDA_SIGMA = 0.1
_LAMBDA_MAX_ITER = 10


def finite_difference_jac(call_model, theta, f0, lo, hi, central: bool) -> np.ndarray:
    """Forward (2-point) or central (3-point) differences, P or 2P model calls on the whole batch.

    Steps are relative to each parameter, h = eps^(1/2) |θ| forward and eps^(1/3) |θ| central
    (|θ| → 1 when θ = 0), as in MINPACK's fdjac2 (Moré, Garbow & Hillstrom 1980, ANL-80-74) and
    Dennis & Schnabel (1983, Numerical Methods for Unconstrained Optimization, §5.4), so that a
    parameter of size 1e-4 gets the same relative step as one of size 1e4. A step that would cross
    a bound is taken on the other side instead.
    """
    n_trials, n_params = theta.shape
    scale = np.where(theta != 0, np.abs(theta), 1.0)
    h = (EPS ** (1.0 / 3.0) if central else np.sqrt(EPS)) * scale
    room_up = theta + h <= hi
    room_down = theta - h >= lo
    if central:
        h_up = np.where(room_up, h, 0.0)
        h_down = np.where(room_down, h, 0.0)
        # both sides blocked cannot happen for a sensible h unless hi − lo < 2h: fall back to forward
        h_up = np.where(~room_up & ~room_down, h, h_up)
    else:
        h_up = np.where(room_up, h, 0.0)
        h_down = np.where(room_up, 0.0, h)
    jac = np.empty((n_trials, f0.shape[1], n_params))
    for j in range(n_params):  # loop over parameters only; each call covers every trial
        th_up = theta.copy()
        th_up[:, j] += h_up[:, j]
        th_down = theta.copy()
        th_down[:, j] -= h_down[:, j]
        # the representable step, not the nominal one, divides the difference
        dh = th_up[:, j] - th_down[:, j]
        f_up = call_model(th_up) if np.any(h_up[:, j] > 0) else f0
        f_down = call_model(th_down) if np.any(h_down[:, j] > 0) else f0
        jac[:, :, j] = (f_up - f_down) / dh[:, None]
    return jac


# ----------------------------------------------------------------------------------------------
# batched SVD of the scaled Jacobians
# ----------------------------------------------------------------------------------------------

# Up to this many parameters the SVD is taken by vectorised one-sided Jacobi rotations (a few
# numpy operations on the whole stack per column pair); beyond it LAPACK's per-matrix SVD is the
# cheaper of the two.
_JACOBI_MAX_PARAMS = 3


def row_norms(a: np.ndarray) -> np.ndarray:
    """Euclidean norms along the last axis (einsum: faster than numpy.linalg.norm on stacks)."""
    return np.sqrt(np.einsum("...n,...n->...", a, a))


__all__ = ["EPS", "TINY", "dot_p", "factorise", "finite_difference_jac", "lm_parameter", "row_norms"]


def jacobi_svd_rows(bt: np.ndarray, max_sweeps: int = 40) -> tuple[np.ndarray, np.ndarray]:
    """One-sided Jacobi SVD of stacked matrices given column-wise: ``bt[:, i]`` is column i.

    Plane rotations of column pairs until all are mutually orthogonal, ``B V = U S`` (Hestenes
    1958, J. SIAM 6:51), each rotation applied to the whole stack at once. The method is accurate to
    high relative precision even for ill-conditioned B (Demmel & Veselić 1992, SIAM J. Matrix Anal.
    Appl. 13:1204); rotation angles by Rutishauser's stable formula.

    Returns (rotated columns ``(B V)ᵀ``, ``Vᵀ``); the rotated columns have norms s.
    """
    b = np.array(bt, dtype=float, order="C", copy=True)  # each column contiguous
    k, p, _ = b.shape
    vt = np.zeros((k, p, p))
    for i in range(p):
        vt[:, i, i] = 1.0
    tol = max(p, 2) * EPS
    for _ in range(max_sweeps):
        rotated = False
        for i in range(p - 1):
            for j in range(i + 1, p):
                bi, bj = b[:, i], b[:, j]
                alpha = np.einsum("kn,kn->k", bi, bi)
                beta = np.einsum("kn,kn->k", bj, bj)
                gamma = np.einsum("kn,kn->k", bi, bj)
                rot = np.abs(gamma) > tol * np.sqrt(alpha * beta)
                if not rot.any():
                    continue
                rotated = True
                gamma[~rot] = 1.0
                zeta = (beta - alpha) / (2.0 * gamma)
                t = np.copysign(1.0, zeta) / (np.abs(zeta) + np.hypot(1.0, zeta))
                t[~rot] = 0.0
                c = 1.0 / np.sqrt(1.0 + t * t)
                sn = (c * t)[:, None]
                c = c[:, None]
                for m in (b, vt):  # same rotation on the columns and on V
                    mi, mj = m[:, i], m[:, j]
                    new_i = c * mi - sn * mj
                    mj *= c
                    mj += sn * mi
                    mi[...] = new_i
        # two columns are made orthogonal by a single rotation: no confirming sweep needed
        if not rotated or p == 2:
            break
    return b, vt


def factorise(js: np.ndarray, r: np.ndarray):
    """SVD data of scaled Jacobians Js (k, N, P) and residuals r (k, N) for the LM subproblem.

    ``Js = U S Vᵀ`` by one-sided Jacobi (few parameters) or LAPACK ``gesdd`` (more). Returns
    s (k, P), Vᵀ (k, P, P) and ``b = Vᵀ Jsᵀ r = S Uᵀ r`` (k, P): everything the step and the
    predicted reduction need, for any damping λ. ``JᵀJ`` is never formed.
    """
    if js.shape[2] <= _JACOBI_MAX_PARAMS:
        rotated, vt = jacobi_svd_rows(np.swapaxes(js, 1, 2))
        return row_norms(rotated), vt, np.einsum("kin,kn->ki", rotated, r)
    u, s, vt = np.linalg.svd(js, full_matrices=False)
    return s, vt, s * np.einsum("kni,kn->ki", u, r)


# ----------------------------------------------------------------------------------------------
# Moré's λ (trust-region) subproblem on the SVD of the scaled Jacobian
# ----------------------------------------------------------------------------------------------


def lm_parameter(s, b, delta, par, keep):
    """Damping λ ≥ 0 with ‖q(λ)‖ ≈ Δ, by Moré's (1978, §5) safeguarded Newton iteration.

    With ``Js = U S Vᵀ`` and ``b = Vᵀ Jsᵀ r``, the scaled step is ``q(λ) = −V c`` with
    ``c = b / (s² + λ)``, so ``‖q(λ)‖² = Σ b²/(s² + λ)²`` and each Newton step costs O(P) per trial.
    At λ = 0 singular values below the rank cut-off (``keep`` False) are dropped, as in a
    pseudo-inverse. Returns (λ, c).
    """
    full_rank = all_over_params(keep)
    s2 = s * s
    s2_safe = np.where(keep, s2, 1.0)
    c = np.where(keep, b / s2_safe, 0.0)  # Gauss–Newton step
    dxnorm = row_norms(c)
    fp = dxnorm - delta
    gauss_newton = fp <= _LAMBDA_SIGMA * delta
    # lower bound: Newton step from λ = 0 (valid only when J has full rank; Moré 1978, §5)
    curv0 = dot_p(c, np.where(keep, c / s2_safe, 0.0))
    parl = np.where(full_rank & (curv0 > 0), fp * dxnorm**2 / (delta * np.where(curv0 > 0, curv0, 1.0)), 0.0)
    parl = np.maximum(parl, 0.0)
    gnorm = row_norms(b)
    paru = gnorm / delta
    paru = np.where(paru == 0, TINY / np.minimum(delta, 0.1), paru)
    lam = np.minimum(np.maximum(par, parl), paru)
    lam = np.where(lam == 0, gnorm / np.where(dxnorm > 0, dxnorm, 1.0), lam)
    todo = ~gauss_newton
    lam_out = np.zeros_like(lam)
    c_out = c
    for it in range(_LAMBDA_MAX_ITER):  # a fixed handful of iterations, each vectorised over trials
        if not todo.any():
            break
        lam = np.where(lam == 0, np.maximum(TINY, 1e-3 * paru), lam)
        denom = s2 + lam[:, None]
        ck = b / denom
        qn = row_norms(ck)
        fp_prev, fp = fp, qn - delta
        lam_out = np.where(todo, lam, lam_out)
        c_out = np.where(todo[:, None], ck, c_out)
        done = (np.abs(fp) <= _LAMBDA_SIGMA * delta) | ((parl == 0) & (fp <= fp_prev) & (fp_prev < 0))
        if it == _LAMBDA_MAX_ITER - 1:
            break
        todo = todo & ~done
        curv = dot_p(b, b / denom**3)
        parc = fp * qn**2 / (delta * np.where(curv > 0, curv, np.inf))
        parl = np.where(todo & (fp > 0), np.maximum(parl, lam), parl)
        paru = np.where(todo & (fp < 0), np.minimum(paru, lam), paru)
        lam = np.where(todo, np.maximum(parl, lam + parc), lam)
    return lam_out, c_out
