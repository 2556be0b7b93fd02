"""The "complete conversion" calibration tube: one reagent limiting, the other in large excess, and the
tube's absorbance taken as that of the fully formed complex to get ε.

How much excess that really takes is computed over the whole range of the guess (log β ± 2 sd), not
at the guess only, from the plan's own equilibrium model (every complex, side reactions and activity
included). For a single 1:1 complex with the ligand limiting at L₀ and the metal at M₀, the fraction f
of the ligand converted solves K = f·L₀/((1 − f)·L₀·(M₀ − f·L₀)), a quadratic whose smaller root is

    f = ((M₀ + L₀ + 1/K) − √((M₀ + L₀ + 1/K)² − 4·M₀·L₀)) / (2·L₀)              [derived]

and the excess that converts a fraction f is M₀ = f/((1 − f)·K) + f·L₀ [derived, from K = [ML]/([M][L])].

Bias of the hand analysis that treats the tube as complete (1:1, ligand limiting; derived). The
calibration gives ε_hand = f·ε, so ε is biased by f − 1. In an analysed tube with the metal in excess
(free metal ≈ M₀) and true saturation y = [ML]/L₀, K = y/((1 − y)·M₀). The hand analysis reads
y_hand = y/f and so K_hand = (y/f)/((1 − y/f)·M₀), i.e.

    K_hand / K = (1 − y)/(f − y):   → 1/f in dilute tubes (y → 0), larger as y → f, undefined beyond.

So K is biased by about 1/f − 1 (≈ 1 − f for f near 1) in weakly complexed tubes and more toward
saturation: with f = 0.93 and y ≈ 0.2 the bias is +9.6 %, close to the +9 % of the worked case in the
domain notes (K = 140 M⁻¹, 0.1 M excess metal). The better alternative needs no such tube: fit every
tube globally with ε free.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ._deps import (
    SECOND_COMPLEX_SHARE,
    Check,
    Plan,
    PlanError,
    assess_tubes,
    hand_bias_summary,
    make_up_min_mL,
    plan_model,
    predict,
    tube_ions_M,
)
from .common import (
    RANGE_RISK,
    ClassicSeries,
    SeriesInfeasible,
    capacity_mL,
    fill_volumes,
    finish,
    fmt_conc,
    hypothetical,
    pure_stock,
    screen,
    series_recipe,
    snap,
)

METHOD = "calibration"
CONVERSIONS = (0.99, 0.999)  # the fractions asked for [common practice: 99 % for ε to 1 %]
WARN_BELOW = 0.95  # under 95 % converted the calibration is wrong by > 5 %: fail [common practice]
RANGE_SD = 2.0  # the guess's range: log β ± 2 sd
RANGE_NODES = 9
X_GRID = 600  # excess concentrations tried between the stoichiometric amount and 10 M (log spaced)
QUESTION = (
    "is the 'complete conversion' tube really complete over the guess's range, and what excess does it take?"
)


@dataclass(frozen=True)
class _Reagents:
    """The target complex, the reagent converted (``lim``), the one in excess (``exc``) and their stocks."""

    target: str
    j: int  # the target's species index
    p: int  # metal count of the target
    q: int  # ligand count of the target
    lim: str
    exc: str
    nu_lim: int  # the limiting reagent's count in the target
    nu_exc: int
    eps_t: float  # the target's ε (M⁻¹ cm⁻¹)
    lim_id: str
    exc_id: str
    c_lim_stock: float
    c_exc_stock: float


def conversion_tube(
    plan: Plan,
    *,
    limiting: str | None = None,
    total_M: float | None = None,
    excess_M: float | None = None,
    tubes: int = 1,
) -> ClassicSeries:
    """Plan and judge a "complete conversion" calibration tube (and its reagent blank).

    Parameters
    ----------
    limiting : "M" or "L", the reagent to convert (default: L for p ≥ q, else M).
    total_M : the limiting reagent's concentration in the tube (default: full conversion reads mid-range).
    excess_M : the other reagent's concentration (default: what converts 99.9 % over the whole range of
        the guess, else 99 %, else the most that fits the tube).
    tubes : replicate calibration tubes.
    """
    model = plan_model(plan)
    r = _reagents(plan, model, limiting, tubes)
    g = plan.glassware
    V, step, vmin = g.tube_volume_mL, g.step_mL, max(g.min_volume_mL, g.step_mL)

    # the limiting reagent: full conversion reads in the middle of the linear range unless told
    per_absorbance = r.nu_lim / (model.path_cm * r.eps_t)
    v_lim = _limiting_volume(plan, model, total_M, r.lim, r.lim_id, r.c_lim_stock, per_absorbance)
    c_lim = r.c_lim_stock * v_lim / V

    # the excess that converts 99 % / 99.9 % at every node of the guess's range
    nodes, lb = _guess_range(model, r.j)
    vol0, tot0 = fill_volumes(plan, {r.lim_id: np.array([v_lim])})
    ions0 = tube_ions_M(model, vol0, tot0)  # the medium the tube is made in (background ions)
    fraction = _fraction_function(model, r, c_lim, ions0)
    needed, rising, unreachable = _excess_needed(fraction, r, c_lim, lb)

    # the planned tube's excess: the smallest grid volume converting 99.9 % (else 99 %) at every node
    # with the reading in range; else the most that stays in range
    cap = capacity_mL(plan, r.exc_id)
    room = min(V - v_lim - make_up_min_mL(plan), cap)
    if excess_M is not None:
        v_exc = _given_excess(excess_M, r.exc, r.exc_id, r.c_exc_stock, V, v_lim, vmin, step)
    else:
        v_exc = _default_excess(
            plan, model, fraction, lb, r.lim_id, r.exc_id, v_lim, r.c_exc_stock, vmin, room
        )
    v_exc = float(snap(v_exc, step))
    recipe, names, blank = _calibration_recipe(plan, model, r, v_lim, v_exc, tubes)
    a = assess_tubes(plan, recipe)
    st = a.state
    x_plan = float(st.totals_M[0, 0 if r.exc == "M" else 1])
    ions_plan = tube_ions_M(model, recipe.volumes_mL[:1], recipe.total_volume_mL[:1])[0]
    f_nodes = fraction(np.full(nodes.size, x_plan), lb, ions_plan)
    f_guess = float(r.nu_lim * st.species_M[0, r.j] / st.totals_M[0, 0 if r.lim == "M" else 1])
    f_worst = float(f_nodes.min())

    higher = _other_complexes(model, r.j, r.lim, c_lim, x_plan, ions_plan, nodes)
    one_to_one = (r.p, r.q) == (1, 1)
    bias = hand_bias_summary(f_guess) if one_to_one else None
    bias_worst = hand_bias_summary(f_worst) if one_to_one else None
    found = _Found(c_lim, x_plan, f_guess, f_worst, f_nodes, nodes, needed, bias, bias_worst, higher)
    checks = _calibration_checks(plan, model, r, found, names[0], (v_lim, tubes, cap), rising, unreachable)
    extra = _calibration_extra(r, found, V)
    notes = _calibration_notes(r, found, names, v_lim, v_exc, V, unreachable, blank)
    ok = f"{names[0]} converts ≥ {f_worst:.2%} of {r.lim} over the whole range of the guess"
    columns = {"fraction": np.append(np.full(tubes, f_guess), [0.0] if blank else [])}
    fix = f"a lower {r.lim} concentration (total_M) or a shorter path"
    return finish(
        METHOD, plan, QUESTION, recipe, a, checks, extra, columns, ok, notes=tuple(notes), range_fix=fix
    )


@dataclass(frozen=True)
class _Found:
    """What the planned tube was found to do, for its JSON findings and its notes."""

    c_lim: float  # the limiting reagent's concentration in the tube (M)
    x_plan: float  # the excess reagent's concentration in the tube (M)
    f_guess: float  # fraction converted at the guess
    f_worst: float  # … at worst over the guess's range
    f_nodes: np.ndarray  # … at each node of the range
    nodes: np.ndarray  # the target's log β over the range
    needed: dict  # conversion -> excess needed (M) or None
    bias: dict | None  # hand-analysis bias at the guess (1:1 only)
    bias_worst: dict | None
    higher: dict | None  # other complexes holding the limiting reagent


def _reagents(plan: Plan, model, limiting: str | None, tubes: int) -> _Reagents:
    """The target, the limiting and excess reagents and their pure stocks; refuses what cannot be planned."""
    target = plan.target
    j = model.index(target)
    p, q = int(model.stoich[j, 0]), int(model.stoich[j, 1])
    if not model.complex_mask[j]:
        raise PlanError(
            "design.target",
            f"'{target}' is not a metal–ligand complex: name the complex whose ε "
            f"the calibration tube should give",
        )
    lim = limiting or ("L" if p >= q else "M")
    if lim not in ("M", "L"):
        raise PlanError("limiting", f"'{lim}': write M (metal limiting) or L (ligand limiting)")
    exc = "M" if lim == "L" else "L"
    nu_lim, nu_exc = (q, p) if lim == "L" else (p, q)
    eps_t = float(model.epsilon_M_cm[2 + j])
    if eps_t <= 0:
        raise PlanError(
            f"optics.epsilon.{target}",
            f"'{target}' has no absorptivity: give its ε guess (a calibration tube reads the complex)",
        )
    if tubes < 1:
        raise PlanError("tubes", "at least one calibration tube")
    _, lim_id, c_lim_stock = pure_stock(plan, lim)
    _, exc_id, c_exc_stock = pure_stock(plan, exc)
    return _Reagents(
        target, j, p, q, lim, exc, nu_lim, nu_exc, eps_t, lim_id, exc_id, c_lim_stock, c_exc_stock
    )


def _guess_range(model, j: int) -> tuple[np.ndarray, np.ndarray]:
    """The target's log β at the nodes of the guess's range (± RANGE_SD sd) and every constant per node."""
    sd = float(model.log_beta_sd[j])
    nodes = model.log_beta[j] + np.linspace(-RANGE_SD, RANGE_SD, RANGE_NODES) * sd
    lb = np.repeat(model.log_beta[None, :], nodes.size, axis=0)
    lb[:, j] = nodes
    return nodes, lb


def _fraction_function(model, r: _Reagents, c_lim: float, ions0: np.ndarray):
    """The fraction of the limiting reagent in the target as a function of the excess (vectorised)."""

    def fraction(x_M, lbs, ions_row=ions0[0]):
        """Fraction of the limiting reagent in the target at excess x_M (…,), constants lbs (…, S), in a
        medium with the other ions ``ions_row`` (default: the tube before the excess is added)."""
        x_M = np.asarray(x_M, dtype=float)
        tot = np.zeros(x_M.shape + (2,))
        tot[..., 0 if r.lim == "M" else 1] = c_lim
        tot[..., 0 if r.exc == "M" else 1] = x_M
        ions = np.broadcast_to(ions_row, x_M.shape + ions0.shape[1:])
        with hypothetical():
            st = predict(model, tot, ions, log_beta=lbs, warn=False)
        return r.nu_lim * st.species_M[..., r.j] / c_lim

    return fraction


def _excess_needed(fraction, r: _Reagents, c_lim: float, lb: np.ndarray) -> tuple[dict, bool, str]:
    """The smallest excess converting each of CONVERSIONS at every node (None when out of reach), whether
    the conversion still rises at the top of the excess grid, and why an unreachable one is out of reach."""
    x0 = c_lim * r.nu_exc / r.nu_lim
    xs = np.geomspace(x0 * 1.001, max(10.0, 100 * x0), X_GRID)
    f_grid = fraction(np.broadcast_to(xs, (lb.shape[0], xs.size)), lb[:, None, :])  # (nodes, X)
    needed = {}
    for f_want in CONVERSIONS:
        needed[f_want] = _smallest_excess(fraction, xs, f_grid, lb, f_want)
    # why a fraction is out of reach: still rising at the top of the grid (needs more than any stock) or
    # falling (other complexes take the reagent)
    rising = bool(np.all(f_grid[:, -1] >= f_grid[:, -2] - 1e-12))
    unreachable = (
        f"more than {fmt_conc(xs[-1])} of {r.exc}"
        if rising
        else "not reachable: other complexes take the reagent as the excess grows"
    )
    return needed, rising, unreachable


def _calibration_recipe(plan: Plan, model, r: _Reagents, v_lim: float, v_exc: float, tubes: int):
    """The replicate calibration tubes K1…, and the reagent blank B1 when the excess reagent absorbs."""
    cols = {r.lim_id: np.array([v_lim] * tubes), r.exc_id: np.array([v_exc] * tubes)}
    names = [f"K{i + 1}" for i in range(tubes)]
    blank = model.epsilon_M_cm[0 if r.exc == "M" else 1] > 0
    if blank:  # the excess reagent absorbs: a blank with the same excess is read and subtracted
        cols = {k: np.append(v, 0.0 if k == r.lim_id else v_exc) for k, v in cols.items()}
        names.append("B1")
    return series_recipe(plan, cols, names), names, blank


def _calibration_checks(plan: Plan, model, r: _Reagents, f: _Found, tube: str, amounts, rising, unreachable):
    """The method's checks: conversion, whether the excess fits, other complexes (when any), the hand
    analysis's bias and the global fit that needs no such tube. ``amounts``: the limiting stock's volume,
    the number of tubes and the excess dispenser's capacity."""
    v_lim, tubes, cap = amounts
    checks = [
        _conversion_check(f.f_nodes, f.f_guess, tube, f.nodes, f.x_plan / f.c_lim, rising),
        _fits_check(
            plan,
            model,
            f.needed,
            r.lim_id,
            r.exc_id,
            v_lim,
            r.c_exc_stock,
            tubes,
            cap,
            unreachable,
            optics_info=(model.path_cm, r.eps_t, r.nu_lim, f.c_lim, r.exc),
        ),
    ]
    if f.higher is not None:
        checks.append(_higher_check(f.higher, tube, r.lim, r.exc, f.x_plan))
    checks.append(_bias_check(f.bias, f.bias_worst, f.f_guess, f.f_worst, r.p, r.q))
    checks.append(_global_fit_check(f.f_worst))
    return checks


