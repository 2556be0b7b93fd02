"""Job's method of continuous variation (Job 1928, Ann. Chim. 9:113).

Equimolar metal and ligand stocks are mixed at a constant sum of volumes, so every tube has the same
total concentration C = [M]₀ + [L]₀ while the metal's mole fraction x = [M]₀/C runs across (0, 1). The
corrected absorbance Y = A − b·(ε_M·[M]₀ + ε_L·[L]₀) equals b·Σ_s (ε_s − p_s·ε_M − q_s·ε_L)·[s], so for a
single complex M_pL_q it is proportional to [M_pL_q], whose maximum lies at x = p/(p + q) for any K and
any ε (Job 1928). With two complexes (ML + ML2) the extremum lands between and moves with C; for weak
binding the curve is flat. The series is judged by whether it tells the plan's stoichiometry from its
rivals (1:1, 1:2, 2:1, 1:1+1:2) above the noise (:mod:`.rivals`), and if not, which total would
[source: Hibbert & Thordarson 2016, Chem. Commun. 52:12792; Ulatowski et al. 2016, J. Org. Chem. 81:1746].
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import rivals as rv
from ._deps import (
    Check,
    Plan,
    PlanError,
    assess_tubes,
    error_budget,
    make_up_min_mL,
    plan_devices,
    plan_model,
    plural,
    predict,
    tube_ions_M,
    whitening,
)
from .common import (
    RANGE_RISK,
    ClassicSeries,
    SeriesInfeasible,
    capacity_mL,
    corrected,
    curve_points,
    fill_volumes,
    finish,
    fmt_conc,
    grid_between,
    pick,
    predict_volumes,
    pure_stock,
    scaled_in_range,
    screen,
    series_points,
    series_recipe,
    snap,
    status_of,
    what_would_fit,
)

METHOD = "job"
DEFAULT_POINTS = 9
EXTREMUM_SHIFT = 0.02  # a peak 0.02 off 1/(n+1) misreads one stoichiometry as a mixture [common practice]
MIN_DEFAULT_POINTS = 5  # the default series gives up points down to 5 to stay in range [common practice]
X_LO_MAX = 0.3  # the mole fractions span at least 0.3–0.7: the rise and fall at the peak [common practice]
LOW_FRACTIONS = 6  # spans screened at each total, from the widest the grid allows to X_LO_MAX
SUMS_SCREENED = 120  # totals screened first on a fine grid (then the grid next to the best)
WHAT_IF_SERIES = 150  # series screened for each what-if (cell, dilution) when none is in range
EQUIMOLAR_RTOL = 0.005  # stocks within 0.5 % count as equimolar [common practice: within their stated rsd]
CURVE_POINTS = 199
SEARCH_SCALES = 2.0 ** np.arange(1, 8)  # totals tried when the planned one cannot separate: ×2 … ×128
QUESTION = "which stoichiometry: does the curve tell the plan's complexes from 1:1, 1:2, 2:1 and 1:1+1:2?"


def continuous_variation(
    plan: Plan, *, points: int | None = None, total_M: float | None = None
) -> ClassicSeries:
    """Plan and judge a continuous-variation series.

    Parameters
    ----------
    points : number of tubes, their metal mole fractions evenly spaced and symmetric about 1/2 (default:
        the most from 9 down to 5 that stay in the linear range).
    total_M : total concentration [M]₀ + [L]₀ in each tube, mol/L (default: the largest on the grid
        that keeps every reading inside the linear range).

    The mole fractions run from x_lo to 1 − x_lo, x_lo from the usual 1/(points + 1) — or what the least
    volume allows at the total — up to X_LO_MAX, keeping two tubes on each side of every complex's
    extremum; of the series in range over the guess's uncertainty (assess's own screen) the one with the
    most points, then the widest span, then the largest total.
    """
    model = plan_model(plan)
    _, m_id, cM = pure_stock(plan, "M")
    _, l_id, cL = pure_stock(plan, "L")
    _require_equimolar(plan, m_id, cM, l_id, cL)
    if points is not None and int(points) < 3:
        n_pts = plural(int(points), "point")
        raise PlanError("points", f"{n_pts} cannot show an extremum: use at least 3 (9–11 is usual)")
    step = plan.glassware.step_mL
    room = _room(plan, model, m_id, l_id)
    ids = (m_id, l_id)
    if total_M is not None:
        sums = np.array([_given_sum(total_M, cM, room, plan.glassware.tube_volume_mL)])
    else:
        sums = _sums(room)
    n, cand, k, status = _choose_series(plan, model, ids, points, sums, room, total_M)
    vs, vm = float(cand[0][k]), cand[1][k]
    range_fix = ""
    if status != "pass":
        range_fix = _range_fix(plan, model, ids, cand, room, n)
    recipe = series_recipe(plan, {m_id: vm, l_id: snap(vs - vm, step)}, [f"J{i + 1}" for i in range(n)])
    a = assess_tubes(plan, recipe)
    st = a.state
    C = float(np.median(st.totals_M.sum(axis=1)))
    xm = st.totals_M[:, 0] / st.totals_M.sum(axis=1)
    sd = np.sqrt(np.diag(a.budget.total))
    y = corrected(model, st)
    xf, yf = _curve_at_sum(plan, model, ids, vs)
    x_ext, y_ext = _extremum(xf, yf)
    fits, close, needed = _rivals(plan, model, recipe, a, C)

    checks = _job_checks(model, ids, cM, x_ext, C, fits, needed)
    extra = {
        "stocks": {"metal": m_id, "ligand": l_id, "conc_M": cM},
        "total_M": C,
        "mole_fraction_span": [float(xm.min()), float(xm.max())],
        "extremum_mole_fraction": x_ext,
        "extremum_corrected_absorbance": y_ext,
        "plan_model": rv.plan_label(model),
        "discrimination": list(fits),
        "separation_wanted_sd": rv.SEPARATION_WANTED,
        "total_needed_M": needed[0] if needed else None,
        "path_cm_at_total_needed": needed[1] if needed else None,
        "series": series_points(recipe.tubes, "mole_fraction", xm, y, sd),
        "curve": curve_points("mole_fraction", xf, yf),
    }
    columns = {"x_M": xm, "Y": y, "±2sd": 2 * sd}
    ok = _ok_sentence(model, fits, C, x_ext)
    notes = [
        f"total concentration C = [M]0 + [L]0 = {fmt_conc(C)} in every tube ({vs:g} mL of stock)",
        *_span_note(vm, vs, n, room, status),
        f"extremum of the corrected absorbance at x_M = {x_ext:.3f} (Y = {y_ext:.3f})",
        "separation from rival models (whitened residual of their best fit): "
        + (", ".join(f"{f.model} {f.separation_sd:.1f} sd" for f in fits) or "none"),
    ]
    notes += _needed_note(model, close, needed)
    notes = _count_note(points, status, n) + notes
    return finish(
        METHOD, plan, QUESTION, recipe, a, checks, extra, columns, ok, notes=tuple(notes), range_fix=range_fix
    )


def _room(plan: Plan, model, m_id: str, l_id: str) -> _Room:
    """The grid, least volume and room for the two stocks in a tube (after the make-up and fixed volumes)."""
    g = plan.glassware
    step = g.step_mL
    avail = (
        g.tube_volume_mL
        - make_up_min_mL(plan)
        - sum(v for k, v in plan.design.fixed.items() if k not in (m_id, l_id))
    )
    vmin = float(snap(np.ceil(max(g.min_volume_mL, step) / step - 1e-9) * step, step))
    return _Room(step, vmin, float(avail), (capacity_mL(plan, m_id), capacity_mL(plan, l_id)), _peaks(model))


def _curve_at_sum(plan: Plan, model, ids, vs: float) -> tuple[np.ndarray, np.ndarray]:
    """The corrected absorbance between the tubes, at the same total stock volume ``vs``."""
    m_id, l_id = ids
    xf = np.linspace(0.005, 0.995, CURVE_POINTS)
    vol, tot = fill_volumes(plan, {m_id: xf * vs, l_id: (1 - xf) * vs})
    return xf, corrected(model, predict_volumes(model, vol, tot))


def _rivals(plan: Plan, model, recipe, a, C: float):
    """Rival models fitted at the planned total; those too close; and (if any) the total and path that
    would separate them."""
    st = a.state
    ions = tube_ions_M(model, recipe.volumes_mL, recipe.total_volume_mL)
    fits = _rival_fits(model, st.totals_M, ions, st.absorbance_true, a.budget.total)
    needed = None
    close = [f for f in fits if f.separation_sd < rv.SEPARATION_WANTED]
    if close:
        # search for the stoichiometric rivals first: the nested one may never separate at one wavelength
        nested = all(f.nested for f in close)
        needed = _total_that_separates(plan, model, recipe, ions, C, nested)
    return fits, close, needed


def _needed_note(model, close, needed) -> list[str]:
    """The total (and cell) that would separate the close rivals, when one was found."""
    if not needed:
        return []
    cell = f" in a {needed[1]:.2g} cm cell" if needed[1] < model.path_cm * 0.999 else ""
    kind = "nested" if all(f.nested for f in close) else "stoichiometric"
    return [
        f"a total of {fmt_conc(needed[0])}{cell} would separate the {kind} rivals by "
        f"≥ {rv.SEPARATION_WANTED:g} sd"
    ]


def _count_note(points: int | None, status: str, n: int) -> list[str]:
    """Why the default number of mole fractions was not kept, when it was not."""
    if points is None and status != "pass":
        return [
            f"no series of {DEFAULT_POINTS} down to {MIN_DEFAULT_POINTS} mole fractions can all stay inside "
            f"the linear range over the guess's range on this grid: planned the least at risk, {n} points"
        ]
    if points is None and n != DEFAULT_POINTS:
        return [
            f"{DEFAULT_POINTS} mole fractions cannot all stay inside the linear range over the guess's "
            f"range on this grid: planned {n}"
        ]
    return []


def _job_checks(model, ids, cM: float, x_ext: float, C: float, fits, needed) -> list[Check]:
    """The method's checks: equimolar stocks, the extremum, and the rivals when there are any."""
    m_id, l_id = ids
    checks = [
        Check("equimolar", "pass", f"{m_id} and {l_id} are both {fmt_conc(cM)}: equimolar"),
        _extremum_check(model, x_ext, C),
    ]
    if fits:
        checks.append(_discrimination_check(model, fits, C, needed))
    return checks


