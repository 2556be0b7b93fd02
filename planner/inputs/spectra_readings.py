"""Measured spectra: every tube read at every wavelength, as a long or a wide table.

- long: columns ``tube, wavelength_nm, absorbance``, one row per reading (any order; every tube read at
  the same wavelengths, each once);
- wide: ``tube`` first, optionally the recipe's stock columns (mL), then one column per wavelength whose
  header is the wavelength in nm (``400``, ``400.5``); one row per tube.

The recipe comes from the stock columns of a wide table, or from a recipe CSV named beside it. Lines
starting with ``#`` above the header are comments; fields are comma-separated with a decimal point. This
small module follows the recipe reader's rules and is meant to move behind the one table reader.
"""

from __future__ import annotations

import csv
import io
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .files import read_user_text
from .plan import Plan
from .recipe import Recipe, RecipeError, parse_recipe_csv
from .text import visible

MAX_SPECTRA_BYTES = 16_000_000  # 200 tubes × 2000 wavelengths in the long form
MAX_SPECTRA_ROWS = 500_000
MAX_READING = 10.0  # no photometer reads beyond this: a larger number is a typo or another quantity
LONG_COLUMNS = ("tube", "wavelength_nm", "absorbance")


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


def _rows(text: str, source: str) -> list[tuple[int, list[str]]]:
    lines = text.removeprefix("\ufeff").splitlines()
    out: list[tuple[int, list[str]]] = []
    seen_header = False
    for ln, line in enumerate(lines, start=1):
        if not line.strip() or (not seen_header and line.lstrip().startswith("#")):
            continue
        if not seen_header and ";" in line and "," not in line:
            raise RecipeError(f"{source} header", "the file looks semicolon-separated: save it with commas")
        try:
            cells = next(csv.reader(io.StringIO(line)))
        except (csv.Error, StopIteration) as exc:
            raise RecipeError(f"{source} line {ln}", f"not readable as CSV ({exc})") from None
        out.append((ln, [c.strip() for c in cells]))
        seen_header = True
        if len(out) > MAX_SPECTRA_ROWS + 1:
            raise RecipeError(source, f"more than {MAX_SPECTRA_ROWS} rows")
    if len(out) < 2:
        raise RecipeError(source, "no readings: expected a header and at least one row")
    return out


def _number(cell: str, where: str, what: str = "an absorbance") -> float:
    try:
        v = float(cell)
    except ValueError:
        hint = "; write a decimal point (0.512, not 0,512)" if "," in cell else "; leave no blanks"
        raise RecipeError(where, f"'{visible(cell)}' is not {what}{hint}") from None
    if not math.isfinite(v) or (what == "an absorbance" and abs(v) > MAX_READING):
        raise RecipeError(where, f"{cell} is not {what} a photometer reads (|A| ≤ {MAX_READING:g})")
    return v


def _wavelength(cell: str, where: str) -> float:
    v = _number(cell.removesuffix("nm").strip(), where, "a wavelength in nm")
    if not 100.0 <= v <= 2000.0:
        raise RecipeError(where, f"{v:g} nm is outside 100–2000 nm")
    return v


def _long(rows, source: str) -> SpectraReadings:
    header = rows[0][1]
    col = {h: header.index(h) for h in LONG_COLUMNS}
    tubes: list[str] = []
    seen: dict[tuple[str, float], int] = {}
    data: dict[tuple[str, float], float] = {}
    for ln, r in rows[1:]:
        if len(r) != len(header):
            raise RecipeError(f"{source} line {ln}", f"expected {len(header)} fields, got {len(r)}")
        tube = r[col["tube"]]
        if not tube:
            raise RecipeError(f"{source} line {ln}", "the tube label is empty")
        w = _wavelength(r[col["wavelength_nm"]], f"{source} line {ln}, wavelength_nm")
        if (tube, w) in seen:
            raise RecipeError(
                f"{source} line {ln}",
                f"tube {visible(tube)} at {w:g} nm is read twice (line {seen[tube, w]})",
            )
        seen[tube, w] = ln
        data[tube, w] = _number(r[col["absorbance"]], f"{source} line {ln}, absorbance")
        if tube not in tubes:
            tubes.append(tube)
    grid = sorted({w for _, w in data})
    A = np.full((len(tubes), len(grid)), np.nan)
    wi = {w: k for k, w in enumerate(grid)}
    ti = {t: k for k, t in enumerate(tubes)}
    for (t, w), a in data.items():
        A[ti[t], wi[w]] = a
    holes = np.argwhere(np.isnan(A))
    if holes.size:
        t, k = holes[0]
        raise RecipeError(
            source,
            f"tube {visible(tubes[t])} has no reading at {grid[k]:g} nm: read every tube at the same "
            "wavelengths",
        )
    return SpectraReadings(tuple(tubes), np.array(grid), A)


