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


def test_guard_with_no_cost_allowed_keeps_the_start():
    # derived: the ends-only design is the unique c-optimal design for a slope, so every move raises the
    # slope's variance; with the cost capped at ×1 nothing may move
    x, F, R = _line_and_curvature()
    counts = np.zeros(x.size, dtype=int)
    counts[[0, 20]] = [4, 4]
    g = guarded_design(F, R, None, 1, counts, 1.0)
    assert g.moves == 0 and np.array_equal(g.counts, counts)


def test_guard_spreads_a_two_point_design_to_see_curvature():
    # derived: the c-optimal design for a slope puts half the points at each end, which cannot see a
    # quadratic term (λ = 0); allowing ×1.3 in the slope's SE moves tubes inside and makes λ positive (a
    # quadratic term worth 20 reading sd at x = 1, so the check has something to find)
    x, F, R = _line_and_curvature(size=20.0)
    counts = np.zeros(x.size, dtype=int)
    counts[[0, 20]] = [4, 4]
    assert linear_noncentrality(F, R, None, counts)[0] == pytest.approx(0.0, abs=1e-9)
    g = guarded_design(F, R, None, 1, counts, 1.3)
    assert g.counts.sum() == 8 and g.moves >= 1
    assert g.noncentrality[0] > 10.0
    assert np.count_nonzero(g.counts[1:20]) >= 1
    # the reported variance and noncentrality are those of the design (direct evaluation)
    rows = np.repeat(np.arange(x.size), g.counts)
    var_direct = np.linalg.inv(F[rows].T @ F[rows])[1, 1]
    assert g.var_target == pytest.approx(var_direct, rel=1e-6)
    assert g.cost <= 1.3 + 1e-9 and g.cost == pytest.approx(np.sqrt(var_direct / 0.5), rel=1e-6)
    assert g.noncentrality[0] == pytest.approx(linear_noncentrality(F, R, None, g.counts)[0], rel=1e-6)


def test_guard_does_not_depend_on_the_units_of_a_parameter():
    # derived: rescaling a column of F (a parameter in other units) rescales M and the relative ridge alike,
    # so the variance ratio and λ — and the design — do not change
    x, F, R = _line_and_curvature(size=20.0)
    counts = np.zeros(x.size, dtype=int)
    counts[[0, 20]] = [4, 4]
    a = guarded_design(F, R, None, 1, counts, 1.3)
    b = guarded_design(F * np.array([1.0, 1e4]), R, None, 1, counts, 1.3)
    c = guarded_design(F * np.array([1e-5, 1.0]), R, None, 1, counts, 1.3)
    assert np.array_equal(a.counts, b.counts) and np.array_equal(a.counts, c.counts)
    assert b.cost == pytest.approx(a.cost, rel=1e-9)


def test_guard_stops_adding_noncentrality_beyond_the_saturation():
    # with the credit for λ capped, the exchange spends the rest on precision: a lower SE, λ still at the cap
    x, F, R = _line_and_curvature(size=20.0)
    counts = np.zeros(x.size, dtype=int)
    counts[[0, 20]] = [4, 4]
    free = guarded_design(F, R, None, 1, counts, np.inf)
    capped = guarded_design(F, R, None, 1, counts, np.inf, lam_cap=12.0)
    assert capped.noncentrality[0] >= 12.0 - 1e-9
    assert capped.var_target < free.var_target


def _block_problem(seed: int = 0, C: int = 9, k: int = 3, P: int = 4, A: int = 2):
    rng = np.random.default_rng(seed)
    F = rng.standard_normal((C, k, P))
    R = rng.standard_normal((A, C, k))
    counts = np.zeros(C, dtype=int)
    counts[[0, 3, 5]] = [2, 1, 2]
    return F, R, counts


def _direct(F, R, counts, target):
    """Var of the target and λ of each alternative with every row of the design listed (no updates)."""
    rows = np.repeat(np.arange(F.shape[0]), counts)
    Fd = F[rows].reshape(-1, F.shape[-1])
    M = Fd.T @ Fd
    cov = np.linalg.inv(M)
    lam = []
    for a in range(R.shape[0]):
        r = R[a, rows].reshape(-1)
        b = Fd.T @ r
        lam.append(r @ r - b @ cov @ b)
    return cov[target, target], np.array(lam)


def test_block_moves_match_a_direct_evaluation_of_every_move():
    # derived: a candidate of k rows is k readings that move together; the Woodbury scores of every move
    # from a support point equal the variance and λ of the moved design evaluated from its rows
    from planner.inference.guard import _block_moves_from, _BlockState

    F, R, counts = _block_problem()
    st = _BlockState(F, R, np.zeros((4, 4)), counts)
    var0, lam0 = st.var_lam(1)
    v_direct, l_direct = _direct(F, R, counts, 1)
    assert var0 == pytest.approx(v_direct, rel=1e-10)
    np.testing.assert_allclose(lam0, l_direct, rtol=1e-9)
    var, lam = _block_moves_from(st, F, R, 3, 1)
    for c in range(F.shape[0]):
        moved = counts.copy()
        moved[3] -= 1
        moved[c] += 1
        v, lam_c = _direct(F, R, moved, 1)
        assert var[c] == pytest.approx(v, rel=1e-8)
        np.testing.assert_allclose(lam[c], lam_c, rtol=1e-7, atol=1e-9)


def test_block_guard_with_one_row_per_candidate_is_the_single_row_guard():
    # derived: k = 1 is the single-reading case; both exchanges make the same moves
    x, F, R = _line_and_curvature(size=20.0)
    counts = np.zeros(x.size, dtype=int)
    counts[[0, 20]] = [4, 4]
    a = guarded_design(F, R, None, 1, counts, 1.3)
    b = guarded_design(F[:, None, :], R[:, :, None], None, 1, counts, 1.3)
    assert np.array_equal(a.counts, b.counts) and a.moves == b.moves
    assert b.var_target == pytest.approx(a.var_target, rel=1e-9)
    np.testing.assert_allclose(b.noncentrality, a.noncentrality, rtol=1e-7)