def _ok_sentence(model, fits, C: float, x_ext: float) -> str:
    """The verdict's sentence when the series answers its question."""
    far = [f for f in fits if not f.nested]
    return (
        f"the curve tells {rv.plan_label(model)} from "
        + (", ".join(f.model for f in far) or "its rivals")
        + f" by ≥ {rv.SEPARATION_WANTED:g} sd at C = {fmt_conc(C)}; extremum at x_M = {x_ext:.3f}"
    )


def corrected_curve(model, total_M: float, x: np.ndarray) -> np.ndarray:
    """Corrected absorbance Y(x) at total ``total_M`` for metal mole fractions ``x`` (no other ions),
    vectorised over x; the physics of the curve without the glassware."""
    x = np.asarray(x, dtype=float)
    tot = np.stack([x * total_M, (1 - x) * total_M], axis=-1)
    return corrected(model, predict(model, tot, warn=False))


def extremum_at(model, total_M: float, n: int = 999) -> float:
    """Metal mole fraction of the curve's extremum at total ``total_M`` (fine grid + parabola)."""
    x = np.linspace(0.5 / n, 1 - 0.5 / n, n)
    return _extremum(x, corrected_curve(model, total_M, x))[0]


def _require_equimolar(plan: Plan, m_id: str, cM: float, l_id: str, cL: float) -> None:
    if abs(cM / cL - 1.0) <= EQUIMOLAR_RTOL:
        return
    hi_id, hi_c, lo_c, comp = (m_id, cM, cL, "M") if cM > cL else (l_id, cL, cM, "L")
    k = [s.id for s in plan.stock].index(hi_id)
    flask = 100.0
    take = flask * lo_c / hi_c
    dil = plan.diluent.id if plan.diluent is not None else "the medium"
    raise SeriesInfeasible(
        f"stock[{k}].conc.{comp}",
        f"continuous variation needs equimolar stocks, but {m_id} is {fmt_conc(cM)} and {l_id} "
        f"{fmt_conc(cL)}: dilute {hi_id} — {take:.2f} mL made up to {flask:.0f} mL with {dil} gives "
        f"{fmt_conc(lo_c)} — and give that stock in the plan",
    )


