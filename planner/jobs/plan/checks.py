"""Checks of a recipe's assumptions, each pass / warn / fail with a message that says what to change.

Every check is a pure function of the plan, the model and the expected tube state (plus, for some,
the parameter uncertainty); thresholds carry their source.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ...inputs.text import plural, tube_list
from ...model import closed_forms
from ...model.compiled import Model, TubeState

RANGE_RISK = (
    0.05  # a tube may leave the linear range for at most 5 % of the guess's uncertainty [common practice]
)
SATURATION_WINDOW = (0.2, 0.8)  # source: Weber 1975, Adv. Protein Chem. 29:1
CALIBRATION_EXCESS = (
    20.0  # a tube with ≥ 20-fold excess is a "complete conversion" candidate [common practice]
)
CONVERSION_WANTED = 0.99  # [common practice]
DOUBLE_RECIPROCAL_EXCESS = 100.0  # source: Wang & Yu 2007, Acta Phys.-Chim. Sin. 23:1353
SECOND_COMPLEX_SHARE = (
    0.05  # share of metal in other complexes that a 1:1 analysis can ignore [common practice]
)
IONIC_STRENGTH_SPREAD = 0.05  # a few percent keeps activity coefficients constant [common practice]
SIDE_REACTION_SHARE = 0.05  # hydrolysis / protonation share worth a warning [common practice]


@dataclass(frozen=True)
class Check:
    """One check of a recipe: id, "pass" | "warn" | "fail", and a message that says what to change."""

    id: str
    status: str
    message: str


def _all_tubes(n: int) -> str:
    return "the tube reads" if n == 1 else f"all {n} tubes read"


def range_risk(absorbance: np.ndarray, sd: np.ndarray, lo: float, hi: float) -> np.ndarray:
    """Probability that a reading expected at ``absorbance`` ± ``sd`` (normal) falls outside [lo, hi]."""
    from ...inference.tails import norm_cdf as ndtr

    a = np.asarray(absorbance, dtype=float)
    sd = np.broadcast_to(np.asarray(sd, dtype=float), a.shape)
    s = np.where(sd > 0, sd, 1.0)
    smooth = ndtr((lo - a) / s) + ndtr((a - hi) / s)
    sharp = ((a < lo) | (a > hi)).astype(float)  # no spread: inside (edges included) or out
    return np.where(sd > 0, smooth, sharp)


def prior_range_risk(
    absorbance: np.ndarray, band: np.ndarray, weights: np.ndarray, lo: float, hi: float
) -> np.ndarray:
    """Chance of leaving [lo, hi] over the guesses' uncertainty.

    ``absorbance`` and ``band`` are (G, ...) at the quadrature nodes of the uncertain log β (weights
    (G,)); ``band`` is the sd from the absorptivities' uncertainty at each node (they enter linearly).
    """
    risk = range_risk(absorbance, band, lo, hi)
    return np.tensordot(weights, risk, axes=(0, 0))


def blanks(totals_M: np.ndarray) -> np.ndarray:
    """Tubes with only one of the two reagents: reagent blanks, read to be subtracted. Nothing binds in
    them, so a low reading is what they are for; only the top of the linear range applies to them."""
    tot = np.asarray(totals_M, dtype=float)
    return (tot[..., 0] <= 0) | (tot[..., 1] <= 0)


def range_band(
    model: Model, params, totals_M: np.ndarray, ions_M: np.ndarray, epsilon_M_cm: np.ndarray | None = None
):
    """Each tube's chance of leaving the linear range over the guesses' uncertainty, and its lowest and
    highest reading over ±2 sd of it — the one screen ``assess``, ``design`` and every classic series use.

    The uncertain log β are integrated by the quadrature nodes of :func:`planner.inference.priors.prior_nodes`
    (as the design screens its candidates); the absorptivities enter linearly, as a normal band of
    sd Σ ∂A/∂ε · ε · rsd at each node (:func:`prior_range_risk`). A blank (a tube with one reagent only)
    is held to the top of the window only (:func:`blanks`).

    Parameters
    ----------
    params : the fitted parameters (:class:`planner.inference.precision.Parameters`).
    totals_M : (N, 2) the tubes' totals; ions_M : (N, n_ions) their other ions.
    epsilon_M_cm : optional (Λ, 2 + S) absorptivities, e.g. at Λ wavelengths; the result is then per row.

    Returns
    -------
    risk : (N,) — or (Λ, N) — chance of a reading outside the window.
    low, high : the same shape, lowest and highest reading over ±2 sd of the guesses (band included).
    """
    from ...inference.precision import unpack
    from ...inference.priors import prior_nodes
    from ...model.compiled import predict
    from ...model.jacobians import absorbance_derivatives

    nodes = prior_nodes(params, robust=True)
    lb, eps, _ = unpack(model, params, nodes.theta)
    G = nodes.theta.shape[0]
    lead: tuple[int, ...] = (G,)
    if epsilon_M_cm is not None:  # ε does not vary over the nodes (they move log β only)
        eps_rows = np.asarray(epsilon_M_cm, dtype=float)
        lead = (G, eps_rows.shape[0])
        eps = np.broadcast_to(eps_rows, lead + eps_rows.shape[1:])
        lb = lb[:, None, :]
    tot = np.broadcast_to(totals_M, lead + np.shape(totals_M))
    ions = np.broadcast_to(ions_M, lead + np.shape(ions_M))
    st = predict(model, tot, ions, log_beta=lb, epsilon_M_cm=eps, warn=False)
    der = absorbance_derivatives(model, st, eps)
    eps_sd = (eps * model.epsilon_rsd)[..., None, :]
    band = np.sqrt(np.sum((der.dA_depsilon * eps_sd) ** 2, axis=-1))
    lo, hi = model.linear_range
    risk = prior_range_risk(st.absorbance, band, nodes.weights, np.where(blanks(totals_M), -np.inf, lo), hi)
    inner = np.all(np.abs(nodes.theta - params.guess) <= 2.0 * params.prior_sd + 1e-12, axis=1)
    low = np.maximum(np.min((st.absorbance - 2 * band)[inner], axis=0), 0.0)
    high = np.max((st.absorbance + 2 * band)[inner], axis=0)
    return risk, low, high


def linear_range(
    model: Model,
    state: TubeState,
    tubes,
    risk: np.ndarray | None = None,
    spread: tuple[float, float] | None = None,
) -> Check:
    """Every tube's absorbance, with its band over the guess's uncertainty, inside the window.

    ``risk`` (n,) is each tube's chance of leaving the window over the guesses' uncertainty
    (:func:`prior_range_risk`); a tube is at risk above RANGE_RISK. ``spread`` is the lowest and
    highest reading over that uncertainty (about ±2 sd), for the message. Blanks (:func:`blanks`) are held
    to the top of the window only.
    """
    lo, hi = model.linear_range
    a = state.absorbance
    out_hi, out_lo = a > hi, (a < lo) & ~blanks(state.totals_M)
    if out_hi.any() or out_lo.any():
        parts = []
        if out_hi.any():
            parts.append(
                f"{tube_list(tubes, out_hi)} above {hi:g}: use less of the absorbing stock, a shorter path "
                f"or a wavelength off the band maximum"
            )
        if out_lo.any():
            parts.append(
                f"{tube_list(tubes, out_lo)} below {lo:g}: use more of the absorbing stock or a longer path"
            )
        return Check("linear-range", "fail", "; ".join(parts))
    if risk is not None:
        risky = risk > RANGE_RISK
        if risky.any():
            band = f"; readings {spread[0]:.3f}–{spread[1]:.3f} over the guess's range" if spread else ""
            return Check(
                "linear-range",
                "warn",
                f"inside {lo:g}–{hi:g} at the guess, but {tube_list(tubes, risky)} may leave it if the "
                f"guess is off (up to {risk.max():.0%} risk{band}): move those tubes towards the "
                f"middle of the range",
            )
    blank = blanks(state.totals_M)
    if blank.any() and not blank.all():
        return Check(
            "linear-range",
            "pass",
            f"{_all_tubes(int((~blank).sum()))} between {lo:g} and {hi:g} (A = {a[~blank].min():.3f}–"
            f"{a[~blank].max():.3f}); the blanks {tube_list(tubes, blank)} read {a[blank].max():.3f} at most",
        )
    return Check(
        "linear-range",
        "pass",
        f"{_all_tubes(len(tubes))} between {lo:g} and {hi:g} (A = {a.min():.3f}–{a.max():.3f})",
    )


def saturation(state: TubeState, tubes) -> Check:
    """Coverage of the binding curve: at least two tubes inside the 0.2–0.8 window and a span of at
    least half of it. The saturation is :func:`planner.model.compiled.saturation` (the fraction of each
    tube's limiting reagent bound), the number the tube tables print and the binding figure plots.

    Weber (1975) asks for the 0.2–0.8 window; Deranleau (1969, JACS 91:4044) for ~75 % of the curve;
    Bowser & Chen (1998, J. Phys. Chem. A 102:8063) find the central-to-upper part the most informative.
    """
    s = state.saturation
    lo, hi = SATURATION_WINDOW
    inside = (s >= lo) & (s <= hi)
    span = float(s.max() - s.min()) if s.size else 0.0
    msg = (
        f"saturation {s.min():.2f}–{s.max():.2f} ({span:.0%} of the curve); {int(inside.sum())} of "
        f"{plural(s.size, 'tube')} inside {lo}–{hi}"
    )
    if inside.sum() == 0:
        fix = "raise the ligand (or metal) excess" if s.max() < lo else "lower the excess"
        return Check("saturation", "fail", f"{msg}: no tube where the data determine K best; {fix}")
    # two tubes inside the window are enough when the optimiser has placed them there on purpose: the
    # informative part of the curve is its middle-to-upper range (Bowser & Chen 1998), not its whole span
    if inside.sum() < 2 or span < 0.5 * (hi - lo):
        if s.max() < hi:
            fix = "add tubes with more of the excess reagent to reach the upper part of the curve"
        elif s.min() > lo:
            fix = "add tubes with less of the excess reagent to reach the lower part of the curve"
        else:
            fix = "spread the tubes over the curve"
        return Check("saturation", "warn", f"{msg}: {fix}")
    return Check("saturation", "pass", msg)


HALF_SATURATED = 0.5  # the tube a hand analysis typically rests on, for the bias quoted [common practice]


def hand_bias(f, y):
    """Relative bias of K from a "complete conversion" hand analysis of a 1:1 complex [derived].

    The calibration tube is only a fraction f converted, so ε_hand = f·ε and a tube at saturation y (the
    fraction of its limiting reagent bound, free excess ≈ total) is read as y/f:
    K_hand/K = (y/f)/(1 − y/f) · (1 − y)/y = (1 − y)/(f − y). The bias is 1/f − 1 in dilute tubes
    (y → 0), larger towards saturation, and undefined (NaN) for y ≥ f, where the hand analysis reads
    the tube as complete or beyond. Vectorised over f and y. This is the one definition both the
    calibration series and the conversion check of ``kplan assess`` use.
    """
    f = np.asarray(f, dtype=float)
    y = np.asarray(y, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(y < f, (1.0 - y) / (f - y) - 1.0, np.nan)


def hand_bias_summary(f: float) -> dict:
    """ε bias, and K bias in dilute and half-saturated tubes (None where undefined), for a calibration
    tube converted a fraction f (:func:`hand_bias`)."""
    half = float(hand_bias(f, HALF_SATURATED))
    return {
        "epsilon": float(f) - 1.0,
        "K_dilute": float(hand_bias(f, 0.0)),
        "K_half_saturated": half if np.isfinite(half) else None,
    }


def conversion(model: Model, state: TubeState, tubes, target: str, *, hand_analysis: bool = True) -> Check:
    """'Complete conversion' calibration tubes: the fraction converted and, where a hand analysis is
    planned, the bias of assuming 100 %.

    A tube where one reagent is in ≥ 20-fold excess is what a hand analysis takes as fully complexed
    to get ε. For a 1:1 target the bias in K of each other tube follows from its saturation y and the
    calibration's conversion f by :func:`hand_bias`, the definition the calibration series uses. Under
    a global fit (``hand_analysis`` False) ε is fitted and no tube is assumed complete: no bias.
    """
    tot = state.totals_M
    M0, L0 = tot[:, 0], tot[:, 1]
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = np.maximum(M0 / L0, L0 / M0)
    cand = np.isfinite(ratio) & (ratio >= CALIBRATION_EXCESS) & (np.minimum(M0, L0) > 0)
    if not cand.any():
        return Check("conversion", "pass", "no 'complete conversion' tube (none with a 20-fold excess)")
    j = model.index(target)
    p, q = model.stoich[j, 0], model.stoich[j, 1]
    limiting_is_L = L0 < M0
    frac = np.where(
        limiting_is_L,
        q * state.species_M[:, j] / np.where(L0 > 0, L0, 1),
        p * state.species_M[:, j] / np.where(M0 > 0, M0, 1),
    )
    # the hand analysis calibrates on the tube with the largest excess
    worst = int(np.flatnonzero(cand)[np.argmax(ratio[cand])])
    f = float(frac[worst])
    if not hand_analysis:
        return Check(
            "conversion",
            "pass",
            f"tube {tubes[worst]} (×{ratio[worst]:.0f} excess) is {f:.1%} converted; the planned global "
            f"fit estimates ε with K and assumes no tube complete",
        )
    if f >= CONVERSION_WANTED:
        return Check("conversion", "pass", f"calibration tube {tubes[worst]} is {f:.1%} converted")
    msg = f"tube {tubes[worst]} (×{ratio[worst]:.0f} excess) is only {f:.1%} converted"
    if (p, q) == (1, 1):
        msg += "; " + _bias_words(f, state.saturation, tubes, worst)
        K = 10.0 ** state.log_beta[worst, j]
        c_lim = min(M0[worst], L0[worst])
        excess_needed = CONVERSION_WANTED / ((1 - CONVERSION_WANTED) * K) + CONVERSION_WANTED * c_lim
        msg += (
            f"; an excess of {excess_needed:.3g} M would give {CONVERSION_WANTED:.0%} — or fit all tubes "
            f"globally instead"
        )
    return Check("conversion", "warn" if f >= 0.95 else "fail", msg)


def _bias_words(f: float, y: np.ndarray, tubes, calib: int) -> str:
    """The hand analysis's bias in words: dilute and half-saturated tubes, and this recipe's tubes."""
    b = hand_bias_summary(f)
    half = "undefined" if b["K_half_saturated"] is None else f"{b['K_half_saturated']:+.1%}"
    out = (
        f"a hand analysis assuming complete conversion biases ε by {b['epsilon']:+.1%} and K by "
        f"{b['K_dilute']:+.1%} in dilute tubes to {half} in half-saturated ones (K_hand/K = (1 − y)/(f − y))"
    )
    others = np.ones(y.size, dtype=bool)
    others[calib] = False
    per = hand_bias(f, y)
    usable = others & np.isfinite(per)
    if usable.any():
        out += f"; in this recipe's tubes {np.min(per[usable]):+.1%} to {np.max(per[usable]):+.1%}"
    beyond = others & ~np.isfinite(per)
    if beyond.any():
        out += f"; {tube_list(tubes, beyond)} (saturation ≥ {f:.0%}) cannot be analysed this way at all"
    return out


def fraction_converted(K: float, excess_free_M: float) -> float:
    """Fraction of the limiting reagent complexed at a given free excess: K·x/(1 + K·x) [derived]."""
    return K * excess_free_M / (1.0 + K * excess_free_M)


def double_reciprocal(state: TubeState, tubes) -> Check:
    """Benesi–Hildebrand analysis needs the excess reagent at ≥ 100× the other in every tube."""
    tot = state.totals_M
    M0, L0 = tot[:, 0], tot[:, 1]
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = np.where(M0 > 0, L0 / M0, np.inf)
    low = ratio < DOUBLE_RECIPROCAL_EXCESS
    if not low.any():
        return Check(
            "double-reciprocal", "pass", f"ligand excess ≥ {DOUBLE_RECIPROCAL_EXCESS:.0f}× in every tube"
        )
    status = "fail" if np.any(ratio < 10) else "warn"
    return Check(
        "double-reciprocal",
        status,
        f"ligand excess only {np.min(ratio):.0f}× in {tube_list(tubes, low)}; a double-reciprocal "
        f"plot needs about 100× (not 10×): lower the metal or raise the ligand, or fit globally",
    )


def second_complex(model: Model, state: TubeState, tubes, target: str) -> Check:
    """Share of the metal in complexes other than the target, where a 1:1 analysis is intended."""
    mask = model.complex_mask.copy()
    mask[model.index(target)] = False
    if not mask.any():
        return Check("second-complex", "pass", "the plan has no other complex")
    M0 = state.totals_M[:, 0]
    share = np.sum(state.species_M[:, mask] * model.stoich[mask, 0], axis=1) / np.where(M0 > 0, M0, 1)
    k = int(np.argmax(share))
    names = ", ".join(s for s, m in zip(model.species, mask, strict=True) if m)
    if share[k] <= SECOND_COMPLEX_SHARE:
        return Check("second-complex", "pass", f"{names} hold at most {share[k]:.1%} of the metal")
    return Check(
        "second-complex",
        "warn" if share[k] < 0.2 else "fail",
        f"{names} hold up to {share[k]:.0%} of the metal (tube {tubes[k]}): a 1:1 analysis will be "
        f"biased; lower the ligand excess or fit all complexes",
    )


def ionic_strength(state: TubeState) -> Check:
    """Spread of ionic strength across tubes: constants are conditional on the medium."""
    I = state.ionic_strength_M
    mean = float(np.mean(I))
    spread = float((I.max() - I.min()) / mean) if mean > 0 else 0.0
    if spread <= IONIC_STRENGTH_SPREAD:
        return Check("ionic-strength", "pass", f"I = {I.min():.3g}–{I.max():.3g} M (spread {spread:.1%})")
    return Check(
        "ionic-strength",
        "warn",
        f"I varies {spread:.0%} across tubes ({I.min():.3g}–{I.max():.3g} M): add background "
        f"electrolyte so every tube has the same ionic strength",
    )


def side_reactions(model: Model, state: TubeState, tubes) -> list[Check]:
    """Hydrolysis (M–H species without L) and ligand protonation (L–H species without M) shares."""
    out = []
    p, q = model.stoich[:, 0], model.stoich[:, 1]
    hyd = (p > 0) & (q == 0)
    prot = (p == 0) & (q > 0)
    M0, L0 = state.totals_M[:, 0], state.totals_M[:, 1]
    if hyd.any():
        share = np.sum(state.species_M[:, hyd] * p[hyd], axis=1) / np.where(M0 > 0, M0, 1)
        k = int(np.argmax(share))
        status = "pass" if share[k] <= SIDE_REACTION_SHARE else "warn"
        fix = (
            "" if status == "pass" else ": lower the pH (more acid) or include the hydroxo species in the fit"
        )
        out.append(
            Check(
                "hydrolysis", status, f"up to {share[k]:.1%} of the metal hydrolysed (tube {tubes[k]}){fix}"
            )
        )
    if prot.any():
        share = np.sum(state.species_M[:, prot] * q[prot], axis=1) / np.where(L0 > 0, L0, 1)
        alpha = float(np.max(share))
        out.append(
            Check(
                "protonation",
                "pass",
                f"up to {alpha:.1%} of the ligand is protonated: the fit uses the conditional "
                f"constants at this pH (the pH must be held by the buffer)",
            )
        )
    return out


def conditional_log_k(model: Model, target: str) -> float:
    """Conditional log β of the target at the plan's pH with ligand protonation folded in [derived]."""
    cond = closed_forms.conditional_log_beta(model.log_beta, model.stoich, model.pH)
    p, q = model.stoich[:, 0], model.stoich[:, 1]
    prot = (p == 0) & (q == 1)
    alpha_L = 1.0 + np.sum(10.0 ** cond[prot]) if prot.any() else 1.0
    j = model.index(target)
    return float(cond[j] - model.stoich[j, 1] * np.log10(alpha_L))
