"""Tests for planner.model (closed_forms, speciation, newton): conditional constants, the 1:1 closed form, the
equilibrium solver and
its analytic sensitivities."""

import re
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from planner.model import newton
from planner.model.closed_forms import (
    EquilibriumError,
    conditional_log_beta,
    one_to_one,
    overall_from_stepwise,
    stepwise_from_overall,
)
from planner.model.sensitivities import sensitivities
from planner.model.speciation import Speciation, speciate
from planner.paper.json_out import to_json

try:
    import mpmath
except ImportError:  # the reference-value tests below need it; the rest of the file does not
    mpmath = None
needs_mpmath = pytest.mark.skipif(mpmath is None, reason="mpmath (test extra) not installed")


def rel_residuals(spec, stoich_pq):
    """Relative mass-balance residuals of a Speciation, computed independently of the solver."""
    st_ = np.asarray(stoich_pq, dtype=float)
    TM = spec.free_M + spec.species_M @ st_[:, 0]
    TL = spec.free_L + spec.species_M @ st_[:, 1]
    M = spec.M_tot_M
    L = spec.L_tot_M
    rM = np.where(M > 0, np.abs(TM - M) / np.where(M > 0, M, 1.0), np.abs(TM))
    rL = np.where(L > 0, np.abs(TL - L) / np.where(L > 0, L, 1.0), np.abs(TL))
    return rM, rL


# ---------------------------------------------------------------------------------------------------
# conditional constants, stepwise / overall


def test_conditional_log_beta_folds_protons():
    stoich = np.array([[1, 1, 0], [0, 1, 1], [0, 1, 2], [1, 0, -1]])
    lb = np.array([7.3, 9.9, 16.8, -9.9])
    out = conditional_log_beta(lb, stoich, pH=5.0)
    # log beta + r log10[H+] = log beta - r pH: HL 9.9 - 5, H2L 16.8 - 10, MOH -9.9 + 5  # derived
    np.testing.assert_allclose(out, [7.3, 4.9, 6.8, -4.9], atol=1e-14)


def test_conditional_log_beta_broadcasts_over_tubes_and_needs_pH():
    stoich = np.array([[1, 1, 0], [0, 1, 1]])
    out = conditional_log_beta([4.0, 9.0], stoich, pH=np.array([2.0, 3.0, 4.0]))
    assert out.shape == (3, 2)
    np.testing.assert_allclose(out[:, 1], [7.0, 6.0, 5.0], atol=1e-14)  # derived
    np.testing.assert_array_equal(conditional_log_beta([4.0], [[1, 1, 0]]), [4.0])
    with pytest.raises(ValueError, match="pH is required"):
        conditional_log_beta([4.0, 9.0], stoich)
    with pytest.raises(ValueError, match="shape \\(S, 3\\)"):
        conditional_log_beta([4.0], [[1, 1]], pH=3.0)


def test_stepwise_and_overall_constants():
    # beta_n = K_1 ... K_n: log beta = cumulative sums of log K  # derived: β_n = K_1 … K_n by definition
    log_K = np.array([7.32, 6.18, 4.10])
    log_beta = overall_from_stepwise(log_K)
    np.testing.assert_allclose(log_beta, [7.32, 13.50, 17.60], atol=1e-12)
    np.testing.assert_allclose(stepwise_from_overall(log_beta), log_K, atol=1e-12)


def test_speciation_obeys_each_stepwise_constant():
    # ML_n / (ML_(n-1) L) = K_n in the solution of a 1:1 / 1:2 / 1:3 system  # derived (beta_n = K_1..K_n)
    log_K = np.array([5.0, 4.0, 3.0])
    stoich = [[1, 1], [1, 2], [1, 3]]
    spec = speciate([1e-3, 1e-4], [2e-3, 5e-2], stoich, overall_from_stepwise(log_K))
    ML, ML2, ML3 = spec.species_M[:, 0], spec.species_M[:, 1], spec.species_M[:, 2]
    np.testing.assert_allclose(np.log10(ML / (spec.free_M * spec.free_L)), 5.0, atol=1e-12)
    np.testing.assert_allclose(np.log10(ML2 / (ML * spec.free_L)), 4.0, atol=1e-12)
    np.testing.assert_allclose(np.log10(ML3 / (ML2 * spec.free_L)), 3.0, atol=1e-12)


# ---------------------------------------------------------------------------------------------------
# the 1:1 closed form


def mp_one_to_one(M0, L0, K):
    """[ML] by the textbook quadratic root, in 50-digit arithmetic (independent of the code's form)."""
    with mpmath.workdps(50):
        M0, L0, K = mpmath.mpf(M0), mpmath.mpf(L0), mpmath.mpf(K)
        s = M0 + L0 + 1 / K
        return (s - mpmath.sqrt(s * s - 4 * M0 * L0)) / 2


