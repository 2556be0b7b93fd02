"""Teaching series: the cards a student can plot and fit on their own.

Three kinds of lab (``design.card_series``):

- ``binding-curve`` (default): one reagent at a constant volume, the other rising geometrically, so the
  tubes climb the binding curve in even steps of log concentration. A card must cover the curve where the
  data fix K — saturation (the fraction of the limiting reagent bound) inside 0.2–0.8 [source: Weber
  1975, Adv. Protein Chem. 29:1; Deranleau 1969, JACS 91:4044] — not only at the guess but also at
  log β ± 1 sd, because the guess is uncertain by that much: at the guess the assessment's saturation
  check must pass (two tubes inside the window, a span of at least half of it), and at ±1 sd at least one
  tube must lie inside the window with the tubes spanning half of it.
- ``mole-ratio``: the metal at a constant volume, the ligand rising in even steps of the ratio L/M, with
  at least two tubes on each side of the complex's ratio (the tubes the two hand-drawn lines go through,
  as in ``kplan series --method mole-ratio``).
- ``job``: equimolar metal and ligand stocks at a constant total volume, the metal's mole fraction rising
  in even steps, with at least two tubes on each side of the complex's fraction p/(p+q) (Job 1928).

Every card of every kind has at least ``MIN_DISTINCT`` distinct compositions (a few replicates are fine),
its L/M ratios spanning at least ``RATIO_SPAN``-fold, every tube inside the linear range over the guess's
uncertainty (the grid's range screen), and its own Cramér–Rao SE of the target within ``design.goal_se``.
The cards are drawn at random on the lines of :mod:`._lines` (seeded), deduplicated as sets of
compositions, and filtered; :mod:`._select` then chooses the class among them.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ...inference.design_criteria import DesignError
from ...inference.precision import unpack
from ...inference.study import Study
from ...inputs.choices import CARD_SERIES
from ...inputs.recipe import Recipe, totals_M
from ...model.compiled import predict, tube_ions_M
from ..classic.job import EQUIMOLAR_RTOL
from ..classic.mole_ratio import LINE_MARGIN
from ..plan.checks import SATURATION_WINDOW
from ._grid import Grid
from ._lines import Lines, axis_lines, diagonal_lines, draw, ends_between, snap
from ._pooled import student_target_var

__all__ = ["MIN_DISTINCT", "RATIO_SPAN", "Series", "Spread", "spreads", "teaching_candidates"]

MIN_DISTINCT = 5  # distinct compositions on a card: enough points to see a curve [the rule]
RATIO_SPAN = 4.0  # the L/M ratios of a card span at least 4-fold [the rule]
HALF_WINDOW = 0.5 * (SATURATION_WINDOW[1] - SATURATION_WINDOW[0])  # as the saturation check asks
DRAWS_MIN = 16000  # series drawn per class at least …
DRAWS_PER_STUDENT = 200  # … and per student (most draws fail a filter or repeat another)
DRAWS_MAX = 80000
NEAREST = 1.25  # when no card reaches goal_se: the cards within 25 % of the best SE [our choice]
CHUNK = 4096  # cards scored at once (bounds the memory of the information rows)
TIERS = (
    "cover the binding curve at the guess and at log β ± 1 sd",
    "cover the binding curve at the guess and reach it at log β ± 1 sd",
    "cover the binding curve at the guess",
)


@dataclass(frozen=True)
class Series:
    """What a card's tubes vary: its kind, the stock that steps (Job: the metal) and the stock it is read
    against (binding curve, mole ratio: the one held constant; Job: the ligand, whose volume falls)."""

    kind: str
    varied: str
    partner: str


@dataclass(frozen=True)
class Spread:
    """How a card spreads over the binding curve.

    Attributes
    ----------
    distinct : number of distinct compositions.
    ratio_span : largest over smallest L/M ratio of its tubes (inf when a tube lacks M or L).
    saturation : (lowest, highest) saturation of its tubes at log β − 1 sd, at the guess and at + 1 sd
        (the target's prior sd; saturation as in the assessment's tube table).
    """

    distinct: int
    ratio_span: float
    saturation: tuple[tuple[float, float], tuple[float, float], tuple[float, float]]

    def summary(self) -> dict:
        lo, mid, hi = self.saturation
        span = self.ratio_span if np.isfinite(self.ratio_span) else None
        return {
            "distinct_compositions": self.distinct,
            "ratio_span": span,
            "saturation": {"minus_1sd": list(lo), "guess": list(mid), "plus_1sd": list(hi)},
        }


def _state3(study: Study, recipe: Recipe) -> tuple[np.ndarray, np.ndarray]:
    """Saturation (3, T) of every tube at log β − 1 sd, the guess and + 1 sd of the target, and each
    tube's log L/M ratio (T,) (nan where M or L is absent)."""
    model, params = study.model, study.params
    tot = totals_M(recipe, model.stock_conc_M)
    ions = tube_ions_M(model, recipe.volumes_mL, recipe.total_volume_mL)
    th = np.repeat(params.guess[None, :], 3, axis=0)
    t = params.target
    if t >= 0:
        th[:, t] += np.array([-1.0, 0.0, 1.0]) * params.prior_sd[t]
    lb, eps, _ = unpack(model, params, th)
    st = predict(
        model,
        np.broadcast_to(tot, (3,) + tot.shape),
        np.broadcast_to(ions, (3,) + ions.shape),
        log_beta=lb,
        epsilon_M_cm=eps,
        warn=False,
    )
    with np.errstate(divide="ignore", invalid="ignore"):
        lr = np.where((tot[:, 0] > 0) & (tot[:, 1] > 0), np.log(tot[:, 1] / tot[:, 0]), np.nan)
    return st.saturation, lr


