"""Recipes: tube × stock volumes, CSV in and out, and the totals in each tube after dilution.

Recipe CSV rules (the same for readings): comma-separated, decimal point, UTF-8 (a byte-order mark is
accepted); the first line that is neither blank nor a comment is the header ``tube,<stock id>,...``.
Comments are lines starting with ``#`` at column 0 *above the header* only: below it every non-blank
line is a tube, so a tube may be labelled ``#3``. Limits: :data:`MAX_CSV_BYTES` bytes, :data:`MAX_ROWS`
tubes, and cells of at most the csv module's field limit.
"""

from __future__ import annotations

import csv
import io
import math
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .errors import InputError
from .files import read_user_text
from .names import unknown_name
from .plan import Plan
from .plan_fields import MAX_VOLUME_ML, MIN_VOLUME_ML
from .text import check_identifier, visible

VOLUME_DECIMALS = 4  # mL; far below any dispenser's resolution, so round trips are exact
MAX_ROWS = 1000  # tubes in a recipe or readings file; a design has at most 200
MAX_CSV_BYTES = 1_000_000
DILUENT_TOLERANCE_ML = 1e-6  # a supplied to-mark diluent volume must equal the remainder this closely
# a plain decimal number with a point: no 'nan', 'inf', '1_000' or hex, which float() would take
_NUMBER = re.compile(r"[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?")


class RecipeError(InputError):
    """A recipe that does not fit the plan; ``key`` names the row/column."""

    def __init__(self, key: str, message: str):
        self.key = key
        self.message = message
        super().__init__(f"{key}: {message}" if key else message)


@dataclass(frozen=True)
class Recipe:
    """Volumes of every stock in every tube.

    Attributes
    ----------
    tubes : tuple[str, ...]
        Tube labels, length n.
    stock_ids : tuple[str, ...]
        Every stock of the plan, in plan order (the diluent included), length k.
    volumes_mL : (n, k) ndarray
        Volume of each stock in each tube, mL; under ``make_up = "to-mark"`` the diluent column is the
        remainder up to the tube volume.
    total_volume_mL : (n,) ndarray
        Final volume of each tube, mL.
    """

    tubes: tuple[str, ...]
    stock_ids: tuple[str, ...]
    volumes_mL: np.ndarray
    total_volume_mL: np.ndarray

    def __repr__(self) -> str:
        return f"Recipe({len(self.tubes)} tubes × {len(self.stock_ids)} stocks: {', '.join(self.stock_ids)})"

    @property
    def n_tubes(self) -> int:
        return len(self.tubes)

    def column(self, sid: str) -> np.ndarray:
        return self.volumes_mL[:, self.stock_ids.index(sid)]

    def take(self, index) -> Recipe:
        """The tubes at ``index`` (integer indices or a boolean mask), in that order."""
        idx = np.flatnonzero(index) if np.asarray(index).dtype == bool else np.asarray(index, dtype=int)
        return Recipe(
            tuple(self.tubes[i] for i in idx), self.stock_ids, self.volumes_mL[idx], self.total_volume_mL[idx]
        )

    def dispensed_ids(self, plan: Plan) -> tuple[str, ...]:
        """Stocks that are measured out (the diluent is not, under to-mark)."""
        dil = plan.diluent
        skip = dil.id if (dil is not None and plan.glassware.make_up == "to-mark") else None
        return tuple(s for s in self.stock_ids if s != skip)


def stock_matrix(plan: Plan) -> np.ndarray:
    """(k, 2) concentrations of M and L in each stock, mol/L, plan order."""
    return np.array([[s.conc.get("M", 0.0), s.conc.get("L", 0.0)] for s in plan.stock], dtype=float)


def concat_recipes(recipes, prefixes=None) -> Recipe:
    """One recipe of all the tubes of ``recipes`` (same stocks), labels prefixed "prefix/" when given."""
    recipes = list(recipes)
    if prefixes is None:
        tubes = tuple(t for r in recipes for t in r.tubes)
    else:
        tubes = tuple(f"{p}/{t}" for r, p in zip(recipes, prefixes, strict=True) for t in r.tubes)
    return Recipe(
        tubes,
        recipes[0].stock_ids,
        np.vstack([r.volumes_mL for r in recipes]),
        np.concatenate([r.total_volume_mL for r in recipes]),
    )


