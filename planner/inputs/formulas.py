"""Formulas of solids (``stock.formula``): read by molmass at the edge, so a formula that names no
elements (``Xx9Qq``) is refused when the plan is read, not when a mass is first needed."""

from __future__ import annotations

HYDRATE_DOTS = ("·", "•", "∙", "⋅", "*")  # ways of writing the hydrate dot of "CuSO4·5H2O"


def formula_mass_g_mol(formula: str) -> float:
    """Molar mass (average, from standard atomic weights) of a formula, g/mol, by molmass.

    Hydrates may be written ``"Cu(NO3)2.3H2O"`` or ``"CuSO4·5H2O"`` (also ``•``, ``∙``, ``⋅``, ``*``);
    the number after the dot multiplies the group that follows it.

    Raises
    ------
    ValueError
        An empty formula, or one molmass cannot read (the message carries its diagnosis and the fix).
    """
    from molmass import Formula

    if not isinstance(formula, str) or not formula.strip():
        raise ValueError(f"formula must be a non-empty string such as 'CuSO4.5H2O', got {formula!r}")
    text = formula.strip()
    for dot in HYDRATE_DOTS:
        text = text.replace(dot, ".")
    text = text.replace(" ", "")
    try:
        mass = float(Formula(text).mass)
    except Exception as exc:  # molmass raises FormulaError, and on odd input other errors too
        first = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        raise ValueError(
            f"cannot read the formula {formula!r}: {first}. Write it with element symbols, "
            "e.g. 'Fe(NO3)3.9H2O' or 'CuSO4·5H2O'"
        ) from None
    if not mass > 0:
        raise ValueError(f"formula {formula!r} has no mass; write it with element symbols, e.g. 'KSCN'")
    return mass
