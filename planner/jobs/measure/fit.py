"""After the measurement: fit the readings with the plan's model and compare with the plan's promise.

The readings are fitted by generalised least squares with the same error budget the assessment used
(photometric, delivery and stock errors, correlated across tubes), from several starts over the guess's
range so a poor guess does not trap the fit (:mod:`planner.jobs.measure.core`, the same code the coverage
checks run on hundreds of simulated experiments at once).

A fit that cannot be fooled:
- readings outside the instrument's linear range are left out by default (they follow no Beer–Lambert
  line; ``keep_out_of_range`` keeps them), and any tube can be excluded by label;
- a constant that runs to the edge of the search box, or an information matrix that is (near) singular,
  gives "not determined" with the reason — never a number with an SE of 10¹²;
- χ² is judged on both tails (dof = tubes used − parameters): too large means scatter beyond the error
  model (a bad tube, drift, a wrong model), and then the SEs and the interval are widened by √(χ²/dof)
  and the fit says so; too small means readings closer to the model than the error model allows;
- the profile-likelihood 95 % interval of the target's log β (Δχ² ≤ 3.84 with the other parameters
  refitted, its ends found by root-finding; Venzon & Moolgavkar 1988, Appl. Stat. 37:87), honest where
  the likelihood is not quadratic and right at any precision;
- a wild reading is named by a backward search on mean-shift statistics, so the clean tubes it pulls
  along are not (:mod:`planner.jobs.measure.outliers`), with the label to exclude;
- standardised residuals keep the sign of the raw ones.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ...inference.precision import cramer_rao, whitening
from ...inference.study import Study
from ...inputs.errors import InputError
from ...inputs.plan import Plan
from ...inputs.readings import Readings
from ...inputs.recipe import Recipe, RecipeError
from ...inputs.text import plural
from ...uncertainty.budget import error_budget
from ..compile import compile_study, expected_state
from .core import CHI2_TAIL, N_STARTS, SE_LIMIT, covariance_at, fit_batch, reading_model
from .outliers import standardised

__all__ = [
    "N_STARTS",
    "Fit",
    "FittedConstants",
    "check_absorbances",
    "fit_readings",
    "fit_study",
    "not_determined",
    "target_fitted",
]

MAX_ABSORBANCE = 10.0  # no photometer reads beyond this; a larger number is a typo or another quantity


@dataclass(frozen=True)
class FittedConstants:
    """What every fit of a plan's constants reports, of single readings or of whole spectra.

    Attributes
    ----------
    title, target : the plan's title and target species.
    names, estimate, se : fitted parameters, their values and standard errors.
    promised_se : Cramér–Rao SE the plan predicted for what was fitted, at the guess.
    chi2, dof, p_value : goodness of fit against the error model (``p_value`` the upper tail).
    """

    title: str
    target: str
    names: tuple[str, ...]
    estimate: np.ndarray
    se: np.ndarray
    promised_se: np.ndarray
    chi2: float
    dof: int
    p_value: float


@dataclass(frozen=True)
class Fit(FittedConstants):
    """The fitted constants and how they compare with the plan (:class:`FittedConstants` and below).

    Attributes
    ----------
    names, estimate : fitted parameters and their values.
    se : standard errors, widened by ``interval_scale`` when the scatter exceeds the error model;
        ``se_error_model`` the error model's own.
    promised_se : Cramér–Rao SE the plan predicted for the tubes used, at the guess.
    chi2, dof, p_value : goodness of fit against the error model; ``p_value`` is the upper tail,
        ``p_low`` the lower one.
    fitted, residual, standardised : per tube (all tubes, used or not), absorbance units; standardised
        residuals are each residual over its own sd (same sign as the residual).
    converged : whether the best start met a convergence test.
    used : (n,) True for the tubes the fit used; ``excluded`` gives (tube, reason) for the others.
    determined : False when the data do not determine the constants; ``reason`` says why.
    profile_ci95 : (lo, hi) profile-likelihood 95 % interval of the target's log β (None: open side),
        widened with the SEs.
    suspects : (tube, z, shift) of each reading the backward search marks as wild, worst first.
    interval_scale : √(χ²/dof) when the χ² test fails on the high side, else 1.
    """

    recipe: Recipe
    absorbance: np.ndarray
    fitted: np.ndarray
    residual: np.ndarray
    standardised: np.ndarray
    converged: bool
    used: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=bool))
    excluded: tuple[tuple[str, str], ...] = ()
    determined: bool = True
    reason: str = ""
    p_low: float = float("nan")
    profile_ci95: tuple[float | None, float | None] | None = None
    suspects: tuple[tuple[str, float, float], ...] = ()
    interval_scale: float = 1.0

    @property
    def se_error_model(self) -> np.ndarray:
        return self.se / self.interval_scale

    @property
    def outliers(self) -> np.ndarray:
        """(n,) True for the suspects of the backward search."""
        bad = {t for t, _, _ in self.suspects}
        return np.array([t in bad for t in self.recipe.tubes], dtype=bool)

    @property
    def chi2_verdict(self) -> str:
        """One sentence on the scatter, judged on both tails of χ²(dof)."""
        return chi2_verdict(self)

    @property
    def target_fitted(self) -> bool:
        """False when the plan holds the target's constant fixed: the fit then estimates only the other
        parameters and says nothing about the target."""
        return target_fitted(self)

    @property
    def interval_note(self) -> str:
        """What was done to the SEs and the interval because of the scatter ("" when nothing)."""
        if not self.determined:
            return ""
        note = ""
        if self.interval_scale > 1.0:
            note = (
                f"SEs and the 95 % interval widened ×{self.interval_scale:.2f} = √(χ²/dof): the readings "
                f"scatter more than the error model allows"
            )
        if self.suspects:
            held = ", ".join(t for t, _, _ in self.suspects)
            note += ("; " if note else "") + f"the interval also holds the fit without {held}"
        return note


def check_absorbances(values, labels, where: str) -> None:
    """Refuse a reading that is not a finite absorbance within ±MAX_ABSORBANCE, naming its tube."""
    a = np.asarray(values, dtype=float)
    bad = np.flatnonzero(~np.isfinite(a) | (np.abs(a) > MAX_ABSORBANCE))
    if bad.size:
        i = int(bad[0])
        raise InputError(
            f"{where}, tube {labels[i]}: absorbance {a[i]:g} is not a reading: write a finite number between "
            f"{-MAX_ABSORBANCE:g} and {MAX_ABSORBANCE:g}"
        )


def target_fitted(fit) -> bool:
    """Whether a fit (of single readings or of whole spectra) estimated the target's log β: False when
    the plan holds it fixed (its ``log_beta_sd = 0``), so that only ε or other constants were fitted."""
    return f"log_beta[{fit.target}]" in fit.names


def chi2_verdict(fit) -> str:
    """One sentence on the scatter of any fit with ``dof``, ``chi2``, ``p_value`` and ``p_low``, judged on
    both tails of χ²(dof)."""
    if fit.dof < 1 or not np.isfinite(fit.chi2):
        return "no degrees of freedom left: χ² cannot test the fit (add tubes)"
    if fit.p_value < CHI2_TAIL:
        return (
            "the scatter is larger than the error model predicts: look for a bad tube, drift or a wrong model"
        )
    if fit.p_low < CHI2_TAIL:
        return (
            "the scatter is suspiciously small for the error model: it may be too pessimistic, or the "
            "readings are not independent (copied or smoothed)"
        )
    return "the scatter matches the error model"


def fit_readings(
    plan: Plan, readings: Readings, *, exclude: tuple[str, ...] = (), keep_out_of_range: bool = False
) -> Fit:
    """Fit measured readings with the plan's model and full error budget (see the module docstring)."""
    return fit_study(compile_study(plan), readings, exclude=exclude, keep_out_of_range=keep_out_of_range)


