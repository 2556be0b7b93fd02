"""The class stock list: how much of each stock to make for the whole class and for each section, and
how to make it (mass to weigh), checked against what is on hand.

Volumes: what every card's tubes take, plus the rinse and dead-volume allowance once per *bench*
that uses the stock (each bench's dispenser is rinsed with the stock and keeps its dead volume), not
once per class and not once per student. A bench is set up once per section that meets at it; a
student without a bench in the roster has a bench of their own. The preparation (mass, flask,
dilution chain, uncertainty) is :func:`planner.uncertainty.stocks.prepare_stock`, as ``kplan stocks``
makes it (:mod:`planner.jobs.stocks.needs`), for the class total in one flask when the catalogue has
one large enough, else in repeated batches of the largest flask.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ...inputs.plan import Plan, PlanError
from ...inputs.recipe import Recipe
from ...inputs.roster import Roster
from ...uncertainty import stocks as stk
from ...uncertainty.catalogue import GlasswareError, catalogue
from ..stocks.needs import _flask_choice

__all__ = ["ClassStock", "class_stocks"]


@dataclass(frozen=True)
class ClassStock:
    """One stock for the whole class.

    Attributes
    ----------
    id, label : the stock.
    tubes_mL : what all the cards' tubes take.
    benches : benches that use it (each gets one rinse and dead-volume allowance).
    allowance_mL : rinse + dead volume, once per bench.
    total_mL : tubes_mL + allowance_mL.
    sections : per section (roster order of first appearance): (section, tubes mL, benches, total mL).
    on_hand_mL : what the plan says is available (None if unstated).
    preparation : how to make it (None without a formula), for ``batches`` × the flask.
    batches : how many flasks of the preparation make the class total.
    problem : why no preparation was computed (None if fine or not asked).
    section_preparations : per section, (preparation, batches) when each section makes its own, or
        None (no formula, or nothing to make).
    """

    id: str
    label: str
    tubes_mL: float
    benches: int
    allowance_mL: float
    total_mL: float
    sections: tuple[tuple[str, float, int, float], ...]
    on_hand_mL: float | None
    preparation: stk.StockPreparation | None
    batches: int
    problem: str | None
    section_preparations: tuple = ()

    @property
    def enough(self) -> bool | None:
        if self.on_hand_mL is None or self.total_mL <= 0:
            return None
        return self.on_hand_mL >= self.total_mL - 1e-9

    @property
    def shortfall_mL(self) -> float:
        if self.on_hand_mL is None:
            return 0.0
        return max(self.total_mL - self.on_hand_mL, 0.0)

    def summary(self) -> dict:
        return {
            "id": self.id,
            "label": self.label,
            "tubes_mL": self.tubes_mL,
            "benches": self.benches,
            "allowance_mL": self.allowance_mL,
            "total_mL": self.total_mL,
            "sections": [
                {"section": s, "tubes_mL": v, "benches": b, "total_mL": t} for s, v, b, t in self.sections
            ],
            "on_hand_mL": self.on_hand_mL,
            "enough": self.enough,
            "shortfall_mL": self.shortfall_mL,
            "preparation": self.preparation.summary() if self.preparation else None,
            "batches": self.batches,
            "problem": self.problem,
            "section_preparations": [
                None if sp is None else {"preparation": sp[0].summary(), "batches": sp[1]}
                for sp in self.section_preparations
            ],
        }


def class_stocks(plan: Plan, recipes: list[Recipe], roster: Roster) -> tuple[ClassStock, ...]:
    """The class stock list for the cards' ``recipes`` (one per student, roster order)."""
    g = plan.glassware
    per_tube_allow = g.rinse_mL + g.dead_volume_mL
    used = np.stack([r.volumes_mL.sum(axis=0) for r in recipes])  # (N, k)
    uses = np.stack([(r.volumes_mL > 0).any(axis=0) for r in recipes])  # (N, k)
    keys = roster.bench_keys()
    _, bench = np.unique(np.array([f"{a}\x1f{b}" for a, b in keys]), return_inverse=True)
    sections = list(dict.fromkeys(roster.sections))
    sec = np.array([sections.index(s) for s in roster.sections])
    nb = int(bench.max()) + 1
    # a bench uses a stock when any student at it does: (benches, k)
    bench_uses = np.zeros((nb, used.shape[1]), dtype=bool)
    np.logical_or.at(bench_uses, bench, uses)
    bench_sec = np.zeros(nb, dtype=int)
    bench_sec[bench] = sec
    out = []
    for k, s in enumerate(plan.stock):  # a handful of stocks
        sec_rows = []
        for j, name in enumerate(sections):
            v = float(used[sec == j, k].sum())
            b = int(np.count_nonzero(bench_uses[bench_sec == j, k]))
            sec_rows.append((name, v, b, v + b * per_tube_allow))
        tubes = float(used[:, k].sum())
        nbk = int(np.count_nonzero(bench_uses[:, k]))
        allow = nbk * per_tube_allow
        total = tubes + allow
        prep, problem, batches = None, None, 1
        sec_preps: list = []
        comp = "M" if "M" in s.conc else ("L" if "L" in s.conc else None)
        if s.formula and comp is not None and total > 0:
            try:
                prep, batches = _prepare(plan, s, comp, total)
                sec_preps = [_prepare(plan, s, comp, t) if t > 0 else None for _, _, _, t in sec_rows]
            except (stk.StockError, GlasswareError) as exc:
                problem = str(exc)
        out.append(
            ClassStock(
                s.id,
                s.label,
                tubes,
                nbk,
                allow,
                total,
                tuple(sec_rows),
                s.on_hand,
                prep,
                batches,
                problem,
                tuple(sec_preps),
            )
        )
    return tuple(out)


def _prepare(plan: Plan, s, comp: str, total_mL: float) -> tuple[stk.StockPreparation, int]:
    g = plan.glassware
    try:
        flask_mL = _flask_choice(s, total_mL)
        batches = max(1, math.ceil(total_mL / flask_mL - 1e-9))
    except PlanError:  # more than the largest flask: repeated batches of the largest
        caps = [it.capacity_mL for it in catalogue() if it.kind == "flask"]
        flask_mL = caps[-1]
        batches = math.ceil(total_mL / flask_mL - 1e-9)
    prep = stk.prepare_stock(
        s.conc[comp],
        flask_mL,
        s.formula,
        purity=s.purity or 1.0,
        balance_readability_g=g.balance.readability_g,
        balance_repeatability_g=g.balance.repeatability_g,
        delta_T_C=g.delta_T_C,
    )
    return prep, batches
