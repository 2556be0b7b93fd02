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

from .closed_forms import EquilibriumError, as_int_array, bad_indices, one_to_one, one_to_one_free
from .newton import solve_free

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

    def __repr__(self) -> str:
        shape = np.shape(self.free_M)
        n_species = np.shape(self.species_M)[-1]
        return f"Speciation(batch shape {shape}, {n_species} species)"


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
    Armijo backtracking line search on their squared norm; the 2x2 determinant is formed as a sum of
    non-negative terms
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
    p, q = as_stoich_pq(stoich_pq)
    M, L, lb10, batch = prepare_totals(M_tot_M, L_tot_M, log_beta_cond, p.size)
    if p.size == 1 and p[0] == 1 and q[0] == 1:
        with np.errstate(over="ignore"):
            K = 10.0 ** lb10[0]
        if not np.all(np.isfinite(K)):
            raise EquilibriumError("log_beta_cond of the 1:1 complex is too large (beta overflows)")
        ML = one_to_one(M, L, K)
        free_M = one_to_one_free(M, L, K)
        free_L = one_to_one_free(L, M, K)
        species = ML[:, None]
    else:
        free_M, free_L, species = solve_free(lb10, p, q, M, L)
    return Speciation(
        free_M=free_M.reshape(batch),
        free_L=free_L.reshape(batch),
        species_M=species.reshape(batch + (p.size,)),
        M_tot_M=M.reshape(batch),
        L_tot_M=L.reshape(batch),
    )


def as_stoich_pq(stoich_pq):
    st = np.asarray(stoich_pq)
    if st.ndim != 2 or st.shape[1] != 2 or st.shape[0] == 0:
        raise EquilibriumError(
            f"stoich_pq must have shape (S, 2) with columns p, q and S >= 1; got shape {st.shape}"
        )
    st = as_int_array(st, "stoich_pq", EquilibriumError)
    if np.any(st < 0):
        raise EquilibriumError(f"stoich_pq entries must be >= 0; got rows {st[(st < 0).any(1)].tolist()}")
    if np.any(st.sum(1) == 0):
        raise EquilibriumError(
            "a species with p = q = 0 contains neither M nor L; remove that row of stoich_pq"
        )
    return st[:, 0].astype(float), st[:, 1].astype(float)


def prepare_totals(M_tot_M, L_tot_M, log_beta_cond, S):
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
                f"{name} must be finite and >= 0 (mol/L); bad tubes at index {bad_indices(bad)}"
            )
    bad = np.isnan(lb) | (lb == np.inf)
    if np.any(bad):
        raise EquilibriumError(
            f"log_beta_cond must be finite (or -inf to drop a species); bad entries at {bad_indices(bad)}"
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