def _wide(rows, plan: Plan, source: str) -> SpectraReadings:
    header = rows[0][1]
    if header[0] != "tube":
        raise RecipeError(
            f"{source} header",
            "expected 'tube, wavelength_nm, absorbance' (long) or 'tube, <stock ids>, <wavelengths in nm>' "
            "(wide)",
        )
    stock_ids = {s.id for s in plan.stock}
    stock_cols = [k for k, h in enumerate(header[1:], start=1) if h in stock_ids]
    wl_cols = [k for k in range(1, len(header)) if k not in stock_cols]
    if not wl_cols:
        raise RecipeError(
            f"{source} header", "no wavelength columns: name each by its wavelength in nm, e.g. 450"
        )
    wl = np.array([_wavelength(header[k], f"{source} header, column {k + 1}") for k in wl_cols])
    if np.any(np.diff(wl) <= 0):
        raise RecipeError(f"{source} header", "wavelength columns must rise from left to right")
    tubes, A = [], np.empty((len(rows) - 1, wl.size))
    for r_i, (ln, r) in enumerate(rows[1:]):
        if len(r) != len(header):
            raise RecipeError(f"{source} line {ln}", f"expected {len(header)} fields, got {len(r)}")
        tubes.append(r[0])
        for j, k in enumerate(wl_cols):
            A[r_i, j] = _number(r[k], f"{source} line {ln}, {header[k]} nm")
    recipe = None
    if stock_cols:
        text = "\n".join(",".join(_quote(c) for c in [r[0]] + [r[k] for k in stock_cols]) for _, r in rows)
        recipe = parse_recipe_csv(text, plan, source)
    return SpectraReadings(tuple(tubes), wl, A, recipe)


def _quote(cell: str) -> str:
    return '"' + cell.replace('"', '""') + '"' if ("," in cell or '"' in cell) else cell


def parse_spectra_readings(text: str, plan: Plan, source: str = "<spectra>") -> SpectraReadings:
    """Parse a long or wide spectra table (see the module docstring)."""
    rows = _rows(text, source)
    header = rows[0][1]
    if all(h in header for h in LONG_COLUMNS):
        return _long(rows, source)
    return _wide(rows, plan, source)


def read_spectra_readings(path: str | Path, plan: Plan) -> SpectraReadings:
    """Read measured spectra (see :func:`parse_spectra_readings`)."""
    text = read_user_text(
        path,
        what="spectra",
        limit_bytes=MAX_SPECTRA_BYTES,
        error=RecipeError,
        kind="a .csv file",
        too_large_hint="check that this is the right file",
        encoding="utf-8-sig",
    )
    return parse_spectra_readings(text, plan, str(path))


def spectra_readings_to_csv(readings: SpectraReadings, plan: Plan) -> str:
    """The wide form: tube, the dispensed stocks' volumes (when the readings carry a recipe), then one
    column per wavelength (what :func:`parse_spectra_readings` reads back)."""
    from .recipe import recipe_to_csv

    rec_rows = recipe_to_csv(readings.recipe, plan).splitlines() if readings.recipe is not None else None
    wl = [f"{w:g}" for w in readings.wavelength_nm]
    head = (rec_rows[0].split(",") if rec_rows else ["tube"]) + wl
    lines = [",".join(head)]
    for i, tube in enumerate(readings.tubes):
        left = rec_rows[i + 1] if rec_rows else _quote(tube)
        lines.append(left + "," + ",".join(f"{a:.5f}" for a in readings.absorbance[i]))
    return "\n".join(lines) + "\n"
