"""What the report's figures show, computed from the compiled plan: the smooth binding curve with the
tubes on it, and the Cramér–Rao SE of the target over the guess's range. :mod:`planner.paper.figures`
only draws them.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np

from ..inference.precision import ReadingModel, cramer_rao, pack
from ..inference.study import Study
from ..inputs.recipe import Recipe, totals_M
from ..model.compiled import predict, tube_ions_M
from ..uncertainty.budget import error_budget
from .assess import expected_state, true_constants

__all__ = ["BindingCurve", "SeScan", "binding_curve_data", "cramer_rao_se", "se_scan_data"]


@dataclass(frozen=True)
class BindingCurve:
    """Fraction of the metal bound in complexes against free ligand, smooth and at the tubes.

    Attributes
    ----------
    metal_total_M : metal total the curve is computed at (the recipe's; the median if it varies), mol/L.
    free_L_M, fraction_bound : (N,) the smooth curve.
    tube_free_L_M, tube_fraction : (n,) each tube (from the assessment's tube rows).
    tubes : tube labels.
    """

    metal_total_M: float
    free_L_M: np.ndarray
    fraction_bound: np.ndarray
    tube_free_L_M: np.ndarray
    tube_fraction: np.ndarray
    tubes: tuple[str, ...]


def binding_curve_data(study: Study, recipe: Recipe, summary: dict, *, n_points: int = 240) -> BindingCurve:
    """Speciate a fine log-spaced series of ligand totals at the recipe's metal total.

    The constants are the ones the assessment assumed true (its parameters' "true" values); the
    other ions are the tubes' average, so activity corrections match the tubes'. The curve is the
    classical binding isotherm, fraction of metal in M–L complexes against free ligand [source:
    Weber 1975, Adv. Protein Chem. 29:1, for the 0.2–0.8 window drawn with it].
    """
    model = study.model
    lb = model.log_beta.copy()
    for p in summary.get("parameters", []):
        m = re.fullmatch(r"log_beta\[(.+)\]", p["name"])
        if m and m.group(1) in model.species:
            lb[model.index(m.group(1))] = p["true"]
    tot = totals_M(recipe, model.stock_conc_M)
    M0 = float(np.median(tot[:, 0][tot[:, 0] > 0])) if np.any(tot[:, 0] > 0) else 0.0
    L_pos = tot[:, 1][tot[:, 1] > 0]
    lo, hi = (float(L_pos.min()) / 20, float(L_pos.max()) * 20) if L_pos.size else (1e-7, 1e-1)
    L_series = np.geomspace(lo, hi, n_points)
    ions = tube_ions_M(model, recipe.volumes_mL, recipe.total_volume_mL).mean(axis=0)
    totals = np.column_stack([np.full(n_points, M0), L_series])
    st = predict(model, totals, np.broadcast_to(ions, (n_points, ions.size)), log_beta=lb, warn=False)
    mask = model.complex_mask
    p_metal = model.stoich[mask, 0]

    def frac(species_M, metal_M):
        bound = np.sum(species_M[..., mask] * p_metal, axis=-1)
        return np.divide(bound, metal_M, out=np.zeros_like(bound), where=metal_M > 0)

    rows = summary["tubes"]
    sp_names = [s for s in model.species]
    tube_sp = np.array([[t["species_M"][s] for s in sp_names] for t in rows], dtype=float)
    tube_M = np.array([t["total_M"]["M"] for t in rows], dtype=float)
    tube_L = np.array([t["species_M"]["L"] for t in rows], dtype=float)
    return BindingCurve(M0, st.free_L, frac(st.species_M, np.full(n_points, M0)), tube_L,
                        frac(tube_sp.reshape(len(rows), len(sp_names)), tube_M),
                        tuple(t["tube"] for t in rows))


@dataclass(frozen=True)
class SeScan:
    """Cramér–Rao SE of the target's log β at several assumed true values.

    Attributes
    ----------
    target : species name.
    log_beta : (m,) assumed true values (the guess ± 2 log_beta_sd).
    se : (m,) SE(log β) of the recipe at each (NaN where singular).
    guess, goal_se : the plan's guess and goal.
    """

    target: str
    log_beta: np.ndarray
    se: np.ndarray
    guess: float
    goal_se: float


def se_scan_data(study: Study, recipe: Recipe, *, n_values: int = 9, width_sd: float = 2.0) -> SeScan | None:
    """Cramér–Rao SE of the target over the guess's range (guess ± ``width_sd`` log_beta_sd).

    Each value is what ``assess(plan, recipe, trials=0, at={target: v}).target_se`` returns (a test
    holds the two equal); the χ² profile that ``assess`` also computes, and which costs ~99 % of its
    time, is skipped, and the Jacobians of all values are computed in one batch.
    Returns None when the target is held fixed (log_beta_sd = 0): there is nothing to scan.
    """
    target = study.target
    j = study.model.index(target)
    guess, sd = float(study.model.log_beta[j]), float(study.model.log_beta_sd[j])
    if not sd > 0:
        return None
    values = guess + np.linspace(-width_sd, width_sd, n_values) * sd
    return SeScan(target, values, cramer_rao_se(study, recipe, [{target: float(v)} for v in values]),
                  guess, study.goal_se)


def cramer_rao_se(study: Study, recipe: Recipe, truths) -> np.ndarray:
    """SE of the target's log β at each ``at``-mapping of ``truths``, along the path of ``assess``.

    The Fisher information F = Jᵀ Σ⁻¹ J uses the error budget at each assumed truth; SE = √(F⁻¹)_tt
    [source: Cramér 1946; Rao 1945]. NaN where the information is singular or the target is fixed.
    """
    model, params, bench = study.model, study.params, study.bench
    ions = tube_ions_M(model, recipe.volumes_mL, recipe.total_volume_mL)
    thetas, covs, state = [], [], None
    for at in truths:  # a handful of assumed truths, not tubes or trials
        lb = true_constants(model, at)
        state = expected_state(model, recipe, log_beta=lb)
        covs.append(error_budget(bench, model, recipe, state).total)
        thetas.append(pack(model, params, log_beta=lb))
    t = params.target
    if state is None or t < 0 or not params.size:
        return np.full(len(thetas), np.nan)
    J = ReadingModel(model, params, state.totals_M, ions).jac(np.array(thetas))
    se = np.array([cramer_rao(J[k], covs[k]).se[t] for k in range(len(thetas))], dtype=float)
    return np.where(np.isfinite(se), se, np.nan)
