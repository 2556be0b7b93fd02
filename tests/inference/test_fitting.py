"""Tests for planner.inference.lm, the batched Levenberg–Marquardt engine.

External references:
- NIST StRD nonlinear regression data sets, read at test time from the shared data folder; their
  certified parameters, standard deviations and residual sums of squares are in each file's header.
- scipy.optimize.least_squares(method="lm") (MINPACK lmder) on random well-posed problems.
- generalised least squares in closed form (Aitken 1935, Proc. R. Soc. Edinb. 55:42) for `whiten`.
"""

from __future__ import annotations

import json
import os
import re
from dataclasses import dataclass
from functools import cache
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.optimize import least_squares

from planner.inference import gauss_newton, lm
from planner.inference.fit_result import STATUS_MESSAGES, FitError, FitResult
from planner.inference.lm import fit_many, fit_one
from planner.paper.json_out import to_json

# ------------------------------------------------------------------------------------------------
# NIST StRD: locating and parsing the files
# ------------------------------------------------------------------------------------------------


def _nist_dir() -> Path:
    """The NIST StRD files shipped with the tests (tests/data/nist-strd, certification headers kept);
    KPLAN_SHARED_DATA points elsewhere (the shared data folder, or the nist-strd folder itself)."""
    env = os.environ.get("KPLAN_SHARED_DATA")
    if env:
        base = Path(env)
        return base / "nist-strd" if (base / "nist-strd").is_dir() else base
    return Path(__file__).resolve().parents[1] / "data" / "nist-strd"


@dataclass(frozen=True)
class NistProblem:
    name: str
    x: np.ndarray
    y: np.ndarray
    starts: np.ndarray  # (2, P)
    certified: np.ndarray  # (P,)
    certified_sd: np.ndarray  # (P,)
    rss: float
    rsd: float  # certified residual standard deviation, sqrt(RSS / (N − P))
    dof: int  # as printed in the header


_NUM = r"[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?"


def parse_nist(path: Path) -> NistProblem:
    """Parse a NIST StRD nonlinear regression file (header tables, then the 'Data: y x' block)."""
    lines = path.read_text().splitlines()
    param_re = re.compile(rf"^\s*b(\d+)\s*=\s*({_NUM})\s+({_NUM})\s+({_NUM})\s+({_NUM})\s*$")
    rows = [m.groups() for m in map(param_re.match, lines) if m]
    if not rows or [int(r[0]) for r in rows] != list(range(1, len(rows) + 1)):
        raise ValueError(f"{path.name}: parameter table b1..bP not found")
    table = np.array([[float(v) for v in r[1:]] for r in rows])

    def header_value(label: str) -> float:
        for line in lines:
            if line.strip().startswith(label):
                return float(line.split(":", 1)[1])
        raise ValueError(f"{path.name}: '{label}' not found")

    n_obs = int(header_value("Number of Observations"))
    start = next(i for i, line in enumerate(lines) if re.match(r"^\s*Data:\s+y\s+x\s*$", line))
    data = np.array([[float(v) for v in line.split()] for line in lines[start + 1 :] if line.strip()])
    if data.shape != (n_obs, 2):
        raise ValueError(f"{path.name}: expected {n_obs} (y, x) rows, found {data.shape}")
    return NistProblem(
        name=path.stem,
        x=data[:, 1],
        y=data[:, 0],
        starts=table[:, :2].T.copy(),
        certified=table[:, 2],
        certified_sd=table[:, 3],
        rss=header_value("Residual Sum of Squares"),
        rsd=header_value("Residual Standard Deviation"),
        dof=int(header_value("Degrees of Freedom")),
    )


# ------------------------------------------------------------------------------------------------
# NIST models, each coded from the formula in its file header, with analytic Jacobians.
# theta (T, P), x (N,) -> f (T, N), J (T, N, P)
# ------------------------------------------------------------------------------------------------


def _cols(theta):
    return [theta[:, j : j + 1] for j in range(theta.shape[1])]


def exp_rise(theta, x):  # Misra1a, BoxBOD: y = b1*(1-exp[-b2*x])
    b1, b2 = _cols(theta)
    e = np.exp(-b2 * x)
    return b1 * (1 - e), np.stack(np.broadcast_arrays(1 - e, b1 * x * e), axis=-1)


def misra1c(theta, x):  # y = b1 * (1-(1+2*b2*x)**(-.5))
    b1, b2 = _cols(theta)
    u = 1 + 2 * b2 * x
    return b1 * (1 - u**-0.5), np.stack(np.broadcast_arrays(1 - u**-0.5, b1 * x * u**-1.5), axis=-1)


def misra1d(theta, x):  # y = b1*b2*x*((1+b2*x)**(-1)): the 1:1 binding isotherm
    b1, b2 = _cols(theta)
    u = 1 + b2 * x
    return b1 * b2 * x / u, np.stack(np.broadcast_arrays(b2 * x / u, b1 * x / u**2), axis=-1)


def danwood(theta, x):  # y = b1*x**b2
    b1, b2 = _cols(theta)
    p = x**b2
    return b1 * p, np.stack(np.broadcast_arrays(p, b1 * p * np.log(x)), axis=-1)


def eckerle4(theta, x):  # y = (b1/b2) * exp[-0.5*((x-b3)/b2)**2]
    b1, b2, b3 = _cols(theta)
    z = (x - b3) / b2
    e = np.exp(-0.5 * z**2)
    f = b1 / b2 * e
    return f, np.stack(np.broadcast_arrays(e / b2, f * (z**2 - 1) / b2, f * z / b2), axis=-1)


