"""Number formatting shared by the terminal, JSON-adjacent text and printed sheets (one place)."""

from __future__ import annotations

import math


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


def volume(v_mL: float, step_mL: float = 0.01) -> str:
    """A volume written to the dispenser's reading precision (the decimals of ``step_mL``)."""
    decimals = max(0, -int(math.floor(math.log10(step_mL) + 1e-9))) if step_mL > 0 else 2
    return f"{v_mL:.{decimals}f}"
