"""Recipes: tube × stock volumes, CSV in and out, and the totals in each tube after dilution."""

from __future__ import annotations

import csv
import io
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .plan import Plan, unknown_name

VOLUME_DECIMALS = 4  # mL; far below any dispenser's resolution, so round trips are exact


class RecipeError(ValueError):
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

    def dispensed_ids(self, plan: Plan) -> tuple[str, ...]:
        """Stocks that are measured out (the diluent is not, under to-mark)."""
        dil = plan.diluent
        skip = dil.id if (dil is not None and plan.glassware.make_up == "to-mark") else None
        return tuple(s for s in self.stock_ids if s != skip)


def stock_matrix(plan: Plan) -> np.ndarray:
    """(k, 2) concentrations of M and L in each stock, mol/L, plan order."""
    return np.array([[s.conc.get("M", 0.0), s.conc.get("L", 0.0)] for s in plan.stock], dtype=float)


def totals_M(recipe: Recipe, stock_conc_M: np.ndarray) -> np.ndarray:
    """(n, 2) total M and L in each tube after dilution: c = Σ c_k V_k / V_total."""
    return (recipe.volumes_mL @ stock_conc_M) / recipe.total_volume_mL[:, None]


def make_recipe(plan: Plan, volumes: dict[str, np.ndarray] | np.ndarray, tubes: list[str] | None = None,
                *, dispensed_ids: tuple[str, ...] | None = None) -> Recipe:
    """Build a :class:`Recipe` from dispensed volumes, filling the diluent and checking the tube.

    Parameters
    ----------
    volumes : dict stock id -> (n,) mL, or an (n, d) array in the order of ``dispensed_ids``.
    """
    dil = plan.diluent
    return assemble_recipe(tuple(s.id for s in plan.stock), volumes, tubes, dispensed_ids=dispensed_ids,
                           diluent_id=dil.id if dil is not None else None,
                           to_mark=plan.glassware.make_up == "to-mark",
                           tube_volume_mL=plan.glassware.tube_volume_mL, fixed_mL=plan.design.fixed)


def assemble_recipe(ids: tuple[str, ...], volumes: dict[str, np.ndarray] | np.ndarray,
                    tubes: list[str] | None = None, *, dispensed_ids: tuple[str, ...] | None = None,
                    diluent_id: str | None, to_mark: bool, tube_volume_mL: float,
                    fixed_mL: dict[str, float]) -> Recipe:
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
        vol[:, j] = np.maximum(tube_mL - others, 0.0)
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
    """Text of a CSV the user named, or a RecipeError saying the file is missing or unreadable."""
    p = Path(path)
    try:
        return p.read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        raise RecipeError("", f"{what} file '{p}' not found: check the path") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise RecipeError("", f"cannot read {what} file '{p}': {exc}") from None


def read_recipe_csv(path: str | Path, plan: Plan) -> Recipe:
    """Read a recipe CSV: column ``tube`` then one column per dispensed stock (mL)."""
    return parse_recipe_csv(read_text_file(path, "recipe"), plan, source=str(path))


def parse_recipe_csv(text: str, plan: Plan, source: str = "<recipe>") -> Recipe:
    rows = [r for r in csv.reader(io.StringIO(text)) if r and any(c.strip() for c in r)]
    rows = [r for r in rows if not r[0].lstrip().startswith("#")]
    if not rows:
        raise RecipeError(source, "the recipe is empty: expected a header 'tube,<stock>,...' and one row per tube")
    header = [h.strip() for h in rows[0]]
    if header[0].lower() != "tube":
        raise RecipeError(f"{source} header", f"first column must be 'tube', got '{header[0]}'")
    ids = [s.id for s in plan.stock]
    for h in header[1:]:
        if h not in ids:
            raise RecipeError(f"{source} column '{h}'", unknown_name("stock", h, ids))
    if len(set(header)) != len(header):
        raise RecipeError(f"{source} header", "a column appears twice")
    tubes, data = [], []
    for ln, r in enumerate(rows[1:], start=2):
        if len(r) != len(header):
            raise RecipeError(f"{source} line {ln}", f"expected {len(header)} fields, got {len(r)}")
        tubes.append(r[0].strip())
        vals = []
        for h, c in zip(header[1:], r[1:], strict=True):
            try:
                vals.append(float(c))
            except ValueError:
                raise RecipeError(f"{source} line {ln}, {h}", f"'{c}' is not a volume in mL") from None
        data.append(vals)
    if not tubes:
        raise RecipeError(source, "no tubes: add one row per tube")
    if len(set(tubes)) != len(tubes):
        raise RecipeError(source, "tube labels must be unique")
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
