"""Paths through the feasible grid along which a teaching series varies, and series drawn along them.

A *line* holds every designed stock but one at a fixed volume while that one steps (a binding curve or a
mole-ratio series: one reagent constant, the other rising), or holds the sum of the metal and ligand
volumes while their split changes (a Job series). Its points are the feasible grid compositions on it,
sorted by their *position* (the varied stock's grid level, or the metal's level along a Job diagonal).

A series of n tubes is drawn on a line as n target positions — geometric between two ends for a binding
curve (even steps of log concentration, so even steps of log K·[partner] along the curve), linear for the
mole-ratio and Job series (the hand methods plot against the ratio or the mole fraction) — with
``n − nd`` of them repeating an end, and each target snapped to the nearest point of the line. Every
draw is vectorised: the lines are one flat array sorted by (line, position), searched once.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ._grid import Grid

__all__ = ["MAX_COPIES", "Lines", "axis_lines", "diagonal_lines", "draw", "ends_between", "snap"]

MAX_COPIES = 3  # a composition repeats at most this often on a card [our choice: a few replicates]


@dataclass(frozen=True)
class Lines:
    """Feasible points of every line, flat and sorted by (line, position).

    Attributes
    ----------
    line, pos, idx : (L,) line number, position and feasible grid index of each point.
    start, count : (nl,) first point and number of points of each line.
    varied, partner : (nl,) index of the stock that steps (Job: the metal; a designed axis) and of the
        stock it is read against (binding, mole-ratio: the reagent held constant, a designed axis or a
        stock the plan holds at a fixed volume; Job: the ligand).
    ref : (nl,) a reference position per line: the varied level at the complex's ratio (mole-ratio),
        the diagonal's sum of levels (Job), the line's top level (binding).
    """

    line: np.ndarray
    pos: np.ndarray
    idx: np.ndarray
    start: np.ndarray
    count: np.ndarray
    varied: np.ndarray
    partner: np.ndarray
    ref: np.ndarray

    @property
    def n_lines(self) -> int:
        return int(self.start.size)

    def rank(self, li: np.ndarray, value: np.ndarray, side: str = "left") -> np.ndarray:
        """Number of points of line ``li`` whose position is below ``value`` (``side="right"``: ≤)."""
        big = float(self.pos.max()) * 4.0 + 10.0
        key = self.line * big + self.pos
        return np.searchsorted(key, li * big + np.minimum(value, big / 2), side=side) - self.start[li]

    def at(self, li: np.ndarray, k: np.ndarray) -> np.ndarray:
        """Position of the k-th point of line ``li``."""
        return self.pos[self.start[li] + k]


def _flat(keys: np.ndarray, pos: np.ndarray, idx: np.ndarray, min_points: int):
    """Group points by line key (rows of ``keys``), sorted by position; keep lines of ≥ min_points."""
    ukeys, inv = np.unique(keys, axis=0, return_inverse=True)
    inv = inv.ravel()
    count = np.bincount(inv, minlength=len(ukeys))
    keep = count >= min_points
    renum = np.cumsum(keep) - 1
    m = keep[inv]
    line, p, ix = renum[inv[m]], pos[m], idx[m]
    order = np.lexsort((p, line))
    line, p, ix = line[order], p[order], ix[order]
    cnt = count[keep]
    start = (np.cumsum(cnt) - cnt).astype(np.int64)
    return ukeys[keep], line, p, ix, start, cnt


def axis_lines(grid: Grid, varied: list[int], partner_of: dict[int, int], min_points: int, span: float):
    """Lines along each designed axis in ``varied`` (the others held), whose nonzero levels number at least
    ``min_points`` and span at least ``span`` (top / bottom level)."""
    parts = []
    for v in varied:  # one or two axes
        other = [j for j in range(grid.coords.shape[1]) if j != v]
        on = grid.coords[:, v] > 0
        keys = grid.coords[on][:, other] if other else np.zeros((int(on.sum()), 1), dtype=np.int64)
        _, line, pos, idx, start, cnt = _flat(keys, grid.coords[on, v], np.flatnonzero(on), min_points)
        top = pos[start + cnt - 1]
        wide = top >= span * pos[start]
        parts.append((line, pos, idx, start, cnt, wide, v, partner_of[v], top))
    return _join(parts)


def diagonal_lines(grid: Grid, m_axis: int, l_axis: int, min_points: int) -> Lines:
    """Job diagonals: the metal and ligand levels sum to a constant (other designed stocks held)."""
    c = grid.coords
    other = [j for j in range(c.shape[1]) if j not in (m_axis, l_axis)]
    on = (c[:, m_axis] > 0) & (c[:, l_axis] > 0)
    s = (c[on, m_axis] + c[on, l_axis])[:, None]
    keys = np.concatenate([c[on][:, other], s], axis=1)
    ukeys, line, pos, idx, start, cnt = _flat(keys, c[on, m_axis], np.flatnonzero(on), min_points)
    wide = np.ones(cnt.size, dtype=bool)
    return _join([(line, pos, idx, start, cnt, wide, m_axis, l_axis, ukeys[:, -1].astype(float))])


def _join(parts) -> Lines:
    """One flat :class:`Lines` from per-axis groups, keeping the lines marked ``wide``."""
    lines, poss, idxs, counts, varied, partner, refs = [], [], [], [], [], [], []
    base = 0
    for line, pos, idx, _start, cnt, wide, v, w, ref in parts:
        keep = wide[line]
        renum = np.cumsum(wide) - 1
        lines.append(renum[line[keep]] + base)
        poss.append(pos[keep].astype(float))
        idxs.append(idx[keep])
        counts.append(cnt[wide])
        varied.append(np.full(int(wide.sum()), v))
        partner.append(np.full(int(wide.sum()), w))
        refs.append(np.asarray(ref, dtype=float)[wide])
        base += int(wide.sum())
    count = np.concatenate(counts).astype(np.int64)
    start = (np.cumsum(count) - count).astype(np.int64)
    return Lines(
        np.concatenate(lines),
        np.concatenate(poss),
        np.concatenate(idxs),
        start,
        count,
        np.concatenate(varied),
        np.concatenate(partner),
        np.concatenate(refs),
    )


def draw(
    lines: Lines, lo: np.ndarray, hi: np.ndarray, n: int, min_distinct: int, geometric: bool, rng
) -> np.ndarray:
    """Target positions (K, n) between the ends ``lo`` and ``hi`` (K,): ``nd`` distinct steps (drawn in
    [min_distinct, n]) geometric or linear, the remaining n − nd tubes repeating the top or bottom end
    (split at random, each end at most MAX_COPIES times in all), in increasing order."""
    K = lo.size
    # no composition more than MAX_COPIES times: a few replicates, not a cluster
    nd = rng.integers(max(min(min_distinct, n), n - 2 * (MAX_COPIES - 1)), n + 1, K)
    extra = n - nd
    rt_lo = np.maximum(extra - (MAX_COPIES - 1), 0)
    rt_hi = np.minimum(extra, MAX_COPIES - 1)
    rt = rt_lo + np.minimum((rng.random(K) * (rt_hi - rt_lo + 1)).astype(np.int64), rt_hi - rt_lo)
    rb = extra - rt
    k = np.clip(np.arange(n)[None, :] - rb[:, None], 0, (nd - 1)[:, None])
    frac = k / np.maximum(nd - 1, 1)[:, None]
    if geometric:
        return lo[:, None] * (hi / lo)[:, None] ** frac
    return lo[:, None] + (hi - lo)[:, None] * frac


def snap(lines: Lines, li: np.ndarray, target: np.ndarray) -> np.ndarray:
    """Feasible grid index (K, n) of the point of line ``li`` (K,) nearest each target position."""
    li2 = np.broadcast_to(li[:, None], target.shape)
    k = np.clip(lines.rank(li2, target), 1, np.maximum(lines.count[li2] - 1, 1))
    k = np.minimum(k, lines.count[li2] - 1)
    below = lines.at(li2, np.maximum(k - 1, 0))
    above = lines.at(li2, k)
    take = np.where(np.abs(below - target) <= np.abs(above - target), np.maximum(k - 1, 0), k)
    return lines.idx[lines.start[li2] + take]


def ends_between(lines: Lines, li: np.ndarray, lo_max, hi_min, hi_max, rng, low_bias: bool = False):
    """Draw the two ends of a series on lines ``li``: the low end among the points at or below
    ``lo_max``, the high end among the points in [max(``hi_min``, next point), ``hi_max``] (each (K,));
    ``low_bias`` favours the lowest points (u² draws). Returns (lo, hi) positions."""
    n_low = np.clip(lines.rank(li, lo_max, "right"), 1, lines.count[li] - 1)
    u = rng.random(li.size)
    a = (u * u if low_bias else u) * n_low
    a = np.minimum(a.astype(np.int64), n_low - 1)
    lo = lines.at(li, a)
    b0 = np.maximum(lines.rank(li, hi_min(lo) if callable(hi_min) else hi_min), a + 1)
    b1 = np.maximum(lines.rank(li, hi_max, "right"), b0 + 1)
    b1 = np.minimum(b1, lines.count[li])
    b0 = np.minimum(b0, b1 - 1)
    b = b0 + np.minimum((rng.random(li.size) * (b1 - b0)).astype(np.int64), b1 - b0 - 1)
    return lo, lines.at(li, b)
