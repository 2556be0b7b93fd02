"""Assessment of a recipe read as whole spectra: can every wavelength together resolve K?

The same verdict, checks and JSON keys as the single-wavelength assessment
(:mod:`planner.jobs.plan.assess`), with the precision from the whole window (:mod:`.precision`): the
parameters are the free constants (every unknown spectrum is eliminated), the tube table shows each
tube's highest reading in the window, and the assessment's ``spectra`` (:mod:`.facts`) adds the comparison
with the best single wavelength, each wavelength's share of the information about the target, and whether
the factor analysis of simulated data matrices finds the model's number of absorbing species.
"""

from __future__ import annotations

from dataclasses import replace
from typing import Unpack

import numpy as np

from ...inference.factors import factor_analysis
from ...inference.precision import pack
from ...inference.priors import prior_nodes
from ...inference.simulate import simulate
from ...inference.study import Study
from ...inputs.recipe import Recipe
from ...inputs.text import tube_list
from ...model.compiled import TubeState
from ...model.spectra import spectra_readings
from ..compile import true_constants
from ..plan import checks as chk
from ..plan.assess import Assessment, detection_count, judged, stock_and_glassware_checks
from ..plan.detection import ASSESS_FIX
from ..plan.options import ASSESS_DEFAULTS, AssessOptions, assess_run, shows_keywords
from .detection import spectra_detection, spectra_model_check
from .facts import FactorOutlook, spectra_facts
from .precision import (
    spectra_cramer_rao,
    spectra_monte_carlo,
    spectra_profile,
)
from .reading import Expected, SpectraModel, expected, spectra_model
from .single import single_wavelengths

FACTOR_TRIALS = 200  # simulated data matrices for the factor-analysis check
FACTOR_GOAL = 0.80  # the check passes when the factor analysis finds the species in 4 of 5 experiments


class SpectraAssessOptions(AssessOptions, total=False):
    """The options of a whole-spectrum assessment: those of every assessment and ``factors`` (False
    skips the factor-analysis check; default True)."""

    factors: bool


SPECTRA_ASSESS_DEFAULTS: SpectraAssessOptions = {**ASSESS_DEFAULTS, "factors": True}


@shows_keywords(SpectraAssessOptions, SPECTRA_ASSESS_DEFAULTS)
def assess_spectra(study: Study, recipe: Recipe, **options: Unpack[SpectraAssessOptions]) -> Assessment:
    """Judge ``recipe`` read at every wavelength of the plan's window (see the module docstring).

    ``options`` (:class:`SpectraAssessOptions`, each optional): ``trials``, ``seed``, ``at``,
    ``profile_chi2``, ``model_check``, ``detection_trials``, ``model_check_fix`` and ``progress`` as for
    every assessment (:class:`planner.jobs.plan.options.AssessOptions`; the model check uses whole
    spectra, :mod:`.detection`), and ``factors``."""
    run = assess_run(options, SPECTRA_ASSESS_DEFAULTS)
    trials, seed = run["trials"], run["seed"]
    model = study.model
    sm = spectra_model(study, recipe)
    params = sm.params
    lb_true = true_constants(model, run["at"])
    theta = pack(model, params, log_beta=lb_true)
    ex = expected(study, recipe, sm, lb_true)
    cr = spectra_cramer_rao(sm, ex.weights, theta) if params.size else None
    mc = prof = None
    rng = np.random.default_rng(seed)
    if cr is not None and trials > 0:
        mc = spectra_monte_carlo(
            study.bench, recipe, sm, ex.weights, rng, trials, theta, progress=run["progress"]
        )
    if cr is not None and run["profile_chi2"] and params.target >= 0:
        prof = spectra_profile(sm, ex.weights, theta)
    single = single_wavelengths(sm, ex, theta)
    state = _tube_table_state(ex)
    checks = [spectra_range_check(study, sm, ex, recipe)]
    checks.append(chk.saturation(state, recipe.tubes))
    checks.append(chk.ionic_strength(state))
    checks.extend(chk.side_reactions(model, state, recipe.tubes))
    checks.extend(stock_and_glassware_checks(study.bench, recipe))
    if cr is not None:
        checks.append(_identifiability(cr))
    fa = None
    if run["factors"]:
        fa = factor_check(study, recipe, sm, ex, lb_true, np.random.default_rng(seed + 2))
        checks.append(fa[0])
    det: tuple = ()
    if run["model_check"] and cr is not None and study.alternatives and params.target >= 0:
        n_det = detection_count(run)
        det = spectra_detection(
            study,
            recipe,
            sm,
            ex,
            np.random.default_rng(seed + 1),
            n_det,
            above=expected_factors(sm, ex)[1],
            eligible=single.eligible,
        )
        checks.append(spectra_model_check(det, run["model_check_fix"] or ASSESS_FIX))
    facts = spectra_facts(sm, ex, cr, single, fa[1] if fa else None)
    return judged(
        study, recipe, state, checks, (params, theta, cr, mc, prof), detection=det or None, spectra=facts
    )


