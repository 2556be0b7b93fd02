"""Quantity parsing at the edge of the program (pint), nowhere else.

Plan files give quantities as strings ("20.0 mM", "250 uL"); a bare number means mol/L for
concentrations and mL for volumes. Everything past this module is a plain float in mol/L or mL.
"""

from __future__ import annotations

import re
from functools import cache

import pint

from .errors import InputError
from .limits import MAX_QUANTITY_CHARS

# What a quantity may look like before pint sees it: a plain decimal number, then unit words joined by
# '/', '*', '·' or spaces, each with at most a one-digit power. pint's parser evaluates arithmetic
# ('9**9**9' would run for ever, '10**400' overflows): no arithmetic reaches it.
_NUM = r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?"
_WORD = r"[A-Za-zµμ]+(?:\s*(?:\*\*|\^)\s*[+-]?\d)?"
_QUANTITY = re.compile(rf"\s*{_NUM}\s*(?:{_WORD}(?:\s*[/*·]\s*{_WORD}|\s+{_WORD})*)?\s*")


class UnitError(InputError):
    """A quantity string that cannot be read, or has the wrong dimension."""


# The units a plan needs, and nothing else: pint's full registry (every unit of every system) takes
# about 0.1 s to build on each start; this one a few ms. SI prefixes from pico to kilo.
_DEFINITIONS = """
meter = [length] = m = metre
gram = [mass] = g
mole = [substance] = mol
second = [time] = s
pico- = 1e-12 = p-
nano- = 1e-9 = n-
micro- = 1e-6 = u- = µ- = μ-
milli- = 1e-3 = m-
centi- = 1e-2 = c-
deci- = 1e-1 = d-
kilo- = 1e3 = k-
liter = decimeter ** 3 = l = L = litre
molar = mole / liter = M
"""


@cache
def _registry() -> pint.UnitRegistry:
    ureg = pint.UnitRegistry(None)
    ureg.load_definitions(_DEFINITIONS.strip().splitlines())
    return ureg


_DIMENSIONS = {
    "concentration": ("mol/L", "[substance] / [length] ** 3", "20 mM"),
    "volume": ("mL", "[length] ** 3", "10.00 mL"),
    "mass": ("g", "[mass]", "0.250 g"),
}


def parse_quantity(value: object, kind: str) -> float:
    """Return ``value`` in the base unit of ``kind`` (mol/L, mL or g).

    Parameters
    ----------
    value : str | float | int
        "20.0 mM", "0.020 mol/L", "10 mL", "250 uL", or a bare number in the base unit.
    kind : {"concentration", "volume", "mass"}
    """
    base, dim, example = _DIMENSIONS[kind]
    if isinstance(value, bool):
        raise UnitError(f"expected a {kind} such as '{example}', got {value!r}")
    if isinstance(value, (int, float)):
        try:
            return float(value)
        except OverflowError:  # an integer of hundreds of digits
            raise UnitError(
                f"a {len(str(abs(value)))}-digit number is not a {kind}: write e.g. '{example}'"
            ) from None
    if not isinstance(value, str):
        raise UnitError(f"expected a {kind} such as '{example}', got {value!r}")
    if len(value) > MAX_QUANTITY_CHARS:
        raise UnitError(
            f"{value[:20]!r}... is {len(value)} characters long; a {kind} such as '{example}' "
            f"needs at most {MAX_QUANTITY_CHARS}"
        )
    if not _QUANTITY.fullmatch(value):
        raise UnitError(f"cannot read {value!r} as a {kind}: write a number and a unit, e.g. '{example}'")
    text = value.strip().replace("µ", "u").replace("μ", "u").replace("·", "*")
    ureg = _registry()
    try:
        q = ureg.Quantity(text)
    except (pint.UndefinedUnitError, pint.errors.DefinitionSyntaxError) as exc:
        unit = getattr(exc, "unit_names", None) or getattr(exc, "args", [""])[0]
        if isinstance(unit, (tuple, list)):
            unit = ", ".join(str(u) for u in unit)
        raise UnitError(f"unknown unit '{unit}' in {value!r}: write a {kind} such as '{example}'") from None
    except Exception:
        raise UnitError(f"cannot read {value!r} as a {kind}: write e.g. '{example}'") from None
    if not isinstance(q, pint.Quantity):  # a bare number inside a string
        return float(q)
    if q.dimensionless:
        return float(q.magnitude)
    try:
        return float(q.to(base).magnitude)
    except pint.DimensionalityError:
        raise UnitError(f"{value!r} is not a {kind}: write e.g. '{example}'") from None
