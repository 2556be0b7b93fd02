"""Measured readings: the recipe CSV of the tubes read, plus one absorbance per tube.

Read by the rules every table follows (:mod:`planner.inputs.tables`); a ``;``-separated file with decimal
commas, as a spreadsheet in such a locale writes it, is read as it was meant.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .plan import Plan
from .recipe import Recipe, RecipeError, recipe_from_table
from .tables import parse_table, read_table_text, table_spec

ABSORBANCE_COLUMNS = ("absorbance", "A", "measured_A")
NOTE_COLUMNS = ("note", "notes", "comment", "comments")
READINGS = table_spec("readings", RecipeError)


@dataclass(frozen=True)
class Readings:
    """A recipe with one measured absorbance per tube."""

    recipe: Recipe
    absorbance: np.ndarray


def parse_readings_csv(text: str, plan: Plan, source: str = "<readings>") -> Readings:
    """Readings CSV: the recipe columns (tube, stock volumes in mL) plus an ``absorbance`` column.

    A ``note`` column (free text) is allowed and ignored; a ``;``-separated file with decimal commas (as
    spreadsheets write in such locales) is read as such.
    """
    table = parse_table(text, READINGS, source)
    j = table.index(*ABSORBANCE_COLUMNS)
    if j is None:
        raise RecipeError(
            table.where(), f"no absorbance column: add one named {' or '.join(ABSORBANCE_COLUMNS)}"
        )
    notes = tuple(k for k, h in enumerate(table.header) if h.lower() in NOTE_COLUMNS)
    a = np.array([table.number(r, j, "an absorbance") for r in table.rows], dtype=float)
    return Readings(recipe_from_table(table, plan, skip=(j, *notes)), a)


def read_readings_csv(path: str | Path, plan: Plan) -> Readings:
    """Read a readings CSV (see :func:`parse_readings_csv`)."""
    return parse_readings_csv(read_table_text(path, READINGS), plan, str(path))


def readings_to_csv(recipe: Recipe, plan: Plan, absorbance: np.ndarray) -> str:
    """A readings CSV (the recipe columns plus ``absorbance``) that :func:`parse_readings_csv` reads back;
    a NaN absorbance is written as an empty cell, to be filled in (the file is refused until it is)."""
    from .recipe import recipe_to_csv

    lines = recipe_to_csv(recipe, plan).splitlines()
    cells = ["" if not np.isfinite(a) else repr(float(a)) for a in np.asarray(absorbance, dtype=float)]
    rows = [f"{ln},{c}" for ln, c in zip(lines[1:], cells, strict=True)]
    return "\n".join([lines[0] + ",absorbance", *rows]) + "\n"
