"""Recipes: tube × stock volumes, CSV in and out, and the totals in each tube after dilution.

A recipe CSV has the header ``tube,<stock id>,...`` and one row per tube, volumes in mL; it is read by
the rules every table follows (:mod:`planner.inputs.tables`), comma-separated with a decimal point (a
``;``-separated file is refused with the fix). Limits: :data:`MAX_CSV_BYTES` bytes, :data:`MAX_ROWS` tubes.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np

from .errors import LocatedError
from .limits import MAX_CSV_BYTES as MAX_CSV_BYTES  # re-exported: the limits live in limits.py
from .limits import MAX_ROWS as MAX_ROWS
from .names import unknown_name
from .plan import Plan
from .plan_fields import MAX_VOLUME_ML, MIN_VOLUME_ML
from .tables import Row, Table, parse_number, parse_table, read_table_text, table_spec, write_csv
from .text import check_identifier, visible

VOLUME_DECIMALS = 4  # mL; far below any dispenser's resolution, so round trips are exact
DILUENT_TOLERANCE_ML = 1e-6  # a supplied to-mark diluent volume must equal the remainder this closely


class RecipeError(LocatedError):
    """A recipe that does not fit the plan; ``key`` names the row/column."""


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


def _refuse_overfull(tubes, total_mL: np.ndarray, tube_mL: float, what: str) -> None:
    """Refuse the first tube whose ``what`` (its stocks, all its volumes) add up to more than the tube."""
    over = np.flatnonzero(total_mL > tube_mL + 1e-9 * tube_mL)
    if over.size:
        i = over[0]
        raise RecipeError(
            f"tube {tubes[i]}",
            f"{what} add up to {total_mL[i]:g} mL, more than the {tube_mL:g} mL tube: reduce them",
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
    if to_mark:
        j = ids.index(diluent_id)
        others = vol.sum(axis=1) - vol[:, j]
        _refuse_overfull(tubes, others, tube_mL, "stocks")
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
        _refuse_overfull(tubes, total, tube_mL, "volumes")
        empty = np.flatnonzero(total <= 0)
        if empty.size:
            raise RecipeError(f"tube {tubes[empty[0]]}", "the tube is empty")
    return Recipe(tuple(tubes), ids, vol, total)


RECIPE = table_spec("recipe", RecipeError)


def read_text_file(path: str | Path, what: str) -> str:
    """Text of a CSV the user named, or a RecipeError saying the file is missing, too large or unreadable."""
    return read_table_text(path, replace(RECIPE, what=what))


def read_recipe_csv(path: str | Path, plan: Plan) -> Recipe:
    """Read a recipe CSV: column ``tube`` then one column per dispensed stock (mL)."""
    return parse_recipe_csv(read_table_text(path, RECIPE), plan, source=str(path))


def parse_volume_cell(cell: str, where: str, what: str = "a volume in mL") -> float:
    """A finite decimal number from a CSV cell, or a RecipeError naming ``where``."""
    return parse_number(cell, where, what, error=RecipeError)


def _volume(table: Table, row: Row, j: int) -> float:
    """A recipe volume: 0, or a volume a dispenser could deliver (the plan's volume bounds)."""
    v = table.number(row, j, "a volume in mL")
    if v != 0 and not MIN_VOLUME_ML <= abs(v) <= MAX_VOLUME_ML:  # negatives get their own message later
        raise RecipeError(
            table.where(row.line, table.header[j]),
            f"{v:g} mL: write 0 or a volume between {MIN_VOLUME_ML:g} and {MAX_VOLUME_ML:g} mL",
        )
    return v


def parse_recipe_csv(text: str, plan: Plan, source: str = "<recipe>") -> Recipe:
    """Parse recipe CSV text (see :mod:`planner.inputs.tables` for the rules)."""
    return recipe_from_table(parse_table(text, RECIPE, source), plan)


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
    table = parse_table(text, replace(RECIPE, header_example=f"tube,<stock>,...,{columns[0]}"), source)
    j = table.index(*columns)
    if j is None:
        raise RecipeError(table.where(), f"no {columns[0]} column: add one named {' or '.join(columns)}")
    values = np.array([table.number(r, j, what) for r in table.rows], dtype=float)
    return recipe_from_table(table, plan, skip=(j,)), values


def recipe_from_table(table: Table, plan: Plan, skip: tuple[int, ...] = ()) -> Recipe:
    """The recipe in a table: the first column ``tube``, then one column per stock id (mL); the columns
    at ``skip`` (an absorbance, a note) are not part of it."""
    cols = [k for k in range(len(table.header)) if k not in skip]
    header = [table.header[k] for k in cols]
    ids = [s.id for s in plan.stock]
    if header[0].lower() != "tube":
        raise RecipeError(table.where(), f"first column must be 'tube', got '{visible(header[0])}'")
    if len(header) == 1:
        raise RecipeError(
            table.where(),
            f"only a 'tube' column: add one column per dispensed stock ({', '.join(ids)}), volumes in mL",
        )
    for h in header[1:]:
        if h not in ids:
            raise RecipeError(table.where(column=h), unknown_name("stock", visible(h), ids))
    tubes = []
    for r in table.rows:
        try:
            tubes.append(check_identifier(r.cells[cols[0]], "tube label"))
        except ValueError as exc:
            raise RecipeError(table.where(r.line, "tube"), str(exc)) from None
    if not tubes:
        raise RecipeError(table.source, "no tubes: add one row per tube")
    if len(set(tubes)) != len(tubes):
        dup = next(t for t in tubes if tubes.count(t) > 1)
        raise RecipeError(
            table.source, f"tube label '{visible(dup)}' appears twice: tube labels must be unique"
        )
    arr = np.array([[_volume(table, r, k) for k in cols[1:]] for r in table.rows], dtype=float)
    return make_recipe(plan, {h: arr[:, j] for j, h in enumerate(header[1:])}, tubes)


def recipe_to_csv(recipe: Recipe, plan: Plan) -> str:
    """CSV text with the dispensed stocks (the diluent too under make_up = 'added'); tube labels and
    stock ids are written as data, never as spreadsheet formulas."""
    cols = recipe.dispensed_ids(plan)
    return write_csv(
        ["tube", *cols],
        ([t, *(_fmt(recipe.column(c)[i]) for c in cols)] for i, t in enumerate(recipe.tubes)),
    )


def _fmt(v: float) -> str:
    s = f"{v:.{VOLUME_DECIMALS}f}".rstrip("0")
    return s + "0" if s.endswith(".") else s