def spreads(study: Study, recipes: list[Recipe]) -> list[Spread]:
    """The spread of each card (one prediction for all their tubes)."""
    from ...inputs.recipe import concat_recipes

    big = concat_recipes(recipes, [f"x{i}" for i in range(len(recipes))])
    sat, lr = _state3(study, big)
    out, i = [], 0
    for r in recipes:
        s, v = sat[:, i : i + r.n_tubes], lr[i : i + r.n_tubes]
        i += r.n_tubes
        span = float(np.exp(np.nanmax(v) - np.nanmin(v))) if np.all(np.isfinite(v)) else float("inf")
        ranges = tuple((float(x.min()), float(x.max())) for x in s)
        out.append(Spread(int(np.unique(r.volumes_mL, axis=0).shape[0]), span, ranges))  # type: ignore[arg-type]
    return out


# --------------------------------------------------------------------------------------------------
# drawing the candidate cards of each kind
# --------------------------------------------------------------------------------------------------
def _names(study: Study, grid: Grid) -> tuple[str, ...]:
    """The grid's designed stocks, then the stocks the plan holds at a fixed volume (design.fixed)."""
    return tuple(grid.designed) + tuple(s for s in study.bench.fixed_mL if s not in grid.designed)


def _holding(study: Study, grid: Grid, comp: int, pure: bool = False) -> list[int]:
    """Indices (into :func:`_names`) of the stocks holding component ``comp`` (0 metal, 1 ligand), or
    holding it alone with ``pure``."""
    conc, ids = study.model.stock_conc_M, study.model.stock_ids
    rows = [conc[ids.index(s)] for s in _names(study, grid)]
    return [j for j, r in enumerate(rows) if r[comp] > 0 and not (pure and r[1 - comp] > 0)]


def _draw_binding(study: Study, grid: Grid, n: int, K: int, rng) -> tuple[Lines, np.ndarray, np.ndarray]:
    d = len(grid.designed)
    m_all, l_all = _holding(study, grid, 0), _holding(study, grid, 1)
    varied = sorted(j for j in set(m_all) | set(l_all) if j < d)
    partner = {v: next((w for w in (l_all if v in m_all else m_all) if w != v), v) for v in varied}
    lines = axis_lines(grid, varied, partner, min(MIN_DISTINCT, n), RATIO_SPAN)
    if lines.n_lines == 0:
        raise DesignError(
            "no reagent can be varied 4-fold with every reading inside optics.linear_range: use a "
            "wider linear_range, other stock concentrations or a smaller glassware.min_volume"
        )
    li = rng.integers(0, lines.n_lines, K)
    top = lines.at(li, lines.count[li] - 1)
    lo, hi = ends_between(lines, li, top / RATIO_SPAN, lambda lo: RATIO_SPAN * lo, top, rng, low_bias=True)
    return lines, li, snap(lines, li, draw(lines, lo, hi, n, MIN_DISTINCT, True, rng))


