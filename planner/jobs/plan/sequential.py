"""The next tubes from the readings so far (``kplan design --after READINGS``).

A first batch is fitted with the plan's model and error budget; what it taught replaces the guess (the
fitted constants and absorptivities become the new guess, their standard errors the new prior sd); the
next tubes are chosen to maximise the information of all readings together — the measured tubes'
information is in hand and the new ones complete it (Bayesian / sequential design, Chaloner & Verdinelli
1995, Stat. Sci. 10:273; the local, adaptive version of Box & Hunter 1965). It stops when more tubes
would not help: the goal is met, or the next batch would lower the SE by less than ``MIN_GAIN`` (the
floor set by errors every tube shares, such as the stock concentrations).
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from ...inference.precision import free_parameters
from ...inference.study import Study
from ...inputs.readings import Readings
from ...inputs.recipe import RecipeError, concat_recipes
from ...inputs.text import plural
from ..measure.fit import Fit, fit_study
from .assess import assess_study
from .design import Design, design_study

MIN_GAIN = 0.05  # a batch that lowers the SE by less than 5 % is not worth making [common practice]


@dataclass(frozen=True)
class NextBatch:
    """What the readings so far say, and the tubes to make next.

    Attributes
    ----------
    fit : the fit of the readings so far.
    study : the plan updated with what was learned (new guess and prior sd).
    design : the next tubes (None when more tubes would not help).
    se_now : SE(log β[target]) from the readings so far.
    se_after : SE expected from all readings after the next batch (NaN without one).
    stop : True when more tubes would not help; ``reason`` says why.
    """

    fit: Fit
    study: Study
    design: Design | None
    se_now: float
    se_after: float
    stop: bool
    reason: str

    def summary(self) -> dict:
        def f(x):
            x = float(x)
            return x if np.isfinite(x) else None

        return {
            "tubes_measured": self.fit.recipe.n_tubes,
            "fitted": [
                {"name": n, "estimate": f(e), "se": f(s)}
                for n, e, s in zip(self.fit.names, self.fit.estimate, self.fit.se, strict=True)
            ],
            "se_now": f(self.se_now),
            "se_after": f(self.se_after),
            "stop": self.stop,
            "reason": self.reason,
        }


def learned_study(study: Study, fit: Fit) -> Study:
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

    The model check is off by default here: the readings in hand test the model directly (the fit's χ²),
    and a small next batch alone cannot.
    """
    fit = fit_study(study, readings)
    t = fit.names.index(f"log_beta[{study.target}]") if f"log_beta[{study.target}]" in fit.names else -1
    if t < 0:
        raise RecipeError(
            "plan", f"log_beta[{study.target}] is held fixed: nothing to learn from the readings"
        )
    se_now = float(fit.se[t])
    if not fit.converged or not np.all(np.isfinite(fit.se)):
        raise RecipeError(
            "readings",
            "the readings so far do not determine the constants (the fit did not "
            "converge or its information is singular): check them with kplan fit before planning more",
        )
    learned = learned_study(study, fit)
    if se_now <= study.goal_se:
        return NextBatch(
            fit,
            learned,
            None,
            se_now,
            float("nan"),
            True,
            f"SE(log β) = {se_now:.3g} already meets the goal {study.goal_se:g}: no more tubes needed",
        )
    d = design_study(
        learned, tubes=tubes, seed=seed, robust=robust, check_model=check_model, prior_tubes=readings.recipe
    )
    both = concat_recipes(
        [readings.recipe, replace(d.recipe, tubes=tuple(f"N{k + 1}" for k in range(d.recipe.n_tubes)))]
    )
    se_after = float(assess_study(learned, both, trials=0, profile_chi2=False, model_check=False).target_se)
    if se_after > (1.0 - MIN_GAIN) * se_now:
        return NextBatch(
            fit,
            learned,
            d,
            se_now,
            se_after,
            True,
            f"the next {plural(d.recipe.n_tubes, 'tube')} would lower SE(log β) only from {se_now:.3g} to "
            f"{se_after:.3g}: more tubes would not help (errors every tube shares, such as the "
            f"stock concentrations, set the floor)",
        )
    reason = (
        f"SE(log β) {se_now:.3g} now, {se_after:.3g} expected after the next "
        f"{plural(d.recipe.n_tubes, 'tube')}"
        + ("" if se_after <= study.goal_se else f" (goal {study.goal_se:g}: plan another batch after)")
    )
    return NextBatch(fit, learned, d, se_now, se_after, False, reason)
