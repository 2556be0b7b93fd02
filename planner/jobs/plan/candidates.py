"""Every tube the glassware can make, and the information each would carry.

The candidate set is every combination of the designed stocks' volumes on the plan's grid that fits the
tube (fixed volumes, the background electrolyte that levels the ionic strength and the diluent follow
from the others). Each candidate carries the whitened Jacobian of its reading at every quadrature node of
the guesses' uncertainty; errors shared across tubes (stock concentrations, device calibration) enter as
nuisance parameters with a unit Gaussian prior, which keeps the information additive over tubes and is
exactly equivalent to the full-covariance Fisher information for the target criterion (Woodbury
identity).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ...inference.design_criteria import DesignError
from ...inference.precision import ReadingModel, unpack
from ...inference.priors import Nodes
from ...inference.study import Study
from ...inputs.recipe import Recipe, concat_recipes, totals_M
from ...model.compiled import Model, predict, tube_ions_M
from ...model.jacobians import absorbance_derivatives
from ...uncertainty import delivery
from ...uncertainty.budget import error_factors
from .checks import RANGE_RISK, prior_range_risk

__all__ = [
    "MAX_CANDIDATES",
    "Candidates",
    "candidate_tubes",
    "information_rows",
    "level_ionic_strength",
    "neighbourhood",
    "range_mask",
    "recipe_from_counts",
    "rows_with_prior",
]

MAX_CANDIDATES = 40000  # above this the grid is searched coarsely first, then refined locally


@dataclass(frozen=True)
class Candidates:
    """Every tube the glassware can make.

    Attributes
    ----------
    recipe : all candidates as one recipe (C tubes).
    designed_ids : the stock ids whose volumes are chosen.
    n_grid : number of grid combinations (before the linear-range screen).
    step_mL : the grid step used.
    """

    recipe: Recipe
    designed_ids: tuple[str, ...]
    n_grid: int
    step_mL: float


def _levels(lo: float, hi: float, step: float, allow_zero: bool) -> np.ndarray:
    k0 = max(int(math.ceil(lo / step - 1e-9)), 1)
    k1 = int(math.floor(hi / step + 1e-9))
    lv = np.round(np.arange(k0, k1 + 1) * step, 10)
    return np.concatenate([[0.0], lv]) if allow_zero else lv


def candidate_tubes(
    study: Study, *, step_mL: float | None = None, caps_mL: dict[str, float] | None = None
) -> Candidates:
    """All combinations of designed volumes on the grid that fit the tube (before the range screen).

    Under ``make_up = "to-mark"`` the dispensed volumes (fixed and background ones included) add up to
    at most the tube less ``glassware.make_up_min``, so every flask still takes diluent to its mark.

    Parameters
    ----------
    step_mL : grid step (default the plan's; a multiple of it for a coarse search).
    caps_mL : per-stock upper limits on one tube's volume (e.g. from the stock budget).
    """
    g = study.bench
    devices = g.devices
    step = step_mL or g.step_mL
    fixed = g.fixed_mL
    designed = [s for s in g.stock_ids if s not in (g.diluent_id, g.background_id) and s not in fixed]
    if not designed:
        raise DesignError(
            "design.fixed fixes every stock: nothing is left to vary; remove a stock from fixed"
        )
    # under to-mark the flask keeps make_up_min of room for the diluent (Bench.room_mL)
    room = g.room_mL - sum(fixed.values())
    levels = []
    for sid in designed:
        k = g.stock_index(sid)
        cap = room
        low = max(g.min_volume_mL, step)
        j = devices.stock_device[k]
        if j >= 0:
            cap = min(cap, devices.items[j].capacity_mL)
            low = max(low, delivery.smallest_delivery_mL(devices.items[j]))
        if caps_mL and sid in caps_mL:
            cap = min(cap, caps_mL[sid])
        levels.append(_levels(low, cap, step, allow_zero=True))
    # cartesian product, then keep what fits (vectorised over the grid)
    mesh = np.stack([m.ravel() for m in np.meshgrid(*levels, indexing="ij")], axis=1)
    fits = mesh.sum(axis=1) <= room + 1e-9
    mesh = mesh[fits]
    rec = _complete(study, designed, mesh, "c")
    return Candidates(rec, tuple(designed), rec.n_tubes, step)


def _complete(study: Study, designed, mesh: np.ndarray, prefix: str) -> Recipe:
    """Candidate recipe from designed volumes (C, d): fixed volumes, the background electrolyte that
    levels the ionic strength, and the diluent remainder under ``make_up = "added"``."""
    g = study.bench
    vols = {sid: mesh[:, j] for j, sid in enumerate(designed)}
    for sid, v in g.fixed_mL.items():
        vols[sid] = np.full(mesh.shape[0], v)
    if g.background_id is not None and g.background_id not in g.fixed_mL:
        vols = level_ionic_strength(study, vols)
    if not g.to_mark and g.diluent_id is not None:
        rest = g.tube_volume_mL - sum(vols.values())
        ok = (rest <= 1e-9) | (rest >= g.min_volume_mL - 1e-9)
        vols = {k: v[ok] for k, v in vols.items()}
        vols[g.diluent_id] = np.maximum(rest[ok], 0.0)
    n = len(next(iter(vols.values())))
    if n == 0:
        raise DesignError("no tube fits: the fixed volumes and min_volume leave no room in tube_volume")
    return g.make_recipe(vols, [f"{prefix}{i}" for i in range(n)])


def level_ionic_strength(study: Study, vols: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    """Add the background-electrolyte volume that brings every tube to the same ionic strength.

    The target is ``design.ionic_strength`` (default: the highest ionic strength among the tubes
    without background electrolyte, so every tube can be raised to it). With the diluent filling the
    rest, I = I₀ + V_bg (I_bg − I_dil)/V_tube, I₀ the tube's ionic strength with no background stock
    (from the full speciation, so complexation's change of charges counts). The volume is rounded to the
    grid; tubes that cannot reach the target within ``design.ionic_strength_tolerance`` (no room, or
    volume below min_volume) are dropped.
    """

    g = study.bench
    bg = g.background_id
    model = study.model
    n = len(next(iter(vols.values())))
    tube = g.tube_volume_mL
    rec0 = g.make_recipe(
        {**vols, bg: np.zeros(n)}
        if g.to_mark
        else {**vols, bg: np.zeros(n), g.diluent_id: np.maximum(tube - sum(vols.values()), 0.0)}
    )
    tot = totals_M(rec0, model.stock_conc_M)
    ions = tube_ions_M(model, rec0.volumes_mL, rec0.total_volume_mL)
    st = predict(model, tot, ions, warn=False)
    I0 = st.ionic_strength_M
    k_bg = model.stock_ids.index(bg)
    i_bg = 0.5 * float(model.stock_ion_M[k_bg] @ model.ion_charges**2)
    dil = g.diluent_id
    i_dil = 0.5 * float(model.stock_ion_M[model.stock_ids.index(dil)] @ model.ion_charges**2) if dil else 0.0
    if not i_bg > i_dil:
        raise DesignError(
            f"stock {bg}: the background electrolyte ({i_bg:.3g} M ionic strength) must be "
            f"stronger than the diluent ({i_dil:.3g} M) to level the tubes"
        )
    target = study.ionic_strength_M or float(I0.max())
    v_bg = np.round(np.maximum(target - I0, 0.0) * tube / (i_bg - i_dil) / g.step_mL) * g.step_mL
    v_bg = np.round(v_bg, 10)
    I = I0 + v_bg * (i_bg - i_dil) / tube
    room = g.room_mL - sum(vols.values())
    ok = (np.abs(I - target) <= study.ionic_strength_tolerance * target) & (v_bg <= room + 1e-9)
    ok &= (v_bg == 0) | (v_bg >= g.min_volume_mL - 1e-9)
    if not ok.any():
        raise DesignError(
            f"no tube can be brought to I = {target:.3g} M with stock {bg}: set "
            f"design.ionic_strength lower, use a more concentrated background stock, or widen "
            f"design.ionic_strength_tolerance"
        )
    out = {k: v[ok] for k, v in vols.items()}
    out[bg] = v_bg[ok]
    return out


def information_rows(
    study: Study,
    cand: Candidates,
    nodes: Nodes,
    criterion: str,
    *,
    volumetric: bool = True,
    with_sd: bool = False,
):
    """Whitened Jacobian rows F (G, C, 1, P') and prior M0 (P', P') for every candidate and node (and,
    with ``with_sd``, the independent sd (G, C) each row was whitened by)."""
    model, params = study.model, study.params
    rec = cand.recipe
    tot = totals_M(rec, model.stock_conc_M)
    ions = tube_ions_M(model, rec.volumes_mL, rec.total_volume_mL)
    reading = ReadingModel(model, params, tot, ions)
    G = nodes.theta.shape[0]
    lb, eps, _ = unpack(model, params, nodes.theta)
    st = predict(
        model,
        np.broadcast_to(tot, (G,) + tot.shape),
        np.broadcast_to(ions, (G,) + ions.shape),
        log_beta=lb,
        epsilon_M_cm=eps,
        warn=False,
    )
    J = reading.jac(nodes.theta)  # (G, C, P)
    der = absorbance_derivatives(model, st, eps)
    var = np.empty(st.absorbance.shape)
    shared = []
    for gi in range(G):  # a handful of nodes; each vectorised over candidates
        sub = st[gi]
        f = error_factors(study.bench, model, rec, sub, dA_dtotals=der.dA_dtotals[gi])
        var[gi] = f.photometric_var + (f.delivery_random_var if volumetric else 0.0)
        shared.append(
            np.concatenate([f.J_stock, f.J_device], axis=1) if volumetric else np.zeros((rec.n_tubes, 0))
        )
    sd = np.sqrt(var)
    # spread of each reading from the absorptivities' uncertainty (they enter linearly), for the screen
    eps_sd = model.epsilon_M_cm * model.epsilon_rsd
    band = np.sqrt(np.sum((der.dA_depsilon * eps_sd) ** 2, axis=-1))  # (G, C)
    Fth = J / sd[..., None]
    S = np.stack(shared)  # (G, C, k + d)
    keep = np.any(S != 0, axis=(0, 1)) if S.size else np.zeros(0, dtype=bool)
    if criterion == "target" and keep.any():
        Fs = S[..., keep] / sd[..., None]
        F = np.concatenate([Fth, Fs], axis=-1)
        P = Fth.shape[-1]
        M0 = np.zeros((F.shape[-1],) * 2)
        M0[P:, P:] = np.eye(F.shape[-1] - P)  # each shared error: a unit-sd nuisance factor
    else:
        F = Fth
        M0 = None
    if with_sd:
        return F[:, :, None, :], M0, st, band, sd
    return F[:, :, None, :], M0, st, band


def range_mask(model: Model, st, weights: np.ndarray, band: np.ndarray) -> np.ndarray:
    """Candidates that leave the linear range for at most RANGE_RISK of the guesses' uncertainty."""
    lo, hi = model.linear_range
    return prior_range_risk(st.absorbance, band, weights, lo, hi) <= RANGE_RISK + 1e-12


def rows_with_prior(
    study: Study,
    cand: Candidates,
    prior: Recipe | None,
    nodes: Nodes,
    crit: str,
    *,
    volumetric: bool = True,
    with_sd: bool = False,
):
    """:func:`information_rows` of the candidates, with the information of tubes measured before
    (``prior``) added to M0. Both are computed in one call, so they share the nuisance columns."""
    if prior is None:
        return information_rows(study, cand, nodes, crit, volumetric=volumetric, with_sd=with_sd)
    C = cand.recipe.n_tubes
    r = cand.recipe
    union = concat_recipes([r, prior], ["candidate", "prior"])
    out = information_rows(
        study,
        Candidates(union, cand.designed_ids, union.n_tubes, cand.step_mL),
        nodes,
        crit,
        volumetric=volumetric,
        with_sd=True,
    )
    F, M0, st, band, sd = out
    Fp = F[:, C:, 0, :]
    info = np.einsum("gnp,gnq->gpq", Fp, Fp)  # (G, P', P')
    M0 = info + (0.0 if M0 is None else M0)
    st = st[:, :C]
    res = (F[:, :C], M0, st, band[:, :C])
    return (*res, sd[:, :C]) if with_sd else res


def recipe_from_counts(study: Study, cand: Candidates, idx: np.ndarray, counts: np.ndarray) -> Recipe:
    """The recipe of ``counts`` tubes at candidates ``idx``, ordered the way a bench series is laid out."""
    chosen = np.repeat(idx, counts)
    rec = cand.recipe
    vols = {sid: rec.column(sid)[chosen] for sid in study.bench.dispensed_ids(rec)}
    order = np.lexsort([vols[s] for s in reversed(cand.designed_ids)])
    vols = {k: v[order] for k, v in vols.items()}
    return study.bench.make_recipe(vols)


def neighbourhood(study: Study, coarse: Candidates, support: np.ndarray, factor, caps) -> Candidates:
    """Fine-grid candidates within ±factor steps of the coarse support, plus the coarse candidates
    themselves (so the refined search can always keep the coarse solution)."""
    g = study.bench
    devices = g.devices
    support = coarse.recipe.volumes_mL[support]
    ids = coarse.designed_ids
    cols = [coarse.recipe.stock_ids.index(s) for s in ids]
    rows = []
    offs = np.arange(-factor, factor + 1) * g.step_mL
    for sup in support:
        centre = sup[cols]
        grids = [np.maximum(c + offs, 0.0) for c in centre]
        mesh = np.stack([m.ravel() for m in np.meshgrid(*grids, indexing="ij")], axis=1)
        rows.append(mesh)
    rows.append(coarse.recipe.volumes_mL[:, cols])
    mesh = np.unique(np.round(np.concatenate(rows), 10), axis=0)
    room = g.room_mL - sum(g.fixed_mL.values())
    ok = mesh.sum(axis=1) <= room + 1e-9
    ok &= np.all((mesh == 0) | (mesh >= g.min_volume_mL - 1e-9), axis=1)
    for j, sid in enumerate(ids):
        dv = devices.stock_device[g.stock_index(sid)]
        if dv >= 0:
            ok &= mesh[:, j] <= devices.items[dv].capacity_mL + 1e-9
            vmin = delivery.smallest_delivery_mL(devices.items[dv])
            ok &= (mesh[:, j] == 0) | (mesh[:, j] >= vmin - 1e-9)
        if caps and sid in caps:
            ok &= mesh[:, j] <= caps[sid] + 1e-9
    rec = _complete(study, ids, mesh[ok], "f")
    return Candidates(rec, ids, rec.n_tubes, g.step_mL)
