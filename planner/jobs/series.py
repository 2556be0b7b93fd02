"""Classic hand-made series, used as baselines and starting points.

The usual recipe copied from year to year keeps the metal volume constant and steps the ligand volume
evenly; :func:`even_series` builds it on the plan's volume grid so designs can be compared with it.
"""

from __future__ import annotations

import numpy as np

from ..inputs.plan import Plan
from ..inputs.recipe import Recipe, make_recipe


def _snap(v: np.ndarray, step: float) -> np.ndarray:
    return np.round(np.round(np.asarray(v) / step) * step, 10)


def metal_and_ligand_stocks(plan: Plan) -> tuple[str, str]:
    """The first stock holding M only (else any M) and the first holding L only (else any L)."""
    def pick(comp: str, other: str) -> str:
        pure = [s.id for s in plan.stock if s.conc.get(comp) and not s.conc.get(other)]
        anyc = [s.id for s in plan.stock if s.conc.get(comp)]
        return (pure or anyc)[0]

    return pick("M", "L"), pick("L", "M")


def even_series(plan: Plan, n_tubes: int | None = None, *, metal_mL: float | None = None,
                ligand_max_fraction: float = 0.5) -> Recipe:
    """Constant metal volume, ligand volume stepped evenly from ``min_volume`` upward.

    Parameters
    ----------
    n_tubes : number of tubes (default: the plan's design.tubes).
    metal_mL : metal-stock volume (default: design.fixed, else 10 % of the tube, on the grid).
    ligand_max_fraction : largest ligand volume as a fraction of the tube volume.
    """
    g = plan.glassware
    n = n_tubes or plan.design.tubes
    m_id, l_id = metal_and_ligand_stocks(plan)
    step = g.step_mL
    if metal_mL is None:
        metal_mL = plan.design.fixed.get(m_id, max(float(_snap(0.1 * g.tube_volume_mL, step)), g.min_volume_mL))
    lo = max(g.min_volume_mL, step)
    hi = min(ligand_max_fraction * g.tube_volume_mL, g.tube_volume_mL - metal_mL - sum(
        v for k, v in plan.design.fixed.items() if k not in (m_id, l_id)))
    lig = _snap(np.linspace(lo, hi, n), step)
    vols = {m_id: np.full(n, metal_mL), l_id: lig}
    return make_recipe(plan, vols)