def test_one_to_one_hand_worked():
    # M0 = L0 = 1 mM, K = 1000 /M: K x^2 - (K M0 + K L0 + 1) x + K M0 L0 = 0 is x^2 - 3e-3 x + 1e-6 = 0,
    # x = 1e-3 (3 - sqrt 5) / 2 = 3.8197e-4 M  # derived by hand from the quadratic
    expected = 1e-3 * (3.0 - 5.0**0.5) / 2.0
    assert one_to_one(1e-3, 1e-3, 1e3) == pytest.approx(expected, rel=1e-14)
    assert expected == pytest.approx(3.8197e-4, rel=1e-4)


@needs_mpmath
def test_one_to_one_against_mpmath_where_the_textbook_form_fails():
    # M0 = L0 = 1e-6 M, K = 1e-3 /M: [ML] ~ K M0 L0 = 1e-15 M; in double precision s^2 - 4 M0 L0 rounds
    # to s^2, so the textbook form returns 0 (every digit lost)  # derived
    M0 = L0 = 1e-6
    K = 1e-3
    exact = float(mp_one_to_one(M0, L0, K))
    ours = float(one_to_one(M0, L0, K))
    s = M0 + L0 + 1 / K
    textbook = (s - np.sqrt(s * s - 4 * M0 * L0)) / 2
    assert abs(ours - exact) / exact <= 1e-12
    assert abs(textbook - exact) / exact > 0.5


@needs_mpmath
def test_one_to_one_grid_against_mpmath():
    K = 10.0 ** np.arange(-3, 31, 3)
    tot = 10.0 ** np.arange(-10, 1, 2)
    KK, MM, LL = np.meshgrid(K, tot, tot, indexing="ij")
    ours = one_to_one(MM, LL, KK)
    exact = np.array(
        [float(mp_one_to_one(m, l_, k)) for m, l_, k in zip(MM.ravel(), LL.ravel(), KK.ravel(), strict=True)]
    ).reshape(ours.shape)
    # source: 50-digit mpmath solution of the quadratic computed above; tolerance from the brief
    assert np.max(np.abs(ours - exact) / exact) <= 1e-12


@needs_mpmath
def test_one_to_one_zero_totals_and_broadcasting():
    assert one_to_one(0.0, 1e-3, 1e5) == 0.0
    assert one_to_one(1e-3, 0.0, 1e5) == 0.0
    assert one_to_one(1e-3, 1e-3, 0.0) == 0.0  # K = 0: no complex  # derived
    out = one_to_one(np.array([1e-3, 2e-3])[:, None], np.array([1e-3, 1e-2, 0.1]), np.array([1e2, 1e4, 1e6]))
    assert out.shape == (2, 3)
    assert out[1, 2] == pytest.approx(float(mp_one_to_one(2e-3, 0.1, 1e6)), rel=1e-13)
    with pytest.raises(EquilibriumError, match="K must be finite"):
        one_to_one(1e-3, 1e-3, -1.0)
    with pytest.raises(EquilibriumError, match="M_tot_M"):
        one_to_one(-1e-3, 1e-3, 1.0)


@settings(max_examples=40, deadline=None)
@given(
    M=st.floats(-10, 0).map(lambda u: 10.0**u),
    L=st.lists(st.floats(-10, 0), min_size=2, max_size=30).map(lambda u: np.sort(10.0 ** np.array(u))),
    logK=st.floats(-3, 30),
)
def test_ML_rises_with_ligand_total(M, L, logK):
    # more ligand binds more metal in a 1:1 system  # derived (d[ML]/dL0 > 0)
    for stoich, lb in (([[1, 1]], [logK]), ([[1, 1], [1, 2]], [logK, -np.inf])):  # closed form, solver
        ML = speciate(M, L, stoich, lb).species_M[:, 0]
        assert np.all(np.diff(ML) >= -1e-13 * ML[1:])


# ---------------------------------------------------------------------------------------------------
# the general solver

MENU = [(1, 1), (1, 2), (1, 3), (2, 1), (2, 2), (0, 1), (1, 0), (2, 0), (0, 2)]

totals_strategy = st.lists(
    st.one_of(st.just(0.0), st.floats(-10, 0).map(lambda u: 10.0**u)), min_size=1, max_size=40
)


@settings(max_examples=80, deadline=None)
@given(
    species=st.lists(st.sampled_from(MENU), min_size=1, max_size=5, unique=True),
    data=st.data(),
)
def test_solver_is_robust_over_the_whole_range(species, data):
    """log beta -3..30, totals 1e-10..1 M or 0: residual <= 1e-10, no NaN, nothing negative (brief)."""
    M = np.array(data.draw(totals_strategy))
    L = np.array(
        data.draw(st.lists(st.sampled_from(list(M) + [0.0, 1e-10, 1.0]), min_size=M.size, max_size=M.size))
    )
    lb = np.array(data.draw(st.lists(st.floats(-3, 30), min_size=len(species), max_size=len(species))))
    spec = speciate(M, L, species, lb)
    for arr in (spec.free_M, spec.free_L, spec.species_M):
        assert np.all(np.isfinite(arr)) and np.all(arr >= 0.0)
    rM, rL = rel_residuals(spec, species)
    assert rM.max() <= 1e-10 and rL.max() <= 1e-10


