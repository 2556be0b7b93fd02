"""The χ² tails from scipy.special against scipy.stats (the reference implementation)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.stats import chi2, ncx2

from planner.inference.tails import chi2_cdf, chi2_ppf, chi2_sf, ncx2_sf


@pytest.mark.parametrize("dof", [1, 2, 6, 25])
def test_tails_match_scipy_stats(dof):
    x = np.array([0.1, 1.0, 3.84, 12.0, 40.0])
    np.testing.assert_allclose(chi2_sf(x, dof), chi2.sf(x, dof), rtol=1e-10, atol=1e-300)
    np.testing.assert_allclose(chi2_cdf(x, dof), chi2.cdf(x, dof), rtol=1e-10, atol=1e-300)
    np.testing.assert_allclose(chi2_ppf(0.95, dof), chi2.ppf(0.95, dof), rtol=1e-10)
    np.testing.assert_allclose(ncx2_sf(x, dof, 9.0), ncx2.sf(x, dof, 9.0), rtol=1e-8, atol=1e-12)


def test_known_quantile():
    # source: the 95 % point of χ²(1) is 3.841 (any χ² table, e.g. NIST/SEMATECH e-Handbook §1.3.6.7.4)
    assert float(chi2_ppf(0.95, 1)) == pytest.approx(3.841458820694124, rel=1e-12)


def test_normal_cdf_matches_scipy():
    from scipy.stats import norm

    from planner.inference.tails import norm_cdf

    x = np.linspace(-8, 8, 33)
    np.testing.assert_allclose(norm_cdf(x), norm.cdf(x), rtol=1e-12, atol=1e-300)


@pytest.mark.parametrize("dof", [1, 2, 3, 7, 40, 233])
@pytest.mark.parametrize("nc", [0.01, 0.7, 9.0, 60.0, 400.0])
def test_noncentral_tail_matches_scipy_stats_over_the_range_the_model_check_uses(dof, nc):
    """The power of the χ² test: dof from 1 (one alternative, one reading) to a few hundred (whole
    spectra), noncentrality from barely detectable to certain (the bisection of the model check spans
    1e-2 … 1e3)."""
    # source: scipy.stats.ncx2.sf, the reference implementation of the noncentral χ² distribution
    crit = float(chi2.ppf(0.95, dof))
    x = np.array([0.2 * crit, crit, 3.0 * crit + nc])
    np.testing.assert_allclose(ncx2_sf(x, dof, nc), ncx2.sf(x, dof, nc), rtol=1e-8, atol=1e-13)
    assert np.ndim(ncx2_sf(crit, dof, nc)) == 0
    assert float(ncx2_sf(crit, dof, nc)) == pytest.approx(float(ncx2.sf(crit, dof, nc)), rel=1e-8, abs=1e-13)
