"""Number formatting shared by the terminal, JSON-adjacent text and printed sheets (one place)."""

from __future__ import annotations

import math
import re


def sig(x: float | None, digits: int = 3) -> str:
    """``x`` to ``digits`` significant figures, plain notation for 1e-3 <= |x| < 1e5."""
    if x is None or (isinstance(x, float) and math.isnan(x)):
        return "—"
    if x == 0:
        return "0"
    ax = abs(x)
    if 1e-3 <= ax < 1e5:
        decimals = max(digits - 1 - int(math.floor(math.log10(ax))), 0)
        return f"{x:.{decimals}f}"
    return f"{x:.{digits - 1}e}"


def with_uncertainty(x: float, u: float) -> str:
    """``x ± u`` with ``u`` to two significant figures and ``x`` rounded to match."""
    if not (u > 0) or not math.isfinite(u):
        return sig(x, 4)
    exp = int(math.floor(math.log10(u))) - 1
    decimals = max(-exp, 0)
    return f"{round(x, -exp):.{decimals}f} ± {round(u, -exp):.{decimals}f}"


def conc(c_M: float) -> str:
    """A concentration in the most readable unit (M, mM, µM, nM)."""
    if c_M == 0:
        return "0"
    for unit, f in (("M", 1.0), ("mM", 1e3), ("µM", 1e6), ("nM", 1e9)):
        if abs(c_M) * f >= 1:
            return f"{sig(c_M * f, 3)} {unit}"
    return f"{sig(c_M * 1e12, 3)} pM"


MAX_STEP_DECIMALS = 6
"""Most decimals a grid step is written with (1 nL in mL); a step with more is not a decimal grid."""


def step_decimals(step: float) -> int:
    """Decimals that write every multiple of ``step`` exactly: those of the step itself.

    0.25 → 2, 0.05 → 2, 0.001 → 3, 0.2 → 1, 1 → 0, 0.125 → 3. The step's order of magnitude alone
    (−floor(log10 step)) is not enough: it writes 0.75 on a 0.25 mL grid as "0.8" [derived: k·step
    has no more decimals than step, and step·10^d is an integer for the smallest such d].
    """
    if not (step > 0 and math.isfinite(step)):
        return 2
    for d in range(MAX_STEP_DECIMALS + 1):
        scaled = step * 10.0**d
        if abs(scaled - round(scaled)) <= 1e-6 * max(scaled, 1.0):
            return d
    return MAX_STEP_DECIMALS


def _to_step(x: float, step: float) -> str:
    """``x`` rounded to the decimals of ``step`` (a reading resolution: a display, a balance)."""
    return f"{x:.{step_decimals(step)}f}"


def volume(v_mL: float, step_mL: float = 0.01) -> str:
    """A volume of a recipe written so that the text reads back as the volume: with the decimals of its
    grid ``step_mL`` (:func:`step_decimals`; 0.75 mL on a 0.25 mL grid is "0.75", never "0.8"), and more
    where the volume is off the grid (0.333 mL on a 0.01 mL grid stays "0.333", not a rounded "0.33")."""
    return f"{v_mL:.{max(step_decimals(step_mL), step_decimals(abs(v_mL)) if v_mL else 0)}f}"


# -- printed sheets (added for the prep sheet and the design report) -------------------------------
_CONC_UNITS = (("M", 1.0), ("mM", 1e3), ("µM", 1e6), ("nM", 1e9), ("pM", 1e12))


def conc_with_uncertainty(c_M: float, u_M: float | None) -> str:
    """A concentration and its standard uncertainty in one readable unit, e.g. ``10.000 ± 0.059 mM``.

    The unit is chosen from ``c_M`` as in :func:`conc`; the digits follow :func:`with_uncertainty`
    (two significant figures of the uncertainty, the value rounded to match) [source: GUM JCGM
    100:2008 §7.2.6].
    """
    if not (u_M is not None and u_M > 0 and math.isfinite(u_M)):
        return conc(c_M)
    unit, f = _CONC_UNITS[-1]
    for unit_i, f_i in _CONC_UNITS:
        if abs(c_M) * f_i >= 1:
            unit, f = unit_i, f_i
            break
    return f"{with_uncertainty(c_M * f, u_M * f)} {unit}"


