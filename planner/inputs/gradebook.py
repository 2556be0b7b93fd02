"""The instructor's key (``key.csv`` from ``kplan cards``) and the class's results CSV, read for grading.

key.csv columns: ``student``, ``name``, ``section``, ``tube``, one column per dispensed stock in mL,
``absorbance``, ``band_low``, ``band_high``. The results CSV: ``student``, ``tube``, ``absorbance`` (an
optional ``note`` column is ignored). Both are read by the rules every table follows
(:mod:`planner.inputs.tables`); every problem is one :class:`RecipeError` naming the line and column. A
student id the key wrote with a leading apostrophe (so a spreadsheet keeps ``=x`` or ``@ann`` as text) is
read back without it, so it matches the same student in the results.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .limits import MAX_CLASS_ROWS, MAX_STUDENT_ID, MAX_STUDENTS
from .plan import Plan
from .recipe import Recipe, RecipeError, make_recipe
from .tables import Row, Table, parse_table, read_table_text, table_spec
from .text import check_identifier, visible

KEY_FIXED = ("student", "name", "section", "tube")
KEY_TAIL = ("absorbance", "band_low", "band_high")
MAX_ROWS = MAX_CLASS_ROWS  # older name


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


KEY = table_spec("key", RecipeError)
RESULTS = table_spec("results", RecipeError)


def _student(table: Table, row: Row, j: int) -> str:
    sid = row.cells[j]
    if not sid:
        raise RecipeError(table.where(row.line, "student"), "empty student id")
    if len(sid) > MAX_STUDENT_ID:
        raise RecipeError(
            table.where(row.line, "student"), f"a student id of at most {MAX_STUDENT_ID} characters"
        )
    return sid


def _tube(table: Table, row: Row, j: int) -> str:
    try:
        return check_identifier(row.cells[j], "tube label")
    except ValueError as exc:
        raise RecipeError(table.where(row.line, "tube"), str(exc)) from None


def parse_key_csv(text: str, plan: Plan, source: str = "key.csv") -> tuple[KeyCard, ...]:
    """The cards of a key.csv (see the module docstring), in file order.

    Raises
    ------
    RecipeError
        For a key that does not fit the plan or contradicts itself: a missing column (every dispensed
        stock of the plan has one), no student, a band that does not hold its expected absorbance, a
        tube twice for one student; the message names the line and column.
    """
    table = parse_table(text, KEY, source)
    _check_key_header(table, plan)
    col = {h: k for k, h in enumerate(table.header)}
    stocks = [h for h in table.header if h not in KEY_FIXED and h not in KEY_TAIL]
    by_student: dict[str, list[Row]] = {}
    for r in table.rows:
        by_student.setdefault(_student(table, r, col["student"]), []).append(r)
    if not by_student:
        raise RecipeError(source, "no students: the key has a header only; give the key kplan cards wrote")
    if len(by_student) > MAX_STUDENTS:
        raise RecipeError(source, f"{len(by_student)} students: at most {MAX_STUDENTS}; split the class")
    return tuple(_card(table, plan, sid, rows, col, stocks) for sid, rows in by_student.items())


def _check_key_header(table: Table, plan: Plan) -> None:
    header = table.header
    missing = [c for c in (*KEY_FIXED, *KEY_TAIL) if c not in header]
    if missing:
        raise RecipeError(
            table.where(),
            f"missing column(s) {', '.join(missing)}: is this the key.csv that kplan cards wrote?",
        )
    ids = [s.id for s in plan.stock]
    for s in header:
        if s not in KEY_FIXED and s not in KEY_TAIL and s not in ids:
            raise RecipeError(table.where(column=s), f"not a stock of the plan ({', '.join(ids)})")
    dil = plan.diluent
    remainder = dil.id if dil is not None and plan.glassware.make_up == "to-mark" else None
    absent = [i for i in ids if i not in header and i != remainder]
    if absent:
        raise RecipeError(
            table.where(),
            f"no column for stock(s) {', '.join(absent)}: the key gives every stock's volume; is this the "
            "key kplan cards wrote for this plan?",
        )


def _card(table: Table, plan: Plan, sid: str, rows: list[Row], col: dict[str, int], stocks) -> KeyCard:
    tubes = [_tube(table, r, col["tube"]) for r in rows]
    dup = next((t for t in tubes if tubes.count(t) > 1), None)
    if dup is not None:
        raise RecipeError(f"{table.source} student {visible(sid)}", f"tube {visible(dup)} appears twice")
    vols = {s: np.array([table.number(r, col[s], "a volume in mL") for r in rows]) for s in stocks}
    try:
        rec = make_recipe(plan, vols, tubes)
    except RecipeError as exc:
        raise RecipeError(f"{table.source} student {visible(sid)}, {exc.key}", exc.message) from None
    nums = {c: np.array([table.number(r, col[c], "a number") for r in rows]) for c in KEY_TAIL}
    a, lo, hi = nums["absorbance"], nums["band_low"], nums["band_high"]
    bad = np.flatnonzero(~((lo <= a) & (a <= hi)))  # an inverted band holds nothing
    if bad.size:
        k = int(bad[0])
        raise RecipeError(
            table.where(rows[k].line),
            f"the band {lo[k]:g} to {hi[k]:g} does not hold the expected absorbance {a[k]:g} "
            "(band_low ≤ absorbance ≤ band_high): is this the key kplan cards wrote?",
        )
    first = rows[0].cells
    return KeyCard(sid, first[col["name"]], first[col["section"]], rec, a, lo, hi)


def parse_results_csv(text: str, source: str = "results.csv") -> dict[str, dict[str, float]]:
    """student -> tube -> absorbance, from a results CSV (``student``, ``tube``, ``absorbance``)."""
    table = parse_table(text, RESULTS, source)
    missing = [c for c in ("student", "tube", "absorbance") if c not in table.header]
    if missing:
        raise RecipeError(
            table.where(), f"missing column(s) {', '.join(missing)}: expected student, tube, absorbance"
        )
    col = {h: k for k, h in enumerate(table.header)}
    out: dict[str, dict[str, float]] = {}
    for r in table.rows:
        sid, tube = _student(table, r, col["student"]), _tube(table, r, col["tube"])
        a = table.number(r, col["absorbance"], "an absorbance")
        if tube in out.setdefault(sid, {}):
            raise RecipeError(
                table.where(r.line), f"student {visible(sid)}, tube {visible(tube)} is read twice"
            )
        out[sid][tube] = a
    if not out:
        raise RecipeError(source, "no readings: add one row per student and tube under the header")
    return out


def read_key(key_dir: str | Path, plan: Plan) -> tuple[KeyCard, ...]:
    """The key.csv in ``key_dir`` (the folder ``kplan cards --out`` wrote)."""
    p = Path(key_dir)
    path = p / "key.csv" if p.is_dir() or not p.suffix else p
    return parse_key_csv(read_table_text(path, KEY), plan, str(path))


def read_results(path: str | Path) -> dict[str, dict[str, float]]:
    return parse_results_csv(read_table_text(path, RESULTS), str(path))
