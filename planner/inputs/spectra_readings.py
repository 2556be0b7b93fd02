"""Measured spectra: every tube read at every wavelength, as a long or a wide table.

- long: columns ``tube, wavelength_nm, absorbance``, one row per reading (any order; every tube read at
  the same wavelengths, each once);
- wide: ``tube`` first, optionally the recipe's stock columns (mL), then one column per wavelength whose
  header is the wavelength in nm (``400``, ``400.5``); one row per tube.

The recipe comes from the stock columns of a wide table, or from a recipe CSV named beside it. Read by the
one table reader (:mod:`planner.inputs.tables`: comments above the header, a ``;``-separated file with
decimal commas read as meant, true line numbers in errors).
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .plan import Plan
from .recipe import Recipe, RecipeError, recipe_from_table
from .tables import Table, parse_number, parse_table, read_table_text, table_spec, write_csv
from .text import visible

MAX_READING = 10.0  # no photometer reads beyond this: a larger number is a typo or another quantity
LONG_COLUMNS = ("tube", "wavelength_nm", "absorbance")
SPECTRA = table_spec("spectra", RecipeError)


@dataclass(frozen=True)
class SpectraReadings:
    """Readings of n tubes at W wavelengths.

    Attributes
    ----------
    tubes : the tube labels, in the file's order.
    wavelength_nm : (W,) rising wavelengths.
    absorbance : (n, W) the readings.
    recipe : the tubes' recipe when the file carries the stock columns (wide form), else None.
    """

    tubes: tuple[str, ...]
    wavelength_nm: np.ndarray
    absorbance: np.ndarray
    recipe: Recipe | None = None

    def __repr__(self) -> str:
        w = self.wavelength_nm
        return f"SpectraReadings({len(self.tubes)} tubes × {w.size} wavelengths {w[0]:g}–{w[-1]:g} nm)"

    def with_recipe(self, recipe: Recipe, source: str = "recipe") -> SpectraReadings:
        """The readings in the recipe's tube order; every recipe tube must have been read and only those."""
        missing = [t for t in recipe.tubes if t not in self.tubes]
        extra = [t for t in self.tubes if t not in recipe.tubes]
        if missing or extra:
            what = (
                f"no spectrum for {', '.join(map(visible, missing[:4]))}"
                if missing
                else f"spectra of tubes the recipe does not have: {', '.join(map(visible, extra[:4]))}"
            )
            raise RecipeError(source, f"{what}: the readings and the recipe must name the same tubes")
        order = [self.tubes.index(t) for t in recipe.tubes]
        return SpectraReadings(recipe.tubes, self.wavelength_nm, self.absorbance[order], recipe)


def _absorbance(t: Table, row, j: int, where: str | None = None) -> float:
    v = t.number(row, j, "an absorbance")
    if abs(v) > MAX_READING:
        raise RecipeError(
            where or t.where(row.line, t.header[j]),
            f"{v:g} is not an absorbance a photometer reads (|A| ≤ 10)",
        )
    return v


def _wavelength(t: Table, cell: str, where: str) -> float:
    """A wavelength in nm from a cell or a column name (``450``, ``450 nm``, ``450,5`` in a ``;`` file)."""
    c = cell.strip().removesuffix("nm")
    v = parse_number(c, where, "a wavelength in nm", error=RecipeError, decimal_comma=t.decimal_comma)
    if not 100.0 <= v <= 2000.0:
        raise RecipeError(where, f"{v:g} nm is outside 100–2000 nm")
    return v


def _long(t: Table) -> SpectraReadings:
    jt, jw, ja = (t.index(c) for c in LONG_COLUMNS)
    tubes: list[str] = []
    seen: dict[tuple[str, float], int] = {}
    data: dict[tuple[str, float], float] = {}
    for r in t.rows:
        tube = r.cells[jt]
        if not tube:
            raise RecipeError(t.where(r.line, "tube"), "the tube label is empty")
        w = _wavelength(t, r.cells[jw], t.where(r.line, "wavelength_nm"))
        if (tube, w) in seen:
            raise RecipeError(
                t.where(r.line), f"tube {visible(tube)} at {w:g} nm is read twice (line {seen[tube, w]})"
            )
        seen[tube, w] = r.line
        data[tube, w] = _absorbance(t, r, ja)
        if tube not in tubes:
            tubes.append(tube)
    grid = sorted({w for _, w in data})
    A = np.full((len(tubes), len(grid)), np.nan)
    wi = {w: k for k, w in enumerate(grid)}
    ti = {tb: k for k, tb in enumerate(tubes)}
    for (tb, w), a in data.items():
        A[ti[tb], wi[w]] = a
    holes = np.argwhere(np.isnan(A))
    if holes.size:
        i, k = holes[0]
        raise RecipeError(
            t.source,
            f"tube {visible(tubes[i])} has no reading at {grid[k]:g} nm: read every tube at the same "
            "wavelengths",
        )
    return SpectraReadings(tuple(tubes), np.array(grid), A)


def _wide(t: Table, plan: Plan) -> SpectraReadings:
    if t.header[0].lower() != "tube":
        raise RecipeError(
            t.where(),
            "expected 'tube, wavelength_nm, absorbance' (long) or 'tube, <stock ids>, <wavelengths in nm>' "
            "(wide)",
        )
    stock_ids = {s.id for s in plan.stock}
    stock_cols = [k for k, h in enumerate(t.header[1:], start=1) if h in stock_ids]
    wl_cols = [k for k in range(1, len(t.header)) if k not in stock_cols]
    if not wl_cols:
        raise RecipeError(t.where(), "no wavelength columns: name each by its wavelength in nm, e.g. 450")
    wl = np.array([_wavelength(t, t.header[k], t.where(column=t.header[k])) for k in wl_cols])
    if np.any(np.diff(wl) <= 0):
        raise RecipeError(t.where(), "wavelength columns must rise from left to right")
    A = np.array(
        [[_absorbance(t, r, k, t.where(r.line, f"{t.header[k]} nm")) for k in wl_cols] for r in t.rows]
    )
    tubes = tuple(r.cells[0] for r in t.rows)
    recipe = recipe_from_table(t, plan, skip=tuple(wl_cols)) if stock_cols else None
    return SpectraReadings(tubes, wl, A, recipe)


def parse_spectra_readings(text: str, plan: Plan, source: str = "<spectra>") -> SpectraReadings:
    """Parse a long or wide spectra table (see the module docstring)."""
    t = parse_table(text, SPECTRA, source)
    if all(t.index(c) is not None for c in LONG_COLUMNS):
        return _long(t)
    return _wide(t, plan)


def read_spectra_readings(path: str | Path, plan: Plan) -> SpectraReadings:
    """Read measured spectra (see :func:`parse_spectra_readings`)."""
    return parse_spectra_readings(read_table_text(path, SPECTRA), plan, str(path))


def spectra_readings_to_csv(readings: SpectraReadings, plan: Plan) -> str:
    """The wide form: tube, the dispensed stocks' volumes (when the readings carry a recipe), then one
    column per wavelength (what :func:`parse_spectra_readings` reads back); cells are data, never
    formulas."""
    rec = readings.recipe
    cols = rec.dispensed_ids(plan) if rec is not None else ()
    head = ["tube", *cols, *(f"{w:g}" for w in readings.wavelength_nm)]
    rows = []
    for i, tube in enumerate(readings.tubes):
        vols = [f"{rec.column(c)[i]:g}" for c in cols] if rec is not None else []
        rows.append([tube, *vols, *(f"{a:.5f}" for a in readings.absorbance[i])])
    return write_csv(head, rows)
