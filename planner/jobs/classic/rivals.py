"""Rival stoichiometries: how far the readings a plan predicts lie from the best curve of another model.

For a rival set of complexes (e.g. ML2 alone, or ML + ML2) the rival's constants are searched on a
log grid (coarse, then two finer passes around the best), and at every grid point its absorptivities
are the non-negative weighted least-squares solution (they enter linearly — variable projection,
Golub & Pereyra 1973, SIAM J. Numer. Anal. 10:413). The separation is the smallest whitened residual
norm ‖W (A_plan − A_rival)‖ with Wᵀ W = Σ⁻¹, Σ the readings' covariance from the whole error budget:
the noncentrality (in sd) of a test of the plan's model against the rival, computed on noise-free data.

A rival that contains every complex of the plan plus more (a *nested* rival) would fit the plan's data
exactly by letting the extra complexes vanish; such a rival only counts while each extra complex holds at
least ``MATERIAL_SHARE`` of the metal in some tube (below that the two models are the same for practice).
Even so, an extra complex that absorbs like the plan's per metal (ML2 beside ML on the metal-limited
side) changes a single-wavelength curve very little: a nested rival that stays close is a limit of the
measurement, reported as a warning, while a rival of another stoichiometry that stays close means the
series cannot answer its question.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from ._deps import Model, predict
from .common import hypothetical

MATERIAL_SHARE = 0.2  # an extra complex with < 20 % of the metal in every tube is "absent" [common practice]
# 3 sd: a χ² difference of 9, which a 5 %-level test detects with ~90 % power (z 1.64 + 1.28 ≈ 2.9) [derived]
SEPARATION_WANTED = 3.0
COARSE_STEP = 0.25  # log10 units
WINDOW_BELOW, WINDOW_ABOVE = 3.0, 9.0  # decades around half-formation at the series' concentration

RIVALS: tuple[tuple[str, tuple[tuple[int, int], ...]], ...] = (
    ("1:1", ((1, 1),)),
    ("1:2", ((1, 2),)),
    ("2:1", ((2, 1),)),
    ("1:1+1:2", ((1, 1), (1, 2))),
)


@dataclass(frozen=True)
class RivalFit:
    """Best fit of one rival model to the plan's predicted readings.

    Attributes
    ----------
    model : label, e.g. "1:2".
    separation_sd : whitened residual norm of the best fit (sd units).
    log_beta : best constants of the rival's complexes (log10).
    epsilon_M_cm : their absorptivities at the best fit.
    nested : the rival holds every complex of the plan and more (its extras held to ≥ MATERIAL_SHARE).
    """

    model: str
    separation_sd: float
    log_beta: tuple[float, ...]
    epsilon_M_cm: tuple[float, ...]
    nested: bool = False


def plan_label(model: Model) -> str:
    """'1:1', '1:1+1:2', … for the plan's M–L complexes (metal first)."""
    pq = sorted(
        {(int(p), int(q)) for (p, q, _), m in zip(model.stoich, model.complex_mask, strict=True) if m}
    )
    return "+".join(f"{p}:{q}" for p, q in pq)


def rivals_for(model: Model) -> list[tuple[str, tuple[tuple[int, int], ...]]]:
    own = {(int(p), int(q)) for (p, q, _), m in zip(model.stoich, model.complex_mask, strict=True) if m}
    return [(lab, pq) for lab, pq in RIVALS if set(pq) != own]


def rival_model(model: Model, pq: tuple[tuple[int, int], ...]) -> Model:
    """The plan's model with its M–L complexes replaced by ``pq`` (side species such as HL or MOH kept)."""
    keep = ~model.complex_mask
    names = [s for s, k in zip(model.species, keep, strict=True) if k] + [f"M{p}L{q}" for p, q in pq]
    stoich = np.vstack([model.stoich[keep], np.array([[p, q, 0] for p, q in pq], dtype=int)])
    lb = np.concatenate([model.log_beta[keep], np.zeros(len(pq))])
    eps = np.concatenate([model.epsilon_M_cm[:2], model.epsilon_M_cm[2:][keep], np.zeros(len(pq))])
    rsd = np.zeros_like(eps)
    sizes = np.concatenate([model.sizes_angstrom[:2], model.sizes_angstrom[2:][keep], np.full(len(pq), 4.0)])
    return replace(
        model,
        species=tuple(names),
        stoich=stoich,
        log_beta=lb,
        log_beta_sd=np.zeros(len(lb)),
        absorbers=("M", "L", *names),
        epsilon_M_cm=eps,
        epsilon_rsd=rsd,
        sizes_angstrom=sizes,
    )