def mgh09(theta, x):  # y = b1*(x**2+x*b2) / (x**2+x*b3+b4)
    b1, b2, b3, b4 = _cols(theta)
    num = x**2 + x * b2
    den = x**2 + x * b3 + b4
    f = b1 * num / den
    return f, np.stack(np.broadcast_arrays(num / den, b1 * x / den, -f * x / den, -f / den), axis=-1)


def rat43(theta, x):  # y = b1 / ((1+exp[b2-b3*x])**(1/b4))
    b1, b2, b3, b4 = _cols(theta)
    e = np.exp(b2 - b3 * x)
    u = 1 + e
    base = u ** (-1 / b4)
    f = b1 * base
    d2 = -f * e / (b4 * u)
    return f, np.stack(np.broadcast_arrays(base, d2, -d2 * x, f * np.log(u) / b4**2), axis=-1)


def thurber(theta, x):  # y = (b1 + b2*x + b3*x**2 + b4*x**3) / (1 + b5*x + b6*x**2 + b7*x**3)
    b1, b2, b3, b4, b5, b6, b7 = _cols(theta)
    num = b1 + b2 * x + b3 * x**2 + b4 * x**3
    den = 1 + b5 * x + b6 * x**2 + b7 * x**3
    f = num / den
    cols = [1 / den, x / den, x**2 / den, x**3 / den, -f * x / den, -f * x**2 / den, -f * x**3 / den]
    return f, np.stack(np.broadcast_arrays(*cols), axis=-1)


NIST_MODELS = {
    "Misra1a": exp_rise,
    "BoxBOD": exp_rise,
    "Misra1c": misra1c,
    "Misra1d": misra1d,
    "DanWood": danwood,
    "Eckerle4": eckerle4,
    "MGH09": mgh09,
    "Rat43": rat43,
    "Thurber": thurber,
}


def load_nist(name: str) -> NistProblem:
    path = _nist_dir() / f"{name}.dat"
    if not path.is_file():
        pytest.skip(
            f"NIST StRD file {path} not found: put the StRD .dat files in ../shared/data/nist-strd "
            "or point KPLAN_SHARED_DATA at the folder holding them"
        )
    return parse_nist(path)


def lre(value, certified):
    """Log relative error, the number of agreeing significant digits (McCullough 1998, Am. Stat. 52:358)."""
    value, certified = np.asarray(value, dtype=float), np.asarray(certified, dtype=float)
    with np.errstate(divide="ignore"):
        return -np.log10(np.abs(value - certified) / np.abs(certified))


# Agreement asked of every dataset, fixed before running (not tuned to the results):
PARAM_DIGITS = 6  # source: NIST StRD guidance, "at least 6 significant digits" for the estimates
SD_DIGITS = 5  # common practice: sds are second-order quantities; the brief allows 4-6, we ask 5
RSS_DIGITS = 6  # common practice: same standard as the estimates
# The solver is asked to run to tight tolerances here: with the defaults (ftol 1e-12 on the
# relative chi2 change) a parameter whose sd is as large as itself (MGH09 b2) is pinned to only
# ~6 digits, whereas the certified values carry 11. max_iter 1000 because MGH09 from start 1 needs
# ~530 trial steps (MINPACK's lmder takes about as many on it).
NIST_SOLVER = dict(xtol=1e-15, ftol=1e-15, gtol=1e-15, max_iter=1000)


@cache
def nist_batch_fit(name: str, jac_kind: str) -> FitResult:
    """Fit both certified start points of one dataset in a single batch (T = 2)."""
    prob = load_nist(name)
    fn = NIST_MODELS[name]
    jac = (lambda th: fn(th, prob.x)[1]) if jac_kind == "analytic" else jac_kind
    with np.errstate(over="ignore", invalid="ignore"):
        return fit_many(lambda th: fn(th, prob.x)[0], prob.starts, prob.y, jac=jac, **NIST_SOLVER)


_BOXBOD_1 = (
    "BoxBOD from start 1 (b1 = 1, b2 = 1) drifts to b2 >> 1 where exp(-b2 x) vanishes at every x "
    "and chi2 is flat: a genuine failure of local LM (MINPACK's lm stops at the same point)"
)
NIST_CASES = []
for _name in NIST_MODELS:
    for _start in (1, 2):
        for _jac in ("analytic", "2-point"):
            _marks = []
            if _name == "BoxBOD" and _start == 1:
                _marks = [pytest.mark.xfail(strict=True, reason=_BOXBOD_1)]
            NIST_CASES.append(
                pytest.param(_name, _start, _jac, marks=_marks, id=f"{_name}-start{_start}-{_jac}")
            )


@pytest.mark.parametrize(("name", "start", "jac_kind"), NIST_CASES)
def test_nist_certified_values(name, start, jac_kind):
    # source: NIST StRD, certified values in each file's header
    prob = load_nist(name)
    res = nist_batch_fit(name, jac_kind)
    assert res.theta.shape == (2, prob.certified.size)  # both starts went through one batch
    # Rat43's header prints 9 degrees of freedom, but its certified residual sd is sqrt(RSS/11),
    # 11 = N − P; the engine's dof is N − P, checked through the residual sd below.
    assert res.dof == prob.x.size - prob.certified.size
    i = start - 1
    assert res.converged[i], STATUS_MESSAGES.get(int(res.status[i]))
    assert lre(res.theta[i], prob.certified).min() >= PARAM_DIGITS, (res.theta[i], prob.certified)
    assert lre(res.se[i], prob.certified_sd).min() >= SD_DIGITS, (res.se[i], prob.certified_sd)
    assert lre(res.chi2[i], prob.rss) >= RSS_DIGITS, (res.chi2[i], prob.rss)
    assert lre(np.sqrt(res.chi2[i] / res.dof), prob.rsd) >= RSS_DIGITS


