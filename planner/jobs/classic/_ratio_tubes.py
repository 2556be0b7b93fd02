"""The tubes of a mole-ratio series, chosen from what the glassware allows: the fixed volume and the
evenly spaced rising volumes that keep every reading inside the linear range over the guess's
uncertainty (assess's own screen), with tubes on both sides of the break for the two hand lines.

The candidates are evenly spaced series on the grid — first volume a, stride b grid steps — at fixed
volumes screened evenly in log and then on every grid value next to the best; the choice and its reasons
are in :func:`_choose`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ._deps import Plan, PlanError, make_up_min_mL
from .common import (
    RANGE_RISK,
    SeriesInfeasible,
    capacity_mL,
    fill_volumes,
    fmt_conc,
    grid_between,
    pick,
    screen,
    snap,
    status_of,
    what_would_fit,
)

RATIO_SPAN = 2.5  # the series runs to 2.5 × the highest complex ratio [common practice: well past the break]
LINE_TUBES = 3  # tubes wanted on each hand line: a third shows the line straight [common practice]
LINE_MARGIN = 0.25  # the hand lines use tubes at ≤ 0.75 and ≥ 1.25 × the expected ratio [common practice]
# the series screened for the default plan (each fixed volume × stride × first volume)
FIXED_VOLUMES = 40  # fixed volumes, evenly in log from the least volume to the room in the tube
STRIDES = 8  # strides between the rising volumes, from one grid step to what reaches the top ratio
LOW_RATIOS = 6  # first volumes, from the least volume to (1 − LINE_MARGIN) × the ratio
WHAT_IF_VOLUMES = 12  # fixed volumes screened for each what-if (cell, dilution) when none is in range


@dataclass(frozen=True)
class Room:
    """What the glassware leaves a series: the grid step, the least volume worth dispensing (on the
    grid), the room in the tube for the two stocks, and the capacity of the dispensers of the fixed and
    of the rising stock."""

    step: float
    vmin: float
    avail: float
    caps: tuple[float, float]


@dataclass(frozen=True)
class Layout:
    """The series' stocks (fixed, rising) and their concentrations, the complex's ratio, the number of
    tubes, the highest ratio (given, or the ceiling of the default) and the room the glassware leaves."""

    fix_id: str
    var_id: str
    c_fix: float
    c_var: float
    expected: float
    n: int
    top: float
    top_given: bool
    room: Room

    @property
    def per_ratio(self) -> float:
        """mL of the rising stock per mL of the fixed one and unit ratio: v_var = ratio·v_fix·per_ratio."""
        return self.c_fix / self.c_var


def room_of(plan: Plan, fix_id: str, var_id: str) -> Room:
    g = plan.glassware
    step = g.step_mL
    vmin = float(snap(np.ceil(max(g.min_volume_mL, step) / step - 1e-9) * step, step))
    avail = (
        g.tube_volume_mL
        - make_up_min_mL(plan)
        - sum(v for k, v in plan.design.fixed.items() if k not in (fix_id, var_id))
    )
    return Room(step, vmin, float(avail), (capacity_mL(plan, fix_id), capacity_mL(plan, var_id)))


def top_ratio(expected: float, highest: float, max_ratio: float | None) -> tuple[float, bool]:
    """(highest ratio, given?): the one given, else RATIO_SPAN × the richest complex's ratio as the
    ceiling of the strides screened."""
    if max_ratio is None:
        return RATIO_SPAN * highest, False
    r = float(max_ratio)
    if not r > expected * (1 + LINE_MARGIN):
        raise PlanError(
            "max_ratio",
            f"{r:g} does not reach past the break at {expected:g}: use at least {2 * expected:g}",
        )
    return r, True


def plan_tubes(plan, model, layout: Layout, total_M, vi):
    """(fixed volume, rising volumes (n,), what would keep the readings in range or "", notes on the
    ratios chosen) of the series to plan."""
    room = layout.room
    if total_M is not None:
        v_given = float(snap(total_M * plan.glassware.tube_volume_mL / layout.c_fix, room.step))
        fixed = np.array([v_given])
    else:
        fixed = _fixed_volumes(room)
    cand = _candidates(fixed, layout, layout.per_ratio)
    if cand[0].size == 0:
        raise _no_series(plan, layout, total_M, fixed)
    worst, inside = screen(plan, model, *_volumes(plan, layout, *cand))
    k, status = _choose(worst, inside, cand, layout)
    finer = grid_between(fixed, float(cand[0][k]), room.step, upward=status == "pass")
    more = _candidates(finer, layout, layout.per_ratio)
    if more[0].size:  # the grid between the screened fixed volumes next to the best
        w2, i2 = screen(plan, model, *_volumes(plan, layout, *more))
        cand = (np.concatenate([cand[0], more[0]]), np.concatenate([cand[1], more[1]]))
        worst, inside = np.concatenate([worst, w2]), np.concatenate([inside, i2])
        k, status = _choose(worst, inside, cand, layout)
    v_fix, v_var = float(cand[0][k]), cand[1][k]
    range_fix = _range_fix(plan, model, layout, fixed, vi) if status != "pass" else ""
    return v_fix, v_var, range_fix, _span_note(v_var / (v_fix * layout.per_ratio), layout, status)


def _span_note(ratio: np.ndarray, layout: Layout, status: str) -> list[str]:
    """A note when the ratios differ from the classic top/n, 2·top/n, …, top."""
    usual = layout.top
    lo_usual = usual / layout.n
    if ratio[0] <= lo_usual * 1.05 and ratio[-1] >= usual * 0.95:
        return []
    why = (
        "chosen on the grid so that every reading stays inside the linear range over the guess's range"
        if status == "pass"
        else "the least at risk of leaving the linear range on this grid"
    )
    return [
        f"ratios {ratio[0]:.3g}–{ratio[-1]:.3g} instead of the usual {lo_usual:.3g}–{usual:.3g}: {why}, "
        f"with at least two tubes on each side of the break"
    ]


def _fixed_volumes(room: Room) -> np.ndarray:
    """The fixed volumes to screen first: FIXED_VOLUMES evenly in log from the least volume to what
    leaves room for the least volume of the rising stock, on the grid."""
    top = min(room.avail - room.vmin, room.caps[0])
    if top < room.vmin - 1e-9:
        return np.zeros(0)
    return np.unique(snap(np.geomspace(room.vmin, top, FIXED_VOLUMES), room.step))


def _candidates(fixed, layout: Layout, per_ratio: float) -> tuple[np.ndarray, np.ndarray]:
    """Every evenly spaced series to screen: (B,) fixed volumes and (B, n) rising volumes on the grid.

    The rising volumes are a + b·i grid steps, i = 0 … n − 1 (at a fixed volume the ratios are then evenly
    spaced too): the first, a, from the least volume up to (1 − LINE_MARGIN) × the complex's ratio
    (LOW_RATIOS values); the stride b from one step up to the most that stays within the top ratio
    (STRIDES values, geometric), or the stride that reaches it when it was given. Kept when the volumes
    are within the tube and the dispensers and leave at least two tubes on each side of the break for
    the hand lines (the sides of :func:`two_line_break`). ``per_ratio`` is c_fix/c_var (a what-if
    dilutes the rising stock)."""
    room, n = layout.room, layout.n
    step = room.step
    vf = np.asarray(fixed, dtype=float)[:, None, None]
    unit = vf * per_ratio / step  # grid steps of the rising stock per unit ratio
    a_min = float(np.round(room.vmin / step))
    a_max = np.floor((1 - LINE_MARGIN) * layout.expected * unit + 1e-9)
    a = np.round(a_min + np.linspace(0.0, 1.0, LOW_RATIOS)[None, None, :] * np.maximum(a_max - a_min, 0))
    if layout.top_given:
        b = np.maximum(np.round((layout.top * unit - a) / (n - 1)), 1.0)
    else:
        b_max = np.maximum((layout.top * unit - a_min) / (n - 1), 1.0)
        b = np.maximum(np.floor(b_max ** np.linspace(0.0, 1.0, STRIDES)[None, :, None] + 1e-9), 1.0)
    vf, a, b, a_max = (x.ravel() for x in np.broadcast_arrays(vf, a, b, a_max))
    vv = snap((a[:, None] + b[:, None] * np.arange(n)) * step, step)
    ok = (a <= a_max) & _valid(vf, vv, room)
    before, after = line_sides(vv / (np.maximum(vf, 1e-300)[:, None] * per_ratio), layout.expected)
    ok &= (before.sum(axis=1) >= 2) & (after.sum(axis=1) >= 2)
    if not ok.any():
        return np.zeros(0), np.zeros((0, n))
    rows = np.unique(np.column_stack([vf[ok], vv[ok]]), axis=0)
    return rows[:, 0], rows[:, 1:]


def _valid(v_fix: np.ndarray, v_var: np.ndarray, room: Room) -> np.ndarray:
    """Which series have distinct rising volumes on the grid, every volume above the least, the two
    inside the tube and each within its dispenser's capacity."""
    distinct = np.all(np.diff(v_var, axis=1) > room.step / 2, axis=1)
    return (
        distinct
        & (v_var[:, 0] >= room.vmin - 1e-9)
        & (v_fix + v_var[:, -1] <= room.avail + 1e-9)
        & (v_fix >= room.vmin - 1e-9)
        & (v_fix <= room.caps[0] + 1e-9)
        & (v_var[:, -1] <= room.caps[1] + 1e-9)
    )


