"""The model check: a design that can catch a wrong model, when that pays, and how often it would.

A target-optimal design puts its tubes at as many compositions as there are fitted parameters, so its
data fit the main model whatever the truth (the misfit of a left-out 1:2 complex is absorbed by the
fitted constant and absorptivity). :func:`guard` looks for the design on the same candidates that
raises the linearised power to detect the plan's alternative models most while its SE of the target
stays within ``1 + check_weight`` times the target-only SE (:mod:`planner.inference.guard`). It then
decides with the exact noncentrality (the main model fitted to each alternative's noise-free readings,
:func:`planner.inference.discrimination.detection_powers`): the guarded design replaces the target-only
one only when it raises the power against some alternative by at least ``MARGIN`` or lifts it to the
power goal. Otherwise the target-only design stands, and the check says how far any design on these
candidates could get and what would reveal the alternative instead (a wider ratio range, the other
reagent in excess, another wavelength, more tubes).

The simulated power (whole experiments, every error source) is computed once, for the design that is
printed, by the design's own assessment.
"""

from __future__ import annotations

import functools
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

from ...inference.discrimination import (
    LEVEL,
    POWER_GOAL,
    Detection,
    critical_chi2,
    detection_powers,
    misfit_rows,
    power_from_noncentrality,
)
from ...inference.guard import guarded_design, tubes_moved
from ...inference.precision import whitening_of
from ...inference.study import Study
from ...inference.tails import ncx2_sf
from ...inputs.recipe import Recipe, totals_M
from ...inputs.text import plural
from ...model.compiled import tube_ions_M
from ...uncertainty.budget import error_budget
from ..compile import expected_state
from .assess import assess_study
from .candidates import Candidates, recipe_from_counts, rows_with_prior

# a guarded design must raise the power against some alternative by 20 points (one experiment in five
# more that reveals it) or lift it to the power goal [our choice, issue 20: a gain worth the change]
MARGIN = 0.20
# beyond 95 % power more noncentrality buys nothing worth precision [our choice: well above the goal, so
# the exact (nonlinear) power still clears the goal when the linearised one is at this level]
POWER_SATURATED = 0.95
SAME_EPSILON = 0.2  # absorptivities per metal within 20 % hide one complex behind the other [derived]


@dataclass(frozen=True)
class GuardOutcome:
    """What the guard found, before the chosen design's power is simulated.

    Attributes
    ----------
    recipe : the chosen recipe (the guarded one when it pays, else the target-only one).
    target_recipe, guarded_recipe : the two candidates (guarded_recipe None when nothing moved).
    replaced : the guarded design replaces the target-only one.
    cost_cap : the SE ratio the plan allows (1 + check_weight).
    se_target_only, se_guarded : Cramér–Rao SE of log β[target] (full budget) of the two designs.
    exact_target_only, exact_guarded : per alternative, the noise-free detection (exact noncentrality).
    best_power, best_cost : per alternative, the power the most discriminating design on these
        candidates reaches (linearised noncentrality) and its SE ratio, at any cost.
    moved : tubes of the guarded design not in the target-only one.
    reason : one sentence: why this design.
    advice : what would reveal each alternative the chosen design cannot.
    """

    recipe: Recipe
    target_recipe: Recipe
    guarded_recipe: Recipe | None
    replaced: bool
    cost_cap: float
    se_target_only: float
    se_guarded: float
    exact_target_only: tuple[Detection, ...]
    exact_guarded: tuple[Detection, ...]
    best_power: tuple[float, ...]
    best_cost: float
    moved: int
    reason: str
    advice: tuple[str, ...] = ()


@dataclass(frozen=True)
class ModelCheck:
    """The model check of a design, as printed.

    Attributes
    ----------
    recipe : the chosen recipe.
    weight : the plan's ``check_weight``; the SE may cost at most ×(1 + weight).
    se_target_only, se_guarded : Cramér–Rao SE of the target's log β (full error budget) of the
        target-only design and of the best guarded design within the cost (equal when none).
    detection : per alternative, (simulated power of the chosen design, exact noise-free power of the
        other one: the target-only design when the guarded one was chosen, else the best guarded one).
    moves : tubes of the chosen design not in the target-only one.
    replaced, reason, advice, best_power, best_cost : see :class:`GuardOutcome`.
    """

    recipe: Recipe
    weight: float
    se_target_only: float
    se_guarded: float
    detection: tuple[tuple[Detection, Detection], ...]
    moves: int
    replaced: bool = False
    reason: str = ""
    advice: tuple[str, ...] = ()
    best_power: tuple[float, ...] = field(default=())
    best_cost: float = float("nan")

    @property
    def cost_cap(self) -> float:
        return 1.0 + self.weight

    @property
    def se_guarded_over_target_only(self) -> float:
        return self.se_guarded / self.se_target_only if self.se_target_only > 0 else float("nan")