def test_nist_trust_region_path_alone(monkeypatch):
    # source: NIST StRD certified values; the trust-region iteration that finishes the trials the fast
    # path hands over must meet the standard on its own (every trial forced onto it)
    monkeypatch.setattr(lm, "_FAST_PATH", False)
    for name, fn in NIST_MODELS.items():
        prob = load_nist(name)
        with np.errstate(over="ignore", invalid="ignore"):
            res = fit_many(
                lambda th, fn=fn, x=prob.x: fn(th, x)[0],
                prob.starts[1],
                prob.y,
                jac=lambda th, fn=fn, x=prob.x: fn(th, x)[1],
                **NIST_SOLVER,
            )
        assert res.converged[0], name
        assert lre(res.theta[0], prob.certified).min() >= PARAM_DIGITS, name
        assert lre(res.se[0], prob.certified_sd).min() >= SD_DIGITS, name


@pytest.mark.parametrize("name", ["Misra1d", "Eckerle4", "Thurber"])
def test_nist_central_differences(name):
    # source: NIST StRD certified values; jac="3-point" must meet the same standard from start 2
    prob = load_nist(name)
    fn = NIST_MODELS[name]
    res = fit_many(lambda th: fn(th, prob.x)[0], prob.starts, prob.y, jac="3-point", **NIST_SOLVER)
    assert res.converged[1]
    assert lre(res.theta[1], prob.certified).min() >= PARAM_DIGITS
    assert lre(res.se[1], prob.certified_sd).min() >= SD_DIGITS
    assert lre(res.chi2[1], prob.rss) >= RSS_DIGITS


def test_nist_misra1d_default_tolerances():
    # source: NIST StRD Misra1d header. The 1:1 isotherm y = b1 b2 x / (1 + b2 x), with the
    # solver's default tolerances and iteration cap, from both starts.
    prob = load_nist("Misra1d")
    res = fit_many(
        lambda th: misra1d(th, prob.x)[0], prob.starts, prob.y, jac=lambda th: misra1d(th, prob.x)[1]
    )
    assert res.converged.all()
    assert lre(res.theta, prob.certified).min() >= PARAM_DIGITS
    assert lre(res.se, prob.certified_sd).min() >= SD_DIGITS
    assert lre(res.chi2, prob.rss).min() >= RSS_DIGITS


def test_nist_absolute_sigma_convention():
    # derived: with sigma = 1 and scale_cov=False, cov = (JᵀJ)⁻¹, so se = certified sd / s with
    # s² = RSS/dof (source: NIST StRD Misra1a header for sd, RSS and dof)
    prob = load_nist("Misra1a")
    res = fit_many(
        lambda th: exp_rise(th, prob.x)[0],
        prob.starts[1],
        prob.y,
        jac=lambda th: exp_rise(th, prob.x)[1],
        sigma=np.ones(prob.y.size),
        scale_cov=False,
        **NIST_SOLVER,
    )
    assert lre(res.se[0], prob.certified_sd / np.sqrt(prob.rss / prob.dof)).min() >= SD_DIGITS


@pytest.mark.parametrize("name", list(NIST_MODELS))
def test_nist_model_jacobians_match_central_differences(name):
    # derived: the analytic Jacobians coded above must be the derivatives of the coded models
    prob = load_nist(name)
    fn = NIST_MODELS[name]
    theta = np.vstack([prob.certified, prob.starts[1]])
    _, jac = fn(theta, prob.x)
    for j in range(theta.shape[1]):
        h = 1e-6 * np.abs(theta[:, j])
        up, down = theta.copy(), theta.copy()
        up[:, j] += h
        down[:, j] -= h
        numeric = (fn(up, prob.x)[0] - fn(down, prob.x)[0]) / (2 * h[:, None])
        scale = np.abs(jac[:, :, j]).max(axis=1, keepdims=True)
        np.testing.assert_allclose(jac[:, :, j] / scale, numeric / scale, atol=1e-6)


def test_parse_nist_reads_header_and_data():
    # source: NIST StRD Misra1d.dat header (14 observations, dof 12, start 2 = (450, 3e-4))
    prob = load_nist("Misra1d")
    assert prob.x.size == prob.y.size == 14
    assert prob.dof == 12
    assert prob.rsd == pytest.approx(6.8568272111e-02, rel=1e-12)
    np.testing.assert_array_equal(prob.starts[1], [450.0, 0.0003])
    assert prob.certified[0] == pytest.approx(4.3736970754e02, rel=1e-12)
    assert prob.y[0] == 10.07 and prob.x[-1] == 760.0


# ------------------------------------------------------------------------------------------------
# random well-posed problems: the 1:1 isotherm and a two-exponential decay
# ------------------------------------------------------------------------------------------------

M_TOT_M = 1e-4
L_TOT_M = np.geomspace(1e-5, 3e-3, 10)