@pytest.mark.parametrize(
    "species",
    [
        [(1, 1), (1, 2)],
        [(1, 1), (1, 2), (1, 3), (0, 1), (1, 0)],
        [(1, 1), (2, 1), (2, 2), (1, 2)],
        [(1, 1), (2, 0), (0, 2), (1, 2)],
    ],
)
def test_solver_random_sweep(species):
    # a large seeded sweep complements the hypothesis search with volume
    rng = np.random.default_rng(7)
    n = 30_000
    M = 10.0 ** rng.uniform(-10, 0, n)
    L = 10.0 ** rng.uniform(-10, 0, n)
    M[rng.random(n) < 0.02] = 0.0
    L[rng.random(n) < 0.02] = 0.0
    lb = rng.uniform(-3, 30, (n, len(species)))
    spec = speciate(M, L, species, lb)
    rM, rL = rel_residuals(spec, species)
    assert rM.max() <= 1e-10 and rL.max() <= 1e-10
    assert np.all(spec.species_M >= 0.0) and np.all(np.isfinite(spec.species_M))


def test_solver_matches_closed_form_on_a_1_to_1_system():
    # a second species with beta = 0 makes the system 1:1 but sends it through the iterative solver
    rng = np.random.default_rng(3)
    M = 10.0 ** rng.uniform(-10, 0, 2000)
    L = 10.0 ** rng.uniform(-10, 0, 2000)
    logK = rng.uniform(-3, 30, 2000)
    ref = one_to_one(M, L, 10.0**logK)
    spec = speciate(M, L, [[1, 1], [1, 2]], np.column_stack([logK, np.full(2000, -np.inf)]))
    # the solver is converged to a relative residual 2e-14 of each total, so [ML] may be off by about
    # that much of the smaller total where ML is a small part of it  # derived
    err = np.abs(spec.species_M[:, 0] - ref)
    assert np.all(err <= 1e-12 * ref + 1e-13 * np.minimum(M, L))
    np.testing.assert_array_equal(spec.species_M[:, 1], 0.0)


def test_reduced_and_two_variable_solvers_agree(monkeypatch):
    # p <= 1 systems take the one-variable path; forcing them through the two-variable Newton must give
    # the same equilibrium (both converge to a relative residual 2e-14)
    rng = np.random.default_rng(13)
    n = 5000
    species = [(1, 1), (1, 2), (1, 3), (0, 1), (1, 0)]
    M = 10.0 ** rng.uniform(-10, 0, n)
    L = 10.0 ** rng.uniform(-10, 0, n)
    M[:50] = 0.0
    L[50:100] = 0.0
    lb = rng.uniform(-3, 30, (n, len(species)))
    reduced = speciate(M, L, species, lb)
    calls = []

    def refuse(lnb, sy, M_, L_):
        calls.append(M_.size)
        return (
            np.zeros(M_.size, dtype=bool),
            np.zeros((sy.S, M_.size)),
            np.zeros(M_.size),
            np.zeros(M_.size),
        )

    monkeypatch.setattr(newton, "_solve_p1", refuse)
    general = speciate(M, L, species, lb)
    assert sum(calls) == n
    # both satisfy the balances to 2e-14; 1e-9 leaves room for the conditioning of the free species
    np.testing.assert_allclose(reduced.species_M, general.species_M, rtol=1e-9, atol=0)
    np.testing.assert_allclose(reduced.free_L, general.free_L, rtol=1e-9)


def test_one_to_one_path_returns_consistent_free_concentrations():
    M = np.array([1e-3, 1e-6, 0.0, 0.5])
    L = np.array([1e-3, 1e-2, 1e-3, 1e-10])
    spec = speciate(M, L, [[1, 1]], [25.0])
    np.testing.assert_array_equal(spec.species_M[:, 0], one_to_one(M, L, 1e25))
    rM, rL = rel_residuals(spec, [[1, 1]])
    assert rM.max() <= 1e-14 and rL.max() <= 1e-14
    # strong complex at equivalence: free M = free L = sqrt(M0 / K) to first order  # derived
    assert spec.free_M[0] == pytest.approx(np.sqrt(1e-3 / 1e25), rel=1e-6)


