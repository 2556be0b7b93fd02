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
    points : number of tubes (mole fractions i/(points + 1), i = 1 … points, on the volume grid).
    total_M : total concentration [M]₀ + [L]₀ in each tube, mol/L (default: the largest on the grid
        that keeps every reading inside the linear range).
    """
    model = plan_model(plan)
    _, m_id, cM = pure_stock(plan, "M")
    _, l_id, cL = pure_stock(plan, "L")
    _require_equimolar(plan, m_id, cM, l_id, cL)
    if points is not None and int(points) < 3:
        n_pts = plural(int(points), "point")
        raise PlanError("points", f"{n_pts} cannot show an extremum: use at least 3 (9–11 is usual)")
    g = plan.glassware
    step, vmin = g.step_mL, max(g.min_volume_mL, g.step_mL)
    avail = (
        g.tube_volume_mL
        - make_up_min_mL(plan)
        - sum(v for k, v in plan.design.fixed.items() if k not in (m_id, l_id))
    )
    caps = (capacity_mL(plan, m_id), capacity_mL(plan, l_id))
    if total_M is not None:
        n = DEFAULT_POINTS if points is None else int(points)
        x = np.arange(1, n + 1) / (n + 1)
        vs = _given_sum(total_M, cM, x, n, step, vmin, avail, caps, g.tube_volume_mL)
        cand = np.array([vs])
    else:
        n, vs, cand = _choose_sum(plan, model, m_id, l_id, points, step, vmin, avail, caps)
        x = np.arange(1, n + 1) / (n + 1)
    worst, inside = screen(plan, model, *_volumes(plan, m_id, l_id, x, np.array([vs]), step))
    range_fix = ""
    if not worst[0] <= RANGE_RISK + 1e-12:
        range_fix = _range_fix(plan, model, (m_id, l_id), x, cand, (step, vmin, avail, caps), n)
    vm = snap(x * vs, step)
    recipe = series_recipe(plan, {m_id: vm, l_id: snap(vs - vm, step)}, [f"J{i + 1}" for i in range(n)])
    a = assess_tubes(plan, recipe)
    st = a.state
    C = float(np.median(st.totals_M.sum(axis=1)))
    xm = st.totals_M[:, 0] / st.totals_M.sum(axis=1)
    sd = np.sqrt(np.diag(a.budget.total))
    y = corrected(model, st)

    # the curve between the tubes at the same total
    xf = np.linspace(0.005, 0.995, CURVE_POINTS)
    vol, tot = fill_volumes(plan, {m_id: xf * vs, l_id: (1 - xf) * vs})
    yf = corrected(model, predict_volumes(model, vol, tot))
    x_ext, y_ext = _extremum(xf, yf)

    # rivals at the planned total, then (if needed) the total that would separate them
    ions = tube_ions_M(model, recipe.volumes_mL, recipe.total_volume_mL)
    fits = _rival_fits(model, st.totals_M, ions, st.absorbance_true, a.budget.total)
    needed = None
    close = [f for f in fits if f.separation_sd < rv.SEPARATION_WANTED]
    if close:
        # search for the stoichiometric rivals first: the nested one may never separate at one wavelength
        nested = all(f.nested for f in close)
        needed = _total_that_separates(plan, model, recipe, ions, C, nested)

    checks = [
        Check("equimolar", "pass", f"{m_id} and {l_id} are both {fmt_conc(cM)}: equimolar"),
        _extremum_check(model, x_ext, C),
    ]
    if fits:
        checks.append(_discrimination_check(model, fits, C, needed))
    extra = {
        "stocks": {"metal": m_id, "ligand": l_id, "conc_M": cM},
        "total_M": C,
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
    far = [f for f in fits if not f.nested]
    ok = (
        f"the curve tells {rv.plan_label(model)} from "
        + (", ".join(f.model for f in far) or "its rivals")
        + f" by ≥ {rv.SEPARATION_WANTED:g} sd at C = {fmt_conc(C)}; extremum at x_M = {x_ext:.3f}"
    )
    notes = [
        f"total concentration C = [M]0 + [L]0 = {fmt_conc(C)} in every tube ({vs:g} mL of stock)",
        f"extremum of the corrected absorbance at x_M = {x_ext:.3f} (Y = {y_ext:.3f})",
        "separation from rival models (whitened residual of their best fit): "
        + (", ".join(f"{f.model} {f.separation_sd:.1f} sd" for f in fits) or "none"),
    ]
    if needed:
        cell = f" in a {needed[1]:.2g} cm cell" if needed[1] < model.path_cm * 0.999 else ""
        kind = "nested" if all(f.nested for f in close) else "stoichiometric"
        notes.append(
            f"a total of {fmt_conc(needed[0])}{cell} would separate the {kind} rivals by "
            f"≥ {rv.SEPARATION_WANTED:g} sd"
        )
    if points is None and n != DEFAULT_POINTS:
        notes.insert(
            0,
            f"{DEFAULT_POINTS} mole fractions cannot all stay inside the linear range over the guess's "
            f"range on this grid: planned {n}",
        )
    return finish(
        METHOD, plan, QUESTION, recipe, a, checks, extra, columns, ok, notes=tuple(notes), range_fix=range_fix
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


def _valid(vs: np.ndarray, x: np.ndarray, step: float, vmin: float, caps=(np.inf, np.inf)) -> np.ndarray:
    """Which sums of volumes put every mole fraction on the grid, distinct, above min_volume and within
    each dispenser's capacity."""
    vm = snap(x[None, :] * vs[:, None], step)
    vl = snap(vs[:, None] - vm, step)
    distinct = np.all(np.diff(vm, axis=1) > step / 2, axis=1)
    return (
        distinct
        & (vm.min(axis=1) >= vmin - 1e-9)
        & (vl.min(axis=1) >= vmin - 1e-9)
        & (vm.max(axis=1) <= caps[0] + 1e-9)
        & (vl.max(axis=1) <= caps[1] + 1e-9)
    )


