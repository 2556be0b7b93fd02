"""The mole-ratio method: one reagent held fixed, the other rising; the corrected absorbance climbs
and levels off, and the break — where the initial line meets the plateau — sits at the complex's
ratio when the complex is strong.

How sharp is the break? For a 1:1 complex at fixed metal C, at the equivalence point free metal and
free ligand are equal, x, with K·x² = C − x, so the curve falls short of the asymptotes' corner by the
fraction x/C = (√(1 + 4KC) − 1)/(2KC) ≈ 1/√(KC) [derived]: 10 % at K·C = 100, the usual "sharp break"
rule. (Measured, as here, against the curve's own tangents — the initial one has slope KC/(1 + KC) of the
complete-conversion line — the shortfall is a little smaller: 8.6 % at K·C = 100.) What the user reads,
though, is the intersection of two straight lines drawn through the tubes
well before and well after the break (the hand analysis). This module computes that intersection from
the noise-free prediction of the planned tubes — its offset from the complex's ratio is the bias the
curvature causes — and its sd from the readings' covariance (whole error budget) by linear propagation
through the two least-squares lines. The break is *resolvable* when

1. |bias| + 2 sd ≤ ``BREAK_TOLERANCE`` × the ratio (so 1:1 is not read as 2:3 or 3:2), and
2. the lines are really straight: the curve at the ratio falls short of the corner of its asymptotes
   (the tangents at the start and the end of the curve) by at most ``SHARP_SHORTFALL`` of the corner's
   height — K·C ≥ ~100 for 1:1, derived above — or by less than ``INVISIBLE_SD`` reading sd, so that
   the readings cannot see the rounding at all. (A two-line intersection through a rounded curve can
   land near the ratio by chance of the tube spacing; this second condition keeps that from counting.)

Both the bias (through K·C) and the sd (through the signal) improve with the fixed concentration, so the
concentration that makes the break resolvable is searched upward; readings leaving the linear range
are reported with it. The tubes themselves — fixed volume and rising volumes that the glassware allows
and that keep every reading in range — are chosen in :mod:`._ratio_tubes`.
"""

from __future__ import annotations

import numpy as np

from ._deps import (
    SECOND_COMPLEX_SHARE,
    Check,
    Plan,
    PlanError,
    assess_tubes,
    error_budget,
    plan_devices,
    plan_model,
    plural,
    predict,
    tube_ions_M,
)
from ._ratio_tubes import LINE_MARGIN as LINE_MARGIN  # the hand lines' sides, also for the class cards
from ._ratio_tubes import Layout, line_sides, plan_tubes, room_of, top_ratio
from .common import (
    ClassicSeries,
    corrected,
    curve_points,
    fill_volumes,
    finish,
    fmt_conc,
    hypothetical,
    pure_stock,
    scaled_in_range,
    series_points,
    series_recipe,
)

METHOD = "mole-ratio"
DEFAULT_POINTS = 10
BREAK_TOLERANCE = 0.10  # |bias| + 2 sd ≤ 10 % of the ratio: 1:1 is not mistaken for 2:3 or 3:2 [derived]
SHARP_SHORTFALL = 0.10  # ≤ 10 % short of the corner: K·C ≥ ~100 for 1:1 [derived: shortfall ≈ 1/√(KC)]
INVISIBLE_SD = 2.0  # a rounding under 2 reading sd is invisible in the data [common practice: 2-sd band]
SEARCH_SCALES = np.geomspace(1.0, 1000.0, 31)[1:]
CURVE_POINTS = 201
QUESTION = "where is the break, and is it sharp enough to read the complex's ratio from two straight lines?"


