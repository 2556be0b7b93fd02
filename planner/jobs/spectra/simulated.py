"""Simulated whole-spectrum readings of a recipe (every error source), for examples, the demo and tests."""

from __future__ import annotations

import numpy as np

from ...inference.simulate import simulate
from ...inference.study import Study
from ...inputs.recipe import Recipe
from ...inputs.spectra_readings import SpectraReadings
from ...model.spectra import spectra_readings


def simulated_spectra(
    study: Study, recipe: Recipe, rng: np.random.Generator, *, log_beta: np.ndarray | None = None
) -> SpectraReadings:
    """One experiment of ``recipe`` read at every wavelength of the plan's window: the tubes' volumes and
    the stocks drawn once, every reading with its photometric noise (:func:`planner.inference.simulate`)."""
    model, spectra = study.model, study.spectra
    assert spectra is not None, "the plan has no spectra"
    exp = simulate(study.bench, model, recipe, rng, 1, log_beta=log_beta, photometric=False)
    rd = spectra_readings(spectra, exp.state.absorber_conc_M()[0], model.path_cm)
    y = rd.absorbance + rd.absorbance_sd * rng.standard_normal(rd.absorbance.shape)
    return SpectraReadings(recipe.tubes, spectra.wavelength_nm.copy(), np.round(y, 5), recipe)