def _calibration_extra(r: _Reagents, f: _Found, V: float) -> dict:
    """The method's findings by their JSON key."""
    return {
        "target": r.target,
        "limiting": r.lim,
        "excess_reagent": r.exc,
        "limiting_conc_M": f.c_lim,
        "excess_conc_M": f.x_plan,
        "excess_ratio": f.x_plan / f.c_lim,
        "log_beta_range": [float(f.nodes.min()), float(f.nodes.max())],
        "excess_needed_M": {f"{c:g}": f.needed[c] for c in CONVERSIONS},
        "excess_needed_mL": {
            f"{c:g}": (f.needed[c] * V / r.c_exc_stock if f.needed[c] is not None else None)
            for c in CONVERSIONS
        },
        "fraction_converted": {
            "at_guess": f.f_guess,
            "low_log_beta": float(f.f_nodes[0]),
            "high_log_beta": float(f.f_nodes[-1]),
            "worst": f.f_worst,
        },
        "hand_bias": f.bias,
        "hand_bias_worst": f.bias_worst,
        "other_complexes": f.higher,
    }


def _calibration_notes(r: _Reagents, f: _Found, names, v_lim, v_exc, V, unreachable, blank) -> list[str]:
    """The method's findings for people, one line each."""
    notes = [
        f"{names[0]}: {r.lim} at {fmt_conc(f.c_lim)} ({v_lim:g} mL {r.lim_id}), {r.exc} at "
        f"{fmt_conc(f.x_plan)} ({v_exc:g} mL {r.exc_id}, {f.x_plan / f.c_lim:.3g}-fold)",
        f"fraction of {r.lim} converted to {r.target}: {f.f_guess:.2%} at the guess, {f.f_worst:.2%} at "
        f"log β = {f.nodes.min():.2f} (guess − {RANGE_SD:g} sd)",
    ]
    for c in CONVERSIONS:
        x = f.needed[c]
        notes.append(
            f"excess for ≥ {c:.1%} over the whole range: "
            + (
                f"{fmt_conc(x)} ({x * V / r.c_exc_stock:.3g} mL of {r.exc_id})"
                if x is not None
                else unreachable
            )
        )
    bias, higher = f.bias, f.higher
    if bias is not None:
        notes.append(
            f"treating it as complete biases ε by {bias['epsilon']:+.2%} and K by "
            f"{bias['K_dilute']:+.2%} (dilute tubes) to {_pct(bias['K_half_saturated'])} (half-saturated)"
        )
    if higher is not None:
        notes.append(
            f"{_pct_share(higher['share_at_guess'])} of {r.lim} ends in {', '.join(higher['species'])} at "
            f"the guess, up to {_pct_share(higher['share_worst'])} over the guesses' range"
        )
    if blank:
        notes.append(f"B1 is the reagent blank: the same {r.exc_id} without {r.lim_id}, read and subtracted")
    return notes