def test_zero_totals_give_exact_zeros():
    species = [(1, 1), (1, 2), (0, 1), (1, 0), (2, 0)]
    lb = [5.0, 9.0, 2.0, -1.0, 3.0]
    spec = speciate([0.0, 1e-3, 0.0], [1e-3, 0.0, 0.0], species, lb)
    p = np.array(species)[:, 0]
    q = np.array(species)[:, 1]
    assert spec.free_M[0] == 0.0 and np.all(spec.species_M[0, p > 0] == 0.0)
    assert spec.free_L[1] == 0.0 and np.all(spec.species_M[1, q > 0] == 0.0)
    assert np.all(spec.species_M[2] == 0.0) and spec.free_M[2] == 0.0 and spec.free_L[2] == 0.0
    # L only, with HL (beta 100): [L] = L0 / 101  # derived
    assert spec.free_L[0] == pytest.approx(1e-3 / 101, rel=1e-13)
    # M only, with MOH (0.1) and M2 (1000 /M): m + 0.1 m + 2000 m^2 = 1e-3  # derived
    m = spec.free_M[1]
    assert m + 0.1 * m + 2 * 1e3 * m * m == pytest.approx(1e-3, rel=1e-13)


@settings(max_examples=25, deadline=None)
@given(seed=st.integers(0, 2**32 - 1), n=st.integers(2, 200))
def test_permutation_equivariance(seed, n):
    rng = np.random.default_rng(seed)
    species = [(1, 1), (1, 2), (2, 1), (0, 1)]
    M = 10.0 ** rng.uniform(-10, 0, n)
    L = 10.0 ** rng.uniform(-10, 0, n)
    lb = rng.uniform(-3, 30, (n, 4))
    perm = rng.permutation(n)
    a = speciate(M, L, species, lb)
    b = speciate(M[perm], L[perm], species, lb[perm])
    np.testing.assert_allclose(b.species_M, a.species_M[perm], rtol=1e-12, atol=0)
    np.testing.assert_allclose(b.free_M, a.free_M[perm], rtol=1e-12, atol=0)
    np.testing.assert_allclose(b.free_L, a.free_L[perm], rtol=1e-12, atol=0)


@settings(max_examples=25, deadline=None)
@given(
    seed=st.integers(0, 2**32 - 1),
    trials=st.integers(1, 4),
    tubes=st.integers(1, 12),
    species=st.sampled_from([[(1, 1), (1, 2)], [(1, 1), (2, 1), (0, 1)]]),
)
def test_results_do_not_depend_on_batching_shape(seed, trials, tubes, species):
    rng = np.random.default_rng(seed)
    M = 10.0 ** rng.uniform(-6, -2, (trials, tubes))
    L = 10.0 ** rng.uniform(-6, -2, (trials, tubes))
    S = len(species)
    lb = rng.uniform(2.0, 12.0, S) + rng.normal(0, 0.3, (trials, 1, S))  # one constant set per trial
    spec = speciate(M, L, species, lb)
    assert spec.species_M.shape == (trials, tubes, S) and spec.free_M.shape == (trials, tubes)
    for t in range(trials):
        one = speciate(M[t], L[t], species, lb[t, 0])
        np.testing.assert_allclose(spec.species_M[t], one.species_M, rtol=1e-12, atol=0)
    flat = speciate(M.ravel(), L.ravel(), species, np.broadcast_to(lb, (trials, tubes, S)).reshape(-1, S))
    np.testing.assert_allclose(spec.species_M.reshape(-1, S), flat.species_M, rtol=1e-12, atol=0)
    # transposed batch: tubes along the first axis
    tr = speciate(M.T, L.T, species, np.swapaxes(lb, 0, 1))
    np.testing.assert_allclose(tr.species_M, np.swapaxes(spec.species_M, 0, 1), rtol=1e-12, atol=0)


def test_results_do_not_depend_on_block_position():
    # batches larger than one solver block: each tube's result equals its result alone
    rng = np.random.default_rng(5)
    n = newton._BLOCK * 2 + 17
    species = [(1, 1), (1, 2), (1, 0)]
    M = 10.0 ** rng.uniform(-10, 0, n)
    L = 10.0 ** rng.uniform(-10, 0, n)
    lb = rng.uniform(-3, 30, (n, 3))
    big = speciate(M, L, species, lb)
    for i in rng.choice(n, 20, replace=False):
        one = speciate(M[i], L[i], species, lb[i])
        np.testing.assert_allclose(big.species_M[i], one.species_M, rtol=1e-12, atol=0)


def test_speciation_summary_and_repr():
    spec = speciate([1e-3, 2e-3], [1e-3, 1e-3], [[1, 1], [1, 2]], [4.0, 7.0])
    summ = to_json(spec)
    assert set(summ) == {"free_M", "free_L", "species_M", "M_tot_M", "L_tot_M"}
    assert summ["species_M"][1] == spec.species_M[1].tolist()
    assert "2 species" in repr(spec) and isinstance(spec, Speciation)


