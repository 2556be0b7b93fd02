"""What the whole-spectrum figures show: the species' spectra, each tube's expected spectrum, and each
wavelength's share of the information (computed here; :mod:`planner.paper.spectra_figures` draws)."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ...inference.study import Study
from ...inputs.recipe import Recipe
from .reading import expected, spectra_model


@dataclass(frozen=True)
class SpectraCurves:
    """Arrays for the report's whole-spectrum figures.

    Attributes
    ----------
    wavelength_nm : (W,).
    names : the absorbers with a spectrum in the window; epsilon (k, W) their ε (as read), fitted (k,)
        True for the spectra the fit estimates.
    tubes : tube labels; absorbance (n, W) each tube's expected spectrum.
    linear_range : (lo, hi).
    """

    wavelength_nm: np.ndarray
    names: tuple[str, ...]
    epsilon: np.ndarray
    fitted: np.ndarray
    tubes: tuple[str, ...]
    absorbance: np.ndarray
    linear_range: tuple[float, float]


def spectra_curves(study: Study, recipe: Recipe) -> SpectraCurves:
    """The species' spectra and the tubes' expected spectra at the guess."""
    sp = study.spectra
    assert sp is not None, "the plan has no spectra"
    sm = spectra_model(study, recipe)
    ex = expected(study, recipe, sm)
    ab = np.flatnonzero(sp.absorbing)
    return SpectraCurves(
        sp.wavelength_nm,
        tuple(study.model.absorbers[a] for a in ab),
        sp.epsilon_M_cm[:, ab].T,
        sp.free[ab],
        recipe.tubes,
        ex.readings.absorbance,
        tuple(study.model.linear_range),
    )