def _other_complexes(model, j, lim, c_lim, x_plan, ions_row, nodes) -> dict | None:
    """How much of the limiting reagent ends in complexes other than the target in the planned tube: at
    the guess, and at worst over the target's range and ± 2 sd of every other complex's constant. None
    when the plan has no other complex holding the limiting reagent."""
    li = 0 if lim == "M" else 1
    others = [
        k for k in range(len(model.species)) if k != j and model.complex_mask[k] and model.stoich[k, li] > 0
    ]
    if not others:
        return None
    lb = np.repeat(model.log_beta[None, :], nodes.size, axis=0)
    lb[:, j] = nodes
    shifts = [lb]
    for k in others:
        for sgn in (-RANGE_SD, RANGE_SD):
            s = lb.copy()
            s[:, k] += sgn * model.log_beta_sd[k]
            shifts.append(s)
    lbs = np.concatenate([model.log_beta[None, :], *shifts])
    tot = np.zeros((lbs.shape[0], 1, 2))
    tot[..., li] = c_lim
    tot[..., 1 - li] = x_plan
    ions = np.broadcast_to(ions_row, (lbs.shape[0], 1, ions_row.size))
    with hypothetical():
        st = predict(model, tot, ions, log_beta=lbs, warn=False)
    share = (st.species_M[:, 0, others] * model.stoich[others, li]).sum(axis=-1) / c_lim
    return {
        "species": [model.species[k] for k in others],
        "share_at_guess": float(share[0]),
        "share_worst": float(share.max()),
    }


