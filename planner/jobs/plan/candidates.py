"""Every tube the glassware can make, and the information each would carry.

The candidate set is every combination of the designed stocks' volumes on the plan's grid that fits the
tube (fixed volumes, the background electrolyte that levels the ionic strength and the diluent follow
from the others). Stocks that carry neither M nor L (a buffer, a salt) are not searched tube by tube:
:mod:`planner.jobs.plan.design` gives each one volume for every tube. The grid is counted before it is
built (:func:`grid_count`); when the product of several stocks' grids is too large to list, the design
starts from a sample of it (:func:`sampled_candidates`) and refines by coordinate exchange instead.

Each candidate carries the whitened Jacobian of its reading at every quadrature node of
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
from ...inference.precision import parameter_jacobian, unpack
from ...inference.priors import Nodes
from ...inference.study import Study
from ...inputs.recipe import Recipe, concat_recipes, totals_M
from ...model.compiled import Model, predict, tube_ions_M
from ...model.jacobians import absorbance_derivatives
from ...uncertainty import delivery
from ...uncertainty.budget import delivery_sds, error_factors
from .checks import RANGE_RISK, prior_range_risk

__all__ = [
    "MAX_CANDIDATES",
    "MAX_SAMPLED",
    "Candidates",
    "candidate_tubes",
    "complete_rows",
    "designed_stocks",
    "grid_count",
    "sampled_candidates",
    "stock_levels",
    "information_rows",
    "level_ionic_strength",
    "neighbourhood",
    "range_mask",
    "recipe_from_counts",
    "rows_with_prior",
]

MAX_CANDIDATES = 40000  # above this the grid is searched coarsely first, then refined locally
MAX_SAMPLED = 2000  # candidates sampled from a grid too large to list (three or more searched stocks)


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


def designed_stocks(study: Study) -> tuple[list[str], list[str]]:
    """(stocks whose volume is chosen tube by tube, medium stocks).

    Not designed: the diluent, the background electrolyte (it levels the ionic strength) and the fixed
    stocks. Medium stocks carry neither M nor L (a buffer, a salt): their volume changes no tube's
    chemistry, only its medium, so the design gives each one volume in every tube."""
    g = study.bench
    conc = study.model.stock_conc_M
    designed = [s for s in g.stock_ids if s not in (g.diluent_id, g.background_id) and s not in g.fixed_mL]
    medium = [s for s in designed if not np.any(conc[study.model.stock_ids.index(s)] > 0)]
    return [s for s in designed if s not in medium], medium


def _room_mL(study: Study) -> float:
    """Room for the designed volumes: under to-mark the flask keeps make_up_min for the diluent
    (Bench.room_mL), and the fixed volumes come first."""
    g = study.bench
    return g.room_mL - sum(g.fixed_mL.values())


def stock_levels(
    study: Study, sid: str, step: float, caps_mL: dict[str, float] | None = None, *, allow_zero: bool = True
) -> np.ndarray:
    """The volumes of one stock a tube may take on the grid: from the smallest its dispenser delivers
    (and ``min_volume``) to what the tube, the dispenser and the cap allow; 0 too with ``allow_zero``."""
    g = study.bench
    devices = g.devices
    cap = _room_mL(study)
    low = max(g.min_volume_mL, step)
    j = devices.stock_device[g.stock_index(sid)]
    if j >= 0:
        cap = min(cap, devices.items[j].capacity_mL)
        low = max(low, delivery.smallest_delivery_mL(devices.items[j]))
    if caps_mL and sid in caps_mL:
        cap = min(cap, caps_mL[sid])
    return _levels(low, cap, step, allow_zero=allow_zero)


def grid_count(levels: list[np.ndarray], room_mL: float, step: float) -> int:
    """How many combinations of the levels fit the room (Σ volumes ≤ room), counted without listing
    them: a convolution of each stock's level counts over the grid index of the running sum."""
    top = int(math.floor(room_mL / step + 1e-9))
    ways = np.zeros(top + 1, dtype=float)  # float: the count may pass int64 for many stocks
    ways[0] = 1.0
    for lv in levels:
        idx = np.round(np.asarray(lv) / step).astype(int)
        idx = idx[idx <= top]
        new = np.zeros_like(ways)
        for k in idx:  # a few hundred levels at most
            new[k:] += ways[: top + 1 - k]
        ways = new
    return int(min(ways.sum(), 2.0**62))


