"""Assessment of a recipe: can it resolve K, and which assumptions of the planned analysis fail?

Puts together the expected tube contents (:mod:`planner.model`), the error budget
(:mod:`planner.uncertainty.budget`), the precision of the fitted parameters
(:mod:`planner.inference.precision`) and the checks (:mod:`planner.jobs.plan.checks`) into a frozen
:class:`Assessment` (its JSON, with the baseline keys ``title``, ``verdict``, ``parameters``, ``tubes`` and
``checks``, is made by :mod:`planner.paper.json_out`).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Unpack

import numpy as np

from ...inference.precision import (
    MC_AGREEMENT,
    CramerRao,
    MonteCarlo,
    Parameters,
    Profile,
    ReadingModel,
    cramer_rao,
    monte_carlo,
    pack,
    profile,
    whitening_of,
)
from ...inference.study import Study
from ...inputs.plan import Plan
from ...inputs.recipe import Recipe
from ...inputs.text import plural
from ...model.compiled import Model, TubeState, tube_ions_M
from ...uncertainty.bench import Bench
from ...uncertainty.budget import ErrorBudget, error_budget, glassware_problems
from ...uncertainty.stocks import volume_needed_mL
from ..compile import compile_study, expected_state, true_constants
from . import checks as chk
from .checks import Check
from .limits import Limits, precision_shares, what_would_help
from .options import STUDY_ASSESS_DEFAULTS, AssessOptions, StudyAssessOptions, assess_run, shows_keywords

STATUSES = ("pass", "warn", "fail")
VERDICTS = ("resolved", "bounded", "unresolved")
__all__ = ["Assessment", "Check", "ParameterRow", "assess", "assess_recipe", "assess_study", "expected_state"]


@dataclass(frozen=True)
class ParameterRow:
    """One fitted parameter of an assessment.

    Attributes
    ----------
    name : e.g. ``log_beta[ML]``, ``epsilon[ML]``.
    guess, true : the plan's guess and the value assumed true (the guess, or an ``at`` value).
    se : Cramér–Rao SE at the truth (NaN where singular).
    mc_sd, mc_bias, mc_ci95 : the Monte-Carlo sd, bias and 95 % interval of the refitted values (None
        without a Monte Carlo).
    """

    name: str
    guess: float
    true: float
    se: float
    mc_sd: float | None = None
    mc_bias: float | None = None
    mc_ci95: tuple[float, float] | None = None


@dataclass(frozen=True)
class Assessment:
    """A recipe judged against its plan (its JSON: :func:`planner.paper.json_out.assessment_json`).

    Attributes
    ----------
    title : the plan's title.
    recipe : the recipe assessed.
    model : the plan's numerical model.
    state : expected contents and readings of every tube at the assumed truth.
    budget : the error budget (covariance of the readings by source), or None.
    checks : the checks, worst first.
    params : the fitted parameters (names, guesses), or None.
    true_theta : (P,) the values assumed true (the guess, or the ``--at`` values).
    cramer_rao : Fisher information, SE and correlations at the truth, or None.
    mc : Monte-Carlo results, or None when no trials were run.
    profile : χ² profile of the target's log β, or None.
    verdict : "resolved" | "bounded" | "unresolved", or None without a precision analysis.
    verdict_reason : one sentence explaining the verdict.
    goal_se : the plan's goal for SE(log β[target]).
    study : the compiled plan the recipe was judged against.
    detection : per alternative model, how often the recipe's data would reveal it (the model check);
        None when the model check was not run.
    limits : what limits the precision (shares of the target's variance by source, and the changes
        priced when asked for), or None without a precision analysis.
    spectra : with whole spectra, what every wavelength together gives
        (:class:`planner.jobs.spectra.facts.SpectraFacts`), else None.
    """

    title: str
    recipe: Recipe
    model: Model
    state: TubeState
    checks: tuple[Check, ...]
    budget: ErrorBudget | None = None
    params: Parameters | None = None
    true_theta: np.ndarray | None = None
    cramer_rao: CramerRao | None = None
    mc: MonteCarlo | None = None
    profile: Profile | None = None
    verdict: str | None = None
    verdict_reason: str = ""
    goal_se: float | None = None
    study: Study | None = field(default=None, repr=False, compare=False)
    detection: tuple | None = field(default=None, repr=False, compare=False)
    limits: Limits | None = field(default=None, repr=False, compare=False)
    spectra: object | None = field(default=None, repr=False, compare=False)

    def __repr__(self) -> str:
        worst = max((STATUSES.index(c.status) for c in self.checks), default=0)
        return (
            f"Assessment({self.recipe.n_tubes} tubes, verdict={self.verdict}, worst check={STATUSES[worst]})"
        )

    @property
    def target_se(self) -> float | None:
        if self.params is None or self.cramer_rao is None or self.params.target < 0:
            return None
        return float(self.cramer_rao.se[self.params.target])

    @property
    def parameters(self) -> tuple[ParameterRow, ...]:
        """Every fitted parameter: guess, assumed truth, Cramér–Rao SE and the Monte Carlo's figures."""
        if self.params is None or self.cramer_rao is None:
            return ()
        mc = self.mc
        return tuple(
            ParameterRow(
                name,
                float(self.params.guess[p]),
                float(self.true_theta[p]),
                float(self.cramer_rao.se[p]),
                float(mc.sd[p]) if mc else None,
                float(mc.bias[p]) if mc else None,
                (float(mc.ci95[p, 0]), float(mc.ci95[p, 1])) if mc else None,
            )
            for p, name in enumerate(self.params.names)
        )

    @property
    def absorbance_sd(self) -> np.ndarray:
        """(n,) sd of each tube's reading from every error source (the photometer's alone without a
        budget)."""
        if self.budget is not None:
            return np.sqrt(np.diag(self.budget.total))
        return self.state.absorbance_sd

    @property
    def absorbance_sd_parts(self) -> dict[str, np.ndarray] | None:
        """The sd of each tube's reading by source (photometric, delivery, stock, …), or None."""
        return self.budget.sd_parts() if self.budget is not None else None

    @property
    def failed(self) -> tuple[str, ...]:
        """The ids of the failed checks."""
        return tuple(c.id for c in self.checks if c.status == "fail")