def ml_conc_M(m_tot_M, l_tot_M, k):
    """Exact [ML], cancellation-free root of K (M0 − c)(L0 − c) = c (derived)."""
    s = m_tot_M + l_tot_M + 1.0 / k
    disc = (m_tot_M - l_tot_M) ** 2 + (2.0 * (m_tot_M + l_tot_M) + 1.0 / k) / k
    return 2.0 * m_tot_M * l_tot_M / (s + np.sqrt(disc))


def isotherm(theta):
    """A = ε·1 cm·[ML] for theta (T, 2) = (log10 K, ε)."""
    k = 10.0 ** theta[:, :1]
    return theta[:, 1:2] * ml_conc_M(M_TOT_M, L_TOT_M, k)


def isotherm_jac(theta):
    k = 10.0 ** theta[:, :1]
    c = ml_conc_M(M_TOT_M, L_TOT_M, k)
    m, l_ = M_TOT_M - c, L_TOT_M - c
    dc_dk = m * l_ / (1.0 + k * (m + l_))  # derived: implicit differentiation of K m l = c
    return np.stack([theta[:, 1:2] * dc_dk * k * np.log(10.0), c], axis=-1)


T_GRID = np.linspace(0.0, 5.0, 40)


def two_exp(theta):
    a1, k1, a2, k2 = (theta[:, j : j + 1] for j in range(4))
    return a1 * np.exp(-k1 * T_GRID) + a2 * np.exp(-k2 * T_GRID)


def two_exp_jac(theta):
    a1, k1, a2, k2 = (theta[:, j : j + 1] for j in range(4))
    e1, e2 = np.exp(-k1 * T_GRID), np.exp(-k2 * T_GRID)
    return np.stack([e1, -a1 * T_GRID * e1, e2, -a2 * T_GRID * e2], axis=-1)


def isotherm_problems(n, seed):
    rng = np.random.default_rng(seed)
    truth = np.column_stack([rng.uniform(3.5, 4.5, n), rng.uniform(3000.0, 8000.0, n)])
    y = isotherm(truth) + 0.002 * rng.standard_normal((n, L_TOT_M.size))
    start = truth * np.column_stack([rng.uniform(0.93, 1.07, n), rng.uniform(0.8, 1.2, n)])
    return start, y


def two_exp_problems(n, seed):
    rng = np.random.default_rng(seed)
    truth = np.column_stack(
        [rng.uniform(1, 2, n), rng.uniform(0.3, 0.6, n), rng.uniform(0.5, 1.5, n), rng.uniform(2, 4, n)]
    )
    y = two_exp(truth) + 0.002 * rng.standard_normal((n, T_GRID.size))
    start = truth * rng.uniform(0.9, 1.1, truth.shape)
    return start, y


PROBLEMS = {
    "isotherm": (isotherm, isotherm_jac, isotherm_problems),
    "two_exp": (two_exp, two_exp_jac, two_exp_problems),
}
TIGHT = dict(xtol=1e-14, ftol=1e-14, gtol=1e-14)


@pytest.mark.parametrize("kind", list(PROBLEMS))
def test_matches_scipy_least_squares_lm(kind):
    # source: scipy.optimize.least_squares(method="lm"), MINPACK lmder, run here as the reference.
    # Agreement is limited by how sharply chi2 (known to ~eps relative) pins θ: about
    # sqrt(eps·dof)·se, so the noise is kept small enough that 1e-8 relative is meaningful.
    model, jac, make = PROBLEMS[kind]
    start, y = make(50, seed=11)
    res = fit_many(model, start, y, jac=jac, **TIGHT)
    assert res.converged.all()
    for t in range(y.shape[0]):
        ref = least_squares(
            lambda th, t=t: model(th[None])[0] - y[t],
            start[t],
            jac=lambda th: jac(th[None])[0],
            method="lm",
            **TIGHT,
        )
        assert ref.status > 0
        cov_ref = np.linalg.inv(ref.jac.T @ ref.jac) * (2 * ref.cost / res.dof)
        np.testing.assert_allclose(res.theta[t], ref.x, rtol=1e-8)
        np.testing.assert_allclose(res.cov[t], cov_ref, rtol=1e-6, atol=1e-6 * np.abs(cov_ref).max())
        assert res.chi2[t] == pytest.approx(2 * ref.cost, rel=1e-10)


def _binding_batch(n, start, sd, seed):
    """n noisy 8-tube 1:1 binding curves (log K 4, ε 5000) and a shared start (log K, ε)."""
    rng = np.random.default_rng(seed)
    y = isotherm(np.array([[4.0, 5000.0]])) + sd * rng.standard_normal((n, L_TOT_M.size))
    return np.array(start, dtype=float), y


@pytest.mark.parametrize(
    ("start", "sd", "tol"),
    [
        ((3.6, 4000.0), 0.002, {}),  # close start: the Gauss–Newton passes finish nearly every trial
        ((2.0, 12000.0), 0.003, TIGHT),  # far starts: damped passes, some trials handed over
        ((6.5, 2500.0), 0.003, TIGHT),
    ],
)
def test_fast_path_gives_the_trust_region_answers(monkeypatch, start, sd, tol):
    # derived: both paths stop on Moré's tests at the same optimum; |Δ log K| <= 1e-8 (issue 25).
    # With the default tolerances the far starts differ by up to ~2e-8 (each path lands within its own
    # ftol of the optimum), so those are compared at tight tolerances, with the noise small enough
    # that χ² (known to ~eps) pins log K to better than 1e-8 (cf. the scipy comparison above).
    theta0, y = _binding_batch(2000, start, sd, seed=21)
    fast = fit_many(isotherm, theta0, y, jac=isotherm_jac, sigma=np.full(L_TOT_M.size, sd), **tol)
    monkeypatch.setattr(lm, "_FAST_PATH", False)
    slow = fit_many(isotherm, theta0, y, jac=isotherm_jac, sigma=np.full(L_TOT_M.size, sd), **tol)
    assert fast.converged.all() and slow.converged.all()
    assert np.abs(fast.theta[:, 0] - slow.theta[:, 0]).max() <= 1e-8
    np.testing.assert_allclose(fast.se, slow.se, rtol=1e-6)
    np.testing.assert_allclose(fast.chi2, slow.chi2, rtol=1e-9)