def _higher_check(higher: dict, tube: str, lim: str, exc: str, x_plan: float) -> Check:
    """Warn when the excess reagent turns the limiting one into other complexes (a 1:2 beside the 1:1):
    the tube then reads a mixture, and no excess makes it 'complete'."""
    names = ", ".join(higher["species"])
    g, w = higher["share_at_guess"], higher["share_worst"]
    msg = (
        f"at {fmt_conc(x_plan)} of {exc}, {_pct_share(g)} of {lim} in {tube} ends in {names} at the guess "
        f"(up to {_pct_share(w)} over the guesses' range)"
    )
    if w <= SECOND_COMPLEX_SHARE:
        return Check("other-complexes", "pass", msg)
    return Check(
        "other-complexes",
        "warn",
        msg + f": the excess forms {names} too, so the tube reads a mixture and more excess makes it worse — "
        f"ε from it is not that of the target; fit all complexes globally over a designed series instead",
    )


def _pct_share(x: float) -> str:
    return f"{x:.1%}" if x >= 0.001 else f"{x:.2g}" if x > 0 else "0 %"


def _limiting_volume(plan, model, total_M, lim, lim_id, c_lim_stock, conc_per_absorbance) -> float:
    """Volume of the limiting stock: ``total_M`` if given, else what reads mid-range when fully converted."""
    g = plan.glassware
    V, step, vmin = g.tube_volume_mL, g.step_mL, max(g.min_volume_mL, g.step_mL)
    if total_M is None:
        want = 0.5 * sum(model.linear_range) * conc_per_absorbance
        top = min(snap(V / 2, step), capacity_mL(plan, lim_id))
        return float(np.clip(snap(want * V / c_lim_stock, step), vmin, top))
    v_lim = float(snap(total_M * V / c_lim_stock, step))
    if v_lim < vmin or v_lim > V:
        raise PlanError(
            "total_M",
            f"{fmt_conc(total_M)} of {lim} needs {v_lim:g} mL of {lim_id}, outside "
            f"{vmin:g}–{V:g} mL: choose another total_M",
        )
    return v_lim


