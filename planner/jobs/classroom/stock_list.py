"""The class stock list: how much of each stock to make for the whole class and for each section, and how
to make it, checked against what is on hand.

Volumes: what every card's tubes take, plus the rinse and dead-volume allowance once per *bench*
that uses the stock (each bench's dispenser is rinsed with the stock and keeps its dead volume), not
once per class and not once per student. A bench is set up once per section that meets at it; a
student without a bench in the roster has a bench of their own.

How to make it is :func:`planner.jobs.stocks.needs.stock_needs` itself — the code behind ``kplan stocks``
and the prep sheet: every solute the stock's concentrations imply (the metal or ligand salt, the other
ions paired into common salts with their masses, acids from a standardised solution), the solvent and
the flask, with a dilution chain where a mass would fall below the balance's minimum weight — for a
flask that holds the class's volume: the plan's flask for the stock if it names one, else the smallest
catalogue flask that holds the volume (at least 50 mL, as ``kplan stocks``), in repeated batches where
the volume is more than that flask holds. The same for each section's own batch.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ...inputs.plan import Plan, PlanError
from ...inputs.recipe import Recipe
from ...inputs.roster import Roster
from ...uncertainty import stocks as stk
from ...uncertainty.catalogue import catalogue
from ..stocks.needs import StockNeed, _flask_choice, stock_needs

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
    preparation : the weighing of its metal or ligand salt (None without a formula), for ``batches`` ×
        the flask.
    batches : how many flasks of the preparation make the class total.
    problem : why no preparation was computed (None if fine or not asked).
    section_preparations : per section, (preparation, batches) when each section makes its own, or
        None (nothing to make, or no weighing of a metal or ligand salt).
    need : one batch for the class as ``kplan stocks`` makes it (every solute with its mass, the solvent
        and the flask); None when the class does not use the stock.
    section_needs : per section, (one batch, batches) or None.
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
    need: StockNeed | None = None
    section_needs: tuple = ()

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
            "make": self.need.summary() if self.need is not None else None,
            "section_make": [
                None if sn is None else {"make": sn[0].summary(), "batches": sn[1]}
                for sn in self.section_needs
            ],
        }


def _volumes(plan: Plan, recipes: list[Recipe], roster: Roster):
    """Per stock: tubes mL (k,), benches (k,), and per section rows (section, tubes, benches, total)."""
    g = plan.glassware
    allow = g.rinse_mL + g.dead_volume_mL
    used = np.stack([r.volumes_mL.sum(axis=0) for r in recipes])  # (N, k)
    uses = np.stack([(r.volumes_mL > 0).any(axis=0) for r in recipes])  # (N, k)
    _, bench = np.unique(np.array([f"{a}\x1f{b}" for a, b in roster.bench_keys()]), return_inverse=True)
    sections = list(dict.fromkeys(roster.sections))
    sec = np.array([sections.index(s) for s in roster.sections])
    nb = int(bench.max()) + 1
    bench_uses = np.zeros((nb, used.shape[1]), dtype=bool)  # a bench uses a stock when any student does
    np.logical_or.at(bench_uses, bench, uses)
    bench_sec = np.zeros(nb, dtype=int)
    bench_sec[bench] = sec
    rows = []
    for j, name in enumerate(sections):  # a handful of sections
        v = used[sec == j].sum(axis=0)
        b = np.count_nonzero(bench_uses[bench_sec == j], axis=0)
        rows.append((name, v, b, v + b * allow))
    return used.sum(axis=0), np.count_nonzero(bench_uses, axis=0), rows


def _flask_and_batches(s, volume_mL: float) -> tuple[float, int]:
    """The flask a volume is made up in and how many batches of it (module docstring)."""
    try:
        flask_mL = _flask_choice(s, volume_mL)
    except PlanError:  # more than the largest flask: repeated batches of the largest
        flask_mL = [it.capacity_mL for it in catalogue() if it.kind == "flask"][-1]
    return flask_mL, max(1, math.ceil(volume_mL / flask_mL - 1e-9))


def _batches(plan: Plan, volumes_mL: np.ndarray) -> tuple[list[StockNeed | None], list[int]]:
    """One batch of each stock as ``kplan stocks`` makes it, in the flask that holds ``volumes_mL``
    (k,), and the number of batches; None for a stock nothing uses."""
    flasks, batches = {}, []
    for s, v in zip(plan.stock, volumes_mL, strict=True):  # a handful of stocks
        f, b = _flask_and_batches(s, float(v)) if v > 0 else (None, 0)
        flasks[s.id] = f
        batches.append(b)
    scaled = plan.model_copy(
        update={"stock": [s.model_copy(update={"flask_mL": flasks[s.id] or s.flask_mL}) for s in plan.stock]}
    )
    needs = stock_needs(scaled)
    return [nd if flasks[nd.id] else None for nd in needs], batches


def class_stocks(plan: Plan, recipes: list[Recipe], roster: Roster) -> tuple[ClassStock, ...]:
    """The class stock list for the cards' ``recipes`` (one per student, roster order)."""
    g = plan.glassware
    allow = g.rinse_mL + g.dead_volume_mL
    tubes, benches, sec_rows = _volumes(plan, recipes, roster)
    totals = tubes + benches * allow
    needs, batches = _batches(plan, totals)
    sec_needs = [_batches(plan, t) for _, _, _, t in sec_rows]
    out = []
    for k, s in enumerate(plan.stock):  # a handful of stocks
        nd = needs[k]
        sn = [None if sn_[0][k] is None else (sn_[0][k], sn_[1][k]) for sn_ in sec_needs]
        prep = nd.preparation if nd is not None else None
        out.append(
            ClassStock(
                s.id,
                s.label,
                float(tubes[k]),
                int(benches[k]),
                float(benches[k] * allow),
                float(totals[k]),
                tuple((name, float(v[k]), int(b[k]), float(t[k])) for name, v, b, t in sec_rows),
                s.on_hand,
                prep,
                max(batches[k], 1),
                nd.problem if nd is not None else None,
                tuple(
                    None if x is None or x[0].preparation is None else (x[0].preparation, x[1]) for x in sn
                ),
                nd,
                tuple(sn),
            )
        )
    return tuple(out)
