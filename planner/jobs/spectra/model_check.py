"""The whole-spectrum design's model check: a design that can catch a wrong model, when that pays.

As for one wavelength (:mod:`planner.jobs.plan.model_check`): from the target-optimal exact design, the
exchange of :func:`planner.inference.guard.guarded_design` looks, on the same candidates, for the design
that raises the linearised power to reveal the plan's alternatives most while the target's SE stays
within ×(1 + ``check_weight``); the exact noncentrality (the main model fitted to each alternative's
noise-free spectra by variable projection, :mod:`.detection`) then decides, by the same rule: the
guarded design replaces the target-only one only when it raises the power against some alternative by
at least 20 points or lifts it to the 80 % goal. Otherwise the target-only design stands and the check
says what would reveal the alternative.

The linearised noncentrality of a tube read as a whole spectrum has two parts [derived]. Weighting each
tube's readings by its photometric noise D, the alternative's misfit d (alternative − main, at the guess)
splits into its part inside the span of the model's spectra E — a misfit δ = Γ⁻¹EᵀDd of the tube's
concentrations (Γ = EᵀDE), whitened like the concentration-space rows of the design
(:mod:`.rows`) — and the rest, c_new · ε⊥, the added species' concentration times the part of its
spectrum no combination of the model's spectra gives (whitened size ρ, ρ² = eᵀDe − (EᵀDe)ᵀΓ⁻¹(EᵀDe)).
That rest can be absorbed only by changing the fitted spectra along ε⊥, which moves tube i's spectrum
by c_free,i · Δ: one more block of parameters per alternative with rows ρ c_free,i and misfit ρ c_new,i
(exact when every tube's noise has the same shape over the window, as the design's rows). The two parts
are orthogonal, so each candidate gives k = (absorbers) + (alternatives) rows and λ is the sum of the
parts; :func:`planner.inference.guard.guarded_design` exchanges candidates of k rows. A fitted baseline
(``design.blank_offset``) is left out of these rows; the exact noncentrality that decides includes it.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from ...inference.discrimination import POWER_GOAL
from ...inference.study import Study
from ...inputs.recipe import Recipe, totals_M
from ...model.compiled import predict, tube_ions_M
from ..plan.candidates import Candidates, recipe_from_counts
from ..plan.model_check import GuardOutcome, decide, what_would_reveal
from .detection import SpectraDetection, alternative_spectra_of, chi2_power, fit_dof, spectra_detection
from .precision import target_se_spectra
from .reading import expected, spectra_model, spectral_parameters
from .rows import ConcentrationRows, concentration_parts

# an added spectrum with less than 1 % of its weighted square outside the model's spectra is, for advice,
# a combination of theirs [our choice]
OUTSIDE_SMALL = 0.01


def guard_rows(
    study: Study, cand: Candidates
) -> tuple[np.ndarray, np.ndarray, np.ndarray | None, np.ndarray]:
    """The exchange's rows at the guess (see the module docstring): F (C, a + A, P' + A s), R (A, C, a + A),
    the prior M0, and (A,) the share of each added species' weighted spectrum outside the model's spectra
    (its mean over the candidates)."""
    params = spectral_parameters(study)
    parts = concentration_parts(study, cand, params.guess[None], "target")
    F = parts.F[0]
    C, a, P = F.shape
    s = parts.free.size
    A = len(study.alternatives)
    rec = cand.recipe
    tot = totals_M(rec, study.model.stock_conc_M)
    ions = tube_ions_M(study.model, rec.volumes_mL, rec.total_volume_mL)
    Ff = np.zeros((C, a + A, P + A * s))
    Ff[:, :a, :P] = F
    R = np.zeros((A, C, a + A))
    outside = np.zeros(A)
    for k, (_, alt) in enumerate(study.alternatives):
        r_in, rho, c_new, share = _misfit(study, parts, k, alt, tot, ions)
        R[k, :, :a] = r_in
        R[k, :, a + k] = rho * c_new
        Ff[:, a + k, P + k * s : P + (k + 1) * s] = rho[:, None] * parts.conc[0][:, parts.ab[parts.free]]
        outside[k] = share
    M0 = None
    if parts.M0 is not None:
        M0 = np.zeros((P + A * s,) * 2)
        M0[:P, :P] = parts.M0
    return Ff, R, M0, outside


def _misfit(study: Study, parts: ConcentrationRows, k: int, alt, tot, ions):
    """For alternative ``k`` at every candidate: the whitened in-span misfit (C, a), the whitened size ρ
    (C,) of the added spectrum's part outside the model's spectra, the added species' concentration (C,),
    and the mean share of its weighted spectrum outside them."""
    b = study.model.path_cm
    conc = parts.conc[0]  # (C, 2 + S) main model at the guess
    conc_alt = predict(alt, tot, ions, warn=False).absorber_conc_M()  # (C, 2 + S + 1)
    eps_alt = alternative_spectra_of(study, k).epsilon_M_cm  # (W, 2 + S + 1)
    d = b * (conc_alt @ eps_alt.T - conc @ study.spectra.epsilon_M_cm.T)  # (C, W)
    D, E, gam = parts.weight[0], parts.E, parts.gamma[0]
    gam_inv = np.linalg.pinv(gam, hermitian=True)
    delta = np.einsum("cab,cb->ca", gam_inv, np.einsum("wa,cw,cw->ca", E, D, d))
    r_in = np.einsum("cab,cb->ca", parts.inv_sqrt[0], delta)
    e = b * eps_alt[:, -1]  # (W,)
    Ee = np.einsum("wa,cw,w->ca", E, D, e)
    whole = D @ e**2
    rho2 = whole - np.einsum("ca,cab,cb->c", Ee, gam_inv, Ee)
    rho = np.sqrt(np.maximum(rho2, 0.0))
    share = float(np.mean(np.where(whole > 0, np.maximum(rho2, 0.0) / np.where(whole > 0, whole, 1.0), 0.0)))
    return r_in, rho, conc_alt[:, -1], share


def exact_detection(study: Study, recipe: Recipe) -> tuple[SpectraDetection, ...]:
    """Noise-free detection (exact noncentrality, whole spectra) of every alternative: no simulation."""
    sm = spectra_model(study, recipe)
    ex = expected(study, recipe, sm)
    return spectra_detection(study, recipe, sm, ex, np.random.default_rng(0), 0, above=0)


def spectra_guard(
    study: Study, cand: Candidates, idx: np.ndarray, counts: np.ndarray, target_recipe: Recipe
) -> GuardOutcome:
    """Search the candidates ``idx`` of ``cand`` for a whole-spectrum design that reveals the alternatives
    within the plan's SE cost, starting from the target-optimal ``counts``, and decide whether it
    replaces it (see the module docstring)."""
    sub = Candidates(cand.recipe.take(idx), cand.designed_ids, idx.size, cand.step_mL)
    F, R, M0, outside = guard_rows(study, sub)
    sm = spectra_model(study, target_recipe)
    dof = fit_dof(sm, expected(study, target_recipe, sm).weights)
    tot = totals_M(sub.recipe, study.model.stock_conc_M)

    def window(k: int, name: str) -> list[str]:
        if outside[k] >= OUTSIDE_SMALL:
            return []
        return [
            f"a window where {name}'s spectrum is no combination of the model's spectra (here "
            f"{outside[k]:.1%} of it lies outside them)"
        ]

    outcome = decide(
        study,
        (F, R, M0),
        sm.params.target,
        counts,
        target_recipe,
        dof,
        to_recipe=lambda c: recipe_from_counts(study, cand, idx, c),
        se_of=lambda r: target_se_spectra(study, r),
        exact_of=lambda r: exact_detection(study, r),
        advise=lambda exact, best, cost, cap, n: what_would_reveal(
            study, exact, best, cost, cap, tot, n, dof=dof, other_ways=window
        ),
        power_of=lambda lam: chi2_power(lam, dof),
    )
    revealed = [t for t in outcome.exact_target_only if t.power_noise_free >= POWER_GOAL]
    if not outcome.replaced and len(revealed) == len(study.alternatives):
        # nothing to guard: say so, rather than compare a guarded design that adds nothing
        said = ", ".join(f"{t.alternative} ({t.power_noise_free:.0%})" for t in revealed)
        outcome = replace(outcome, reason=f"the target-only design stands: it already reveals {said}")
    return outcome