def _tube_table_state(ex: Expected) -> TubeState:
    """The tubes' contents with each tube's highest reading in the window (and its sd, every source)."""
    rd = ex.readings
    k = np.argmax(rd.absorbance, axis=1)
    rows = np.arange(k.size)
    sd = ex.budget.total_sd * rd.slope  # back on the scale of the readings
    return replace(
        ex.state,
        absorbance_true=rd.absorbance_true[rows, k],
        absorbance=rd.absorbance[rows, k],
        absorbance_sd=sd[rows, k],
    )


def spectra_range_check(study: Study, sm: SpectraModel, ex: Expected, recipe: Recipe):
    """Every tube's highest reading in the window below the linear range's top, at the guess and over
    its uncertainty (the readings above it are left out of the fit: they follow no Beer–Lambert line)."""
    lo, hi = study.model.linear_range
    top = ex.readings.absorbance.max(axis=1)
    wl = sm.spectra.wavelength_nm[np.argmax(ex.readings.absorbance, axis=1)]
    risk = prior_top_risk(sm, hi)
    over = top > hi
    if over.any():
        i = int(np.argmax(top))
        return chk.Check(
            "linear-range",
            "fail",
            f"{tube_list(recipe.tubes, over)} read above {hi:g} in part of the window (up to {top[i]:.3f} "
            f"at "
            f"{wl[i]:g} nm); those readings would be left out: use less of the absorbing stock or a "
            f"shorter path",
        )
    dim = top < lo
    at_risk = risk > chk.RANGE_RISK
    if at_risk.any():
        return chk.Check(
            "linear-range",
            "warn",
            f"{tube_list(recipe.tubes, at_risk)} may read above {hi:g} if the constants or spectra are "
            f"off by their uncertainty (chance up to {risk.max():.0%}): use a little less absorbing stock",
        )
    if dim.any():
        return chk.Check(
            "linear-range",
            "warn",
            f"{tube_list(recipe.tubes, dim)} read below {lo:g} at every wavelength: they add little "
            f"(more of the absorbing stock or a longer path)",
        )
    return chk.Check(
        "linear-range", "pass", f"highest readings {top.min():.3f}–{top.max():.3f}, all below {hi:g}"
    )


def prior_top_risk(sm: SpectraModel, hi: float) -> np.ndarray:
    """(n,) each tube's chance that its highest reading in the window passes ``hi`` over the guesses'
    uncertainty (quadrature over log β, the spectra's rsd as a normal spread at each node)."""
    nodes = prior_nodes(sm.params, robust=True)
    st = sm.state(nodes.theta)
    conc = st.absorber_conc_M()  # (G, n, A)
    rd = spectra_readings(sm.spectra, conc, sm.model.path_cm)
    spread = sm.model.path_cm * np.sqrt(
        np.einsum("gna,wa->gnw", conc**2, (sm.spectra.epsilon_M_cm * sm.spectra.epsilon_rsd) ** 2)
    )
    k = np.argmax(rd.absorbance + 2 * spread, axis=-1)
    a = np.take_along_axis(rd.absorbance, k[..., None], -1)[..., 0]
    b = np.take_along_axis(spread, k[..., None], -1)[..., 0]
    return chk.prior_range_risk(a, b, nodes.weights, -np.inf, hi)


