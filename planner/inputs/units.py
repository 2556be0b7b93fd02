"""Quantity parsing at the edge of the program (pint), nowhere else.

Plan files give quantities as strings ("20.0 mM", "250 uL"); a bare number means mol/L for
concentrations and mL for volumes. Everything past this module is a plain float in mol/L or mL.

Nearly every quantity in a plan is a number and one of a few units ("10.0 mM", "0.05 mL"): those are
read from a table here, and pint (about a tenth of a second to import and build) is loaded only for
anything else — an expression, a compound unit, an error to explain — so ``kplan check`` starts fast.
"""

from __future__ import annotations

import math
import re
from functools import cache
from typing import TYPE_CHECKING

from .errors import InputError
from .limits import MAX_QUANTITY_CHARS

if TYPE_CHECKING:
    import pint

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
    import pint

    ureg = pint.UnitRegistry(None)
    ureg.load_definitions(_DEFINITIONS.strip().splitlines())
    return ureg


_DIMENSIONS = {
    "concentration": ("mol/L", "[substance] / [length] ** 3", "20 mM"),
    "volume": ("mL", "[length] ** 3", "10.00 mL"),
    "mass": ("g", "[mass]", "0.250 g"),
}


# "<number> <unit>" for the units plans use, in each kind's base unit (mol/L, mL, g); the same factors
# as the registry above (SI prefixes; liter = dm³) [derived]
_SIMPLE_UNITS = {
    "concentration": {"M": 1.0, "mM": 1e-3, "uM": 1e-6, "nM": 1e-9, "pM": 1e-12, "mol/L": 1.0,
                      "mmol/L": 1e-3, "umol/L": 1e-6, "mol/l": 1.0, "mmol/l": 1e-3, "umol/l": 1e-6},
    "volume": {"L": 1e3, "l": 1e3, "dL": 1e2, "cL": 1e1, "mL": 1.0, "ml": 1.0, "uL": 1e-3, "ul": 1e-3,
               "nL": 1e-6, "nl": 1e-6},
    "mass": {"kg": 1e3, "g": 1.0, "mg": 1e-3, "ug": 1e-6, "ng": 1e-9},
}  # fmt: skip
_SIMPLE = re.compile(r"\s*([+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d{1,3})?)\s*([A-Za-z/]*)\s*")


def _simple_quantity(text: str, kind: str) -> float | None:
    """The value of "<number> <unit>" with a unit of the table, or None (pint decides)."""
    m = _SIMPLE.fullmatch(text)
    if m is None:
        return None
    factor = 1.0 if not m.group(2) else _SIMPLE_UNITS[kind].get(m.group(2))
    if factor is None:
        return None
    value = float(m.group(1)) * factor
    return value if math.isfinite(value) else None


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
    simple = _simple_quantity(text, kind)
    if simple is not None:
        return simple
    import pint

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
