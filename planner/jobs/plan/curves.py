"""What the report's figures show, computed from the compiled plan: the smooth binding curve with the
tubes on it, and the Cramér–Rao SE of the target over the guess's range. :mod:`planner.paper.figures`
only draws them.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ...inference.precision import ReadingModel, cramer_rao, pack, unpack
from ...inference.study import Study
from ...inputs.recipe import Recipe
from ...model.compiled import predict, saturation, tube_ions_M
from ...uncertainty.budget import error_budget
from ..compile import expected_state, true_constants
from .assess import Assessment

__all__ = [
    "SAME_CURVE",
    "BindingCurve",
    "CurveLine",
    "SeScan",
    "binding_curve_data",
    "cramer_rao_se",
    "se_scan_data",
]


@dataclass(frozen=True)
class CurveLine:
    """One smooth binding curve: saturation of ``limiting`` against the free excess reagent.

    Attributes
    ----------
    limiting : "M" or "L", the component whose fraction bound is drawn.
    totals_M : the limiting totals (mol/L) of the tubes this curve stands for; the curve is computed at
        the first, and the others' curves coincide with it within :data:`SAME_CURVE` (merged).
    free_excess_M, saturation : (N,) the curve.
    """

    limiting: str
    totals_M: tuple[float, ...]
    free_excess_M: np.ndarray
    saturation: np.ndarray


@dataclass(frozen=True)
class BindingCurve:
    """Saturation (fraction of the limiting reagent bound) against the free reagent in excess.

    The saturation is :func:`planner.model.compiled.saturation`, the number in the tube tables and the
    saturation check, so every tube sits on its own curve.

    Attributes
    ----------
    lines : one curve per (limiting component, distinct limiting total), coinciding ones merged.
    tube_limiting : (n,) "M" or "L" per tube.
    tube_free_excess_M, tube_saturation : (n,) each tube (from the assessment's tube rows).
    tubes : tube labels.
    replicates : tube labels grouped by identical composition (each group is one point).
    """

    lines: tuple[CurveLine, ...]
    tube_limiting: tuple[str, ...]
    tube_free_excess_M: np.ndarray
    tube_saturation: np.ndarray
    tubes: tuple[str, ...]
    replicates: tuple[tuple[str, ...], ...]


SAME_CURVE = 0.01
"""Curves whose saturations differ by less than this everywhere are drawn as one (for a 1:1 complex
the saturation against the free excess reagent does not depend on the limiting total at all)."""


def binding_curve_data(study: Study, a: Assessment, *, n_points: int = 240) -> BindingCurve:
    """Speciate, for each distinct limiting total of the assessed recipe, a log-spaced series of excess
    totals.

    The constants are the ones the assessment assumed true (``a.true_theta``: the guess, or its ``at``
    values); the other ions are the average of the tubes of that curve, so activity corrections match
    theirs. Each curve is the binding isotherm of the limiting reagent [source: Weber 1975, Adv. Protein
    Chem. 29:1, for the 0.2–0.8 window drawn with it].
    """
    model = study.model
    recipe = a.recipe
    lb = true_log_beta(model, a)
    st_a = a.state
    n = recipe.n_tubes
    tot = np.asarray(st_a.totals_M, dtype=float).reshape(n, 2)
    free = np.stack([st_a.free_M, st_a.free_L], axis=-1).reshape(n, 2)
    lim = np.where(tot[:, 0] <= tot[:, 1], 0, 1)  # the same rule as saturation()
    ions_all = tube_ions_M(model, recipe.volumes_mL, recipe.total_volume_mL)
    lines: list[CurveLine] = []
    groups: dict[tuple[int, float], list[int]] = {}
    for i in range(n):  # a handful of tubes
        if np.all(tot[i] > 0):
            groups.setdefault((int(lim[i]), float(f"{tot[i, lim[i]]:.4g}")), []).append(i)
    for (c, total), idx in sorted(groups.items()):
        e = 1 - c
        ex = tot[idx, e]
        series = np.geomspace(max(float(ex.min()), total) / 30, float(ex.max()) * 30, n_points)
        totals = np.empty((n_points, 2))
        totals[:, c], totals[:, e] = total, series
        ions = ions_all[idx].mean(axis=0)
        st = predict(model, totals, np.broadcast_to(ions, (n_points, ions.size)), log_beta=lb, warn=False)
        sat = saturation(model, totals, st.species_M, of="ML"[c])
        x = st.free_L if e == 1 else st.free_M
        same = next(
            (k for k, ln in enumerate(lines) if ln.limiting == "ML"[c] and _coincide(ln, x, sat)), None
        )
        if same is None:
            lines.append(CurveLine("ML"[c], (total,), x, sat))
        else:  # one curve drawn over the union of both ranges
            ln = lines[same]
            xs = np.concatenate([ln.free_excess_M, x])
            order = np.argsort(xs, kind="stable")
            lines[same] = CurveLine(
                ln.limiting, (*ln.totals_M, total), xs[order], np.concatenate([ln.saturation, sat])[order]
            )
    reps: dict[tuple, list[str]] = {}
    for i, t in enumerate(recipe.tubes):
        reps.setdefault(tuple(np.round(recipe.volumes_mL[i], 9)), []).append(t)
    return BindingCurve(
        tuple(lines),
        tuple("ML"[c] for c in lim),
        free[np.arange(n), 1 - lim],
        np.asarray(st_a.saturation, dtype=float),
        tuple(recipe.tubes),
        tuple(tuple(g) for g in reps.values()),
    )


def true_log_beta(model, a: Assessment) -> np.ndarray:
    """The model's log β with every constant the assessment fitted at the value it assumed true."""
    if a.params is None or a.true_theta is None:
        return model.log_beta.copy()
    return unpack(model, a.params, a.true_theta)[0]


def _coincide(line: CurveLine, x: np.ndarray, sat: np.ndarray) -> bool:
    """True when (x, sat) follows ``line`` within :data:`SAME_CURVE` where their free ranges overlap."""
    ok = (x > 0) & (x >= line.free_excess_M[line.free_excess_M > 0].min()) & (x <= line.free_excess_M.max())
    if ok.sum() < 2:
        return False
    ref = np.interp(np.log(x[ok]), np.log(line.free_excess_M), line.saturation)
    return bool(np.max(np.abs(ref - sat[ok])) < SAME_CURVE)


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
    return SeScan(
        target,
        values,
        cramer_rao_se(study, recipe, [{target: float(v)} for v in values]),
        guess,
        study.goal_se,
    )


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