def candidate_tubes(
    study: Study, *, step_mL: float | None = None, caps_mL: dict[str, float] | None = None
) -> Candidates:
    """All combinations of designed volumes on the grid that fit the tube (before the range screen).

    Under ``make_up = "to-mark"`` the dispensed volumes (fixed and background ones included) add up to
    at most the tube less ``glassware.make_up_min``, so every flask still takes diluent to its mark.
    Medium stocks (:func:`designed_stocks`) are varied like the others here; the design fixes them first.

    Parameters
    ----------
    step_mL : grid step (default the plan's; a multiple of it for a coarse search).
    caps_mL : per-stock upper limits on one tube's volume (e.g. from the stock budget).

    Raises
    ------
    DesignError
        When nothing is left to vary, or the grid has more than 50 × MAX_CANDIDATES combinations (count
        it with :func:`grid_count` and sample it with :func:`sampled_candidates` instead).
    """
    g = study.bench
    step = step_mL or g.step_mL
    chem, medium = designed_stocks(study)
    designed = [s for s in g.stock_ids if s in chem or s in medium]
    if not designed:
        raise DesignError(
            "design.fixed fixes every stock: nothing is left to vary; remove a stock from fixed"
        )
    room = _room_mL(study)
    levels = [stock_levels(study, sid, step, caps_mL) for sid in designed]
    count = grid_count(levels, room, step)
    if count > 50 * MAX_CANDIDATES:
        raise DesignError(
            f"{count:.3g} combinations of {len(designed)} stocks' volumes are too many to list: sample them"
        )
    # combinations that fit, built stock by stock (never the full product of every grid)
    mesh = np.zeros((1, 0))
    for lv in levels:
        mesh = np.concatenate([np.repeat(mesh, lv.size, axis=0), np.tile(lv, mesh.shape[0])[:, None]], axis=1)
        mesh = mesh[mesh.sum(axis=1) <= room + 1e-9]
    rec = _complete(study, designed, mesh, "c")
    return Candidates(rec, tuple(designed), rec.n_tubes, step)


def sampled_candidates(
    study: Study,
    ids: list[str],
    rng: np.random.Generator,
    *,
    size: int = MAX_SAMPLED,
    caps_mL: dict[str, float] | None = None,
) -> Candidates:
    """A spread sample of the tubes the grid allows, for grids too large to list.

    Optimal tubes use few stocks each (one metal and one ligand stock, say), so each sampled tube takes
    one to three of the stocks (a third each), picked at random, with volumes uniform over the simplex
    Σ v ≤ room (normalised exponentials; Devroye 1986, Non-Uniform Random Variate Generation, §V.2),
    rounded to each stock's levels; duplicates dropped."""
    room = _room_mL(study)
    levels = [stock_levels(study, sid, study.bench.step_mL, caps_mL) for sid in ids]
    d = len(ids)
    k = rng.integers(1, min(d, 3) + 1, size=size)  # stocks per tube
    pick = np.argsort(rng.random((size, d)), axis=1) < k[:, None]  # k of the d stocks, at random
    e = rng.exponential(size=(size, d + 1)) * np.concatenate([pick, np.ones((size, 1), bool)], axis=1)
    v = room * e[:, :d] / e.sum(axis=1, keepdims=True)
    pts = np.column_stack([_nearest(lv, v[:, j]) for j, lv in enumerate(levels)])
    pts = np.unique(pts[pts.sum(axis=1) <= room + 1e-9], axis=0)
    rec = _complete(study, ids, pts, "s")
    return Candidates(rec, tuple(ids), rec.n_tubes, study.bench.step_mL)


def _nearest(levels: np.ndarray, v: np.ndarray) -> np.ndarray:
    """The level nearest to each value (levels sorted)."""
    i = np.clip(np.searchsorted(levels, v), 1, levels.size - 1) if levels.size > 1 else np.zeros(v.size, int)
    if levels.size == 1:
        return levels[i]
    lower, upper = levels[i - 1], levels[i]
    return np.where(v - lower <= upper - v, lower, upper)


