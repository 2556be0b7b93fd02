"""Designs for whole spectra: tube volumes on the glassware's grid that use the information of the whole
window.

The design criterion works in concentration space. A tube's spectrum determines its absorbers'
concentrations m_i up to the unknown spectra; with every fitted spectrum free at every wavelength the
data fix the concentrations only up to a linear map of the fitted species' columns, m_i = c_i(θ) +
Nᵀ c_i,free (N: s × s_all nuisance parameters). Each tube then reads m_i (s_all numbers) with the
covariance Γ_i⁻¹ + H_i B_i H_iᵀ: the photometric part Γ_i = E D_i⁻¹ Eᵀ (the spectra weighted by that
tube's noise at every wavelength) and its own volumetric errors (H_i = ∂c_i/∂totals, B_i their
covariance), while the errors shared across tubes (stocks, devices) enter as unit-prior nuisance factors.
When every tube's photometric noise has the same shape over the window this is exactly the Fisher
information of the whole-spectrum fit (the per-wavelength Schur complement over E reduces to
tr(Ċᵀ P⊥ Ċ Γ) [derived]); otherwise it is a close approximation. The design itself is the exact design
on the candidates by the same exchange algorithm as single-wavelength designs
(:mod:`planner.inference.exchange`, Fedorov 1972), robust over the guess's uncertainty (Chaloner &
Larntz 1989); every SE reported is the exact whole-spectrum Cramér–Rao bound (:mod:`.precision`).
"""

from __future__ import annotations

import math
from dataclasses import replace
from typing import Unpack

import numpy as np

from ...inference import approximate, exchange
from ...inference.design_criteria import DesignError
from ...inference.study import Study
from ..plan import checks as chk
from ..plan.candidates import Candidates, candidate_tubes, neighbourhood, recipe_from_counts
from ..plan.design import Design, design_request, designed
from ..plan.detection import DESIGN_FIX, POWER_TRIALS
from ..plan.model_check import finish_model_check
from ..plan.options import DESIGN_DEFAULTS, DesignOptions, shows_keywords, with_defaults
from .assess import assess_spectra
from .model_check import spectra_guard
from .precision import target_se_spectra
from .reading import spectral_parameters
from .rows import concentration_rows

MAX_SPECTRA_CANDIDATES = 6000  # above this the grid is searched coarsely first, then refined locally


@shows_keywords(DesignOptions, DESIGN_DEFAULTS)
def design_spectra(study: Study, **options: Unpack[DesignOptions]) -> Design:
    """Choose each tube's volumes to resolve the target from whole spectra (see the module docstring).

    ``options`` (:class:`planner.jobs.plan.options.DesignOptions`, each optional): ``tubes``,
    ``criterion``, ``robust``, ``seed``, ``starts`` as for every design; ``check_model`` guards against the
    plan's alternative models (default: the plan's ``design.check``; :mod:`.model_check`), False gives
    the target-optimal design alone."""
    run = with_defaults(options, DESIGN_DEFAULTS)
    seed = run["seed"]
    n, crit, rob = design_request(study, run)
    params = spectral_parameters(study)
    if params.size == 0 or (crit == "target" and params.target < 0):
        raise DesignError(
            f"the target {study.target} has log_beta_sd = 0 (held fixed): give it log_beta_sd > 0"
        )
    from ...inference.priors import prior_nodes

    nodes = prior_nodes(params, rob)
    notes: list[str] = []
    cand, ex, ap, rec, idx, n_grid, n_feas = _search(study, nodes, crit, n, (seed, run["starts"]), notes)
    notes.append(
        "the search weighs candidates by their concentration-space information (exact when every tube's "
        "noise has the same shape over the window); every SE shown is the exact whole-spectrum bound"
    )
    check_model = run["check_model"]
    use_check = study.check_weight > 0 if check_model is None else bool(check_model)
    outcome = None
    if use_check and study.alternatives and crit == "target":
        outcome = spectra_guard(study, cand, idx, ex.counts, rec)
        rec = outcome.recipe
    a = assess_spectra(
        study,
        rec,
        trials=0,
        profile_chi2=False,
        factors=True,
        detection_trials=POWER_TRIALS if outcome is not None else 0,
        model_check_fix=DESIGN_FIX if outcome is not None else None,
    )
    single = _single_wavelength_design(study, n, crit, rob, seed)
    a = replace(a, spectra=replace(a.spectra, se_single_wavelength_design=single, with_single_design=True))
    return designed(
        study,
        rec,
        (n, crit, rob, seed),
        (n_grid, n_feas, ex, ap),
        a,
        target_se_spectra(study, rec),
        notes,
        se=target_se_spectra,
        model_check=finish_model_check(study, outcome, a.detection) if outcome is not None else None,
        verdict=a.verdict,
        verdict_reason=a.verdict_reason,
    )