@dataclass(frozen=True)
class _Room:
    """What the glassware leaves a Job series: the grid step, the least volume (on the grid), the room in
    the tube for the two stocks, the capacity of the metal's and the ligand's dispensers, and where each
    of the plan's complexes alone puts the extremum."""

    step: float
    vmin: float
    avail: float
    caps: tuple[float, float]
    peaks: tuple[float, ...]


def _peaks(model) -> tuple[float, ...]:
    """Where each complex M_pL_q alone puts the extremum: x_M = p/(p + q) (Job 1928)."""
    pq = [(float(p), float(q)) for (p, q, _), m in zip(model.stoich, model.complex_mask, strict=True) if m]
    return tuple(sorted({p / (p + q) for p, q in pq}))


def _given_sum(total_M: float, cM: float, room: _Room, tube_mL: float) -> float:
    """The sum of stock volumes per tube for ``total_M`` (checked against the tube)."""
    if total_M <= 0:
        raise PlanError("total_M", "the total concentration must be positive, e.g. 0.002 mol/L (2 mM)")
    vs = float(snap(total_M * tube_mL / cM, room.step))
    if vs > room.avail + 1e-9:
        raise PlanError(
            "total_M",
            f"{fmt_conc(total_M)} needs {vs:g} mL of stock per tube, more than the "
            f"{room.avail:g} mL available: lower total_M or use more concentrated stocks",
        )
    return vs


