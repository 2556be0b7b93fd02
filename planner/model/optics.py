"""Absorbance: Beer–Lambert, stray-light deviation, and the three-term photometric noise model."""

from __future__ import annotations

import numpy as np

LOG10E = np.log10(np.e)  # 0.4343: d(log10 T)/dT · T


def beer_lambert(conc_M: np.ndarray, epsilon_M_cm: np.ndarray, path_cm: float) -> np.ndarray:
    """True absorbance A = b Σ ε_s c_s over the last axis.

    Parameters
    ----------
    conc_M : (..., S) concentrations of every absorbing species, mol/L.
    epsilon_M_cm : (S,) or (..., S) molar absorptivities, L mol⁻¹ cm⁻¹.
    path_cm : path length, cm.
    """
    return path_cm * np.sum(np.asarray(conc_M) * np.asarray(epsilon_M_cm), axis=-1)


def with_stray_light(absorbance: float | np.ndarray, stray_fraction: float) -> np.ndarray:
    """Observed absorbance with a stray-light fraction s of the incident light.

    A_obs = −log10((10^−A + s) / (1 + s))  [source: ASTM E387].
    """
    a = np.asarray(absorbance, dtype=float)
    if stray_fraction <= 0:
        return a
    s = stray_fraction
    return -np.log10((10.0 ** (-a) + s) / (1.0 + s))


def stray_light_slope(absorbance: np.ndarray, stray_fraction: float) -> np.ndarray:
    """dA_obs/dA, for propagating derivatives through the stray-light curve."""
    a = np.asarray(absorbance, dtype=float)
    if stray_fraction <= 0:
        return np.ones_like(a)
    t = 10.0 ** (-a)
    return t / (t + stray_fraction)


def max_readable_absorbance(stray_fraction: float) -> float:
    """Largest observable absorbance, log10((1 + s)/s) [derived from the stray-light formula]."""
    if stray_fraction <= 0:
        return float("inf")
    return float(np.log10((1 + stray_fraction) / stray_fraction))


def stray_light_limit(stray_fraction: float, deviation: float = 0.01) -> float:
    """True absorbance at which stray light lowers the reading by ``deviation`` (1 % by default).

    Solved by bisection on the monotone ratio A_obs/A; the 1 % cutoff is [common practice].
    """
    if stray_fraction <= 0:
        return float("inf")
    lo, hi = 1e-9, max_readable_absorbance(stray_fraction) * 4
    for _ in range(200):
        mid = 0.5 * (lo + hi)
        if with_stray_light(mid, stray_fraction) / mid > 1 - deviation:
            lo = mid
        else:
            hi = mid
    return 0.5 * (lo + hi)


def photometric_sd(
    absorbance: np.ndarray,
    k1: float | np.ndarray,
    k2: float | np.ndarray = 0.0,
    k3: float | np.ndarray = 0.0,
    display_step: float = 0.0,
) -> np.ndarray:
    """Standard deviation of one absorbance reading.

    σ_A² = 0.4343² [k1² 10^(2A) + k2² (1 + 10^A) + k3²] + (display_step/√12)²
    [source: Rothman, Crouch & Ingle 1975, Anal. Chem. 47:1226; display term GUM F.2.2.1].
    k1: readout/dark noise (σ_T constant); k2: shot noise; k3: flicker / cell positioning (σ_T ∝ T).
    """
    a = np.asarray(absorbance, dtype=float)
    p = 10.0**a
    var = LOG10E**2 * (k1**2 * p**2 + k2**2 * (1.0 + p) + k3**2) + display_step**2 / 12.0
    return np.sqrt(var)


def bandwidth_factor(instrument_bandwidth_nm: float | None, band_fwhm_nm: float | None) -> float:
    """Apparent/true ε for a Gaussian band read with a finite spectral bandwidth.

    ε_app ≈ ε / √(1 + (bandwidth / band width)²) [derived].
    """
    if not instrument_bandwidth_nm or not band_fwhm_nm:
        return 1.0
    return float(1.0 / np.sqrt(1.0 + (instrument_bandwidth_nm / band_fwhm_nm) ** 2))


def gaussian_band_epsilon(wavelength_nm: float, peak_nm: float, fwhm_nm: float, epsilon_max: float) -> float:
    """ε at a wavelength from a Gaussian band (FWHM parametrisation)."""
    sigma = fwhm_nm / (2.0 * np.sqrt(2.0 * np.log(2.0)))
    return float(epsilon_max * np.exp(-0.5 * ((wavelength_nm - peak_nm) / sigma) ** 2))
