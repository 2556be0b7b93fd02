"""Variable projection against a full nonlinear fit and against dense generalised least squares."""

from __future__ import annotations

import numpy as np

from planner.inference.lm import fit_many
from planner.inference.precision import Whitening
from planner.inference.varpro import SeparableProblem, Weights, project, solve

rng = np.random.default_rng(11)
n, W, r = 9, 14, 3
x = np.linspace(0.0, 3.0, n)


def basis(th):
    """Two decays and a known part: C = [exp(−θ1 x), exp(−θ2 x)], K = 0.1 exp(−θ1 x / 2)."""
    T = th.shape[0]
    C = np.stack([np.exp(-th[:, :1] * x), np.exp(-th[:, 1:2] * x)], axis=-1)
    dC = np.zeros((T, n, 2, 2))
    dC[:, :, 0, 0] = -x * C[:, :, 0]
    dC[:, :, 1, 1] = -x * C[:, :, 1]
    K = np.repeat((0.1 * np.exp(-0.5 * th[:, :1] * x))[:, :, None], W, axis=2)
    dK = np.zeros((T, n, W, 2))
    dK[..., 0] = -0.5 * x[None, :, None] * K
    return C, dC, K, dK


def data():
    E = rng.uniform(0.5, 2.0, (2, W))
    sd = rng.uniform(0.01, 0.03, (n, W))
    S = rng.normal(0.0, 0.02, (n, W, r))
    C, _, K, _ = basis(np.array([[0.4, 2.0]]))
    Y = K[0] + C[0] @ E + sd * rng.standard_normal((n, W)) + S @ rng.standard_normal(r)
    return Y, E, sd, S


def test_variable_projection_equals_full_nonlinear_fit():
    # source: Golub & Pereyra 1973 (SIAM J. Numer. Anal. 10:413), theorem 2.1: the minimisers of the
    # projected functional are those of the full problem — so both fits must land on the same θ
    Y, E, sd, S = data()
    w = Weights.low_rank(sd, S)
    prob = SeparableProblem(basis, Y[None], w)
    res = fit_many(prob.f, np.array([[0.45, 2.2]]), prob.y(2), jac=prob.jac, scale_cov=False, xtol=1e-14)

    def full(p):
        C, _, K, _ = basis(p[:, :2])
        return (K + C @ p[:, 2:].reshape(-1, 2, W)).reshape(p.shape[0], -1)

    def full_jac(p):
        C, dC, K, dK = basis(p[:, :2])
        Ee = p[:, 2:].reshape(-1, 2, W)
        dth = dK + np.einsum("tnsp,tsw->tnwp", dC, Ee)
        dE = np.einsum("tns,wv->tnwsv", C, np.eye(W)).reshape(p.shape[0], n, W, 2 * W)
        return np.concatenate([dth, dE], axis=-1).reshape(p.shape[0], n * W, -1)

    wh = Whitening.of(sd.ravel() ** 2, S.reshape(n * W, r))
    p0 = np.concatenate([[0.45, 2.2], E.ravel() * 1.05])[None]
    rf = fit_many(
        full, p0, Y.ravel()[None], jac=full_jac, whiten=wh, scale_cov=False, xtol=1e-14, max_iter=500
    )
    assert res.converged[0] and rf.converged[0]
    assert np.abs(res.theta[0] - rf.theta[0, :2]).max() < 1e-8
    assert abs(res.chi2[0] - rf.chi2[0]) < 1e-8 * rf.chi2[0]
    # the reduced problem's covariance is the Schur complement of the full one
    assert np.allclose(res.se[0], rf.se[0, :2], rtol=1e-6)
    # and the eliminated spectra are the full fit's
    assert np.allclose(
        prob.linear_parameters(res.theta)[0], rf.theta[0, 2:].reshape(2, W), rtol=1e-6, atol=1e-9
    )


def test_chi2_equals_dense_generalised_least_squares():
    # derived: min_z ‖D^(−½)(y − m) − S̃z‖² + ‖z‖² = (y − m)ᵀ(D + S Sᵀ)⁻¹(y − m) (Woodbury), with E at
    # its GLS optimum computed densely, column by column of Y stacked into one vector
    Y, E, sd, S = data()
    th = np.array([[0.5, 1.7]])
    C, _, K, _ = basis(th)
    # the column-major flattening varpro uses: index λ n + i
    y = (Y - K[0]).T.ravel()
    Sig = (
        np.diag((sd.T.ravel()) ** 2)
        + S.transpose(1, 0, 2).reshape(n * W, r) @ S.transpose(1, 0, 2).reshape(n * W, r).T
    )
    Phi = np.kron(np.eye(W), C[0])  # block λ: C
    Si = np.linalg.inv(Sig)
    e = np.linalg.solve(Phi.T @ Si @ Phi, Phi.T @ Si @ y)
    chi2 = (y - Phi @ e) @ Si @ (y - Phi @ e)
    w = Weights.low_rank(sd, S)
    prob = SeparableProblem(basis, Y[None], w)
    assert np.isclose(prob.evaluate(th)["chi2"][0], chi2, rtol=1e-10)
    full = solve(project(C, w), w, ((Y - K[0]).T * w.w.T)[None])
    assert np.isclose(full.chi2[0], chi2, rtol=1e-10)
    assert np.allclose(prob.linear_parameters(th)[0], e.reshape(W, 2).T, rtol=1e-8)