def _sums(room: _Room) -> np.ndarray:
    """The sums of stock volumes per tube to screen first: every one on the grid from twice the least
    volume to the room in the tube, or SUMS_SCREENED of them evenly in log on a finer grid."""
    first = int(np.ceil(2 * room.vmin / room.step - 1e-9))
    last = int(np.floor(room.avail / room.step + 1e-9))
    if last < first:
        return np.zeros(0)
    if last - first + 1 <= SUMS_SCREENED:
        return snap(np.arange(first, last + 1) * room.step, room.step)
    return np.unique(snap(np.geomspace(first, last, SUMS_SCREENED) * room.step, room.step))


def _candidates(sums, n: int, room: _Room) -> tuple[np.ndarray, np.ndarray]:
    """(B,) sums of stock volumes and (B, n) metal volumes of every series of ``n`` points to screen.

    At each sum, LOW_FRACTIONS spans x_lo … 1 − x_lo with evenly spaced mole fractions, x_lo from the usual
    1/(n + 1) — or what the least volume allows at that sum — up to X_LO_MAX; the metal volumes x·sum on
    the grid, the ligand's the rest. Kept when the volumes are distinct, at least the least volume, within
    the dispensers, and leave two tubes (one below 5 points) on each side of every complex's extremum."""
    S = np.asarray(sums, dtype=float)[:, None]
    lo_min = np.maximum(1.0 / (n + 1), room.vmin / np.maximum(S, 1e-300))
    x_lo = lo_min + np.linspace(0.0, 1.0, LOW_FRACTIONS)[None, :] * (X_LO_MAX - lo_min)
    S, x_lo, lo_min = (a.ravel() for a in np.broadcast_arrays(S, x_lo, lo_min))
    keep = lo_min <= X_LO_MAX + 1e-12
    S, x_lo = S[keep], x_lo[keep]
    x = x_lo[:, None] + (1 - 2 * x_lo)[:, None] * np.linspace(0.0, 1.0, n)[None, :]
    vm = snap(x * S[:, None], room.step)
    ok = _valid(S, vm, room) & _both_sides(vm / S[:, None], room.peaks, 2 if n >= 5 else 1)
    if not ok.any():
        return np.zeros(0), np.zeros((0, n))
    rows = np.unique(np.column_stack([S[ok], vm[ok]]), axis=0)
    return rows[:, 0], rows[:, 1:]


