"""The model check: designs that can catch a wrong model, and how often a recipe would.

A target-optimal design puts its tubes at as many compositions as there are fitted parameters, so its
data fit the main model whatever the truth (the misfit of a left-out 1:2 complex is absorbed by the
fitted constant and absorptivity). :func:`guard` moves tubes from the target-optimal exact design to the
compound criterion of :mod:`planner.inference.guard` (precision of the target, weighted by
``1 − check_weight``, against the power to detect each alternative), and reports for each alternative
how often the χ² test would reject the main model (simulated) with and without the guard, and the
precision given up for it.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ...inference.discrimination import POWER_GOAL, Detection, misfit_rows
from ...inference.guard import guarded_design
from ...inference.study import Study
from ...inputs.recipe import Recipe, totals_M
from ...model.compiled import tube_ions_M
from .assess import assess_study
from .candidates import Candidates, recipe_from_counts, rows_with_prior
from .detection import POWER_TRIALS, _f, recipe_detection


@dataclass(frozen=True)
class ModelCheck:
    """The guarded design against the target-only one.

    Attributes
    ----------
    recipe : the guarded recipe.
    weight : the check's weight in the criterion.
    se_target_only, se_guarded : Cramér–Rao SE of the target's log β (full error budget) of each design.
    detection : per alternative, (power of the guarded design, power of the target-only design).
    moves : tubes moved from the target-only design.
    """

    recipe: Recipe
    weight: float
    se_target_only: float
    se_guarded: float
    detection: tuple[tuple[Detection, Detection], ...]
    moves: int

    @property
    def se_guarded_over_target_only(self) -> float:
        return self.se_guarded / self.se_target_only if self.se_target_only > 0 else float("nan")

    def summary(self) -> dict:
        return {
            "weight": self.weight,
            "tubes_moved": self.moves,
            "se_target_only": _f(self.se_target_only),
            "se_guarded": _f(self.se_guarded),
            "se_cost_ratio": _f(self.se_guarded_over_target_only),
            "power_goal": POWER_GOAL,
            "alternatives": [
                {
                    **g.summary(),
                    "power_target_only": _f(t.power),
                    "power_noise_free_target_only": _f(t.power_noise_free),
                }
                for g, t in self.detection
            ],
        }


def guard(
    study: Study,
    cand,
    idx: np.ndarray,
    counts: np.ndarray,
    target_recipe: Recipe,
    *,
    volumetric: bool = True,
    seed: int = 0,
    trials: int = POWER_TRIALS,
    prior: Recipe | None = None,
) -> ModelCheck:
    """Move tubes of the target-optimal design (``counts`` at candidates ``idx`` of ``cand``) to the
    compound criterion, and report what it bought and cost."""
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
    g = guarded_design(F, R, M0, params.target, counts, study.check_weight)
    guarded = recipe_from_counts(study, cand, idx, g.counts) if g.moves else target_recipe
    se_t = assess_study(study, target_recipe, trials=0, profile_chi2=False, model_check=False).target_se
    se_g = assess_study(study, guarded, trials=0, profile_chi2=False, model_check=False).target_se
    det_g = recipe_detection(study, guarded, np.random.default_rng(seed), trials)
    det_t = recipe_detection(study, target_recipe, np.random.default_rng(seed), trials)
    return ModelCheck(
        guarded, study.check_weight, float(se_t), float(se_g), tuple(zip(det_g, det_t, strict=True)), g.moves
    )