def mass(m_g: float, readability_g: float = 1e-4) -> str:
    """A mass to weigh, written to the balance's readability (``0.2440 g`` on a 0.1 mg balance)."""
    return f"{_to_step(m_g, readability_g)} g"


def percent(x: float | None, digits: int = 2) -> str:
    """A fraction as a percentage to ``digits`` significant figures (``0.0059`` → ``0.59 %``)."""
    if x is None or not math.isfinite(x):
        return "—"
    return f"{sig(100.0 * x, digits)} %"


def band(x: float, half_width: float) -> str:
    """An expected value with its band ``x ± half_width`` (for example A ± 2 sd), digits matched."""
    return with_uncertainty(x, half_width)


def fixed(x: float, step: float = 0.01) -> str:
    """``x`` with the decimals of ``step`` (a reading resolution), e.g. ``fixed(0.1, 0.01)`` → ``0.10``."""
    return _to_step(x, step)


_SUB = str.maketrans("0123456789", "₀₁₂₃₄₅₆₇₈₉")


def species(name: str) -> str:
    """A species name in chemical notation: stoichiometric counts as subscripts ("ML2" → "ML₂")."""
    return re.sub(r"(?<=[A-Za-z)\]])\d+", lambda m: m.group(0).translate(_SUB), str(name))


def param_label(name: str) -> str:
    """A fitted parameter's JSON name in chemical notation: "log_beta[ML]" → "log β(ML)",
    "epsilon[ML2]" → "ε(ML₂)"; other names are returned unchanged."""
    for key, sym in (("log_beta[", "log β("), ("epsilon[", "ε(")):
        if name.startswith(key) and name.endswith("]"):
            return f"{sym}{species(name[len(key) : -1])})"
    return name


def chem_text(text: str) -> str:
    """Every parameter name in a sentence written in chemical notation (see :func:`param_label`)."""
    return re.sub(r"(?:log_beta|epsilon)\[[^\]\s]+\]", lambda m: param_label(m.group(0)), str(text))


# -- table columns: one precision rule per column ----------------------------------------------------
def band_column(values, half_widths, step: float = 0.001) -> list[str]:
    """``x ± h`` for a whole column with the same decimals, those of ``step`` (the meter's display:
    0.001 A by default), so the column reads like the instrument does."""
    return [f"{_to_step(x, step)} ± {_to_step(h, step)}" for x, h in zip(values, half_widths, strict=True)]


def conc_column(values_M, digits: int = 3) -> tuple[str, list[str]]:
    """(unit, texts) for a column of concentrations: one unit (that of the largest value) and the same
    decimals throughout (``digits`` significant figures of the largest)."""
    vals = [float(v) for v in values_M]
    big = max((abs(v) for v in vals), default=0.0)
    unit, f = "M", 1.0
    for unit_i, f_i in _CONC_UNITS:
        if big * f_i >= 1:
            unit, f = unit_i, f_i
            break
    decimals = max(digits - 1 - int(math.floor(math.log10(big * f))), 0) if big > 0 else 0
    return unit, [f"{v * f:.{decimals}f}" for v in vals]


_SUP = str.maketrans("0123456789+-", "⁰¹²³⁴⁵⁶⁷⁸⁹⁺⁻")


def ion(label: str) -> str:
    """An ion label in chemical notation: counts as subscripts, the charge as a superscript
    ("Cu2+" → "Cu²⁺", "SO4 2-" → "SO₄²⁻", "NO3-" → "NO₃⁻"). Digits right before the sign are a charge
    only after a bare element symbol, as the plan's ion names are read; other text is kept."""
    s = str(label).strip()
    m = re.fullmatch(r"(.+?)\s+(\d*[+-])", s) or re.fullmatch(r"\[(.+)\](\d*[+-])", s)
    if m is None:
        m = re.fullmatch(r"(.+?)(\++|-+)", s)
        if m is None:
            return species(s)
        body, charge = m.groups()
        bare = re.fullmatch(r"([A-Z][a-z]?)(\d+)", body)
        if bare and len(charge) == 1:  # "Cu2+": the digits are the charge
            body, charge = bare.group(1), bare.group(2) + charge
    else:
        body, charge = m.groups()
    return species(body) + charge.translate(_SUP)