def test_user_errors_name_the_problem():
    with pytest.raises(EquilibriumError, match=r"M_tot_M must be finite and >= 0.*\[1\]"):
        speciate([1e-3, -1e-3], 1e-3, [[1, 1], [1, 2]], [4.0, 7.0])
    with pytest.raises(EquilibriumError, match="L_tot_M"):
        speciate(1e-3, np.nan, [[1, 1], [1, 2]], [4.0, 7.0])
    with pytest.raises(EquilibriumError, match="log_beta_cond must be finite"):
        speciate(1e-3, 1e-3, [[1, 1], [1, 2]], [4.0, np.nan])
    with pytest.raises(EquilibriumError, match="one per species"):
        speciate(1e-3, 1e-3, [[1, 1], [1, 2]], [4.0, 7.0, 9.0])
    with pytest.raises(EquilibriumError, match="p = q = 0"):
        speciate(1e-3, 1e-3, [[1, 1], [0, 0]], [4.0, 7.0])
    with pytest.raises(EquilibriumError, match=">= 0"):
        speciate(1e-3, 1e-3, [[1, 1], [-1, 2]], [4.0, 7.0])
    with pytest.raises(EquilibriumError, match="do not broadcast"):
        speciate(np.ones(3) * 1e-3, np.ones(4) * 1e-3, [[1, 1], [1, 2]], [4.0, 7.0])


def test_fallback_solves_tubes_newton_gives_up_on(monkeypatch):
    # cripple Newton (2 iterations from a start 40 e-folds off) so that every tube goes to the bracketed
    # nested solve; the answer must still satisfy the mass balances
    rng = np.random.default_rng(2)
    species = [(1, 1), (1, 2), (2, 1), (0, 1)]
    n = 300
    M = 10.0 ** rng.uniform(-10, 0, n)
    L = 10.0 ** rng.uniform(-10, 0, n)
    lb = rng.uniform(-3, 30, (n, 4))
    reference = speciate(M, L, species, lb)
    calls = []
    real_nested = newton._nested

    def spy(lnb, sy, M_, L_):
        calls.append(M_.size)
        return real_nested(lnb, sy, M_, L_)

    monkeypatch.setattr(newton, "_MAX_NEWTON", 2)
    monkeypatch.setattr(newton, "_nested", spy)
    monkeypatch.setattr(newton, "_initial_guess", lambda lnb, sy, M_, L_: (np.log(M_) + 40, np.log(L_) - 40))
    spec = speciate(M, L, species, lb)
    assert calls and calls[0] > n // 2
    rM, rL = rel_residuals(spec, species)
    assert rM.max() <= 1e-10 and rL.max() <= 1e-10
    np.testing.assert_allclose(spec.species_M, reference.species_M, rtol=1e-8, atol=1e-14 * M.max())


def test_non_convergence_is_reported_with_the_tubes(monkeypatch):
    bad_start = lambda lnb, sy, M_, L_: (np.log(M_) + 40, np.log(L_) - 40)  # noqa: E731
    monkeypatch.setattr(newton, "_MAX_NEWTON", 0)
    monkeypatch.setattr(newton, "_initial_guess", bad_start)
    monkeypatch.setattr(newton, "_nested", bad_start)
    with pytest.raises(EquilibriumError, match=r"did not converge in tubes \[0, 1\]"):
        speciate([1e-3, 1e-4], [1e-3, 1e-3], [[1, 1], [1, 2]], [8.0, 12.0])


@needs_mpmath
def test_solver_against_mpmath_for_a_polynuclear_system():
    # 50-digit solution by mpmath.findroot of the two mass balances in log variables (independent of the
    # solver's algorithm); well-conditioned tubes  # source: computed here with mpmath
    species = [(1, 1), (1, 2), (2, 1), (2, 2), (0, 1)]
    lb = np.array([4.6, 7.5, 6.5, 12.7, 1.5])
    M = np.array([1e-4, 1e-3, 2e-3, 5e-2])
    L = np.array([5e-4, 5e-4, 1e-2, 1e-3])
    spec = speciate(M, L, species, lb)
    p = [s[0] for s in species]
    q = [s[1] for s in species]
    with mpmath.workdps(50):
        beta = [mpmath.mpf(10) ** mpmath.mpf(float(v)) for v in lb]
        for i in range(M.size):
            Mi, Li = mpmath.mpf(float(M[i])), mpmath.mpf(float(L[i]))

            def f(x, y, Mi=Mi, Li=Li):
                c = [b * mpmath.exp(pi * x + qi * y) for b, pi, qi in zip(beta, p, q, strict=True)]
                tm = mpmath.exp(x) + sum(pi * ci for pi, ci in zip(p, c, strict=True))
                tl = mpmath.exp(y) + sum(qi * ci for qi, ci in zip(q, c, strict=True))
                return [mpmath.log(tm / Mi), mpmath.log(tl / Li)]

            x, y = mpmath.findroot(f, (mpmath.log(spec.free_M[i]), mpmath.log(spec.free_L[i])))
            assert float(mpmath.exp(x)) == pytest.approx(spec.free_M[i], rel=1e-11)
            assert float(mpmath.exp(y)) == pytest.approx(spec.free_L[i], rel=1e-11)


# ---------------------------------------------------------------------------------------------------
# sensitivities against central finite differences