def guard(
    study: Study,
    cand: Candidates,
    idx: np.ndarray,
    counts: np.ndarray,
    target_recipe: Recipe,
    *,
    volumetric: bool = True,
    prior: Recipe | None = None,
) -> GuardOutcome:
    """Search the candidates ``idx`` of ``cand`` for a design that reveals the alternatives within the
    plan's SE cost, starting from the target-optimal ``counts``, and decide whether it replaces it."""
    model, params = study.model, study.params
    sub = Candidates(cand.recipe.take(idx), cand.designed_ids, idx.size, cand.step_mL)
    # tubes measured before count towards precision (their misfit is not tracked)
    F, M0, _, _, sd = rows_with_prior(
        study, sub, prior, study.nodes(False), "target", volumetric=volumetric, with_sd=True
    )
    F, sd = F[0, :, 0, :], sd[0]
    if M0 is not None and M0.ndim == 3:
        M0 = M0[0]
    rec = sub.recipe
    tot = totals_M(rec, model.stock_conc_M)
    ions = tube_ions_M(model, rec.volumes_mL, rec.total_volume_mL)
    R = np.stack([misfit_rows(model, params, alt, tot, ions, sd) for _, alt in study.alternatives])
    return decide(
        study,
        (F, R, M0),
        params.target,
        counts,
        target_recipe,
        int(counts.sum()) - params.size,
        to_recipe=lambda c: recipe_from_counts(study, cand, idx, c),
        se_of=lambda r: _se(study, r),
        exact_of=lambda r: _exact(study, r),
        advise=lambda exact, best, cost, cap, n: what_would_reveal(study, exact, best, cost, cap, tot, n),
    )


def decide(
    study: Study,
    rows: tuple[np.ndarray, np.ndarray, np.ndarray | None],
    target: int,
    counts: np.ndarray,
    target_recipe: Recipe,
    dof: int,
    *,
    to_recipe: Callable[[np.ndarray], Recipe],
    se_of: Callable[[Recipe], float],
    exact_of: Callable[[Recipe], tuple[Detection, ...]],
    advise: Callable[..., tuple[str, ...]],
    power_of: Callable[[float], float] | None = None,
) -> GuardOutcome:
    """The guard's search and decision on given rows — (F, R, M0) of
    :func:`planner.inference.guard.guarded_design` on the candidates, ``target`` the index of the target
    parameter among their columns — shared by one wavelength and whole spectra.

    ``dof`` of the χ² test (for the linearised powers), ``to_recipe`` turns tube counts into a recipe,
    ``se_of`` gives its target SE, ``exact_of`` its noise-free detection of every alternative,
    ``advise(exact, best_power, best_cost, cap, n)`` what would reveal the alternatives the chosen design
    cannot, ``power_of(λ)`` the power at the linearised λ (default: the noncentral χ² on ``dof``)."""
    F, R, M0 = rows
    cap = 1.0 + study.check_weight
    n = int(counts.sum())
    lam_cap = noncentrality_for_power(POWER_SATURATED, dof)
    free = guarded_design(F, R, M0, target, counts, np.inf, lam_cap=lam_cap)
    if power_of is None:
        best_power = tuple(float(power_from_noncentrality(lam, dof)) for lam in free.noncentrality)
    else:
        best_power = tuple(power_of(lam) for lam in free.noncentrality)
    se_t = se_of(target_recipe)
    exact_t = exact_of(target_recipe)

    def search(rows):
        g = guarded_design(F, R[rows], M0, target, counts, cap, lam_cap=lam_cap)
        if not g.moves:
            return None
        rec_g = to_recipe(g.counts)
        return rec_g, se_of(rec_g), exact_of(rec_g), tubes_moved(g.counts, counts)

    found = search(np.arange(len(study.alternatives)))
    if found is not None:
        # spend the allowed cost only on the alternatives that pay: refocus on them alone
        paying = [k for k, (g_, t_) in enumerate(zip(found[2], exact_t, strict=True)) if _pays((g_,), (t_,))]
        if 0 < len(paying) < len(study.alternatives):
            focused = search(np.array(paying))
            if focused is not None and _pays(focused[2], exact_t) and focused[1] < found[1]:
                found = focused
    if found is None:
        guarded, se_g, exact_g, moved = None, se_t, exact_t, 0
    else:
        guarded, se_g, exact_g, moved = found
    pays = _pays(exact_g, exact_t)
    within = se_g <= cap * se_t * (1.0 + 1e-9)
    replaced = guarded is not None and pays and within
    reason = _reason(study, replaced, guarded, pays, within, exact_g, exact_t, se_g / se_t, cap, moved, n)
    chosen = guarded if replaced and guarded is not None else target_recipe
    weak_exact = exact_g if replaced else exact_t
    advice = advise(weak_exact, best_power, free.cost, cap, n)
    return GuardOutcome(
        chosen,
        target_recipe,
        guarded,
        replaced,
        cap,
        se_t,
        se_g,
        exact_t,
        exact_g,
        best_power,
        free.cost,
        moved,
        reason,
        advice,
    )


