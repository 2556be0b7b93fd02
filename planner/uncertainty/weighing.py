"""Weighing a stock's reagent: formula weights, the balance's minimum weight (USP <41>) and the mass for a
concentration."""

from __future__ import annotations

import functools
import math

from ..inputs.errors import InputError
from ..inputs.formulas import formula_mass_g_mol

USP41_FACTOR = 2000.0
"""USP <41>: repeatability is satisfactory when 2·s/m ≤ 0.10 %, i.e. m ≥ 2000·s [source: USP <41>]."""

USP41_READABILITY_FACTOR = 0.41
"""USP <41>: a repeatability sd below 0.41·d (d the scale interval) is replaced by 0.41·d
[from memory: USP <41>, 2013 revision]. 0.41 ≈ √2/√12, the sd of the difference of two readings
rounded to d (GUM F.2.2.1) [derived]."""


class StockError(InputError):
    """A stock cannot be prepared as asked; the message names what was wrong and a fix."""


# --------------------------------------------------------------------------------------------------
# formula weights and weighing
# --------------------------------------------------------------------------------------------------


@functools.lru_cache(maxsize=512)
def formula_weight_g_mol(formula: str) -> float:
    """Molar mass (average, from standard atomic weights) of a formula, g/mol.

    Computed by the ``molmass`` library. Hydrates may be written ``"Cu(NO3)2.3H2O"`` or
    ``"CuSO4·5H2O"`` (also ``•``, ``∙``, ``⋅``, ``*``); the number after the dot multiplies the
    group that follows it.

    Raises
    ------
    StockError
        Empty formula, or one molmass cannot parse (the message carries its diagnosis).
    """
    try:
        return formula_mass_g_mol(formula)
    except ValueError as exc:
        raise StockError(str(exc)) from None


def minimum_weight_g(
    repeatability_g: float, factor: float = USP41_FACTOR, *, readability_g: float | None = None
) -> float:
    """Smallest net mass a balance weighs accurately enough, ``m_min = factor · s``, g.

    USP <41>: repeatability is satisfactory when ``2·s / m ≤ 0.10 %``, so ``m ≥ 2000·s``; when
    ``readability_g`` (the scale interval d) is given, ``s`` is raised to at least ``0.41·d``
    [source: USP <41>; the 0.41·d floor from memory].
    """
    s = effective_repeatability_g(repeatability_g, readability_g)
    if not (math.isfinite(factor) and factor > 0):
        raise StockError(f"minimum-weight factor must be positive, got {factor!r}")
    return factor * s


def effective_repeatability_g(repeatability_g: float, readability_g: float | None) -> float:
    s = float(repeatability_g)
    if not (math.isfinite(s) and s >= 0):
        raise StockError(f"balance repeatability must be ≥ 0 g, got {repeatability_g!r}")
    if readability_g is not None:
        d = float(readability_g)
        if not (math.isfinite(d) and d >= 0):
            raise StockError(f"balance readability must be ≥ 0 g, got {readability_g!r}")
        s = max(s, USP41_READABILITY_FACTOR * d)
    return s


def mass_for_conc_g(
    conc_M: float, volume_mL: float, formula_weight_g_mol: float, purity: float = 1.0
) -> float:
    """Mass of reagent to weigh for ``conc_M`` in ``volume_mL``, corrected for purity, g.

    ``m = c·V·M / P`` (V in L).
    """
    return conc_M * volume_mL * 1e-3 * formula_weight_g_mol / purity


def conc_from_weighing_M(
    mass_g: float, formula_weight_g_mol: float, volume_mL: float, purity: float = 1.0
) -> float:
    """Concentration of a weighed stock, ``c = m·P / (M·V)``, mol/L [source: QUAM example A1]."""
    return mass_g * purity / (formula_weight_g_mol * volume_mL * 1e-3)
