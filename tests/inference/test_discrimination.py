"""Detecting a wrong model: the linearised noncentrality, the noncentral χ² power and the compound
(guarded) exchange."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.stats import chi2

from planner.inference.discrimination import LEVEL, linear_noncentrality, power_from_noncentrality
from planner.inference.guard import guarded_design


def _line_and_curvature(n_points: int = 21, size: float = 2.0):
    x = np.linspace(0.0, 1.0, n_points)
    F = np.column_stack([np.ones_like(x), x])  # main model: straight line, σ = 1 (whitened)
    R = (size * x**2)[None, :]  # alternative: the same plus a quadratic term
    return x, F, R


def test_noncentrality_is_the_misfit_left_after_projection():
    # derived: for a linear main model λ = ‖(I − H) r‖², H the hat matrix of the design's rows
    x, F, R = _line_and_curvature()
    counts = np.zeros(x.size, dtype=int)
    counts[[0, 5, 10, 15, 20]] = [2, 1, 1, 1, 2]
    rows = np.repeat(np.arange(x.size), counts)
    Fd, rd = F[rows], R[0, rows]
    resid = rd - Fd @ np.linalg.lstsq(Fd, rd, rcond=None)[0]
    assert linear_noncentrality(F, R, None, counts)[0] == pytest.approx(resid @ resid, rel=1e-10)


def test_power_at_zero_noncentrality_is_the_level():
    # derived: with no misfit the χ² test rejects at its nominal level; no test without degrees of freedom
    assert float(power_from_noncentrality(np.array(0.0), 6)) == pytest.approx(LEVEL, rel=1e-6)
    assert float(power_from_noncentrality(np.array(50.0), 0)) == 0.0


def test_power_matches_a_simulated_noncentral_chi2():
    # derived: Σ (z_i + μ_i)² with Σ μ² = λ is χ²_dof(λ); the share above the 95 % point estimates the power
    rng = np.random.default_rng(3)
    dof, lam = 5, 9.0
    mu = np.full(dof, np.sqrt(lam / dof))
    stat = np.sum((rng.standard_normal((200_000, dof)) + mu) ** 2, axis=1)
    simulated = np.mean(stat > chi2.ppf(1 - LEVEL, dof))
    assert float(power_from_noncentrality(np.array(lam), dof)) == pytest.approx(simulated, abs=0.005)


def test_guard_with_zero_weight_keeps_the_start():
    # the compound criterion at w = 0 is the target criterion alone: nothing moves
    x, F, R = _line_and_curvature()
    counts = np.zeros(x.size, dtype=int)
    counts[[0, 20]] = [4, 4]
    g = guarded_design(F, R, None, 1, counts, 0.0)
    assert g.moves == 0 and np.array_equal(g.counts, counts)


def test_guard_spreads_a_two_point_design_to_see_curvature():
    # derived: the c-optimal design for a slope puts half the points at each end, which cannot see a
    # quadratic term (λ = 0); weighting the check moves tubes inside and makes λ positive (a quadratic
    # term worth 20 reading sd at x = 1, so the check has something to find)
    x, F, R = _line_and_curvature(size=20.0)
    counts = np.zeros(x.size, dtype=int)
    counts[[0, 20]] = [4, 4]
    assert linear_noncentrality(F, R, None, counts)[0] == pytest.approx(0.0, abs=1e-9)
    g = guarded_design(F, R, None, 1, counts, 0.3)
    assert g.counts.sum() == 8 and g.moves >= 1
    assert g.noncentrality[0] > 10.0
    assert np.count_nonzero(g.counts[1:20]) >= 1