def test_covariance_is_that_of_the_jacobian_at_the_estimates():
    # source: numpy.linalg.inv of s² JᵀJ, J the analytic Jacobian evaluated afresh at the returned
    # estimates (the covariance's definition, NIST StRD convention). Half the trials start near (they
    # finish on the fast path), half far off (they outlast its passes and finish on the trust-region
    # path), so the covariances kept by both paths are checked.
    sd = 0.003
    _, y = _binding_batch(400, (2.0, 12000.0), sd, seed=8)
    theta0 = np.where(np.arange(400)[:, None] % 2, [2.0, 12000.0], [1.0, 30000.0])
    res = fit_many(isotherm, theta0, y, jac=isotherm_jac, sigma=np.full(L_TOT_M.size, sd), rowwise=True)
    assert res.converged.all()
    on_tr = res.n_iter > gauss_newton.MAX_PASSES
    assert on_tr[::2].all() and not on_tr[1::2].any()
    jw = isotherm_jac(res.theta) / sd
    ref = np.linalg.inv(np.einsum("tnp,tnq->tpq", jw, jw)) * (res.chi2 / res.dof)[:, None, None]
    np.testing.assert_allclose(res.cov, ref, rtol=1e-9)


@pytest.mark.parametrize("shape", [(40,), (40, 8), (40, 8, 3), (40, 2, 2)])
def test_put_rows_equals_fancy_assignment(shape):
    # source: numpy's own fancy-index assignment a[rows] = values, the reference
    rng = np.random.default_rng(3)
    rows = np.flatnonzero(rng.random(shape[0]) < 0.6)
    for values in (rng.standard_normal((rows.size,) + shape[1:]), 7.5):
        a = rng.standard_normal(shape)
        ref = a.copy()
        ref[rows] = values
        gauss_newton.put_rows(a, rows, values)
        np.testing.assert_array_equal(a, ref)
    flags = np.zeros(shape[0], dtype=bool)
    gauss_newton.put_rows(flags, rows, True)
    np.testing.assert_array_equal(flags, np.isin(np.arange(shape[0]), rows))


def test_rowwise_evaluates_only_running_trials():
    # derived: a rowwise model is asked for the running trials only, and the answers do not change
    theta0, y = _binding_batch(300, (3.6, 4000.0), 0.002, seed=4)
    rows_seen = []

    def model(th):
        rows_seen.append(th.shape[0])
        return isotherm(th)

    whole = fit_many(isotherm, theta0, y, jac=isotherm_jac)
    rowwise = fit_many(model, theta0, y, jac=isotherm_jac, rowwise=True)
    np.testing.assert_array_equal(rowwise.theta, whole.theta)
    np.testing.assert_array_equal(rowwise.n_iter, whole.n_iter)
    assert rows_seen[0] == 300 and min(rows_seen) < 300
    assert sum(rows_seen) == 300 + int(whole.n_iter.sum())  # the start, then one row per step


def test_forward_differences_match_analytic_jacobian():
    # derived: forward differences change the solution only at the level of their truncation error
    start, y = isotherm_problems(30, seed=5)
    exact = fit_many(isotherm, start, y, jac=isotherm_jac, **TIGHT)
    approx = fit_many(isotherm, start, y, **TIGHT)
    assert approx.converged.all()
    np.testing.assert_allclose(approx.theta, exact.theta, rtol=1e-7)
    np.testing.assert_allclose(approx.se, exact.se, rtol=1e-5)


# ------------------------------------------------------------------------------------------------
# batch independence
# ------------------------------------------------------------------------------------------------


@pytest.mark.parametrize("kind", list(PROBLEMS))
def test_batch_equals_one_at_a_time(kind):
    # derived: trials share nothing, so each batch row must be that trial's own fit
    model, jac, make = PROBLEMS[kind]
    start, y = make(20, seed=3)
    # trial 0 starts where the model or its Jacobian is not finite (isotherm: K = 10**400 = inf
    # gives a NaN Jacobian; two_exp: a rate of -1000 overflows exp), and must not disturb the rest
    start = start.copy()
    if kind == "isotherm":
        start[0, 0] = 400.0
    else:
        start[0, 1] = -1e3
    with np.errstate(over="ignore", invalid="ignore"):
        batch = fit_many(model, start, y, jac=jac)
        assert batch.status[0] == -1 and not batch.converged[0]
        for t in range(1, y.shape[0]):
            alone = fit_one(model, start[t], y[t], jac=jac)
            np.testing.assert_allclose(batch.theta[t], alone.theta, rtol=1e-12)
            np.testing.assert_allclose(batch.cov[t], alone.cov, rtol=1e-10)
            assert batch.n_iter[t] == alone.n_iter
            assert batch.converged[t] == alone.converged


