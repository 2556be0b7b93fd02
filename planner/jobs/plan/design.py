"""Design of recipes that maximise the information about K, on the glassware's real volume grid.

The candidate tubes and their information rows come from :mod:`planner.jobs.plan.candidates`. The
"all" (D-optimal) criterion uses the independent errors only, since adding the nuisance factors would
make it a Ds criterion over more parameters; the reported SEs always use the full budget. The exact
design comes from :func:`planner.inference.exchange.exact_design` (Fedorov exchange), the bound from
:func:`planner.inference.approximate.approximate_design` (checked by the equivalence theorem). Robust
designs average the criterion over quadrature nodes of the guesses' uncertainty (Chaloner & Larntz
1989, J. Stat. Plan. Inference 21:191).

The search on the grid itself (the grid never listed whole when it is large) is in
:mod:`planner.jobs.plan.grid_search`; this module asks it for a design within the stocks on hand, guards
it against the plan's alternative models and assesses it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
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
from .candidates import candidate_tubes
from .detection import DESIGN_FIX, POWER_TRIALS
from .even import even_series_for
from .grid_search import solve_on_grid
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
            rec, ex, ap, n_grid, n_feas, coarse, final = solve_on_grid(
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


def _budget_overruns(study: Study, rec: Recipe) -> dict[str, tuple[float, float]]:
    """Stocks whose recipe use exceeds on_hand less rinse and dead volume: id -> (used, usable). The
    diluent fills the rest of each tube and is not capped."""
    return {
        sid: (used, have - (need - used))
        for sid, used, need, have in stock_shortfalls(study.bench, rec)
        if sid != study.bench.diluent_id
    }