def _given_sum(total_M, cM, x, n, step, vmin, avail, caps, tube_mL) -> float:
    """The sum of stock volumes per tube for ``total`` (checked against the grid and the tube)."""
    if total_M <= 0:
        raise PlanError("total", "the total concentration must be positive, e.g. total = '2 mM'")
    vs = float(snap(total_M * tube_mL / cM, step))
    if vs > avail + 1e-9:
        raise PlanError(
            "total",
            f"{fmt_conc(total_M)} needs {vs:g} mL of stock per tube, more than the "
            f"{avail:g} mL available: lower total or use more concentrated stocks",
        )
    if not _valid(np.array([vs]), x, step, vmin, caps)[0]:
        raise PlanError(
            "total",
            f"at {fmt_conc(total_M)} ({vs:g} mL of stock per tube) the {n} mole fractions "
            f"do not fit the {step:g} mL grid between min_volume {vmin:g} mL and the dispensers' "
            f"capacity: change total or use fewer points",
        )
    return vs


def _sums(x, step, vmin, avail, caps) -> np.ndarray:
    """Every sum of stock volumes per tube that puts the mole fractions ``x`` on the grid (rising)."""
    cand = snap(np.arange(1, int(np.floor(avail / step + 1e-9)) + 1) * step, step)
    return cand[_valid(cand, x, step, vmin, caps)]


def _volumes(plan, m_id, l_id, x, sums, step):
    """(B, n, k) volumes and (B, n) tube volumes of the series at each sum of stock volumes."""
    vm = snap(x[None, :] * sums[:, None], step)
    return fill_volumes(plan, {m_id: vm, l_id: snap(sums[:, None] - vm, step)})


def _choose_sum(plan, model, m_id, l_id, points, step, vmin, avail, caps):
    """(points, sum of stock volumes, the sums tried) for the default series: the most concentrated sum
    whose every reading stays in the linear range over the guess's uncertainty — by assess's own screen —
    with the given points, or (not given) the most points from 9 down to 5 for which one does; else the
    least risky series, which the linear-range check then flags with what would work."""
    ns = [int(points)] if points is not None else list(range(DEFAULT_POINTS, MIN_DEFAULT_POINTS - 1, -2))
    fallback = None
    for n in ns:
        x = np.arange(1, n + 1) / (n + 1)
        cand = _sums(x, step, vmin, avail, caps)
        if cand.size == 0:
            continue
        k, status = pick(*screen(plan, model, *_volumes(plan, m_id, l_id, x, cand, step)))
        if status == "pass":
            return n, float(cand[k]), cand
        if fallback is None or (status == "warn" and fallback[3] == "fail"):
            fallback = (n, float(cand[k]), cand, status)
    if fallback is None:
        n = ns[-1]
        raise SeriesInfeasible(
            "points",
            f"{n} mole fractions do not fit a {plan.glassware.tube_volume_mL:g} mL tube on the {step:g} mL "
            f"grid above min_volume {vmin:g} mL within the dispensers' capacity: use fewer points, a "
            f"smaller min_volume or a larger tube",
        )
    return fallback[:3]


def _range_fix(plan, model, ids, x, cand, grid, n) -> str:
    """What would keep this series (n points, the sums ``cand``) in range: a cell, a dilution, fewer points.
    ``grid`` is (step, vmin, avail, caps)."""
    m_id, l_id = ids
    step, vmin, avail, caps = grid

    def fits(m, _scale: float) -> str:  # both stocks alike: the same volumes
        return status_of(*screen(plan, m, *_volumes(plan, m_id, l_id, x, cand, step)))

    text = what_would_fit(model, fits, "both stocks")
    for k in range(n - 2, 2, -2):
        xk = np.arange(1, k + 1) / (k + 1)
        ck = _sums(xk, step, vmin, avail, caps)
        if ck.size and pick(*screen(plan, model, *_volumes(plan, m_id, l_id, xk, ck, step)))[1] == "pass":
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
