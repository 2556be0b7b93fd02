"""The next tubes from the readings so far (``kplan design --after READINGS``): the experiment continues.

The readings so far are fitted with the plan's prior carried and readings above the linear range used as
censored (:mod:`planner.jobs.plan.sequential_fit`), so there is always an answer; what they taught
replaces the guess (the posterior mode becomes the new guess, its sd the range the next design must be
robust over), and the next tubes are chosen to maximise the information of all readings together — the
measured tubes' information is in hand and the new ones complete it (Bayesian / sequential design,
Chaloner & Verdinelli 1995, Stat. Sci. 10:273; the local, adaptive version of Box & Hunter 1965).

Every number it reports is for all tubes together: the SE now (the posterior sd), the SE expected once
the next tubes are read (the information of every counted tube plus the plan's prior, at what was
learned), the same with an evenly spaced batch instead, and the checks of the whole set. The next tubes
are numbered after the last measured one. It stops when more tubes would not help: the goal is met, or
the next batch would lower the SE by less than ``MIN_GAIN`` (the floor set by errors every tube shares,
such as the stock concentrations).
"""

from __future__ import annotations

import re
from collections import Counter
from dataclasses import dataclass, replace

import numpy as np

from ...inference.precision import ReadingModel, free_parameters
from ...inference.study import Study
from ...inputs.readings import Readings
from ...inputs.recipe import Recipe, RecipeError, concat_recipes
from ...inputs.text import plural
from ...model.compiled import tube_ions_M
from ...uncertainty.budget import error_budget
from ..compile import expected_state
from ..measure.fit import check_absorbances
from .assess import Assessment, assess_study
from .design import Design, design_study
from .even import even_series_for
from .sequential_fit import Posterior, posterior_fit

MIN_GAIN = 0.05  # a batch that lowers the SE by less than 5 % is not worth making [common practice]


@dataclass(frozen=True)
class NextBatch:
    """What the readings so far say, and the tubes to make next.

    Attributes
    ----------
    fit : the posterior fit of the readings so far (the plan's prior carried, censored readings).
    measured : the readings so far.
    study : the plan updated with what was learned (new guess and the range to be robust over).
    design : the design of the next tubes (None when more tubes would not help).
    recipe : the next tubes, numbered after the last measured one (None with no design).
    everything : every tube that counts (measured, not censored) and the next ones, as one recipe.
    assessment : the assessment of ``everything`` at what was learned (its checks are the headline).
    se_now, se_after, se_after_even : SE(log β[target]) now, after the next tubes, and after an evenly
        spaced batch of the same size instead (all tubes together, with the plan's prior).
    stop, reason : whether to stop, and the sentence that says what the readings taught and what to do.
    """

    fit: Posterior
    measured: Readings
    study: Study
    design: Design | None
    recipe: Recipe | None
    everything: Recipe | None
    assessment: Assessment | None
    se_now: float
    se_after: float
    se_after_even: float
    stop: bool
    reason: str

    @property
    def censored(self) -> tuple[str, ...]:
        return tuple(t for t, c in zip(self.measured.recipe.tubes, self.fit.censored, strict=True) if c)

    def summary(self) -> dict:
        def f(x):
            x = float(x)
            return x if np.isfinite(x) else None

        return {
            "tubes_measured": self.measured.recipe.n_tubes,
            "fitted": [
                {"name": n, "estimate": f(e), "se": f(s)}
                for n, e, s in zip(self.fit.names, self.fit.estimate, self.fit.se, strict=True)
            ],
            "se_now": f(self.se_now),
            "se_after": f(self.se_after),
            "se_after_even_batch": f(self.se_after_even),
            "stop": self.stop,
            "reason": self.reason,
            "next_tubes": list(self.recipe.tubes) if self.recipe is not None else [],
            "censored": list(self.censored),
            "prior_carried": True,
        }

    def design_summary(self) -> dict:
        """``design.json`` for the next batch: the assessment of all tubes together, the design's own keys,
        the SEs of all tubes together and the ``sequential`` block."""
        out: dict = dict(self.assessment.summary()) if self.assessment is not None else {}
        if self.design is not None and not self.stop:
            d = self.design.summary()
            for key in ("criterion", "robust", "seed", "target", "efficiency_bound", "exact_efficiency"):
                out[key] = d[key]
            out.update(
                {
                    "candidates": d["candidates"],
                    "candidates_feasible": d["candidates_feasible"],
                    "se_target": self.se_after,
                    "se_even_series": self.se_after_even,
                    "se_ratio_vs_even": self.se_after_even / self.se_after if self.se_after > 0 else None,
                    "notes": d["notes"],
                }
            )
        out["sequential"] = self.summary()
        return out


def learned_study(study: Study, fit) -> Study:
    """``study`` with the fitted values as the new guess and their SEs as the new prior sd."""
    model, params = study.model, study.params
    lb, lb_sd = model.log_beta.copy(), model.log_beta_sd.copy()
    eps, eps_rsd = model.epsilon_M_cm.copy(), model.epsilon_rsd.copy()
    for p in range(params.size):  # a handful of parameters
        est, se = float(fit.estimate[p]), float(fit.se[p])
        if params.kind[p] == 0:
            lb[params.index[p]], lb_sd[params.index[p]] = est, se
        elif params.kind[p] == 1 and est > 0:
            eps[params.index[p]], eps_rsd[params.index[p]] = est, se / est
    new_model = replace(model, log_beta=lb, log_beta_sd=lb_sd, epsilon_M_cm=eps, epsilon_rsd=eps_rsd)
    blank = bool(np.any(params.kind == 2))
    return replace(
        study,
        model=new_model,
        params=free_parameters(new_model, study.target, blank_offset=blank),
        alternatives=tuple(
            (
                n,
                replace(
                    a, log_beta=np.append(lb, a.log_beta[-1]), epsilon_M_cm=np.append(eps, a.epsilon_M_cm[-1])
                ),
            )
            for n, a in study.alternatives
        ),
    )


