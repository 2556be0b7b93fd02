"""The slips a bench produces, as alternative tubes: each is a hypothesis about what was really in the tubes.

Every generator returns the hypotheses of one kind as (text, volumes, stock concentrations, totals) with the
number of numbers it fits (k) and how many variants of its kind there were (N, for the look-elsewhere
penalty); :func:`planner.jobs.classroom.mixup.diagnose` predicts all of them in one batch.

- ``wrong-stock``: one reagent taken from another bottle of the plan or from a bottle ten times as
  concentrated or dilute, or one stock made up at a concentration off its label by a factor fitted on a
  grid;
- ``swapped-stocks``: two dispensers filled with each other's stock (every tube gets the other volumes);
- ``misread-volume``: one delivery off by 1 mL or 0.1 mL (a burette read at the wrong mark) or with its
  two last digits transposed (2.15 mL delivered as 2.51 mL);
- ``not-made-up``: one tube not filled to the mark (its volume short by a fraction fitted on a grid).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ...inputs.recipe import Recipe
from ...uncertainty.bench import Bench

MISREAD_STEPS_ML = (1.0, -1.0, 0.1, -0.1)
STOCK_FACTORS = np.geomspace(0.05, 20.0, 41)  # grid for a stock's fitted concentration factor
TENFOLD = (10.0, 0.1)  # a bottle ten times as concentrated or dilute: a discrete slip of its own
NEAR_TENFOLD = np.log(1.25)  # the fitted factor's grid leaves out factors this close to ten-fold
MAKE_UP_FRACTIONS = np.linspace(0.1, 0.9, 9)  # share of the diluent actually added (grid for the fit)


@dataclass(frozen=True)
class Variant:
    """One hypothesis: its kind, words, fitted numbers k, variants of its kind N, and a grouping key (the
    entries of one fitted grid share it; the best of each group is kept)."""

    kind: str
    text: str
    k: int
    N: int
    group: str


@dataclass
class Variants:
    """Hypotheses and their tubes (volumes (n, k), stock concentrations (k, 2), totals (n,))."""

    items: list[Variant]
    volumes: list[np.ndarray]
    conc: list[np.ndarray]
    total: list[np.ndarray]

    def add(self, v: Variant, V: np.ndarray, C: np.ndarray, Vt: np.ndarray) -> None:
        self.items.append(v)
        self.volumes.append(V)
        self.conc.append(C)
        self.total.append(Vt)


def fmt_mL(v: float) -> str:
    return f"{v:.2f} mL"


def transposed(v: float) -> float | None:
    """2.15 → 2.51: the last two digits of the volume written to 0.01 mL, swapped (None if unchanged)."""
    s = f"{v:.2f}"
    digits = [c for c in s if c.isdigit()]
    if len(digits) < 2 or digits[-1] == digits[-2]:
        return None
    digits[-1], digits[-2] = digits[-2], digits[-1]
    txt = "".join(digits)
    return float(txt[:-2] + "." + txt[-2:])


def used_stocks(bench: Bench, recipe: Recipe) -> list[int]:
    """Columns of the dispensed stocks that some tube uses."""
    cols = [recipe.stock_ids.index(s) for s in bench.dispensed_ids(recipe)]
    return [j for j in cols if np.any(recipe.volumes_mL[:, j] > 0)]


def stock_factor_text(sid: str, f: float) -> str:
    for t in TENFOLD:
        if abs(f / t - 1.0) < 1e-9:
            return f"{sid} taken from a bottle {t:g}× as concentrated"
    return f"{sid} at about {f:.2g}× its labelled concentration (made up or diluted wrongly)"


def wrong_stock(out: Variants, recipe: Recipe, conc: np.ndarray, used: list[int]) -> None:
    V, Vt = recipe.volumes_mL, recipe.total_volume_mL
    ids = recipe.stock_ids
    swaps = [
        (j, j2) for j in used for j2 in range(conc.shape[0]) if j2 != j and not np.allclose(conc[j2], conc[j])
    ]
    bottles = [(j, f"{ids[j2]} taken instead of {ids[j]}", conc[j2]) for j, j2 in swaps]
    bottles += [(j, stock_factor_text(ids[j], f), conc[j] * f) for j in used for f in TENFOLD]
    for j, text, row in bottles:  # another bottle: nothing fitted
        C = conc.copy()
        C[j] = row
        out.add(Variant("wrong-stock", text, 0, len(bottles), ""), V, C, Vt)
    grid = STOCK_FACTORS[
        np.all(np.abs(np.log(STOCK_FACTORS[:, None] / np.array(TENFOLD))) > NEAR_TENFOLD, axis=1)
    ]
    for j in used:  # a stock made up at the wrong concentration: its factor fitted on the grid
        for f in grid:
            C = conc.copy()
            C[j] = conc[j] * f
            out.add(
                Variant("wrong-stock", stock_factor_text(ids[j], f), 1, len(used), f"factor {j}"), V, C, Vt
            )


def swapped_stocks(out: Variants, recipe: Recipe, conc: np.ndarray, used: list[int]) -> None:
    pairs = [(a, b) for i, a in enumerate(used) for b in used[i + 1 :]]
    ids = recipe.stock_ids
    for a, b in pairs:
        V = recipe.volumes_mL.copy()
        V[:, [a, b]] = V[:, [b, a]]
        text = f"{ids[a]} and {ids[b]} swapped (each dispenser filled with the other stock)"
        out.add(Variant("swapped-stocks", text, 0, len(pairs), ""), V, conc, recipe.total_volume_mL)


def misread_volume(out: Variants, bench: Bench, recipe: Recipe, conc: np.ndarray, used: list[int]) -> None:
    V = recipe.volumes_mL
    found = []
    for i in range(recipe.n_tubes):  # bookkeeping per delivery; the predictions are batched by the caller
        for j in used:
            v = V[i, j]
            cands = [(v + d, "") for d in MISREAD_STEPS_ML]
            tv = transposed(v) if v > 0 else None
            if tv is not None:
                cands.append((tv, " (digits transposed)"))
            for new, note in cands:
                tot = _misread_total(bench, recipe, i, j, new)
                if new >= 0 and tot is not None:
                    Vi = V.copy()
                    Vi[i, j] = new
                    text = (
                        f"{recipe.tubes[i]}: {recipe.stock_ids[j]} {fmt_mL(new)} delivered instead of "
                        f"{fmt_mL(v)}{note}"
                    )
                    found.append((text, Vi, tot))
    for text, Vi, tot in found:
        out.add(Variant("misread-volume", text, 0, len(found), ""), Vi, conc, tot)


def _misread_total(bench: Bench, recipe: Recipe, i: int, j: int, new: float) -> np.ndarray | None:
    """The tubes' total volumes with delivery (i, j) at ``new`` mL (None when the flask would overflow)."""
    Vi = recipe.volumes_mL[i].copy()
    Vi[j] = new
    tot = recipe.total_volume_mL.copy()
    if not bench.to_mark:
        tot[i] = Vi.sum()
        return tot
    diluent = Vi[recipe.stock_ids.index(bench.diluent_id)] if bench.diluent_id else 0.0
    return None if Vi.sum() - diluent > bench.tube_volume_mL else tot


