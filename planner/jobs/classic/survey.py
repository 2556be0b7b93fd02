"""The wavelength survey: at which wavelength do the planned tubes say most about the target constant?

Every absorber's ε(λ) comes from its Gaussian band in ``[optics.bands]`` (FWHM form, the instrument's
bandwidth folded in as in :func:`planner.model.optics.bandwidth_factor`). At each wavelength of a grid
over the bands the tubes' readings, their derivatives and the whole error budget (photometric noise at
that reading, deliveries, stocks) are recomputed — all wavelengths at once — and the Cramér–Rao SE of
log β[target] follows from F = Jᵀ Σ⁻¹ J with the same free parameters as ``kplan assess`` (a fitted ε
stays fitted at every wavelength, a known one stays known). Free metal and ligand absorbance enter
through the readings (they add noise and no information), and a wavelength whose readings leave the
linear range is not recommended: so the answer is not simply the complex's band maximum.

Reference: Cramér 1946 / Rao 1945 for the bound; the Gaussian band shape and the bandwidth factor are
derived in planner.model.optics.
"""

from __future__ import annotations

import numpy as np

from ._deps import (
    RANGE_RISK,
    Check,
    Epsilon,
    Plan,
    PlanError,
    Recipe,
    absorbance_derivatives,
    assess_tubes,
    bandwidth_factor,
    error_factors,
    even_series,
    expected_state,
    free_parameters,
    parameter_jacobian,
    plan_devices,
    plan_model,
    range_band,
    totals_M,
    tube_ions_M,
)
from .common import (
    ClassicSeries,
    finish,
    hypothetical,
)

METHOD = "survey"
STEP_NM = 1.0
SPAN_FWHM = 1.5  # the grid reaches 1.5 FWHM beyond the outermost band peaks
QUESTION = "at which wavelength do these tubes carry the most information about the target constant?"


def band_epsilon(wavelength_nm: np.ndarray, peak_nm: float, fwhm_nm: float, epsilon_max: float) -> np.ndarray:
    """ε(λ) of a Gaussian band, FWHM form, vectorised over λ."""
    sigma = fwhm_nm / (2.0 * np.sqrt(2.0 * np.log(2.0)))
    return epsilon_max * np.exp(-0.5 * ((np.asarray(wavelength_nm, dtype=float) - peak_nm) / sigma) ** 2)


def wavelength_survey(plan: Plan, recipe: Recipe | None = None) -> ClassicSeries:
    """Survey the bands for the wavelength where SE(log β[target]) of ``recipe`` is smallest.

    Parameters
    ----------
    recipe : the tubes to survey for (default: the classic even series of :func:`even_series`).
    """
    bands = plan.optics.bands
    if not bands:
        t = plan.target
        raise PlanError(
            "optics.bands",
            f"the wavelength survey needs a Gaussian band per absorbing species: add "
            f"[optics.bands] with e.g. {t} = {{ peak_nm = 600, fwhm_nm = 120, epsilon_max = 950 }}",
        )
    model = plan_model(plan)
    recipe = recipe if recipe is not None else even_series(plan)
    lam = _grid(plan)
    eps = _epsilon_by_wavelength(plan, model, lam)  # (Λ, 2 + S)
    se, a_max, a_min = _se_by_wavelength(plan, model, recipe, eps)
    lo, hi = model.linear_range
    feasible = np.isfinite(se) & (_range_risk(plan, model, recipe, eps, a_max, a_min) <= RANGE_RISK + 1e-12)
    t = plan.target
    k = _best_index(se, feasible)
    best = float(lam[k])
    here = _se_at(plan, model, recipe, float(plan.optics.wavelength_nm))
    peak_nm = float(bands[t].peak_nm) if t in bands else None

    surveyed = _plan_at(plan, model, best, eps[k])
    a = assess_tubes(surveyed, recipe)
    checks = [_wavelength_check(feasible, best, se[k], here, plan, t, peak_nm), _bands_check(plan, model)]
    extra = {
        "target": t,
        "wavelength_nm": best,
        "se_at_wavelength": float(se[k]),
        "plan_wavelength_nm": float(plan.optics.wavelength_nm),
        "se_at_plan_wavelength": here,
        "target_band_peak_nm": peak_nm,
        "se_by_wavelength": _se_rows(lam, se, a_max, a_min, feasible),
        "epsilon_at_wavelength": {n: float(e) for n, e in zip(model.absorbers, eps[k], strict=True) if e > 0},
    }
    notes = [
        f"recommended wavelength {best:g} nm: SE(log β[{t}]) = {se[k]:.3g} for these {recipe.n_tubes} tubes "
        f"(at the plan's {plan.optics.wavelength_nm:g} nm: {_num(here)})",
        f"readings there {a_min[k]:.3f}–{a_max[k]:.3f}; "
        + (f"the {t} band peaks at {peak_nm:g} nm" if peak_nm is not None else f"{t} has no band"),
        "SE by wavelength (readings in range): " + _se_line(lam, se, feasible),
        f"set optics.wavelength_nm = {best:g} and the ε guesses at that wavelength in the plan",
    ]
    ok = f"{best:g} nm gives SE(log β[{t}]) = {se[k]:.3g} with every reading inside {lo:g}–{hi:g}"
    fix = "survey other tubes (a recipe from kplan design), or change the path length"
    return finish(
        METHOD, surveyed, QUESTION, recipe, a, checks, extra, {}, ok, notes=tuple(notes), range_fix=fix
    )


