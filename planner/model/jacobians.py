"""Jacobians of the expected absorbances and the Fisher information they carry.

Derivatives are analytic: the equilibrium's sensitivities come from the implicit function theorem
(:func:`planner.model.sensitivities.sensitivities`), then the chain rule through Beer–Lambert and the
stray-light curve. All functions are vectorised over tubes (and any leading batch axes).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import closed_forms, optics, sensitivities, speciation
from .compiled import Model, TubeState

LN10 = float(np.log(10.0))


@dataclass(frozen=True)
class AbsorbanceDerivatives:
    """Derivatives of each tube's expected reading.

    Attributes
    ----------
    dA_dtotals : (..., n, 2) dA/dM_tot and dA/dL_tot, per mol/L.
    dA_dlog_beta : (..., n, S) dA/d log10 β of each species.
    dA_depsilon : (..., n, 2 + S) dA/dε of each absorber (Model.absorbers order), per L mol⁻¹ cm⁻¹.
    """

    dA_dtotals: np.ndarray
    dA_dlog_beta: np.ndarray
    dA_depsilon: np.ndarray


@dataclass(frozen=True)
class ConcentrationDerivatives:
    """Derivatives of every absorber's concentration (Model.absorbers order: M, L, then the species).

    Attributes
    ----------
    dc_dtotals : (..., n, 2 + S, 2) d[absorber]/dM_tot and /dL_tot (dimensionless); the free M and L
        rows follow exactly from the mass balances.
    dc_dlog_beta : (..., n, 2 + S, S) d[absorber]/d log10 β of each species, mol/L.
    """

    dc_dtotals: np.ndarray
    dc_dlog_beta: np.ndarray


def concentration_derivatives(model: Model, state: TubeState) -> ConcentrationDerivatives:
    """Analytic d[absorber]/d(totals, log β) for every tube of ``state`` (implicit function theorem,
    :func:`planner.model.sensitivities.sensitivities`)."""
    cond = closed_forms.conditional_log_beta(state.log_beta, model.stoich, model.pH)
    spec = speciation.Speciation(
        state.free_M, state.free_L, state.species_M, state.totals_M[..., 0], state.totals_M[..., 1]
    )
    sens = sensitivities.sensitivities(spec, model.stoich_pq, cond)
    p = model.stoich[:, 0].astype(float)
    q = model.stoich[:, 1].astype(float)
    # species derivatives w.r.t. totals; free M and L follow exactly from the mass balances
    dc_dM, dc_dL = sens.dc_dMtot, sens.dc_dLtot
    dm = np.stack([1.0 - np.sum(p * dc_dM, axis=-1), -np.sum(p * dc_dL, axis=-1)], axis=-1)
    dl = np.stack([-np.sum(q * dc_dM, axis=-1), 1.0 - np.sum(q * dc_dL, axis=-1)], axis=-1)
    dtot = np.concatenate([dm[..., None, :], dl[..., None, :], np.stack([dc_dM, dc_dL], axis=-1)], axis=-2)
    # d ln c / d log10 β = ln10 · d ln c / d ln β
    dc_db = state.species_M[..., :, None] * sens.dlnc_dlnbeta * LN10  # (..., n, S, S)
    dm_db = state.free_M[..., None] * sens.dlnfree_M_dlnbeta * LN10  # (..., n, S)
    dl_db = state.free_L[..., None] * sens.dlnfree_L_dlnbeta * LN10
    return ConcentrationDerivatives(
        dtot, np.concatenate([dm_db[..., None, :], dl_db[..., None, :], dc_db], -2)
    )


def absorbance_derivatives(
    model: Model, state: TubeState, epsilon_M_cm: np.ndarray | None = None
) -> AbsorbanceDerivatives:
    """Analytic dA/d(totals, log β, ε) for every tube of ``state``."""
    cd = concentration_derivatives(model, state)
    eps = model.epsilon_M_cm if epsilon_M_cm is None else np.asarray(epsilon_M_cm, dtype=float)
    if eps.ndim > 1:
        eps = eps[..., None, :]
    eps_M, eps_L, eps_s = eps[..., 0], eps[..., 1], eps[..., 2:]
    slope = optics.stray_light_slope(state.absorbance_true, model.stray_light) * model.path_cm
    dt = cd.dc_dtotals
    dA_dM = slope * (eps_M * dt[..., 0, 0] + eps_L * dt[..., 1, 0] + np.sum(eps_s * dt[..., 2:, 0], axis=-1))
    dA_dL = slope * (eps_M * dt[..., 0, 1] + eps_L * dt[..., 1, 1] + np.sum(eps_s * dt[..., 2:, 1], axis=-1))
    db = cd.dc_dlog_beta
    dA_db = slope[..., None] * (
        eps_M[..., None] * db[..., 0, :]
        + eps_L[..., None] * db[..., 1, :]
        + np.einsum("...s,...sj->...j", eps_s, db[..., 2:, :])
    )
    dA_de = slope[..., None] * state.absorber_conc_M()
    return AbsorbanceDerivatives(np.stack([dA_dM, dA_dL], axis=-1), dA_db, dA_de)
