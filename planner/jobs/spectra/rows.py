"""Candidate tubes in concentration space, for the whole-spectrum design and its model check.

A tube's spectrum determines its absorbers' concentrations up to the unknown spectra (the module
docstring of :mod:`planner.jobs.spectra.design` derives the rows): each candidate gives one whitened row
per absorbing absorber, in the free constants, the fitted spectra's linear map and the shared errors.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ...inference.study import Study
from ...model.jacobians import concentration_derivatives
from ...model.spectra import spectra_readings
from ...uncertainty.spectra_budget import totals_errors
from ..compile import expected_at
from ..plan.candidates import Candidates
from .reading import spectral_parameters


@dataclass(frozen=True)
class ConcentrationRows:
    """The concentration-space view of candidate tubes at nodes θ (G of them) (see the module docstring).

    Attributes
    ----------
    F : (G, C, a, P') whitened rows (a: the absorbing absorbers); M0 (P', P') the shared factors' prior.
    top, band : (G, C) each candidate's highest reading and its spread from the spectra's uncertainty.
    ab : (a,) indices (in Model.absorbers) of the absorbing absorbers; free (s,) those fitted, within ab.
    E : (W, a) path × ε of the absorbing absorbers; weight (G, C, W) 1/σ² of each reading used (0 else).
    gamma : (G, C, a, a) Eᵀ D E, the photometric information about each tube's concentrations.
    inv_sqrt : (G, C, a, a) the whitening V^(−½) of each tube's concentrations.
    conc : (G, C, 2 + S) every absorber's concentration.
    """

    F: np.ndarray
    M0: np.ndarray | None
    top: np.ndarray
    band: np.ndarray
    ab: np.ndarray
    free: np.ndarray
    E: np.ndarray
    weight: np.ndarray
    gamma: np.ndarray
    inv_sqrt: np.ndarray
    conc: np.ndarray


def concentration_rows(study: Study, cand: Candidates, theta: np.ndarray, criterion: str):
    """Whitened concentration-space rows F (G, C, s_all, P') of every candidate at every node θ (G, P),
    the prior M0 (P', P') of the shared nuisance factors, and each candidate's highest reading (G, C)
    with its spread from the spectra's uncertainty (see the module docstring)."""
    r = concentration_parts(study, cand, theta, criterion)
    return r.F, r.M0, r.top, r.band


def concentration_parts(
    study: Study, cand: Candidates, theta: np.ndarray, criterion: str
) -> ConcentrationRows:
    """:func:`concentration_rows` with the parts it is made of (:class:`ConcentrationRows`)."""
    model, spectra = study.model, study.spectra
    params = spectral_parameters(study)
    rec = cand.recipe
    G = theta.shape[0]
    st, _ = expected_at(model, params, rec, theta)
    cd = concentration_derivatives(model, st)
    ab = np.flatnonzero(spectra.absorbing)
    free = np.flatnonzero(spectra.free[ab])
    conc = st.absorber_conc_M()
    rd = spectra_readings(spectra, conc, model.path_cm)
    used = rd.absorbance <= model.linear_range[1]
    E = model.path_cm * spectra.epsilon_M_cm[:, ab]  # (W, a)
    Gam = np.einsum("wa,gcw,wb->gcab", E, used / rd.linear_sd**2, E)
    c = conc[..., ab]  # (G, C, a)
    H = cd.dc_dtotals[..., ab, :]  # (G, C, a, 2)
    errs = totals_errors(study.bench, model, rec)
    V = np.linalg.pinv(Gam, hermitian=True) + np.einsum("gcai,cij,gcbj->gcab", H, errs.random_cov, H)
    a, s = ab.size, free.size
    Jth = cd.dc_dlog_beta[..., ab, :][..., params.index]  # (G, C, a, P)
    Jn = np.einsum("xy,gcb->gcxby", np.eye(a), c[..., free]).reshape(G, c.shape[1], a, s * a)
    Jsh = np.einsum("gcai,ciq->gcaq", H, errs.shared)
    keep = (
        np.any(errs.shared != 0, axis=(0, 1))
        if criterion == "target"
        else np.zeros(errs.shared.shape[-1], bool)
    )
    J = np.concatenate([Jth, Jn, Jsh[..., keep]], axis=-1)
    w, U = np.linalg.eigh(V)
    inv_sqrt = np.einsum("gcij,gcj,gckj->gcik", U, 1.0 / np.sqrt(np.maximum(w, 1e-300)), U)
    F = inv_sqrt @ J
    M0 = None
    if keep.any():
        M0 = np.zeros((F.shape[-1],) * 2)
        M0[-int(keep.sum()) :, -int(keep.sum()) :] = np.eye(int(keep.sum()))
    spread = model.path_cm * np.sqrt(
        np.einsum("gca,wa->gcw", conc**2, (spectra.epsilon_M_cm * spectra.epsilon_rsd) ** 2)
    )
    k = np.argmax(rd.absorbance + 2 * spread, axis=-1)
    top = np.take_along_axis(rd.absorbance, k[..., None], -1)[..., 0]
    band = np.take_along_axis(spread, k[..., None], -1)[..., 0]
    weight = used / rd.linear_sd**2
    return ConcentrationRows(F, M0, top, band, ab, free, E, weight, Gam, inv_sqrt, conc)
