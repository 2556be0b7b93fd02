"""Classic hand-made series, used as baselines and starting points.

The usual recipe copied from year to year keeps the metal volume constant and steps the ligand volume
evenly; :func:`even_series` builds it on the plan's volume grid so designs can be compared with it.
"""

from __future__ import annotations

import numpy as np

from ...inference.study import Study
from ...inputs.plan import Plan
from ...inputs.recipe import Recipe, stock_matrix
from ...uncertainty.bench import Bench
from ...uncertainty.delivery import snap_to_grid
from ..compile import compile_bench


def metal_and_ligand_stocks(plan: Plan) -> tuple[str, str]:
    """The first stock holding M only (else any M) and the first holding L only (else any L)."""
    return _metal_and_ligand(tuple(s.id for s in plan.stock), stock_matrix(plan))


def _metal_and_ligand(stock_ids: tuple[str, ...], stock_conc_M: np.ndarray) -> tuple[str, str]:
    def pick(comp: int) -> str:
        have = stock_conc_M[:, comp] > 0
        pure = have & ~(stock_conc_M[:, 1 - comp] > 0)
        return stock_ids[int(np.argmax(pure))] if pure.any() else stock_ids[int(np.argmax(have))]

    return pick(0), pick(1)


def even_series(
    plan: Plan, n_tubes: int | None = None, *, metal_mL: float | None = None, ligand_max_fraction: float = 0.5
) -> Recipe:
    """Constant metal volume, ligand volume stepped evenly from ``min_volume`` upward.

    Parameters
    ----------
    n_tubes : number of tubes (default: the plan's design.tubes).
    metal_mL : metal-stock volume (default: design.fixed, else 10 % of the tube, on the grid).
    ligand_max_fraction : largest ligand volume as a fraction of the tube volume.
    """
    return _even(
        compile_bench(plan), stock_matrix(plan), n_tubes or plan.design.tubes, metal_mL, ligand_max_fraction
    )


def even_series_for(
    study: Study,
    n_tubes: int | None = None,
    *,
    metal_mL: float | None = None,
    ligand_max_fraction: float = 0.5,
) -> Recipe:
    """:func:`even_series` on a compiled plan."""
    return _even(study.bench, study.model.stock_conc_M, n_tubes or study.tubes, metal_mL, ligand_max_fraction)


def _even(
    g: Bench, stock_conc_M: np.ndarray, n: int, metal_mL: float | None, ligand_max_fraction: float
) -> Recipe:
    m_id, l_id = _metal_and_ligand(g.stock_ids, stock_conc_M)
    step = g.step_mL
    if metal_mL is None:
        metal_mL = g.fixed_mL.get(
            m_id, max(float(snap_to_grid(0.1 * g.tube_volume_mL, step)), g.min_volume_mL)
        )
    lo = max(g.min_volume_mL, step)
    hi = min(
        ligand_max_fraction * g.tube_volume_mL,
        g.tube_volume_mL - metal_mL - sum(v for k, v in g.fixed_mL.items() if k not in (m_id, l_id)),
    )
    lig = snap_to_grid(np.linspace(lo, hi, n), step)
    vols = {m_id: np.full(n, metal_mL), l_id: lig}
    return g.make_recipe(vols)
