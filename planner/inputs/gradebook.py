"""The instructor's key (``key.csv`` from ``kplan cards``) and the class's results CSV, read for grading.

key.csv columns: ``student``, ``name``, ``section``, ``tube``, one column per dispensed stock in mL,
``absorbance``, ``band_low``, ``band_high``. The results CSV: ``student``, ``tube``, ``absorbance`` (an
optional ``note`` column is ignored). Every problem is one :class:`RecipeError` naming the line and column.
"""

from __future__ import annotations

import csv
import io
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .plan import Plan
from .recipe import Recipe, RecipeError, make_recipe, read_text_file

KEY_FIXED = ("student", "name", "section", "tube")
KEY_TAIL = ("absorbance", "band_low", "band_high")
MAX_ROWS = 100_000  # a class of 2000 students with 50 tubes each; beyond that, split the file


@dataclass(frozen=True)
class KeyCard:
    """One student's card in the key.

    Attributes
    ----------
    student, name, section : who.
    recipe : their tubes (volumes as in the key).
    expected, band_low, band_high : (n,) the key's expected absorbance and acceptance band per tube.
    """

    student: str
    name: str
    section: str
    recipe: Recipe
    expected: np.ndarray
    band_low: np.ndarray
    band_high: np.ndarray


def _rows(text: str, source: str) -> tuple[list[str], list[list[str]]]:
    try:
        rows = [r for r in csv.reader(io.StringIO(text)) if r and any(c.strip() for c in r)]
    except csv.Error as exc:
        raise RecipeError(source, f"not a readable CSV ({exc})") from None
    if not rows:
        raise RecipeError(source, "empty file")
    if len(rows) > MAX_ROWS:
        raise RecipeError(source, f"{len(rows)} rows: at most {MAX_ROWS} are read; split the file")
    header = [h.strip() for h in rows[0]]
    if len(header) == 1 and ";" in header[0]:
        raise RecipeError(f"{source} header", "fields are separated by ';': save the file as CSV with ','")
    return header, rows[1:]


def _number(cell: str, source: str, line: int, col: str) -> float:
    try:
        x = float(cell)
    except ValueError:
        raise RecipeError(f"{source} line {line}, {col}", f"'{cell}' is not a number") from None
    if not math.isfinite(x):
        raise RecipeError(f"{source} line {line}, {col}", f"'{cell}' is not a finite number")
    return x


def parse_key_csv(text: str, plan: Plan, source: str = "key.csv") -> tuple[KeyCard, ...]:
    """The cards of a key.csv (see the module docstring), in file order."""
    header, rows = _rows(text, source)
    missing = [c for c in (*KEY_FIXED, *KEY_TAIL) if c not in header]
    if missing:
        raise RecipeError(
            f"{source} header",
            f"missing column(s) {', '.join(missing)}: is this the key.csv that kplan cards wrote?",
        )
    stocks = [h for h in header if h not in KEY_FIXED and h not in KEY_TAIL]
    ids = [s.id for s in plan.stock]
    for s in stocks:
        if s not in ids:
            raise RecipeError(f"{source} column '{s}'", f"not a stock of the plan ({', '.join(ids)})")
    col = {h: k for k, h in enumerate(header)}
    by_student: dict[str, list[tuple[int, list[str]]]] = {}
    for ln, r in enumerate(rows, start=2):
        if len(r) != len(header):
            raise RecipeError(f"{source} line {ln}", f"expected {len(header)} fields, got {len(r)}")
        sid = r[col["student"]].strip()
        if not sid:
            raise RecipeError(f"{source} line {ln}, student", "empty student id")
        by_student.setdefault(sid, []).append((ln, r))
    cards = []
    for sid, items in by_student.items():
        tubes = [r[col["tube"]].strip() for _, r in items]
        if len(set(tubes)) != len(tubes):
            raise RecipeError(f"{source} student {sid}", "a tube label appears twice")
        vols = {s: np.array([_number(r[col[s]], source, ln, s) for ln, r in items]) for s in stocks}
        rec = make_recipe(plan, vols, tubes)
        nums = {c: np.array([_number(r[col[c]], source, ln, c) for ln, r in items]) for c in KEY_TAIL}
        first = items[0][1]
        cards.append(
            KeyCard(
                sid,
                first[col["name"]],
                first[col["section"]],
                rec,
                nums["absorbance"],
                nums["band_low"],
                nums["band_high"],
            )
        )
    return tuple(cards)


def parse_results_csv(text: str, source: str = "results.csv") -> dict[str, dict[str, float]]:
    """student -> tube -> absorbance, from a results CSV (``student``, ``tube``, ``absorbance``)."""
    header, rows = _rows(text, source)
    missing = [c for c in ("student", "tube", "absorbance") if c not in header]
    if missing:
        raise RecipeError(
            f"{source} header", f"missing column(s) {', '.join(missing)}: expected student, tube, absorbance"
        )
    col = {h: k for k, h in enumerate(header)}
    out: dict[str, dict[str, float]] = {}
    for ln, r in enumerate(rows, start=2):
        if len(r) != len(header):
            raise RecipeError(f"{source} line {ln}", f"expected {len(header)} fields, got {len(r)}")
        sid, tube = r[col["student"]].strip(), r[col["tube"]].strip()
        a = _number(r[col["absorbance"]], source, ln, "absorbance")
        if tube in out.setdefault(sid, {}):
            raise RecipeError(f"{source} line {ln}", f"student {sid}, tube {tube} is read twice")
        out[sid][tube] = a
    return out


def read_key(key_dir: str | Path, plan: Plan) -> tuple[KeyCard, ...]:
    """The key.csv in ``key_dir`` (the folder ``kplan cards --out`` wrote)."""
    p = Path(key_dir)
    path = p / "key.csv" if p.is_dir() or not p.suffix else p
    return parse_key_csv(read_text_file(path, "key"), plan, str(path))


def read_results(path: str | Path) -> dict[str, dict[str, float]]:
    return parse_results_csv(read_text_file(path, "results"), str(path))
