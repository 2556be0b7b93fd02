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


NOTE_COLUMNS = ("note", "notes", "comment", "comments")


def _dialect(text: str, source: str) -> tuple[str, bool]:
    """The field separator and whether numbers use a decimal comma.

    A spreadsheet set to a decimal-comma locale writes ``;`` between fields and ``0,512`` for numbers;
    such a file is read as it was meant. A ``,``-separated file with ``;`` in its header is ambiguous
    and refused.
    """
    first = next((ln for ln in text.splitlines() if ln.strip() and not ln.lstrip().startswith("#")), "")
    if ";" in first and "," not in first:
        return ";", True
    if ";" in first:
        raise RecipeError(
            f"{source} header",
            "mixes ';' and ',' between fields: save the file as CSV with "
            "',' between fields and '.' as the decimal point",
        )
    return ",", False


def parse_readings_csv(text: str, plan: Plan, source: str = "<readings>") -> Readings:
    """Readings CSV: the recipe columns (tube, stock volumes in mL) plus an ``absorbance`` column.

    A ``note`` column (free text) is allowed and ignored; a ``;``-separated file with decimal commas (as
    spreadsheets write in such locales) is read as such.
    """
    delim, decimal_comma = _dialect(text, source)
    try:
        rows = [r for r in csv.reader(io.StringIO(text), delimiter=delim) if r and any(c.strip() for c in r)]
    except csv.Error as exc:
        raise RecipeError(source, f"not a readable CSV ({exc})") from None
    # as in a recipe CSV: '#' lines are comments only above the header; below it a tube may be called '#3'
    while rows and rows[0][0].lstrip().startswith("#"):
        rows = rows[1:]
    if not rows:
        raise RecipeError(source, "empty: expected a header 'tube,<stock>,...,absorbance'")
    header = [h.strip() for h in rows[0]]
    col = next((h for h in header if h in ABSORBANCE_COLUMNS), None)
    if col is None:
        raise RecipeError(
            f"{source} header", f"no absorbance column: add one named {' or '.join(ABSORBANCE_COLUMNS)}"
        )
    j = header.index(col)
    drop = {k for k, h in enumerate(header) if h.lower() in NOTE_COLUMNS} | {j}
    a = []
    body = []
    for ln, r in enumerate(rows[1:], start=2):
        if len(r) != len(header):
            raise RecipeError(f"{source} line {ln}", f"expected {len(header)} fields, got {len(r)}")
        if decimal_comma:
            r = [r[0]] + [c.replace(",", ".") if k not in drop - {j} else c for k, c in enumerate(r) if k > 0]
        try:
            value = float(r[j])
        except ValueError:
            raise RecipeError(
                f"{source} line {ln}, {col}", f"'{r[j]}' is not an absorbance; leave no blanks"
            ) from None
        if np.isnan(value):
            raise RecipeError(f"{source} line {ln}, {col}", f"'{r[j]}' is not an absorbance; leave no blanks")
        if not np.isfinite(value):
            raise RecipeError(f"{source} line {ln}, {col}", f"'{r[j]}' is out of range for an absorbance")
        a.append(value)
        body.append([c for k, c in enumerate(r) if k not in drop])
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow([h for k, h in enumerate(header) if k not in drop])
    w.writerows(body)
    rec = parse_recipe_csv(buf.getvalue(), plan, source)
    return Readings(rec, np.array(a, dtype=float))


def read_readings_csv(path: str | Path, plan: Plan) -> Readings:
    """Read a readings CSV (see :func:`parse_readings_csv`)."""
    return parse_readings_csv(read_text_file(path, "readings"), plan, str(path))


def readings_to_csv(recipe: Recipe, plan: Plan, absorbance: np.ndarray) -> str:
    """A readings CSV (the recipe columns plus ``absorbance``) that :func:`parse_readings_csv` reads back;
    a NaN absorbance is written as an empty cell, to be filled in (the file is refused until it is)."""
    from .recipe import recipe_to_csv

    lines = recipe_to_csv(recipe, plan).splitlines()
    cells = ["" if not np.isfinite(a) else repr(float(a)) for a in np.asarray(absorbance, dtype=float)]
    return (
        "\n".join([lines[0] + ",absorbance"] + [f"{ln},{c}" for ln, c in zip(lines[1:], cells, strict=True)])
        + "\n"
    )
