"""The result of a batched least-squares fit, and the checks and weighting of its inputs
(see :mod:`planner.inference.lm` for the algorithm).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..inputs.errors import KplanError

STATUS_MESSAGES: dict[int, str] = {
    1: "converged: relative reduction of chi2 (actual and predicted) below ftol",
    2: "converged: relative step size below xtol",
    3: "converged: both the ftol and the xtol tests",
    4: "converged: residuals orthogonal to the Jacobian columns within gtol",
    5: "not converged: max_iter trial steps used",
    6: "converged: chi2 cannot be reduced further at machine precision",
    7: "converged: the step cannot shrink further at machine precision",
    8: "converged: the gradient is zero to machine precision",
    -1: "failed: the model or the Jacobian returned non-finite values",
    -2: "failed: singular Jacobian at the solution (parameters not identifiable from these data)",
}
_CONVERGED_CODES = (1, 2, 3, 4, 6, 7, 8)


class FitError(KplanError):
    """Invalid input to :func:`fit_many` / :func:`fit_one`; the message names the fix."""


@dataclass(frozen=True, eq=False)
class FitResult:
    """Result of fitting T independent least-squares problems.

    Arrays carry a leading trial axis (``T``) from :func:`fit_many`; :func:`fit_one` returns the
    same fields with that axis removed.

    Attributes
    ----------
    theta : ndarray, (T, P)
        Parameter estimates, in the units of the model's parameters.
    cov : ndarray, (T, P, P)
        Covariance of the estimates: ``s² (JᵀWᵀWJ)⁻¹`` with ``s² = chi2/dof`` when
        ``scale_cov=True`` (the NIST StRD convention), else ``(JᵀWᵀWJ)⁻¹`` (weights taken as
        absolute). NaN for trials whose Jacobian is singular at the solution.
    se : ndarray, (T, P)
        Standard errors ``sqrt(diag(cov))``, units of ``theta``.
    chi2 : ndarray, (T,)
        Weighted residual sum of squares ``‖W (y − f)‖²`` at the solution (dimensionless when
        weighted by standard deviations; units of y² when unweighted).
    dof : int
        Degrees of freedom ``N − P``.
    n_iter : ndarray of int, (T,)
        Trial steps taken (model evaluations, excluding the start and finite differences).
    converged : ndarray of bool, (T,)
        True when the trial met a convergence test, the estimates and chi2 are finite, the
        Jacobian at the solution is non-singular, and max_iter was not reached.
    status : ndarray of int, (T,)
        Why each trial stopped; codes are explained in :data:`STATUS_MESSAGES`.
    """

    theta: np.ndarray
    cov: np.ndarray
    se: np.ndarray
    chi2: np.ndarray
    dof: int
    n_iter: np.ndarray
    converged: np.ndarray
    status: np.ndarray | None = None

    def summary(self) -> dict:
        """Plain JSON-safe digest (lists, floats, ints; NaN and inf become None)."""
        theta = np.atleast_2d(self.theta)
        se = np.atleast_2d(self.se)
        chi2 = np.atleast_1d(self.chi2)
        conv = np.atleast_1d(self.converged)
        n_iter = np.atleast_1d(self.n_iter)
        good = theta[conv]
        out: dict = {
            "n_trials": int(theta.shape[0]),
            "n_params": int(theta.shape[1]),
            "dof": int(self.dof),
            "n_converged": int(conv.sum()),
            "n_iter_median": _json_float(np.median(n_iter)),
            "n_iter_max": int(n_iter.max()),
            "theta_mean": _json_list(good.mean(axis=0) if good.size else np.full(theta.shape[1], np.nan)),
            "theta_sd": _json_list(
                good.std(axis=0, ddof=1) if good.shape[0] > 1 else np.full(theta.shape[1], np.nan)
            ),
            "se_median": _json_list(
                np.median(se[conv], axis=0) if good.size else np.full(theta.shape[1], np.nan)
            ),
            "chi2_median": _json_float(np.median(chi2[conv])) if good.size else None,
        }
        if self.status is not None:
            codes, counts = np.unique(np.atleast_1d(self.status), return_counts=True)
            out["status_counts"] = {str(int(c)): int(n) for c, n in zip(codes, counts, strict=True)}
        if theta.shape[0] == 1:
            out["theta"] = _json_list(theta[0])
            out["se"] = _json_list(se[0])
            out["chi2"] = _json_float(chi2[0])
        return out

    def __repr__(self) -> str:
        theta = np.atleast_2d(self.theta)
        conv = np.atleast_1d(self.converged)
        return (
            f"FitResult(trials={theta.shape[0]}, params={theta.shape[1]}, dof={self.dof}, "
            f"converged={int(conv.sum())}/{conv.size}, "
            f"median n_iter={float(np.median(np.atleast_1d(self.n_iter))):g})"
        )


def _json_float(x) -> float | None:
    x = float(x)
    return x if np.isfinite(x) else None


def _json_list(a) -> list:
    return [_json_float(v) for v in np.asarray(a, dtype=float).ravel()]


def _frozen(a) -> np.ndarray:
    """Read-only array (0-d stays 0-d), so a result cannot be edited after the fact."""
    a = np.asarray(a)
    if a.ndim and not a.flags.c_contiguous:
        a = np.ascontiguousarray(a)
    if a.flags.writeable and a.base is not None:
        a = a.copy()  # a view of a writeable array could be changed through its base
    a.setflags(write=False)
    return a


# ----------------------------------------------------------------------------------------------
# input handling
# ----------------------------------------------------------------------------------------------


def _batch_shapes(theta0, y) -> tuple[np.ndarray, np.ndarray]:
    theta = np.array(theta0, dtype=float, ndmin=1)
    yy = np.array(y, dtype=float, ndmin=1)
    if theta.ndim > 2 or yy.ndim > 2:
        raise FitError(
            f"theta0 must be (P,) or (T, P) and y (N,) or (T, N); got theta0 {theta.shape}, "
            f"y {yy.shape}. Stack the trials along the first axis."
        )
    t_theta = theta.shape[0] if theta.ndim == 2 else 1
    t_y = yy.shape[0] if yy.ndim == 2 else 1
    if t_theta != t_y and 1 not in (t_theta, t_y):
        raise FitError(
            f"theta0 has {t_theta} trials but y has {t_y}; give both the same leading size T "
            "or one of them without the trial axis."
        )
    n_trials = max(t_theta, t_y)
    theta = np.array(np.broadcast_to(theta.reshape(-1, theta.shape[-1]), (n_trials, theta.shape[-1])))
    yy = np.array(np.broadcast_to(yy.reshape(-1, yy.shape[-1]), (n_trials, yy.shape[-1])))
    if not np.all(np.isfinite(theta)):
        raise FitError("theta0 contains NaN or inf; give finite starting values.")
    if not np.all(np.isfinite(yy)):
        raise FitError("y contains NaN or inf; remove or replace the missing observations.")
    return theta, yy


def _weighting(sigma, whiten, n_trials: int, n_obs: int):  # noqa: C901
    """Return (weigh_res, weigh_jac): maps of residuals (k, N) and Jacobians (k, N, P) of ``rows``."""
    if sigma is not None and whiten is not None:
        raise FitError("give either sigma (standard deviations) or whiten (a matrix), not both.")
    if sigma is not None:
        sd = np.array(sigma, dtype=float, ndmin=1)
        if sd.shape not in ((n_obs,), (n_trials, n_obs)):
            raise FitError(f"sigma must have shape ({n_obs},) or ({n_trials}, {n_obs}); got {sd.shape}.")
        if not np.all(np.isfinite(sd) & (sd > 0)):
            raise FitError("sigma must be finite and > 0 for every observation; drop or fix the others.")
        inv = 1.0 / sd

        def weigh_res(res, rows):
            return res * (inv.take(rows, axis=0) if inv.ndim == 2 else inv)

        def weigh_jac(jac, rows):
            # flattened (k, N·P) times the weights repeated P times: numpy broadcasts a long last axis
            # several times faster than a trailing axis of length P
            k, n, p = jac.shape
            w = np.repeat(inv.take(rows, axis=0) if inv.ndim == 2 else inv, p, axis=-1)
            return (np.ascontiguousarray(jac).reshape(k, n * p) * w).reshape(k, n, p)

        return weigh_res, weigh_jac
    if whiten is not None and hasattr(
        whiten, "apply_jac"
    ):  # a structured whitening (e.g. diagonal + low rank)

        def weigh_res(res, rows):
            return whiten.apply(res)

        def weigh_jac(jac, rows):
            return whiten.apply_jac(jac)

        return weigh_res, weigh_jac
    if whiten is not None:
        w = np.array(whiten, dtype=float)
        if w.shape not in ((n_obs, n_obs), (n_trials, n_obs, n_obs)):
            raise FitError(
                f"whiten must be an ({n_obs}, {n_obs}) matrix, or one per trial "
                f"({n_trials}, {n_obs}, {n_obs}); got {w.shape}."
            )
        if not np.all(np.isfinite(w)):
            raise FitError("whiten contains NaN or inf; pass e.g. the inverse Cholesky factor of Σ.")
        if w.ndim == 3:  # a different weighting for each trial (e.g. each student's own tubes)

            def weigh_res(res, rows):
                return np.einsum("kij,kj->ki", w.take(rows, axis=0), res)

            def weigh_jac(jac, rows):
                return np.matmul(w.take(rows, axis=0), jac)

            return weigh_res, weigh_jac

        def weigh_res(res, rows):
            return res @ w.T

        def weigh_jac(jac, rows):
            return np.matmul(w, jac)

        return weigh_res, weigh_jac

    def identity(a, rows):
        return a

    return identity, identity


def _bounds(lower, upper, n_params: int):
    lo = np.full(n_params, -np.inf) if lower is None else np.array(lower, dtype=float, ndmin=1)
    hi = np.full(n_params, np.inf) if upper is None else np.array(upper, dtype=float, ndmin=1)
    if lo.shape != (n_params,) or hi.shape != (n_params,):
        raise FitError(f"lower and upper must have shape ({n_params},); got {lo.shape} and {hi.shape}.")
    if np.any(np.isnan(lo) | np.isnan(hi)) or np.any(lo >= hi):
        raise FitError("need lower < upper for every parameter; use -inf/inf for an unbounded one.")
    return lo, hi


def _checked(out, shape: tuple[int, ...], what: str) -> np.ndarray:
    a = np.asarray(out, dtype=float)
    if a.shape != shape:
        raise FitError(
            f"{what} returned shape {a.shape}, expected {shape}; it must map the whole batch of "
            "parameters (T, P) to one row per trial."
        )
    return a


# ----------------------------------------------------------------------------------------------
# Jacobians by finite differences (whole batch per call)
# ----------------------------------------------------------------------------------------------