def finish_model_check(
    study: Study, outcome: GuardOutcome, chosen_detection: tuple[Detection, ...]
) -> ModelCheck:
    """The printed model check: the chosen design's simulated power beside the other design's exact one."""
    other = outcome.exact_target_only if outcome.replaced else outcome.exact_guarded
    return ModelCheck(
        outcome.recipe,
        study.check_weight,
        outcome.se_target_only,
        outcome.se_guarded,
        tuple(zip(chosen_detection, other, strict=True)),
        outcome.moved if outcome.replaced else 0,
        outcome.replaced,
        outcome.reason,
        outcome.advice,
        outcome.best_power,
        outcome.best_cost,
    )


@functools.lru_cache(maxsize=64)
def noncentrality_for_power(power: float, dof: int, level: float = LEVEL) -> float:
    """The λ at which the χ² test on ``dof`` degrees of freedom reaches ``power`` (bisection in log λ;
    the power rises monotonically with λ). inf when no test exists (dof < 1)."""
    if dof < 1:
        return float("inf")
    crit = critical_chi2(dof, level)
    lo, hi = 1e-2, 1e3
    for _ in range(40):
        mid = float(np.sqrt(lo * hi))
        if float(ncx2_sf(crit, dof, mid)) >= power:
            hi = mid
        else:
            lo = mid
    return hi


def _se(study: Study, recipe: Recipe) -> float:
    a = assess_study(study, recipe, trials=0, profile_chi2=False, model_check=False)
    return float(a.target_se) if a.target_se is not None else float("nan")


def _exact(study: Study, recipe: Recipe) -> tuple[Detection, ...]:
    """Noise-free detection (exact noncentrality) of every alternative: no simulation."""
    state = expected_state(study.model, recipe)
    W = whitening_of(error_budget(study.bench, study.model, recipe, state))
    return detection_powers(
        study.bench, study.model, study.params, recipe, study.alternatives, np.random.default_rng(0), 0, W=W
    )


def _pays(guarded: tuple[Detection, ...], target_only: tuple[Detection, ...]) -> bool:
    for g, t in zip(guarded, target_only, strict=True):
        pg, pt = g.power_noise_free, t.power_noise_free
        if np.isfinite(pg) and np.isfinite(pt) and (pg - pt >= MARGIN or (pg >= POWER_GOAL > pt)):
            return True
    return False


