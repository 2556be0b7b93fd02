"""Titration schedules: ``step``, ``aliquot_mL`` and optionally ``absorbance``, one row per addition.

Step 0 with an aliquot of 0 is the reading of the cell before any titrant. The schedule is turned into
the recipe rows the model reads (one per point) by :func:`planner.uncertainty.titration.titration_recipe`,
which also checks it against the cell and the dispenser.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .recipe import RecipeError
from .tables import parse_table, read_table_text, table_spec, write_csv
from .text import visible


@dataclass(frozen=True)
class Schedule:
    """A titration schedule.

    Attributes
    ----------
    steps : labels of the points, e.g. "0", "1", ...
    aliquot_mL : (m,) volume added at each step (0 for the reading before any titrant).
    absorbance : (m,) readings, or None for a planned schedule.
    """

    steps: tuple[str, ...]
    aliquot_mL: np.ndarray
    absorbance: np.ndarray | None = None

    @property
    def added_mL(self) -> np.ndarray:
        """(m,) titrant added so far at each point."""
        return np.cumsum(self.aliquot_mL)


SCHEDULE = table_spec("schedule", RecipeError)


def is_schedule_csv(text: str) -> bool:
    """True when the first non-comment line is a titration schedule's header."""
    first = next((ln for ln in text.splitlines() if ln.strip() and not ln.lstrip().startswith("#")), "")
    return re.split("[,;]", first)[0].strip().lower() == "step"


def parse_schedule_csv(text: str, source: str = "<schedule>", *, need_absorbance: bool = False) -> Schedule:
    """Read a schedule CSV (see the module docstring); every problem is one RecipeError naming the line."""
    table = parse_table(text, SCHEDULE, source)
    if list(table.header[:2]) != ["step", "aliquot_mL"]:
        raise RecipeError(
            table.where(),
            f"a titration schedule starts 'step,aliquot_mL'; got '{visible(','.join(table.header))}'",
        )
    ja = table.index("absorbance")
    if need_absorbance and ja is None:
        raise RecipeError(table.where(), "no absorbance column: add one with the reading after each step")
    if not table.rows:
        raise RecipeError(source, "no steps: add one row per addition")
    steps = [r.cells[0] for r in table.rows]
    vols = np.array([table.number(r, 1, "a volume in mL") for r in table.rows], dtype=float)
    reads = None if ja is None else np.array([table.number(r, ja, "an absorbance") for r in table.rows])
    bad = np.flatnonzero(vols < 0)
    if bad.size:
        r = table.rows[bad[0]]
        raise RecipeError(table.where(r.line, "aliquot_mL"), f"negative aliquot {vols[bad[0]]:g} mL")
    if len(set(steps)) != len(steps):
        raise RecipeError(source, "step labels must be unique")
    return Schedule(tuple(steps), vols, reads)


def read_schedule_csv(path: str | Path, *, need_absorbance: bool = False) -> Schedule:
    return parse_schedule_csv(read_table_text(path, SCHEDULE), str(path), need_absorbance=need_absorbance)


def schedule_to_csv(schedule: Schedule) -> str:
    """CSV text of a schedule (step labels written as data, never as spreadsheet formulas)."""
    a = schedule.absorbance
    rows = (
        [s, f"{schedule.aliquot_mL[i]:.4f}".rstrip("0").rstrip(".") or "0"]
        + ([f"{a[i]:.4f}"] if a is not None else [])
        for i, s in enumerate(schedule.steps)
    )
    return write_csv(["step", "aliquot_mL"] + (["absorbance"] if a is not None else []), rows)
