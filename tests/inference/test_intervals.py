"""Profile-likelihood intervals by root-finding: right at every precision, open where the data say so."""

from __future__ import annotations

import numpy as np
import pytest

from planner.inference.intervals import profile_interval
from planner.inference.precision import CHI2_95_1DOF

Z95 = 1.959963984540054  # source: standard normal 97.5 % quantile (scipy.stats.norm.ppf(0.975))


def _line(x):
    """A straight line a + b x: its χ² is exactly quadratic in (a, b), so the profile interval of b is
    b̂ ± z·SE(b) with z² the χ²(1) quantile (Venzon & Moolgavkar 1988, Appl. Stat. 37:87) [derived]."""

    def f(th):
        return th[:, :1] + th[:, 1:2] * x

    def jac(th):
        return np.stack([np.ones((th.shape[0], x.size)), np.broadcast_to(x, (th.shape[0], x.size))], axis=-1)

    return f, jac


@pytest.mark.parametrize("se_wanted", [0.001, 0.003, 0.01, 0.03, 0.1, 0.2, 0.5])
def test_quadratic_profile_gives_1_96_se_at_every_precision(se_wanted):
    # derived: for a linear model the likelihood is quadratic and the 3.84 crossings sit at ±1.96 SE exactly
    # (χ²(1) 95 % = 1.96²), whatever the SE; a fixed grid of 0.025 shrank them when SE ≪ 0.025
    x = np.linspace(0.0, 1.0, 9)
    f, jac = _line(x)
    rng = np.random.default_rng(1)
    X = np.stack([np.ones_like(x), x], axis=1)
    se_unit = float(np.sqrt(np.linalg.inv(X.T @ X)[1, 1]))
    sigma = se_wanted / se_unit
    y = 0.3 + 2.0 * x + sigma * rng.standard_normal((5, x.size))
    theta = np.linalg.lstsq(X, y.T, rcond=None)[0].T  # (5, 2) exact least squares
    chi2 = np.sum(((y - theta @ X.T) / sigma) ** 2, axis=1)
    W = np.eye(x.size) / sigma
    lo, hi = profile_interval(
        f, jac, W, y, theta, 1, se=np.full(5, se_wanted), chi2_min=chi2, lower=[-1e3, -1e3], upper=[1e3, 1e3]
    )
    np.testing.assert_allclose(theta[:, 1] - lo, Z95 * se_wanted, rtol=1e-4)
    np.testing.assert_allclose(hi - theta[:, 1], Z95 * se_wanted, rtol=1e-4)


def test_a_wider_threshold_widens_like_its_square_root():
    # derived: Δχ² ≤ 3.84 s² has half-width 1.96 s SE when the likelihood is quadratic (the interval widened
    # by s = √(χ²/dof))
    x = np.linspace(0.0, 1.0, 6)
    f, jac = _line(x)
    y = (0.1 + 0.5 * x + 0.01 * np.sin(7 * x))[None, :]
    X = np.stack([np.ones_like(x), x], axis=1)
    theta = np.linalg.lstsq(X, y[0], rcond=None)[0][None, :]
    sigma = 0.01
    chi2 = np.sum(((y - theta @ X.T) / sigma) ** 2, axis=1)
    se = sigma * float(np.sqrt(np.linalg.inv(X.T @ X)[1, 1]))
    lo, hi = profile_interval(
        f,
        jac,
        np.eye(6) / sigma,
        y,
        theta,
        1,
        se=np.array([se]),
        chi2_min=chi2,
        threshold=CHI2_95_1DOF * 9.0,
        lower=[-10, -10],
        upper=[10, 10],
    )
    np.testing.assert_allclose([theta[0, 1] - lo[0], hi[0] - theta[0, 1]], 3 * Z95 * se, rtol=1e-4)


def test_a_side_that_never_crosses_is_open():
    # derived: y = exp(k)/(1 + exp(k)) saturates: beyond some k the χ² stops rising, so the interval is open
    # on that side (Raue et al. 2009, Bioinformatics 25:1923: the parameter is only bounded on the other)
    def f(th):
        return np.broadcast_to(1.0 / (1.0 + np.exp(-th[:, :1])), (th.shape[0], 4))

    def jac(th):
        s = 1.0 / (1.0 + np.exp(-th[:, :1]))
        return np.broadcast_to((s * (1 - s))[:, :, None], (th.shape[0], 4, 1))

    y = np.full((1, 4), 0.999)
    theta = np.array([[np.log(0.999 / 0.001)]])
    lo, hi = profile_interval(
        f,
        jac,
        np.eye(4) / 0.01,
        y,
        theta,
        0,
        se=np.array([5.0]),
        chi2_min=np.zeros(1),
        lower=[-20],
        upper=[20],
    )
    assert np.isfinite(lo[0]) and lo[0] < theta[0, 0] and np.isnan(hi[0])
    # the low end is where 4 readings of 0.999 ± 0.01 would rise Δχ² = 3.84: 4 (0.999 − s)² / 0.01² = 3.84
    s_low = 0.999 - 0.01 * np.sqrt(CHI2_95_1DOF / 4)  # derived
    assert lo[0] == pytest.approx(np.log(s_low / (1 - s_low)), rel=1e-5)
