"""Absorbance model: Beer–Lambert, stray light, photometric noise."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.optimize import minimize_scalar

from planner.model import optics


def test_beer_lambert_sums_absorbers():
    c = np.array([[1e-4, 2e-4], [0.0, 1e-3]])
    eps = np.array([1000.0, 50.0])
    # derived: A = b Σ ε c
    np.testing.assert_allclose(optics.beer_lambert(c, eps, 2.0), [2.0 * (0.1 + 0.01), 2.0 * 0.05])


def test_max_readable_absorbance():
    # derived from A_obs = −log10((10^−A + s)/(1 + s)) as A → ∞: log10((1+s)/s); s = 0.1 %T → 3.0004
    assert optics.max_readable_absorbance(0.001) == pytest.approx(np.log10(1001 / 0.001 / 1000), rel=1e-12)
    assert optics.with_stray_light(50.0, 0.001) == pytest.approx(np.log10(1.001 / 0.001), rel=1e-9)


def test_stray_light_value():
    # derived by hand: A = 1, s = 0.001: −log10((0.1 + 0.001)/1.001) = −log10(0.100899) = 0.99611
    assert optics.with_stray_light(1.0, 0.001) == pytest.approx(-np.log10(0.101 / 1.001), rel=1e-12)
    assert optics.with_stray_light(1.0, 0.001) == pytest.approx(0.99611, abs=1e-5)


def test_stray_light_limit_is_one_percent_deviation():
    a = optics.stray_light_limit(0.001)
    assert optics.with_stray_light(a, 0.001) / a == pytest.approx(0.99, rel=1e-9)
    # derived by hand: A = 1.58, T = 0.02630: A_obs = −log10(0.02730/1.001) = 1.5643, ratio 0.9901
    assert 1.575 < a < 1.59


def test_stray_light_slope_matches_numeric():
    a = np.linspace(0.05, 2.5, 20)
    h = 1e-6
    num = (optics.with_stray_light(a + h, 0.002) - optics.with_stray_light(a - h, 0.002)) / (2 * h)
    np.testing.assert_allclose(optics.stray_light_slope(a, 0.002), num, rtol=1e-7)


def _rel_error_minimum(**k) -> float:
    res = minimize_scalar(
        lambda a: optics.photometric_sd(a, **k) / a,
        bounds=(0.05, 3.0),
        method="bounded",
        options={"xatol": 1e-9},
    )
    return res.x


def test_ringbom_minimum_for_readout_noise():
    # source: Ringbom 1939 — σ_A/A is minimal at A = log10(e) = 0.4343 when only k1 (σ_T const) acts
    assert _rel_error_minimum(k1=0.003) == pytest.approx(0.4343, abs=1e-4)


def test_shot_noise_minimum():
    # derived: k2 alone has its minimum at A ≈ 0.963
    assert _rel_error_minimum(k1=0.0, k2=0.003) == pytest.approx(0.963, abs=2e-3)


def test_flicker_alone_constant_sd():
    # source: Rothman, Crouch & Ingle 1975: σ_T ∝ T gives σ_A = 0.4343 k3, independent of A
    sd = optics.photometric_sd(np.array([0.1, 1.0, 2.0]), k1=0.0, k3=0.01)
    np.testing.assert_allclose(sd, 0.4343 * 0.01, rtol=1e-4)


def test_noise_three_terms_value():
    # derived from the three-term formula at A = 1: 0.4343² (k1² 100 + k2² 11 + k3²)
    k1, k2, k3 = 0.003, 0.002, 0.001
    expected = np.log10(np.e) * np.sqrt(k1**2 * 100 + k2**2 * 11 + k3**2)
    assert optics.photometric_sd(1.0, k1, k2, k3) == pytest.approx(expected, rel=1e-12)


def test_display_step_adds_rectangular_term():
    # source: GUM F.2.2.1 — a resolution δ contributes δ/√12
    assert optics.photometric_sd(0.5, 0.0, display_step=0.001) == pytest.approx(0.001 / np.sqrt(12))


def test_bandwidth_factor():
    # derived: bandwidth/band width = 0.1 keeps ≥ 99.5 % of the peak
    assert optics.bandwidth_factor(10.0, 100.0) == pytest.approx(1 / np.sqrt(1.01))
    assert optics.bandwidth_factor(10.0, 100.0) > 0.995
    assert optics.bandwidth_factor(None, 100.0) == 1.0


@settings(max_examples=60, deadline=None)
@given(st.floats(0.0, 3.0), st.floats(1e-5, 0.05))
def test_stray_light_never_raises_absorbance(a, s):
    obs = optics.with_stray_light(a, s)
    assert obs <= a + 1e-12 and obs <= optics.max_readable_absorbance(s) + 1e-12
