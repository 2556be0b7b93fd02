"""After the measurement: fit the readings with the plan's model and compare with the plan's promise.

The readings are fitted by generalised least squares with the same error budget the assessment used
(photometric, delivery and stock errors, correlated across tubes), from several starts over the guess's
range so a poor guess does not trap the fit; the covariance of the estimates is (JᵀΣ⁻¹J)⁻¹ at the
solution.

A fit that cannot be fooled:
- readings outside the instrument's linear range are left out by default (they follow no Beer–Lambert
  line; ``keep_out_of_range`` keeps them), and any tube can be excluded by label;
- a constant that runs to the edge of the search box, or an information matrix that is (near) singular,
  gives "not determined" with the reason — never a number with an SE of 10¹²;
- χ² is judged on both tails (dof = tubes used − parameters): too large means scatter beyond the error
  model (a bad tube, drift, a wrong model); too small means readings closer to the model than the error
  model allows (an error model too pessimistic, or readings that are not independent);
- beside the Cramér–Rao SE, the profile-likelihood 95 % interval of the target's log β (Δχ² ≤ 3.84 with
  the other parameters refitted; Venzon & Moolgavkar 1988, Appl. Stat. 37:87), which stays honest where
  the likelihood is not quadratic;
- standardised (whitened) residuals, with |z| > 3 marked as outliers.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ...inference.lm import fit_many
from ...inference.precision import (
    CHI2_95_1DOF,
    LOG_BETA_RANGE,
    ReadingModel,
    cramer_rao,
    unpack,
    whitening_of,
)
from ...inference.study import Study
from ...inference.tails import chi2_cdf, chi2_sf
from ...inputs.plan import Plan
from ...inputs.readings import Readings
from ...inputs.recipe import Recipe, RecipeError
from ...inputs.text import plural
from ...model.compiled import tube_ions_M
from ...uncertainty.budget import error_budget
from ..compile import compile_study, expected_state

N_STARTS = 7  # starts spread over ±3 sd of the target's guess
OUTLIER_Z = 3.0  # |standardised residual| beyond which a tube is marked [common practice]
CHI2_TAIL = 0.05  # each tail of the χ² test [common practice]
SE_LIMIT = 5.0  # log10 units: an SE beyond this is no determination at all
PROFILE_HALF_WIDTH_SE = 5.0  # the profile grid spans the estimate ± 5 SE (at least ± 0.5)


@dataclass(frozen=True)
class Fit:
    """The fitted constants and how they compare with the plan.

    Attributes
    ----------
    names, estimate, se : fitted parameters, their values and standard errors (error model absolute).
    promised_se : Cramér–Rao SE the plan predicted for the tubes used, at the guess.
    chi2, dof, p_value : goodness of fit against the error model; ``p_value`` is the upper tail,
        ``p_low`` the lower one.
    fitted, residual, standardised : per tube (all tubes, used or not), absorbance units; standardised
        residuals (whitened) are NaN for tubes left out.
    converged : whether the best start met a convergence test.
    used : (n,) True for the tubes the fit used; ``excluded`` gives (tube, reason) for the others.
    determined : False when the data do not determine the constants; ``reason`` says why.
    profile_ci95 : (lo, hi) profile-likelihood 95 % interval of the target's log β (None: open side).
    """

    title: str
    recipe: Recipe
    absorbance: np.ndarray
    names: tuple[str, ...]
    estimate: np.ndarray
    se: np.ndarray
    promised_se: np.ndarray
    chi2: float
    dof: int
    p_value: float
    fitted: np.ndarray
    residual: np.ndarray
    standardised: np.ndarray
    converged: bool
    target: str
    used: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=bool))
    excluded: tuple[tuple[str, str], ...] = ()
    determined: bool = True
    reason: str = ""
    p_low: float = float("nan")
    profile_ci95: tuple[float | None, float | None] | None = None

    @property
    def outliers(self) -> np.ndarray:
        return np.abs(np.nan_to_num(self.standardised)) > OUTLIER_Z

    @property
    def chi2_verdict(self) -> str:
        """One sentence on the scatter, judged on both tails of χ²(dof)."""
        return chi2_verdict(self)

    def summary(self) -> dict:
        f = json_float
        return {
            **fit_summary_head(self),
            "tubes": [
                {
                    "tube": tb,
                    "absorbance": f(a),
                    "fitted": f(m),
                    "residual": f(r),
                    "standardised": f(z),
                    "used": bool(u),
                    "outlier": bool(o),
                }
                for tb, a, m, r, z, u, o in zip(
                    self.recipe.tubes,
                    self.absorbance,
                    self.fitted,
                    self.residual,
                    self.standardised,
                    self.used,
                    self.outliers,
                    strict=True,
                )
            ],
        }


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


def fit_summary_head(fit) -> dict:
    """The keys every fit's JSON starts with: title, target, converged, determined, reason, parameters,
    χ² with its dof, both tails and verdict, and the tubes left out."""
    f = json_float
    return {
        "title": fit.title,
        "target": fit.target,
        "converged": fit.converged,
        "determined": fit.determined,
        "reason": fit.reason,
        "parameters": parameter_rows(fit),
        "chi2": f(fit.chi2),
        "dof": fit.dof,
        "p_value": f(fit.p_value),
        "p_low": f(fit.p_low),
        "chi2_verdict": fit.chi2_verdict,
        "excluded": [{"tube": tb, "reason": r} for tb, r in fit.excluded],
    }


def json_float(x) -> float | None:
    """A float for JSON: None for a missing or non-finite value."""
    x = float(x) if x is not None else float("nan")
    return x if np.isfinite(x) else None


def parameter_rows(fit) -> list[dict]:
    """The ``parameters`` of a fit's JSON (``name``, ``estimate``, ``se``, ``promised_se``, and for the target
    ``profile_ci95``) from any fit with ``names``, ``estimate``, ``se``, ``promised_se``, ``target`` and
    ``profile_ci95``."""
    f = json_float
    t = f"log_beta[{fit.target}]"
    rows = []
    for n, e, s, p in zip(fit.names, fit.estimate, fit.se, fit.promised_se, strict=True):
        row = {"name": n, "estimate": f(e), "se": f(s), "promised_se": f(p)}
        if n == t:
            ci = fit.profile_ci95
            row["profile_ci95"] = [f(ci[0]), f(ci[1])] if ci is not None else None
        rows.append(row)
    return rows


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
                f"--exclude {label}",
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
            why[int(i)] = (
                f"reading {readings.absorbance[i]:.3f} outside the linear range {lo:g}–{hi:g} "
                f"(keep it with --keep-out-of-range)"
            )
        keep &= ~out
    return keep, tuple((rec.tubes[i], why[i]) for i in sorted(why))


def fit_study(
    study: Study, readings: Readings, *, exclude: tuple[str, ...] = (), keep_out_of_range: bool = False
) -> Fit:
    """:func:`fit_readings` on a compiled plan."""
    model, params, bench = study.model, study.params, study.bench
    full = readings.recipe
    if params.size == 0:
        raise RecipeError("plan", "nothing to fit: give the target log_beta_sd > 0 (or ε an rsd)")
    keep, excluded = _selection(study, readings, exclude, keep_out_of_range)
    rec = full.take(keep)
    y = readings.absorbance[keep]
    nan = np.full(params.size, np.nan)
    if rec.n_tubes < params.size:
        return _undetermined(
            study,
            readings,
            keep,
            excluded,
            nan,
            f"{plural(rec.n_tubes, 'tube')} left cannot determine {params.size} parameters: add tubes",
        )
    state = expected_state(model, rec)
    W0 = W = whitening_of(error_budget(bench, model, rec, state))
    ions = tube_ions_M(model, rec.volumes_mL, rec.total_volume_mL)
    reading = ReadingModel(model, params, state.totals_M, ions)
    starts = np.repeat(params.guess[None, :], N_STARTS, axis=0)
    if params.target >= 0:
        starts[:, params.target] += np.linspace(-3, 3, N_STARTS) * params.prior_sd[params.target]
    lo, hi = reading.bounds()
    res = fit_many(reading.f, starts, y, jac=reading.jac, whiten=W, scale_cov=False, lower=lo, upper=hi)
    chi2 = np.where(res.converged, res.chi2, np.inf)
    best = int(np.argmin(chi2)) if np.isfinite(chi2).any() else int(np.argmin(res.chi2))
    theta = res.theta[best]
    # the photometric part of the error model depends on the readings: re-weight at the fit, refit once
    lb, eps, _ = unpack(model, params, theta)
    state_fit = expected_state(model, rec, log_beta=lb, epsilon_M_cm=eps)
    W = whitening_of(error_budget(bench, model, rec, state_fit))
    res = fit_many(reading.f, theta, y, jac=reading.jac, whiten=W, scale_cov=False, lower=lo, upper=hi)
    theta, se = res.theta[0], res.se[0]
    converged = bool(res.converged[0])
    promised = cramer_rao(reading.jac(params.guess[None, :])[0], W=W0).se
    reason = _not_determined(params, theta, se, converged, lo, hi)
    # every tube's fitted reading (those left out too, from the same constants)
    ions_all = tube_ions_M(model, full.volumes_mL, full.total_volume_mL)
    tot_all = expected_state(model, full).totals_M
    fitted_all = ReadingModel(model, params, tot_all, ions_all).f(theta[None, :])[0]
    resid_all = readings.absorbance - fitted_all
    z = np.full(full.n_tubes, np.nan)
    z[keep] = W @ (y - fitted_all[keep])
    dof = rec.n_tubes - params.size
    c2 = float(res.chi2[0])
    p_hi = float(chi2_sf(c2, dof)) if dof > 0 else float("nan")
    p_lo = float(chi2_cdf(c2, dof)) if dof > 0 else float("nan")
    ci = None
    if reason is None and params.target >= 0:
        ci = profile_interval(reading, W, y, theta, se, c2)
    if reason is not None:
        theta_out, se_out = theta, np.full(params.size, np.nan)
    else:
        theta_out, se_out = theta, se
    return Fit(
        study.title,
        full,
        readings.absorbance,
        params.names,
        theta_out,
        se_out,
        promised,
        c2,
        dof,
        p_hi,
        fitted_all,
        resid_all,
        z,
        converged,
        study.target,
        keep,
        excluded,
        reason is None,
        reason or "",
        p_lo,
        ci,
    )


def _not_determined(params, theta, se, converged: bool, lo, hi) -> str | None:
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


def _undetermined(study: Study, readings: Readings, keep, excluded, nan, reason: str) -> Fit:
    n = readings.recipe.n_tubes
    empty = np.full(n, np.nan)
    return Fit(
        study.title,
        readings.recipe,
        readings.absorbance,
        study.params.names,
        nan,
        nan,
        nan,
        float("nan"),
        int(keep.sum()) - study.params.size,
        float("nan"),
        empty,
        empty,
        empty,
        False,
        study.target,
        keep,
        excluded,
        False,
        reason,
        float("nan"),
        None,
    )


def profile_interval(
    reading: ReadingModel,
    W: np.ndarray,
    y: np.ndarray,
    theta: np.ndarray,
    se: np.ndarray,
    chi2_min: float,
    *,
    n_grid: int = 41,
) -> tuple[float | None, float | None]:
    """Profile-likelihood 95 % interval of the target's log β: where χ²(log β, others refitted) − χ²_min
    crosses 3.84 (linear interpolation between grid points); None on a side where it never does."""
    params = reading.params
    t = params.target
    half = max(PROFILE_HALF_WIDTH_SE * float(se[t]), 0.5)
    grid = np.clip(theta[t] + np.linspace(-half, half, n_grid), *LOG_BETA_RANGE)
    others = [p for p in range(params.size) if p != t]
    G = grid.size
    if others:

        def full(sub):
            th = np.empty((G, params.size))
            th[:, others] = sub
            th[:, t] = grid
            return th

        lo, hi = reading.bounds()
        res = fit_many(
            lambda s: reading.f(full(s)),
            np.broadcast_to(theta[others], (G, len(others))).copy(),
            np.broadcast_to(y, (G, y.size)),
            jac=lambda s: reading.jac(full(s))[..., others],
            whiten=W,
            scale_cov=False,
            lower=lo[others],
            upper=hi[others],
        )
        chi2 = np.where(np.isfinite(res.chi2), res.chi2, np.inf)
    else:
        th = np.broadcast_to(theta, (G, params.size)).copy()
        th[:, t] = grid
        r = (reading.f(th) - y) @ W.T
        chi2 = np.sum(r * r, axis=1)
    return profile_crossings(grid, chi2, chi2_min)


def profile_crossings(
    grid: np.ndarray, chi2: np.ndarray, chi2_min: float
) -> tuple[float | None, float | None]:
    """Where χ²(grid) − χ²_min crosses 3.84 on each side of its minimum (linear interpolation between
    grid points); None on a side where it never does."""
    G = grid.size
    d = np.minimum(chi2 - min(chi2_min, float(np.min(chi2))), 1e300)
    k0 = int(np.argmin(d))

    def crossing(indices) -> float | None:
        prev = k0
        for k in indices:
            if d[k] > CHI2_95_1DOF:
                a, b = d[prev], d[k]
                w = (CHI2_95_1DOF - a) / (b - a) if b > a else 0.0
                return float(grid[prev] + w * (grid[k] - grid[prev]))
            prev = k
        return None

    return crossing(range(k0 - 1, -1, -1)), crossing(range(k0 + 1, G))