def _search(study: Study, nodes, crit: str, n: int, search, notes: list[str]):
    """The exact design over the candidate grid — above MAX_SPECTRA_CANDIDATES a coarser grid first, then
    the fine grid near the tubes it chose (noted in ``notes``). ``search`` = (seed, starts). Returns the
    candidates, the exact and approximate designs, the recipe, the feasible candidates' indices and the
    grid's and the feasible counts."""
    seed, starts = search
    cand = candidate_tubes(study)
    factor = 1
    if cand.n_grid > MAX_SPECTRA_CANDIDATES:
        factor = int(math.ceil((cand.n_grid / MAX_SPECTRA_CANDIDATES) ** (1.0 / len(cand.designed_ids))))
        cand = candidate_tubes(study, step_mL=study.bench.step_mL * factor)
        notes.append(
            f"searched a {study.bench.step_mL * factor:g} mL grid first, then refined near the chosen tubes"
        )
    ex, ap, rec, idx = _exact(study, cand, nodes, crit, n, seed, starts)
    n_grid, n_feas = cand.n_grid, idx.size
    if factor > 1:
        cand = neighbourhood(study, cand, idx[np.flatnonzero(ex.counts)], factor, None)
        ex, ap, rec, idx = _exact(study, cand, nodes, crit, n, seed, starts)
        n_grid, n_feas = cand.n_grid, idx.size
    return cand, ex, ap, rec, idx, n_grid, n_feas


def _single_wavelength_design(study: Study, n: int, crit: str, rob: bool, seed: int) -> float | None:
    """What designing for the working wavelength alone would give (the plan's ``optics.wavelength_nm``,
    the single-wavelength design without the model check): its SE there, for the comparison."""
    from ..plan.design import design_study

    try:
        d = design_study(study, tubes=n, criterion=crit, robust=rob, seed=seed, check_model=False)
    except DesignError:
        return None
    return d.se_target if np.isfinite(d.se_target) else None


def _exact(study: Study, cand: Candidates, nodes, crit: str, n: int, seed: int, starts: int):
    F, M0, top, band = concentration_rows(study, cand, nodes.theta, crit)
    hi = study.model.linear_range[1]
    risk = chk.prior_range_risk(top, band, nodes.weights, -np.inf, hi)
    ok = (risk <= chk.RANGE_RISK + 1e-12) & np.all(np.isfinite(F), axis=(0, 2, 3))
    if not ok.any():
        raise DesignError(
            f"no candidate tube keeps its highest reading in the window below optics.linear_range's top "
            f"{hi:g} over the guess's range: use more dilute stocks or a shorter path"
        )
    idx = np.flatnonzero(ok)
    params = spectral_parameters(study)
    kw = dict(
        criterion=crit,
        target=params.target if crit == "target" else None,
        M0=M0,
        node_weights=nodes.weights,
    )
    Fk = F[:, idx]
    try:
        ap = approximate.approximate_design(Fk, n_tubes=n, **kw)
        ex = exchange.exact_design(Fk, n, rng=np.random.default_rng(seed), starts=starts, approx=ap, **kw)
    except DesignError as exc:
        raise DesignError(
            f"only {idx.size} of {cand.n_grid} candidate tubes stay below the linear range's top over the "
            f"guess's range, and they cannot determine the constants with every fitted spectrum ({exc}): "
            f"use more dilute stocks, or more tubes"
        ) from None
    rec = recipe_from_counts(study, cand, idx, ex.counts)
    return ex, ap, rec, idx
