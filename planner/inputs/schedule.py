"""Titration schedules: ``step``, ``aliquot_mL`` and optionally ``absorbance``, one row per addition.

Step 0 with an aliquot of 0 is the reading of the cell before any titrant. The schedule is turned into
the recipe rows the model reads (one per point) by :func:`planner.uncertainty.titration.titration_recipe`,
which also checks it against the cell and the dispenser.
"""

from __future__ import annotations

import csv
import io
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .recipe import RecipeError, read_text_file

MAX_STEPS = 200  # far beyond any cuvette titration; a longer file is a mistake, not a schedule


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


def is_schedule_csv(text: str) -> bool:
    """True when the first non-comment line is a titration schedule's header."""
    first = next((ln for ln in text.splitlines() if ln.strip() and not ln.lstrip().startswith("#")), "")
    return first.split(",")[0].strip().lower() == "step"


def parse_schedule_csv(text: str, source: str = "<schedule>", *, need_absorbance: bool = False) -> Schedule:
    """Read a schedule CSV (see the module docstring); every problem is one RecipeError naming the line."""
    try:
        rows = [r for r in csv.reader(io.StringIO(text)) if r and any(c.strip() for c in r)]
    except csv.Error as exc:
        raise RecipeError(source, f"not a readable CSV ({exc})") from None
    rows = [r for r in rows if not r[0].lstrip().startswith("#")]
    if not rows:
        raise RecipeError(source, "empty: expected a header 'step,aliquot_mL[,absorbance]'")
    header = [h.strip() for h in rows[0]]
    if header[:2] != ["step", "aliquot_mL"]:
        raise RecipeError(
            f"{source} header", f"a titration schedule starts 'step,aliquot_mL'; got '{','.join(header)}'"
        )
    has_a = "absorbance" in header
    if need_absorbance and not has_a:
        raise RecipeError(
            f"{source} header", "no absorbance column: add one with the reading after each step"
        )
    if len(rows) - 1 > MAX_STEPS:
        raise RecipeError(source, f"{len(rows) - 1} steps: at most {MAX_STEPS} are read")
    ja = header.index("absorbance") if has_a else -1
    steps, vols, reads = [], [], []
    for ln, r in enumerate(rows[1:], start=2):
        if len(r) != len(header):
            raise RecipeError(f"{source} line {ln}", f"expected {len(header)} fields, got {len(r)}")
        steps.append(r[0].strip())
        for col, out in ((1, vols), (ja, reads)):
            if col < 0:
                continue
            try:
                x = float(r[col])
            except ValueError:
                raise RecipeError(
                    f"{source} line {ln}, {header[col]}", f"'{r[col]}' is not a number"
                ) from None
            if not math.isfinite(x):
                raise RecipeError(f"{source} line {ln}, {header[col]}", f"'{r[col]}' is not a finite number")
            out.append(x)
        if vols[-1] < 0:
            raise RecipeError(f"{source} line {ln}, aliquot_mL", f"negative aliquot {vols[-1]:g} mL")
    if not steps:
        raise RecipeError(source, "no steps: add one row per addition")
    if len(set(steps)) != len(steps):
        raise RecipeError(source, "step labels must be unique")
    return Schedule(
        tuple(steps), np.array(vols, dtype=float), np.array(reads, dtype=float) if has_a else None
    )


def read_schedule_csv(path: str | Path, *, need_absorbance: bool = False) -> Schedule:
    return parse_schedule_csv(read_text_file(path, "schedule"), str(path), need_absorbance=need_absorbance)


def schedule_to_csv(schedule: Schedule) -> str:
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["step", "aliquot_mL"] + (["absorbance"] if schedule.absorbance is not None else []))
    for i, s in enumerate(schedule.steps):
        v = f"{schedule.aliquot_mL[i]:.4f}".rstrip("0").rstrip(".") or "0"
        w.writerow([s, v] + ([f"{schedule.absorbance[i]:.4f}"] if schedule.absorbance is not None else []))
    return buf.getvalue()
