"""Class sets: one recipe card per student, every card a series the student can plot and fit, every card
individually sound, all cards different, and together a design the class's pooled fit uses well.

How the cards are made, and why
-------------------------------
By default (``design.card_series``, :mod:`._series`) every card is a *teaching series*: at least five
distinct compositions spread over the binding curve — saturation 0.2–0.8 at the guess and at log β ± 1
sd — or the ratios of a mole-ratio or Job series, its tubes in the order the student plots them. Many
such series are drawn on the glassware's grid (seeded) and filtered; the class is then chosen among them
by sequential optimal design (:mod:`._select`, Wynn 1970): each next card is one that adds the most
information on the target to the class's pooled fit, so the class stays efficient for K while every
card stays a series of its own. ``pooled=True`` (``kplan cards --pooled``) makes the cards for the
pooled fit alone instead (:mod:`._jitter`): the optimal design of all the class's tubes, dealt out and
nudged on the grid until the cards differ — more efficient, but two or three clusters of near-identical
tubes per card.

Every card is then judged by :func:`planner.jobs.plan.assess.assess_study` itself (checks, verdict): a
card passes when the verdict is ``resolved``, no check fails and the linear-range check passes outright
(every tube inside the range over the guess's uncertainty). The χ² profile is computed only for cards
whose Cramér–Rao SE is too large for the asymptotic SE to be trusted (``TRUST_SE``); no output prints it.
A failing card is replaced by the next spare card, each assessed; a class that still has failing cards is
reported as not sound.

The comparison baselines are N copies of the single best recipe (the exact design of n tubes by the
exchange algorithm on the same candidates, as ``kplan design`` makes it, without its per-recipe stock
caps: the class stock list sizes the stocks instead) and N copies of the evenly spaced series
(:func:`planner.jobs.plan.even.even_series_for`); how the class's shared errors are pooled is described
in :mod:`planner.jobs.classroom._pooled`.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

from ...inference import approximate, exchange
from ...inference.design_criteria import DesignError
from ...inference.priors import Nodes
from ...inference.study import Study
from ...inputs.limits import check_class_size
from ...inputs.plan import Plan
from ...inputs.recipe import Recipe, concat_recipes
from ...inputs.roster import Roster
from ...inputs.text import plural
from ..compile import compile_study
from ..plan.assess import Assessment, assess_study
from ..plan.even import even_series_for
from ._drafts import Drafts, teaching_drafts
from ._grid import Grid, design_inputs, feasible_grid, recipe_of, set_key
from ._jitter import pooled_drafts
from ._pooled import Rows, pooled_target_se, recipe_rows, student_target_var
from ._series import Series, Spread, spreads

__all__ = [
    "Card",
    "ClassSet",
    "Draft",
    "Series",
    "Spread",
    "card_problems",
    "class_set",
    "class_set_study",
]

STARTS = 8  # exchange starts for the single best recipe (as kplan design)
ALTERNATIVES_TRIED = 12  # spare cards assessed for a student whose card fails, at most
TRUST_SE = 0.0434  # SE(log10 K) of a 10 % relative SE of K: above it the profile is computed
# [from memory: Tellinghuisen 2000, J. Phys. Chem. A 104:2834 — trust the asymptotic SE below ~10 %]


@dataclass(frozen=True)
class Draft:
    """A card before its assessment: who, the recipe (what a student's card prints) and what it varies."""

    student: str
    name: str
    section: str
    bench: str
    recipe: Recipe
    series: Series | None = None


@dataclass(frozen=True)
class Card:
    """One student's card: who, their recipe, what it varies, how it spreads, and its assessment."""

    student: str
    name: str
    section: str
    bench: str
    recipe: Recipe
    assessment: Assessment
    series: Series | None = None
    spread: Spread | None = None

    @property
    def problems(self) -> list[str]:
        return card_problems(self.assessment)

    @property
    def passes(self) -> bool:
        return not self.problems

    def __repr__(self) -> str:
        return f"Card({self.student}, {self.recipe.n_tubes} tubes, {'passes' if self.passes else 'FAILS'})"


def card_problems(a: Assessment) -> list[str]:
    """Why a card's recipe is not sound (empty when it passes)."""
    out = []
    if a.verdict != "resolved":
        out.append(f"verdict {a.verdict}: {a.verdict_reason}")
    for c in a.checks:
        if c.status == "fail" or (c.id == "linear-range" and c.status != "pass"):
            out.append(f"{c.id} {c.status}: {c.message}")
    return out


@dataclass(frozen=True)
class ClassSet:
    """A class set of cards and how the class's data would pool.

    Attributes
    ----------
    title : the plan's title.
    cards : one per student, roster order.
    best : the single best recipe (exact design of n tubes).
    even : the evenly spaced series of n tubes.
    seed : the seed used.
    radius_steps : largest grid move any tube needed (cards for the pooled fit; 0 for teaching series).
    lab : how the cards were made: a kind of ``design.card_series``, or "pooled".
    se : SEs of the target: "best_single", "even_single", "cards_median", "cards_max",
        "pooled" (all cards fitted together, one bottle of each stock for the class),
        "pooled_best_copies", "pooled_even_copies", "pooled_stock_per_section" (each section makes
        its own stocks), "pooled_without_stock" (stock errors left out: standardised stocks),
        "pooled_best_copies_without_stock".
    notes : what the builder did that the instructor should know.
    """

    title: str
    target: str
    goal_se: float
    cards: tuple[Card, ...]
    best: Recipe
    even: Recipe
    seed: int
    radius_steps: int
    step_mL: float
    se: dict = field(hash=False)
    notes: tuple[str, ...] = ()
    lab: str = "binding-curve"

    def __repr__(self) -> str:
        return (
            f"ClassSet({len(self.cards)} {self.lab} cards, {sum(c.passes for c in self.cards)} pass, "
            f"pooled SE {self.se['pooled']:.3g} vs best copies {self.se['pooled_best_copies']:.3g}, "
            f"even copies {self.se['pooled_even_copies']:.3g})"
        )

    @property
    def sound(self) -> bool:
        return all(c.passes for c in self.cards) and self.distinct

    @property
    def distinct(self) -> bool:
        keys = {_composition_key(c.recipe) for c in self.cards}
        return len(keys) == len(self.cards)

    @property
    def efficiency(self) -> float:
        """Efficiency of the class's pooled fit against N copies of the best single recipe,
        (SE_copies / SE_pooled)², full error budget (one bottle of each stock for the class)."""
        return (self.se["pooled_best_copies"] / self.se["pooled"]) ** 2

    @property
    def efficiency_without_stock(self) -> float:
        """The same with the stock errors left out (standardised stocks): the price of the cards' shape
        alone, without the stock errors that cards of different shapes let the pooled fit separate."""
        return (self.se["pooled_best_copies_without_stock"] / self.se["pooled_without_stock"]) ** 2

    def failing(self) -> list[tuple[str, list[str]]]:
        return [(c.student, c.problems) for c in self.cards if not c.passes]


def _composition_key(recipe: Recipe) -> bytes:
    """The set of tube compositions (replicates and tube order ignored), for the distinctness rule."""
    v = np.round(recipe.volumes_mL, 6)
    return np.unique(v, axis=0).tobytes()


def class_set(
    plan: Plan,
    roster: Roster,
    *,
    tubes: int | None = None,
    seed: int = 0,
    series: str | None = None,
    pooled: bool = False,
    progress: Callable[[int, int], None] | None = None,
    drafted: Callable[[tuple[Draft, ...]], None] | None = None,
) -> ClassSet:
    """Cards for every student of ``roster`` (the plan compiled once; see :func:`class_set_study`);
    ``series`` defaults to the plan's ``design.card_series``."""
    return class_set_study(
        compile_study(plan),
        roster,
        tubes=tubes,
        seed=seed,
        series=series or plan.design.card_series,
        pooled=pooled,
        progress=progress,
        drafted=drafted,
    )


def class_set_study(
    study: Study,
    roster: Roster,
    *,
    tubes: int | None = None,
    seed: int = 0,
    series: str = "binding-curve",
    pooled: bool = False,
    progress: Callable[[int, int], None] | None = None,
    drafted: Callable[[tuple[Draft, ...]], None] | None = None,
) -> ClassSet:
    """:func:`class_set` on a compiled plan (module docstring: how the cards are made).

    Parameters
    ----------
    tubes : tubes per student (default the plan's design.tubes).
    seed : seeds the draws and the exchange starts; same seed and roster → the same cards.
    series : the kind of teaching series ("binding-curve", "mole-ratio", "job").
    pooled : make the cards for the pooled fit alone instead of teaching series.
    progress : callback(done, total) while the cards are assessed.
    drafted : callback given the drafted cards before they are assessed (so the printing of the
        students' cards can start meanwhile); a card the assessment replaces differs from its draft.

    Raises
    ------
    DesignError
        When nothing can be designed (nothing fitted, no tube inside the linear range, too few tubes,
        no teaching series of the kind fits).
    """
    n, N = _sizes(study, roster, tubes)
    rng = np.random.default_rng(seed)
    grid = feasible_grid(study)
    ap, best = _best_recipe(study, grid, n, seed)
    t = study.params.target
    if pooled:
        drafts = pooled_drafts(grid, ap, n, N, study.goal_se, rng, t)
    else:
        drafts = teaching_drafts(study, grid, n, N, series, rng)
    recipes = [_recipe(study, grid, c, s) for c, s in zip(drafts.cards, drafts.series, strict=True)]
    if drafted is not None:
        drafted(tuple(Draft(*_who(roster, s), recipes[s], drafts.series[s]) for s in range(N)))
    cards, rescued = _assess_cards(study, grid, roster, drafts, recipes, progress)
    notes = list(drafts.notes)
    if rescued:
        notes.append(f"{plural(rescued, 'card')} failed a check of the assessment and were drawn again")
    even = even_series_for(study, n)
    se = _pooled_ses(study, cards, best, even, roster)
    notes = _class_notes(study, grid, se, n, notes)
    return ClassSet(
        study.title,
        study.target,
        study.goal_se,
        tuple(cards),
        best,
        even,
        seed,
        drafts.radius,
        grid.step_mL,
        se,
        tuple(notes),
        "pooled" if pooled else series,
    )


def _sizes(study: Study, roster: Roster, tubes: int | None) -> tuple[int, int]:
    """Tubes per student and students, refusing what cannot be designed."""
    n, N = check_class_size(len(roster), tubes or study.tubes)
    params = study.params
    if study.bench.titration is not None:
        raise DesignError(
            "this plan is an in-cuvette titration ([titration]): a class set gives each student a series "
            "of tubes; remove [titration] to make tube cards"
        )
    if params.size == 0 or params.target < 0:
        raise DesignError(
            f"the target {study.target} is held fixed (log_beta_sd = 0): give it log_beta_sd > 0"
        )
    if n < params.size:
        raise DesignError(
            f"{plural(n, 'tube')} cannot determine the {params.size} fitted parameters "
            f"({', '.join(params.names)}): ask for at least {params.size} tubes per student"
        )
    return n, N


def _best_recipe(study: Study, grid: Grid, n: int, seed: int):
    """The optimal approximate design of n tubes and the single best recipe (exact design by exchange)."""
    F, M0, nu = design_inputs(grid)
    kw = dict(criterion="target", target=study.params.target, M0=M0, node_weights=nu)
    ap = approximate.approximate_design(F, n_tubes=n, **kw)
    ex = exchange.exact_design(F, n, rng=np.random.default_rng(seed), starts=STARTS, approx=ap, **kw)
    return ap, recipe_of(study, grid, np.repeat(np.arange(ex.counts.size), ex.counts))


def _recipe(study: Study, grid: Grid, tubes_idx: np.ndarray, series: Series | None) -> Recipe:
    return recipe_of(study, grid, tubes_idx, None if series is None else series.varied)


def _who(roster: Roster, s: int) -> tuple[str, str, str, str]:
    return roster.ids[s], roster.names[s], roster.sections[s], roster.benches[s]


def _assess(study: Study, recipe: Recipe) -> Assessment:
    """The card's assessment: Cramér–Rao and checks; the χ² profile only where the asymptotic SE may not
    be trusted (it decides a 'bounded' verdict; no output prints it); not what limits the precision (no
    output prints it either)."""
    a = assess_study(study, recipe, trials=0, model_check=False, profile_chi2=False, shares=False)
    se = a.target_se
    if se is None or not np.isfinite(se) or se > TRUST_SE:
        a = assess_study(study, recipe, trials=0, model_check=False, shares=False)
    return a


def _assess_cards(study, grid, roster, drafts: Drafts, recipes, progress):
    """Assess every drafted card; a failing card is replaced by the student's next alternatives."""
    used = {set_key(grid, c) for c in drafts.cards}
    cards, rescued = [], 0
    for s in range(len(recipes)):  # one assessment per card
        rec, ser, a = recipes[s], drafts.series[s], _assess(study, recipes[s])
        if card_problems(a) and s not in drafts.unplaced:
            found = _replace(study, grid, drafts, s, used)
            if found is not None:
                rec, ser, a = found
                rescued += 1
        cards.append(Card(*_who(roster, s), rec, a, ser))
        if progress is not None:
            progress(s + 1, len(recipes))
    spread = spreads(study, [c.recipe for c in cards])
    return [
        Card(*_who(roster, s), c.recipe, c.assessment, c.series, spread[s]) for s, c in enumerate(cards)
    ], rescued


def _replace(study, grid, drafts: Drafts, s: int, used: set[bytes]):
    """The first of the student's alternatives that the assessment passes (at most ALTERNATIVES_TRIED)."""
    for k, (alt, ser) in enumerate(drafts.alternatives(s, used)):
        if k >= ALTERNATIVES_TRIED:
            break
        rec = _recipe(study, grid, alt, ser)
        a = _assess(study, rec)
        if not card_problems(a):
            used.discard(set_key(grid, drafts.cards[s]))
            used.add(set_key(grid, alt))
            drafts.cards[s] = alt
            return rec, ser, a
    return None


def _class_notes(study: Study, grid: Grid, se: dict, n: int, notes: list[str]) -> list[str]:
    goal = study.goal_se
    if not se["best_single"] <= goal:
        notes.insert(
            0,
            f"even the best recipe of {plural(n, 'tube')} gives SE {se['best_single']:.3g} > goal "
            f"{goal:g}: no card can pass; give each student more tubes (the tubes parameter) or relax "
            "design.goal_se",
        )
    if grid.step_mL != study.bench.step_mL:
        notes.append(
            f"the candidates were searched on a {grid.step_mL:g} mL grid (a multiple of the plan's "
            f"{study.bench.step_mL:g} mL) to keep the search small"
        )
    return notes


def _pooled_ses(study: Study, cards: list[Card], best: Recipe, even: Recipe, roster: Roster) -> dict:
    """SEs of the target: single recipes, the cards, and the class pooled three ways."""
    params = study.params
    t = params.target
    guess = Nodes(params.guess[None, :].copy(), np.ones(1))
    N = len(cards)
    n = best.n_tubes
    _, bench = np.unique(np.array([f"{a}\x1f{b}" for a, b in roster.bench_keys()]), return_inverse=True)

    def stacked(recipes: list[Recipe]) -> Rows:
        return recipe_rows(study, concat_recipes(recipes, [f"x{i}" for i in range(len(recipes))]), guess)

    def pooled(rows: Rows, copies: bool, shared: bool = True, group=None) -> float:
        def shape(a):
            a = a[0]
            return np.broadcast_to(a, (N,) + a.shape) if copies else a.reshape(N, n, -1)

        return pooled_target_se(
            shape(rows.theta),
            shape(rows.stock),
            shape(rows.device),
            bench,
            t,
            stock_shared=shared,
            stock_group=group,
        )

    rc = stacked([c.recipe for c in cards])
    rb = stacked([best])
    re_ = stacked([even])
    card_se = np.array([c.assessment.target_se for c in cards], dtype=float)
    return {
        "best_single": float(np.sqrt(student_target_var(rb.take(np.arange(n)[None]), t)[0, 0])),
        "even_single": float(np.sqrt(student_target_var(re_.take(np.arange(even.n_tubes)[None]), t)[0, 0])),
        "cards_median": float(np.median(card_se)),
        "cards_max": float(np.max(card_se)),
        "pooled": pooled(rc, False),
        "pooled_best_copies": pooled(rb, True),
        "pooled_even_copies": pooled(re_, True),
        "pooled_stock_per_section": pooled(rc, False, group=np.array(roster.sections)),
        "pooled_without_stock": pooled(rc, False, shared=False),
        "pooled_best_copies_without_stock": pooled(rb, True, shared=False),
    }
