"""The tubes a class set is made of: every composition on the glassware's grid that keeps its reading in
the linear range over the guess's uncertainty, with its information rows at the robust nodes.

Shared by both ways of making a class set (:mod:`._series`, the default teaching series, and
:mod:`._jitter`, cards for the pooled fit alone): a card is a row of indices into this grid.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ...inference.design_criteria import DesignError
from ...inference.priors import Nodes, prior_nodes
from ...inference.study import Study
from ...inputs.recipe import Recipe
from ..plan.candidates import MAX_CANDIDATES, candidate_tubes
from ..plan.checks import RANGE_RISK, prior_range_risk
from ._pooled import Rows, recipe_rows

__all__ = ["Grid", "design_inputs", "feasible_grid", "lookup", "nonzero_columns", "recipe_of", "set_key"]


@dataclass(frozen=True)
class Grid:
    """The feasible candidates and their grid coordinates.

    Attributes
    ----------
    recipe : all candidates (feasible or not) as one recipe.
    designed : the stock ids whose volumes are chosen (the grid's axes).
    idx : (C',) indices of the feasible candidates in ``recipe``.
    coords : (C', d) integer grid coordinates of the designed volumes.
    step_mL : the grid step (the plan's, or a multiple of it for a large grid).
    rows : information rows of the feasible candidates at the robust nodes.
    nodes : the robust nodes; ``guess`` the index of the guess among them.
    crit : node weights of the design criterion (the robust weights, or the guess alone).
    """

    recipe: Recipe
    designed: tuple[str, ...]
    idx: np.ndarray
    coords: np.ndarray
    step_mL: float
    rows: Rows
    nodes: Nodes
    guess: int
    crit: np.ndarray


def feasible_grid(study: Study) -> Grid:
    """Every candidate tube whose reading stays in the linear range over the guess's uncertainty (the
    range screen of ``kplan design``) and at the guess itself."""
    cand = candidate_tubes(study)
    if cand.n_grid > MAX_CANDIDATES:  # as kplan design: a coarser multiple of the grid
        factor = int(math.ceil((cand.n_grid / MAX_CANDIDATES) ** (1.0 / len(cand.designed_ids))))
        cand = candidate_tubes(study, step_mL=study.bench.step_mL * factor)
    params = study.params
    nodes = prior_nodes(params, robust=True)
    rows = recipe_rows(study, cand.recipe, nodes)
    lo, hi = study.model.linear_range
    risk = prior_range_risk(rows.absorbance, rows.band, nodes.weights, lo, hi)
    gi = int(np.argmin(np.abs(nodes.theta - params.guess).sum(axis=1)))
    a0 = rows.absorbance[gi]
    ok = (risk <= RANGE_RISK + 1e-12) & (a0 >= lo) & (a0 <= hi)
    if not ok.any():
        raise DesignError(
            f"no candidate tube keeps the absorbance inside optics.linear_range [{lo:g}, {hi:g}] "
            f"over the guess's range: use more dilute or more concentrated stocks, or widen "
            f"linear_range"
        )
    idx = np.flatnonzero(ok)
    cols = [cand.recipe.stock_ids.index(s) for s in cand.designed_ids]
    coords = np.rint(cand.recipe.volumes_mL[np.ix_(idx, cols)] / cand.step_mL).astype(np.int64)
    crit = nodes.weights if study.robust else np.eye(len(nodes.weights))[gi]
    return Grid(cand.recipe, cand.designed_ids, idx, coords, cand.step_mL, rows.take(idx), nodes, gi, crit)


def nonzero_columns(rows: Rows) -> tuple[np.ndarray, np.ndarray]:
    """Stock and device columns that are not identically zero (a stock no tube uses has none)."""
    return (np.any(rows.stock != 0, axis=(0, 1)), np.any(rows.device != 0, axis=(0, 1)))


def design_inputs(grid: Grid):
    """F (G', C', 1, Q) and M0 (Q, Q) for the design algorithms: nodes with weight, shared-error
    columns that are not identically zero, and the node weights (G',)."""
    ks, kd = nonzero_columns(grid.rows)
    g = np.flatnonzero(grid.crit > 0)
    r = grid.rows
    F = np.concatenate([r.theta[g], r.stock[g][..., ks], r.device[g][..., kd]], axis=-1)
    P = r.theta.shape[-1]
    M0 = np.zeros((F.shape[-1],) * 2)
    M0[P:, P:] = np.eye(F.shape[-1] - P)
    return F[:, :, None, :], M0, grid.crit[g]


def lookup(grid: Grid, coords: np.ndarray) -> np.ndarray:
    """Feasible index of each composition ``coords`` (..., d) (grid coordinates), −1 where the
    composition is not a feasible candidate (vectorised: one sorted search over mixed-radix keys)."""
    coords = np.asarray(coords, dtype=np.int64)
    lo, hi = grid.coords.min(axis=0), grid.coords.max(axis=0)
    mult = np.concatenate([[1], np.cumprod(hi[:-1] - lo[:-1] + 1)]).astype(np.int64)
    keys = (grid.coords - lo) @ mult
    inside = np.all((coords >= lo) & (coords <= hi), axis=-1)
    want = (np.where(inside[..., None], coords, lo) - lo) @ mult
    order = np.argsort(keys)
    skeys = keys[order]
    pos = np.clip(np.searchsorted(skeys, want), 0, skeys.size - 1)
    return np.where(inside & (skeys[pos] == want), order[pos], -1)


def set_key(grid: Grid, tubes_idx: np.ndarray) -> bytes:
    """The set of compositions of one card (replicates and order ignored), for the distinctness rule."""
    return np.unique(grid.idx[tubes_idx]).tobytes()


def recipe_of(study: Study, grid: Grid, tubes_idx: np.ndarray, order_by: str | None = None) -> Recipe:
    """A student's recipe from feasible indices, tubes ordered by the volume of ``order_by`` (the stock a
    series varies, so a student can plot the tubes in order), then by the designed volumes."""
    rec = grid.recipe
    chosen = grid.idx[tubes_idx]
    vols = {sid: rec.column(sid)[chosen] for sid in study.bench.dispensed_ids(rec)}
    keys = [vols[s] for s in reversed(grid.designed)]
    if order_by is not None:
        keys.append(vols[order_by])
    order = np.lexsort(keys)
    return study.bench.make_recipe({k: v[order] for k, v in vols.items()})