def test_finished_trials_stop_changing():
    # derived: once a trial stops, every later model call sees its final parameters
    start, y = two_exp_problems(6, seed=8)
    start[0] = start[0] * [1.6, 0.5, 0.6, 1.8]  # one slow trial keeps the batch running
    calls = []

    def model(theta):
        calls.append(theta.copy())
        return two_exp(theta)

    res = fit_many(model, start, y, jac=two_exp_jac)
    assert res.n_iter.max() > res.n_iter.min()
    # with an analytic Jacobian, call 0 is the start and call p is the trial step of pass p
    for t in range(y.shape[0]):
        for later in calls[res.n_iter[t] + 1 :]:
            np.testing.assert_array_equal(later[t], res.theta[t])


@settings(max_examples=15, deadline=None)
@given(st.permutations(list(range(8))))
def test_permuting_trials_permutes_results(perm):
    # derived: batch order is irrelevant
    start, y = isotherm_problems(8, seed=21)
    base = fit_many(isotherm, start, y, jac=isotherm_jac)
    perm = np.array(perm)
    shuffled = fit_many(isotherm, start[perm], y[perm], jac=isotherm_jac)
    np.testing.assert_allclose(shuffled.theta, base.theta[perm], rtol=1e-12)
    np.testing.assert_array_equal(shuffled.n_iter, base.n_iter[perm])


# ------------------------------------------------------------------------------------------------
# weighting: correlated errors via whiten, sigma
# ------------------------------------------------------------------------------------------------


def ar1_cov(n, rho, sd):
    idx = np.arange(n)
    return sd**2 * rho ** np.abs(idx[:, None] - idx[None, :])