def _selection(study: Study, readings: Readings, exclude, keep_out_of_range: bool):
    rec = readings.recipe
    keep = np.ones(rec.n_tubes, dtype=bool)
    why: dict[int, str] = {}
    for label in exclude:
        if label not in rec.tubes:
            raise RecipeError(
                f"exclude {label}",
                f"no tube '{label}' in the readings; tubes are "
                + ", ".join(rec.tubes[:12])
                + (" …" if rec.n_tubes > 12 else ""),
            )
        i = rec.tubes.index(label)
        keep[i] = False
        why[i] = "excluded by request"
    if not keep_out_of_range:
        lo, hi = study.model.linear_range
        out = (readings.absorbance < lo) | (readings.absorbance > hi)
        for i in np.flatnonzero(out & keep):
            why[int(i)] = f"reading {readings.absorbance[i]:.3f} outside the linear range {lo:g}–{hi:g}"
        keep &= ~out
    return keep, tuple((rec.tubes[i], why[i]) for i in sorted(why))


def fit_study(
    study: Study, readings: Readings, *, exclude: tuple[str, ...] = (), keep_out_of_range: bool = False
) -> Fit:
    """:func:`fit_readings` on a compiled plan."""
    params = study.params
    full = readings.recipe
    if params.size == 0:
        raise RecipeError("plan", "nothing to fit: give the target log_beta_sd > 0 (or ε an rsd)")
    check_absorbances(readings.absorbance, full.tubes, "readings")
    keep, excluded = _selection(study, readings, exclude, keep_out_of_range)
    rec = full.take(keep)
    y = readings.absorbance[keep]
    if rec.n_tubes < params.size:
        return _undetermined(
            study,
            readings,
            keep,
            excluded,
            f"{plural(rec.n_tubes, 'tube')} left cannot determine {params.size} parameters: add tubes",
        )
    b = fit_batch(study, rec, y[None, :])
    theta, se = b.theta[0], b.se[0]
    reading = reading_model(study, rec)
    lo, hi = reading.bounds()
    reason = not_determined(params, theta, se, bool(b.converged[0]), lo, hi)
    W0 = whitening(error_budget(study.bench, study.model, rec, expected_state(study.model, rec)).total)
    promised = cramer_rao(reading.jac(params.guess[None, :])[0], W=W0).se
    fitted_all = reading_model(study, full).f(theta[None, :])[0]
    resid_all = readings.absorbance - fitted_all
    z = np.full(full.n_tubes, np.nan)
    found: tuple[tuple[str, float, float], ...] = ()
    if reason is None:
        z = standardised(
            covariance_at(study, full, theta)[0], reading_model(study, full).jac(theta)[0], keep, resid_all
        )
        found = tuple(
            (rec.tubes[i], float(z), float(d))
            for i, z, d in zip(b.suspects[0], b.suspect_z[0], b.suspect_shift[0], strict=True)
            if i >= 0
        )
    scale = float(b.scale[0]) if reason is None else 1.0
    ci = None
    if reason is None and params.target >= 0:
        lo_ci, hi_ci = b.ci[0]
        ci = (float(lo_ci) if np.isfinite(lo_ci) else None, float(hi_ci) if np.isfinite(hi_ci) else None)
    return Fit(
        title=study.title,
        recipe=full,
        absorbance=readings.absorbance,
        names=params.names,
        estimate=theta,
        se=se * scale if reason is None else np.full(params.size, np.nan),
        promised_se=promised,
        chi2=float(b.chi2[0]),
        dof=b.dof,
        p_value=float(b.p_high[0]),
        fitted=fitted_all,
        residual=resid_all,
        standardised=z,
        converged=bool(b.converged[0]),
        target=study.target,
        used=keep,
        excluded=excluded,
        determined=reason is None,
        reason=reason or "",
        p_low=float(b.p_low[0]),
        profile_ci95=ci,
        suspects=found,
        interval_scale=scale,
    )