def _complex_ratio(study: Study) -> tuple[float, float]:
    """(L/M ratio, metal mole fraction) of the target complex."""
    model = study.model
    j = model.index(study.target)
    p, q = float(model.stoich[j, 0]), float(model.stoich[j, 1])
    if not model.complex_mask[j]:
        raise DesignError(
            f"design.target '{study.target}' is not a metal–ligand complex: a mole-ratio or Job series "
            f"needs the complex whose ratio it shows"
        )
    return q / p, p / (p + q)


def _pure(study: Study, grid: Grid, comp: int, designed: bool) -> int:
    """The first stock of component ``comp`` alone (a designed one when ``designed``)."""
    for j in _holding(study, grid, comp, pure=True):
        if j < len(grid.designed) or not designed:
            return j
    name = ("metal", "ligand")[comp]
    where = "whose volume varies (not in design.fixed)" if designed else "in the plan"
    raise DesignError(f"a mole-ratio or Job series needs a stock of the {name} alone {where}: add one")


def _conc(study: Study, grid: Grid, j: int, comp: int) -> float:
    return float(study.model.stock_conc_M[study.model.stock_ids.index(_names(study, grid)[j]), comp])


def _draw_mole_ratio(study: Study, grid: Grid, n: int, K: int, rng):
    rho, _ = _complex_ratio(study)
    lg, m = _pure(study, grid, 1, designed=True), _pure(study, grid, 0, designed=False)
    lines = axis_lines(grid, [lg], {lg: m}, min(MIN_DISTINCT, n), RATIO_SPAN)
    if lines.n_lines == 0:
        raise DesignError(
            "no mole-ratio series keeps every reading inside optics.linear_range: use a wider "
            "linear_range or other stock concentrations"
        )
    if m < len(grid.designed):  # the metal level of each line
        held = grid.coords[lines.idx[lines.start], m].astype(float)
    else:  # the plan holds the metal at a fixed volume
        held = np.full(lines.n_lines, study.bench.fixed_mL[_names(study, grid)[m]] / grid.step_mL)
    ref = rho * held * _conc(study, grid, m, 0) / _conc(study, grid, lg, 1)  # ligand level at the ratio
    li = rng.integers(0, lines.n_lines, K)
    r = ref[li]
    lo, hi = ends_between(lines, li, 0.5 * r, lambda lo: np.maximum(RATIO_SPAN * lo, 2.0 * r), 3.0 * r, rng)
    return lines, li, snap(lines, li, draw(lines, lo, hi, n, MIN_DISTINCT, False, rng))


def _draw_job(study: Study, grid: Grid, n: int, K: int, rng):
    m, lg = _pure(study, grid, 0, designed=True), _pure(study, grid, 1, designed=True)
    cm, cl = _conc(study, grid, m, 0), _conc(study, grid, lg, 1)
    if abs(cm / cl - 1.0) > EQUIMOLAR_RTOL:
        raise DesignError(
            f"a Job series needs equimolar stocks, but {grid.designed[m]} holds {cm * 1e3:.4g} mM of metal "
            f"and {grid.designed[lg]} {cl * 1e3:.4g} mM of ligand: make them equal (stock conc) or choose "
            f"another design.card_series"
        )
    lines = diagonal_lines(grid, m, lg, min(MIN_DISTINCT, n))
    if lines.n_lines == 0:
        raise DesignError(
            "no Job series keeps every reading inside optics.linear_range: use a wider linear_range "
            "or more dilute stocks"
        )
    li = rng.integers(0, lines.n_lines, K)
    s = lines.ref[li]
    lo, hi = ends_between(lines, li, 0.25 * s, 0.75 * s, s, rng)
    return lines, li, snap(lines, li, draw(lines, lo, hi, n, MIN_DISTINCT, False, rng))


_DRAW = {"binding-curve": _draw_binding, "mole-ratio": _draw_mole_ratio, "job": _draw_job}