def mole_ratio_series(
    plan: Plan,
    *,
    vary: str = "L",
    points: int | None = None,
    total_M: float | None = None,
    max_ratio: float | None = None,
) -> ClassicSeries:
    """Plan and judge a mole-ratio series.

    Parameters
    ----------
    vary : the rising reagent, "L" (metal fixed, the usual way) or "M" (ligand fixed).
    points : number of tubes, their ratios evenly spaced from the lowest to the highest (on the grid).
    total_M : the fixed reagent's concentration in every tube (default: the largest whose readings stay in
        the linear range over the guess's uncertainty).
    max_ratio : the highest ratio varied/fixed (default: the one, up to 2.5 × the highest ratio among the
        complexes, that keeps the readings in range with tubes on both sides of the break).

    The lowest ratio is chosen too, from the smallest the minimum volume of the rising stock allows up to
    (1 − LINE_MARGIN) × the complex's ratio: every combination is screened by assess's own linear-range
    screen (:func:`.common.screen`), keeping ≥ 2 tubes on each side of the break for the hand lines; of
    those in range, the most concentrated, then the one with the most tubes on its shorter line, then
    the widest span.
    """
    if vary not in ("L", "M"):
        raise PlanError(
            "vary", f"'{vary}': write L (metal fixed, ligand rising) or M (ligand fixed, metal rising)"
        )
    model = plan_model(plan)
    fix = "M" if vary == "L" else "L"
    fi, vi = (0, 1) if fix == "M" else (1, 0)
    _, fix_id, c_fix = pure_stock(plan, fix)
    _, var_id, c_var = pure_stock(plan, vary)
    target = plan.target
    j, expected, highest = _ratios(model, target, fi, vi)
    n = DEFAULT_POINTS if points is None else int(points)
    if n < 5:
        n_tubes = plural(n, "tube")
        raise PlanError("points", f"{n_tubes} cannot give two lines of at least two tubes: use 8–12")
    top, given = top_ratio(expected, highest, max_ratio)
    layout = Layout(fix_id, var_id, c_fix, c_var, expected, n, top, given, room_of(plan, fix_id, var_id))
    v_fix, v_var, range_fix, spread_note = plan_tubes(plan, model, layout, total_M, vi)
    recipe = series_recipe(plan, {fix_id: np.full(n, v_fix), var_id: v_var}, [f"R{i + 1}" for i in range(n)])
    a = assess_tubes(plan, recipe)
    hand, curve, cov = _hand_analysis(plan, model, a, layout, v_fix, fi, vi)
    st = a.state
    ratio = st.totals_M[:, vi] / st.totals_M[:, fi]
    C = float(np.median(st.totals_M[:, fi]))
    rf, _, _, yf = curve
    needed, lines_short = _if_unresolved(plan, model, recipe, hand, (fi, vi), expected, C, curve)
    checks = [_break_check(hand, expected, C, needed if needed else lines_short, model, (fix, var_id))]
    ions_t = tube_ions_M(model, recipe.volumes_mL, recipe.total_volume_mL)
    other = _other_complex_effect(model, j, fi, (st.totals_M, ions_t, ratio, cov), curve[:3])
    if other is not None:
        checks.append(_other_check(other, hand, expected, target, fix))
    y = corrected(model, st)
    sd = np.sqrt(np.diag(cov))
    extra = {
        "fixed_reagent": fix,
        "varied_reagent": vary,
        "stocks": {"fixed": fix_id, "varied": var_id},
        "fixed_conc_M": C,
        "ratio_span": [float(ratio.min()), float(ratio.max())],
        **_break_findings(hand, expected, recipe.tubes),
        "conc_needed_M": needed[0] if needed else None,
        "path_cm_at_conc_needed": needed[1] if needed else None,
        "series": series_points(recipe.tubes, "ratio", ratio, y, sd),
        "curve": curve_points("ratio", rf, yf),
        "other_complexes": other,
    }
    notes, ok = _texts(
        model, layout, hand, (fix, vary, target), C, ratio, (v_fix, v_var), spread_note, needed
    )
    columns = {"ratio": ratio, "Y": y, "±2sd": 2 * sd}
    return finish(
        METHOD, plan, QUESTION, recipe, a, checks, extra, columns, ok, notes=tuple(notes), range_fix=range_fix
    )


def _if_unresolved(plan, model, recipe, hand: dict, axes, expected: float, C: float, curve):
    """When the break is not resolvable: the fixed concentration (and path) that would resolve it, or
    whether the lines are too short; (None, False) when it is resolvable."""
    if hand["resolvable"]:
        return None, False
    fi, vi = axes
    rf, curve_totals, curve_ions, _ = curve
    return _conc_that_resolves(plan, model, recipe, fi, vi, expected, C, rf, curve_totals, curve_ions)


def _ratios(model, target: str, fi: int, vi: int) -> tuple[int, float, float]:
    """The target's index, its ratio varied/fixed and the highest such ratio among the plan's complexes."""
    j = model.index(target)
    if not model.complex_mask[j]:
        raise PlanError(
            "design.target",
            f"'{target}' is not a metal–ligand complex: name the complex whose ratio the series should find",
        )
    expected = float(model.stoich[j, vi] / model.stoich[j, fi])
    mask = model.complex_mask
    highest = float(np.max(model.stoich[mask, vi] / model.stoich[mask, fi]))
    return j, expected, highest


