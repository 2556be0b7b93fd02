"""What a recipe read as whole spectra gives beside one wavelength: the figures an assessment or design of
whole spectra carries (their JSON: :func:`planner.paper.json_out.spectra_facts_json`)."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .precision import information_by_wavelength
from .reading import Expected, SpectraModel
from .single import SingleWavelengths


@dataclass(frozen=True)
class FactorOutlook:
    """Would a factor analysis of the data matrix find the model's absorbing species?

    Attributes
    ----------
    absorbing_species : species with ε > 0 in the window present in some tube (a fitted baseline counts).
    above_noise : how many of them stand above the noise.
    found_share, found_median : the share of simulated experiments whose factor analysis finds that many,
        and the median count found (None when too few tubes to tell).
    """

    absorbing_species: int
    above_noise: int
    found_share: float | None = None
    found_median: float | None = None


@dataclass(frozen=True)
class SpectraFacts:
    """Every wavelength together against each wavelength alone.

    Attributes
    ----------
    wavelength_nm : (W,) the window's wavelengths.
    fitted_spectra : the species whose spectra are fitted at every wavelength.
    readings_used, readings : readings inside the linear range, and all of them.
    se_whole_spectrum : SE(log β[target]) from every wavelength (NaN when the target is fixed).
    best_single_wavelength_nm, se_best_single_wavelength : the eligible wavelength with the smallest SE on
        its own and that SE (None / NaN when none is eligible).
    information_share : (W,) each wavelength's share of the information about the target, or None.
    se_single : (W,) the SE from that wavelength alone; eligible : (W,) its highest reading in range.
    factors : the factor-analysis outlook, or None when not asked for.
    se_single_wavelength_design, with_single_design : what a design for the working wavelength alone
        would reach there (designs only: ``with_single_design``; None when no such design exists).
    """

    wavelength_nm: np.ndarray
    fitted_spectra: tuple[str, ...]
    readings_used: int
    readings: int
    se_whole_spectrum: float
    best_single_wavelength_nm: float | None
    se_best_single_wavelength: float
    information_share: np.ndarray | None
    se_single: np.ndarray
    eligible: np.ndarray
    factors: FactorOutlook | None = None
    se_single_wavelength_design: float | None = None
    with_single_design: bool = False

    @property
    def se_ratio_single_over_spectrum(self) -> float:
        """How many times smaller the whole spectrum's SE is than the best single wavelength's."""
        se = self.se_whole_spectrum
        return self.se_best_single_wavelength / se if se > 0 else float("nan")


def spectra_facts(
    sm: SpectraModel, ex: Expected, cr, single: SingleWavelengths, fa: FactorOutlook | None
) -> SpectraFacts:
    """The figures of an assessment of whole spectra (``cr`` its Cramér–Rao result, or None)."""
    wl = sm.spectra.wavelength_nm
    t = sm.params.target
    se = float(cr.se[t]) if cr is not None and t >= 0 else float("nan")
    share = information_by_wavelength(cr, sm.totals_M.shape[0], wl.size, t) if cr is not None else None
    return SpectraFacts(
        wavelength_nm=np.asarray(wl, dtype=float),
        fitted_spectra=tuple(sm.basis_names),
        readings_used=int(ex.used.sum()),
        readings=int(ex.used.size),
        se_whole_spectrum=se,
        best_single_wavelength_nm=float(wl[single.best]) if single.best >= 0 else None,
        se_best_single_wavelength=single.best_se,
        information_share=share,
        se_single=single.se,
        eligible=single.eligible,
        factors=fa,
    )
