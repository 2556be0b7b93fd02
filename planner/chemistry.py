"""Species, conditional constants and a vectorised equilibrium solver for one metal and one ligand.

A species is M_p L_q H_r with overall formation constant

    beta_pqr = [M_p L_q H_r] / ([M]^p [L]^q [H]^r)

(r < 0: a hydroxo species, written with H+ released). At a fixed pH the proton factor is folded into a
conditional constant (:func:`conditional_log_beta`), which leaves two free components, M and L, and the
mass balances

    M_tot = [M] + sum_s p_s [s],        L_tot = [L] + sum_s q_s [s],     [s] = beta_s [M]^p_s [L]^q_s.

The solver (:func:`speciate`) works on u = (ln[M], ln[L]). The mass balances are the gradient of the
strictly convex function

    G(u) = [M] + [L] + sum_s [s] - M_tot ln[M] - L_tot ln[L],

so the equilibrium is its unique minimum and the Jacobian of the balances (the Hessian of G) is symmetric
positive definite everywhere (the convex formulation of chemical equilibrium: Smith & Missen 1982,
*Chemical Reaction Equilibrium Analysis*, Wiley, ch. 6). Newton's method on the log residuals
ln(computed/given total) with a backtracking line search on their squared norm (Armijo 1966,
*Pacific J. Math.* 16:1; Dennis & Schnabel 1983, *Numerical Methods for Unconstrained Optimization and
Nonlinear Equations*, ch. 6) is therefore well defined in every tube; it is started from the best of a few
closed-form limiting solutions and backed up by a bracketed nested solve that cannot fail. Every step is
vectorised over tubes.

Concentrations are in mol/L throughout (any consistent scale works, e.g. mol/kg, provided the constants
are on the same scale). Constants are in log10 units at the interface; derivatives are returned with
respect to the natural logarithm ln(beta) = ln(10) log10(beta).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = [
    "EquilibriumError",
    "Sensitivity",
    "Speciation",
    "conditional_log_beta",
    "one_to_one",
    "overall_from_stepwise",
    "sensitivities",
    "speciate",
    "stepwise_from_overall",
]

LN10 = float(np.log(10.0))

# ln(0) stand-in for a component whose total is zero: exp() of it, or of any multiple of it, is exactly 0,
# and 0 * _LN_ZERO is 0 (with -inf it would be NaN), so species that need that component vanish exactly.
_LN_ZERO = -1.0e300
# Newton stops once both |ln(computed/given total)| are below this; the rounding floor of the residual
# is about eps * |ln[s]| ~ 1e-14 (ln[s] is a sum of terms up to ~100), so this is reachable almost always.
_TOL_RES = 2e-14
# A tube whose line search can no longer reduce the residual is accepted when below this (rounding
# limited); otherwise it goes to the bracketed fallback.
_TOL_STALL = 1e-11
# Largest change of ln[M] or ln[L] in one Newton step (a factor of e^6 ~ 400): the exponentials make the
# linear model useless beyond that, and capping saves line-search halvings.
_MAX_STEP = 6.0
_MAX_NEWTON = 60
_MAX_HALVINGS = 40
_ARMIJO = 1e-4
# tubes per block (working arrays of a block fit in a 1 MiB L2 cache)
_BLOCK = 16384


class EquilibriumError(ValueError):
    """Raised when mass balances cannot be solved: invalid totals or constants, or non-convergence."""


# ----------------------------------------------------------------------------------------------------
# Result types


@dataclass(frozen=True)
class Speciation:
    """Equilibrium composition of a batch of tubes.

    Attributes
    ----------
    free_M, free_L : numpy.ndarray, shape (...)
        Free metal and free ligand concentrations, mol/L.
    species_M : numpy.ndarray, shape (..., S)
        Concentration of each species, mol/L, in the order of ``stoich_pq``.
    M_tot_M, L_tot_M : numpy.ndarray, shape (...)
        The total metal and ligand concentrations used, mol/L (broadcast to the batch shape).
    """

    free_M: np.ndarray
    free_L: np.ndarray
    species_M: np.ndarray
    M_tot_M: np.ndarray
    L_tot_M: np.ndarray

    def summary(self) -> dict:
        """Plain JSON-safe values: nested lists of concentrations in mol/L."""
        return {
            "free_M": np.asarray(self.free_M).tolist(),
            "free_L": np.asarray(self.free_L).tolist(),
            "species_M": np.asarray(self.species_M).tolist(),
            "M_tot_M": np.asarray(self.M_tot_M).tolist(),
            "L_tot_M": np.asarray(self.L_tot_M).tolist(),
        }

    def __repr__(self) -> str:
        shape = np.shape(self.free_M)
        n_species = np.shape(self.species_M)[-1]
        return f"Speciation(batch shape {shape}, {n_species} species)"


@dataclass(frozen=True)
class Sensitivity:
    """Derivatives of the equilibrium composition (implicit function theorem).

    ``ln`` is the natural logarithm; to get derivatives per log10 unit of beta multiply the
    ``*_dlnbeta`` fields by ln(10). ``*_dMtot`` / ``*_dLtot`` are per mol/L of total.

    Attributes
    ----------
    dlnc_dlnbeta : numpy.ndarray, shape (..., S, S)
        d ln[species_s] / d ln(beta_j), s along the second-to-last axis, j along the last.
    dlnc_dMtot, dlnc_dLtot : numpy.ndarray, shape (..., S)
        d ln[species_s] / d M_tot and / d L_tot, L/mol.
    dlnfree_M_dlnbeta, dlnfree_L_dlnbeta : numpy.ndarray, shape (..., S)
        d ln[M]free / d ln(beta_j) and d ln[L]free / d ln(beta_j).
    dlnfree_M_dMtot, dlnfree_M_dLtot, dlnfree_L_dMtot, dlnfree_L_dLtot : numpy.ndarray, shape (...)
        Derivatives of ln of the free concentrations with respect to the totals, L/mol.
    dc_dMtot, dc_dLtot : numpy.ndarray, shape (..., S)
        d[species_s] / d M_tot and / d L_tot (dimensionless). Unlike the log derivatives these are
        finite in tubes where a total is zero (the one-sided limit at that total), which is what a
        chain rule to delivered volumes needs for blank tubes.
    dfree_M_dMtot, dfree_M_dLtot, dfree_L_dMtot, dfree_L_dLtot : numpy.ndarray, shape (...)
        The same absolute derivatives for the free concentrations.

    Notes
    -----
    A quantity that is identically zero because a total is zero has no logarithmic derivative; it is
    reported as 0 there (its contribution c * dln c to any absorbance derivative is 0), and its
    first-order response to the zero total is carried by ``dc_dMtot`` / ``dc_dLtot``.
    """

    dlnc_dlnbeta: np.ndarray
    dlnc_dMtot: np.ndarray
    dlnc_dLtot: np.ndarray
    dlnfree_M_dlnbeta: np.ndarray
    dlnfree_L_dlnbeta: np.ndarray
    dlnfree_M_dMtot: np.ndarray
    dlnfree_M_dLtot: np.ndarray
    dlnfree_L_dMtot: np.ndarray
    dlnfree_L_dLtot: np.ndarray
    dc_dMtot: np.ndarray
    dc_dLtot: np.ndarray
    dfree_M_dMtot: np.ndarray
    dfree_M_dLtot: np.ndarray
    dfree_L_dMtot: np.ndarray
    dfree_L_dLtot: np.ndarray

    def summary(self) -> dict:
        """Plain JSON-safe values: every field as nested lists."""
        return {name: np.asarray(value).tolist() for name, value in vars(self).items()}

    def __repr__(self) -> str:
        return f"Sensitivity(batch shape {np.shape(self.dlnfree_M_dMtot)}, {np.shape(self.dc_dMtot)[-1]} species)"


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
    r = _as_int(stoich[:, 2], "stoich column r")
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


def _one_to_one_free(M0, L0, K):
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
                f"{name} must be finite and >= 0 (mol/L); bad entries at index {_where(bad)}"
            )
    bad = ~(np.isfinite(K) & (K >= 0.0))
    if np.any(bad):
        raise EquilibriumError(f"K must be finite and >= 0 (L/mol); bad entries at index {_where(bad)}")
    return M0, L0, K


# ----------------------------------------------------------------------------------------------------
# General solver


def speciate(M_tot_M, L_tot_M, stoich_pq, log_beta_cond) -> Speciation:
    """Solve the mass balances of one metal and one ligand in every tube at once.

    Parameters
    ----------
    M_tot_M, L_tot_M : array_like, shape (...)
        Total metal and total ligand, mol/L (finite, >= 0; either may be 0). Broadcast together.
    stoich_pq : array_like of int, shape (S, 2)
        Columns p, q of each species M_p L_q (after folding H into conditional constants). q = 0
        (hydroxo M(OH)_n, polynuclear M_p(OH)_n) and p = 0 (protonated ligand H_n L) are allowed, as are
        polynuclear complexes such as M2L; p = q = 0 is not.
    log_beta_cond : array_like, shape (S,) or broadcastable (..., S)
        log10 conditional constants; e.g. shape (trials, 1, S) against totals (trials, tubes) for Monte
        Carlo. -inf removes a species.

    Returns
    -------
    Speciation
        Batch shape = broadcast of the totals' shapes and ``log_beta_cond.shape[:-1]``.

    Notes
    -----
    A single 1:1 species is solved in closed form (:func:`one_to_one`). When every species holds at
    most one M (p <= 1: ML_n with protonated-ligand and mononuclear hydroxo species), the metal balance
    is linear in [M] and is eliminated, leaving one monotone equation in ln[L] solved by bracketed,
    bisection-safeguarded Newton. Otherwise (and for any tube that reduced solve leaves) damped Newton
    on the log ratios of computed to given totals, in (ln[M], ln[L]), with batched 2x2 solves and an
    Armijo backtracking line search on their squared norm; the 2x2 determinant is formed as a sum of non-negative terms
    (Lagrange's identity), so it keeps full relative accuracy when the Jacobian is nearly singular
    (strong complexes near equivalence). The start is the best, by the same merit, of the weak-binding
    point and one stoichiometric limiting solution per complex (each complex taken alone, with the
    first-order side reactions of M and L folded into Ringbom's alpha coefficients: Ringbom 1963,
    *Complexation in Analytical Chemistry*, Interscience). Tubes that do not converge go to a bracketed
    nested solve (bisection on ln[L], monotone Newton on ln[M]; both 1-D problems are monotone), then
    are polished by Newton. Converged tubes satisfy both mass balances to a relative 2e-14 (1e-11 at
    worst, where rounding of ln[s] limits it). Tested over log beta -3..30 and totals 0 or 1e-10..1 M;
    the free concentrations themselves are as well determined as the problem's conditioning allows
    (a strong complex at equivalence leaves free [M] set by a difference of nearly equal totals).

    Raises
    ------
    EquilibriumError
        Negative or non-finite totals, NaN or +inf constants, invalid stoichiometry, or (should the
        fallback ever fail) the tubes that did not converge.
    """
    p, q = _as_stoich_pq(stoich_pq)
    M, L, lb10, batch = _prepare(M_tot_M, L_tot_M, log_beta_cond, p.size)
    if p.size == 1 and p[0] == 1 and q[0] == 1:
        with np.errstate(over="ignore"):
            K = 10.0 ** lb10[0]
        if not np.all(np.isfinite(K)):
            raise EquilibriumError("log_beta_cond of the 1:1 complex is too large (beta overflows)")
        ML = one_to_one(M, L, K)
        free_M = _one_to_one_free(M, L, K)
        free_L = _one_to_one_free(L, M, K)
        species = ML[:, None]
    else:
        free_M, free_L, species = _solve(lb10, p, q, M, L)
    return Speciation(
        free_M=free_M.reshape(batch),
        free_L=free_L.reshape(batch),
        species_M=species.reshape(batch + (p.size,)),
        M_tot_M=M.reshape(batch),
        L_tot_M=L.reshape(batch),
    )


def _as_int(values, what, error=ValueError):
    arr = np.asarray(values)
    if arr.dtype.kind not in "iu":
        if arr.dtype.kind != "f" or not np.all(np.isfinite(arr)) or np.any(arr != np.round(arr)):
            raise error(f"{what} must be integers; got {arr.tolist()}")
    return arr.astype(np.int64)


def _as_stoich_pq(stoich_pq):
    st = np.asarray(stoich_pq)
    if st.ndim != 2 or st.shape[1] != 2 or st.shape[0] == 0:
        raise EquilibriumError(
            f"stoich_pq must have shape (S, 2) with columns p, q and S >= 1; got shape {st.shape}"
        )
    st = _as_int(st, "stoich_pq", EquilibriumError)
    if np.any(st < 0):
        raise EquilibriumError(f"stoich_pq entries must be >= 0; got rows {st[(st < 0).any(1)].tolist()}")
    if np.any(st.sum(1) == 0):
        raise EquilibriumError("a species with p = q = 0 contains neither M nor L; remove that row of stoich_pq")
    return st[:, 0].astype(float), st[:, 1].astype(float)


def _where(bad):
    """Readable index list of the bad entries (at most 10)."""
    idx = np.argwhere(np.atleast_1d(bad))
    shown = [tuple(int(i) for i in row) if row.size > 1 else int(row[0]) for row in idx[:10]]
    more = f" and {len(idx) - 10} more" if len(idx) > 10 else ""
    return f"{shown}{more}"


def _prepare(M_tot_M, L_tot_M, log_beta_cond, S):
    M = np.asarray(M_tot_M, dtype=float)
    L = np.asarray(L_tot_M, dtype=float)
    lb = np.asarray(log_beta_cond, dtype=float)
    if lb.ndim == 0 or lb.shape[-1] not in (1, S):
        raise EquilibriumError(
            f"log_beta_cond must have {S} entries on its last axis (one per species); got shape {lb.shape}"
        )
    for name, arr in (("M_tot_M", M), ("L_tot_M", L)):
        bad = ~(np.isfinite(arr) & (arr >= 0.0))
        if np.any(bad):
            raise EquilibriumError(
                f"{name} must be finite and >= 0 (mol/L); bad tubes at index {_where(bad)}"
            )
    bad = np.isnan(lb) | (lb == np.inf)
    if np.any(bad):
        raise EquilibriumError(
            f"log_beta_cond must be finite (or -inf to drop a species); bad entries at {_where(bad)}"
        )
    try:
        batch = np.broadcast_shapes(M.shape, L.shape, lb.shape[:-1])
    except ValueError as exc:
        raise EquilibriumError(
            f"totals and constants do not broadcast: M_tot_M {M.shape}, L_tot_M {L.shape}, "
            f"log_beta_cond {lb.shape} (last axis = species)"
        ) from exc
    n = int(np.prod(batch, dtype=np.int64))
    M = np.broadcast_to(M, batch).reshape(n).copy()
    L = np.broadcast_to(L, batch).reshape(n).copy()
    # species-major (S, n), log10, a view where possible (constants shared by all tubes cost nothing);
    # the solver converts block by block to natural logs
    lb10 = np.moveaxis(np.broadcast_to(lb, batch + (S,)), -1, 0).reshape(S, n)
    return M, L, lb10, batch


class _System:
    """Stoichiometry and the weight vectors the solver needs (species-major: arrays are (S, n))."""

    def __init__(self, p, q):
        self.p, self.q = p, q
        self.S = p.size
        self.p2, self.pq, self.q2 = p * p, p * q, q * q
        # pairs of complexes entering the determinant by Lagrange's identity, weight (p_s q_t - p_t q_s)^2
        self.pairs = [
            (s, t, float((p[s] * q[t] - p[t] * q[s]) ** 2))
            for s in range(self.S)
            for t in range(s + 1, self.S)
            if p[s] * q[t] != p[t] * q[s]
        ]
        self.side_M = np.flatnonzero((p == 1) & (q == 0))
        self.side_L = np.flatnonzero((p == 0) & (q == 1))
        self.complexes = np.flatnonzero((p >= 1) & (q >= 1))
        self.poly_M = np.flatnonzero((q == 0) & (p >= 2))
        self.poly_L = np.flatnonzero((p == 0) & (q >= 2))
        # every species has p <= 1: the metal balance is linear in [M] and can be eliminated (_solve_p1)
        self.linear_in_M = bool(np.all(p <= 1))
        self.B = np.flatnonzero(p == 1)  # species holding one M: [s] = [M] w_s, w_s = beta_s [L]^q_s
        self.A = np.flatnonzero(p == 0)  # species without M
        self.qB, self.qA = q[self.B], q[self.A]
        self.qB2, self.qA2 = self.qB**2, self.qA**2
        qB = self.qB
        self.pairs_B = [
            (s, t, float((qB[s] - qB[t]) ** 2))
            for s in range(qB.size)
            for t in range(s + 1, qB.size)
            if qB[s] != qB[t]
        ]
        one_one = np.flatnonzero((p == 1) & (q == 1))
        self.one_one = int(one_one[0]) if one_one.size else None


def _solve(lb10, p, q, M, L):
    """Free [M], free [L] (n,) and species (n, S) for flat arrays: lb10 (S, n) log10 constants, M, L (n,).

    Tubes are processed in blocks so that the working arrays stay in cache (the solver is memory bound;
    one pass over 1e6 tubes is ~10x slower per element than over 1.6e4).
    """
    sy = _System(p, q)
    n = M.size
    free_M = np.empty(n)
    free_L = np.empty(n)
    species = np.empty((n, sy.S))
    ok = np.empty(n, dtype=bool)

    def run_block(start):
        sl = slice(start, min(n, start + _BLOCK))
        lnb = lb10[:, sl] * LN10
        Mb, Lb = M[sl], L[sl]
        if sy.linear_in_M:
            okb, c, fm, fl = _solve_p1(lnb, sy, Mb, Lb)
            rest = np.flatnonzero(~okb)
        else:
            okb = np.zeros(Mb.size, dtype=bool)
            c, fm, fl = np.empty((sy.S, Mb.size)), np.empty(Mb.size), np.empty(Mb.size)
            rest = np.arange(Mb.size)
        if rest.size:  # the general two-variable Newton for the rest
            lnr, Mr, Lr = lnb.take(rest, axis=1), Mb[rest], Lb[rest]
            x0, y0 = _initial_guess(lnr, sy, Mr, Lr)
            _, _, okb[rest], cr, fm[rest], fl[rest] = _newton(lnr, sy, Mr, Lr, x0, y0)
            _put(c, rest, cr)
        ok[sl], free_M[sl], free_L[sl] = okb, fm, fl
        species[sl] = c.T

    for start in range(0, n, _BLOCK):  # loop over blocks of tubes, vectorised within each
        run_block(start)
    if not np.all(ok):
        bad = np.flatnonzero(~ok)
        lnb = lb10[:, bad] * LN10
        xb, yb = _nested(lnb, sy, M[bad], L[bad])
        _, _, okb, c, free_M[bad], free_L[bad] = _newton(lnb, sy, M[bad], L[bad], xb, yb)
        species[bad] = c.T
        if not np.all(okb):
            raise EquilibriumError(
                f"mass balances did not converge in tubes {bad[~okb][:10].tolist()} (flattened batch "
                "index); check their totals and constants"
            )
    return free_M, free_L, species


def _solve_p1(lnb, sy, M, L):
    """One-variable solve for systems where every species has p <= 1 (lnb (S, n) natural logs).

    The metal balance is then linear in [M]: [M] = M_tot / alpha, alpha = 1 + sum_B w_s with
    w_s = beta_s [L]^q_s over the species holding one M. What remains is

        TL(y) = [L] + sum_A q_s [s] + M_tot g / alpha = L_tot,   g = sum_B q_s w_s,   y = ln[L],

    increasing in y, with dTL/dy = [L] + sum_A q_s^2 [s] + M_tot (g2 alpha - g^2) / alpha^2 and
    g2 alpha - g^2 = g2 + sum_{s<t in B} w_s w_t (q_s - q_t)^2 (Lagrange's identity: no cancellation).
    Newton on ln(TL / L_tot) safeguarded by bisection inside a bracket that every iterate tightens (the
    "rtsafe" scheme: Press et al. 2007, *Numerical Recipes*, 3rd ed., section 9.4). Bracket: [L] = L_tot
    gives TL >= L_tot; every term of TL at most L_tot/(S+1), using [M] <= M_tot, gives TL <= L_tot. Start:
    the exact 1:1 free ligand when a 1:1 complex is present, else [L] = L_tot.

    Returns a per-tube success flag, species (S, n), free [M] and free [L]; tubes that miss the
    tolerance (rounding-limited) are left to the two-variable solver.
    """
    n = M.size
    S = sy.S
    p, q = sy.p, sy.q
    ok = np.zeros(n, dtype=bool)
    c_out = np.zeros((S, n))
    m_out = np.zeros(n)
    l_out = np.zeros(n)
    lnM, lnL = _ln_totals(M, L)
    live = L > 0.0
    # L_tot = 0: no ligand; [M] = M_tot / (1 + sum of (1, 0) side species), solved in closed form
    if not np.all(live):
        dead = np.flatnonzero(~live)
        lnd = lnb.take(dead, axis=1)
        w = np.where((q == 0)[:, None], np.exp(lnd), 0.0)  # only q = 0 species survive without L
        md = M[dead] / (1.0 + (p @ w))
        _put(c_out, dead, w * md)
        m_out[dead] = md
        ok[dead] = True
        idx = np.flatnonzero(live)
        lnb, M, L, lnM, lnL = lnb.take(idx, axis=1), M[idx], L[idx], lnM[idx], lnL[idx]
    else:
        idx = np.arange(n)
    target = lnL - np.log(S + 1.0)
    lo = target
    with np.errstate(over="ignore", invalid="ignore"):
        for s in range(S):  # loop over species, vectorised over tubes
            if q[s] >= 1:
                bound = (target - np.log(q[s]) - lnb[s] - (p[s] * lnM if p[s] else 0.0)) / q[s]
                lo = np.minimum(lo, bound)
    hi = lnL.copy()
    if sy.one_one is not None:
        with np.errstate(over="ignore"):
            K = np.exp(lnb[sy.one_one])
        with np.errstate(divide="ignore", invalid="ignore"):
            y = np.log(_one_to_one_free(L, M, K))
        y = np.where(np.isfinite(y), np.minimum(np.maximum(y, lo), hi), hi)
    else:
        y = hi.copy()
    lnbB = lnb[sy.B]
    lnbA = lnb[sy.A] if sy.A.size else None
    for _ in range(_MAX_NEWTON):
        fl = np.exp(y)
        w = np.exp(lnbB + sy.qB[:, None] * y)
        alpha = 1.0 + w.sum(0)
        g = sy.qB @ w
        lag = sy.qB2 @ w
        for s, t, wt in sy.pairs_B:  # loop over species pairs, vectorised over tubes
            lag += wt * (w[s] * w[t])
        fm = M / alpha
        TL = fl + fm * g
        dTL = fl + fm * lag / alpha
        if lnbA is not None:
            cA = np.exp(lnbA + sy.qA[:, None] * y)
            TL += sy.qA @ cA
            dTL += sy.qA2 @ cA
        r = np.log(TL / L)
        done = np.abs(r) <= _TOL_RES
        if done.any():
            di = np.flatnonzero(done)
            gone = idx[di]
            ok[gone] = True
            m_out[gone], l_out[gone] = fm[di], fl[di]
            cg = np.zeros((S, di.size))
            cg[sy.B] = w.take(di, axis=1) * fm[di]
            if lnbA is not None:
                cg[sy.A] = cA.take(di, axis=1)
            _put(c_out, gone, cg)
            keep = np.flatnonzero(~done)
            if keep.size == 0:
                break
            idx, y, r, TL, dTL = idx[keep], y[keep], r[keep], TL[keep], dTL[keep]
            lo, hi, M, L = lo[keep], hi[keep], M[keep], L[keep]
            lnbB = lnbB.take(keep, axis=1)
            if lnbA is not None:
                lnbA = lnbA.take(keep, axis=1)
        above = r > 0.0
        hi = np.where(above, y, hi)
        lo = np.where(above, lo, y)
        yn = y - r * TL / dTL
        # outside the bracket (or not a number): bisect instead
        yn = np.where((yn > lo) & (yn < hi), yn, 0.5 * (lo + hi))
        y = yn
    return ok, c_out, m_out, l_out


def _ln_totals(M, L):
    with np.errstate(divide="ignore"):
        lnM = np.where(M > 0.0, np.log(M), _LN_ZERO)
        lnL = np.where(L > 0.0, np.log(L), _LN_ZERO)
    return lnM, lnL


def _initial_guess(lnb, sy, M, L):
    """Best of a few closed-form limiting solutions, judged by the log-ratio merit.

    Candidates: (a) weak binding, free = total; (b) for each complex s (p, q >= 1) taken alone: it holds
    c = min(M/p, L/q); the component in excess keeps the rest (or, near equivalence, what the complex
    releases on dissociation, [L]/[M] = q/p), and the other follows from beta; (c) for each polynuclear
    side species (M_p or L_q alone, p or q >= 2) holding all of its component. First-order side species
    (p, q) = (1, 0) and (0, 1) are folded in as Ringbom alpha coefficients; the merit uses the full
    system.
    """
    p, q = sy.p, sy.q
    n = M.size
    lnM, lnL = _ln_totals(M, L)
    zero = np.zeros(n)
    ln_aM = np.log1p(np.exp(lnb[sy.side_M]).sum(0)) if sy.side_M.size else zero
    ln_aL = np.log1p(np.exp(lnb[sy.side_L]).sum(0)) if sy.side_L.size else zero
    weak_x = np.where(M > 0.0, lnM - ln_aM, _LN_ZERO)
    weak_y = np.where(L > 0.0, lnL - ln_aL, _LN_ZERO)
    cands = [(weak_x, weak_y)]
    both = (M > 0.0) & (L > 0.0)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        for s in sy.complexes:  # loop over species, vectorised over tubes
            ps, qs = p[s], q[s]
            lnbp = lnb[s] - ps * ln_aM - qs * ln_aL  # alpha-scaled constant
            lnc = np.minimum(lnM - np.log(ps), lnL - np.log(qs))
            c = np.exp(lnc)
            mex = M - ps * c
            lex = L - qs * c
            metal_side = mex * qs >= lex * ps
            # dissociation of the pure complex: [L]/[M] = q/p and beta' [M]^p [L]^q = c
            ln_md = (lnc - lnbp - qs * np.log(qs / ps)) / (ps + qs)
            ln_d = np.where(metal_side, ln_md, ln_md + np.log(qs / ps))
            ln_e = np.maximum(np.log(np.where(metal_side, mex, lex)), ln_d)  # the component in excess
            k = np.where(metal_side, ps, qs)
            j = np.where(metal_side, qs, ps)
            ln_o = (lnc - lnbp - k * ln_e) / j  # the other one, from the constant
            ln_m = np.minimum(np.where(metal_side, ln_e, ln_o), lnM)
            ln_l = np.minimum(np.where(metal_side, ln_o, ln_e), lnL)
            good = both & np.isfinite(ln_m) & np.isfinite(ln_l)
            cands.append((np.where(good, ln_m - ln_aM, weak_x), np.where(good, ln_l - ln_aL, weak_y)))
        for s in sy.poly_M:
            xs = np.minimum(lnM, (lnM - np.log(p[s]) - lnb[s]) / p[s])
            cands.append((np.where((M > 0.0) & np.isfinite(xs), xs, weak_x), weak_y))
        for s in sy.poly_L:
            ys = np.minimum(lnL, (lnL - np.log(q[s]) - lnb[s]) / q[s])
            cands.append((weak_x, np.where((L > 0.0) & np.isfinite(ys), ys, weak_y)))
    if len(cands) == 1:
        return weak_x, weak_y
    fixM, fixL, Mh, Lh = _surrogates(M, L)
    best_x, best_y = cands[0]
    best = None
    for cx, cy in cands:  # a handful of candidates, each vectorised over tubes
        _, _, _, TM, TL = _evaluate(lnb, sy, cx, cy, fixM, fixL)
        merit = np.abs(np.log(TM / Mh)) + np.abs(np.log(TL / Lh))
        if best is None:
            best = merit
            continue
        better = merit < best
        best = np.where(better, merit, best)
        best_x = np.where(better, cx, best_x)
        best_y = np.where(better, cy, best_y)
    return best_x, best_y


def _surrogates(M, L):
    """Zero-total flags (None when there are none) and totals with 0 replaced by the surrogate 1."""
    if np.any(M == 0.0) or np.any(L == 0.0):
        fixM = (M == 0.0).astype(float)
        fixL = (L == 0.0).astype(float)
        return fixM, fixL, M + fixM, L + fixL
    return None, None, M, L


def _evaluate(lnb, sy, x, y, fixM, fixL):
    """Species concentrations (S, n) and computed totals at (x, y) = (ln[M], ln[L]).

    A zero-total component carries fix = 1 in its computed total so that its residual is exactly 0
    against the surrogate total 1 (see _newton); fixM / fixL are None when no tube needs them.
    """
    c = np.exp(lnb + sy.p[:, None] * x + sy.q[:, None] * y)
    m = np.exp(x)
    fl = np.exp(y)
    TM = m + sy.p @ c
    TL = fl + sy.q @ c
    if fixM is not None:
        TM += fixM
        TL += fixL
    return c, m, fl, TM, TL


def _state(lnb, sy, x, y, Mh, Lh, fixM, fixL):
    """Newton state at (x, y): [x, y, c, [M], [L], TM, TL, ln(TM/M), ln(TL/L), psi]; last axis = tubes."""
    c, m, fl, TM, TL = _evaluate(lnb, sy, x, y, fixM, fixL)
    rM = np.log(TM / Mh)
    rL = np.log(TL / Lh)
    return [x, y, c, m, fl, TM, TL, rM, rL, rM * rM + rL * rL]


def _jacobian(c, m, fl, fixM, fixL, sy):
    """Entries a, b, d of the symmetric 2x2 Jacobian d(TM, TL)/d(ln[M], ln[L]) and its determinant.

    det = a d - b^2 expanded as m l + m Sum q^2 c + l Sum p^2 c + Sum_{s<t} c_s c_t (p_s q_t - p_t q_s)^2
    (Lagrange's identity): a sum of non-negative terms, so no cancellation when a d ~ b^2 (a strong
    complex near equivalence). A zero-total component's row is replaced by the identity, which keeps its
    logarithm fixed; fixM / fixL may be None when no tube has a zero total.
    """
    ap = sy.p2 @ c
    b = sy.pq @ c
    dq = sy.q2 @ c
    a = m + ap
    d = fl + dq
    det = m * d + fl * ap
    for s, t, w in sy.pairs:  # loop over species pairs, vectorised over tubes
        det += w * (c[s] * c[t])
    if fixM is not None:
        det += fixM * d + fixL * a + fixM * fixL
        a = a + fixM
        d = d + fixL
    return a, b, d, det


def _newton(lnb, sy, M, L, x, y):
    """Damped Newton with Armijo backtracking.

    Returns x, y, a per-tube success flag, and the species (S, n), free [M] and free [L] at (x, y).

    Newton is applied to the log residuals R = (ln(TM/M_tot), ln(TL/L_tot)): each is a log-sum-exp of
    affine functions of (x, y), close to piecewise linear, so the Newton model stays good far from the
    root where the plain residual's (TM - M_tot) does not (that one needs ~1 iteration per e-fold when
    a free concentration is far too high). Step: J d = -diag(TM, TL) R. Merit psi = |R|^2, for which the
    Newton direction has slope exactly -2 psi, so the Armijo test is well defined in every tube.
    """
    n = M.size
    x_out = np.empty(n)
    y_out = np.empty(n)
    c_out = np.empty((sy.S, n))
    m_out = np.empty(n)
    l_out = np.empty(n)
    ok = np.zeros(n, dtype=bool)
    fixM, fixL, Mh, Lh = _surrogates(M, L)
    idx = np.arange(n)
    state = _state(lnb, sy, x, y, Mh, Lh, fixM, fixL)
    stalled = np.zeros(n, dtype=bool)  # indexed like the active set
    for _ in range(_MAX_NEWTON + 1):
        psi = state[9]
        done = psi <= _TOL_RES**2
        leave = done | stalled
        if leave.any():
            out = np.flatnonzero(leave)
            gone = idx[out]
            for dst, v in zip((x_out, y_out, c_out, m_out, l_out), state[:5], strict=True):
                _put(dst, gone, _take(v, out))
            ok[gone] = psi[out] <= np.where(done[out], _TOL_RES**2, _TOL_STALL**2)
            keep = np.flatnonzero(~leave)
            idx = idx[keep]
            if idx.size == 0:
                break
            state = [_take(v, keep) for v in state]
            lnb, Mh, Lh = _take(lnb, keep), Mh[keep], Lh[keep]
            if fixM is not None:
                fixM, fixL = fixM[keep], fixL[keep]
        xa, ya, c, m, fl, TM, TL, rM, rL, psi = state
        a, b, d, det = _jacobian(c, m, fl, fixM, fixL, sy)
        gM = TM * rM
        gL = TL * rL
        dx = (b * gL - d * gM) / det
        dy = (b * gM - a * gL) / det
        t = _MAX_STEP / np.maximum(np.maximum(np.abs(dx), np.abs(dy)), _MAX_STEP)  # step cap, no 0/0
        new = _state(lnb, sy, xa + t * dx, ya + t * dy, Mh, Lh, fixM, fixL)
        accept = new[9] <= psi * (1.0 - 2.0 * _ARMIJO * t)  # Armijo, slope -2 psi per unit step
        pending = np.flatnonzero(~accept)
        for _ in range(_MAX_HALVINGS):  # halve the step of the tubes that fail, until Armijo holds
            if pending.size == 0:
                break
            t[pending] *= 0.5
            tp = t[pending]
            trial = _state(
                _take(lnb, pending), sy, xa[pending] + tp * dx[pending], ya[pending] + tp * dy[pending],
                Mh[pending], Lh[pending],
                None if fixM is None else fixM[pending], None if fixL is None else fixL[pending],
            )
            good = np.flatnonzero(trial[9] <= psi[pending] * (1.0 - 2.0 * _ARMIJO * tp))
            gi = pending[good]
            for v, w in zip(new, trial, strict=True):
                _put(v, gi, _take(w, good))
            accept[gi] = True
            pending = pending[~accept[pending]]
        # a tube whose line search failed keeps its point and leaves at the next check
        stalled = ~accept
        if stalled.any():
            back = np.flatnonzero(stalled)
            for v, w in zip(new, state, strict=True):
                _put(v, back, _take(w, back))
        state = new
    else:
        for dst, v in zip((x_out, y_out, c_out, m_out, l_out), state[:5], strict=True):
            _put(dst, idx, v)
    return x_out, y_out, ok, c_out, m_out, l_out


def _take(v, ix):
    """v[..., ix] for integer ix; ndarray.take is ~10x faster than fancy indexing on 2-D arrays."""
    return v.take(ix, axis=-1)


def _put(dst, ix, src):
    """dst[..., ix] = src, row by row for 2-D dst (much faster than 2-D fancy assignment)."""
    if dst.ndim == 1:
        dst[ix] = src
    else:
        for r in range(dst.shape[0]):  # loop over species rows, vectorised over tubes
            dst[r, ix] = src[r]


def _nested(lnb, sy, M, L):
    """Bracketed nested solve that cannot fail (fallback; lnb is (S, n)).

    Outer: bisection on y = ln[L] for h(y) = TL(x*(y), y) - L_tot, which increases with y
    (dh/dy = det J / J_MM > 0). Inner: x*(y) solves TM(x, y) = M_tot, a sum of exponentials in x with
    non-negative coefficients (convex, increasing), by Newton started at an upper bound, from which the
    iterates decrease monotonically to the root (Fourier's condition; e.g. Ostrowski 1966, *Solution of
    Equations and Systems of Equations*, ch. 7). Brackets: [L] = L_tot gives h >= 0; every term of TL at
    most L_tot/(S+1), using [M] <= M_tot, gives h <= 0.
    """
    p, q = sy.p, sy.q
    S = sy.S
    lnM, lnL = _ln_totals(M, L)
    fixM = M == 0.0
    fixL = L == 0.0
    hasM = (p >= 1)[:, None]
    hasL = (q >= 1)[:, None]
    p_ = np.where(p >= 1, p, 1.0)[:, None]
    q_ = np.where(q >= 1, q, 1.0)[:, None]
    target = lnL - np.log(S + 1.0)
    with np.errstate(invalid="ignore", over="ignore"):
        pl = np.where(hasM, p[:, None] * lnM, 0.0)
        bounds = (target - np.log(q_) - lnb - pl) / q_
        bounds = np.where(hasL & np.isfinite(bounds), bounds, np.inf)
    y_lo = np.minimum(target, bounds.min(0))
    y_hi = lnL.copy()

    def inner_x(y):
        # start where the largest single term of TM equals M_tot: TM >= M_tot there
        with np.errstate(invalid="ignore", over="ignore"):
            ql = np.where(hasL, q[:, None] * y, 0.0)
            ub = (lnM - np.log(p_) - lnb - ql) / p_
            ub = np.where(hasM & np.isfinite(ub), ub, np.inf)
        x = np.minimum(lnM, ub.min(0))
        for _ in range(60):  # quadratic from within ln(S+1) of the root: a handful of steps
            c = np.exp(lnb + p[:, None] * x + q[:, None] * y)
            m = np.exp(x)
            f = m + p @ c - M
            fp = m + sy.p2 @ c
            with np.errstate(invalid="ignore", divide="ignore"):
                step = np.where(fp > 0.0, f / fp, 0.0)
            step = np.where(fixM, 0.0, np.maximum(step, 0.0))  # monotone from above
            x = x - step
            if np.all(step <= 1e-15 * np.maximum(1.0, np.abs(x))):
                break
        return np.where(fixM, _LN_ZERO, x)

    for _ in range(120):
        mid = 0.5 * (y_lo + y_hi)
        x = inner_x(mid)
        c = np.exp(lnb + p[:, None] * x + q[:, None] * mid)
        h = np.exp(mid) + q @ c - L
        above = h > 0.0
        y_hi = np.where(above, mid, y_hi)
        y_lo = np.where(above, y_lo, mid)
    y = np.where(fixL, _LN_ZERO, 0.5 * (y_lo + y_hi))
    return inner_x(y), y


# ----------------------------------------------------------------------------------------------------
# Sensitivities


def sensitivities(spec: Speciation, stoich_pq, log_beta_cond) -> Sensitivity:
    """Analytic derivatives of the equilibrium by the implicit function theorem.

    With u = (ln[M], ln[L]) and F(u; theta) = (TM - M_tot, TL - L_tot) = 0, du/dtheta = -J^-1 dF/dtheta
    (e.g. Krantz & Parks 2002, *The Implicit Function Theorem*, Birkhaeuser, th. 3.3.1), J the 2x2
    Jacobian of the balances (see :func:`speciate`), dF/d ln beta_j = (p_j [j], q_j [j]),
    dF/dM_tot = (-1, 0), dF/dL_tot = (0, -1); then d ln[s] = delta_sj d ln beta_j + p_s dx + q_s dy.
    Batched closed-form 2x2 solves with the determinant from Lagrange's identity (no cancellation).

    Where a total is zero the log of that component is no coordinate; the balances are linearised in
    its concentration instead. With M_tot = 0 < L_tot: dTM/d[M] = 1 + Sum_{p=1} beta [L]^q = alpha,
    dTL/d[M] = Sum_{p=1} q beta [L]^q = g, dTM/dy = 0, dTL/dy = J_LL; the triangular system gives
    d[M]/dM_tot = 1/alpha, dy/dM_tot = -g/(alpha J_LL), dy/dL_tot = 1/J_LL, dy/d ln beta_j = -q_j [j]/J_LL
    and d[s]/dM_tot = beta_s [L]^q_s / alpha for p_s = 1 (0 for p_s >= 2). Likewise with L and M swapped.
    These one-sided limits fill the absolute fields (``dc_*``, ``dfree_*_d*tot``).

    Parameters
    ----------
    spec : Speciation
        A result of :func:`speciate` for the same stoichiometry and constants.
    stoich_pq, log_beta_cond
        As passed to :func:`speciate`.

    Returns
    -------
    Sensitivity
    """
    p, q = _as_stoich_pq(stoich_pq)
    sy = _System(p, q)
    S = p.size
    batch = np.shape(spec.free_M)
    M, L, lb10, batch2 = _prepare(spec.M_tot_M, spec.L_tot_M, log_beta_cond, S)
    lnb = lb10 * LN10
    if batch2 != batch:
        raise EquilibriumError(
            f"log_beta_cond (shape {np.shape(log_beta_cond)}) does not broadcast to the speciation's batch "
            f"shape {batch}; pass the constants used for speciate()"
        )
    n = M.size
    c = np.asarray(spec.species_M, dtype=float).reshape(n, S).T  # (S, n)
    m = np.asarray(spec.free_M, dtype=float).reshape(n)
    fl = np.asarray(spec.free_L, dtype=float).reshape(n)
    zM = M == 0.0
    zL = L == 0.0
    onlyM0 = zM & ~zL
    onlyL0 = zL & ~zM
    P = p[:, None]
    Q = q[:, None]

    a, b, d, det = _jacobian(c, m, fl, zM.astype(float), zL.astype(float), sy)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        inv = 1.0 / det
        pc = P * c
        qc = Q * c
        # regular tubes: J^-1 = [[d, -b], [-b, a]] / det
        dx_db = (b * qc - d * pc) * inv  # (S, n): d ln[M] / d ln beta_j
        dy_db = (b * pc - a * qc) * inv
        dx_dM, dy_dM = d * inv, -b * inv
        dx_dL, dy_dL = -b * inv, a * inv

        # concentrations per unit of a zero component: beta [L]^q for p = 1 species, beta [M]^p for q = 1
        lnm = np.where(m > 0.0, np.log(np.where(m > 0.0, m, 1.0)), _LN_ZERO)
        lnl = np.where(fl > 0.0, np.log(np.where(fl > 0.0, fl, 1.0)), _LN_ZERO)
        per_m = np.where(P == 1, np.exp(lnb + Q * lnl), 0.0)
        per_l = np.where(Q == 1, np.exp(lnb + P * lnm), 0.0)
        alpha_m = 1.0 + per_m.sum(0)
        alpha_l = 1.0 + per_l.sum(0)
        JLL = fl + sy.q2 @ c
        JMM = m + sy.p2 @ c
        # M_tot = 0 < L_tot (only p = 0 species are present)
        dy_db = np.where(onlyM0, -qc / JLL, dy_db)
        dy_dM = np.where(onlyM0, -(q @ per_m) / (alpha_m * JLL), dy_dM)
        dy_dL = np.where(onlyM0, 1.0 / JLL, dy_dL)
        # L_tot = 0 < M_tot (only q = 0 species are present)
        dx_db = np.where(onlyL0, -pc / JMM, dx_db)
        dx_dL = np.where(onlyL0, -(p @ per_l) / (alpha_l * JMM), dx_dL)
        dx_dM = np.where(onlyL0, 1.0 / JMM, dx_dM)
    # the log of a zero component has no derivative: report 0 (see Sensitivity, Notes)
    dx_db = np.where(zM, 0.0, dx_db)
    dx_dM = np.where(zM, 0.0, dx_dM)
    dx_dL = np.where(zM, 0.0, dx_dL)
    dy_db = np.where(zL, 0.0, dy_db)
    dy_dM = np.where(zL, 0.0, dy_dM)
    dy_dL = np.where(zL, 0.0, dy_dL)

    present = c > 0.0
    dlnc_db = np.eye(S)[:, :, None] + P[:, :, None] * dx_db[None] + Q[:, :, None] * dy_db[None]
    dlnc_db = np.where(present[:, None, :], dlnc_db, 0.0)  # (S species, S constants, n)
    dlnc_dM = np.where(present, P * dx_dM + Q * dy_dM, 0.0)
    dlnc_dL = np.where(present, P * dx_dL + Q * dy_dL, 0.0)

    # absolute first-order responses, including the limits at a zero total
    dm_dM = np.where(zM, 1.0 / alpha_m, m * dx_dM)
    dm_dL = np.where(zM, 0.0, m * dx_dL)
    dl_dL = np.where(zL, 1.0 / alpha_l, fl * dy_dL)
    dl_dM = np.where(zL, 0.0, fl * dy_dM)
    dc_dM = c * dlnc_dM + np.where(zM, per_m / alpha_m, 0.0)
    dc_dL = c * dlnc_dL + np.where(zL, per_l / alpha_l, 0.0)

    def out(arr, tail=()):
        # (..., n) species-major -> batch + tail
        return np.moveaxis(arr.reshape(tail + (n,)), -1, 0).reshape(batch + tail)

    return Sensitivity(
        dlnc_dlnbeta=out(dlnc_db, (S, S)),
        dlnc_dMtot=out(dlnc_dM, (S,)),
        dlnc_dLtot=out(dlnc_dL, (S,)),
        dlnfree_M_dlnbeta=out(dx_db, (S,)),
        dlnfree_L_dlnbeta=out(dy_db, (S,)),
        dlnfree_M_dMtot=out(dx_dM),
        dlnfree_M_dLtot=out(dx_dL),
        dlnfree_L_dMtot=out(dy_dM),
        dlnfree_L_dLtot=out(dy_dL),
        dc_dMtot=out(dc_dM, (S,)),
        dc_dLtot=out(dc_dL, (S,)),
        dfree_M_dMtot=out(dm_dM),
        dfree_M_dLtot=out(dm_dL),
        dfree_L_dMtot=out(dl_dM),
        dfree_L_dLtot=out(dl_dL),
    )