def _valid(S: np.ndarray, vm: np.ndarray, room: _Room) -> np.ndarray:
    """Which series have distinct metal volumes on the grid, every volume at least the least, each within
    its dispenser's capacity and the sum within the tube."""
    vl = snap(S[:, None] - vm, room.step)
    distinct = np.all(np.diff(vm, axis=1) > room.step / 2, axis=1)
    return (
        distinct
        & (vm.min(axis=1) >= room.vmin - 1e-9)
        & (vl.min(axis=1) >= room.vmin - 1e-9)
        & (vm.max(axis=1) <= room.caps[0] + 1e-9)
        & (vl.max(axis=1) <= room.caps[1] + 1e-9)
        & (S <= room.avail + 1e-9)
    )


def _both_sides(x: np.ndarray, peaks: tuple[float, ...], need: int) -> np.ndarray:
    """(B,) whether each series (B, n) of mole fractions has ``need`` tubes below and above every peak."""
    p = np.asarray(peaks, dtype=float)
    below = (x[..., None] < p - 1e-9).sum(axis=-2)
    above = (x[..., None] > p + 1e-9).sum(axis=-2)
    return np.all((below >= need) & (above >= need), axis=-1)


def _volumes(plan, ids, S: np.ndarray, vm: np.ndarray, step: float):
    """(B, n, k) volumes and (B, n) tube volumes of the candidate series."""
    m_id, l_id = ids
    return fill_volumes(plan, {m_id: vm, l_id: snap(S[:, None] - vm, step)})


def _best(worst: np.ndarray, inside: np.ndarray, cand) -> tuple[int, str]:
    """Of the series in range over the guess's uncertainty, the widest span of mole fractions (to 0.01),
    then the largest total; else the least at risk (:func:`.common.pick`)."""
    ok = worst <= RANGE_RISK + 1e-12
    if not ok.any():
        return pick(worst, inside)
    S, vm = cand
    order = np.lexsort((S, -np.round(vm[:, 0] / S, 2)))  # the last key sorts first
    return int(order[ok[order]][-1]), "pass"


def _choose_series(plan, model, ids, points, sums, room: _Room, total_M):
    """(points, candidates, index, linear-range status) of the series to plan: with the points given, or
    the most from 9 down to 5 for which a series stays in range over the guess's uncertainty (assess's own
    screen); else the least at risk of them all (of those inside at the guess, if any), which the
    linear-range check then flags with what would work."""
    ns = [int(points)] if points is not None else list(range(DEFAULT_POINTS, MIN_DEFAULT_POINTS - 1, -2))
    fallback = None
    for n in ns:
        cand = _candidates(sums, n, room)
        if cand[0].size == 0:
            continue
        worst, inside = screen(plan, model, *_volumes(plan, ids, *cand, room.step))
        k, status = _best(worst, inside, cand)
        more = _candidates(grid_between(sums, float(cand[0][k]), room.step, status == "pass"), n, room)
        if more[0].size:  # the grid between the screened sums next to the best
            w2, i2 = screen(plan, model, *_volumes(plan, ids, *more, room.step))
            cand = (np.concatenate([cand[0], more[0]]), np.concatenate([cand[1], more[1]]))
            worst, inside = np.concatenate([worst, w2]), np.concatenate([inside, i2])
            k, status = _best(worst, inside, cand)
        if status == "pass":
            return n, cand, k, status
        rank = (status != "warn", float(worst[k]))
        if fallback is None or rank < fallback[0]:
            fallback = (rank, (n, cand, k, status))
    if fallback is not None:
        return fallback[1]
    n = ns[-1]
    if total_M is not None:
        raise PlanError(
            "total_M",
            f"at {fmt_conc(total_M)} ({float(sums[0]):g} mL of stock per tube) {n} mole fractions do not fit "
            f"the {room.step:g} mL grid between the least volume {room.vmin:g} mL and the dispensers' "
            f"capacity: change total_M or use fewer points",
        )
    raise SeriesInfeasible(
        "points",
        f"{n} mole fractions do not fit a {plan.glassware.tube_volume_mL:g} mL tube on the {room.step:g} mL "
        f"grid above min_volume {room.vmin:g} mL within the dispensers' capacity: use fewer points, a "
        f"smaller min_volume or a larger tube",
    )