SENS_SPECIES = [(1, 1), (1, 2), (2, 1), (0, 1), (1, 0)]
SENS_LB = np.array([5.0, 9.0, 7.0, 1.0, -0.5])


def _sens_tubes():
    rng = np.random.default_rng(9)
    M = 10.0 ** rng.uniform(-6, -2, 12)
    L = 10.0 ** rng.uniform(-6, -2, 12)
    return M, L


def test_sensitivities_wrt_log_beta_match_finite_differences():
    M, L = _sens_tubes()
    spec = speciate(M, L, SENS_SPECIES, SENS_LB)
    sens = sensitivities(spec, SENS_SPECIES, SENS_LB)
    h = 1e-5  # log10 units; central differences, error O(h^2) + solver noise 1e-14/h  # derived
    S = len(SENS_SPECIES)
    for j in range(S):
        up = SENS_LB.copy()
        dn = SENS_LB.copy()
        up[j] += h
        dn[j] -= h
        a = speciate(M, L, SENS_SPECIES, up)
        b = speciate(M, L, SENS_SPECIES, dn)
        scale = 2 * h * np.log(10.0)
        fd = (np.log(a.species_M) - np.log(b.species_M)) / scale
        np.testing.assert_allclose(sens.dlnc_dlnbeta[:, :, j], fd, rtol=1e-6, atol=1e-7)
        fd_m = (np.log(a.free_M) - np.log(b.free_M)) / scale
        fd_l = (np.log(a.free_L) - np.log(b.free_L)) / scale
        np.testing.assert_allclose(sens.dlnfree_M_dlnbeta[:, j], fd_m, rtol=1e-6, atol=1e-7)
        np.testing.assert_allclose(sens.dlnfree_L_dlnbeta[:, j], fd_l, rtol=1e-6, atol=1e-7)


@pytest.mark.parametrize("which", ["M", "L"])
def test_sensitivities_wrt_totals_match_finite_differences(which):
    M, L = _sens_tubes()
    spec = speciate(M, L, SENS_SPECIES, SENS_LB)
    sens = sensitivities(spec, SENS_SPECIES, SENS_LB)
    h = 1e-6  # relative step in the total
    T = M if which == "M" else L
    args_up = (M * (1 + h), L) if which == "M" else (M, L * (1 + h))
    args_dn = (M * (1 - h), L) if which == "M" else (M, L * (1 - h))
    a = speciate(*args_up, SENS_SPECIES, SENS_LB)
    b = speciate(*args_dn, SENS_SPECIES, SENS_LB)
    d = 2 * h * T
    fd_c = (np.log(a.species_M) - np.log(b.species_M)) / d[:, None]
    fd_m = (np.log(a.free_M) - np.log(b.free_M)) / d
    fd_l = (np.log(a.free_L) - np.log(b.free_L)) / d
    got_c = sens.dlnc_dMtot if which == "M" else sens.dlnc_dLtot
    got_m = sens.dlnfree_M_dMtot if which == "M" else sens.dlnfree_M_dLtot
    got_l = sens.dlnfree_L_dMtot if which == "M" else sens.dlnfree_L_dLtot
    # compare the dimensionless elasticities T dln/dT
    np.testing.assert_allclose(got_c * T[:, None], fd_c * T[:, None], rtol=1e-5, atol=1e-6)
    np.testing.assert_allclose(got_m * T, fd_m * T, rtol=1e-5, atol=1e-6)
    np.testing.assert_allclose(got_l * T, fd_l * T, rtol=1e-5, atol=1e-6)
    abs_c = sens.dc_dMtot if which == "M" else sens.dc_dLtot
    np.testing.assert_allclose(abs_c, spec.species_M * got_c, rtol=1e-14)


def test_sensitivities_of_strong_complexes_near_equivalence():
    # strong 1:1 at equivalence: J = [[m + c, c], [c, l + c]] is nearly singular, a d - b^2 = c^2 (1 + 1e-13)
    # would keep ~3 digits; Lagrange's identity keeps them all. Reference: implicit differentiation of
    # the free-metal quadratic K m^2 + (1 + K (L0 - M0)) m - M0 = 0, dm/dM0 = (1 + K m) / (1 + K (m + l))
    # (cancellation-free)  # derived
    K = 1e30
    M = np.array([1e-3, 1e-3, 1e-3])
    L = np.array([1e-3, 1.001e-3, 0.999e-3])
    spec = speciate(M, L, [[1, 1]], [30.0])
    sens = sensitivities(spec, [[1, 1]], [30.0])
    m, l_ = spec.free_M, spec.free_L
    expected = (1 + K * m) / (m * (1 + K * (m + l_)))
    np.testing.assert_allclose(sens.dlnfree_M_dMtot, expected, rtol=1e-10)
    # and d ln[L]/d ln K = -K m l / (l + K m l + ...) checked through dc: d[ML]/dL0 = 1 - dl/dL0
    np.testing.assert_allclose(sens.dc_dLtot[:, 0], 1.0 - sens.dfree_L_dLtot, rtol=1e-10, atol=1e-15)