def test_compressed_information_equals_the_full_jacobian():
    Y, E, sd, S = data()
    prob = SeparableProblem(basis, Y[None], Weights.low_rank(sd, S))
    th = np.array([[0.42, 1.9]])
    J = prob.full_jacobian(th)[0]
    H, g = prob.information(th)
    r_full = prob.residuals(th).augmented()[0]
    assert np.allclose(H[0], J.T @ J, rtol=1e-10)
    assert np.allclose(g[0], J.T @ r_full, rtol=1e-9, atol=1e-12)
    Jc = prob.jac(th)[0]
    assert np.allclose(Jc.T @ Jc, J.T @ J, rtol=1e-9)
    assert np.isclose(np.sum(prob.f(th) ** 2), r_full @ r_full, rtol=1e-12)


def test_left_out_entries_carry_no_weight():
    Y, E, sd, S = data()
    used = np.ones((n, W), dtype=bool)
    used[2, 5] = used[7, 0] = False
    Y2 = Y.copy()
    Y2[2, 5] = Y2[7, 0] = 1e6  # whatever is there must not matter
    th = np.array([[0.4, 2.0]])
    a = SeparableProblem(basis, Y[None], Weights.low_rank(sd, S, used)).evaluate(th)["chi2"]
    b = SeparableProblem(basis, Y2[None], Weights.low_rank(sd, S, used)).evaluate(th)["chi2"]
    assert np.isclose(a, b, rtol=1e-12)


class _Counting:
    """The test basis, recording the rows of θ it is asked for."""

    def __init__(self):
        self.calls: list[np.ndarray] = []

    def __call__(self, th):
        self.calls.append(np.array(th, copy=True))
        return basis(th)


def _many(T=6):
    """T data sets from one truth (different noise) and the exact whole-batch answers at θ."""
    Ys = np.stack([data()[0] for _ in range(T)])
    _, _, sd, S = data()
    return Ys, Weights.low_rank(sd, S)


def test_row_cache_computes_only_the_changed_rows_and_returns_the_batch_answers():
    # derived: χ², JᵀJ and Jᵀr of a trial depend on its own θ and data alone, so rows looked up in the cache
    # must equal a fresh whole-batch computation (SeparableProblem.evaluate / information, no cache)
    Ys, w = _many()
    counting = _Counting()
    prob = SeparableProblem(counting, Ys, w)
    th0 = np.tile([0.45, 2.2], (6, 1)) + np.linspace(0.0, 0.05, 6)[:, None]
    th1 = th0.copy()
    th1[[1, 4]] += [0.03, -0.1]  # two trials take a step, the others stay (stopped or refused)
    th2 = th0.copy()
    th2[4] = th1[4]  # trial 1's step is refused (back at th0), trial 4's is kept
    for th, changed in ((th0, 6), (th1, 2), (th2, 0), (th1, 0)):
        before = len(counting.calls)
        f, J = prob.f(th), prob.jac(th)
        asked = sum(c.shape[0] for c in counting.calls[before:])
        assert asked == changed  # only rows at a θ not seen in the last two calls are computed
        fresh = SeparableProblem(basis, Ys, w)
        H, g = fresh.information(th)
        assert np.allclose(f[:, 0] ** 2, fresh.evaluate(th)["chi2"], rtol=1e-12)
        assert np.allclose(np.einsum("tik,til->tkl", J, J), H, rtol=1e-10)
        assert np.allclose(-J[:, 0, :] * f[:, :1], g, rtol=1e-10, atol=1e-12)


def test_rows_at_one_theta_share_one_basis_and_projection():
    # every trial of a Monte Carlo starts at the guess: the basis (and its projection) depend on θ alone,
    # so it is computed once for all of them; the answers stay those of a plain batch
    Ys, w = _many()
    counting = _Counting()
    prob = SeparableProblem(counting, Ys, w)
    th = np.tile([0.45, 2.2], (6, 1))
    th[[1, 4, 5]] = [0.6, 1.5]  # two starts, interleaved
    f, J = prob.f(th), prob.jac(th)
    assert [c.shape[0] for c in counting.calls] == [2]
    fresh = SeparableProblem(basis, Ys, w)
    assert np.allclose(f[:, 0] ** 2, fresh.evaluate(th)["chi2"], rtol=1e-12)
    H, g = fresh.information(th)
    assert np.allclose(np.einsum("tik,til->tkl", J, J), H, rtol=1e-10)
    assert np.allclose(-J[:, 0, :] * f[:, :1], g, rtol=1e-10, atol=1e-12)


def test_a_basis_that_is_not_rowwise_is_asked_for_the_whole_batch():
    Ys, w = _many()
    counting = _Counting()
    prob = SeparableProblem(counting, Ys, w, rowwise=False)
    th = np.tile([0.45, 2.2], (6, 1))
    prob.f(th)
    th[2] += 0.01
    prob.f(th)
    assert [c.shape[0] for c in counting.calls] == [6, 6]


def test_cached_search_lands_where_the_uncached_one_does():
    # the same fits with every row recomputed at every call (a fresh problem per call) and with the cache
    Ys, w = _many()
    th0 = np.tile([0.45, 2.2], (6, 1))
    cached = SeparableProblem(basis, Ys, w)
    a = fit_many(cached.f, th0, cached.y(2), jac=cached.jac, scale_cov=False)

    def f(th):
        return SeparableProblem(basis, Ys, w).f(th)

    def jac(th):
        return SeparableProblem(basis, Ys, w).jac(th)

    b = fit_many(f, th0, cached.y(2), jac=jac, scale_cov=False)
    assert np.all(a.converged) and np.all(b.converged)
    assert np.allclose(a.theta, b.theta, rtol=1e-9, atol=0.0)