def _break_findings(hand: dict, expected: float, tubes) -> dict:
    """The hand analysis's break and lines by their JSON keys."""
    return {
        "break_ratio": hand["break_ratio"],
        "break_ratio_sd": hand["break_ratio_sd"],
        "break_ratio_expected": expected,
        "break_bias": hand["bias"],
        "break_tolerance": BREAK_TOLERANCE,
        "resolvable": hand["resolvable"],
        "shortfall_fraction": hand["shortfall_fraction"],
        "shortfall_sd": hand["shortfall_sd"],
        "lines_tubes": {
            "before": [t for t, m in zip(tubes, hand["before"], strict=True) if m],
            "after": [t for t, m in zip(tubes, hand["after"], strict=True) if m],
        },
    }


def _texts(model, layout: Layout, hand: dict, names, C: float, ratio, volumes, spread_note, needed):
    """The method's findings for people, one line each, and the verdict's sentence when it answers."""
    fix, vary, target = names
    v_fix, v_var = volumes
    nb, na = int(hand["before"].sum()), int(hand["after"].sum())
    notes = [
        f"{fix} fixed at {fmt_conc(C)} ({v_fix:g} mL {layout.fix_id}); {vary} rising from "
        f"{ratio.min():.3g}× to {ratio.max():.3g}× ({v_var.min():g}–{v_var.max():g} mL {layout.var_id}): "
        f"{plural(nb, 'tube')} for the line before the break, {na} after",
        *spread_note,
        f"two-line break at {vary}/{fix} = {_num(hand['break_ratio'])} ± {_num(hand['break_ratio_sd'])} "
        f"(expected {layout.expected:g} for {target}); the curve falls {hand['shortfall_fraction']:.1%} "
        f"({hand['shortfall_sd']:.1f} sd) short of the asymptotes' corner there",
    ]
    if needed:
        cell = f" in a {needed[1]:.2g} cm cell" if needed[1] < model.path_cm * 0.999 else ""
        notes.append(f"a fixed concentration of {fmt_conc(needed[0])}{cell} would make the break resolvable")
    ok = (
        f"the break at {_num(hand['break_ratio'])} ± {_num(hand['break_ratio_sd'])} reads the {target} ratio "
        f"{layout.expected:g} within {BREAK_TOLERANCE:.0%}"
    )
    return notes, ok


def _hand_analysis(plan, model, a, layout: Layout, v_fix: float, fi: int, vi: int):
    """The hand two-line analysis of the planned tubes, the noise-free curve between them (ratios,
    totals, ions, corrected absorbance) and the readings' covariance."""
    st = a.state
    ratio = st.totals_M[:, vi] / st.totals_M[:, fi]
    cov = a.budget.total
    y = corrected(model, st)
    # the curve over the usual span whatever the tubes cover: its sharpness is the chemistry's (K·C)
    rf = np.linspace(0.0, max(layout.top, float(ratio.max())), CURVE_POINTS)
    vol, tot = fill_volumes(
        plan, {layout.fix_id: np.full(rf.size, v_fix), layout.var_id: rf * v_fix * layout.per_ratio}
    )
    curve_totals = (vol @ model.stock_conc_M) / tot[:, None]
    curve_ions = tube_ions_M(model, vol, tot)
    yf = corrected(model, predict(model, curve_totals, curve_ions, warn=False))
    hand = judge_break(ratio, y, cov, rf, yf, layout.expected)
    return hand, (rf, curve_totals, curve_ions, yf), cov


def _other_complex_effect(model, j, fi, tubes, curve) -> dict | None:
    """What the plan's other complexes of the fixed reagent do to the break: the break the same tubes
    would give with the target complex alone (the others' constants set to nothing), and the share of
    the fixed reagent in them at the expected ratio. None without such complexes."""
    others = [
        k for k in range(len(model.species)) if k != j and model.complex_mask[k] and model.stoich[k, fi] > 0
    ]
    if not others:
        return None
    totals, ions, ratio, cov = tubes
    rf, curve_totals, curve_ions = curve
    expected = float(model.stoich[j, 1 - fi] / model.stoich[j, fi])
    lb = model.log_beta.copy()
    lb[others] = -30.0  # not formed at any concentration a tube holds
    with hypothetical():
        y_alone = corrected(model, predict(model, totals, ions, log_beta=lb, warn=False))
        yf_alone = corrected(model, predict(model, curve_totals, curve_ions, log_beta=lb, warn=False))
        at = predict(model, curve_totals, curve_ions, warn=False)
    alone = judge_break(ratio, y_alone, cov, rf, yf_alone, expected)
    k = int(np.argmin(np.abs(rf - expected)))
    share = float((at.species_M[k, others] * model.stoich[others, fi]).sum() / curve_totals[k, fi])
    return {
        "species": [model.species[i] for i in others],
        "break_ratio_target_alone": alone["break_ratio"],
        "share_at_expected_ratio": share,
    }