def line_sides(ratio: np.ndarray, expected: float) -> tuple[np.ndarray, np.ndarray]:
    """The tubes of the hand lines: before (≤ (1 − margin)·expected) and after (≥ (1 + margin)·expected)."""
    before = ratio <= expected * (1 - LINE_MARGIN) + 1e-12
    after = ratio >= expected * (1 + LINE_MARGIN) - 1e-12
    return before, after


def _volumes(plan, layout: Layout, v_fix: np.ndarray, v_var: np.ndarray):
    """(B, n, k) volumes and (B, n) tube volumes of the candidate series."""
    fixed = np.broadcast_to(np.asarray(v_fix, dtype=float)[:, None], v_var.shape)
    return fill_volumes(plan, {layout.fix_id: fixed, layout.var_id: v_var})


def _choose(worst, inside, cand, layout: Layout) -> tuple[int, str]:
    """The series to plan and its linear-range status: of those in range over the guess's uncertainty,
    the ones with LINE_TUBES tubes on each hand line where any has, of those the most concentrated fixed
    reagent (the sharpest break), then the most tubes on the shorter line, then the widest span of
    ratios; else the least at risk (:func:`.common.pick`)."""
    ok = worst <= RANGE_RISK + 1e-12
    if not ok.any():
        return pick(worst, inside)
    v_fix, v_var = cand
    ratio = v_var / (v_fix[:, None] * layout.per_ratio)
    before, after = line_sides(ratio, layout.expected)
    shorter = np.minimum(before.sum(axis=1), after.sum(axis=1))
    order = np.lexsort((ratio[:, -1] - ratio[:, 0], shorter, v_fix, np.minimum(shorter, LINE_TUBES)))
    return int(order[ok[order]][-1]), "pass"


