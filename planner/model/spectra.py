"""Whole spectra: every absorber's ε over the instrument's window, the instrument per wavelength, and the
readings of every tube at every wavelength.

The absorbance model is the single-wavelength one at each wavelength (Beer–Lambert over every absorber,
the stray-light curve, the three-term photometric noise; domain.md §2), with the instrument's stray light
and noise depending on the wavelength: toward the ends of the window the light reaching the detector
falls (source output, grating and detector response), so the stray fraction s(λ) = s₀/τ(λ) rises,
the readout term k1(λ) = k1/τ(λ) (σ_T fixed in counts) and the shot term k2(λ) = k2/√τ(λ) (Rothman,
Crouch & Ingle 1975, Anal. Chem. 47:1226: their noise terms at a lower signal) while flicker k3 stays.
The relative throughput is τ(λ) = 1/(1 + (r − 1) u²), u = (λ − centre)/(half width) ∈ [−1, 1], r the
plan's ``optics.edge_rise`` (stray light at the window's ends over that at its centre).

A finite spectral bandwidth smooths every spectrum: a Gaussian band (FWHM w) read through a Gaussian
slit (FWHM b) is a Gaussian of FWHM √(w² + b²) with its peak lowered by w/√(w² + b²) (the convolution
of two Gaussians; the same factor as :func:`planner.model.optics.bandwidth_factor`); a tabulated
spectrum is convolved numerically with that slit.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import optics

FWHM_TO_SIGMA = 1.0 / (2.0 * np.sqrt(2.0 * np.log(2.0)))  # source: Gaussian FWHM = 2√(2 ln 2) σ


@dataclass(frozen=True)
class Spectra:
    """The species' spectra and the instrument over the window, as arrays.

    Attributes
    ----------
    wavelength_nm : (W,) the instrument's wavelengths.
    epsilon_M_cm : (W, 2 + S) ε of every absorber (Model.absorbers order) as the instrument reads it
        (bandwidth applied), L mol⁻¹ cm⁻¹.
    epsilon_rsd : (W, 2 + S) relative uncertainty of each ε guess.
    free : (2 + S,) True for an absorber whose spectrum is fitted (its rsd > 0 somewhere): a nuisance
        spectrum, one ε per wavelength.
    stray_light : (W,) stray-light fraction at each wavelength.
    noise_k : (W, 3) photometric noise terms k1, k2, k3 at each wavelength (transmittance units).
    display_step : absorbance display resolution.
    """

    wavelength_nm: np.ndarray
    epsilon_M_cm: np.ndarray
    epsilon_rsd: np.ndarray
    free: np.ndarray
    stray_light: np.ndarray
    noise_k: np.ndarray
    display_step: float = 0.0

    def __repr__(self) -> str:
        w = self.wavelength_nm
        return f"Spectra({w.size} wavelengths {w[0]:g}–{w[-1]:g} nm, {int(self.absorbing.sum())} absorbers)"

    @property
    def size(self) -> int:
        return int(self.wavelength_nm.size)

    @property
    def absorbing(self) -> np.ndarray:
        """(2 + S,) True for an absorber with ε > 0 somewhere in the window."""
        return np.any(self.epsilon_M_cm > 0, axis=0)

    def index_nearest(self, wavelength_nm: float) -> int:
        return int(np.argmin(np.abs(self.wavelength_nm - wavelength_nm)))

    def at(self, wavelength_nm: np.ndarray) -> Spectra:
        """The same spectra and instrument at other wavelengths inside the window (linear
        interpolation: the readings of an instrument whose grid differs from the plan's step)."""
        x = np.asarray(wavelength_nm, dtype=float)
        w = self.wavelength_nm

        def interp(a: np.ndarray) -> np.ndarray:
            return np.stack([np.interp(x, w, a[:, j]) for j in range(a.shape[1])], axis=-1)

        return Spectra(
            x,
            interp(self.epsilon_M_cm),
            interp(self.epsilon_rsd),
            self.free,
            np.interp(x, w, self.stray_light),
            interp(self.noise_k),
            self.display_step,
        )


def throughput(wavelength_nm: np.ndarray, edge_rise: float) -> np.ndarray:
    """Relative light throughput τ(λ) over the window (1 at its centre, 1/edge_rise at its ends)."""
    w = np.asarray(wavelength_nm, dtype=float)
    centre, half = 0.5 * (w[0] + w[-1]), 0.5 * (w[-1] - w[0])
    u = (w - centre) / half if half > 0 else np.zeros_like(w)
    return 1.0 / (1.0 + (edge_rise - 1.0) * u**2)


def instrument(
    wavelength_nm: np.ndarray, stray_light: float, noise_k: tuple[float, float, float], edge_rise: float
) -> tuple[np.ndarray, np.ndarray]:
    """Stray-light fraction (W,) and noise terms (W, 3) at every wavelength (see the module docstring)."""
    tau = throughput(wavelength_nm, edge_rise)
    k1, k2, k3 = noise_k
    k = np.stack([k1 / tau, k2 / np.sqrt(tau), np.full_like(tau, k3)], axis=-1)
    return np.minimum(stray_light / tau, 0.5), k


def band_spectrum(
    wavelength_nm: np.ndarray, peak_nm: float, fwhm_nm: float, epsilon_max: float, bandwidth_nm: float | None
) -> np.ndarray:
    """ε(λ) of a Gaussian band as read with a Gaussian slit of FWHM ``bandwidth_nm`` (None: no slit)."""
    b = bandwidth_nm or 0.0
    width = np.hypot(fwhm_nm, b)
    peak = epsilon_max * fwhm_nm / width
    sigma = width * FWHM_TO_SIGMA
    return peak * np.exp(-0.5 * ((np.asarray(wavelength_nm, dtype=float) - peak_nm) / sigma) ** 2)


def slit_smoothed(
    table_nm: np.ndarray, table_values: np.ndarray, wavelength_nm: np.ndarray, bandwidth_nm: float | None
) -> np.ndarray:
    """A tabulated spectrum (L, k) as read at ``wavelength_nm`` through a Gaussian slit of FWHM
    ``bandwidth_nm``: linear interpolation of the table, then the slit's weights over the table's own
    range (renormalised near its ends). None or 0: plain interpolation."""
    table_nm = np.asarray(table_nm, dtype=float)
    vals = np.asarray(table_values, dtype=float)
    grid = np.asarray(wavelength_nm, dtype=float)

    def interp(x):
        return np.stack([np.interp(x, table_nm, vals[:, j]) for j in range(vals.shape[1])], axis=-1)

    if not bandwidth_nm:
        return interp(grid)
    sigma = bandwidth_nm * FWHM_TO_SIGMA
    step = min(float(np.min(np.diff(table_nm))), sigma / 4.0)
    offsets = np.arange(-4.0 * sigma, 4.0 * sigma + step / 2, step)  # ±4σ holds 99.99 % of the slit
    x = grid[:, None] + offsets[None, :]
    inside = (x >= table_nm[0]) & (x <= table_nm[-1])
    w = np.exp(-0.5 * (offsets / sigma) ** 2)[None, :] * inside
    v = interp(x.ravel()).reshape(x.shape + (vals.shape[1],))
    return np.einsum("gk,gkj->gj", w, v) / w.sum(axis=1)[:, None]


@dataclass(frozen=True)
class SpectraState:
    """Every tube's readings at every wavelength.

    Attributes
    ----------
    absorbance_true : (..., n, W) Beer–Lambert absorbance.
    absorbance : (..., n, W) expected reading (stray light included).
    absorbance_sd : (..., n, W) photometric sd of one reading.
    slope : (..., n, W) dA_obs/dA_true of the stray-light curve.
    """

    absorbance_true: np.ndarray
    absorbance: np.ndarray
    absorbance_sd: np.ndarray
    slope: np.ndarray

    @property
    def linear_sd(self) -> np.ndarray:
        """Photometric sd of the readings once the stray-light curve is undone (:func:`linearise`)."""
        return self.absorbance_sd / self.slope


def spectra_readings(
    spectra: Spectra, conc_M: np.ndarray, path_cm: float, epsilon_M_cm: np.ndarray | None = None
) -> SpectraState:
    """Readings at every wavelength from the absorbers' concentrations ``conc_M`` (..., n, 2 + S)
    (:meth:`planner.model.compiled.TubeState.absorber_conc_M`); ``epsilon_M_cm`` (..., W, 2 + S)
    replaces the spectra (e.g. a Monte-Carlo draw)."""
    eps = spectra.epsilon_M_cm if epsilon_M_cm is None else np.asarray(epsilon_M_cm, dtype=float)
    a_true = path_cm * np.matmul(conc_M, np.swapaxes(eps, -1, -2))
    s = spectra.stray_light
    a_obs = -np.log10((10.0 ** (-a_true) + s) / (1.0 + s))
    k = spectra.noise_k
    sd = optics.photometric_sd(a_obs, k[:, 0], k[:, 1], k[:, 2], display_step=spectra.display_step)
    t = 10.0 ** (-a_true)
    return SpectraState(a_true, a_obs, sd, t / (t + s))


def linearise(absorbance: np.ndarray, stray_light: np.ndarray) -> np.ndarray:
    """Undo the stray-light curve: A_true = −log10((1 + s) 10^−A_obs − s), the inverse of
    :func:`planner.model.optics.with_stray_light` at each wavelength. Readings at or past the largest
    readable absorbance (where no A_true exists) come back as NaN."""
    s = np.asarray(stray_light, dtype=float)
    arg = (1.0 + s) * 10.0 ** (-np.asarray(absorbance, dtype=float)) - s
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(arg > 0, -np.log10(np.where(arg > 0, arg, 1.0)), np.nan)
