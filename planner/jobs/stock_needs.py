"""Stocks for a plan: how to make each one, how much a recipe needs, and whether there is enough.

Plan-level glue over :mod:`planner.stocks` (weighing, dilution chains, uncertainty) and
:mod:`planner.glassware`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..inputs.plan import Plan, PlanError
from ..inputs.recipe import Recipe
from ..uncertainty import stocks as stk
from ..uncertainty.catalogue import GlasswareError


@dataclass(frozen=True)
class StockNeed:
    """One stock's preparation and consumption.

    Attributes
    ----------
    id, label : the stock.
    component : "M" or "L" (the component its formula supplies), or None.
    preparation : StockPreparation, or None when the plan gives no formula (or it needs no weighing).
    problem : why no preparation could be computed (None if fine or not asked).
    recipe_mL : total volume the recipe uses (None without a recipe).
    deliveries : number of tubes that receive it.
    needed_mL : recipe total plus rinse and dead-volume allowance.
    on_hand_mL : what the plan says is available (None if unstated).
    plan_rsd : the conc_rsd the plan assumes.
    """

    id: str
    label: str
    component: str | None
    preparation: stk.StockPreparation | None
    problem: str | None
    recipe_mL: float | None
    deliveries: int
    needed_mL: float | None
    on_hand_mL: float | None
    plan_rsd: float

    @property
    def enough(self) -> bool | None:
        if self.needed_mL is None or self.on_hand_mL is None:
            return None
        return self.on_hand_mL >= self.needed_mL

    def summary(self) -> dict:
        return {
            "id": self.id, "label": self.label, "component": self.component,
            "preparation": self.preparation.summary() if self.preparation else None,
            "problem": self.problem, "recipe_mL": self.recipe_mL, "deliveries": self.deliveries,
            "needed_mL": self.needed_mL, "on_hand_mL": self.on_hand_mL, "enough": self.enough,
            "plan_rsd": self.plan_rsd,
        }


def stock_needs(plan: Plan, recipe: Recipe | None = None) -> tuple[StockNeed, ...]:
    """Preparation and consumption of every stock in the plan."""
    g = plan.glassware
    out = []
    for k, s in enumerate(plan.stock):
        comp = "M" if "M" in s.conc else ("L" if "L" in s.conc else None)
        used = None
        n_del = 0
        need = None
        if recipe is not None:
            v = recipe.volumes_mL[:, k]
            used = float(v.sum())
            n_del = int(np.count_nonzero(v > 0))
            need = float(stk.volume_needed_mL(used, n_del, rinse_mL=g.rinse_mL if n_del else 0.0,
                                              dead_volume_mL=g.dead_volume_mL if n_del else 0.0))
        prep, problem = None, None
        if s.formula and comp is not None:
            try:
                flask_mL = _flask_choice(s, need)
                prep = stk.prepare_stock(
                    s.conc[comp], flask_mL, s.formula, purity=s.purity or 1.0,
                    balance_readability_g=g.balance.readability_g,
                    balance_repeatability_g=g.balance.repeatability_g, delta_T_C=g.delta_T_C)
            except (stk.StockError, GlasswareError) as exc:
                problem = str(exc)
        elif s.formula and comp is None:
            problem = "holds neither M nor L: its mass is not computed"
        out.append(StockNeed(s.id, s.label, comp, prep, problem, used, n_del, need, s.on_hand, s.conc_rsd))
    return tuple(out)


def _flask_choice(s, need_mL: float | None) -> float:
    """The plan's flask for the stock, else the smallest that holds what is needed (at least 50 mL)."""
    if s.flask_mL:
        return s.flask_mL
    want = max(need_mL or 0.0, s.on_hand or 0.0, 50.0)
    try:
        return stk.flask_for_volume(want).capacity_mL
    except stk.StockError as exc:
        raise PlanError(f"stock {s.id}.flask", str(exc)) from None
