"""The model check pays its way: a guarded design only where it reveals something, units do not matter,
and a trace-metal design with nothing to reveal is the c-optimal one.

Every plan here is an invented scenario (trace metal "Tm", ligand "Lq").
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import linprog
from scipy.stats import norm

from planner.inputs.files import write_atomic
from planner.inputs.plan import parse_plan_text
from planner.jobs.plan.design import design
from planner.paper.json_out import to_json

from ...conftest import run_cli as run

TRACE = """
title = "Trace metal Tm with ligand Lq (invented test scenario)"
[components]
M = {{ label = "Tm2+", charge = 2 }}
L = {{ label = "Lq", charge = 0 }}
[[species]]
name = "ML"
formula = {{ M = 1, L = 1 }}
log_beta = 5.0
log_beta_sd = 0.5
[medium]
activity_model = "none"
[optics]
wavelength_nm = 450
path_cm = {path}
linear_range = [0.05, 1.0]
noise = {{ k1 = 0.003, k2 = 0.0, k3 = 0.0 }}
[optics.epsilon]
ML = {{ value = {eps}, rsd = 0.3 }}
[[stock]]
id = "TM"
conc = {{ M = "100 uM" }}
conc_rsd = 0.005
[[stock]]
id = "LQ"
conc = {{ L = "1.0 mM" }}
conc_rsd = 0.005
[[stock]]
id = "W"
diluent = true
[glassware]
tube_volume = "10 mL"
flask = {{ capacity = "10 mL", class = "A" }}
step = "0.05 mL"
min_volume = "0.10 mL"
[[glassware.dispenser]]
kind = "burette"
capacity = "10 mL"
class = "A"
stocks = ["TM", "LQ"]
[design]
tubes = 7
criterion = "target"
fixed = {{ TM = "1.00 mL" }}
{alternatives}
"""

# complexes the readings cannot see: a second stepwise constant of 10 L/mol (ML2 ≤ 1 % of ML at ≤ 0.85 mM
# ligand) and a dinuclear complex at 10 µM metal [derived from the constants]
HIDDEN = """
[[design.alternative]]
name = "ML2"
formula = { M = 1, L = 2 }
log_beta = 6.0
[[design.alternative]]
name = "M2L"
formula = { M = 2, L = 1 }
log_beta = 6.0
"""


def trace_plan(path: float = 1.0, eps: float = 45000.0, alternatives: str = ""):
    return parse_plan_text(TRACE.format(path=path, eps=eps, alternatives=alternatives))


def test_same_experiment_in_other_units_gives_the_same_design():
    # derived: ε = 45 000 L/(mol·cm) in 1 cm and 4 500 in 10 cm give the same readings; only the scale of the
    # ε parameter differs, which a scale-free criterion must not see
    a = design(trace_plan(1.0, 45000.0), seed=0)
    b = design(trace_plan(10.0, 4500.0), seed=0)
    np.testing.assert_array_equal(a.recipe.volumes_mL, b.recipe.volumes_mL)
    assert a.se_target == pytest.approx(b.se_target, rel=1e-6)
    assert (a.model_check is None) == (b.model_check is None)
    if a.model_check is not None:
        assert a.model_check.replaced == b.model_check.replaced
        assert a.model_check.moves == b.model_check.moves


def test_nothing_to_reveal_keeps_the_target_only_design_and_says_what_would():
    plan = trace_plan(alternatives=HIDDEN)
    guarded = design(plan, seed=0)
    plain = design(plan, seed=0, check_model=False)
    mc = guarded.model_check
    assert mc is not None and not mc.replaced and mc.moves == 0
    np.testing.assert_array_equal(guarded.recipe.volumes_mL, plain.recipe.volumes_mL)
    assert guarded.se_target == pytest.approx(plain.se_target, rel=1e-12)  # no precision given up
    assert "stands" in mc.reason
    advice = " ".join(mc.advice)
    assert "M2L" in advice and "metal in excess" in advice and "design.fixed holds TM" in advice
    s = to_json(guarded)["model_check"]
    assert s["replaced"] is False and s["se_cost_cap"] == pytest.approx(1.25) and s["tubes_moved"] == 0


def test_design_prints_no_advice_to_run_itself(tmp_path, capsys, monkeypatch):
    path = tmp_path / "trace.toml"
    write_atomic(path, TRACE.format(path=1.0, eps=45000.0, alternatives=HIDDEN))
    code, out, err = run(capsys, monkeypatch, "design", path)
    assert code in (0, 1), err
    assert "let kplan design" not in out and "stands" in out
    assert "1 tubes" not in out


# -- an independent c-optimal design (Elfving's theorem) -----------------------------------------------


def _independent_rows(log_k: float, eps: float, v_lq: np.ndarray):
    """Whitened Jacobian rows (log K, ε) of the trace-metal tubes, written from the definitions: the 1:1
    closed form, Beer–Lambert in 1 cm, the readout-noise term of Rothman, Crouch & Ingle (1975)."""
    M0 = 100e-6 * 1.0 / 10.0  # 1.00 mL of 100 µM made up to 10 mL
    L0 = 1.0e-3 * v_lq / 10.0

    def absorbance(lk, e):
        K = 10.0**lk
        s = M0 + L0 + 1.0 / K
        ml = 2.0 * M0 * L0 / (s + np.sqrt((M0 - L0) ** 2 + (2.0 * (M0 + L0) + 1.0 / K) / K))  # domain.md §1
        return e * 1.0 * ml

    h = 1e-6
    d_lk = (absorbance(log_k + h, eps) - absorbance(log_k - h, eps)) / (2 * h)
    d_eps = absorbance(log_k, eps) / eps  # A is linear in ε
    a = absorbance(log_k, eps)
    sd = 0.4343 * 0.003 * 10.0**a  # source: Rothman, Crouch & Ingle 1975, Anal. Chem. 47:1226 (k1 term)
    return np.stack([d_lk, d_eps], axis=1) / sd[:, None], a


def _elfving_bound(F: np.ndarray) -> float:
    """Smallest per-tube variance of log K over approximate designs: 1/r² with r the largest multiple of
    c = e_logK in the convex hull of ±f (Elfving 1952, Ann. Math. Stat. 23:255; Atkinson, Donev & Tobias
    2007, Optimum Experimental Designs, ch. 17), as a linear programme in (w⁺, w⁻, r)."""
    C = F.shape[0]
    cost = np.zeros(2 * C + 1)
    cost[-1] = -1.0  # maximise r
    A_eq = np.zeros((3, 2 * C + 1))
    A_eq[0:2, :C] = F.T
    A_eq[0:2, C : 2 * C] = -F.T
    A_eq[0:2, -1] = -np.array([1.0, 0.0])
    A_eq[2, : 2 * C] = 1.0
    res = linprog(cost, A_eq=A_eq, b_eq=[0.0, 0.0, 1.0], bounds=[(0, None)] * (2 * C + 1), method="highs")
    assert res.status == 0
    return 1.0 / res.x[-1] ** 2


def _var(F: np.ndarray, counts: np.ndarray) -> float:
    M = (F * counts[:, None]).T @ F
    det = M[0, 0] * M[1, 1] - M[0, 1] ** 2
    return M[1, 1] / det if det > 1e-12 * M[0, 0] * M[1, 1] else np.inf


def _exact_c_optimal(F: np.ndarray, n: int) -> float:
    """The best n-tube design for Var(log K): every two-point design (Elfving: the approximate optimum has
    at most two support points for two parameters), then single-tube exchanges until none improves
    (Fedorov 1972)."""
    C = F.shape[0]
    i, j = np.triu_indices(C, 1)
    best, counts = np.inf, None
    for k in range(1, n):
        M = k * np.einsum("cp,cq->cpq", F[i], F[i]) + (n - k) * np.einsum("cp,cq->cpq", F[j], F[j])
        det = M[:, 0, 0] * M[:, 1, 1] - M[:, 0, 1] ** 2
        v = np.where(det > 0, M[:, 1, 1] / np.where(det > 0, det, 1.0), np.inf)
        m = int(np.argmin(v))
        if v[m] < best:
            best, counts = v[m], np.zeros(C, dtype=int)
            counts[i[m]], counts[j[m]] = k, n - k
    improved = True
    while improved:
        improved = False
        for a in np.flatnonzero(counts):
            for b in range(C):
                trial = counts.copy()
                trial[a] -= 1
                trial[b] += 1
                v = _var(F, trial)
                if v < best * (1 - 1e-12):
                    best, counts, improved = v, trial, True
                    break
    return best


def test_trace_metal_target_design_is_c_optimal():
    plan = trace_plan(alternatives=HIDDEN)
    d = design(plan, seed=0, robust=False, volumetric=False)  # model check on, as by default
    assert d.model_check is not None and not d.model_check.replaced
    # the candidates: every LQ volume on the 0.05 mL grid from min_volume to the room left beside 1.00 mL TM
    # and the 5 % make-up reserve, screened as the README states (≤ 5 % chance of leaving 0.05–1.0 when ε
    # is off by its 30 % rsd)
    v = np.round(np.arange(0.10, 8.5 + 1e-9, 0.05), 10)
    F, a = _independent_rows(5.0, 45000.0, v)
    band = 0.3 * a
    risk = norm.cdf((0.05 - a) / band) + norm.sf((1.0 - a) / band)
    keep = risk <= 0.05
    F = F[keep]
    n = 7
    v_exact = _exact_c_optimal(F, n)
    assert v_exact >= _elfving_bound(F) / n * (1 - 1e-9)  # an exact design cannot beat the approximate bound
    used = d.recipe.column("LQ")
    Fd, _ = _independent_rows(5.0, 45000.0, used)
    v_design = np.linalg.inv(Fd.T @ Fd)[0, 0]
    assert v_design <= 1.02 * v_exact  # within 2 % of the independent c-optimal exchange