def test_whiten_equals_closed_form_gls_on_a_line():
    # source: Aitken (1935) generalised least squares, β = (XᵀΣ⁻¹X)⁻¹ XᵀΣ⁻¹ y, Cov = (XᵀΣ⁻¹X)⁻¹
    rng = np.random.default_rng(4)
    x = np.linspace(0.0, 1.0, 20)
    design = np.column_stack([np.ones_like(x), x])
    sigma_ar = ar1_cov(x.size, rho=0.8, sd=0.05)
    chol = np.linalg.cholesky(sigma_ar)
    y = (design @ [0.2, 1.5])[None, :] + (chol @ rng.standard_normal((x.size, 25))).T

    def line(theta):
        return theta @ design.T

    res = fit_many(
        line,
        [0.0, 1.0],
        y,
        jac=lambda th: np.broadcast_to(design, (th.shape[0], *design.shape)),
        whiten=np.linalg.inv(chol),
        scale_cov=False,
    )
    prec = design.T @ np.linalg.solve(sigma_ar, design)
    beta = np.linalg.solve(prec, design.T @ np.linalg.solve(sigma_ar, y.T)).T
    np.testing.assert_allclose(res.theta, beta, rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(res.cov, np.broadcast_to(np.linalg.inv(prec), res.cov.shape), rtol=1e-10)
    resid = y - line(beta)
    chi2 = np.einsum("tn,tn->t", resid, np.linalg.solve(sigma_ar, resid.T).T)
    np.testing.assert_allclose(res.chi2, chi2, rtol=1e-10)
    # the check can fail: ordinary least squares gives visibly different estimates on these data
    ols = np.linalg.lstsq(design, y.T, rcond=None)[0].T
    assert np.abs(ols - beta).max() > 1e-3


@settings(max_examples=20, deadline=None)
@given(st.floats(1e-3, 1e3))
def test_sigma_scale_invariance(c):
    # derived: multiplying every sigma by c leaves θ and the scaled covariance unchanged, divides
    # chi2 by c², and multiplies the absolute-sigma covariance by c²
    start, y = isotherm_problems(4, seed=2)
    sd = np.linspace(0.001, 0.004, L_TOT_M.size)
    a = fit_many(isotherm, start, y, jac=isotherm_jac, sigma=sd, **TIGHT)
    b = fit_many(isotherm, start, y, jac=isotherm_jac, sigma=c * sd, **TIGHT)
    np.testing.assert_allclose(b.theta, a.theta, rtol=1e-9)
    np.testing.assert_allclose(b.cov, a.cov, rtol=1e-7)
    np.testing.assert_allclose(b.chi2, a.chi2 / c**2, rtol=1e-9)
    a_abs = fit_many(isotherm, start, y, jac=isotherm_jac, sigma=sd, scale_cov=False, **TIGHT)
    b_abs = fit_many(isotherm, start, y, jac=isotherm_jac, sigma=c * sd, scale_cov=False, **TIGHT)
    np.testing.assert_allclose(b_abs.cov, a_abs.cov * c**2, rtol=1e-7)


def test_diagonal_whiten_equals_sigma_and_per_trial_sigma():
    # derived: W = diag(1/σ) is the same weighting as sigma=σ; a (T, N) sigma weights row by row
    start, y = isotherm_problems(5, seed=9)
    sd = np.linspace(0.001, 0.004, L_TOT_M.size)
    a = fit_many(isotherm, start, y, jac=isotherm_jac, sigma=sd)
    b = fit_many(isotherm, start, y, jac=isotherm_jac, whiten=np.diag(1 / sd))
    np.testing.assert_allclose(b.theta, a.theta, rtol=1e-10)
    np.testing.assert_allclose(b.cov, a.cov, rtol=1e-8)
    sd_rows = np.outer(np.arange(1, 6), sd)
    c = fit_many(isotherm, start, y, jac=isotherm_jac, sigma=sd_rows)
    for t in range(5):
        alone = fit_one(isotherm, start[t], y[t], jac=isotherm_jac, sigma=sd_rows[t])
        np.testing.assert_allclose(c.theta[t], alone.theta, rtol=1e-12)


@settings(max_examples=30, deadline=None)
@given(st.integers(3, 15), st.integers(1, 5), st.integers(0, 2**32 - 1))
def test_linear_models_give_ordinary_least_squares(n_obs, n_params, seed):
    # derived: for f = Xθ the least-squares solution and covariance are closed-form (normal
    # equations); P <= 3 exercises the Jacobi SVD, P > 3 the LAPACK one
    if n_obs <= n_params:
        n_obs = n_params + 1
    rng = np.random.default_rng(seed)
    design = rng.normal(size=(n_obs, n_params))
    y = rng.normal(size=(3, n_obs))
    res = fit_many(
        lambda th: th @ design.T,
        np.zeros(n_params),
        y,
        jac=lambda th: np.broadcast_to(design, (th.shape[0], n_obs, n_params)),
    )
    beta, *_ = np.linalg.lstsq(design, y.T, rcond=None)
    resid = y - beta.T @ design.T
    s2 = np.einsum("tn,tn->t", resid, resid) / (n_obs - n_params)
    cov = np.linalg.inv(design.T @ design)[None] * s2[:, None, None]
    scale = np.abs(beta).max() + 1.0
    np.testing.assert_allclose(res.theta, beta.T, rtol=1e-8, atol=1e-9 * scale)
    np.testing.assert_allclose(res.cov, cov, rtol=1e-7, atol=1e-9 * np.abs(cov).max())


# ------------------------------------------------------------------------------------------------
# failure handling, bounds, inputs
# ------------------------------------------------------------------------------------------------


def test_singular_jacobian_marks_trial_not_converged():
    # derived: y = b1·x + b2·g(x) is not identifiable when g(x) = x; only that trial must fail
    x = np.linspace(1.0, 2.0, 8)
    g = np.vstack([x, x**2, x**2])  # per-trial data closed over by the model
    y = 1.0 * x + 0.5 * g + np.array([[0.0], [1e-3], [-1e-3]]) * np.sin(7 * x)

    def model(theta):
        return theta[:, :1] * x + theta[:, 1:] * g

    def jac(theta):
        return np.stack([np.broadcast_to(x, g.shape), g], axis=-1)

    for j in (jac, None):
        res = fit_many(model, [0.0, 0.0], y, jac=j)
        assert not res.converged[0] and res.status[0] == -2
        assert np.all(np.isnan(res.cov[0])) and np.all(np.isnan(res.se[0]))
        assert res.converged[1:].all()
        np.testing.assert_allclose(res.theta[1:], [[1.0, 0.5]] * 2, atol=2e-3)


def test_max_iter_reached_is_not_converged():
    prob = load_nist("MGH09")  # source: NIST StRD MGH09, needs hundreds of steps from start 1
    res = fit_many(
        lambda th: mgh09(th, prob.x)[0],
        prob.starts[0],
        prob.y,
        jac=lambda th: mgh09(th, prob.x)[1],
        max_iter=5,
    )
    assert res.n_iter[0] == 5 and res.status[0] == 5 and not res.converged[0]


def test_bounds_project_steps():
    # derived: Misra1d's certified b1 = 437.37 (source: NIST StRD); with b1 <= 400 the fit ends on
    # the bound, and a bound far from the solution changes nothing
    prob = load_nist("Misra1d")
    model, jac = (lambda th: misra1d(th, prob.x)[0]), (lambda th: misra1d(th, prob.x)[1])
    free = fit_many(model, prob.starts[1], prob.y, jac=jac)
    capped = fit_many(model, [350.0, 3e-4], prob.y, jac=jac, upper=[400.0, 1.0], lower=[0.0, 0.0])
    assert capped.theta[0, 0] == 400.0
    assert capped.chi2[0] > free.chi2[0]
    # b2 is then the best value given b1 = 400: a 1-parameter fit must agree
    fixed = fit_many(
        lambda th: misra1d(np.column_stack([np.full(len(th), 400.0), th]), prob.x)[0],
        [prob.starts[1, 1]],
        prob.y,
        xtol=1e-14,
        ftol=1e-14,
    )
    assert capped.theta[0, 1] == pytest.approx(fixed.theta[0, 0], rel=1e-6)
    loose = fit_many(model, prob.starts[1], prob.y, jac=jac, lower=[0.0, 0.0], upper=[1e4, 1.0])
    np.testing.assert_allclose(loose.theta, free.theta, rtol=1e-12)
    with pytest.raises(FitError, match="outside"):
        fit_many(model, prob.starts[1], prob.y, upper=[100.0, 1.0])


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        (dict(sigma=np.ones(10), whiten=np.eye(10)), "not both"),
        (dict(sigma=np.r_[np.ones(9), 0.0]), "> 0"),
        (dict(sigma=np.ones(9)), "shape"),
        (dict(whiten=np.eye(9)), r"\(10, 10\)"),
        (dict(jac="4-point"), "jac must be"),
        (dict(jac=lambda th: np.zeros((th.shape[0], 10, 3))), "jac returned shape"),
        (dict(max_iter=0), "max_iter"),
        (dict(xtol=-1.0), "xtol"),
        (dict(lower=[0.0]), "shape"),
        (dict(lower=[1.0, 1.0], upper=[0.0, 2.0]), "lower < upper"),
    ],
)
def test_bad_inputs_raise_clear_errors(kwargs, match):
    start, y = isotherm_problems(3, seed=1)
    with pytest.raises(FitError, match=match):
        fit_many(isotherm, start, y, **kwargs)