def totals_M(recipe: Recipe, stock_conc_M: np.ndarray) -> np.ndarray:
    """(n, 2) total M and L in each tube after dilution: c = Σ c_k V_k / V_total."""
    return (recipe.volumes_mL @ stock_conc_M) / recipe.total_volume_mL[:, None]


def make_recipe(
    plan: Plan,
    volumes: dict[str, np.ndarray] | np.ndarray,
    tubes: list[str] | None = None,
    *,
    dispensed_ids: tuple[str, ...] | None = None,
) -> Recipe:
    """Build a :class:`Recipe` from dispensed volumes, filling the diluent and checking the tube.

    Parameters
    ----------
    volumes : dict stock id -> (n,) mL, or an (n, d) array in the order of ``dispensed_ids``.
    """
    dil = plan.diluent
    return assemble_recipe(
        tuple(s.id for s in plan.stock),
        volumes,
        tubes,
        dispensed_ids=dispensed_ids,
        diluent_id=dil.id if dil is not None else None,
        to_mark=plan.glassware.make_up == "to-mark",
        tube_volume_mL=plan.glassware.tube_volume_mL,
        fixed_mL=plan.design.fixed,
    )


def assemble_recipe(
    ids: tuple[str, ...],
    volumes: dict[str, np.ndarray] | np.ndarray,
    tubes: list[str] | None = None,
    *,
    dispensed_ids: tuple[str, ...] | None = None,
    diluent_id: str | None,
    to_mark: bool,
    tube_volume_mL: float,
    fixed_mL: dict[str, float],
) -> Recipe:
    """:func:`make_recipe` from the plan's numbers: stock ids in plan order, the diluent, the make-up
    mode, the tube volume and the fixed volumes."""
    if isinstance(volumes, dict):
        cols = {k: np.asarray(v, dtype=float) for k, v in volumes.items()}
    else:
        arr = np.atleast_2d(np.asarray(volumes, dtype=float))
        order = dispensed_ids or tuple(s for s in ids if not (to_mark and s == diluent_id))
        cols = {sid: arr[:, j] for j, sid in enumerate(order)}
    n = len(next(iter(cols.values()))) if cols else 0
    if tubes is None:
        tubes = [f"T{i + 1}" for i in range(n)]
    for sid, v in fixed_mL.items():
        if sid not in cols:
            cols[sid] = np.full(n, v)
    vol = np.zeros((n, len(ids)))
    for sid, v in cols.items():
        if sid not in ids:
            raise RecipeError(f"column '{sid}'", f"unknown stock; the plan's stocks are {', '.join(ids)}")
        vol[:, ids.index(sid)] = v
    if np.any(~np.isfinite(vol)):
        raise RecipeError("volumes", "a volume is missing or not a number")
    bad = np.argwhere(vol < 0)
    if bad.size:
        i, j = bad[0]
        raise RecipeError(f"tube {tubes[i]}, {ids[j]}", f"negative volume {vol[i, j]:g} mL")
    tube_mL = tube_volume_mL
    tol = 1e-9 * tube_mL
    if to_mark:
        j = ids.index(diluent_id)
        others = vol.sum(axis=1) - vol[:, j]
        over = np.flatnonzero(others > tube_mL + tol)
        if over.size:
            i = over[0]
            raise RecipeError(
                f"tube {tubes[i]}",
                f"stocks add up to {others[i]:g} mL, more than the {tube_mL:g} mL tube: reduce them",
            )
        remainder = np.maximum(tube_mL - others, 0.0)
        if diluent_id in cols:
            # the diluent fills to the mark: a written volume is only a cross-check, never silently replaced
            off = np.flatnonzero(np.abs(vol[:, j] - remainder) > DILUENT_TOLERANCE_ML)
            if off.size:
                i = off[0]
                raise RecipeError(
                    f"tube {tubes[i]}, {diluent_id}",
                    f"{vol[i, j]:g} mL, but under make_up = 'to-mark' the diluent is what fills the "
                    f"{tube_mL:g} mL mark: {remainder[i]:g} mL; correct it or leave the {diluent_id} "
                    f"column out",
                )
        vol[:, j] = remainder
        total = np.full(n, tube_mL)
    else:
        total = vol.sum(axis=1)
        over = np.flatnonzero(total > tube_mL + tol)
        if over.size:
            i = over[0]
            raise RecipeError(
                f"tube {tubes[i]}",
                f"volumes add up to {total[i]:g} mL, more than the {tube_mL:g} mL tube: reduce them",
            )
        empty = np.flatnonzero(total <= 0)
        if empty.size:
            raise RecipeError(f"tube {tubes[empty[0]]}", "the tube is empty")
    return Recipe(tuple(tubes), ids, vol, total)