def assess_recipe(plan: Plan, recipe: Recipe) -> Assessment:
    """Expected tube contents and the checks, without the precision analysis (fast)."""
    return assess(plan, recipe, trials=0, precision=False)


@shows_keywords(StudyAssessOptions, STUDY_ASSESS_DEFAULTS)
def assess(plan: Plan, recipe: Recipe, **options: Unpack[StudyAssessOptions]) -> Assessment:
    """Judge ``recipe``: expected tubes, error budget, precision of log K, checks and verdict.

    The plan is compiled once (:func:`planner.jobs.compile.compile_study`); ``options`` are those of
    :func:`assess_study` (``trials``, ``seed``, ``at``, ``precision``, ``progress``, …).
    """
    return assess_study(compile_study(plan), recipe, **options)


@shows_keywords(StudyAssessOptions, STUDY_ASSESS_DEFAULTS)
def assess_study(study: Study, recipe: Recipe, **options: Unpack[StudyAssessOptions]) -> Assessment:
    """Judge ``recipe`` against the compiled plan: expected tubes, error budget, precision of log K, checks
    and verdict.

    ``options`` (:class:`planner.jobs.plan.options.StudyAssessOptions`, each optional): ``trials``,
    ``seed``, ``at``, ``profile_chi2``, ``model_check``, ``detection_trials``, ``model_check_fix`` and
    ``progress`` as for every assessment; ``precision`` (False: no Fisher information, Monte Carlo or
    profile), ``suggest`` (price what would help) and ``shares`` (False: no ``limits``).
    """
    run = assess_run(options, STUDY_ASSESS_DEFAULTS)
    trials, seed, precision = run["trials"], run["seed"], run["precision"]
    model, bench = study.model, study.bench
    lb_true = true_constants(model, run["at"])
    state = expected_state(model, recipe, log_beta=lb_true)
    budget = error_budget(bench, model, recipe, state)
    params = study.params
    true_theta = pack(model, params, log_beta=lb_true)
    cr = mc = prof = None
    if precision and params.size:
        cr, mc, prof = _precision(
            study, recipe, state, budget, true_theta, (trials, seed), run["profile_chi2"], run["progress"]
        )
    check_list = _recipe_checks(study, recipe, state)
    if cr is not None:
        check_list.append(_identifiability_check(params, cr, model, state))
    det: tuple | None = None
    if run["model_check"] and precision and study.alternatives and params.size and params.target >= 0:
        det, finding = _detection(study, recipe, seed, detection_count(run), run["model_check_fix"])
        check_list.append(finding)
    limits = None
    if run["shares"] and cr is not None and params.target >= 0 and study.goal_se is not None:
        limits = _limits(study, recipe, state, budget, cr, lb_true, run["suggest"])
    found = (params, true_theta, cr, mc, prof)
    return judged(
        study,
        recipe,
        state,
        check_list,
        found,
        precision=precision,
        budget=budget,
        detection=det,
        limits=limits,
    )


