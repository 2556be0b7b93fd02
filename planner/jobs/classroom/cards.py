"""Class sets: one recipe card per student, every card individually sound, all cards different, and
together a good pooled design.

How the students are spread, and why
------------------------------------
The recipe a whole class should make, if its data are fitted together, is the optimal *approximate*
design on the grid's candidate tubes (:func:`planner.inference.approximate.approximate_design`, the
same robust target criterion, range screen and nuisance factors as ``kplan design``): as the number
of tubes grows, the best exact design of N × n tubes converges to N·n times its weights. So:

1. the pooled design is the efficient rounding of those weights to N·n tubes (Pukelsheim & Rieder
   1992, Biometrika 79:763), and it is dealt out like cards, tube i of the sorted list to student
   i mod N: each student's n tubes then follow the weights as closely as n tubes can, so every subset
   is itself close to the single-student optimum (which is what makes it individually sound);
2. copies of one subset are not allowed (no two cards may share the same set of compositions), so each
   tube is moved to a random feasible grid neighbour of its composition (within ±r grid steps of every
   designed stock, r = 1, 2, … only as far as needed), a dozen proposals per student, drawn from the
   seeded generator in one vectorised batch. The information near an optimal support point is flat,
   so the loss is small; it is measured and reported (pooled SE against N copies of the best recipe);
3. each proposal is scored by its own Cramér–Rao SE of the target at the guess (full error budget,
   shared errors as unit-prior nuisance factors — :mod:`planner.jobs.classroom._pooled`) and by the robust
   criterion; each student takes their best proposal whose set of compositions no earlier card has
   and whose SE meets ``design.goal_se``;
4. every card is then judged by :func:`planner.jobs.plan.assess.assess_study` itself (checks, verdict,
   χ² profile): a card passes when the verdict is ``resolved``, no check fails and the linear-range
   check passes outright (every tube inside the range over the guess's uncertainty). A failing card
   (a check neither the range screen nor the SE foresees, such as the complete-conversion shortcut)
   falls back to that student's next proposals, then to fresh proposals at growing radius, each
   assessed; a class that still has failing cards is reported as not sound.

The comparison baselines are N copies of the single best recipe (the exact design of n tubes by the
exchange algorithm on the same candidates, as ``kplan design`` makes it, without its per-recipe stock
caps: the class stock list sizes the stocks instead) and N copies of the evenly spaced series
(:func:`planner.jobs.plan.even.even_series_for`); how the class's shared errors are pooled is described
in :mod:`planner.jobs.classroom._pooled`.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

from ...inference import approximate, exchange
from ...inference.design_criteria import DesignError
from ...inference.priors import Nodes, prior_nodes
from ...inference.study import Study
from ...inputs.limits import check_class_size
from ...inputs.plan import Plan
from ...inputs.recipe import Recipe, concat_recipes
from ...inputs.roster import Roster
from ...inputs.text import plural
from ..compile import compile_study
from ..plan.assess import Assessment, assess_study
from ..plan.candidates import MAX_CANDIDATES, candidate_tubes
from ..plan.checks import RANGE_RISK, prior_range_risk
from ..plan.even import even_series_for
from ._pooled import Rows, pooled_target_se, recipe_rows, student_target_var

__all__ = ["Card", "ClassSet", "Draft", "card_problems", "class_set", "class_set_study"]

PROPOSALS = 12  # jittered proposals per student and radius
MAX_RADIUS = 8  # grid steps a tube may move from its pooled composition
FALLBACKS = 4  # proposals tried per student when assess fails a card
STARTS = 8  # exchange starts for the single best recipe (as kplan design)


@dataclass(frozen=True)
class Draft:
    """A card before its assessment: who and the recipe (what a student's card prints)."""

    student: str
    name: str
    section: str
    bench: str
    recipe: Recipe


@dataclass(frozen=True)
class Card:
    """One student's card: who, their recipe and its assessment."""

    student: str
    name: str
    section: str
    bench: str
    recipe: Recipe
    assessment: Assessment

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
    radius_steps : largest grid move any tube needed (0: no jitter was needed).
    se : SEs of the target: "best_single", "even_single", "cards_median", "cards_max",
        "pooled" (all cards fitted together, one bottle of each stock for the class),
        "pooled_best_copies", "pooled_even_copies", "pooled_stock_per_section" (each section makes
        its own stocks), "pooled_without_stock" (stock errors left out: standardised stocks).
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

    def __repr__(self) -> str:
        return (
            f"ClassSet({len(self.cards)} cards, {sum(c.passes for c in self.cards)} pass, "
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

    def failing(self) -> list[tuple[str, list[str]]]:
        return [(c.student, c.problems) for c in self.cards if not c.passes]

    def summary(self) -> dict:
        """JSON-safe description (``kplan cards --json``)."""
        return {
            "title": self.title,
            "target": self.target,
            "goal_se": self.goal_se,
            "students": len(self.cards),
            "tubes_per_student": self.best.n_tubes,
            "seed": self.seed,
            "sound": self.sound,
            "distinct": self.distinct,
            "jitter_steps": self.radius_steps,
            "jitter_mL": self.radius_steps * self.step_mL,
            "se": {k: _f(v) for k, v in self.se.items()},
            "efficiency_vs_best_copies": _f((self.se["pooled_best_copies"] / self.se["pooled"]) ** 2),
            "se_ratio_even_copies_vs_pooled": _f(self.se["pooled_even_copies"] / self.se["pooled"]),
            "cards": [
                {
                    "student": c.student,
                    "section": c.section,
                    "bench": c.bench,
                    "passes": c.passes,
                    "problems": c.problems,
                    "verdict": c.assessment.verdict,
                    "se": _f(c.assessment.target_se),
                }
                for c in self.cards
            ],
            "failing": [s for s, _ in self.failing()],
            "notes": list(self.notes),
        }


def _f(x) -> float | None:
    x = float(x) if x is not None else float("nan")
    return x if math.isfinite(x) else None


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
    progress: Callable[[int, int], None] | None = None,
    drafted: Callable[[tuple[Draft, ...]], None] | None = None,
) -> ClassSet:
    """Cards for every student of ``roster`` (the plan compiled once; see :func:`class_set_study`)."""
    return class_set_study(
        compile_study(plan), roster, tubes=tubes, seed=seed, progress=progress, drafted=drafted
    )


@dataclass(frozen=True)
class _Grid:
    """The feasible candidates and their grid coordinates."""

    recipe: Recipe  # all candidates
    designed: tuple[str, ...]
    idx: np.ndarray  # (C',) feasible candidate indices
    coords: np.ndarray  # (C', d) integer grid coordinates of the designed volumes
    step_mL: float
    rows: Rows  # rows of the feasible candidates at the robust nodes
    nodes: Nodes
    guess: int  # index of the guess among the nodes
    crit: np.ndarray  # node weights of the design criterion (robust or the guess alone)


def _grid(study: Study) -> _Grid:
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
    return _Grid(cand.recipe, cand.designed_ids, idx, coords, cand.step_mL, rows.take(idx), nodes, gi, crit)


def _nonzero_columns(rows: Rows) -> tuple[np.ndarray, np.ndarray]:
    return (np.any(rows.stock != 0, axis=(0, 1)), np.any(rows.device != 0, axis=(0, 1)))


def _design_inputs(grid: _Grid):
    """F (G', C', 1, Q) and M0 (Q, Q) for the design algorithms: nodes with weight, shared-error
    columns that are not identically zero."""
    ks, kd = _nonzero_columns(grid.rows)
    g = np.flatnonzero(grid.crit > 0)
    r = grid.rows
    F = np.concatenate([r.theta[g], r.stock[g][..., ks], r.device[g][..., kd]], axis=-1)
    P = r.theta.shape[-1]
    M0 = np.zeros((F.shape[-1],) * 2)
    M0[P:, P:] = np.eye(F.shape[-1] - P)
    return F[:, :, None, :], M0, grid.crit[g]


def _neighbours(grid: _Grid, support: np.ndarray, radius: int) -> tuple[np.ndarray, np.ndarray]:
    """Feasible grid neighbours (within ±radius steps per designed stock) of each support point:
    a padded table (S, O) of feasible indices, valid entries first, and their counts (S,)."""
    d = grid.coords.shape[1]
    off = np.stack(
        [m.ravel() for m in np.meshgrid(*([np.arange(-radius, radius + 1)] * d), indexing="ij")], axis=1
    )
    off = off[np.argsort(np.abs(off).sum(axis=1), kind="stable")]  # nearest first
    shift = grid.coords.min(axis=0) - radius
    span = grid.coords.max(axis=0) - shift + radius + 1
    mult = np.concatenate([[1], np.cumprod(span[:-1])]).astype(np.int64)
    keys = (grid.coords - shift) @ mult
    order = np.argsort(keys)
    skeys = keys[order]
    want = ((grid.coords[support][:, None, :] + off[None, :, :]) - shift) @ mult  # (S, O)
    pos = np.clip(np.searchsorted(skeys, want), 0, skeys.size - 1)
    found = skeys[pos] == want
    table = np.where(found, order[pos], -1)
    first = np.argsort(~found, axis=1, kind="stable")  # valid entries first
    table = np.take_along_axis(table, first, axis=1)
    return table, found.sum(axis=1)


def _score(grid: _Grid, props: np.ndarray, t: int) -> tuple[np.ndarray, np.ndarray]:
    """(SE at the guess, robust loss) of proposals (B, n) of feasible indices."""
    v = student_target_var(grid.rows.take(props), t)  # (G, B)
    se = np.sqrt(v[grid.guess])
    with np.errstate(divide="ignore"):
        loss = grid.crit @ np.log(v)
    return se, loss


def _recipe(study: Study, grid: _Grid, tubes_idx: np.ndarray) -> Recipe:
    """A student's recipe from feasible indices, tubes ordered by the designed volumes."""
    rec = grid.recipe
    chosen = grid.idx[tubes_idx]
    vols = {sid: rec.column(sid)[chosen] for sid in study.bench.dispensed_ids(rec)}
    order = np.lexsort([vols[s] for s in reversed(grid.designed)])
    return study.bench.make_recipe({k: v[order] for k, v in vols.items()})


def class_set_study(  # noqa: C901
    study: Study,
    roster: Roster,
    *,
    tubes: int | None = None,
    seed: int = 0,
    progress: Callable[[int, int], None] | None = None,
    drafted: Callable[[tuple[Draft, ...]], None] | None = None,
) -> ClassSet:
    """:func:`class_set` on a compiled plan (module docstring: how the students are spread).

    Parameters
    ----------
    tubes : tubes per student (default the plan's design.tubes).
    seed : seeds the exchange starts and the jitter; same seed and roster → the same cards.
    progress : callback(done, total) while the cards are assessed.
    drafted : callback given the drafted cards before they are assessed (so the printing of the
        students' cards can start meanwhile); a card the assessment replaces differs from its draft.

    Raises
    ------
    DesignError
        When nothing can be designed (nothing fitted, no tube inside the linear range, too few tubes).
    """
    n, N = check_class_size(len(roster), tubes or study.tubes)
    params = study.params
    t = params.target
    if params.size == 0 or t < 0:
        raise DesignError(
            f"the target {study.target} is held fixed (log_beta_sd = 0): give it log_beta_sd > 0"
        )
    if n < params.size:
        raise DesignError(
            f"{plural(n, 'tube')} cannot determine the {params.size} fitted parameters "
            f"({', '.join(params.names)}): ask for at least {params.size} tubes per student"
        )
    rng = np.random.default_rng(seed)
    grid = _grid(study)
    F, M0, nu = _design_inputs(grid)
    kw = dict(criterion="target", target=t, M0=M0, node_weights=nu)
    ap = approximate.approximate_design(F, n_tubes=n, **kw)
    ex = exchange.exact_design(F, n, rng=np.random.default_rng(seed), starts=STARTS, approx=ap, **kw)
    best = _recipe(study, grid, np.repeat(np.arange(ex.counts.size), ex.counts))
    # 1. the pooled design, dealt out: tube i of the sorted list goes to student i mod N
    pooled = exchange._efficient_rounding(ap.weights, N * n)
    alloc = np.repeat(np.arange(pooled.size), pooled).reshape(n, N).T  # (N, n)
    # 2–3. jittered proposals, scored, the best distinct sound one per student
    goal = study.goal_se
    chosen: list[np.ndarray | None] = [None] * N
    spare: list[list[np.ndarray]] = [[] for _ in range(N)]
    used: set[bytes] = set()
    radius = 0
    pending = np.arange(N)
    notes: list[str] = []
    while pending.size and radius <= MAX_RADIUS:
        props, se, loss = _proposals(grid, alloc[pending], radius, 1 if radius == 0 else PROPOSALS, rng, t)
        rank = np.argsort(np.where(se <= goal, loss, np.inf), axis=1, kind="stable")
        left = []
        for i, s in enumerate(pending):  # one entry per student and proposal: hashing, not arithmetic
            for k in rank[i]:
                if not se[i, k] <= goal:
                    break
                key = _set_key(grid, props[i, k])
                if key in used:
                    continue
                if chosen[s] is None:
                    chosen[s] = props[i, k]
                    used.add(key)
                elif len(spare[s]) < FALLBACKS:
                    spare[s].append(props[i, k])
            if chosen[s] is None:
                left.append(s)
        pending = np.array(left, dtype=int)
        if pending.size:
            radius += 1
    radius_used = radius
    unplaced = {int(s) for s in pending}
    if pending.size:
        notes.append(
            f"{pending.size} student(s) got no distinct recipe meeting goal_se within ±{MAX_RADIUS} "
            f"grid steps: their cards repeat the pooled allocation and are marked as failing"
        )
        for s in pending:
            chosen[s] = alloc[s]
    # 4. judge every card with the assessment itself
    recipes = [_recipe(study, grid, chosen[s]) for s in range(N)]
    if drafted is not None:
        drafted(
            tuple(
                Draft(roster.ids[s], roster.names[s], roster.sections[s], roster.benches[s], recipes[s])
                for s in range(N)
            )
        )
    cards = []
    rescued = 0
    for s in range(N):
        rec = recipes[s]
        a = assess_study(study, rec, trials=0, model_check=False)
        if card_problems(a) and s not in unplaced:
            for alt in spare[s]:  # the student's next proposals, while assess fails the card
                key_new = _set_key(grid, alt)
                if key_new in used:
                    continue
                rec2 = _recipe(study, grid, alt)
                a2 = assess_study(study, rec2, trials=0, model_check=False)
                if not card_problems(a2):
                    used.discard(_set_key(grid, chosen[s]))
                    used.add(key_new)
                    chosen[s], rec, a = alt, rec2, a2
                    break
        if card_problems(a) and s not in unplaced:
            found = _rescue(study, grid, alloc[s], goal, used, rng, t)
            if found is not None:
                used.discard(_set_key(grid, chosen[s]))
                used.add(_set_key(grid, found[0]))
                chosen[s], rec, a, r_found = found
                radius_used = max(radius_used, r_found)
                rescued += 1
        cards.append(Card(roster.ids[s], roster.names[s], roster.sections[s], roster.benches[s], rec, a))
        if progress is not None:
            progress(s + 1, N)
    if rescued:
        notes.append(f"{rescued} card(s) failed a check of the assessment and were drawn again")
    even = even_series_for(study, n)
    se = _pooled_ses(study, cards, best, even, roster)
    if not se["best_single"] <= goal:
        notes.insert(
            0,
            f"even the best recipe of {plural(n, 'tube')} gives SE {se['best_single']:.3g} > goal {goal:g}: "
            f"no card can pass; give each student more tubes (--tubes) or relax design.goal_se",
        )
    if grid.step_mL != study.bench.step_mL:
        notes.append(
            f"the candidates were searched on a {grid.step_mL:g} mL grid (a multiple of the plan's "
            f"{study.bench.step_mL:g} mL) to keep the search small"
        )
    return ClassSet(
        study.title,
        study.target,
        goal,
        tuple(cards),
        best,
        even,
        seed,
        radius_used,
        grid.step_mL,
        se,
        tuple(notes),
    )


def _proposals(grid: _Grid, alloc: np.ndarray, radius: int, K: int, rng: np.random.Generator, t: int):
    """K jittered proposals for each row of ``alloc`` (m, n): every tube moved to a uniformly drawn
    feasible grid neighbour within ±radius steps, all at once. Returns the proposals (m, K, n) and
    their SE at the guess and robust loss (m, K)."""
    m, n = alloc.shape
    sup = np.unique(alloc)
    table, count = _neighbours(grid, sup, radius)
    where = np.searchsorted(sup, alloc)  # (m, n) rows of the table
    cnt = count[where][:, None, :]
    pick = np.minimum((rng.random((m, K, n)) * cnt).astype(int), cnt - 1)
    props = table[where[:, None, :], pick]  # (m, K, n) feasible indices
    se, loss = _score(grid, props.reshape(-1, n), t)
    return props, se.reshape(m, K), loss.reshape(m, K)


RESCUE_TRIES = 3  # assessments per radius for a card that failed a check


def _rescue(study: Study, grid: _Grid, alloc_row: np.ndarray, goal: float, used: set, rng, t: int):
    """Fresh proposals for one student whose card failed a check (a check the range screen and the
    SE cannot foresee, such as a hand-analysis shortcut): growing radius, best first, each assessed."""
    for radius in range(1, MAX_RADIUS + 1):
        props, se, loss = _proposals(grid, alloc_row[None, :], radius, PROPOSALS, rng, t)
        tried = 0
        for k in np.argsort(np.where(se[0] <= goal, loss[0], np.inf), kind="stable"):
            if not se[0, k] <= goal or tried >= RESCUE_TRIES:
                break
            if _set_key(grid, props[0, k]) in used:
                continue
            tried += 1
            rec = _recipe(study, grid, props[0, k])
            a = assess_study(study, rec, trials=0, model_check=False)
            if not card_problems(a):
                return props[0, k], rec, a, radius
    return None


def _set_key(grid: _Grid, tubes_idx: np.ndarray) -> bytes:
    return np.unique(grid.idx[tubes_idx]).tobytes()


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
    }