def test_sensitivities_at_zero_totals_are_one_sided_limits():
    species = [(1, 1), (1, 2), (0, 1), (1, 0), (2, 1)]
    lb = np.array([5.0, 9.0, 1.0, -0.5, 7.0])
    M = np.array([0.0, 1e-3, 0.0])
    L = np.array([1e-3, 0.0, 0.0])
    spec = speciate(M, L, species, lb)
    sens = sensitivities(spec, species, lb)
    for arr in vars(sens).values():
        assert np.all(np.isfinite(arr))
    eps = 1e-12  # one-sided difference from the zero total; the response is linear to O(eps)
    up_M = speciate(M + eps * (M == 0), L, species, lb)
    up_L = speciate(M, L + eps * (L == 0), species, lb)
    # M2L (p = 2) grows as eps^2: zero first derivative, difference quotient O(eps)  # derived
    fd_cM = (up_M.species_M - spec.species_M) / eps
    fd_cL = (up_L.species_M - spec.species_M) / eps
    np.testing.assert_allclose(sens.dc_dMtot[[0, 2]], fd_cM[[0, 2]], rtol=1e-5, atol=1e-9)
    np.testing.assert_allclose(sens.dc_dLtot[[1, 2]], fd_cL[[1, 2]], rtol=1e-5, atol=1e-9)
    np.testing.assert_allclose(sens.dfree_M_dMtot[[0, 2]], up_M.free_M[[0, 2]] / eps, rtol=1e-6)
    np.testing.assert_allclose(sens.dfree_L_dLtot[[1, 2]], up_L.free_L[[1, 2]] / eps, rtol=1e-6)
    # the free ligand of the metal-free tube loses what the trace of metal binds  # derived
    fd = (up_M.free_L[0] - spec.free_L[0]) / eps
    assert sens.dfree_L_dMtot[0] == pytest.approx(fd, rel=1e-5)
    assert sens.dlnfree_L_dMtot[0] * spec.free_L[0] == pytest.approx(fd, rel=1e-5)
    # and the free metal of the ligand-free tube loses what a trace of ligand binds
    fd = (up_L.free_M[1] - spec.free_M[1]) / eps
    assert sens.dfree_M_dLtot[1] == pytest.approx(fd, rel=1e-5)
    assert sens.dlnfree_M_dLtot[1] * spec.free_M[1] == pytest.approx(fd, rel=1e-5)
    # log derivatives of identically zero quantities are reported as 0 (documented convention)
    assert sens.dlnfree_M_dMtot[0] == 0.0 and np.all(sens.dlnc_dlnbeta[2] == 0.0)


def test_sensitivities_shape_follows_the_batch():
    M = np.full((3, 4), 1e-3)
    L = np.linspace(1e-4, 1e-2, 12).reshape(3, 4)
    lb = np.array([4.0, 7.0])
    spec = speciate(M, L, [[1, 1], [1, 2]], lb)
    sens = sensitivities(spec, [[1, 1], [1, 2]], lb)
    assert sens.dlnc_dlnbeta.shape == (3, 4, 2, 2)
    assert sens.dlnc_dMtot.shape == (3, 4, 2)
    assert sens.dlnfree_L_dLtot.shape == (3, 4)
    assert set(to_json(sens)) == set(vars(sens)) and len(to_json(sens)["dc_dMtot"]) == 3
    flat = sensitivities(speciate(M.ravel(), L.ravel(), [[1, 1], [1, 2]], lb), [[1, 1], [1, 2]], lb)
    np.testing.assert_allclose(sens.dlnc_dlnbeta.reshape(12, 2, 2), flat.dlnc_dlnbeta, rtol=1e-13)
    with pytest.raises(EquilibriumError, match="broadcast"):
        sensitivities(spec, [[1, 1], [1, 2]], np.zeros((5, 2)))


# ---------------------------------------------------------------------------------------------------
# external reference: PHREEQC (minteq.v4 database) through phreeqpython

LIGAND = "Ethylenediamine"


def _parse_side(side):
    terms = {}
    for tok in side.split(" + "):
        tok = tok.strip()
        m = re.fullmatch(r"(\d+(?:\.\d+)?)\s+(\S+)", tok)
        coef, name = (float(m.group(1)), m.group(2)) if m else (1.0, tok)
        terms[name] = terms.get(name, 0.0) + coef
    return terms


