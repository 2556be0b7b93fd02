"""Design of recipes that maximise the information about K, on the glassware's real volume grid.

The candidate tubes and their information rows come from :mod:`planner.jobs.plan.candidates`. The
"all" (D-optimal) criterion uses the independent errors only, since adding the nuisance factors would
make it a Ds criterion over more parameters; the reported SEs always use the full budget. The exact
design comes from :func:`planner.inference.exchange.exact_design` (Fedorov exchange), the bound from
:func:`planner.inference.approximate.approximate_design` (checked by the equivalence theorem). Robust
designs average the criterion over quadrature nodes of the guesses' uncertainty (Chaloner & Larntz
1989, J. Stat. Plan. Inference 21:191).

The grid is never listed whole when it is large: stocks without M or L get one volume in every tube
(:func:`_solve`); two searched stocks go coarse-then-fine; three or more start from sampled tubes and are
refined by coordinate exchange (Meyer & Nachtsheim 1995, Technometrics 37:60; :func:`_solve_sampled`), so
memory stays flat and time grows about linearly with the number of stocks.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from typing import Unpack

import numpy as np

from ...inference import approximate, exchange
from ...inference.design_criteria import CRITERIA, DesignError
from ...inference.study import Study
from ...inputs.limits import MAX_TUBES, check_count
from ...inputs.plan import Plan
from ...inputs.recipe import Recipe
from ...inputs.text import plural
from ..compile import compile_study
from .assess import Assessment, assess_study, stock_shortfalls
from .candidates import (
    MAX_CANDIDATES,
    MAX_SAMPLED,
    Candidates,
    candidate_tubes,
    complete_rows,
    designed_stocks,
    grid_count,
    neighbourhood,
    range_mask,
    recipe_from_counts,
    rows_with_prior,
    sampled_candidates,
    stock_levels,
)
from .detection import DESIGN_FIX, POWER_TRIALS
from .even import even_series_for
from .limits import target_se
from .model_check import finish_model_check, guard
from .options import STUDY_DESIGN_DEFAULTS, DesignOptions, StudyDesignOptions, shows_keywords, with_defaults

__all__ = ["CRITERIA", "Design", "DesignError", "candidate_tubes", "design"]


@dataclass(frozen=True)
class Design:
    """A designed recipe and how good it is.

    Attributes
    ----------
    recipe : the designed tubes.
    criterion, robust, seed : what was optimised.
    n_candidates, n_feasible : candidates on the grid and those inside the linear range robustly.
    exact : the exact design on the candidates (counts).
    approx : the best approximate design (the bound).
    efficiency_bound : lower bound on the exact design's efficiency against the best approximate
        design over all designs on the candidates (exact efficiency × equivalence-theorem bound).
    se_target : SE(log β[target]) of the design at the guess (Cramér–Rao, full error budget).
    se_even : the same for the evenly spaced series of the same size.
    se_across : list of (true log β, SE of design, SE of even series) across the guess's range.
    notes : what the optimiser did that the user should know (coarse search, budget caps...).
    assessment : the assessment of the designed recipe (Cramér–Rao, no Monte Carlo).
    model_check : the model check (:class:`planner.jobs.plan.model_check.ModelCheck`), or None without one.
    verdict, verdict_reason : the assessment's verdict on the design (Cramér–Rao), with, when it misses
        ``goal_se``, by how much and what would reach it.
    limits : what limits the precision and the changes priced (:class:`planner.jobs.plan.limits.Limits`).
    """

    recipe: Recipe
    criterion: str
    robust: bool
    seed: int
    n_candidates: int
    n_feasible: int
    exact: exchange.ExactDesign
    approx: approximate.ApproximateDesign
    efficiency_bound: float
    se_target: float
    se_even: float
    se_across: tuple[tuple[float, float, float], ...]
    target: str
    notes: tuple[str, ...] = field(default=())
    assessment: Assessment | None = field(default=None, repr=False, compare=False)
    model_check: object | None = field(default=None, compare=False)
    verdict: str | None = None
    verdict_reason: str = ""
    limits: object | None = field(default=None, compare=False)

    def __repr__(self) -> str:
        return (
            f"Design({self.recipe.n_tubes} tubes, {self.criterion}, robust={self.robust}, "
            f"SE={self.se_target:.3g} vs even {self.se_even:.3g}, efficiency ≥ {self.efficiency_bound:.3f})"
        )

    @property
    def se_even_over_design(self) -> float:
        return self.se_even / self.se_target if self.se_target > 0 else float("nan")


@shows_keywords(StudyDesignOptions, STUDY_DESIGN_DEFAULTS)
def design(plan: Plan, **options: Unpack[StudyDesignOptions]) -> Design:
    """Choose each tube's volumes to resolve the target constant as precisely as possible.

    The plan is compiled once (:func:`planner.jobs.compile.compile_study`); ``options`` are those of
    :func:`design_study` (``tubes``, ``criterion``, ``robust``, ``seed``, ``volumetric``, ``check_model``,
    …).
    """
    return design_study(compile_study(plan), **options)


@shows_keywords(StudyDesignOptions, STUDY_DESIGN_DEFAULTS)
def design_study(study: Study, **options: Unpack[StudyDesignOptions]) -> Design:
    """Choose each tube's volumes on the compiled plan's grid to resolve the target constant as precisely
    as possible.

    ``options`` (:class:`planner.jobs.plan.options.StudyDesignOptions`, each optional): ``tubes``,
    ``criterion``, ``robust`` (the plan's design keys overridden), ``seed``, ``starts`` and
    ``check_model`` as for every design; ``volumetric`` (False: photometric noise only) and
    ``prior_tubes`` (tubes measured before, whose information the new tubes complete).
    """
    run = with_defaults(options, STUDY_DESIGN_DEFAULTS)
    seed, volumetric, prior_tubes = run["seed"], run["volumetric"], run["prior_tubes"]
    n, crit, rob = design_request(study, run)
    _check_fitted(study, n, crit)
    nodes = study.nodes(rob)
    notes: list[str] = []
    rec, ex, ap, n_grid, n_feas, final = _solve_within_budget(
        study, nodes, crit, n, (seed, volumetric, run["starts"]), prior_tubes, notes
    )
    rec, model_check, a = _guard_and_assess(
        study, rec, final, crit, run["check_model"], volumetric, seed, prior_tubes, notes
    )
    se_d = float(a.target_se) if a.target_se is not None else float("nan")
    # with tubes in hand the new batch is judged together with them (planner.jobs.plan.sequential)
    verdict, reason = _design_verdict(study, a, n) if prior_tubes is None else (None, "")
    return designed(
        study,
        rec,
        (n, crit, rob, seed),
        (n_grid, n_feas, ex, ap),
        a,
        se_d,
        notes,
        model_check=model_check,
        verdict=verdict,
        verdict_reason=reason,
        limits=a.limits if prior_tubes is None else None,
    )


def designed(
    study: Study,
    rec: Recipe,
    asked: tuple[int, str, bool, int],
    found: tuple,
    a: Assessment,
    se_design: float,
    notes: list[str],
    se=None,
    **judged,
) -> Design:
    """The :class:`Design` of ``rec`` beside the even series of as many tubes, at the guess and across its
    range. ``asked`` = (tubes, criterion, robust, seed); ``found`` = (n_candidates, n_feasible, exact,
    approx) from the search; ``se(study, recipe, log_beta)`` one SE (default :func:`target_se`, one
    wavelength); ``judged``: the model check, verdict, verdict_reason and limits."""
    se = target_se if se is None else se
    n, crit, rob, seed = asked
    n_grid, n_feas, ex, ap = found
    even = even_series_for(study, n)
    return Design(
        rec,
        crit,
        rob,
        seed,
        n_grid,
        n_feas,
        ex,
        ap,
        min(float(ex.efficiency) * float(ap.efficiency_lower_bound), 1.0),
        se_design,
        se(study, even),
        se_across_guess(study, rec, even, se=se),
        study.target,
        tuple(notes),
        a,
        **judged,
    )


def design_request(study: Study, run: DesignOptions) -> tuple[int, str, bool]:
    """The number of tubes, the criterion and the robustness asked for (the plan's where ``run`` leaves
    them None), after refusing a number of tubes out of range or an unknown criterion."""
    n = check_count(run["tubes"] or study.tubes, "tubes", MAX_TUBES)
    crit = run["criterion"] or study.criterion
    if crit not in CRITERIA:
        raise DesignError(f"criterion '{crit}': choose one of {', '.join(CRITERIA)}")
    rob = study.robust if run["robust"] is None else bool(run["robust"])
    return n, crit, rob


def _check_fitted(study: Study, n: int, crit: str) -> None:
    """Refuse a design for nothing fitted, for a target held fixed, or with fewer tubes than parameters."""
    params = study.params
    if params.size == 0:
        raise DesignError(
            "nothing is fitted: give the target species log_beta_sd > 0 (and ε an rsd if unknown)"
        )
    if crit == "target" and params.target < 0:
        raise DesignError(
            f"the target {study.target} has log_beta_sd = 0 (held fixed): give it log_beta_sd > 0"
        )
    if n < params.size:
        raise DesignError(
            f"{plural(n, 'tube')} cannot determine the {params.size} fitted parameters "
            f"({', '.join(params.names)}): ask for at least {params.size} tubes"
        )


def _solve_within_budget(study: Study, nodes, crit: str, n: int, search, prior_tubes, notes: list[str]):
    """Solve the design, and again with per-tube caps on each stock whose budget (on hand less rinse and
    dead volume) the design overran, up to four times; notes on the way are appended to ``notes``.
    ``search`` = (seed, volumetric, starts)."""
    seed, volumetric, starts = search
    caps: dict[str, float] = {}
    for _attempt in range(4):
        try:
            rec, ex, ap, n_grid, n_feas, coarse, final = _solve(
                study, nodes, crit, n, seed, caps, volumetric, starts, prior_tubes
            )
        except DesignError as exc:
            if not caps:
                raise
            raise _stock_binds(caps, n, exc) from None
        if coarse:
            notes.append(coarse)
        over = _budget_overruns(study, rec)
        if not over:
            return rec, ex, ap, n_grid, n_feas, final
        for sid, (used, avail) in over.items():
            per_tube = max(avail, 0.0) / n
            caps[sid] = min(caps.get(sid, math.inf), per_tube)
            notes.append(
                f"stock {sid}: the first design used {used:.1f} mL but only {avail:.1f} mL is usable "
                f"(on hand less rinse and dead volume); capped at {per_tube:.2f} mL per tube"
            )
    raise DesignError(
        "the stock budget cannot be met: make more of "
        + ", ".join(_budget_overruns(study, rec))
        + " (on_hand) or use fewer tubes"
    )


def _stock_binds(caps: dict[str, float], n: int, exc: DesignError) -> DesignError:
    """The error when no sound recipe fits under the caps: the stock on hand binds, not the linear range."""
    limits = ", ".join(f"{k} at most {v:.2f} mL per tube" for k, v in caps.items())
    return DesignError(
        f"the stock on hand binds: {limits} (on hand less rinse and dead volume, shared by "
        f"{plural(n, 'tube')}) leaves no sound recipe ({exc}); make more of it (on_hand) or ask for "
        f"fewer tubes"
    )


def _guard_and_assess(study: Study, rec, final, crit, check_model, volumetric, seed, prior, notes):
    """The model check (when the plan asks for it) and the assessment of the recipe it leaves: the
    assessment simulates the detection power of that recipe only, and prices what would help."""
    use_check = study.check_weight > 0 if check_model is None else bool(check_model)
    outcome = None
    if use_check and study.alternatives and crit == "target":
        outcome = guard(study, *final, rec, volumetric=volumetric, prior=prior)
        if outcome.replaced and _budget_overruns(study, outcome.recipe):
            notes.append("the model-check design would overrun a stock on hand: kept the target-only design")
        else:
            rec = outcome.recipe
    a = assess_study(
        study,
        rec,
        trials=0,
        seed=seed,
        detection_trials=POWER_TRIALS if outcome is not None else 0,
        model_check_fix=DESIGN_FIX if outcome is not None else None,
        suggest=prior is None,
    )
    model_check = (
        finish_model_check(study, outcome, a.detection)
        if outcome is not None and rec is outcome.recipe
        else None
    )
    return rec, model_check, a


def se_across_guess(
    study: Study, rec: Recipe, even: Recipe, se=None
) -> tuple[tuple[float, float, float], ...]:
    """SE of the design and of the even series if the target's true log β is the guess ± 1, 2 sd;
    ``se(study, recipe, log_beta)`` gives one SE (default :func:`target_se`, one wavelength)."""
    se = target_se if se is None else se
    model = study.model
    j = model.index(study.target)
    sd = float(model.log_beta_sd[j])
    out = []
    if sd > 0:
        for k in (-2, -1, 0, 1, 2):
            lb = model.log_beta.copy()
            lb[j] = float(model.log_beta[j] + k * sd)
            out.append((float(lb[j]), se(study, rec, lb), se(study, even, lb)))
    return tuple(out)


def _design_verdict(study: Study, a, n: int) -> tuple[str | None, str]:
    """The assessment's verdict; when the SE misses the goal, by how much and what would reach it."""
    if a.verdict is None or a.verdict == "resolved":
        return a.verdict, a.verdict_reason
    se, goal = a.target_se, study.goal_se
    reason = a.verdict_reason
    if se is not None and np.isfinite(se) and se > goal:
        reason += f": the best design of {n} tubes on these candidates misses the goal by ×{se / goal:.3g}"
        lim = a.limits
        reach = lim.reaches_goal if lim is not None else ()
        if reach:
            reason += "; what would reach it: " + "; ".join(f"{c.change} (SE {c.se:.3g})" for c in reach[:3])
        elif lim is not None and lim.best is not None:
            reason += (
                f"; no single change on the list reaches it — the best, {lim.best.change}, gives "
                f"SE {lim.best.se:.3g}: combine changes, or relax design.goal_se"
            )
        else:
            reason += "; no change on the list helps: relax design.goal_se or change the stocks"
    return a.verdict, reason


def _solve(study: Study, nodes, crit, n, seed, caps, volumetric, starts, prior=None):
    """The design on the grid: medium stocks at one volume in every tube, the others tube by tube."""
    chem, medium = designed_stocks(study)
    if not chem:
        raise DesignError(
            "design.fixed fixes every stock that carries M or L: nothing is left to vary; remove one from "
            "fixed"
        )
    if not medium:
        return _solve_tubes(study, nodes, crit, n, seed, caps, volumetric, starts, prior)
    g = study.bench
    fixed = {}
    for m in medium:
        lv = stock_levels(study, m, g.step_mL, caps, allow_zero=False)
        if not lv.size:
            raise DesignError(
                f"stock {m}: no volume of it fits the tube beside the others; fix it in design.fixed"
            )
        fixed[m] = float(lv[0])
    for _ in range(2):  # the chosen volumes rarely move; when they do, design once more around them
        sub = _with_fixed(study, fixed)
        out = _solve_tubes(sub, nodes, crit, n, seed, caps, volumetric, starts, prior)
        best = {
            m: _medium_volume(study, {**fixed}, m, chem, out[0], nodes, crit, volumetric, prior, caps)
            for m in medium
        }
        if best == fixed:
            break
        fixed = best
    vols = ", ".join(f"{m} {v:g} mL" for m, v in fixed.items())
    note = (
        f"stocks without M or L go into every tube at one volume ({vols}): the volume the criterion prefers, "
        f"the smallest where it cannot tell them apart; set design.fixed to choose another"
    )
    rec, ex, ap, n_grid, n_feas, coarse, final = out
    return rec, ex, ap, n_grid, n_feas, "; ".join(x for x in (coarse, note) if x), final


def _with_fixed(study: Study, fixed: dict[str, float]) -> Study:
    """The study with more stocks at one volume in every tube (as design.fixed would put them)."""
    return replace(study, bench=replace(study.bench, fixed_mL={**study.bench.fixed_mL, **fixed}))


def _medium_volume(study, fixed, m, chem, rec, nodes, crit, volumetric, prior, caps) -> float:
    """The volume of medium stock ``m`` in every tube of ``rec`` that the criterion prefers (the others
    held as in ``rec``); ties (a criterion that cannot tell) go to the smallest volume."""
    from ...inference.design_criteria import criterion_of_counts

    g = study.bench
    others = {k: v for k, v in fixed.items() if k != m}
    sub = _with_fixed(study, others)
    lv = stock_levels(sub, m, g.step_mL, caps, allow_zero=False)
    lv = lv[np.unique(np.linspace(0, lv.size - 1, min(lv.size, 40)).round().astype(int))]
    pts = np.column_stack([rec.column(s) for s in chem])
    n, L = pts.shape[0], lv.size
    mesh = np.column_stack([np.tile(pts, (L, 1)), np.repeat(lv, n)])
    room = sub.bench.room_mL - sum(sub.bench.fixed_mL.values())
    fits = mesh.sum(axis=1) <= room + 1e-9
    ok_level = fits.reshape(L, n).all(axis=1)
    if not ok_level.any():
        return fixed[m]
    rows = np.flatnonzero(np.repeat(ok_level, n))
    cand_rec, kept = complete_rows(sub, [*chem, m], mesh[rows], "m")
    got = np.zeros(mesh.shape[0], dtype=bool)
    got[rows[kept]] = True
    ok_level &= got.reshape(L, n).all(axis=1)
    if not ok_level.any():
        return fixed[m]
    cand = Candidates(cand_rec, (*chem, m), cand_rec.n_tubes, g.step_mL)
    F, M0, st, band = rows_with_prior(sub, cand, prior, nodes, crit, volumetric=volumetric)
    inside = np.zeros(mesh.shape[0], dtype=bool)
    inside[rows[kept]] = range_mask(sub.model, st, nodes.weights, band)
    ok_level &= inside.reshape(L, n).all(axis=1)
    pos = np.full(mesh.shape[0], -1)
    pos[rows[kept]] = np.arange(kept.size)
    target = sub.params.target if crit == "target" else None
    values = np.full(L, np.inf)
    for k in np.flatnonzero(ok_level):
        v = criterion_of_counts(
            F[:, pos[k * n : (k + 1) * n]],
            np.ones(n, dtype=int),
            criterion=crit,
            target=target,
            M0=M0,
            node_weights=nodes.weights,
        )
        values[k] = v if crit == "target" else -v  # lower is better for both
    if not np.isfinite(values).any():
        return fixed[m]
    best = np.flatnonzero(values <= values.min() + 1e-9 * max(1.0, abs(values.min())))
    return float(lv[best[0]])


def _solve_tubes(study: Study, nodes, crit, n, seed, caps, volumetric, starts, prior=None):
    """Each tube's volumes: the whole grid when it is small enough to list, a coarse grid refined
    locally for two stocks, a sampled candidate set refined by coordinate exchange for more."""
    g = study.bench
    chem, _ = designed_stocks(study)
    levels = [stock_levels(study, s, g.step_mL, caps) for s in chem]
    count = grid_count(levels, g.room_mL - sum(g.fixed_mL.values()), g.step_mL)
    if count > MAX_CANDIDATES and len(chem) > 2:
        return _solve_sampled(study, nodes, crit, n, seed, caps, volumetric, starts, prior, levels, count)
    coarse_note = ""
    factor = 1
    if count > MAX_CANDIDATES:
        factor = int(math.ceil((count / MAX_CANDIDATES) ** (1.0 / len(chem))))
        cand = candidate_tubes(study, step_mL=g.step_mL * factor, caps_mL=caps)
        coarse_note = (
            f"searched a {g.step_mL * factor:g} mL grid first ({cand.n_grid} candidates), then refined "
            f"on the {g.step_mL:g} mL grid near the chosen tubes"
        )
    else:
        cand = candidate_tubes(study, caps_mL=caps)
    ex, ap, rec, n_feas, support, final = _exact_on(
        study, nodes, crit, n, seed, cand, volumetric, starts, prior
    )
    n_grid = cand.n_grid
    if factor > 1:
        # refine on the fine grid around the chosen tubes, re-centring until the support settles
        base = cand
        for _ in range(3):
            fine = neighbourhood(study, base, support, factor, caps)
            ex, ap, rec, n_feas, new_support, final = _exact_on(
                study, nodes, crit, n, seed, fine, volumetric, starts, prior
            )
            n_grid = fine.n_grid
            moved = not np.array_equal(fine.recipe.volumes_mL[new_support], base.recipe.volumes_mL[support])
            base, support = fine, new_support
            if not moved:
                break
    return rec, ex, ap, n_grid, n_feas, coarse_note, final


# Rounds of the sampled search: each samples the grid anew (MAX_SAMPLED / rounds tubes) and refines its
# design; the rounds start apart, so one that settles in a poor local optimum does not decide alone.
_ROUNDS = 2


def _solve_sampled(study, nodes, crit, n, seed, caps, volumetric, starts, prior, levels, count):
    """Three or more stocks chosen tube by tube, in ``_ROUNDS`` rounds: an exact design on a sample of the
    grid, each tube then refined over each stock's whole grid (coordinate exchange, Meyer & Nachtsheim
    1995); last, one exchange over the samples and the refined tubes together, started from the best
    refined design (so it can only improve on it)."""
    from ...inference.design_criteria import criterion_of_counts

    g = study.bench
    chem, _ = designed_stocks(study)
    target = study.params.target if crit == "target" else None
    # diagonal moves refine locally: 1 to 4 grid steps, then doubling up to the longest grid
    top = max(lv.size for lv in levels)
    steps = np.unique(np.concatenate([np.arange(1, 5), 2 ** np.arange(3, max(int(np.log2(top)) + 1, 3))]))
    shifts = g.step_mL * np.concatenate([-steps[::-1], steps])
    # stocks of the same reagent (M only, L only, or both) at other concentrations stand in for each other
    conc = study.model.stock_conc_M[[study.model.stock_ids.index(s) for s in chem]] > 0
    kinds = [tuple(row) for row in conc]
    groups = [[j for j, kd in enumerate(kinds) if kd == k] for k in sorted(set(kinds))]
    samples, best, best_value, n_sampled = [], None, np.inf, 0
    for r in range(_ROUNDS):
        rng = np.random.default_rng([seed, r])
        cand = sampled_candidates(study, chem, rng, size=MAX_SAMPLED // _ROUNDS, caps_mL=caps)
        n_sampled += cand.n_grid
        *_, (_, idx, counts) = _exact_on(study, nodes, crit, n, seed, cand, volumetric, starts, prior)
        cols = [cand.recipe.stock_ids.index(s) for s in chem]
        chosen = np.flatnonzero(counts)
        start = np.repeat(cand.recipe.volumes_mL[idx[chosen]][:, cols], counts[chosen], axis=0)
        info, M0 = _tube_information(study, chem, nodes, crit, volumetric, prior, start, levels)
        kw = dict(criterion=crit, target=target, M0=M0, node_weights=nodes.weights)
        pts, F_pts = exchange.coordinate_exchange(info, levels, start, shifts=shifts, groups=groups, **kw)
        value = criterion_of_counts(F_pts, np.ones(n, dtype=int), **kw) * (1.0 if crit == "target" else -1.0)
        samples.append(cand.recipe.volumes_mL[:, cols])
        if value < best_value:
            best, best_value = pts, value
    assert best is not None
    # the samples and the best refined tubes together: the last exchange can only improve on them
    sample = np.concatenate(samples)
    union, where = np.unique(np.round(np.concatenate([sample, best]), 10), axis=0, return_inverse=True)
    rec_u, kept = complete_rows(study, chem, union, "s")
    pos = np.full(union.shape[0], -1)
    pos[kept] = np.arange(kept.size)
    initial = np.bincount(pos[where.reshape(-1)[sample.shape[0] :]], minlength=kept.size)
    final_cand = Candidates(rec_u, tuple(chem), rec_u.n_tubes, g.step_mL)
    ex, ap, rec, n_feas, _, final = _exact_on(
        study, nodes, crit, n, seed, final_cand, volumetric, starts, prior, initial=initial
    )
    note = (
        f"the {len(chem)} stocks' grid has {count:.3g} combinations: searched {n_sampled} sampled tubes, "
        f"then refined each tube one stock at a time on the {g.step_mL:g} mL grid (coordinate exchange)"
    )
    return rec, ex, ap, count, n_feas, note, final


def _on_levels(v: np.ndarray, levels: np.ndarray) -> np.ndarray:
    """Which values are one of the (sorted) levels, to rounding."""
    i = np.clip(np.searchsorted(levels, v - 1e-9), 0, levels.size - 1)
    return np.abs(levels[i] - v) <= 1e-9


def _tube_information(study: Study, chem, nodes, crit, volumetric, prior, start, levels):
    """``info(points)`` for :func:`planner.inference.exchange.coordinate_exchange`: the information rows
    of tubes with the given volumes of the stocks ``chem`` (every call with the same nuisance columns),
    and whether each tube can be made and reads inside the linear range; with the prior M0."""
    g = study.bench
    room = g.room_mL - sum(g.fixed_mL.values())
    prior_info: dict = {}

    def info(points):
        points = np.round(points, 10) + 0.0  # shifted volumes back onto the grid's decimals (no −0)
        m = points.shape[0]
        on_grid = np.all([_on_levels(points[:, j], lv) for j, lv in enumerate(levels)], axis=0)
        fits = np.flatnonzero(on_grid & (points.sum(axis=1) <= room + 1e-9))
        try:
            rec, kept = complete_rows(study, chem, points[fits], "x")
        except DesignError:  # none of these tubes can be made (no room, or not levelled)
            G = nodes.theta.shape[0]
            return np.zeros((G, m, 1, prior_info["width"])), np.zeros(m, dtype=bool)
        cand = Candidates(rec, tuple(chem), rec.n_tubes, g.step_mL)
        F, M0, st, band = rows_with_prior(
            study, cand, prior, nodes, crit, volumetric=volumetric, all_nuisance=True
        )
        rows = fits[kept]
        full = np.zeros((F.shape[0], m) + F.shape[2:])
        full[:, rows] = F
        ok = np.zeros(m, dtype=bool)
        ok[rows] = range_mask(study.model, st, nodes.weights, band)
        prior_info["M0"], prior_info["width"] = M0, F.shape[-1]
        return full, ok

    info(start)
    return info, prior_info["M0"]


def _exact_on(study: Study, nodes, crit, n, seed, cand, volumetric, starts, prior=None, initial=None):
    model, params = study.model, study.params
    F, M0, st, band = rows_with_prior(study, cand, prior, nodes, crit, volumetric=volumetric)
    ok = range_mask(model, st, nodes.weights, band)
    if not ok.any():
        lo, hi = model.linear_range
        raise DesignError(
            f"no candidate tube keeps the absorbance inside optics.linear_range [{lo:g}, {hi:g}] over the "
            f"guess's range: use more dilute stocks or a shorter path (if too high), more concentrated "
            f"stocks "
            f"or a longer path (if too low), or widen linear_range"
        )
    idx = np.flatnonzero(ok)
    Fk = F[:, idx]
    target = params.target if crit == "target" else None
    kw = dict(criterion=crit, target=target, M0=M0, node_weights=nodes.weights)
    try:
        ap = approximate.approximate_design(Fk, n_tubes=n, **kw)
        init = None if initial is None else np.asarray(initial)[idx]
        if init is not None and init.sum() != n:  # a refined tube left the linear range: not a start
            init = None
        ex = exchange.exact_design(
            Fk, n, rng=np.random.default_rng(seed), starts=starts, approx=ap, initial=init, **kw
        )
    except DesignError as exc:
        lo, hi = model.linear_range
        raise DesignError(
            f"only {idx.size} of {cand.n_grid} candidate tubes stay inside optics.linear_range [{lo:g}, "
            f"{hi:g}] "
            f"over the guess's range, and they cannot determine every fitted parameter ({exc}). Use more "
            f"dilute stocks or smaller fixed volumes if readings run high, a longer path if they run low, "
            f"or hold more parameters fixed (rsd = 0)"
        ) from None
    out = recipe_from_counts(study, cand, idx, ex.counts)
    return ex, ap, out, int(ok.sum()), idx[np.flatnonzero(ex.counts)], (cand, idx, ex.counts)


def _budget_overruns(study: Study, rec: Recipe) -> dict[str, tuple[float, float]]:
    """Stocks whose recipe use exceeds on_hand less rinse and dead volume: id -> (used, usable). The
    diluent fills the rest of each tube and is not capped."""
    return {
        sid: (used, have - (need - used))
        for sid, used, need, have in stock_shortfalls(study.bench, rec)
        if sid != study.bench.diluent_id
    }