def next_labels(measured: tuple[str, ...], n: int) -> tuple[str, ...]:
    """``n`` labels numbered after the last measured tube: T1–T4 measured → T5, T6, …"""
    parts = [m.groups() for t in measured if (m := re.fullmatch(r"(.*?)(\d+)", t))]
    prefix = Counter(p for p, _ in parts).most_common(1)[0][0] if parts else "T"
    k = max((int(d) for p, d in parts if p == prefix), default=0) + 1
    taken, out = set(measured), []
    while len(out) < n:
        label = f"{prefix}{k}"
        if label not in taken:
            out.append(label)
        k += 1
    return tuple(out)


def posterior_se(study: Study, recipe: Recipe, prior_sd: np.ndarray) -> float:
    """SE of the target from the information of ``recipe``'s tubes (full error budget, at ``study``'s
    guess) plus a Gaussian prior of sd ``prior_sd`` on every fitted parameter."""
    model, params = study.model, study.params
    state = expected_state(model, recipe)
    ions = tube_ions_M(model, recipe.volumes_mL, recipe.total_volume_mL)
    J = ReadingModel(model, params, state.totals_M, ions).jac(params.guess[None, :])[0]
    cov = error_budget(study.bench, model, recipe, state).total
    F = J.T @ np.linalg.solve(cov, J) + np.diag(1.0 / np.asarray(prior_sd) ** 2)
    return float(np.sqrt(np.linalg.inv(F)[params.target, params.target]))


def _what_was_learned(study: Study, post: Posterior, censored: tuple[str, ...]) -> str:
    t = study.params.target
    j = study.params.index[t]
    words = (
        f"the readings so far put log β({study.target}) at {post.estimate[t]:.2f} ± {post.se[t]:.2g} (the "
        f"plan guessed {study.model.log_beta[j]:.2f} ± {study.model.log_beta_sd[j]:.2g})"
    )
    if censored:
        hi = study.model.linear_range[1]
        words += (
            f"; {plural(len(censored), 'reading')} above the linear range ({', '.join(censored)}) count as "
            f"'at least {hi:.2f}': the complex is stronger, or absorbs more, than the plan guessed"
        )
    return words


def next_batch(
    study: Study,
    readings: Readings,
    *,
    tubes: int | None = None,
    seed: int = 0,
    robust: bool | None = None,
    check_model: bool = False,
) -> NextBatch:
    """Fit the readings so far, update the guess, and design the next ``tubes`` (default the plan's).

    The model check is off by default here: the readings in hand test the model directly, and a small
    next batch alone cannot.
    """
    params = study.params
    if params.target < 0:
        raise RecipeError(
            "plan", f"log_beta[{study.target}] is held fixed: nothing to learn from the readings"
        )
    check_absorbances(readings.absorbance, readings.recipe.tubes, "readings")
    post = posterior_fit(study, readings)
    learned = learned_study(study, post)
    t = params.target
    se_now = float(post.se[t])
    counted = readings.recipe.take(~post.censored)
    cens = tuple(tb for tb, c in zip(readings.recipe.tubes, post.censored, strict=True) if c)
    learned_text = _what_was_learned(study, post, cens)
    nan = float("nan")
    if se_now <= study.goal_se:
        reason = (
            f"{learned_text}; SE {se_now:.3g} already meets the goal {study.goal_se:g}: no more tubes needed"
        )
        return NextBatch(post, readings, learned, None, None, None, None, se_now, nan, nan, True, reason)
    prior = counted if counted.n_tubes else None
    d = design_study(
        learned, tubes=tubes, seed=seed, robust=robust, check_model=check_model, prior_tubes=prior
    )
    labels = next_labels(readings.recipe.tubes, d.recipe.n_tubes)
    new = replace(d.recipe, tubes=labels)
    everything = concat_recipes([counted, new]) if counted.n_tubes else new
    even = replace(even_series_for(learned, new.n_tubes), tubes=labels)
    with_even = concat_recipes([counted, even]) if counted.n_tubes else even
    se_after = posterior_se(learned, everything, params.prior_sd)
    se_even = posterior_se(learned, with_even, params.prior_sd)
    a = assess_study(learned, everything, trials=0, profile_chi2=False, model_check=False)
    stop = se_after > (1.0 - MIN_GAIN) * se_now
    if stop:
        reason = (
            f"{learned_text}; the next {plural(new.n_tubes, 'tube')} would lower SE(log β) only from "
            f"{se_now:.3g} to "
            f"{se_after:.3g}: more tubes would not help (errors every tube shares, such as the stock "
            f"concentrations, set the floor)"
        )
    else:
        reason = (
            f"{learned_text}; SE {se_now:.3g} now, {se_after:.3g} expected with {', '.join(labels[:1])}–"
            f"{labels[-1]} read as well"
            + ("" if se_after <= study.goal_se else f" (goal {study.goal_se:g}: plan another batch after)")
        )
    return NextBatch(post, readings, learned, d, new, everything, a, se_now, se_after, se_even, stop, reason)
