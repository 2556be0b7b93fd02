"""The exact design's search on the glassware's grid, for :mod:`planner.jobs.plan.design`.

The grid is never listed whole when it is large: stocks without M or L get one volume in every tube
(:func:`solve_on_grid`, the medium's volume chosen over its levels); two searched stocks go
coarse-then-fine; three or more start from sampled tubes and are refined by coordinate exchange (Meyer &
Nachtsheim 1995, Technometrics 37:60; :func:`_solve_sampled`), so memory stays flat and time grows about
linearly with the number of stocks. Each search ends in the Fedorov exchange of
:func:`planner.inference.exchange.exact_design` over the candidates it kept, with the bound of
:func:`planner.inference.approximate.approximate_design`.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np

from ...inference import approximate, exchange
from ...inference.design_criteria import DesignError
from ...inference.study import Study
from .candidates import (
    MAX_CANDIDATES,
    MAX_SAMPLED,
    Candidates,
    candidate_tubes,
    complete_rows,
    designed_stocks,
    grid_count,
    neighbourhood,
    range_mask,
    recipe_from_counts,
    rows_with_prior,
    sampled_candidates,
    stock_levels,
)


def solve_on_grid(study: Study, nodes, crit, n, seed, caps, volumetric, starts, prior=None):
    """The design on the grid: medium stocks at one volume in every tube, the others tube by tube."""
    chem, medium = designed_stocks(study)
    if not chem:
        raise DesignError(
            "design.fixed fixes every stock that carries M or L: nothing is left to vary; remove one from "
            "fixed"
        )
    if not medium:
        return _solve_tubes(study, nodes, crit, n, seed, caps, volumetric, starts, prior)
    g = study.bench
    fixed = {}
    for m in medium:
        lv = stock_levels(study, m, g.step_mL, caps, allow_zero=False)
        if not lv.size:
            raise DesignError(
                f"stock {m}: no volume of it fits the tube beside the others; fix it in design.fixed"
            )
        fixed[m] = float(lv[0])
    for _ in range(2):  # the chosen volumes rarely move; when they do, design once more around them
        sub = _with_fixed(study, fixed)
        out = _solve_tubes(sub, nodes, crit, n, seed, caps, volumetric, starts, prior)
        best = {
            m: _medium_volume(study, {**fixed}, m, chem, out[0], nodes, crit, volumetric, prior, caps)
            for m in medium
        }
        if best == fixed:
            break
        fixed = best
    vols = ", ".join(f"{m} {v:g} mL" for m, v in fixed.items())
    note = (
        f"stocks without M or L go into every tube at one volume ({vols}): the volume the criterion prefers, "
        f"the smallest where it cannot tell them apart; set design.fixed to choose another"
    )
    rec, ex, ap, n_grid, n_feas, coarse, final = out
    return rec, ex, ap, n_grid, n_feas, "; ".join(x for x in (coarse, note) if x), final


def _with_fixed(study: Study, fixed: dict[str, float]) -> Study:
    """The study with more stocks at one volume in every tube (as design.fixed would put them)."""
    return replace(study, bench=replace(study.bench, fixed_mL={**study.bench.fixed_mL, **fixed}))


def _medium_volume(study, fixed, m, chem, rec, nodes, crit, volumetric, prior, caps) -> float:
    """The volume of medium stock ``m`` in every tube of ``rec`` that the criterion prefers (the others
    held as in ``rec``); ties (a criterion that cannot tell) go to the smallest volume."""
    from ...inference.design_criteria import criterion_of_counts

    g = study.bench
    others = {k: v for k, v in fixed.items() if k != m}
    sub = _with_fixed(study, others)
    lv = stock_levels(sub, m, g.step_mL, caps, allow_zero=False)
    lv = lv[np.unique(np.linspace(0, lv.size - 1, min(lv.size, 40)).round().astype(int))]
    pts = np.column_stack([rec.column(s) for s in chem])
    n, L = pts.shape[0], lv.size
    mesh = np.column_stack([np.tile(pts, (L, 1)), np.repeat(lv, n)])
    room = sub.bench.room_mL - sum(sub.bench.fixed_mL.values())
    fits = mesh.sum(axis=1) <= room + 1e-9
    ok_level = fits.reshape(L, n).all(axis=1)
    if not ok_level.any():
        return fixed[m]
    rows = np.flatnonzero(np.repeat(ok_level, n))
    cand_rec, kept = complete_rows(sub, [*chem, m], mesh[rows], "m")
    got = np.zeros(mesh.shape[0], dtype=bool)
    got[rows[kept]] = True
    ok_level &= got.reshape(L, n).all(axis=1)
    if not ok_level.any():
        return fixed[m]
    cand = Candidates(cand_rec, (*chem, m), cand_rec.n_tubes, g.step_mL)
    F, M0, st, band = rows_with_prior(sub, cand, prior, nodes, crit, volumetric=volumetric)
    inside = np.zeros(mesh.shape[0], dtype=bool)
    inside[rows[kept]] = range_mask(sub.model, st, nodes.weights, band)
    ok_level &= inside.reshape(L, n).all(axis=1)
    pos = np.full(mesh.shape[0], -1)
    pos[rows[kept]] = np.arange(kept.size)
    target = sub.params.target if crit == "target" else None
    values = np.full(L, np.inf)
    for k in np.flatnonzero(ok_level):
        v = criterion_of_counts(
            F[:, pos[k * n : (k + 1) * n]],
            np.ones(n, dtype=int),
            criterion=crit,
            target=target,
            M0=M0,
            node_weights=nodes.weights,
        )
        values[k] = v if crit == "target" else -v  # lower is better for both
    if not np.isfinite(values).any():
        return fixed[m]
    best = np.flatnonzero(values <= values.min() + 1e-9 * max(1.0, abs(values.min())))
    return float(lv[best[0]])


def _solve_tubes(study: Study, nodes, crit, n, seed, caps, volumetric, starts, prior=None):
    """Each tube's volumes: the whole grid when it is small enough to list, a coarse grid refined
    locally for two stocks, a sampled candidate set refined by coordinate exchange for more."""
    g = study.bench
    chem, _ = designed_stocks(study)
    levels = [stock_levels(study, s, g.step_mL, caps) for s in chem]
    count = grid_count(levels, g.room_mL - sum(g.fixed_mL.values()), g.step_mL)
    if count > MAX_CANDIDATES and len(chem) > 2:
        return _solve_sampled(study, nodes, crit, n, seed, caps, volumetric, starts, prior, levels, count)
    coarse_note = ""
    factor = 1
    if count > MAX_CANDIDATES:
        factor = int(math.ceil((count / MAX_CANDIDATES) ** (1.0 / len(chem))))
        cand = candidate_tubes(study, step_mL=g.step_mL * factor, caps_mL=caps)
        coarse_note = (
            f"searched a {g.step_mL * factor:g} mL grid first ({cand.n_grid} candidates), then refined "
            f"on the {g.step_mL:g} mL grid near the chosen tubes"
        )
    else:
        cand = candidate_tubes(study, caps_mL=caps)
    ex, ap, rec, n_feas, support, final = _exact_on(
        study, nodes, crit, n, seed, cand, volumetric, starts, prior
    )
    n_grid = cand.n_grid
    if factor > 1:
        # refine on the fine grid around the chosen tubes, re-centring until the support settles
        base = cand
        for _ in range(3):
            fine = neighbourhood(study, base, support, factor, caps)
            ex, ap, rec, n_feas, new_support, final = _exact_on(
                study, nodes, crit, n, seed, fine, volumetric, starts, prior
            )
            n_grid = fine.n_grid
            moved = not np.array_equal(fine.recipe.volumes_mL[new_support], base.recipe.volumes_mL[support])
            base, support = fine, new_support
            if not moved:
                break
    return rec, ex, ap, n_grid, n_feas, coarse_note, final


# Rounds of the sampled search: each samples the grid anew (MAX_SAMPLED / rounds tubes) and refines its
# design; the rounds start apart, so one that settles in a poor local optimum does not decide alone.
_ROUNDS = 2


def _solve_sampled(study, nodes, crit, n, seed, caps, volumetric, starts, prior, levels, count):
    """Three or more stocks chosen tube by tube, in ``_ROUNDS`` rounds: an exact design on a sample of the
    grid, each tube then refined over each stock's whole grid (coordinate exchange, Meyer & Nachtsheim
    1995); last, one exchange over the samples and the refined tubes together, started from the best
    refined design (so it can only improve on it)."""
    from ...inference.design_criteria import criterion_of_counts

    g = study.bench
    chem, _ = designed_stocks(study)
    target = study.params.target if crit == "target" else None
    # diagonal moves refine locally: 1 to 4 grid steps, then doubling up to the longest grid
    top = max(lv.size for lv in levels)
    steps = np.unique(np.concatenate([np.arange(1, 5), 2 ** np.arange(3, max(int(np.log2(top)) + 1, 3))]))
    shifts = g.step_mL * np.concatenate([-steps[::-1], steps])
    # stocks of the same reagent (M only, L only, or both) at other concentrations stand in for each other
    conc = study.model.stock_conc_M[[study.model.stock_ids.index(s) for s in chem]] > 0
    kinds = [tuple(row) for row in conc]
    groups = [[j for j, kd in enumerate(kinds) if kd == k] for k in sorted(set(kinds))]
    samples, best, best_value, n_sampled = [], None, np.inf, 0
    for r in range(_ROUNDS):
        rng = np.random.default_rng([seed, r])
        cand = sampled_candidates(study, chem, rng, size=MAX_SAMPLED // _ROUNDS, caps_mL=caps)
        n_sampled += cand.n_grid
        *_, (_, idx, counts) = _exact_on(study, nodes, crit, n, seed, cand, volumetric, starts, prior)
        cols = [cand.recipe.stock_ids.index(s) for s in chem]
        chosen = np.flatnonzero(counts)
        start = np.repeat(cand.recipe.volumes_mL[idx[chosen]][:, cols], counts[chosen], axis=0)
        info, M0 = _tube_information(study, chem, nodes, crit, volumetric, prior, start, levels)
        kw = dict(criterion=crit, target=target, M0=M0, node_weights=nodes.weights)
        pts, F_pts = exchange.coordinate_exchange(info, levels, start, shifts=shifts, groups=groups, **kw)
        value = criterion_of_counts(F_pts, np.ones(n, dtype=int), **kw) * (1.0 if crit == "target" else -1.0)
        samples.append(cand.recipe.volumes_mL[:, cols])
        if value < best_value:
            best, best_value = pts, value
    assert best is not None
    # the samples and the best refined tubes together: the last exchange can only improve on them
    sample = np.concatenate(samples)
    union, where = np.unique(np.round(np.concatenate([sample, best]), 10), axis=0, return_inverse=True)
    rec_u, kept = complete_rows(study, chem, union, "s")
    pos = np.full(union.shape[0], -1)
    pos[kept] = np.arange(kept.size)
    initial = np.bincount(pos[where.reshape(-1)[sample.shape[0] :]], minlength=kept.size)
    final_cand = Candidates(rec_u, tuple(chem), rec_u.n_tubes, g.step_mL)
    ex, ap, rec, n_feas, _, final = _exact_on(
        study, nodes, crit, n, seed, final_cand, volumetric, starts, prior, initial=initial
    )
    note = (
        f"the {len(chem)} stocks' grid has {count:.3g} combinations: searched {n_sampled} sampled tubes, "
        f"then refined each tube one stock at a time on the {g.step_mL:g} mL grid (coordinate exchange)"
    )
    return rec, ex, ap, count, n_feas, note, final


def _on_levels(v: np.ndarray, levels: np.ndarray) -> np.ndarray:
    """Which values are one of the (sorted) levels, to rounding."""
    i = np.clip(np.searchsorted(levels, v - 1e-9), 0, levels.size - 1)
    return np.abs(levels[i] - v) <= 1e-9


def _tube_information(study: Study, chem, nodes, crit, volumetric, prior, start, levels):
    """``info(points)`` for :func:`planner.inference.exchange.coordinate_exchange`: the information rows
    of tubes with the given volumes of the stocks ``chem`` (every call with the same nuisance columns),
    and whether each tube can be made and reads inside the linear range; with the prior M0."""
    g = study.bench
    room = g.room_mL - sum(g.fixed_mL.values())
    prior_info: dict = {}

    def info(points):
        points = np.round(points, 10) + 0.0  # shifted volumes back onto the grid's decimals (no −0)
        m = points.shape[0]
        on_grid = np.all([_on_levels(points[:, j], lv) for j, lv in enumerate(levels)], axis=0)
        fits = np.flatnonzero(on_grid & (points.sum(axis=1) <= room + 1e-9))
        try:
            rec, kept = complete_rows(study, chem, points[fits], "x")
        except DesignError:  # none of these tubes can be made (no room, or not levelled)
            G = nodes.theta.shape[0]
            return np.zeros((G, m, 1, prior_info["width"])), np.zeros(m, dtype=bool)
        cand = Candidates(rec, tuple(chem), rec.n_tubes, g.step_mL)
        F, M0, st, band = rows_with_prior(
            study, cand, prior, nodes, crit, volumetric=volumetric, all_nuisance=True
        )
        rows = fits[kept]
        full = np.zeros((F.shape[0], m) + F.shape[2:])
        full[:, rows] = F
        ok = np.zeros(m, dtype=bool)
        ok[rows] = range_mask(study.model, st, nodes.weights, band)
        prior_info["M0"], prior_info["width"] = M0, F.shape[-1]
        return full, ok

    info(start)
    return info, prior_info["M0"]


def _exact_on(study: Study, nodes, crit, n, seed, cand, volumetric, starts, prior=None, initial=None):
    model, params = study.model, study.params
    F, M0, st, band = rows_with_prior(study, cand, prior, nodes, crit, volumetric=volumetric)
    ok = range_mask(model, st, nodes.weights, band)
    if not ok.any():
        lo, hi = model.linear_range
        raise DesignError(
            f"no candidate tube keeps the absorbance inside optics.linear_range [{lo:g}, {hi:g}] over the "
            f"guess's range: use more dilute stocks or a shorter path (if too high), more concentrated "
            f"stocks "
            f"or a longer path (if too low), or widen linear_range"
        )
    idx = np.flatnonzero(ok)
    Fk = F[:, idx]
    target = params.target if crit == "target" else None
    kw = dict(criterion=crit, target=target, M0=M0, node_weights=nodes.weights)
    try:
        ap = approximate.approximate_design(Fk, n_tubes=n, **kw)
        init = None if initial is None else np.asarray(initial)[idx]
        if init is not None and init.sum() != n:  # a refined tube left the linear range: not a start
            init = None
        ex = exchange.exact_design(
            Fk, n, rng=np.random.default_rng(seed), starts=starts, approx=ap, initial=init, **kw
        )
    except DesignError as exc:
        lo, hi = model.linear_range
        raise DesignError(
            f"only {idx.size} of {cand.n_grid} candidate tubes stay inside optics.linear_range [{lo:g}, "
            f"{hi:g}] "
            f"over the guess's range, and they cannot determine every fitted parameter ({exc}). Use more "
            f"dilute stocks or smaller fixed volumes if readings run high, a longer path if they run low, "
            f"or hold more parameters fixed (rsd = 0)"
        ) from None
    out = recipe_from_counts(study, cand, idx, ex.counts)
    return ex, ap, out, int(ok.sum()), idx[np.flatnonzero(ex.counts)], (cand, idx, ex.counts)
