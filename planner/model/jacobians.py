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


def absorbance_derivatives(
    model: Model, state: TubeState, epsilon_M_cm: np.ndarray | None = None
) -> AbsorbanceDerivatives:
    """Analytic dA/d(totals, log β, ε) for every tube of ``state``."""
    cond = closed_forms.conditional_log_beta(state.log_beta, model.stoich, model.pH)
    spec = speciation.Speciation(
        state.free_M, state.free_L, state.species_M, state.totals_M[..., 0], state.totals_M[..., 1]
    )
    sens = sensitivities.sensitivities(spec, model.stoich_pq, cond)
    eps = model.epsilon_M_cm if epsilon_M_cm is None else np.asarray(epsilon_M_cm, dtype=float)
    if eps.ndim > 1:
        eps = eps[..., None, :]
    eps_M, eps_L, eps_s = eps[..., 0], eps[..., 1], eps[..., 2:]
    slope = optics.stray_light_slope(state.absorbance_true, model.stray_light) * model.path_cm
    p = model.stoich[:, 0].astype(float)
    q = model.stoich[:, 1].astype(float)
    # species derivatives w.r.t. totals; free M and L follow exactly from the mass balances
    dc_dM, dc_dL = sens.dc_dMtot, sens.dc_dLtot
    dm_dM = 1.0 - np.sum(p * dc_dM, axis=-1)
    dl_dM = -np.sum(q * dc_dM, axis=-1)
    dm_dL = -np.sum(p * dc_dL, axis=-1)
    dl_dL = 1.0 - np.sum(q * dc_dL, axis=-1)
    dA_dM = slope * (eps_M * dm_dM + eps_L * dl_dM + np.sum(eps_s * dc_dM, axis=-1))
    dA_dL = slope * (eps_M * dm_dL + eps_L * dl_dL + np.sum(eps_s * dc_dL, axis=-1))
    # d ln c / d log10 β = ln10 · d ln c / d ln β
    dc_db = state.species_M[..., :, None] * sens.dlnc_dlnbeta * LN10  # (..., n, S, S)
    dm_db = state.free_M[..., None] * sens.dlnfree_M_dlnbeta * LN10  # (..., n, S)
    dl_db = state.free_L[..., None] * sens.dlnfree_L_dlnbeta * LN10
    dA_db = slope[..., None] * (
        eps_M[..., None] * dm_db + eps_L[..., None] * dl_db + np.einsum("...s,...sj->...j", eps_s, dc_db)
    )
    dA_de = slope[..., None] * state.absorber_conc_M()
    return AbsorbanceDerivatives(np.stack([dA_dM, dA_dL], axis=-1), dA_db, dA_de)