def judged(
    study: Study,
    recipe: Recipe,
    state: TubeState,
    checks: list[Check],
    found: tuple,
    *,
    precision: bool = True,
    budget: ErrorBudget | None = None,
    detection: tuple | None = None,
    limits: Limits | None = None,
    spectra: object | None = None,
) -> Assessment:
    """The assessment once every check is in: the verdict (:func:`precision_verdict`, then
    :func:`with_failed_checks`) and the checks worst first. ``found`` = (params, true_theta, cramer_rao,
    mc, profile); the keywords are the :class:`Assessment`'s fields of the same name."""
    params, true_theta, cr, mc, prof = found
    verdict, reason = with_failed_checks(*precision_verdict(study, params, cr, mc, prof, precision), checks)
    return Assessment(
        study.title,
        recipe,
        study.model,
        state,
        tuple(sorted(checks, key=lambda c: -STATUSES.index(c.status))),
        budget,
        params,
        true_theta,
        cr,
        mc,
        prof,
        verdict,
        reason,
        study.goal_se,
        study=study,
        detection=detection,
        limits=limits,
        spectra=spectra,
    )


def _detection(study: Study, recipe: Recipe, seed: int, n_det: int, fix: str | None):
    """The detection power of the plan's alternative models (``n_det`` simulated experiments per
    alternative), and the model-check check advising ``fix``."""
    from .detection import ASSESS_FIX, model_check_finding, recipe_detection

    det = recipe_detection(study, recipe, np.random.default_rng(seed + 1), n_det)
    return det, model_check_finding(det, fix or ASSESS_FIX)


def detection_count(run: AssessOptions) -> int:
    """Simulated experiments per alternative model: ``detection_trials``, by default
    min(trials, POWER_TRIALS)."""
    from .detection import POWER_TRIALS

    n = run["detection_trials"]
    return min(run["trials"], POWER_TRIALS) if n is None else int(n)


def _limits(study: Study, recipe: Recipe, state, budget, cr, lb_true, suggest: bool) -> Limits | None:
    """What limits the target's precision against the goal, and (``suggest``) what would help."""
    params = study.params
    se_t = float(cr.se[params.target])
    limits = precision_shares(study, recipe, state, budget, cr.jacobian, params, se_t, float(study.goal_se))
    if suggest and limits is not None:
        limits = what_would_help(study, recipe, limits, lb_true)
    return limits


def _precision(study: Study, recipe: Recipe, state, budget, true_theta, runs, profile_chi2: bool, progress):
    """Cramér–Rao, Monte Carlo (``runs`` = (trials, seed); when there are trials and enough tubes) and
    the χ² profile of the target (when asked and the tubes allow) at the true constants."""
    model, bench, params = study.model, study.bench, study.params
    trials, seed = runs
    mc = prof = None
    ions = tube_ions_M(model, recipe.volumes_mL, recipe.total_volume_mL)
    reading = ReadingModel(model, params, state.totals_M, ions)
    J = reading.jac(true_theta[None, :])[0]
    W = whitening_of(budget)  # diagonal + low rank for tubes: never an n × n matrix per trial
    cr = cramer_rao(J, W=W)
    enough = recipe.n_tubes >= params.size
    if trials > 0 and enough:
        rng = np.random.default_rng(seed)
        mc = monte_carlo(bench, model, recipe, reading, W, rng, trials, true_theta, progress=progress)
    if profile_chi2 and params.target >= 0 and recipe.n_tubes >= params.size - 1 and recipe.n_tubes > 0:
        prof = profile(reading, W, true_theta)
    return cr, mc, prof


