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