def _given_excess(excess_M, exc, exc_id, c_exc_stock, V, v_lim, vmin, step) -> float:
    v_exc = float(snap(excess_M * V / c_exc_stock, step))
    if v_exc < vmin or v_exc > V - v_lim + 1e-9:
        raise PlanError(
            "excess_M",
            f"{fmt_conc(excess_M)} of {exc} needs {v_exc:g} mL of {exc_id}, outside "
            f"{vmin:g}–{V - v_lim:g} mL (the tube holds {V:g} mL): choose another excess_M",
        )
    return v_exc


def fraction_converted_1to1(M0: float, L0: float, K: float) -> float:
    """Closed form for a single 1:1 complex with L limiting (see the module docstring) [derived]."""
    s = M0 + L0 + 1.0 / K
    return float((s - np.sqrt(s * s - 4.0 * M0 * L0)) / (2.0 * L0))


def _default_excess(plan, model, fraction, lb, lim_id, exc_id, v_lim, c_exc_stock, vmin, room) -> float:
    """Grid volume of the excess stock for the planned tube (vectorised over every candidate volume): the
    smallest converting 99.9 % (else 99 %) at every node of the guess's range with the reading in range
    over the guess's uncertainty (assess's screen); else the one converting most; the same among those
    inside at the guess when none stays in range over it."""
    step, V = plan.glassware.step_mL, plan.glassware.tube_volume_mL
    cand = snap(
        np.arange(int(np.ceil(vmin / step - 1e-9)), int(np.floor(room / step + 1e-9)) + 1) * step, step
    )
    if cand.size == 0:
        raise SeriesInfeasible(
            "total_M", f"no room for the excess stock {exc_id} beside {v_lim:g} mL of {lim_id}: lower total_M"
        )
    vol, tot = fill_volumes(plan, {lim_id: np.full(cand.size, v_lim), exc_id: cand})
    worst, inside = screen(plan, model, vol[:, None, :], tot[:, None])
    f_worst = fraction(np.broadcast_to(cand * c_exc_stock / V, (lb.shape[0], cand.size)), lb[:, None, :]).min(
        axis=0
    )
    for mask in (worst <= RANGE_RISK + 1e-12, inside):
        for f_want in reversed(CONVERSIONS):
            ok = np.flatnonzero(mask & (f_worst >= f_want))
            if ok.size:
                return float(cand[ok[0]])
        ok = np.flatnonzero(mask)
        if ok.size:  # converts most: with a higher complex, more excess is not always better
            return float(cand[ok[np.argmax(f_worst[ok])]])
    return float(cand[np.argmax(f_worst)])