def _identifiability(cr) -> chk.Check:
    if not np.all(np.isfinite(cr.se)):
        return chk.Check(
            "identifiability",
            "fail",
            "the spectra cannot all be told apart with the constants from these tubes (singular "
            "information): widen the range of compositions so each species dominates some tubes",
        )
    return chk.Check(
        "identifiability", "pass", "the constants and every fitted spectrum are determined by these tubes"
    )


def expected_factors(sm: SpectraModel, ex: Expected) -> tuple[int, int]:
    """(absorbing species of the model, how many independent spectra stand above the noise).

    A species is in the model when it has ε > 0 in the window and is present in some tube (a
    fitted baseline counts too). The noise-free data matrix has that rank; a factor analysis can see
    only the singular values above the noise's own largest, about σ(√n + √W) for n × W independent
    errors of sd σ (Geman 1980, Ann. Probab. 8:252). The tubes' volumetric errors change the species'
    concentrations, so they add no factor of their own."""
    conc = ex.state.absorber_conc_M()
    present = np.flatnonzero(np.any(conc > 0, axis=0) & sm.spectra.absorbing)
    a = ex.readings.absorbance
    n, W = a.shape
    sigma = float(np.sqrt(np.mean(ex.readings.absorbance_sd**2)))
    edge = sigma * (np.sqrt(n) + np.sqrt(W))
    sv = np.linalg.svd(a, compute_uv=False)
    model_count = present.size + int(sm.blank)
    return model_count, int(np.sum(sv[:model_count] > edge))


def factor_check(study: Study, recipe: Recipe, sm: SpectraModel, ex: Expected, log_beta: np.ndarray, rng):
    """Would the factor analysis of a measured data matrix find the absorbing species that stand above
    the noise? Simulated experiments (every error source), Malinowski's indicator function on each."""
    model = study.model
    n = recipe.n_tubes
    count, want = expected_factors(sm, ex)
    hidden = (
        f" (the other {count - want} within the noise: a weak absorber, or spectra too alike)"
        if want < count
        else ""
    )
    if n < 3 or want >= min(n, sm.spectra.size):
        msg = f"{n} tubes cannot show {want} absorbing species by factor analysis: it needs more tubes"
        return chk.Check("factors", "warn", msg), FactorOutlook(count, want)
    exp = simulate(study.bench, model, recipe, rng, FACTOR_TRIALS, log_beta=log_beta, photometric=False)
    rd = spectra_readings(sm.spectra, exp.state.absorber_conc_M(), model.path_cm)
    y = rd.absorbance + rd.absorbance_sd * rng.standard_normal(rd.absorbance.shape)
    found = np.array([factor_analysis(y[t]).n_indicator for t in range(FACTOR_TRIALS)])
    share = float(np.mean(found == want))
    info = FactorOutlook(count, want, share, float(np.median(found)))
    head = f"the model has {count} absorbing species, {want} above the noise{hidden}"
    if share >= FACTOR_GOAL:
        return chk.Check(
            "factors",
            "pass",
            f"{head}; factor analysis of the data matrix (Malinowski's indicator function) finds {want} in "
            f"{share:.0%} of simulated experiments",
        ), info
    return chk.Check(
        "factors",
        "warn",
        f"{head}; factor analysis finds {want} in only {share:.0%} of simulated experiments (typically "
        f"{np.median(found):g}): a minor species hides in the noise; add tubes where it dominates, or read "
        f"a longer path",
    ), info