def not_made_up(out: Variants, bench: Bench, recipe: Recipe, conc: np.ndarray) -> None:
    if not bench.to_mark or bench.diluent_id is None:
        return
    V, Vt = recipe.volumes_mL, recipe.total_volume_mL
    jd = recipe.stock_ids.index(bench.diluent_id)
    n = recipe.n_tubes
    for i in range(n):
        rest = V[i, jd]
        if rest <= 0:
            continue
        for fr in MAKE_UP_FRACTIONS:
            tot = Vt.copy()
            tot[i] = Vt[i] - (1.0 - fr) * rest
            text = f"{recipe.tubes[i]} not made up to the mark (about {fr:.0%} of the water added)"
            out.add(Variant("not-made-up", text, 1, n, f"short {i}"), V, conc, tot)


def bench_variants(bench: Bench, recipe: Recipe, conc: np.ndarray) -> Variants:
    """Every tube-level hypothesis for ``recipe`` made with stocks at ``conc`` (k, 2)."""
    out = Variants([], [], [], [])
    used = used_stocks(bench, recipe)
    wrong_stock(out, recipe, conc, used)
    swapped_stocks(out, recipe, conc, used)
    misread_volume(out, bench, recipe, conc, used)
    not_made_up(out, bench, recipe, conc)
    return out