def _other_check(other: dict, hand: dict, expected: float, target: str, fix: str) -> Check:
    names = ", ".join(other["species"])
    share = other["share_at_expected_ratio"]
    shift = hand["break_ratio"] - other["break_ratio_target_alone"]
    here, alone = _num(hand["break_ratio"]), _num(other["break_ratio_target_alone"])
    msg = (
        f"at the ratio {expected:g} of {target}, {share:.0%} of {fix} is in {names}; with {names} forming "
        f"the two-line break lands at {here} instead of {alone} with {target} alone"
    )
    if share <= SECOND_COMPLEX_SHARE and not abs(shift) > BREAK_TOLERANCE * expected / 2:
        return Check("other-complexes", "pass", msg)
    return Check(
        "other-complexes",
        "warn",
        msg + ": the break reads neither complex's ratio cleanly — fit all complexes globally (kplan design)",
    )


def judge_break(ratio, y, cov, rf, yf, expected) -> dict:
    """The hand two-line break of the tubes and the sharpness of the curve, with the verdict."""
    hand = two_line_break(ratio, y, cov, expected)
    frac, in_sd = _shortfall(rf, yf, expected, float(np.median(np.sqrt(np.diag(cov)))))
    sharp = bool(frac <= SHARP_SHORTFALL or in_sd <= INVISIBLE_SD)
    hand.update(
        shortfall_fraction=frac,
        shortfall_sd=in_sd,
        sharp=sharp,
        resolvable=bool(hand["resolvable"] and sharp),
    )
    return hand


def two_line_break(ratio: np.ndarray, y: np.ndarray, cov: np.ndarray, expected: float) -> dict:
    """Intersection of the least-squares lines through the tubes before (≤ (1 − margin)·expected) and
    after (≥ (1 + margin)·expected) the expected break, its sd by linear propagation of ``cov`` and
    whether |bias| + 2 sd ≤ BREAK_TOLERANCE·expected."""
    before, after = line_sides(ratio, expected)
    out = {
        "before": before,
        "after": after,
        "break_ratio": float("nan"),
        "break_ratio_sd": float("nan"),
        "bias": float("nan"),
        "resolvable": False,
    }
    if before.sum() < 2 or after.sum() < 2:
        out["why"] = (
            f"fewer than two tubes on a side of the break (before: {int(before.sum())}, after: "
            f"{int(after.sum())}): add tubes"
        )
        return out
    P1 = _line_projector(ratio, before)  # (2, n): [a, b] = P @ y
    P2 = _line_projector(ratio, after)
    a1, b1 = P1 @ y
    a2, b2 = P2 @ y
    if abs(b1 - b2) <= 1e-12 * (abs(b1) + abs(b2) + 1e-300):
        out["why"] = "the two lines are parallel: no break"
        return out
    rb = (a2 - a1) / (b1 - b2)
    d = b1 - b2
    grad = (-P1[0] + P2[0]) / d - rb * (P1[1] - P2[1]) / d  # ∂rb/∂y [derived: quotient rule]
    sd = float(np.sqrt(max(grad @ cov @ grad, 0.0)))
    bias = float(rb - expected)
    out.update(
        break_ratio=float(rb),
        break_ratio_sd=sd,
        bias=bias,
        resolvable=bool(abs(bias) + 2 * sd <= BREAK_TOLERANCE * expected),
    )
    return out


def _line_projector(x: np.ndarray, m: np.ndarray) -> np.ndarray:
    """(2, n) matrix giving intercept and slope of the least-squares line through the tubes in ``m``."""
    X = np.stack([np.ones(x.size), x], axis=1) * m[:, None]
    return np.linalg.pinv(X)