def _smallest_excess(fraction, xs, f_grid, lb, f_want) -> float | None:
    """Smallest excess with fraction ≥ f_want at every node: first grid crossing, then bisection in log;
    None when some node does not reach it below the top of the grid."""
    reach = f_grid >= f_want
    if not np.all(reach.any(axis=1)):
        return None
    k = reach.argmax(axis=1)  # first crossing per node
    lo = np.log(xs[np.maximum(k - 1, 0)])
    hi = np.log(xs[k])
    for _ in range(40):
        mid = 0.5 * (lo + hi)
        ok = fraction(np.exp(mid), lb) >= f_want
        hi = np.where(ok, mid, hi)
        lo = np.where(ok, lo, mid)
    return float(np.exp(hi).max())


def _conversion_check(f_nodes, f_guess, tube, nodes, fold: float, rising: bool) -> Check:
    worst = float(f_nodes.min())
    msg = (
        f"{tube} ({fold:.3g}-fold excess) converts {f_guess:.2%} at the guess and {worst:.2%} "
        f"at the weak end of its range (log β {nodes.min():.2f})"
    )
    if worst >= CONVERSIONS[0]:
        return Check("conversion", "pass", msg)
    status = "warn" if worst >= WARN_BELOW else "fail"
    return Check(
        "conversion",
        status,
        msg
        + f": below {CONVERSIONS[0]:.0%}, ε from this tube is low by {1 - worst:.1%}; "
        + (
            "raise the excess (see excess-fits) or fit all tubes globally"
            if rising
            else "more excess does not help (other complexes take the reagent): fit all tubes globally"
        ),
    )


