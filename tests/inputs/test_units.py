"""Quantity parsing: the table of common units that spares pint's import agrees with pint itself."""

from __future__ import annotations

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from planner.inputs import units
from planner.inputs.units import UnitError, parse_quantity


def _by_pint(text: str, kind: str) -> float:
    """The value pint gives (the reference: its registry parses the text, then converts)."""
    base = units._DIMENSIONS[kind][0]
    q = units._registry().Quantity(text)
    return float(q.to(base).magnitude)


@settings(max_examples=200, deadline=None)
@given(
    kind=st.sampled_from(sorted(units._SIMPLE_UNITS)),
    number=st.floats(min_value=1e-9, max_value=1e6, allow_nan=False, allow_infinity=False),
    data=st.data(),
    space=st.sampled_from(["", " ", "  "]),
)
def test_table_units_agree_with_pint(kind, number, data, space):
    # source: pint's own parsing and conversion of the same text, run here as the reference
    unit = data.draw(st.sampled_from(sorted(units._SIMPLE_UNITS[kind])))
    text = f"{number!r}{space}{unit}"
    fast = units._simple_quantity(text, kind)
    assert fast is not None
    assert fast == pytest.approx(_by_pint(text, kind), rel=1e-12)
    assert parse_quantity(text, kind) == fast


@pytest.mark.parametrize(
    ("text", "kind", "expected"),
    [
        ("20.0 mM", "concentration", 0.020),  # derived: 1 mM = 1e-3 mol/L
        ("0.020 mol/L", "concentration", 0.020),
        ("250 uL", "volume", 0.250),  # derived: 1 uL = 1e-3 mL
        ("250 µL", "volume", 0.250),
        ("10.00 mL", "volume", 10.0),
        ("0.1 mg", "mass", 1e-4),
        ("12", "volume", 12.0),  # a bare number is in the base unit
    ],
)
def test_common_quantities(text, kind, expected):
    assert parse_quantity(text, kind) == pytest.approx(expected, rel=1e-12)


def test_other_text_still_goes_to_pint():
    # compound units and expressions are not in the table; pint reads them (or explains the error)
    assert units._simple_quantity("0.5 mmol/mL", "concentration") is None
    assert parse_quantity("0.5 mmol/mL", "concentration") == pytest.approx(0.5, rel=1e-12)  # derived
    assert units._simple_quantity("10 cm**3", "volume") is None
    assert parse_quantity("10 cm**3", "volume") == pytest.approx(10.0, rel=1e-12)
    with pytest.raises(UnitError, match="unknown unit"):
        parse_quantity("10 furlongs", "volume")
    with pytest.raises(UnitError, match="not a volume"):
        parse_quantity("10 mM", "volume")


def test_check_does_not_import_pint_for_a_plain_plan():
    # the shipped plans use table units only, so reading them needs no pint (checked in a fresh
    # interpreter: this one may have imported pint already)
    import subprocess
    import sys

    from ..conftest import ROOT

    code = (
        "import sys; from planner.inputs.plan import load_plan; "
        f"load_plan({str(ROOT / 'examples' / 'cuvette-1to1.toml')!r}); print('pint' in sys.modules)"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False"
