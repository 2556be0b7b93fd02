"""Tests of planner.inference (approximate, exchange, design_criteria): published optimal designs, equivalence
theorem, exchange invariants."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import HealthCheck, given, reject, settings
from hypothesis import strategies as st

from planner.inference import design_criteria, exchange
from planner.inference.approximate import ApproximateDesign, approximate_design, sensitivity
from planner.inference.design_criteria import CRITERIA, DesignError, criterion_of_counts
from planner.inference.exchange import ExactDesign, exact_design
from planner.paper.json_out import to_json

# --------------------------------------------------------------------------------------------------
# Models (Jacobians written out by hand, independent of the module)
# --------------------------------------------------------------------------------------------------

K_M = 200.0  # formation constant, 1/M: a trace of metal titrated with ligand in excess
X_M = 0.05  # largest ligand concentration, M (K·X = 10)


def hyperbolic(x, K=K_M, a=1.0, log_k=False, baseline=False):
    """Rows (C, 1, P) of y = [b +] a K x / (1 + K x) w.r.t. ([b,] a, K) or ([b,] a, ln K)."""
    dy_da = K * x / (1 + K * x)
    dy_dK = a * x / (1 + K * x) ** 2
    cols = [dy_da, K * dy_dK if log_k else dy_dK]
    if baseline:
        cols.insert(0, np.ones_like(x))
    return np.stack(cols, axis=-1)[:, None, :]


def polynomial(x, degree):
    return np.stack([x**k for k in range(degree + 1)], axis=-1)[:, None, :]


def x1_of(K=K_M, X=X_M):
    return X / (2 + K * X)  # source: Duggleby 1979, J. Theor. Biol. 81:671; Rasch 1990


def weight_near(x, w, x0, h):
    """Total weight within h of x0 and its weighted mean position."""
    near = np.abs(x - x0) <= h * (1 + 1e-9)
    return w[near].sum(), (w[near] @ x[near]) / max(w[near].sum(), 1e-300)


def info(F, x):
    """Information Σ x_c F_cᵀF_c computed directly, (P, P)."""
    F = np.asarray(F)[..., :, :]
    return np.einsum("c,crp,crq->pq", x, F, F)


GRID = np.linspace(0.0, X_M, 2001)  # spacing X/2000
H = GRID[1] - GRID[0]


# --------------------------------------------------------------------------------------------------
# 1–2. Hyperbolic model: Duggleby 1979; Dette, Kiss, Bevanda & Bretz 2010
# --------------------------------------------------------------------------------------------------


@pytest.mark.parametrize("log_k", [False, True])
def test_hyperbolic_d_optimal_half_at_x1_half_at_X(log_k):
    ad = approximate_design(hyperbolic(GRID, log_k=log_k), criterion="all")
    assert ad.converged
    w_x1, mean_x1 = weight_near(GRID, ad.weights, x1_of(), H)
    # source: Duggleby 1979, J. Theor. Biol. 81:671 (half the weight at X, half at X/(2 + KX))
    assert w_x1 == pytest.approx(0.5, abs=1e-3)
    assert ad.weights[-1] == pytest.approx(0.5, abs=1e-3)
    assert abs(mean_x1 - x1_of()) <= H
    assert w_x1 + ad.weights[-1] == pytest.approx(1.0, abs=1e-9)  # nothing elsewhere


def test_d_optimal_support_invariant_to_reparametrisation():
    # source: Duggleby 1979 / Rasch 1990: D-optimality is invariant to (a, K) → (a, log K)
    w_K = approximate_design(hyperbolic(GRID), criterion="all").weights
    w_logK = approximate_design(hyperbolic(GRID, log_k=True), criterion="all").weights
    np.testing.assert_allclose(w_K, w_logK, atol=1e-6)


def test_hyperbolic_exact_even_n_splits_between_x1_and_X():
    grid = np.linspace(0.0, X_M, 201)
    h = grid[1] - grid[0]
    ex = exact_design(hyperbolic(grid), 10, criterion="all", rng=np.random.default_rng(3))
    lo = np.searchsorted(grid, x1_of()) - 1  # lattice points bracketing x1
    assert grid[lo] < x1_of() < grid[lo + 1]
    # source: Duggleby 1979: n/2 at X and n/2 at (the lattice point next to) x1
    assert ex.counts[-1] == 5
    assert ex.counts[lo] + ex.counts[lo + 1] == 5
    assert ex.counts.sum() == 10 and np.count_nonzero(ex.counts) == 2
    assert abs(grid[np.flatnonzero(ex.counts)[0]] - x1_of()) <= h


def test_hyperbolic_with_baseline_thirds_at_0_x1_X():
    ad = approximate_design(hyperbolic(GRID, baseline=True), criterion="all")
    assert ad.converged
    w_x1, mean_x1 = weight_near(GRID, ad.weights, x1_of(), H)
    # source: Dette, Kiss, Bevanda & Bretz 2010, Biometrika 97:513 (Emax model, thirds at 0, x1, X)
    assert ad.weights[0] == pytest.approx(1 / 3, abs=1e-3)
    assert w_x1 == pytest.approx(1 / 3, abs=1e-3)
    assert ad.weights[-1] == pytest.approx(1 / 3, abs=1e-3)
    assert abs(mean_x1 - x1_of()) <= H


def test_hyperbolic_with_baseline_exact_thirds():
    grid = np.linspace(0.0, X_M, 201)
    ex = exact_design(hyperbolic(grid, baseline=True), 9, criterion="all", rng=np.random.default_rng(0))
    lo = np.searchsorted(grid, x1_of()) - 1
    # source: Dette et al. 2010: n/3 tubes at each of 0, x1, X
    assert ex.counts[0] == 3 and ex.counts[-1] == 3
    assert ex.counts[lo] + ex.counts[lo + 1] == 3


# --------------------------------------------------------------------------------------------------
# 3. Equivalence theorem, checked with independent linear algebra
# --------------------------------------------------------------------------------------------------


def test_equivalence_theorem_d():
    F = hyperbolic(GRID, baseline=True)
    ad = approximate_design(F, criterion="all")
    M = info(F, ad.weights)
    d = np.einsum("cp,pq,cq->c", F[:, 0], np.linalg.inv(M), F[:, 0])
    p = 3
    # source: Kiefer & Wolfowitz 1960, Canad. J. Math. 12:363: max_x f(x)ᵀM⁻¹f(x) <= p, = p on the support
    assert d.max() <= p * (1 + 1e-3)
    np.testing.assert_allclose(d[ad.support], p, rtol=1e-6)
    assert ad.bound == pytest.approx(p, rel=1e-8)
    assert ad.max_sensitivity == pytest.approx(d.max(), rel=1e-6)
    np.testing.assert_allclose(sensitivity(F, ad.weights, criterion="all"), d, rtol=1e-6, atol=1e-9)


def test_equivalence_theorem_target():
    F = hyperbolic(GRID)
    ad = approximate_design(F, criterion="target", target=1)
    assert ad.converged
    Minv = np.linalg.inv(info(F, ad.weights))
    e = np.array([0.0, 1.0])
    lhs = (F[:, 0] @ Minv @ e) ** 2
    # source: Pukelsheim 1993, Optimal Design of Experiments, ch. 2 (c-optimality, Elfving):
    # max_x (f(x)ᵀM⁻¹c)² <= cᵀM⁻¹c, with equality on the support
    assert lhs.max() <= (e @ Minv @ e) * (1 + 1e-3)
    np.testing.assert_allclose(lhs[ad.support], e @ Minv @ e, rtol=1e-6)
    assert ad.bound == pytest.approx(1.0, rel=1e-8)  # derived: the bound divided by the variance
    assert ad.criterion_value == pytest.approx(np.log(e @ Minv @ e), rel=1e-8)


def test_equivalence_theorem_with_prior_information():
    F = hyperbolic(GRID, baseline=True)
    M0 = np.diag([4.0e2, 0.0, 0.0])  # a prior on the baseline b
    n = 12
    ad = approximate_design(F, criterion="all", M0=M0, n_tubes=n)
    M = M0 + n * info(F, ad.weights)
    Minv = np.linalg.inv(M)
    d = n * np.einsum("cp,pq,cq->c", F[:, 0], Minv, F[:, 0])
    bound = 3 - np.trace(Minv @ M0)  # derived: Σ w d = tr(M⁻¹(M − M0))
    assert d.max() <= bound * (1 + 1e-3)
    assert ad.bound == pytest.approx(bound, rel=1e-6)
    # The prior makes the tube at x = 0 (which only measures b) less useful: less weight there.
    plain = approximate_design(F, criterion="all")
    assert ad.weights[0] < plain.weights[0] - 0.05


def test_atwood_efficiency_bound_holds_for_a_poor_design():
    F = hyperbolic(GRID)
    uniform = np.full(GRID.size, 1.0 / GRID.size)
    d = sensitivity(F, uniform, criterion="all")
    opt = approximate_design(F, criterion="all")
    eff = np.exp((criterion_of_counts(F, uniform, criterion="all") - opt.criterion_value) / 2)
    # source: Atwood 1969, Ann. Math. Stat. 40:1570: D-efficiency >= p / max_x d(x, ξ)
    assert 2 / d.max() <= eff < 1
    assert opt.efficiency_lower_bound >= 1 - 1e-5


# --------------------------------------------------------------------------------------------------
# 4. Polynomial regression on [-1, 1]
# --------------------------------------------------------------------------------------------------

LINE = np.linspace(-1.0, 1.0, 401)


def test_linear_regression_d_optimal_ends():
    ad = approximate_design(polynomial(LINE, 1), criterion="all")
    # source: Atkinson, Donev & Tobias 2007, Optimum Experimental Designs, with SAS (polynomial
    # regression): half the trials at each end of [-1, 1]
    np.testing.assert_allclose(ad.weights[[0, -1]], [0.5, 0.5], atol=1e-6)


def test_quadratic_regression_d_optimal_thirds():
    ad = approximate_design(polynomial(LINE, 2), criterion="all")
    # source: Atkinson, Donev & Tobias 2007 (as above): thirds at -1, 0, 1
    np.testing.assert_allclose(ad.weights[[0, 200, -1]], [1 / 3] * 3, atol=1e-6)
    ex = exact_design(polynomial(LINE, 2), 6, criterion="all", rng=np.random.default_rng(1))
    np.testing.assert_array_equal(ex.counts[[0, 200, -1]], [2, 2, 2])


def test_cubic_regression_d_optimal_support():
    x = np.linspace(-1.0, 1.0, 2001)
    ad = approximate_design(polynomial(x, 3), criterion="all")
    h = x[1] - x[0]
    # source: Guest 1958, Ann. Math. Stat. 29:294 [from memory]: support at ±1 and the roots of
    # P3'(x) ∝ 5x² − 1, i.e. ±1/√5, weight 1/4 each
    for x0 in (-1.0, -1 / np.sqrt(5), 1 / np.sqrt(5), 1.0):
        w_near, _ = weight_near(x, ad.weights, x0, h)
        assert w_near == pytest.approx(0.25, abs=1e-3)


def test_target_slope_of_line_and_singular_quadratic_designs():
    # derived: var(b1) = σ²/Σ(x − x̄)², minimal with half the tubes at each end: n·var = 1
    line = approximate_design(polynomial(LINE, 1), criterion="target", target=1)
    np.testing.assert_allclose(line.weights[[0, -1]], [0.5, 0.5], atol=1e-6)
    assert line.criterion_value == pytest.approx(0.0, abs=1e-6)
    # Quadratic, slope only: the same two-point design is c-optimal although its information is
    # singular (3 parameters, 2 support points); b1 = (y(1) − y(−1))/2 is estimable. [derived]
    quad = approximate_design(polynomial(LINE, 2), criterion="target", target=1)
    assert quad.converged
    np.testing.assert_allclose(quad.weights[[0, -1]], [0.5, 0.5], atol=1e-4)
    assert quad.criterion_value == pytest.approx(0.0, abs=1e-6)
    # Quadratic, curvature: weights 1/4, 1/2, 1/4 at -1, 0, 1 and n·var(b2) = 4
    # derived: b2 = (y(1) + y(−1))/2 − y(0); Elfving (1952, Ann. Math. Stat. 23:255) allocation n_i ∝ |c_i|
    curv = approximate_design(polynomial(LINE, 2), criterion="target", target=2)
    np.testing.assert_allclose(curv.weights[[0, 200, -1]], [0.25, 0.5, 0.25], atol=1e-4)
    assert curv.criterion_value == pytest.approx(np.log(4.0), abs=1e-5)


# --------------------------------------------------------------------------------------------------
# 5. Exact versus approximate and versus a naive design
# --------------------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    "F, criterion, target, n",
    [
        (hyperbolic(np.linspace(0, X_M, 301)), "all", None, 7),
        (hyperbolic(np.linspace(0, X_M, 301), baseline=True), "all", None, 8),
        (hyperbolic(np.linspace(0, X_M, 301), baseline=True), "target", 2, 5),
        (polynomial(np.linspace(-1, 1, 101), 3), "all", None, 10),
        (polynomial(np.linspace(-1, 1, 101), 2), "target", 1, 5),
    ],
)
def test_exact_never_beats_approximate_and_beats_even_spacing(F, criterion, target, n):
    ad = approximate_design(F, criterion=criterion, target=target, n_tubes=n)
    ex = exact_design(F, n, criterion=criterion, target=target, rng=np.random.default_rng(0), approx=ad)
    assert 0 < ex.efficiency <= 1 + 1e-9  # derived: the approximate optimum bounds every exact design
    approx_value = criterion_of_counts(F, n * ad.weights, criterion=criterion, target=target)
    assert approx_value == pytest.approx(ad.criterion_value, rel=1e-9, abs=1e-9)
    even = np.zeros(F.shape[0])
    np.add.at(even, np.round(np.linspace(0, F.shape[0] - 1, n)).astype(int), 1)  # common practice
    even_value = criterion_of_counts(F, even, criterion=criterion, target=target)
    if criterion == "all":
        assert ex.criterion_value >= even_value - 1e-12
        assert ex.efficiency == pytest.approx(np.exp((ex.criterion_value - approx_value) / F.shape[-1]))
    else:
        assert ex.criterion_value <= even_value + 1e-12
        assert ex.efficiency == pytest.approx(np.exp(approx_value - ex.criterion_value))


def brute_force_best(F, n, criterion, target):
    """Best design of n tubes over all multisets of candidates (tiny problems only)."""
    from itertools import combinations_with_replacement

    best = None
    for combo in combinations_with_replacement(range(F.shape[-3]), n):
        counts = np.bincount(combo, minlength=F.shape[-3])
        v = criterion_of_counts(F, counts, criterion=criterion, target=target)
        v = v if criterion == "all" else -v
        best = v if best is None else max(best, v)
    return best if criterion == "all" else -best


def test_exact_matches_brute_force_on_small_problem():
    F = hyperbolic(np.linspace(0, X_M, 9), baseline=True)
    for criterion, target in (("all", None), ("target", 2)):
        ex = exact_design(F, 4, criterion=criterion, target=target, rng=np.random.default_rng(0))
        # derived: exhaustive search over all 495 designs of 4 tubes on 9 candidates
        assert ex.criterion_value == pytest.approx(brute_force_best(F, 4, criterion, target), abs=1e-10)


# --------------------------------------------------------------------------------------------------
# 6. Invariants (hypothesis)
# --------------------------------------------------------------------------------------------------


@st.composite
def problems(draw):
    G = draw(st.integers(1, 2))
    C = draw(st.integers(2, 9))
    R = draw(st.integers(1, 2))
    P = draw(st.integers(1, 3))
    seed = draw(st.integers(0, 2**31 - 1))
    g = np.random.default_rng(seed)
    F = g.normal(size=(G, C, R, P)) * g.lognormal(0.0, 1.0, size=P)
    if draw(st.booleans()):  # duplicated candidates
        F = F[:, g.integers(0, C, size=C)]
    criterion = draw(st.sampled_from(CRITERIA))
    target = draw(st.integers(0, P - 1)) if criterion == "target" else None
    n = draw(st.integers(max(1, -(-P // R)), 6))
    return F, criterion, target, n


def moves_improve(F, counts, criterion, target, value):
    """Whether any move of one tube to another candidate improves the design (brute force)."""
    sign = 1.0 if criterion == "all" else -1.0
    for i in np.flatnonzero(counts):
        for j in range(counts.size):
            if j == i:
                continue
            trial = counts.copy()
            trial[i] -= 1
            trial[j] += 1
            v = criterion_of_counts(F, trial, criterion=criterion, target=target)
            if sign * (v - value) > 1e-9 * max(1.0, abs(value)):
                return True
    return False


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(problems(), st.integers(0, 2**32 - 1))
def test_exact_design_invariants(problem, seed):
    F, criterion, target, n = problem
    try:
        ex = exact_design(F, n, criterion=criterion, target=target, rng=np.random.default_rng(seed), starts=3)
    except DesignError:  # parameters not identifiable from these candidates
        reject()
    assert ex.counts.dtype.kind == "i"
    assert np.all(ex.counts >= 0) and ex.counts.sum() == n
    assert ex.efficiency <= 1 + 1e-9
    # Same seed, same design.
    again = exact_design(F, n, criterion=criterion, target=target, rng=np.random.default_rng(seed), starts=3)
    np.testing.assert_array_equal(ex.counts, again.counts)
    # The reported value is the value of the counts, and no single move of a tube improves it
    # (the stopping rule of the Fedorov exchange).
    value = criterion_of_counts(F, ex.counts, criterion=criterion, target=target)
    assert value == pytest.approx(ex.criterion_value, rel=1e-9, abs=1e-9)
    assert not moves_improve(F, ex.counts, criterion, target, value)


@settings(max_examples=40, deadline=None)
@given(problems(), st.randoms(use_true_random=False))
def test_permuting_candidates_permutes_the_design(problem, rnd):
    F, criterion, target, n = problem
    perm = np.array(rnd.sample(range(F.shape[1]), F.shape[1]))
    Fp = F[:, perm]
    counts = np.random.default_rng(rnd.randint(0, 1000)).integers(0, 3, size=F.shape[1])
    counts[0] += 1
    try:
        v = criterion_of_counts(F, counts, criterion=criterion, target=target)
    except DesignError:  # parameters not identifiable from these candidates
        reject()
    vp = criterion_of_counts(Fp, counts[perm], criterion=criterion, target=target)
    assert vp == pytest.approx(v, rel=1e-9, abs=1e-9)
    a = approximate_design(F, criterion=criterion, target=target)
    ap = approximate_design(Fp, criterion=criterion, target=target)
    assert a.converged and ap.converged
    # The optimum value is unique (convex problem); the weights may differ only where the optimum is not.
    assert ap.criterion_value == pytest.approx(a.criterion_value, rel=1e-6, abs=1e-6)
    assert criterion_of_counts(Fp, a.weights[perm], criterion=criterion, target=target) == pytest.approx(
        a.criterion_value, rel=1e-9, abs=1e-9
    )


@settings(max_examples=15, deadline=None)
@given(st.randoms(use_true_random=False), st.integers(0, 2**32 - 1))
def test_permutation_of_a_unique_exact_optimum(rnd, seed):
    grid = np.linspace(0.0, X_M, 41)
    F = hyperbolic(grid, baseline=True)
    perm = np.array(rnd.sample(range(grid.size), grid.size))
    ex = exact_design(F, 6, criterion="all", rng=np.random.default_rng(seed), starts=2)
    exp = exact_design(F[perm], 6, criterion="all", rng=np.random.default_rng(seed), starts=2)
    np.testing.assert_array_equal(exp.counts, ex.counts[perm])


# --------------------------------------------------------------------------------------------------
# 7. Robust (pseudo-Bayesian) designs
# --------------------------------------------------------------------------------------------------


def clusters(idx):
    """Number of runs of adjacent grid indices."""
    return int(1 + np.count_nonzero(np.diff(np.sort(idx)) > 1)) if idx.size else 0


def test_robust_design_spreads_over_log_k_and_beats_local():
    grid = np.linspace(0.0, X_M, 1001)
    Ks = K_M * 10.0 ** np.linspace(-1.5, 1.5, 7)  # prior nodes over 3 decades of K
    F_nodes = np.stack([hyperbolic(grid, K=K, log_k=True) for K in Ks])
    local = approximate_design(hyperbolic(grid, log_k=True), criterion="all")
    robust = approximate_design(F_nodes, criterion="all")
    assert robust.converged
    # source: Braess & Dette 2007, Ann. Stat. 35:772: more support points as the prior widens
    assert clusters(local.support) == 2
    assert clusters(robust.support) >= 3
    n = 12
    v_robust = criterion_of_counts(F_nodes, n * robust.weights, criterion="all")
    v_local = criterion_of_counts(F_nodes, n * local.weights, criterion="all")
    assert v_robust > v_local + 0.1  # derived: the robust optimum maximises the node average
    # The robust value is the node average of log det(M/n), computed directly.
    direct = np.mean([np.linalg.slogdet(info(Fg, robust.weights))[1] for Fg in F_nodes])
    assert robust.criterion_value == pytest.approx(direct, rel=1e-8)
    # Exact designs keep the ordering.
    rng = np.random.default_rng(5)
    ex_r = exact_design(F_nodes, n, criterion="all", rng=rng, approx=robust)
    ex_l = exact_design(hyperbolic(grid, log_k=True), n, criterion="all", rng=rng)
    assert ex_r.criterion_value > criterion_of_counts(F_nodes, ex_l.counts, criterion="all")


def test_robust_target_averages_log_variance():
    grid = np.linspace(0.0, X_M, 501)
    Ks = K_M * 10.0 ** np.array([-1.0, 0.0, 1.0])
    F_nodes = np.stack([hyperbolic(grid, K=K, log_k=True) for K in Ks])
    nu = np.array([0.25, 0.5, 0.25])
    ad = approximate_design(F_nodes, criterion="target", target=1, node_weights=nu)
    assert ad.converged
    e = np.array([0.0, 1.0])
    logv = [np.log(e @ np.linalg.inv(info(Fg, ad.weights)) @ e) for Fg in F_nodes]
    assert ad.criterion_value == pytest.approx(nu @ logv, rel=1e-8)  # derived: Σ ν log v
    # Equivalence theorem for the averaged criterion (derived: d_c = Σ ν f_cᵀM⁻¹e e ᵀM⁻¹f_c / v)
    d = sum(
        nu_g * (Fg[:, 0] @ np.linalg.inv(info(Fg, ad.weights)) @ e) ** 2 / np.exp(lv)
        for nu_g, Fg, lv in zip(nu, F_nodes, logv, strict=True)
    )
    assert d.max() <= 1 + 1e-3
    assert ad.max_sensitivity == pytest.approx(d.max(), rel=1e-5)


# --------------------------------------------------------------------------------------------------
# Normalisation, directional derivative, prior information
# --------------------------------------------------------------------------------------------------


def test_criterion_is_per_tube():
    F = hyperbolic(np.linspace(0, X_M, 21), baseline=True)
    counts = np.array([2] + [0] * 9 + [1] + [0] * 9 + [2])
    for criterion, target in (("all", None), ("target", 1)):
        v1 = criterion_of_counts(F, counts, criterion=criterion, target=target)
        v3 = criterion_of_counts(F, 3 * counts, criterion=criterion, target=target)
        assert v3 == pytest.approx(v1, abs=1e-9)  # derived: replicating every tube scales M by 3


def test_sensitivity_is_the_directional_derivative():
    F = hyperbolic(np.linspace(0, X_M, 15), baseline=True)
    w = np.linspace(1.0, 2.0, 15)
    w /= w.sum()
    n, eps = 10.0, 1e-6
    M0 = np.diag([50.0, 0.0, 0.0])
    for criterion, target, sign in (("all", None, 1.0), ("target", 2, -1.0)):
        d = sensitivity(F, w, criterion=criterion, target=target, M0=M0, n_tubes=n)
        base = criterion_of_counts(F, n * w, criterion=criterion, target=target, M0=M0)
        for c in (0, 7, 14):
            moved = (1 - eps) * w
            moved[c] += eps
            fd = (criterion_of_counts(F, n * moved, criterion=criterion, target=target, M0=M0) - base) / eps
            # derived: dφ/dα along ξ → δ_c is ±(d_c − Σ w d) (log det, or −log v for target)
            assert sign * fd == pytest.approx(d[c] - w @ d, rel=1e-4, abs=1e-6)


def test_known_parameter_via_prior_gives_single_point_design():
    F = hyperbolic(GRID)
    M0 = np.diag([1e10, 0.0])  # a known amplitude a
    ad = approximate_design(F, criterion="all", M0=M0, n_tubes=10)
    # derived: with a known, the information on K is (∂y/∂K)² = (a x/(1 + Kx)²)², whose maximiser on
    # [0, X] is x = 1/K = 0.005 M, so the D-optimal design is a single point there
    w_near, mean = weight_near(GRID, ad.weights, 1 / K_M, H)
    assert w_near == pytest.approx(1.0, abs=1e-3)
    assert abs(mean - 1 / K_M) <= H


@pytest.mark.parametrize("m0, n", [(3.0, 30), (3.0, 300), (30.0, 300), (30.0, 30)])
def test_prior_acts_as_tubes_already_made(m0, n):
    # derived: f(0) = e_b, so a prior m0 on the baseline is m0 tubes at x = 0 made in advance; the
    # design of n tubes completes thirds of n + m0: w0 = 1/3 − 2 m0/(3n) (clipped at 0), and
    # w_x1 = w_X = 1/3 + m0/(3n) while w0 > 0 (Dette et al. 2010 for the thirds)
    F = hyperbolic(GRID, baseline=True)
    ad = approximate_design(F, criterion="all", M0=np.diag([m0, 0.0, 0.0]), n_tubes=n)
    w0 = max(1 / 3 - 2 * m0 / (3 * n), 0.0)
    assert ad.weights[0] == pytest.approx(w0, abs=1e-6)
    assert ad.weights[-1] == pytest.approx(0.5 if w0 == 0 else 1 / 3 + m0 / (3 * n), abs=1e-3)


def test_update_formulas_match_direct_evaluation():
    g = np.random.default_rng(11)
    for R in (1, 2):
        F = g.normal(size=(2, 7, R, 3))
        x = np.array([2, 0, 1, 0, 1, 1, 0])
        for criterion, target in (("all", None), ("target", 1)):
            prob = design_criteria.problem_of(F, criterion, target, None, None, float(x.sum()), True)
            state = exchange._State(prob, x.astype(np.int64))
            parts = state.parts()
            sup = np.flatnonzero(x)
            pair = state.pair_delta(parts, state.parts(sup))
            sign = -1.0 if criterion == "all" else 1.0  # internal loss = −value (D) or value (target)
            base = criterion_of_counts(F, x, criterion=criterion, target=target)
            for a, i in enumerate(sup):
                for j in range(7):
                    if j == i:
                        continue
                    y = x.copy()
                    y[i] -= 1
                    y[j] += 1
                    direct = sign * (criterion_of_counts(F, y, criterion=criterion, target=target) - base)
                    assert pair[a, j] == pytest.approx(direct, abs=1e-8)  # derived: rank-2R update


# --------------------------------------------------------------------------------------------------
# Results and errors
# --------------------------------------------------------------------------------------------------


def test_results_summary_and_repr():
    F = hyperbolic(np.linspace(0, X_M, 51))
    ad = approximate_design(F, criterion="all")
    ex = exact_design(F, 4, criterion="all", rng=np.random.default_rng(0), approx=ad)
    assert isinstance(ad, ApproximateDesign) and isinstance(ex, ExactDesign)
    s = to_json(ad)
    assert sum(s["weights"]) == pytest.approx(1.0) and len(s["support"]) == len(s["weights"])
    assert sum(to_json(ex)["counts"]) == 4
    assert "converged=True" in repr(ad) and "n=4" in repr(ex)
    assert ex.starts == 8


@pytest.mark.parametrize(
    "kwargs, match",
    [
        ({"criterion": "A"}, "unknown criterion"),
        ({"criterion": "target"}, "needs target"),
        ({"criterion": "target", "target": 5}, "out of range"),
        ({"criterion": "all", "M0": np.eye(2)}, "n_tubes is required"),
        ({"criterion": "all", "M0": np.eye(3), "n_tubes": 4}, "M0 has shape"),
        ({"criterion": "all", "M0": -np.eye(2), "n_tubes": 4}, "positive semi-definite"),
        ({"criterion": "all", "node_weights": [0.5, 0.4]}, "node_weights"),
    ],
)
def test_user_errors_name_the_fix(kwargs, match):
    F = hyperbolic(np.linspace(0, X_M, 11))
    with pytest.raises(DesignError, match=match):
        approximate_design(F, **kwargs)


def test_more_user_errors():
    F = hyperbolic(np.linspace(0, X_M, 11))
    with pytest.raises(DesignError, match="shape"):
        approximate_design(F[:, 0], criterion="all")
    with pytest.raises(DesignError, match="NaN"):
        approximate_design(np.full_like(F, np.nan), criterion="all")
    with pytest.raises(DesignError, match="no candidate"):
        approximate_design(np.concatenate([F, np.zeros_like(F[..., :1])], axis=-1), criterion="all")
    with pytest.raises(DesignError, match="not all identifiable"):
        approximate_design(np.concatenate([F, F[..., :1]], axis=-1), criterion="all")
    with pytest.raises(DesignError, match="cannot determine"):
        exact_design(F, 1, criterion="all", rng=np.random.default_rng(0))
    with pytest.raises(DesignError, match="Generator"):
        exact_design(F, 4, criterion="all", rng=0)
    with pytest.raises(DesignError, match="positive integer"):
        exact_design(F, 0, criterion="all", rng=np.random.default_rng(0))
    ad = approximate_design(F, criterion="target", target=1)
    with pytest.raises(DesignError, match="another problem"):
        exact_design(F, 4, criterion="all", rng=np.random.default_rng(0), approx=ad)
    with pytest.raises(DesignError, match="non-negative"):
        criterion_of_counts(F, -np.ones(11), criterion="all")
    with pytest.raises(DesignError, match="entries"):
        sensitivity(F, np.ones(3), criterion="all")