# --------------------------------------------------------------------------------------------------
# filters
# --------------------------------------------------------------------------------------------------
def _unique_sets(cards: np.ndarray, li: np.ndarray):
    """Cards with distinct sets of compositions (first draw kept) and each card's distinct count."""
    cs = np.sort(cards, axis=1)
    rep = np.zeros(cs.shape, dtype=bool)
    rep[:, 1:] = cs[:, 1:] == cs[:, :-1]
    canon = np.sort(np.where(rep, -1, cs), axis=1)
    _, first = np.unique(canon, axis=0, return_index=True)
    first = np.sort(first)
    return cards[first], li[first], (~rep).sum(axis=1)[first]


def _saturation_tiers(sat: np.ndarray) -> np.ndarray:
    """Tier of each card (0 best, len(TIERS) failing) from its saturation (3, K, n) at −1 sd, guess, +1 sd."""
    lo, hi = SATURATION_WINDOW
    inside = ((sat >= lo) & (sat <= hi)).sum(axis=-1)
    wide = (sat.max(axis=-1) - sat.min(axis=-1)) >= HALF_WINDOW - 1e-12
    guess = (inside[1] >= 2) & wide[1]
    reach = (inside[[0, 2]] >= 1).all(axis=0)
    cover = reach & wide[[0, 2]].all(axis=0)
    tier = np.full(sat.shape[1], len(TIERS))
    tier[guess] = 2
    tier[guess & reach] = 1
    tier[guess & cover] = 0
    return tier


def _kind_ok(kind: str, study: Study, lr: np.ndarray, frac_M: np.ndarray) -> np.ndarray:
    """The hand method's own needs: tubes on both sides of the complex's ratio (mole ratio) or mole
    fraction (Job)."""
    rho, x_star = _complex_ratio(study)
    if kind == "mole-ratio":
        r = np.exp(lr)
        return ((r <= (1 - LINE_MARGIN) * rho).sum(axis=1) >= 2) & (
            (r >= (1 + LINE_MARGIN) * rho).sum(axis=1) >= 2
        )
    return ((frac_M < x_star - 1e-9).sum(axis=1) >= 2) & ((frac_M > x_star + 1e-9).sum(axis=1) >= 2)


def _own_se(grid: Grid, cards: np.ndarray, t: int) -> np.ndarray:
    """Cramér–Rao SE of the target at the guess of each card alone (in chunks: memory stays bounded)."""
    out = np.empty(cards.shape[0])
    for a in range(0, cards.shape[0], CHUNK):  # a handful of chunks, each vectorised
        v = student_target_var(grid.rows.take(cards[a : a + CHUNK]), t)
        out[a : a + CHUNK] = np.sqrt(v[grid.guess])
    return out


@dataclass(frozen=True)
class Candidates:
    """Cards that pass the teaching filters, best tier first.

    Attributes
    ----------
    cards : (K, n) feasible grid indices.
    series : (K,) the :class:`Series` of each card.
    tier : (K,) index into ``TIERS`` (binding curves; 0 for the other kinds).
    own_se : (K,) each card's own Cramér–Rao SE at the guess.
    drawn : how many series were drawn.
    note : why the cards fall short of design.goal_se, when none reaches it (None otherwise).
    """

    cards: np.ndarray
    series: tuple[Series, ...]
    tier: np.ndarray
    own_se: np.ndarray
    drawn: int
    note: str | None = None


def teaching_candidates(study: Study, grid: Grid, n: int, students: int, kind: str, rng) -> Candidates:
    """Every distinct teaching card of ``kind`` drawn on the grid that passes the filters (module
    docstring), sorted by tier; the tiers past the first are used only when the first has fewer cards
    than students.

    Raises
    ------
    DesignError
        When no card passes, naming the filter that removed the last ones.
    """
    if kind not in CARD_SERIES:
        raise DesignError(f"card_series = {kind!r}: choose one of {', '.join(CARD_SERIES)}")
    K = int(min(max(DRAWS_MIN, DRAWS_PER_STUDENT * students), DRAWS_MAX))
    lines, li, cards = _DRAW[kind](study, grid, n, K, rng)
    cards, li, distinct = _unique_sets(cards, li)
    funnel = [(f"distinct series of {n} tubes drawn", np.ones(len(cards), dtype=bool))]
    ok, tier, strong = _shape_filters(study, grid, lines, li, cards, distinct, n, kind, funnel)
    cards, li, tier = cards[ok], li[ok], tier[ok]
    if not ok.any():
        _refuse(kind, n, funnel, strong)
    se = _own_se(grid, cards, study.params.target)
    good = se <= study.goal_se
    note = None
    if not good.any():  # the cards are made all the same; each fails its assessment and the key says why
        note = (
            f"no {kind} card of {n} tubes reaches design.goal_se = {study.goal_se:g} (the best gives SE "
            f"{se.min():.3g}): give each student more tubes or relax design.goal_se"
        )
        good = se <= NEAREST * se.min()  # the cards nearest the goal, so each fails by as little as it can
    cards, li, tier, se = cards[good], li[good], tier[good], se[good]
    use = _tiers_needed(tier, students)
    pick = np.flatnonzero(use)[np.argsort(tier[use], kind="stable")]
    names = _names(study, grid)
    series = tuple(Series(kind, names[lines.varied[j]], names[lines.partner[j]]) for j in li[pick])
    return Candidates(cards[pick], series, tier[pick], se[pick], K, note)