def _range_risk(plan: Plan, model, recipe: Recipe, eps: np.ndarray, a_max, a_min) -> np.ndarray:
    """Per wavelength, the risk that a reading leaves the linear range over the guesses' uncertainty (by
    assess's own screen; 0 or 1 from the readings at the guess when nothing is free)."""
    lo, hi = model.linear_range
    tot = totals_M(recipe, model.stock_conc_M)
    ions = tube_ions_M(model, recipe.volumes_mL, recipe.total_volume_mL)
    params = free_parameters(plan, model)
    if params.size:
        with hypothetical():
            return range_band(model, params, tot, ions, epsilon_M_cm=eps)[0].max(axis=-1)
    return np.where((a_max <= hi) & (a_min >= lo), 0.0, 1.0)


def _best_index(se: np.ndarray, feasible: np.ndarray) -> int:
    """The wavelength with the smallest SE among the feasible ones (else among all with a finite SE)."""
    if feasible.any():
        return int(np.flatnonzero(feasible)[np.argmin(se[feasible])])
    return int(np.nanargmin(np.where(np.isfinite(se), se, np.nan))) if np.isfinite(se).any() else 0


def _bands_check(plan: Plan, model) -> Check:
    """Does every absorber have a band? Those without one are taken as flat."""
    bands = plan.optics.bands
    flat = [n for n, e in zip(model.absorbers, model.epsilon_M_cm, strict=True) if e > 0 and n not in bands]
    if flat:
        return Check(
            "bands",
            "warn",
            f"{', '.join(flat)} absorb but have no band: taken as flat at "
            f"their ε at {plan.optics.wavelength_nm:g} nm — add their bands to [optics.bands]",
        )
    return Check("bands", "pass", f"every absorber has a band ({', '.join(bands)})")


def _se_rows(lam, se, a_max, a_min, feasible) -> list[dict]:
    """The survey by wavelength, one row each, by their JSON keys."""
    return [
        {
            "wavelength_nm": float(w),
            "se": float(s),
            "absorbance_max": float(x),
            "absorbance_min": float(y),
            "in_range": bool(f),
        }
        for w, s, x, y, f in zip(lam, se, a_max, a_min, feasible, strict=True)
    ]


def _grid(plan: Plan) -> np.ndarray:
    b = plan.optics.bands.values()
    lo = min(x.peak_nm - SPAN_FWHM * x.fwhm_nm for x in b)
    hi = max(x.peak_nm + SPAN_FWHM * x.fwhm_nm for x in b)
    lo = max(np.floor(lo), 1.0)
    return np.arange(lo, np.ceil(hi) + STEP_NM / 2, STEP_NM)


def _epsilon_by_wavelength(plan: Plan, model, lam: np.ndarray) -> np.ndarray:
    """(Λ, 2 + S) ε of every absorber at every wavelength (bandwidth factor applied; no band: flat)."""
    eps = np.broadcast_to(model.epsilon_M_cm, (lam.size, model.epsilon_M_cm.size)).copy()
    for j, name in enumerate(model.absorbers):
        band = plan.optics.bands.get(name)
        if band is not None:
            f = bandwidth_factor(plan.optics.bandwidth_nm, band.fwhm_nm)
            eps[:, j] = f * band_epsilon(lam, band.peak_nm, band.fwhm_nm, band.epsilon_max)
    return eps