def _shortfall(rf, yf, expected, sd) -> tuple[float, float]:
    """How far the curve at the expected ratio falls short of the corner of its two asymptotes (tangents
    at the start and the end), as a fraction of the corner's height and in reading sd."""
    s0 = (yf[1] - yf[0]) / (rf[1] - rf[0])
    s1 = (yf[-1] - yf[-2]) / (rf[-1] - rf[-2])
    corner = (
        min(yf[0] + s0 * expected, yf[-1] + s1 * (expected - rf[-1]), key=abs)
        if s0 * s1 >= 0
        else yf[0] + s0 * expected
    )
    at = float(np.interp(expected, rf, yf))
    gap = abs(corner - at)
    return float(gap / abs(corner)) if corner else float("nan"), float(gap / sd) if sd > 0 else float("nan")


def _conc_that_resolves(
    plan, model, recipe, fi, vi, expected, C, rf, curve_totals, curve_ions
) -> tuple[tuple[float, float] | None, bool]:
    """Smallest scale of both stocks (same volumes) at which the break is resolvable, with the path that
    keeps the readings in range: ((fixed concentration, path_cm) or None up to 1000×, whether the curve
    is sharp at the largest scale tried — if so, the tubes on the lines, not the chemistry, fall short)."""
    devices = plan_devices(plan)
    sharp = False
    for s in SEARCH_SCALES:
        ms, st = scaled_in_range(model, recipe, float(s))
        cov = error_budget(plan, ms, recipe, st, devices).total
        with hypothetical():
            yf = corrected(ms, predict(ms, s * curve_totals, curve_ions, warn=False))
        tot = st.totals_M
        hand = judge_break(tot[:, vi] / tot[:, fi], corrected(ms, st), cov, rf, yf, expected)
        if hand["resolvable"]:
            return (float(s) * C, float(ms.path_cm)), True
        sharp = hand["sharp"]
    return None, sharp


def _num(x) -> str:
    return "—" if x is None or not np.isfinite(x) else f"{x:.3g}"


def _break_check(hand, expected, C, needed, model, ids) -> Check:
    """The break's verdict. ``needed`` is the (concentration, path) that would resolve it, or — none
    found — whether the curve was sharp at the largest concentration tried (then the lines fall short)."""
    if "why" in hand:
        return Check("break", "fail", hand["why"])
    fix, var_id = ids
    msg = (
        f"two-line break at {_num(hand['break_ratio'])} ± {_num(hand['break_ratio_sd'])} against the "
        f"expected {expected:g} (bias {hand['bias']:+.3f}); the curve falls {hand['shortfall_fraction']:.1%} "
        f"({hand['shortfall_sd']:.1f} sd) short of its asymptotes' corner"
    )
    if not hand["sharp"]:
        msg += (
            f" — a rounded break (sharp means ≤ {SHARP_SHORTFALL:.0%}, K·C ≥ ~100 for 1:1), whatever the "
            f"lines happen to give"
        )
    if hand["resolvable"]:
        return Check("break", "pass", msg + f": resolvable within {BREAK_TOLERANCE:.0%}")
    msg += f": not resolvable within {BREAK_TOLERANCE:.0%} at {fix} = {fmt_conc(C)}"
    names = [n for n, m in zip(model.species, model.complex_mask, strict=True) if m]
    if isinstance(needed, tuple):
        c, path = needed
        msg += f"; {fmt_conc(c)} would"
        if path < model.path_cm * 0.999:
            msg += f" (in a {path:.2g} cm cell, to keep the readings in the linear range)"
        return Check("break", "fail", msg + " — or fit all tubes globally")
    if len(names) > 1:
        msg += (
            f"; no concentration up to 1000× does it — with {', '.join(names)} all forming, the lines need "
            f"not meet at {expected:g}: fit all complexes globally (kplan design) instead"
        )
    elif needed:  # sharp at the largest concentration, yet not resolved: too few tubes on the lines
        nb, na = int(hand["before"].sum()), int(hand["after"].sum())
        msg += (
            f"; no concentration up to 1000× does it with {nb} tubes on the line before the break and {na} "
            f"after — more tubes on the lines would (a more dilute {var_id} stock lets the series start at "
            f"a lower ratio), or fit all tubes globally (kplan design) instead"
        )
    else:
        msg += (
            "; no concentration up to 1000× does it — the complex is too weak for a break: fit all tubes "
            "globally (kplan design) instead"
        )
    return Check("break", "fail", msg)
