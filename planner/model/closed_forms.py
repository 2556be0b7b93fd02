"""Conditional constants at a buffered pH, stepwise and overall constants, and the cancellation-free
1:1 closed form.
"""

from __future__ import annotations

import numpy as np

from ..inputs.errors import KplanError


class EquilibriumError(KplanError):
    """Raised when mass balances cannot be solved: invalid totals or constants, or non-convergence."""


def as_int_array(values, what, error=ValueError):
    arr = np.asarray(values)
    if arr.dtype.kind not in "iu":
        if arr.dtype.kind != "f" or not np.all(np.isfinite(arr)) or np.any(arr != np.round(arr)):
            raise error(f"{what} must be integers; got {arr.tolist()}")
    return arr.astype(np.int64)


def bad_indices(bad):
    """Readable index list of the bad entries (at most 10)."""
    idx = np.argwhere(np.atleast_1d(bad))
    shown = [tuple(int(i) for i in row) if row.size > 1 else int(row[0]) for row in idx[:10]]
    more = f" and {len(idx) - 10} more" if len(idx) > 10 else ""
    return f"{shown}{more}"


# ----------------------------------------------------------------------------------------------------
# Constants


def conditional_log_beta(log_beta, stoich, pH=None) -> np.ndarray:
    """Fold the proton into conditional constants at a fixed pH.

    ``log beta_cond = log beta + r * log10[H+]`` with ``[H+] = 10**-pH``, so that
    ``[M_p L_q H_r] = beta_cond [M]^p [L]^q``. The proton is taken on the concentration scale: pH here
    means -log10 of the H+ *concentration* (mol/L), as a glass electrode calibrated in concentration
    units at constant ionic medium reads it; convert an activity pH first if that is what you have.

    Parameters
    ----------
    log_beta : array_like, shape (..., S)
        log10 of the overall constants beta_pqr (concentration scale).
    stoich : array_like of int, shape (S, 3)
        Columns p, q, r of each species M_p L_q H_r (r < 0 for hydroxo species).
    pH : float or array_like, optional
        Broadcasts against ``log_beta[..., 0]`` (e.g. one pH per tube). Required when any r != 0.

    Returns
    -------
    numpy.ndarray, shape broadcast(log_beta.shape, pH.shape + (S,))
    """
    stoich = np.asarray(stoich)
    if stoich.ndim != 2 or stoich.shape[1] != 3:
        raise ValueError(f"stoich must have shape (S, 3) with columns p, q, r; got shape {stoich.shape}")
    r = as_int_array(stoich[:, 2], "stoich column r")
    log_beta = np.asarray(log_beta, dtype=float)
    if log_beta.shape[-1:] != (stoich.shape[0],):
        raise ValueError(
            f"log_beta has {log_beta.shape[-1:] or 'no'} entries on its last axis but stoich lists "
            f"{stoich.shape[0]} species; give one constant per species"
        )
    if pH is None:
        if np.any(r != 0):
            raise ValueError(
                "pH is required: some species contain H (r != 0 in stoich), so their conditional "
                "constants depend on [H+]; pass pH=..."
            )
        return log_beta.copy()
    pH = np.asarray(pH, dtype=float)
    if not np.all(np.isfinite(pH)):
        raise ValueError("pH must be finite")
    return log_beta - r * pH[..., None]


def overall_from_stepwise(log_K) -> np.ndarray:
    """Overall constants from stepwise ones: beta_n = K_1 K_2 ... K_n (log10 units, last axis n)."""
    return np.cumsum(np.asarray(log_K, dtype=float), axis=-1)


def stepwise_from_overall(log_beta) -> np.ndarray:
    """Stepwise constants from overall ones: K_n = beta_n / beta_(n-1) (log10 units, last axis n)."""
    log_beta = np.asarray(log_beta, dtype=float)
    return np.diff(log_beta, axis=-1, prepend=0.0)


# ----------------------------------------------------------------------------------------------------
# 1:1 closed form


def one_to_one(M_tot_M, L_tot_M, K) -> np.ndarray:
    """Exact [ML] for a single 1:1 complex, without cancellation.

    The root of K x^2 - (K M0 + K L0 + 1) x + K M0 L0 = 0 that lies in [0, min(M0, L0)], written as

        [ML] = 2 M0 L0 / (s + sqrt(D)),  s = M0 + L0 + 1/K,  D = (M0 - L0)^2 + (2 (M0 + L0) + 1/K) / K,

    i.e. the rationalised ("citardauq") form of the quadratic formula (Forsythe 1970, *Amer. Math.
    Monthly* 77:931): every term is positive, so no digits are lost, whereas the textbook
    (s - sqrt(s^2 - 4 M0 L0)) / 2 loses all of them when M0 L0 K^2 is small. It is evaluated here with
    numerator and denominator multiplied by K, ``2 K M0 L0 / (1 + u + sqrt(v^2 + 2 u + 1))`` with
    ``u = K (M0 + L0)``, ``v = K (M0 - L0)``, which also holds at K = 0 and never divides by K.

    Parameters
    ----------
    M_tot_M, L_tot_M : array_like
        Total metal and ligand, mol/L (>= 0); broadcast together.
    K : array_like
        Formation constant, L/mol (>= 0, finite); broadcasts too.

    Returns
    -------
    numpy.ndarray
        [ML], mol/L; 0 where either total is 0.
    """
    M0, L0, K = _check_one_to_one(M_tot_M, L_tot_M, K)
    u = K * (M0 + L0)
    v = K * (M0 - L0)
    return 2.0 * K * M0 * L0 / (1.0 + u + np.sqrt(v * v + 2.0 * u + 1.0))


def one_to_one_free(M0, L0, K):
    """Free [M] of the 1:1 system without cancellation (the free-metal quadratic).

    K m^2 + b m - M0 = 0 with b = 1 + K (L0 - M0): take m = 2 M0 / (b + sqrt(b^2 + 4 K M0)) when b >= 0
    and m = (-b + sqrt(b^2 + 4 K M0)) / (2 K) when b < 0, so that the two terms added always have the
    same sign (Forsythe 1970). Swapping M0 and L0 gives the free ligand.
    """
    b = 1.0 + K * (L0 - M0)
    root = np.sqrt(b * b + 4.0 * K * M0)
    with np.errstate(divide="ignore", invalid="ignore"):
        pos = 2.0 * M0 / (b + root)
        neg = (root - b) / (2.0 * K)
    return np.where(b >= 0.0, pos, neg)


def _check_one_to_one(M_tot_M, L_tot_M, K):
    M0 = np.asarray(M_tot_M, dtype=float)
    L0 = np.asarray(L_tot_M, dtype=float)
    K = np.asarray(K, dtype=float)
    for name, arr in (("M_tot_M", M0), ("L_tot_M", L0)):
        bad = ~(np.isfinite(arr) & (arr >= 0.0))
        if np.any(bad):
            raise EquilibriumError(
                f"{name} must be finite and >= 0 (mol/L); bad entries at index {bad_indices(bad)}"
            )
    bad = ~(np.isfinite(K) & (K >= 0.0))
    if np.any(bad):
        raise EquilibriumError(f"K must be finite and >= 0 (L/mol); bad entries at index {bad_indices(bad)}")
    return M0, L0, K


# ----------------------------------------------------------------------------------------------------