def _span_note(vm: np.ndarray, S: float, n: int, room: _Room, status: str) -> list[str]:
    """A note when the mole fractions do not run from the usual 1/(n + 1) to n/(n + 1), saying why."""
    lo, usual = float(vm[0] / S), 1.0 / (n + 1)
    if lo <= usual + 0.005:
        return []
    if room.vmin / S > usual + 1e-9:
        why = f"at this total the usual end tubes would hold less than the least volume, {room.vmin:g} mL"
    elif status == "pass":
        why = "chosen so that every reading stays inside the linear range over the guess's range"
    else:
        why = "the least at risk of leaving the linear range on this grid"
    return [f"mole fractions {lo:.2f}–{1 - lo:.2f} instead of the usual {usual:.2f}–{1 - usual:.2f}: {why}"]


def _range_fix(plan, model, ids, cand, room: _Room, n: int) -> str:
    """What would keep this series (n points, the candidates ``cand``) in range: a cell, a dilution of
    both stocks, fewer points (a subset of the candidates keeps each what-if quick)."""
    every = max(1, cand[0].size // WHAT_IF_SERIES)
    few = (cand[0][::every], cand[1][::every])

    def fits(m, _scale: float) -> str:  # both stocks alike: the same volumes
        return status_of(*screen(plan, m, *_volumes(plan, ids, *few, room.step)))

    text = what_would_fit(model, fits, "both stocks")
    sums = np.unique(few[0])
    for k in range(n - 2, 2, -2):
        ck = _candidates(sums, k, room)
        if ck[0].size and pick(*screen(plan, model, *_volumes(plan, ids, *ck, room.step)))[1] == "pass":
            return f"{text}; or {k} points instead of {n}"
    return text


def _extremum(x: np.ndarray, y: np.ndarray) -> tuple[float, float]:
    """Position and value of the largest |Y|, refined by a parabola through the three nearest points."""
    j = int(np.argmax(np.abs(y)))
    if 0 < j < x.size - 1:
        y0, y1, y2 = y[j - 1], y[j], y[j + 1]
        den = y0 - 2 * y1 + y2
        if den != 0:
            d = 0.5 * (y0 - y2) / den
            if abs(d) <= 1:
                h = x[1] - x[0]
                return float(x[j] + d * h), float(y1 - 0.25 * (y0 - y2) * d)
    return float(x[j]), float(y[j])


def _rival_fits(model, totals, ions, data, cov) -> list[rv.RivalFit]:
    W = whitening(cov)
    return [rv.fit_rival(model, lab, pq, totals, ions, data, W) for lab, pq in rv.rivals_for(model)]


def _separation_at(plan, model, recipe, ions, scale: float, devices, nested: bool) -> tuple[float, float]:
    """Smallest separation of the (non-)nested rivals with both stocks ``scale`` times as concentrated
    (path shortened where the readings would pass the linear range), and that path."""
    ms, st = scaled_in_range(model, recipe, scale)
    cov = error_budget(plan, ms, recipe, st, devices).total
    W = whitening(cov)
    fits = [
        rv.fit_rival(ms, lab, pq, st.totals_M, ions, st.absorbance_true, W) for lab, pq in rv.rivals_for(ms)
    ]
    return min(f.separation_sd for f in fits if f.nested == nested), float(ms.path_cm)


def _total_that_separates(plan, model, recipe, ions, C: float, nested: bool) -> tuple[float, float] | None:
    """Smallest total (×2 steps, then bisection in log) at which every rival of the kind (nested or
    not) is ≥ SEPARATION_WANTED sd away, with the path that keeps the readings in range; None when even
    ×128 does not do it."""
    devices = plan_devices(plan)
    lo = 1.0
    for s in SEARCH_SCALES:
        sep, path = _separation_at(plan, model, recipe, ions, float(s), devices, nested)
        if sep >= rv.SEPARATION_WANTED:
            hi, hi_path = float(s), path
            for _ in range(3):
                mid = float(np.sqrt(lo * hi))
                sep_m, path_m = _separation_at(plan, model, recipe, ions, mid, devices, nested)
                if sep_m >= rv.SEPARATION_WANTED:
                    hi, hi_path = mid, path_m
                else:
                    lo = mid
            return hi * C, hi_path
        lo = float(s)
    return None


def _extremum_check(model, x_ext: float, C: float) -> Check:
    pq = [(int(p), int(q)) for (p, q, _), m in zip(model.stoich, model.complex_mask, strict=True) if m]
    if len(pq) == 1:
        p, q = pq[0]
        want = p / (p + q)
        return Check(
            "extremum",
            "pass",
            f"extremum at x_M = {x_ext:.3f}; a single {p}:{q} complex puts it at "
            f"{want:.3f} (Job 1928) whatever K and ε",
        )
    singles = ", ".join(f"{p / (p + q):.3f} ({p}:{q})" for p, q in pq)
    x_lo, x_hi = extremum_at(model, C / 4), extremum_at(model, 4 * C)
    msg = (
        f"extremum at x_M = {x_ext:.3f} at C = {fmt_conc(C)}; the single complexes alone would put it at "
        f"{singles}. With {rv.plan_label(model)} it moves with C: {x_lo:.3f} at C/4, {x_hi:.3f} at 4·C"
    )
    off = min(abs(x_ext - p / (p + q)) for p, q in pq)
    if off <= EXTREMUM_SHIFT and abs(x_hi - x_lo) <= EXTREMUM_SHIFT:
        return Check("extremum", "pass", msg + " — here one complex dominates the peak")
    return Check(
        "extremum",
        "warn",
        msg + " — the second complex shifts the peak: read the stoichiometry from the fit of all complexes, "
        "not from where the peak lies (Hibbert & Thordarson 2016)",
    )


def _discrimination_check(model, fits, C, needed) -> Check:
    """Fail when a rival of another stoichiometry stays within SEPARATION_WANTED sd; warn when only a
    nested rival (the plan's complexes plus a material extra one) does."""
    seps = ", ".join(f"{f.model} {f.separation_sd:.1f} sd" for f in fits)
    own = rv.plan_label(model)
    close = [f for f in fits if f.separation_sd < rv.SEPARATION_WANTED]
    if not close:
        return Check(
            "discrimination",
            "pass",
            f"at C = {fmt_conc(C)} the curve tells {own} from its rivals "
            f"above the noise: {seps} (≥ {rv.SEPARATION_WANTED:g} sd wanted)",
        )
    names = " or ".join(f.model for f in close)
    msg = (
        f"at C = {fmt_conc(C)} the curve cannot tell {own} from {names} ({seps}; "
        f"{rv.SEPARATION_WANTED:g} sd wanted)"
    )
    if needed is None:
        msg += "; no total up to 128× the planned one does"
        alt = (
            ": fit all complexes globally over a designed series (kplan design) instead of reading the "
            "stoichiometry off this curve"
        )
    else:
        alt = " — or fit all complexes globally over a designed series (kplan design)"
        c_need, path = needed
        msg += f"; a total of {fmt_conc(c_need)} would"
        if path < model.path_cm * 0.999:
            msg += f" (in a {path:.2g} cm cell, to keep the readings in the linear range)"
    if all(f.nested for f in close):
        return Check(
            "discrimination",
            "warn",
            msg
            + (
                f". The rival only adds a complex holding ≥ {rv.MATERIAL_SHARE:.0%} of the metal "
                f"somewhere, and one "
                f"that absorbs like {own} per metal hides in any single-wavelength curve: read a second "
                f"wavelength "
                f"or fit a designed series with both complexes (kplan design) before excluding it"
            ),
        )
    return Check("discrimination", "fail", msg + alt)