def _se_by_wavelength(plan: Plan, model, recipe: Recipe, eps: np.ndarray):
    """SE(log β[target]), highest and lowest reading at every wavelength, vectorised over wavelengths."""
    L = eps.shape[0]
    st = expected_state(model, recipe, batch=L, epsilon_M_cm=eps, warn=False)
    der = absorbance_derivatives(model, st, eps)
    params = free_parameters(plan, model)
    if params.target < 0:
        raise PlanError(
            f"species.{plan.target}.log_beta_sd",
            "the target constant is held fixed (log_beta_sd = 0): "
            "give its uncertainty so the survey has something to resolve",
        )
    J = parameter_jacobian(params, der)  # (Λ, n, P)
    f = error_factors(plan, model, recipe, st, plan_devices(plan), dA_dtotals=der.dA_dtotals)
    cov = (
        np.einsum("...i,ij->...ij", f.independent_var, np.eye(recipe.n_tubes))
        + np.einsum("...ik,...jk->...ij", f.J_stock, f.J_stock)
        + np.einsum("...ik,...jk->...ij", f.J_device, f.J_device)
    )
    F = np.einsum("...ni,...nj->...ij", J, np.linalg.solve(cov, J))
    t = params.target
    se = np.full(L, np.inf)
    cond = np.linalg.cond(F)
    ok = np.isfinite(cond) & (cond < 1e14)
    if ok.any():
        se[ok] = np.sqrt(np.maximum(np.linalg.inv(F[ok])[:, t, t], 0.0))
    return se, st.absorbance.max(axis=-1), st.absorbance.min(axis=-1)


def _se_at(plan: Plan, model, recipe: Recipe, wavelength_nm: float) -> float:
    eps = _epsilon_by_wavelength(plan, model, np.array([wavelength_nm]))
    s = float(_se_by_wavelength(plan, model, recipe, eps)[0][0])
    return s if np.isfinite(s) else float("nan")


def _plan_at(plan: Plan, model, wavelength_nm: float, eps_row: np.ndarray) -> Plan:
    """The plan moved to ``wavelength_nm``: ε guesses from the bands (before the bandwidth factor, which
    the model applies again), the same relative uncertainties."""
    new_eps = {}
    for j, name in enumerate(model.absorbers):
        old = plan.optics.epsilon.get(name)
        band = plan.optics.bands.get(name)
        if band is None and old is None:
            continue
        value = float(eps_row[j]) / (
            bandwidth_factor(plan.optics.bandwidth_nm, band.fwhm_nm) if band else 1.0
        )
        new_eps[name] = Epsilon(value=value, rsd=old.rsd if old is not None else 0.0)
    optics = plan.optics.model_copy(update={"wavelength_nm": wavelength_nm, "epsilon": new_eps})
    return plan.model_copy(update={"optics": optics})


def _se_line(lam, se, feasible, n: int = 7) -> str:
    idx = np.flatnonzero(feasible)
    if idx.size == 0:
        return "none"
    pick = idx[np.unique(np.linspace(0, idx.size - 1, min(n, idx.size)).round().astype(int))]
    return ", ".join(f"{lam[k]:g} nm {se[k]:.3g}" for k in pick)


def _num(x) -> str:
    return "—" if x is None or not np.isfinite(x) else f"{x:.3g}"


def _wavelength_check(feasible, best, se_best, here, plan: Plan, t: str, peak_nm) -> Check:
    lo, hi = plan.optics.linear_range
    if not feasible.any():
        return Check(
            "wavelength",
            "fail",
            f"no wavelength keeps every reading inside {lo:g}–{hi:g} over the guesses' uncertainty: change "
            f"the tubes (kplan design) or the path length",
        )
    goal = plan.design.goal_se
    msg = (
        f"{best:g} nm gives SE(log β[{t}]) = {se_best:.3g} (plan's {plan.optics.wavelength_nm:g} nm: "
        f"{_num(here)})"
    )
    if peak_nm is not None and abs(best - peak_nm) >= 1:
        msg += (
            f"; off the {t} band maximum ({peak_nm:g} nm), where the readings or the free reagents cost more"
        )
    if se_best > goal:
        return Check(
            "wavelength",
            "warn",
            msg + f"; above the goal {goal:g} at every wavelength: change the tubes too (kplan design)",
        )
    return Check("wavelength", "pass", msg)