def not_determined(params, theta, se, converged: bool, lo, hi) -> str | None:
    """Why the fit determines nothing, or None when it does."""
    if not converged:
        return "the fit did not converge: check the readings and the plan's guesses"
    at_edge = (np.abs(theta - lo) < 1e-6 * np.maximum(1.0, np.abs(lo))) | (
        np.abs(theta - hi) < 1e-6 * np.maximum(1.0, np.abs(hi))
    )
    for p in np.flatnonzero(at_edge & np.isfinite(lo + hi) | (at_edge & (params.kind == 1))):
        return (
            f"{params.names[p]} ran to the edge of its range ({theta[p]:.4g}): the readings do not "
            f"determine it (all tubes saturated, or no complex formed)"
        )
    if not np.all(np.isfinite(se)):
        return "the information matrix is singular: the readings do not determine every parameter"
    lb_se = se[params.kind == 0]
    if lb_se.size and np.max(lb_se) > SE_LIMIT:
        p = int(np.flatnonzero(params.kind == 0)[np.argmax(lb_se)])
        return (
            f"SE({params.names[p]}) = {se[p]:.3g} log units: the information is near singular and the "
            f"readings do not determine it"
        )
    return None


def _undetermined(study: Study, readings: Readings, keep, excluded, reason: str) -> Fit:
    n = readings.recipe.n_tubes
    empty = np.full(n, np.nan)
    nan = np.full(study.params.size, np.nan)
    return Fit(
        title=study.title,
        recipe=readings.recipe,
        absorbance=readings.absorbance,
        names=study.params.names,
        estimate=nan,
        se=nan,
        promised_se=nan,
        chi2=float("nan"),
        dof=int(keep.sum()) - study.params.size,
        p_value=float("nan"),
        fitted=empty,
        residual=empty,
        standardised=empty,
        converged=False,
        target=study.target,
        used=keep,
        excluded=excluded,
        determined=False,
        reason=reason,
    )
