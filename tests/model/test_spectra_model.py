"""The instrument over a window and the slit: checks against closed forms."""

from __future__ import annotations

import numpy as np

from planner.model import optics
from planner.model.spectra import band_spectrum, instrument, linearise, slit_smoothed, throughput


def test_numerical_slit_matches_the_closed_form_for_a_gaussian_band():
    # source: the convolution of two Gaussians is a Gaussian whose variances add (FWHM² add)
    table = np.arange(300.0, 900.0, 0.5)
    band = band_spectrum(table, 560.0, 80.0, 1000.0, None)
    grid = np.arange(450.0, 680.0, 1.0)
    numeric = slit_smoothed(table, band[:, None], grid, 25.0)[:, 0]
    closed = band_spectrum(grid, 560.0, 80.0, 1000.0, 25.0)
    assert np.allclose(numeric, closed, rtol=2e-3, atol=1e-6 * 1000)
    assert np.allclose(
        slit_smoothed(table, band[:, None], grid, None)[:, 0], band_spectrum(grid, 560, 80, 1000, None)
    )


def test_linearise_undoes_the_stray_light_curve():
    a = np.linspace(0.0, 2.0, 41)
    for s in (0.0, 1e-4, 1e-3, 0.01):
        assert np.allclose(linearise(optics.with_stray_light(a, s), np.full_like(a, s)), a, atol=1e-12)
    assert np.isnan(linearise(np.array([5.0]), np.array([0.01]))[0])  # past log10((1 + s)/s)


def test_stray_light_and_readout_noise_rise_toward_the_window_ends():
    w = np.linspace(400, 700, 31)
    tau = throughput(w, 3.0)
    assert tau[15] == 1.0 and np.isclose(tau[0], 1 / 3) and np.isclose(tau[-1], 1 / 3)
    stray, k = instrument(w, 1e-3, (0.002, 0.001, 0.0005), 3.0)
    assert np.isclose(stray[0], 3e-3) and np.isclose(stray[15], 1e-3)
    assert (
        np.isclose(k[0, 0], 0.006) and np.isclose(k[0, 1], 0.001 * np.sqrt(3)) and np.all(k[:, 2] == 0.0005)
    )
    flat_s, flat_k = instrument(w, 1e-3, (0.002, 0.0, 0.0), 1.0)
    assert np.all(flat_s == 1e-3) and np.all(flat_k[:, 0] == 0.002)
