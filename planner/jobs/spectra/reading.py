"""The spectra of a fixed set of tubes as a separable model: the absorbers' concentrations (nonlinear in
the constants) times their spectra (linear), for :mod:`planner.inference.varpro`.

The readings are taken once the stray-light curve is undone (:func:`planner.model.spectra.linearise`), so
Beer–Lambert holds exactly: Y = b C(log β) E, with C the concentrations of the absorbers whose spectra
are fitted (one ε per wavelength each: the nuisance spectra), plus the known absorbers' part
K = b C_known E_known. A blank offset (``design.blank_offset``) is one more fitted "spectrum" whose
concentration is 1/b in every tube: a baseline at every wavelength.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ...inference.precision import Parameters, unpack
from ...inference.study import Study
from ...inference.varpro import Weights
from ...inputs.recipe import Recipe, totals_M
from ...model.compiled import Model, TubeState, predict, tube_ions_M
from ...model.jacobians import concentration_derivatives
from ...model.spectra import Spectra, SpectraState, spectra_readings
from ...uncertainty.spectra_budget import SpectraBudget, spectra_budget, totals_errors

BLANK = "blank"


def spectral_parameters(study: Study) -> Parameters:
    """The nonlinear parameters of a whole-spectrum fit: the free log β (the spectra, and a blank
    offset, are linear and eliminated)."""
    p = study.params
    keep = np.flatnonzero(p.kind == 0)
    names = tuple(p.names[k] for k in keep)
    target = f"log_beta[{study.target}]"
    return Parameters(
        names,
        p.kind[keep],
        p.index[keep],
        p.guess[keep],
        p.prior_sd[keep],
        names.index(target) if target in names else -1,
    )


@dataclass(frozen=True)
class SpectraModel:
    """Readings of fixed tubes at every wavelength as a function of the free log β (batched).

    Attributes
    ----------
    model, spectra, params : the chemistry, the spectra and the nonlinear parameters.
    totals_M : (n, 2) the tubes' totals; ions_M (n, k) their other ions.
    blank : whether a baseline (blank offset) is fitted at every wavelength.
    """

    model: Model
    spectra: Spectra
    params: Parameters
    totals_M: np.ndarray
    ions_M: np.ndarray
    blank: bool = False

    @property
    def free(self) -> np.ndarray:
        """Indices (in Model.absorbers) of the absorbers whose spectra are fitted."""
        return np.flatnonzero(self.spectra.free)

    @property
    def known(self) -> np.ndarray:
        return np.flatnonzero(~self.spectra.free & self.spectra.absorbing)

    @property
    def basis_names(self) -> tuple[str, ...]:
        """Names of the fitted spectra, in the order of the rows of E."""
        names = tuple(self.model.absorbers[a] for a in self.free)
        return names + ((BLANK,) if self.blank else ())

    def state(self, theta: np.ndarray) -> TubeState:
        lb, _, _ = unpack(self.model, self.params, theta)
        T = theta.shape[0]
        tot = np.broadcast_to(self.totals_M, (T,) + self.totals_M.shape)
        ions = np.broadcast_to(self.ions_M, (T,) + self.ions_M.shape)
        return predict(self.model, tot, ions, log_beta=lb, warn=False)

    def basis(self, theta: np.ndarray):
        """(C, ∂C/∂θ, K, ∂K/∂θ) at θ (T, P) for :class:`planner.inference.varpro.SeparableProblem`."""
        theta = np.atleast_2d(theta)
        st = self.state(theta)
        b = self.model.path_cm
        conc = st.absorber_conc_M()  # (T, n, A)
        dconc = concentration_derivatives(self.model, st).dc_dlog_beta[..., self.params.index]  # (T, n, A, P)
        C = b * conc[..., self.free]
        dC = b * dconc[..., self.free, :]
        if self.blank:
            C = np.concatenate([C, np.ones(C.shape[:-1] + (1,))], axis=-1)
            dC = np.concatenate([dC, np.zeros(dC.shape[:-2] + (1, dC.shape[-1]))], axis=-2)
        eps_k = self.spectra.epsilon_M_cm[:, self.known]  # (W, a)
        K = b * conc[..., self.known] @ eps_k.T
        dK = b * np.einsum("tnap,wa->tnwp", dconc[..., self.known, :], eps_k)
        return C, dC, K, dK

    def true_spectra(self) -> np.ndarray:
        """(s, W) the guessed spectra of the fitted absorbers (and a zero baseline)."""
        E = self.spectra.epsilon_M_cm[:, self.free].T
        return np.vstack([E, np.zeros((1, E.shape[1]))]) if self.blank else E

    def linear_readings(self, theta: np.ndarray, E: np.ndarray | None = None) -> np.ndarray:
        """(T, n, W) Beer–Lambert readings at θ with fitted spectra E (s, W) or (T, s, W) (default: the
        guessed spectra)."""
        C, _, K, _ = self.basis(np.atleast_2d(theta))
        return K + C @ (self.true_spectra() if E is None else E)


def spectra_model(study: Study, recipe: Recipe) -> SpectraModel:
    """The separable model of ``recipe``'s tubes for a plan with spectra."""
    assert study.spectra is not None, "the plan has no spectra"
    model = study.model
    tot = totals_M(recipe, model.stock_conc_M)
    ions = tube_ions_M(model, recipe.volumes_mL, recipe.total_volume_mL)
    blank = bool(np.any(study.params.kind == 2))
    return SpectraModel(model, study.spectra, spectral_parameters(study), tot, ions, blank)


@dataclass(frozen=True)
class Expected:
    """What the tubes are expected to read at every wavelength, and the error model of those readings.

    Attributes
    ----------
    state : the tubes' contents (speciation) at the assumed truth.
    readings : the expected readings (:class:`planner.model.spectra.SpectraState`).
    budget : the spectral error budget.
    used : (n, W) readings inside the linear range's top (those above it follow no Beer–Lambert line).
    weights : the whitened error model for the fit.
    """

    state: TubeState
    readings: SpectraState
    budget: SpectraBudget
    used: np.ndarray
    weights: Weights


def expected(
    study: Study,
    recipe: Recipe,
    sm: SpectraModel,
    log_beta: np.ndarray | None = None,
    used: np.ndarray | None = None,
) -> Expected:
    """Expected readings, budget and weights of ``recipe`` at ``log_beta`` (default: the guesses);
    ``used`` (n, W) overrides which readings enter the fit (default: those below the linear range's top)."""
    model = study.model
    st = predict(model, sm.totals_M, sm.ions_M, log_beta=log_beta, warn=False)
    rd = spectra_readings(sm.spectra, st.absorber_conc_M(), model.path_cm)
    dct = concentration_derivatives(model, st).dc_dtotals  # (n, A, 2)
    dA_dt = model.path_cm * np.einsum("nac,wa->nwc", dct, sm.spectra.epsilon_M_cm)
    budget = spectra_budget(totals_errors(study.bench, model, recipe), dA_dt, rd.linear_sd)
    if used is None:
        used = rd.absorbance <= model.linear_range[1]
    return Expected(st, rd, budget, used, Weights.of(rd.linear_sd, budget.loadings, budget.mixing, used))