def read_text_file(path: str | Path, what: str) -> str:
    """Text of a CSV the user named, or a RecipeError saying the file is missing, too large or unreadable."""
    return read_user_text(
        path,
        what=what,
        limit_bytes=MAX_CSV_BYTES,
        error=RecipeError,
        kind="a .csv file",
        too_large_hint=f"a {what} holds at most {MAX_ROWS} tubes: check that this is the right file",
        encoding="utf-8-sig",
    )


def read_recipe_csv(path: str | Path, plan: Plan) -> Recipe:
    """Read a recipe CSV: column ``tube`` then one column per dispensed stock (mL)."""
    return parse_recipe_csv(read_text_file(path, "recipe"), plan, source=str(path))


def csv_rows(text: str, source: str) -> list[tuple[int, list[str]]]:
    """The header and data rows of a CSV text as (line number, cells), by the module's rules.

    Raises
    ------
    RecipeError
        For more than :data:`MAX_ROWS` data rows, an over-long cell, or a semicolon- or tab-separated file.
    """
    text = text.removeprefix("\ufeff")
    lines = text.splitlines(keepends=True)
    skip = 0
    while skip < len(lines) and (not lines[skip].strip() or lines[skip].startswith("#")):
        skip += 1  # blank lines and comments above the header
    reader = csv.reader(io.StringIO("".join(lines[skip:])))
    rows: list[tuple[int, list[str]]] = []
    last = 0  # the line the previous row ended on: a quoted cell may span lines
    try:
        for r in reader:
            start, last = last + 1, reader.line_num
            if not r or not any(c.strip() for c in r):
                continue
            if any("\n" in c or "\r" in c for c in r):
                raise RecipeError(
                    f"{source} line {skip + start}",
                    "a quoted cell runs over several lines "
                    "(an unclosed quote?): close the quote on that line",
                )
            rows.append((skip + start, r))
            if len(rows) > MAX_ROWS + 1:
                raise RecipeError(
                    source, f"more than {MAX_ROWS} tubes: a recipe holds at most {MAX_ROWS} rows"
                )
    except csv.Error as exc:
        line = skip + reader.line_num
        if "field larger" in str(exc):
            raise RecipeError(
                f"{source} line {line}",
                f"a cell is longer than {csv.field_size_limit()} "
                "characters (an unclosed quote?): check the quotes on that line",
            ) from None
        raise RecipeError(f"{source} line {line}", f"not readable as CSV ({exc}): check the quotes") from None
    if rows:
        first = rows[0][1]
        if len(first) == 1:
            for sep, name in ((";", "semicolon"), ("\t", "tab")):
                if sep in first[0]:
                    raise RecipeError(
                        f"{source} header",
                        f"the file looks {name}-separated: kplan reads "
                        "comma-separated values with a decimal point, e.g. 'tube,CU,DY' and "
                        "'T1,1.50,0.25'; export it as CSV with commas",
                    )
    return rows


def parse_volume_cell(cell: str, where: str, what: str = "a volume in mL") -> float:
    """A finite decimal number from a CSV cell, or a RecipeError naming ``where``."""
    c = cell.strip()
    if not _NUMBER.fullmatch(c):
        hint = (
            "; write a decimal point (1.50, not 1,50)"
            if re.fullmatch(r"[+-]?\d*,\d+", c)
            else "; leave no blanks"
            if not c
            else ""
        )
        raise RecipeError(where, f"'{visible(c)}' is not {what}{hint}")
    v = float(c)
    if not math.isfinite(v):  # '1e400' is a plain decimal, but past the largest float
        raise RecipeError(where, f"'{c}' is out of range for {what}")
    return v


def _volume(cell: str, where: str) -> float:
    """A recipe volume: 0, or a volume a dispenser could deliver (the plan's volume bounds)."""
    v = parse_volume_cell(cell, where)
    if v != 0 and not MIN_VOLUME_ML <= abs(v) <= MAX_VOLUME_ML:  # negatives get their own message later
        raise RecipeError(
            where, f"{v:g} mL: write 0 or a volume between {MIN_VOLUME_ML:g} and {MAX_VOLUME_ML:g} mL"
        )
    return v