def _shape_filters(study, grid, lines, li, cards, distinct, n, kind, funnel):
    """The filters on a card's shape (module docstring), each recorded in ``funnel`` as (what, passes);
    returns (passes, tier, whether most feasible tubes are past the window at the guess)."""
    sat, lr = _state3(study, grid.recipe.take(grid.idx))
    strong = bool(np.median(sat[1]) > SATURATION_WINDOW[1])
    lrc = lr[cards]
    finite = np.all(np.isfinite(lrc), axis=1)
    z = np.where(finite[:, None], lrc, 0.0)
    span = np.where(finite, np.exp(z.max(axis=1) - z.min(axis=1)), 0.0)
    c = grid.coords
    m_ax = lines.varied[li][:, None]
    l_ax = np.minimum(lines.partner[li], c.shape[1] - 1)[:, None]  # Job: both are designed axes
    frac_M = c[cards, m_ax] / np.maximum(c[cards, m_ax] + c[cards, l_ax], 1)
    ok = distinct >= min(MIN_DISTINCT, n)
    funnel.append((f"with at least {min(MIN_DISTINCT, n)} distinct compositions", ok.copy()))
    ok &= span >= RATIO_SPAN * (1 - 1e-9)
    funnel.append((f"with L/M ratios spanning {RATIO_SPAN:g}-fold", ok.copy()))
    if kind != "binding-curve":
        ok &= _kind_ok(kind, study, lrc, frac_M)
        funnel.append((_KIND_NEED[kind], ok.copy()))
        return ok, np.zeros(len(cards), dtype=int), strong
    tier = _saturation_tiers(sat[:, cards])
    ok &= tier < len(TIERS)
    funnel.append(("whose saturation covers the binding curve at the guess", ok.copy()))
    return ok, tier, strong


_KIND_NEED = {
    "mole-ratio": "with two tubes on each side of the complex's ratio",
    "job": "with two tubes on each side of the complex's mole fraction",
}


def _refuse(kind: str, n: int, funnel, strong: bool) -> None:
    """No card passes: say how many passed each filter (and, for a complex too strong to spread over the
    binding curve at these concentrations, what does work)."""
    steps = "; ".join(f"{int(m.sum())} {what}" for what, m in funnel)
    if kind == "binding-curve" and strong and funnel[-1][1].sum() == 0:
        raise DesignError(
            f"no {kind} card of {n} tubes fits the glassware: {steps}. Most tubes the glassware can make "
            f"are more than 80 % saturated at the guess (the complex is strong at these concentrations): "
            f'a mole-ratio series (design.card_series = "mole-ratio") shows its break instead, or make '
            f"the cards for the pooled fit alone"
        )
    raise DesignError(
        f"no {kind} card of {n} tubes fits the glassware: {steps}. Give each student more tubes, widen "
        f"optics.linear_range, choose other stock concentrations or another design.card_series, or make "
        f"the cards for the pooled fit alone"
    )


def _tiers_needed(tier: np.ndarray, students: int) -> np.ndarray:
    """The cards of the best tiers that together hold at least ``students`` cards (all when none do)."""
    for t in range(len(TIERS)):
        if np.count_nonzero(tier <= t) >= students:
            return tier <= t
    return np.ones(tier.size, dtype=bool)
