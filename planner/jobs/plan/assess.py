"""Assessment of a recipe: can it resolve K, and which assumptions of the planned analysis fail?

Puts together the expected tube contents (:mod:`planner.model`), the error budget
(:mod:`planner.uncertainty.budget`), the precision of the fitted parameters
(:mod:`planner.inference.precision`) and the checks (:mod:`planner.jobs.plan.checks`) into a frozen
:class:`Assessment` whose :meth:`Assessment.summary` has the baseline JSON keys (``title``, ``verdict``,
``parameters``, ``tubes``, ``checks``).
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass, field

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
from ...inputs.limits import MAX_TRIALS, check_count
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

STATUSES = ("pass", "warn", "fail")
VERDICTS = ("resolved", "bounded", "unresolved")
DEFAULT_TRIALS = 2000

__all__ = ["Assessment", "Check", "assess", "assess_recipe", "assess_study", "expected_state"]


@dataclass(frozen=True)
class Assessment:
    """A recipe judged against its plan.

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
    detection : per alternative model, how often the recipe's data would reveal it (model check).
    limits : what limits the precision (shares of the target's variance by source, and the changes
        priced when asked for), or None without a precision analysis.
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
    extra: dict = field(default_factory=dict, hash=False)
    study: Study | None = field(default=None, repr=False, compare=False)
    detection: tuple = field(default=(), repr=False, compare=False)
    limits: Limits | None = field(default=None, repr=False, compare=False)

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
    def parameters(self) -> tuple[dict, ...]:
        """Per-parameter entries with the baseline keys (name, guess, se, mc_sd, mc_bias, mc_ci95)."""
        if self.params is None or self.cramer_rao is None:
            return ()
        out = []
        for p, name in enumerate(self.params.names):
            mc = self.mc
            out.append(
                {
                    "name": name,
                    "guess": float(self.params.guess[p]),
                    "true": float(self.true_theta[p]),
                    "se": _f(self.cramer_rao.se[p]),
                    "mc_sd": _f(mc.sd[p]) if mc else None,
                    "mc_bias": _f(mc.bias[p]) if mc else None,
                    "mc_ci95": [_f(mc.ci95[p, 0]), _f(mc.ci95[p, 1])] if mc else None,
                }
            )
        return tuple(out)

    def tube_rows(self) -> list[dict]:
        st, r, m = self.state, self.recipe, self.model
        parts = self.budget.sd_parts() if self.budget is not None else None
        total_sd = np.sqrt(np.diag(self.budget.total)) if self.budget is not None else st.absorbance_sd
        rows = []
        for i, t in enumerate(r.tubes):
            row = {
                "tube": t,
                "volumes_mL": {sid: float(r.volumes_mL[i, j]) for j, sid in enumerate(r.stock_ids)},
                "total_M": {"M": float(st.totals_M[i, 0]), "L": float(st.totals_M[i, 1])},
                "species_M": {
                    "M": float(st.free_M[i]),
                    "L": float(st.free_L[i]),
                    **{s: float(st.species_M[i, k]) for k, s in enumerate(m.species)},
                },
                "absorbance": float(st.absorbance[i]),
                "absorbance_sd": float(total_sd[i]),
                "saturation": float(st.saturation[i]),
                "ionic_strength_M": float(st.ionic_strength_M[i]),
                "in_linear_range": bool(m.linear_range[0] <= st.absorbance[i] <= m.linear_range[1]),
            }
            if parts is not None:
                row["absorbance_sd_parts"] = {k: float(v[i]) for k, v in parts.items()}
            rows.append(row)
        return rows

    def summary(self) -> dict:
        """JSON-safe dict with the baseline keys of the plan format (and a few more)."""
        out = {
            "title": self.title,
            "verdict": self.verdict,
            "verdict_reason": self.verdict_reason,
            "goal_se": self.goal_se,
            "parameters": list(self.parameters),
            "tubes": self.tube_rows(),
            "checks": [c.summary() for c in self.checks],
        }
        if self.cramer_rao is not None and self.params is not None:
            out["correlation"] = {
                "names": list(self.params.names),
                "matrix": [[_f(x) for x in row] for row in self.cramer_rao.corr],
            }
        if self.mc is not None:
            out["monte_carlo"] = {
                "trials": int(self.mc.estimates.shape[0]),
                "failed_fraction": self.mc.failed_fraction,
            }
        if self.profile is not None:
            out["profile"] = {
                "log_beta": [float(x) for x in self.profile.log_beta],
                "delta_chi2": [_f(x) for x in self.profile.delta_chi2],
                "low_unbounded": self.profile.low_unbounded,
                "high_unbounded": self.profile.high_unbounded,
            }
        if self.limits is not None:
            out.update(self.limits.summary())
        out.update(self.extra)
        return out


def _f(x) -> float | None:
    x = float(x)
    return x if np.isfinite(x) else None


def assess_recipe(plan: Plan, recipe: Recipe) -> Assessment:
    """Expected tube contents and the checks, without the precision analysis (fast)."""
    return assess(plan, recipe, trials=0, precision=False)