def _fits_check(
    plan, model, needed, lim_id, exc_id, v_lim, c_exc_stock, tubes, cap, unreachable, optics_info
) -> Check:
    """Does the excess for 99.9 % (else 99 %) fit the tube, the dispenser, the stock on hand and the range?"""
    b, eps_t, nu_lim, c_lim, exc = optics_info
    g = plan.glassware
    V = g.tube_volume_mL
    stock = plan.stock_by_id(exc_id)
    eps_exc = float(model.epsilon_M_cm[0 if exc == "M" else 1])
    lo, hi = model.linear_range
    verdicts = []
    for f in reversed(CONVERSIONS):
        x = needed[f]
        if x is None:
            verdicts.append((f, [f"{f:.1%} needs {unreachable}"]))
            continue
        v = x * V / c_exc_stock
        why = []
        if v + v_lim > V + 1e-9:
            why.append(
                f"{v:.3g} mL of {exc_id} does not fit the {V:g} mL tube beside {v_lim:g} mL of {lim_id}: "
                f"use a more concentrated {exc_id}"
            )
        if v > cap + 1e-9:
            why.append(f"{v:.3g} mL is more than the {cap:g} mL dispenser delivers at once")
        if stock.on_hand is not None:
            need = v * (tubes + 1) + g.rinse_mL + g.dead_volume_mL
            if need > stock.on_hand:
                why.append(
                    f"needs {need:.3g} mL of {exc_id} (tubes, blank, rinse), {stock.on_hand:g} mL on hand"
                )
        a = b * (eps_t * f * c_lim / nu_lim + eps_exc * x)
        if a > hi:
            why.append(f"reads A ≈ {a:.2f}, above {hi:g} (the excess reagent absorbs): use a shorter path")
        verdicts.append((f, why))
    fits = {f: not why for f, why in verdicts}
    detail = "; ".join(f"{f:.1%}: " + ("fits" if not why else "; ".join(why)) for f, why in verdicts)
    if fits[CONVERSIONS[-1]]:
        return Check(
            "excess-fits",
            "pass",
            f"the excess for {CONVERSIONS[-1]:.1%} fits the stock, tube and range ({detail})",
        )
    if fits[CONVERSIONS[0]]:
        return Check("excess-fits", "warn", f"only the excess for {CONVERSIONS[0]:.0%} fits ({detail})")
    return Check(
        "excess-fits",
        "fail",
        f"no excess giving {CONVERSIONS[0]:.0%} fits ({detail}): a 'complete "
        f"conversion' tube cannot be made with these stocks — fit all tubes globally instead",
    )


def _bias_check(bias, bias_worst, f_guess, f_worst, p, q) -> Check:
    if bias is None:
        return Check(
            "hand-bias",
            "pass" if f_worst >= CONVERSIONS[0] else "warn",
            f"ε from this tube is biased by {f_guess - 1:+.2%} at the guess ({f_worst - 1:+.2%} at worst); "
            f"the bias in β for a {p}:{q} complex follows from the fit, not from a hand formula",
        )
    k_half = bias_worst["K_half_saturated"]
    msg = (
        f"a hand analysis treating the tube as complete biases ε by {bias['epsilon']:+.2%} and K by "
        f"{bias['K_dilute']:+.2%} in dilute tubes, {_pct(bias['K_half_saturated'])} in half-saturated ones "
        f"(at the guess); at the weak end of the range {bias_worst['K_dilute']:+.2%} to {_pct(k_half)} "
        f"(K_hand/K = (1 − y)/(f − y), y the tube's saturation)"
    )
    status = "pass" if f_worst >= CONVERSIONS[-1] else "warn" if f_worst >= WARN_BELOW else "fail"
    return Check("hand-bias", status, msg)


def _pct(x) -> str:
    return "unbounded" if x is None else f"{x:+.2%}"


def _global_fit_check(f_worst: float) -> Check:
    msg = (
        "better: do not assume complete conversion at all — fit every tube, this one included, with ε free "
        "(kplan design chooses the tubes, kplan fit fits the readings); the global fit needs no calibration "
        "tube and carries none of its bias"
    )
    return Check("global-fit", "pass" if f_worst >= CONVERSIONS[-1] else "warn", msg)