def fit_rival(
    model: Model, label: str, pq, totals_M: np.ndarray, ions_M: np.ndarray, data: np.ndarray, W: np.ndarray
) -> RivalFit:
    """Fit rival ``pq`` to ``data`` (Beer–Lambert absorbances of the tubes) by weighted least squares.

    Parameters
    ----------
    totals_M : (n, 2) the tubes' totals; ions_M : (n, n_ions).
    data : (n,) absorbances to fit (noise-free prediction of the plan's model).
    W : (n, n) whitening matrix of the readings' covariance.
    """
    rm = rival_model(model, pq)
    own = {(int(p), int(q)) for (p, q, _), m in zip(model.stoich, model.complex_mask, strict=True) if m}
    extra = np.array([(p, q) not in own for p, q in pq]) if set(pq) > own else np.zeros(len(pq), bool)
    c_ref = float(np.median(totals_M.sum(axis=1)))
    centre = np.array([-(p + q - 1) * np.log10(c_ref) for p, q in pq])
    axes = [np.arange(c - WINDOW_BELOW, c + WINDOW_ABOVE + 1e-9, COARSE_STEP) for c in centre]
    best = _grid_pass(rm, pq, axes, totals_M, ions_M, data, W, extra)
    for step in (COARSE_STEP / 10, COARSE_STEP / 100):
        axes = [np.linspace(b - 15 * step, b + 15 * step, 31) for b in best[1]]
        cand = _grid_pass(rm, pq, axes, totals_M, ions_M, data, W, extra)
        if cand[0] <= best[0]:
            best = cand
    sep, lb, eps = best
    return RivalFit(
        label, float(sep), tuple(float(x) for x in lb), tuple(float(x) for x in eps), bool(extra.any())
    )


def _grid_pass(rm: Model, pq, axes, totals_M, ions_M, data, W, extra):
    mesh = np.stack(np.meshgrid(*axes, indexing="ij"), axis=-1).reshape(-1, len(pq))  # (G, k)
    G, k = mesh.shape
    n_side = len(rm.species) - k
    lb = np.concatenate([np.broadcast_to(rm.log_beta[:n_side], (G, n_side)), mesh], axis=1)
    tot = np.broadcast_to(totals_M, (G,) + totals_M.shape)
    ions = np.broadcast_to(ions_M, (G,) + ions_M.shape)
    with hypothetical():
        st = predict(rm, tot, ions, log_beta=lb, warn=False)
    conc = st.absorber_conc_M()  # (G, n, 2 + S)
    known = rm.path_cm * conc @ rm.epsilon_M_cm  # free reagents and side species
    X = rm.path_cm * st.species_M[..., n_side:]  # (G, n, k)
    r0 = (data - known) @ W.T  # (G, n)
    Xw = np.einsum("ij,gjk->gik", W, X)
    res, eps = _nonneg_lsq(Xw, r0)
    if extra.any():
        M0 = np.where(totals_M[:, 0] > 0, totals_M[:, 0], 1.0)
        p = np.array([a for a, _ in pq], dtype=float)
        share = (st.species_M[..., n_side:] * p / M0[:, None]).max(axis=1)  # (G, k) best tube
        res = np.where(np.all(share[:, extra] >= MATERIAL_SHARE, axis=1), res, np.inf)
    g = int(np.argmin(res))
    return float(res[g]), mesh[g], eps[g]


def _nonneg_lsq(Xw: np.ndarray, r0: np.ndarray):
    """Residual norms and coefficients of min ‖r0 − Xw·e‖, e ≥ 0, batched over G; k ≤ 2 by active sets."""
    G, n, k = Xw.shape
    best_res = np.linalg.norm(r0, axis=1)  # e = 0
    best_e = np.zeros((G, k))
    subsets = [(j,) for j in range(k)] + ([tuple(range(k))] if k > 1 else [])
    for sub in subsets:
        A = Xw[..., list(sub)]  # (G, n, s)
        AtA = np.einsum("gni,gnj->gij", A, A)
        Atb = np.einsum("gni,gn->gi", A, r0)
        s = len(sub)
        reg = 1e-300 + 1e-14 * np.trace(AtA, axis1=1, axis2=2)[:, None, None] * np.eye(s)
        e = np.linalg.solve(AtA + reg, Atb[..., None])[..., 0]
        ok = np.all(e >= 0, axis=1)
        res = np.linalg.norm(r0 - np.einsum("gni,gi->gn", A, e), axis=1)
        better = ok & (res < best_res)
        best_res = np.where(better, res, best_res)
        full = np.zeros((G, k))
        full[:, list(sub)] = e
        best_e = np.where(better[:, None], full, best_e)
    return best_res, best_e