def assess(
    plan: Plan,
    recipe: Recipe,
    *,
    trials: int = DEFAULT_TRIALS,
    seed: int = 0,
    at: Mapping[str, float] | None = None,
    precision: bool = True,
    progress: Callable[[int, int], None] | None = None,
) -> Assessment:
    """Judge ``recipe``: expected tubes, error budget, precision of log K, checks and verdict.

    Parameters
    ----------
    trials : Monte-Carlo experiments (0: Cramér–Rao only).
    seed : seed of the numpy Generator for the Monte Carlo.
    at : assumed true log β per species name (default: the plan's guesses).
    precision : False skips Fisher information, Monte Carlo and profile.
    progress : callback(done, total) for long Monte-Carlo runs.

    The plan is compiled once (:func:`planner.jobs.compile.compile_study`); see :func:`assess_study`.
    """
    return assess_study(
        compile_study(plan), recipe, trials=trials, seed=seed, at=at, precision=precision, progress=progress
    )


def assess_study(
    study: Study,
    recipe: Recipe,
    *,
    trials: int = DEFAULT_TRIALS,
    seed: int = 0,
    at: Mapping[str, float] | None = None,
    precision: bool = True,
    profile_chi2: bool = True,
    model_check: bool = True,
    detection_trials: int | None = None,
    model_check_fix: str | None = None,
    suggest: bool = False,
    progress: Callable[[int, int], None] | None = None,
) -> Assessment:
    """:func:`assess` on a compiled plan (``profile_chi2=False`` skips the χ² profile and
    ``model_check=False`` the detection power of the plan's alternative models, e.g. for the design's
    comparisons, which use only the Cramér–Rao SE). ``detection_trials`` simulated experiments per
    alternative (default min(trials, 400)); ``model_check_fix`` what the model-check check advises;
    ``suggest`` prices the changes that would improve the precision (:mod:`planner.jobs.plan.limits`)."""
    trials = check_count(trials, "trials", MAX_TRIALS, least=0)
    model, bench = study.model, study.bench
    lb_true = true_constants(model, at)
    state = expected_state(model, recipe, log_beta=lb_true)
    budget = error_budget(bench, model, recipe, state)
    target = study.target
    check_list: list[Check] = []
    params = study.params
    true_theta = pack(model, params, log_beta=lb_true)
    cr = mc = prof = None
    risk = spread = None
    if precision and params.size:
        ions = tube_ions_M(model, recipe.volumes_mL, recipe.total_volume_mL)
        reading = ReadingModel(model, params, state.totals_M, ions)
        J = reading.jac(true_theta[None, :])[0]
        W = whitening_of(budget)  # diagonal + low rank for tubes: never an n × n matrix per trial
        cr = cramer_rao(J, W=W)
        enough = recipe.n_tubes >= params.size
        if trials > 0 and enough:
            mc = monte_carlo(
                bench,
                model,
                recipe,
                reading,
                W,
                np.random.default_rng(seed),
                trials,
                true_theta,
                progress=progress,
            )
        if profile_chi2 and params.target >= 0 and recipe.n_tubes >= params.size - 1 and recipe.n_tubes > 0:
            prof = profile(reading, W, true_theta)
    if params.size and recipe.n_tubes:
        ions_r = tube_ions_M(model, recipe.volumes_mL, recipe.total_volume_mL)
        risk, low, high = chk.range_band(model, params, state.totals_M, ions_r)
        spread = (float(low.min()), float(high.max()))
    check_list.append(chk.linear_range(model, state, recipe.tubes, risk, spread))
    check_list.append(chk.saturation(state, recipe.tubes))
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
    check_list.extend(_stock_and_glassware_checks(bench, recipe))
    if cr is not None:
        check_list.append(_identifiability_check(params, cr, model, state))
    extra = {}
    det: tuple = ()
    if model_check and precision and study.alternatives and params.size and params.target >= 0:
        from .detection import ASSESS_FIX, POWER_TRIALS, model_check_result, recipe_detection

        n_det = min(trials, POWER_TRIALS) if detection_trials is None else int(detection_trials)
        det = recipe_detection(study, recipe, np.random.default_rng(seed + 1), n_det)
        check_list.append(model_check_result(det, model_check_fix or ASSESS_FIX))
        extra["model_check"] = [d.summary() for d in det]
    limits = None
    if cr is not None and params.target >= 0 and study.goal_se is not None:
        se_t = float(cr.se[params.target])
        limits = precision_shares(
            study, recipe, state, budget, cr.jacobian, params, se_t, float(study.goal_se)
        )
        if suggest and limits is not None:
            limits = what_would_help(study, recipe, limits, lb_true)
    verdict, reason = with_failed_checks(*_verdict(study, params, cr, mc, prof, precision), check_list)
    check_list.sort(key=lambda c: -STATUSES.index(c.status))
    return Assessment(
        study.title,
        recipe,
        model,
        state,
        tuple(check_list),
        budget,
        params,
        true_theta,
        cr,
        mc,
        prof,
        verdict,
        reason,
        study.goal_se,
        extra,
        study=study,
        detection=det,
        limits=limits,
    )


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


def _stock_and_glassware_checks(bench: Bench, recipe: Recipe) -> list[Check]:
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


def _verdict(study: Study, params: Parameters, cr, mc, prof, precision: bool) -> tuple[str | None, str]:
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