def _complete(study: Study, designed, mesh: np.ndarray, prefix: str) -> Recipe:
    """Candidate recipe from designed volumes (C, d): fixed volumes, the background electrolyte that
    levels the ionic strength, and the diluent remainder under ``make_up = "added"``."""
    rec, _ = complete_rows(study, designed, mesh, prefix)
    return rec


def complete_rows(study: Study, designed, mesh: np.ndarray, prefix: str) -> tuple[Recipe, np.ndarray]:
    """:func:`_complete`, with the indices of the rows of ``mesh`` that became tubes (a row is dropped
    when the background stock cannot level it, or the diluent remainder is below min_volume)."""
    g = study.bench
    vols = {sid: mesh[:, j] for j, sid in enumerate(designed)}
    for sid, v in g.fixed_mL.items():
        vols[sid] = np.full(mesh.shape[0], v)
    kept = np.arange(mesh.shape[0])
    if g.background_id is not None and g.background_id not in g.fixed_mL:
        vols, ok = _level_rows(study, vols)
        kept = kept[ok]
    if not g.to_mark and g.diluent_id is not None:
        rest = g.tube_volume_mL - sum(vols.values())
        ok = (rest <= 1e-9) | (rest >= g.min_volume_mL - 1e-9)
        vols = {k: v[ok] for k, v in vols.items()}
        vols[g.diluent_id] = np.maximum(rest[ok], 0.0)
        kept = kept[ok]
    if kept.size == 0:
        raise DesignError("no tube fits: the fixed volumes and min_volume leave no room in tube_volume")
    return g.make_recipe(vols, [f"{prefix}{i}" for i in range(kept.size)]), kept


def level_ionic_strength(study: Study, vols: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    """Add the background-electrolyte volume that brings every tube to the same ionic strength (see
    :func:`_level_rows`); the tubes that cannot be levelled are dropped."""
    return _level_rows(study, vols)[0]


def _level_rows(study: Study, vols: dict[str, np.ndarray]) -> tuple[dict[str, np.ndarray], np.ndarray]:
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
    return out, ok


def information_rows(
    study: Study,
    cand: Candidates,
    nodes: Nodes,
    criterion: str,
    *,
    volumetric: bool = True,
    with_sd: bool = False,
    all_nuisance: bool = False,
):
    """Whitened Jacobian rows F (G, C, 1, P') and prior M0 (P', P') for every candidate and node (and,
    with ``with_sd``, the independent sd (G, C) each row was whitened by).

    A shared error no candidate depends on is left out of the nuisance columns, unless
    ``all_nuisance``: then every call has the same columns, so rows of different calls can be combined
    (an unused nuisance factor only adds a decoupled unit block to the information)."""
    model, params = study.model, study.params
    rec = cand.recipe
    tot = totals_M(rec, model.stock_conc_M)
    ions = tube_ions_M(model, rec.volumes_mL, rec.total_volume_mL)
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
    der = absorbance_derivatives(model, st, eps)
    J = parameter_jacobian(params, der)  # (G, C, P), as reading.jac(nodes.theta) without a second solve
    var = np.empty(st.absorbance.shape)
    shared = []
    sds = delivery_sds(study.bench, rec)  # the volumes' uncertainties: the same at every node
    for gi in range(G):  # a handful of nodes; each vectorised over candidates
        sub = st[gi]
        f = error_factors(study.bench, model, rec, sub, dA_dtotals=der.dA_dtotals[gi], sds=sds)
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
    if all_nuisance:
        keep = np.ones(S.shape[-1], dtype=bool)
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
    all_nuisance: bool = False,
):
    """:func:`information_rows` of the candidates, with the information of tubes measured before
    (``prior``) added to M0. Both are computed in one call, so they share the nuisance columns."""
    if prior is None:
        return information_rows(
            study, cand, nodes, crit, volumetric=volumetric, with_sd=with_sd, all_nuisance=all_nuisance
        )
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
        all_nuisance=all_nuisance,
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