def test_bad_shapes_raise_clear_errors():
    start, y = isotherm_problems(3, seed=1)
    with pytest.raises(FitError, match="model returned shape"):
        fit_many(lambda th: isotherm(th)[:, :5], start, y)
    with pytest.raises(FitError, match="trials"):
        fit_many(isotherm, start[:2], y)
    with pytest.raises(FitError, match="cannot determine"):
        fit_many(lambda th: th[:, :1], start, y[:, :1])
    with pytest.raises(FitError, match="N > P"):
        fit_many(isotherm, start, y[:, :2], jac=lambda th: isotherm_jac(th)[:, :2])
    with pytest.raises(FitError, match="NaN"):
        fit_many(isotherm, start, np.where(y > 0.1, np.nan, y))
    assert issubclass(FitError, ValueError)


def test_nonfinite_jacobian_fails_only_that_trial():
    # derived: a NaN Jacobian row block stops its own trial (status -1) and nothing else
    start, y = isotherm_problems(4, seed=13)

    def jac(theta):
        out = isotherm_jac(theta)
        out[1] = np.nan
        return out

    res = fit_many(isotherm, start, y, jac=jac)
    alone = fit_many(isotherm, start[[0, 2, 3]], y[[0, 2, 3]], jac=isotherm_jac)
    assert res.status[1] == -1 and not res.converged[1]
    np.testing.assert_allclose(res.theta[[0, 2, 3]], alone.theta, rtol=1e-12)


def test_exact_data_and_nonfinite_steps():
    # derived: noise-free data are fitted exactly (chi2 → 0) even from a start where trial steps
    # overflow, and the covariance then scales to zero
    truth = np.array([[4.0, 5000.0]])
    y = isotherm(truth)[0]
    with np.errstate(over="ignore", invalid="ignore"):
        res = fit_one(isotherm, [2.0, 20000.0], y, jac=isotherm_jac)
    assert res.converged
    np.testing.assert_allclose(res.theta, truth[0], rtol=1e-9)
    assert res.chi2 < 1e-20


# ------------------------------------------------------------------------------------------------
# result object and internals
# ------------------------------------------------------------------------------------------------


def test_fit_one_shapes_summary_and_immutability():
    start, y = isotherm_problems(1, seed=6)
    one = fit_one(isotherm, start[0], y[0], jac=isotherm_jac)
    many = fit_many(isotherm, start, y, jac=isotherm_jac)
    assert one.theta.shape == (2,) and one.cov.shape == (2, 2) and one.se.shape == (2,)
    assert one.chi2.shape == () and bool(one.converged)
    np.testing.assert_array_equal(one.theta, many.theta[0])
    np.testing.assert_allclose(one.se, np.sqrt(np.diag(one.cov)))
    with pytest.raises(ValueError):
        one.theta[0] = 0.0
    summ = json.loads(json.dumps(to_json(one)))
    assert summ["n_trials"] == 1 and summ["theta"] == pytest.approx(list(one.theta))
    assert "converged=1/1" in repr(one)
    with pytest.raises(FitError, match="fit_many"):
        fit_one(isotherm, start, y[0])


def test_summary_is_json_safe_with_failures():
    x = np.linspace(1.0, 2.0, 8)
    res = fit_many(lambda th: (th[:, :1] + th[:, 1:]) * x, [[1.0, 1.0]] * 3, 2 * x + 0.01 * np.sin(9 * x))
    assert not res.converged.any()
    text = json.dumps(to_json(res), allow_nan=False)
    summ = json.loads(text)
    assert summ["n_converged"] == 0 and summ["theta_mean"] == [None, None]
    assert summ["status_counts"] == {"-2": 3}


@pytest.mark.parametrize(("n_obs", "n_params"), [(8, 2), (9, 3), (12, 5)])
def test_factorisation_matches_lapack_svd(n_obs, n_params):
    # source: numpy.linalg.svd (LAPACK gesdd) as the reference for the batched Jacobi/LAPACK step data
    rng = np.random.default_rng(n_params)
    js = rng.normal(size=(50, n_obs, n_params)) * np.logspace(0, -6, n_params)  # cond up to ~1e6
    r = rng.normal(size=(50, n_obs))
    s, vt, b = lm.factorise(js, r)
    u_ref, s_ref, _ = np.linalg.svd(js, full_matrices=False)
    np.testing.assert_allclose(np.sort(s, axis=1), np.sort(s_ref, axis=1), rtol=1e-9)
    # Vᵀ is orthogonal and reproduces JsᵀJs and Jsᵀr
    np.testing.assert_allclose(
        vt @ np.swapaxes(vt, 1, 2), np.broadcast_to(np.eye(n_params), vt.shape), atol=1e-12
    )
    gram = np.einsum("kip,ki,kiq->kpq", vt, s**2, vt)
    np.testing.assert_allclose(gram, np.swapaxes(js, 1, 2) @ js, rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(np.einsum("kij,ki->kj", vt, b), np.einsum("knp,kn->kp", js, r), atol=1e-10)


def test_status_messages_cover_every_code():
    start, y = isotherm_problems(10, seed=12)
    res = fit_many(isotherm, start, y, jac=isotherm_jac)
    assert set(np.unique(res.status)) <= set(STATUS_MESSAGES)
