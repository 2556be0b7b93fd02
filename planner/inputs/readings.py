"""Measured readings: the recipe CSV of the tubes read, plus one absorbance per tube."""

from __future__ import annotations

import csv
import io
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .plan import Plan
from .recipe import Recipe, RecipeError, parse_recipe_csv, read_text_file

ABSORBANCE_COLUMNS = ("absorbance", "A", "measured_A")


@dataclass(frozen=True)
class Readings:
    """A recipe with one measured absorbance per tube."""

    recipe: Recipe
    absorbance: np.ndarray


def parse_readings_csv(text: str, plan: Plan, source: str = "<readings>") -> Readings:
    """Readings CSV: the recipe columns (tube, stock volumes in mL) plus an ``absorbance`` column."""
    rows = list(csv.reader(io.StringIO(text)))
    rows = [r for r in rows if r and any(c.strip() for c in r) and not r[0].lstrip().startswith("#")]
    if not rows:
        raise RecipeError(source, "empty: expected a header 'tube,<stock>,...,absorbance'")
    header = [h.strip() for h in rows[0]]
    col = next((h for h in header if h in ABSORBANCE_COLUMNS), None)
    if col is None:
        raise RecipeError(f"{source} header", f"no absorbance column: add one named {' or '.join(ABSORBANCE_COLUMNS)}")
    j = header.index(col)
    a = []
    for ln, r in enumerate(rows[1:], start=2):
        if len(r) != len(header):
            raise RecipeError(f"{source} line {ln}", f"expected {len(header)} fields, got {len(r)}")
        try:
            a.append(float(r[j]))
        except ValueError:
            raise RecipeError(f"{source} line {ln}, {col}", f"'{r[j]}' is not an absorbance; leave no blanks") from None
    recipe_text = "\n".join(",".join(c for k, c in enumerate(r) if k != j) for r in rows)
    rec = parse_recipe_csv(recipe_text, plan, source)
    return Readings(rec, np.array(a))


def read_readings_csv(path: str | Path, plan: Plan) -> Readings:
    """Read a readings CSV (see :func:`parse_readings_csv`)."""
    return parse_readings_csv(read_text_file(path, "readings"), plan, str(path))