def _database_reactions(db_text, metal):
    """Every aqueous species of metal + ethylenediamine + H+ (+ H2O) in the database, with log_k.

    Returns (reaction line, product, (p, q, r), n_H2O consumed, log_k) read from the file itself.
    """
    lines = db_text.splitlines()
    start = lines.index("SOLUTION_SPECIES")
    end = lines.index("PHASES")
    out = []
    for i in range(start + 1, end):
        line = lines[i].split("#")[0].strip()
        if "=" not in line:
            continue
        lhs, rhs = (_parse_side(s) for s in line.split("="))
        if not set(lhs) <= {metal, LIGAND, "H+", "H2O"}:
            continue
        products = [k for k in rhs if k not in ("H+", "H2O")]
        if len(products) != 1 or products[0] in lhs:
            continue
        p, q = lhs.get(metal, 0.0), lhs.get(LIGAND, 0.0)
        if p == 0 and q == 0:
            continue
        r = lhs.get("H+", 0.0) - rhs.get("H+", 0.0)
        n_w = lhs.get("H2O", 0.0) - rhs.get("H2O", 0.0)
        j = i + 1
        while not lines[j].strip().startswith("log_k"):
            j += 1
        out.append((line, products[0], (int(p), int(q), int(r)), n_w, float(lines[j].split()[1])))
    return out


@pytest.mark.parametrize(
    ("metal", "element", "totals", "n_expected"),
    [
        # nickel(II)-ethylenediamine 1:1/1:2/1:3, with ligand protonation and Ni hydrolysis
        ("Ni+2", "Ni", [(1e-4, 5e-4), (1e-3, 1e-3), (1e-5, 3e-2)], 8),
        # silver(I)-ethylenediamine adds polynuclear Ag2L, Ag2L2 and protonated complexes
        ("Ag+", "Ag", [(1e-4, 5e-4), (1e-3, 5e-4), (2e-3, 1e-2)], 11),
    ],
)
def test_speciation_matches_phreeqc(metal, element, totals, n_expected):
    """source: PHREEQC 3 via phreeqpython, database minteq.v4.dat (NIST46 constants) from the phreeqc wheel.

    Constants and stoichiometries are read from the database file. Activity coefficients are set to 1
    by redefining every species involved with ``-gamma 1e12 0`` (WATEQ Debye-Hueckel with an ion size of
    1e12 A: log g = -A z^2 sqrt(I) / (1 + B 1e12 sqrt(I)) ~ -1e-11 at these I); pH is fixed (no charge
    balance), so a_H = 10^-pH and conditional constants are log K - r pH. PHREEQC's water activity
    (a_w = 1 - 0.017 sum m_i, Parkhurst & Appelo 1999, WRI 99-4259 [from memory]) multiplies the
    hydrolysis constants and is folded in. Totals are PHREEQC's own sums over its species (equal to the
    input to ~1e-10), so both codes solve the same equilibrium. Tolerance 1e-9 relative: 100x the
    residual gamma deviation (1e-11) and PHREEQC's convergence tolerance (1e-12).
    """
    pytest.importorskip("phreeqpython")
    phreeqc = pytest.importorskip("phreeqc")
    import phreeqpython

    db = Path(phreeqc.__file__).parent / "databases" / "minteq.v4.dat"
    if not db.exists():
        pytest.skip("minteq.v4.dat not shipped with this phreeqc wheel")
    rx = _database_reactions(db.read_text(), metal)
    assert len(rx) == n_expected
    redefine = ["KNOBS", " -convergence_tolerance 1e-12", "SOLUTION_SPECIES"]
    for master in (metal, LIGAND):
        redefine += [f"{master} = {master}", " log_k 0", " -gamma 1e12 0"]
    for line, _, _, _, log_k in rx:
        redefine += [line, f" log_k {log_k}", " -gamma 1e12 0"]
    pp = phreeqpython.PhreeqPython(database=db.name, database_directory=db.parent)
    pp.ip.run_string("\n".join(redefine) + "\nEND\n")

    stoich = np.array([s for _, _, s, _, _ in rx])
    n_w = np.array([w for _, _, _, w, _ in rx])
    log_k = np.array([k for *_, k in rx])
    for pH in (7.0, 9.0, 11.0):
        for M_in, L_in in totals:
            sol = pp.add_solution({"units": "mol/kgw", "pH": str(pH), element: str(M_in), LIGAND: str(L_in)})
            mol = sol.species_molalities
            ref = np.array([mol[prod] for _, prod, _, _, _ in rx])
            M = mol[metal] + ref @ stoich[:, 0]
            L = mol[LIGAND] + ref @ stoich[:, 1]
            assert M == pytest.approx(M_in, rel=1e-9) and L == pytest.approx(L_in, rel=1e-9)
            a_w = 1.0 - 0.017 * sum(v for k, v in mol.items() if k != "H2O")
            lbc = conditional_log_beta(log_k, stoich, pH) + n_w * np.log10(a_w)
            spec = speciate(M, L, stoich[:, :2], lbc)
            np.testing.assert_allclose(spec.free_M, mol[metal], rtol=1e-9)
            np.testing.assert_allclose(spec.free_L, mol[LIGAND], rtol=1e-9)
            np.testing.assert_allclose(spec.species_M, ref, rtol=1e-9)