def _reason(study, replaced, guarded, pays, within, exact_g, exact_t, cost, cap, moved, n) -> str:
    t = study.target
    gains = ", ".join(
        f"{g.alternative} from {t_.power_noise_free:.0%} to {g.power_noise_free:.0%}"
        for g, t_ in zip(exact_g, exact_t, strict=True)
    )
    if replaced:
        return (
            f"the guarded design replaces the target-only one: it raises the power to reveal {gains} at "
            f"×{cost:.3g} in SE(log β[{t}]) (allowed ×{cap:.3g}); {moved} of {plural(n, 'tube')} moved"
        )
    if guarded is None:
        return (
            f"the target-only design stands: no move of a tube on these candidates raises the power to "
            f"reveal a left-out complex within ×{cap:.3g} in SE(log β[{t}])"
        )
    if not within:
        return (
            f"the target-only design stands: the best guarded design would cost ×{cost:.3g} in "
            f"SE(log β[{t}]), more than the ×{cap:.3g} the plan allows (design.check_weight)"
        )
    if all(t_.power_noise_free >= POWER_GOAL for t_ in exact_t):
        said = ", ".join(f"{t_.alternative} ({t_.power_noise_free:.0%})" for t_ in exact_t)
        return f"the target-only design stands: it already reveals {said}"
    return (
        f"the target-only design stands: within ×{cap:.3g} in SE(log β[{t}]) the best guarded design would "
        f"raise the power to reveal {gains} — less than {MARGIN * 100:.0f} points more and short of the "
        f"{POWER_GOAL:.0%} goal"
    )


def what_would_reveal(
    study: Study,
    exact,
    best_power,
    best_cost,
    cap,
    tot,
    n,
    *,
    dof: int | None = None,
    other_ways: Callable[[int, str], list[str]] | None = None,
) -> tuple[str, ...]:
    """For each alternative the chosen design cannot reveal: can any design on these candidates, and if
    not, what would (from the alternative's stoichiometry against the target's and its absorptivity).

    ``dof`` of the χ² test (default: tubes − fitted parameters); ``other_ways(k, name)`` replaces the
    absorptivity rule (another wavelength) by other advice for alternative k (whole spectra)."""
    model, params = study.model, study.params
    dof = n - params.size if dof is None else dof
    j = model.index(study.target)
    pt, qt = int(model.stoich[j, 0]), int(model.stoich[j, 1])
    eps_t = float(model.epsilon_M_cm[2 + j]) / max(pt, 1)
    with np.errstate(divide="ignore", invalid="ignore"):
        lm = tot[:, 1] / tot[:, 0]
    lm = lm[np.isfinite(lm) & (lm > 0)]
    out = []
    for k, ((name, alt), d) in enumerate(zip(study.alternatives, exact, strict=True)):
        p = d.power_noise_free
        if np.isfinite(p) and p >= POWER_GOAL:
            continue
        if dof < 1:
            out.append(
                f"{name}: {plural(n, 'tube')} for {params.size} fitted parameters leave no degree of "
                f"freedom for a χ² test — add tubes"
            )
            continue
        best = best_power[k] if k < len(best_power) else float("nan")
        if best >= POWER_GOAL or best - p >= MARGIN:
            out.append(
                f"{name}: a design on these candidates reaches {best:.0%} at ×{best_cost:.3g} in the SE, "
                f"more than the ×{cap:.3g} allowed — set design.check_weight = {best_cost - 1:.2f} to "
                f"accept it"
            )
            continue
        a_ = alt.index(name)
        pa, qa = int(alt.stoich[a_, 0]), int(alt.stoich[a_, 1])
        ways = []
        if qa * pt > qt * pa:  # richer in ligand than the target
            top = f" (the candidates reach L:M = {lm.max():.3g})" if lm.size else ""
            ways.append(f"the ligand in larger excess{top}: a more concentrated ligand stock or less metal")
        if pa * qt > pt * qa:  # richer in metal
            low = f" (the candidates reach M:L = {1 / lm.min():.3g})" if lm.size else ""
            fixed = [s for s in study.bench.fixed_mL if model.stock_conc_M[model.stock_ids.index(s), 0] > 0]
            free = f"; design.fixed holds {', '.join(fixed)}: let it vary" if fixed else ""
            ways.append(f"the metal in excess{low}{free}")
        eps_a = float(alt.epsilon_M_cm[2 + a_]) / max(pa, 1)
        if other_ways is not None:
            ways.extend(other_ways(k, name))
        elif abs(eps_a - eps_t) <= SAME_EPSILON * max(abs(eps_t), 1e-300):
            ways.append(f"another wavelength, where {name} and {study.target} absorb differently per metal")
        out.append(
            f"{name}: no design of {plural(n, 'tube')} on these candidates reveals it (at best {best:.0%} of "
            f"experiments); what would: " + "; ".join(ways or ["more tubes or a wider range of compositions"])
        )
    return tuple(out)
