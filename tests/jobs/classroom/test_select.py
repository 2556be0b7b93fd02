"""The sequential choice of cards (Wynn 1970) against the optimal approximate design on the same rows."""

from __future__ import annotations

import numpy as np
import pytest

from planner.inference.approximate import approximate_design
from planner.jobs.classroom import _select
from planner.jobs.classroom._grid import design_inputs, feasible_grid, lookup, nonzero_columns


@pytest.fixture(scope="module")
def grid(study):
    return feasible_grid(study)


@pytest.mark.parametrize("N", [20, 80])
def test_one_tube_cards_approach_the_optimal_design(study, grid, monkeypatch, N):
    # one-tube "cards" with the dispensers' columns left out: the sequential construction against the
    # optimal approximate design of N tubes on the same candidates (Kiefer & Wolfowitz 1960)
    monkeypatch.setattr(_select, "NEAR", 0.0)
    t = study.params.target
    F, M0, nu = design_inputs(grid)
    ks, _ = nonzero_columns(grid.rows)
    Q = study.params.size + int(ks.sum())
    F, M0 = F[..., :Q], M0[:Q, :Q]
    Mc = np.einsum("gcrp,gcrq->gcpq", F, F)
    chosen, rest = _select.sequential_selection(Mc, M0, nu, t, N, np.random.default_rng(0))
    assert len(set(chosen.tolist())) == N and len(rest) == Mc.shape[1] - N  # distinct, the rest kept
    v = np.linalg.inv(M0 + Mc[:, chosen].sum(axis=1))[:, t, t]
    seq = float(nu @ np.log(N * v))
    best = approximate_design(F, criterion="target", target=t, M0=M0, node_weights=nu, n_tubes=N)
    # derived: an exact design is an approximate one, so it cannot beat the optimum (up to its tolerance);
    # distinct tubes near the optimum's support points cost little
    assert seq >= best.criterion_value - 1e-6
    assert np.exp(seq - best.criterion_value) <= 1.10


def test_lookup_finds_every_feasible_point_and_nothing_else(grid):
    idx = lookup(grid, grid.coords)
    assert np.array_equal(idx, np.arange(grid.coords.shape[0]))
    outside = grid.coords.max(axis=0) + 1
    assert lookup(grid, outside[None, :])[0] == -1
    assert lookup(grid, np.array([[-5, -5]]))[0] == -1