def _recipe_checks(study: Study, recipe: Recipe, state: TubeState) -> list[Check]:
    """The checks of the recipe itself: linear range (over the guesses' uncertainty), saturation, the
    hand analysis's assumptions, ionic strength, side reactions, stocks and glassware."""
    model, params, target = study.model, study.params, study.target
    risk = spread = None
    if params.size and recipe.n_tubes:
        ions_r = tube_ions_M(model, recipe.volumes_mL, recipe.total_volume_mL)
        risk, low, high = chk.range_band(model, params, state.totals_M, ions_r)
        spread = (float(low.min()), float(high.max()))
    check_list = [
        chk.linear_range(model, state, recipe.tubes, risk, spread),
        chk.saturation(state, recipe.tubes),
    ]
    if model.complex_mask[model.index(target)] and model.complex_mask.sum() == 1:
        # the 'complete conversion' shortcut only makes sense with a single M–L complex
        hand = study.analysis in ("one-to-one", "double-reciprocal")
        check_list.append(chk.conversion(model, state, recipe.tubes, target, hand_analysis=hand))
    if study.analysis == "double-reciprocal":
        check_list.append(chk.double_reciprocal(state, recipe.tubes))
    if study.analysis in ("one-to-one", "double-reciprocal"):
        check_list.append(chk.second_complex(model, state, recipe.tubes, target))
    check_list.append(chk.ionic_strength(state))
    check_list.extend(chk.side_reactions(model, state, recipe.tubes))
    check_list.extend(stock_and_glassware_checks(study.bench, recipe))
    return check_list


def with_failed_checks(verdict: str | None, reason: str, checks) -> tuple[str | None, str]:
    """The verdict once the checks are in: a precise constant from a recipe that breaks an assumption
    (readings outside the linear range, volumes the glassware cannot deliver, not enough stock) is not a
    result to trust, so "resolved" with a failed check becomes "unresolved"; the reason names them."""
    failed = [c.id for c in checks if c.status == "fail"]
    if not failed or verdict is None:
        return verdict, reason
    if verdict == "resolved":
        return "unresolved", f"{reason}, but failed checks: {', '.join(failed)} — fix them and assess again"
    return verdict, f"{reason}; failed checks: {', '.join(failed)}"


def stock_shortfalls(bench: Bench, recipe: Recipe) -> list[tuple[str, float, float, float]]:
    """Stocks whose recipe use plus rinse and dead volume exceeds what is on hand:
    (id, recipe mL, needed mL, on hand mL), in plan order."""
    if (
        bench.titration is not None
    ):  # one titration: the start volume once, the titrant added up to the last point
        used = recipe.volumes_mL.max(axis=0)
        n_del = (used > 0).astype(int)
    else:
        used = recipe.volumes_mL.sum(axis=0)
        n_del = np.count_nonzero(recipe.volumes_mL > 0, axis=0)
    allowance = np.where(n_del > 0, bench.rinse_mL + bench.dead_volume_mL, 0.0)
    need = volume_needed_mL(used, n_del, rinse_mL=0.0, dead_volume_mL=0.0) + allowance
    on_hand = bench.on_hand_mL
    short = np.isfinite(on_hand) & (on_hand < need)
    return [
        (bench.stock_ids[k], float(used[k]), float(need[k]), float(on_hand[k])) for k in np.flatnonzero(short)
    ]