def parse_recipe_csv(text: str, plan: Plan, source: str = "<recipe>") -> Recipe:
    """Parse recipe CSV text (see the module docstring for the rules)."""
    rows = csv_rows(text, source)
    if not rows:
        raise RecipeError(
            source, "the recipe is empty: expected a header 'tube,<stock>,...' and one row per tube"
        )
    return _recipe_from_rows(rows, plan, source)


def parse_recipe_with_column(
    text: str, plan: Plan, columns: tuple[str, ...], source: str = "<readings>", what: str = "an absorbance"
) -> tuple[Recipe, np.ndarray]:
    """A recipe CSV with one more numeric column (e.g. the measured absorbance), by the same rules.

    Parameters
    ----------
    columns : names the extra column may have; the first is the one suggested in messages.
    what : what a value of that column is, for messages ("an absorbance").

    Returns
    -------
    recipe : the recipe of the other columns.
    values : (n,) the extra column, in tube order.
    """
    rows = csv_rows(text, source)
    if not rows:
        raise RecipeError(
            source, f"empty: expected a header 'tube,<stock>,...,{columns[0]}' and one row per tube"
        )
    header = [h.strip() for h in rows[0][1]]
    col = next((h for h in header if h in columns), None)
    if col is None:
        raise RecipeError(f"{source} header", f"no {columns[0]} column: add one named {' or '.join(columns)}")
    j = header.index(col)
    values = []
    for ln, r in rows[1:]:
        _check_width(r, len(header), f"{source} line {ln}")
        values.append(parse_volume_cell(r[j], f"{source} line {ln}, {col}", what=what))
    rest = [(ln, [c for k, c in enumerate(r) if k != j]) for ln, r in rows]
    return _recipe_from_rows(rest, plan, source), np.array(values, dtype=float)


def _check_width(row: list[str], width: int, where: str) -> None:
    if len(row) != width:
        hint = ""
        if len(row) > width:
            hint = (
                "; a decimal comma? write volumes with a decimal point (1.50, not 1,50), and quote "
                "labels that contain commas"
            )
        raise RecipeError(where, f"expected {width} fields, got {len(row)}{hint}")


def _recipe_from_rows(rows: list[tuple[int, list[str]]], plan: Plan, source: str) -> Recipe:
    """A recipe from :func:`csv_rows` output: the header row, then one row per tube."""
    header = [h.strip() for h in rows[0][1]]
    ids = [s.id for s in plan.stock]
    if header[0].lower() != "tube":
        raise RecipeError(f"{source} header", f"first column must be 'tube', got '{visible(header[0])}'")
    if len(header) == 1:
        raise RecipeError(
            f"{source} header",
            f"only a 'tube' column: add one column per dispensed stock ({', '.join(ids)}), volumes in mL",
        )
    for h in header[1:]:
        if h not in ids:
            raise RecipeError(f"{source} column '{visible(h)}'", unknown_name("stock", visible(h), ids))
    if len(set(header)) != len(header):
        raise RecipeError(f"{source} header", "a column appears twice")
    tubes, data = [], []
    for ln, r in rows[1:]:
        _check_width(r, len(header), f"{source} line {ln}")
        label = r[0].strip()
        try:
            check_identifier(label, "tube label")
        except ValueError as exc:
            raise RecipeError(f"{source} line {ln}, tube", str(exc)) from None
        tubes.append(label)
        data.append([_volume(c, f"{source} line {ln}, {h}") for h, c in zip(header[1:], r[1:], strict=True)])
    if not tubes:
        raise RecipeError(source, "no tubes: add one row per tube")
    if len(set(tubes)) != len(tubes):
        dup = next(t for t in tubes if tubes.count(t) > 1)
        raise RecipeError(source, f"tube label '{visible(dup)}' appears twice: tube labels must be unique")
    arr = np.array(data, dtype=float).reshape(len(tubes), len(header) - 1)
    return make_recipe(plan, {h: arr[:, j] for j, h in enumerate(header[1:])}, tubes)


def recipe_to_csv(recipe: Recipe, plan: Plan) -> str:
    """CSV text with the dispensed stocks (the diluent too under make_up = 'added')."""
    cols = recipe.dispensed_ids(plan)
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["tube", *cols])
    for i, t in enumerate(recipe.tubes):
        w.writerow([t, *(_fmt(recipe.column(c)[i]) for c in cols)])
    return buf.getvalue()


def _fmt(v: float) -> str:
    s = f"{v:.{VOLUME_DECIMALS}f}".rstrip("0")
    return s + "0" if s.endswith(".") else s
