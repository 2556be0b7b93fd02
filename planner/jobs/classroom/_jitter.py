"""Cards for the pooled fit alone (``kplan cards --pooled``): the class's tubes as the optimal design of
all of them, dealt out, each card nudged on the grid only as far as needed to make the cards differ.

1. The pooled design is the efficient rounding of the optimal approximate design's weights to N·n tubes
   (Pukelsheim & Rieder 1992, Biometrika 79:763), dealt out like cards, tube i of the sorted list to
   student i mod N: each student's n tubes then follow the weights as closely as n tubes can.
2. Copies of one set of compositions are not allowed, so each tube is moved to a random feasible grid
   neighbour (within ±r grid steps of every designed stock, r = 1, 2, … only as far as needed), a dozen
   proposals per student, drawn from the seeded generator in one vectorised batch. The information near
   an optimal support point is flat, so the loss is small.
3. Each proposal is scored by its own Cramér–Rao SE of the target at the guess and by the robust
   criterion; each student takes their best proposal whose set of compositions no earlier card has and
   whose SE meets ``design.goal_se``.

Such cards hold two or three clusters of near-identical tubes: efficient for the class's pooled fit, but
not a series a student can plot (the default teaching series, :mod:`._series`, is).
"""

from __future__ import annotations

from collections.abc import Iterator

import numpy as np

from ...inference import exchange
from ...inference.approximate import ApproximateDesign
from ...inputs.text import plural
from ._drafts import Drafts
from ._grid import Grid, set_key
from ._pooled import student_target_var

__all__ = ["pooled_drafts"]

PROPOSALS = 12  # jittered proposals per student and radius
MAX_RADIUS = 8  # grid steps a tube may move from its pooled composition
FALLBACKS = 4  # spare proposals kept per student for when the assessment rejects a card


def _neighbours(grid: Grid, support: np.ndarray, radius: int) -> tuple[np.ndarray, np.ndarray]:
    """Feasible grid neighbours (within ±radius steps per designed stock) of each support point:
    a padded table (S, O) of feasible indices, valid entries first, and their counts (S,)."""
    from ._grid import lookup

    d = grid.coords.shape[1]
    off = np.stack(
        [m.ravel() for m in np.meshgrid(*([np.arange(-radius, radius + 1)] * d), indexing="ij")], axis=1
    )
    off = off[np.argsort(np.abs(off).sum(axis=1), kind="stable")]  # nearest first
    table = lookup(grid, grid.coords[support][:, None, :] + off[None, :, :])  # (S, O)
    found = table >= 0
    first = np.argsort(~found, axis=1, kind="stable")  # valid entries first
    return np.take_along_axis(table, first, axis=1), found.sum(axis=1)


def _proposals(grid: Grid, alloc: np.ndarray, radius: int, K: int, rng: np.random.Generator, t: int):
    """K jittered proposals for each row of ``alloc`` (m, n): every tube moved to a uniformly drawn
    feasible grid neighbour within ±radius steps, all at once. Returns the proposals (m, K, n) and
    their SE at the guess and robust loss (m, K)."""
    m, n = alloc.shape
    sup = np.unique(alloc)
    table, count = _neighbours(grid, sup, radius)
    where = np.searchsorted(sup, alloc)  # (m, n) rows of the table
    cnt = count[where][:, None, :]
    pick = np.minimum((rng.random((m, K, n)) * cnt).astype(int), cnt - 1)
    props = table[where[:, None, :], pick]  # (m, K, n) feasible indices
    v = student_target_var(grid.rows.take(props.reshape(-1, n)), t)  # (G, m·K)
    with np.errstate(divide="ignore"):
        loss = grid.crit @ np.log(v)
    return props, np.sqrt(v[grid.guess]).reshape(m, K), loss.reshape(m, K)


def _deal(ap: ApproximateDesign, N: int, n: int) -> np.ndarray:
    """The pooled design of N·n tubes dealt out: (N, n) feasible indices, tube i to student i mod N."""
    pooled = exchange.efficient_rounding(ap.weights, N * n)
    return np.repeat(np.arange(pooled.size), pooled).reshape(n, N).T


def pooled_drafts(grid: Grid, ap: ApproximateDesign, n: int, N: int, goal: float, rng, t: int) -> Drafts:
    """Cards for the pooled fit alone (module docstring)."""
    alloc = _deal(ap, N, n)
    chosen: list[np.ndarray | None] = [None] * N
    spare: list[list[np.ndarray]] = [[] for _ in range(N)]
    used: set[bytes] = set()
    radius = 0
    pending = np.arange(N)
    while pending.size and radius <= MAX_RADIUS:
        props, se, loss = _proposals(grid, alloc[pending], radius, 1 if radius == 0 else PROPOSALS, rng, t)
        rank = np.argsort(np.where(se <= goal, loss, np.inf), axis=1, kind="stable")
        pending = _take(grid, pending, props, se, rank, goal, used, chosen, spare)
        if pending.size:
            radius += 1
    notes = []
    unplaced = {int(s) for s in pending}
    if unplaced:
        notes.append(
            f"{plural(len(unplaced), 'student')} got no distinct recipe meeting goal_se within ±{MAX_RADIUS} "
            f"grid steps: their cards repeat the pooled allocation and are marked as failing"
        )
        for s in unplaced:
            chosen[s] = alloc[s]
    cards = [c for c in chosen if c is not None]

    def alternatives(s: int, used_now: set[bytes]) -> Iterator[tuple[np.ndarray, None]]:
        for alt in spare[s]:  # the student's next proposals, then fresh ones at growing radius
            if set_key(grid, alt) not in used_now:
                yield alt, None
        for r in range(1, MAX_RADIUS + 1):
            props, se, loss = _proposals(grid, alloc[s][None, :], r, PROPOSALS, rng, t)
            for k in np.argsort(np.where(se[0] <= goal, loss[0], np.inf), kind="stable"):
                if not se[0, k] <= goal:
                    break
                if set_key(grid, props[0, k]) not in used_now:
                    yield props[0, k], None

    return Drafts(cards, [None] * N, alternatives, unplaced, radius, notes)


def _take(grid, pending, props, se, rank, goal, used, chosen, spare) -> np.ndarray:
    """Each pending student takes their best proposal meeting the goal whose set of compositions no
    earlier card has (keeping a few more as spares); returns the students still without a card."""
    left = []
    for i, s in enumerate(pending):  # one entry per student and proposal: hashing, not arithmetic
        for k in rank[i]:
            if not se[i, k] <= goal:
                break
            key = set_key(grid, props[i, k])
            if key in used:
                continue
            if chosen[s] is None:
                chosen[s] = props[i, k]
                used.add(key)
            elif len(spare[s]) < FALLBACKS:
                spare[s].append(props[i, k])
        if chosen[s] is None:
            left.append(s)
    return np.array(left, dtype=int)