def stock_and_glassware_checks(bench: Bench, recipe: Recipe) -> list[Check]:
    out = []
    short = stock_shortfalls(bench, recipe)
    if short:
        out.append(
            Check(
                "stock-budget",
                "fail",
                "; ".join(
                    f"{sid}: needs {need:.1f} mL (recipe {used:.1f} + rinse and dead volume), "
                    f"{have:g} mL on hand — make more or use less"
                    for sid, used, need, have in short
                ),
            )
        )
    else:
        out.append(
            Check("stock-budget", "pass", "every stock on hand covers the recipe with its rinse allowance")
        )
    probs = glassware_problems(bench, recipe)
    if probs:
        out.append(Check("glassware", "fail", "; ".join(f"{k}: {m}" for k, m in probs)))
    else:
        out.append(
            Check("glassware", "pass", "every volume is on the grid, above the minimum and within its device")
        )
    return out


def _identifiability_check(params: Parameters, cr: CramerRao, model: Model, state: TubeState) -> Check:
    """Person (1965): with K·[L] ≪ 1 in every tube only K·ε is determined — |corr(log K, ε)| → 1."""
    t = params.target
    if t < 0:
        return Check("correlation", "pass", "the target constant is held fixed")
    eps_idx = [p for p in range(params.size) if params.kind[p] == 1]
    if not eps_idx or not np.all(np.isfinite(cr.corr)):
        if not np.all(np.isfinite(cr.se)):
            return Check(
                "correlation",
                "fail",
                "the parameters cannot all be determined from these tubes "
                "(singular information): widen the range of concentrations",
            )
        return Check("correlation", "pass", "no absorptivity is fitted alongside the target")
    r = max(abs(cr.corr[t, p]) for p in eps_idx)
    name = params.names[max(eps_idx, key=lambda p: abs(cr.corr[t, p]))]
    if r < 0.95:
        return Check("correlation", "pass", f"|corr({params.names[t]}, {name})| = {r:.2f}")
    return Check(
        "correlation",
        "warn" if r < 0.995 else "fail",
        f"|corr({params.names[t]}, {name})| = {r:.3f}: the data fix little more than K·ε (Person 1965); "
        f"add tubes nearer saturation (more of the excess reagent)",
    )


def precision_verdict(
    study: Study, params: Parameters, cr, mc, prof, precision: bool
) -> tuple[str | None, str]:
    t = params.target
    if precision and (params.size == 0 or t < 0):
        # nothing the target depends on is fitted: no recipe resolves a constant it does not estimate
        i = study.model.index(study.target)
        return "unresolved", (
            f"log_beta[{study.target}] is held fixed (species[{i}].log_beta_sd = 0), so the readings "
            "would not estimate it: give the guess its uncertainty (log_beta_sd > 0) to assess a recipe "
            "for it"
        )
    if cr is None:
        return None, ""
    if cr.jacobian.shape[0] < params.size:
        return "unresolved", (
            f"{plural(cr.jacobian.shape[0], 'tube')} cannot determine {params.size} fitted parameters: "
            "add tubes"
        )
    goal = study.goal_se
    se = float(cr.se[t])
    if prof is not None and prof.low_unbounded and prof.high_unbounded:
        return "unresolved", "the data cannot tell the constant from either limit (K → 0 or K → ∞)"
    if prof is not None and prof.high_unbounded:
        return "bounded", "only a lower bound: the data cannot tell K from K → ∞ (every tube near saturation)"
    if prof is not None and prof.low_unbounded:
        return "bounded", "only an upper bound: the data cannot tell K from K → 0 (too little complex forms)"
    if not np.isfinite(se):
        return "unresolved", "the information matrix is singular: the parameters are not all identifiable"
    if mc is not None:
        mc_sd = float(mc.sd[t])
        if mc.failed_fraction > 0.05:
            return "unresolved", f"{mc.failed_fraction:.0%} of simulated fits failed"
        if not np.isfinite(mc_sd) or abs(mc_sd / se - 1.0) > MC_AGREEMENT:
            return "unresolved", (
                f"Monte Carlo (sd {mc_sd:.3g}) does not confirm the Cramér–Rao SE {se:.3g} "
                f"within {MC_AGREEMENT:.0%}: the asymptotic SE is not trustworthy here"
            )
    if se <= goal:
        return "resolved", f"SE(log β) = {se:.3g} ≤ goal {goal:g}"
    return "unresolved", f"SE(log β) = {se:.3g} > goal {goal:g}"