def _no_series(plan, layout: Layout, total_M, fixed) -> PlanError:
    """The error when no series fits the grid: the given total is wrong (an input error), or the stocks
    and glassware cannot make one (infeasible)."""
    room, n, e = layout.room, layout.n, layout.expected
    need = (
        f"{n} volumes of {layout.var_id}, distinct on the {room.step:g} mL grid and at least "
        f"{room.vmin:g} mL, rising from ≤ {(1 - LINE_MARGIN) * e:g}× to ≥ {(1 + LINE_MARGIN) * e:g}× "
        f"(two tubes on each side of the break) up to {layout.top:g}×"
    )
    if total_M is not None:
        return PlanError(
            "total_M",
            f"{fmt_conc(total_M)} of the fixed reagent is {float(fixed[0]):g} mL of {layout.fix_id}, beside "
            f"which {need} do not fit the {plan.glassware.tube_volume_mL:g} mL tube and the dispensers: "
            f"choose another total_M, fewer points or another max_ratio",
        )
    return SeriesInfeasible(
        "points",
        f"{need} do not fit a {plan.glassware.tube_volume_mL:g} mL tube beside the fixed {layout.fix_id}: "
        f"use fewer points, a higher max_ratio, or a {layout.var_id} stock nearer {fmt_conc(layout.c_fix)} "
        f"(the fixed stock's concentration) so that its volumes are on the grid",
    )


def _range_fix(plan, model, layout: Layout, fixed, vi) -> str:
    """What would keep the series in range: a cell or a dilution of the rising stock, each screened over
    the same kinds of series (on a coarser set of fixed volumes, to keep the what-if quick)."""
    few = fixed[:: max(1, fixed.size // WHAT_IF_VOLUMES)]

    def fits(m, scale: float) -> str:  # the rising stock diluted by ``scale``: its volumes change
        cand = _candidates(few, layout, layout.per_ratio / scale)
        if cand[0].size == 0:
            return "fail"
        return status_of(*screen(plan, m, *_volumes(plan, layout, *cand)))

    return what_would_fit(model, fits, f"the {layout.var_id} stock", comps=(vi,))
