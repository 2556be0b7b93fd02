"""How often a recipe's data would reveal a complex the plan leaves out (the "model-check" check)."""

from __future__ import annotations

import numpy as np

from ...inference.discrimination import POWER_GOAL, Detection, detection_powers
from ...inference.precision import whitening_of
from ...inference.study import Study
from ...inputs.recipe import Recipe
from ...uncertainty.budget import error_budget
from ..compile import expected_state
from .checks import Check

POWER_TRIALS = 400  # simulated experiments per alternative: the power to about ±0.02 [derived: binomial sd]


def _f(x) -> float | None:
    x = float(x)
    return x if np.isfinite(x) else None


ASSESS_FIX = "spread the tubes over more compositions, or let kplan design guard against it"
DESIGN_FIX = "the model check above says how far any design on these candidates gets and what would reveal it"


def model_check_finding(det: tuple[Detection, ...], fix: str = ASSESS_FIX) -> Check:
    """The "model-check" check: would the recipe's data reject the main model if an alternative were true?

    ``fix`` is what to do about a weak check (the design, which already guarded, says something else)."""
    if not det:
        return Check("model-check", "pass", "no alternative model to check against")
    power = [d.power if np.isfinite(d.power) else d.power_noise_free for d in det]
    weak = [(d, p) for d, p in zip(det, power, strict=True) if not p >= POWER_GOAL]
    if not weak:
        return Check(
            "model-check",
            "pass",
            "the data would reveal "
            + ", ".join(f"{d.alternative} ({p:.0%} of experiments)" for d, p in zip(det, power, strict=True)),
        )
    return Check(
        "model-check",
        "warn",
        "if the system also formed a complex the plan leaves out, the fit "
        "would reveal it in only "
        + "; ".join(f"{p:.0%} of experiments ({d.alternative})" for d, p in weak)
        + f" (goal {POWER_GOAL:.0%}): {fix}",
    )


def recipe_detection(
    study: Study, recipe: Recipe, rng: np.random.Generator, trials: int
) -> tuple[Detection, ...]:
    """Detection power of ``recipe`` against each of the study's alternatives (main model at the guess)."""
    model, params = study.model, study.params
    if not study.alternatives or params.size == 0:
        return ()
    state = expected_state(model, recipe)
    W = whitening_of(error_budget(study.bench, model, recipe, state))
    return detection_powers(study.bench, model, params, recipe, study.alternatives, rng, trials, W=W)
