"""The ε table of a plan with whole spectra (``optics.spectra = "eps.csv"``).

One row per wavelength: ``wavelength_nm`` first, then one column per absorbing species (or free ``M``/
``L``) with its molar absorptivity (L mol⁻¹ cm⁻¹); optionally an ``rsd`` column (the relative
uncertainty of every species' ε at that wavelength) and ``<name>_rsd`` columns (one species'). Lines
starting with ``#`` above the header are comments. Wavelengths rise strictly.

The reading rules follow the recipe reader's (comma-separated, decimal point, one header); this small
module is meant to move behind the one table reader of the inputs layer.
"""

from __future__ import annotations

import csv
import io
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .files import read_user_text
from .plan_fields import PlanError
from .text import visible

MAX_TABLE_BYTES = 2_000_000  # 20 000 wavelengths of a handful of species
MAX_TABLE_ROWS = 20_000  # 100–2000 nm at 0.1 nm
MAX_EPSILON = 1e6  # L mol⁻¹ cm⁻¹, as for optics.epsilon
MAX_RSD = 5.0  # as for optics.epsilon.rsd
WAVELENGTH_RANGE_NM = (100.0, 2000.0)  # as for optics.wavelength_nm


@dataclass(frozen=True)
class SpectraTable:
    """Molar absorptivities over a wavelength grid, as read.

    Attributes
    ----------
    wavelength_nm : (L,) strictly rising wavelengths, nm.
    names : the absorbers of the columns (species names, ``M``, ``L``).
    epsilon_M_cm : (L, k) ε of each absorber, L mol⁻¹ cm⁻¹.
    rsd : (L, k) relative uncertainty of each ε, NaN where the table gives none.
    source : the file it came from, for messages.
    """

    wavelength_nm: np.ndarray
    names: tuple[str, ...]
    epsilon_M_cm: np.ndarray
    rsd: np.ndarray
    source: str = "<table>"

    def __repr__(self) -> str:
        w = self.wavelength_nm
        return f"SpectraTable({', '.join(self.names)}; {w.size} wavelengths {w[0]:g}–{w[-1]:g} nm)"


def read_spectra_table(path: str | Path, key: str = "optics.spectra") -> SpectraTable:
    """Read the ε table at ``path`` (see the module docstring); every problem is a :class:`PlanError`
    naming ``key``."""

    def error(_key: str, message: str) -> PlanError:
        return PlanError(key, message)

    text = read_user_text(
        path,
        what="ε table",
        limit_bytes=MAX_TABLE_BYTES,
        error=error,
        kind="a .csv file",
        too_large_hint="an ε table has one row per wavelength: check that this is the right file",
        encoding="utf-8-sig",
    )
    return parse_spectra_table(text, str(path), key)


def parse_spectra_table(text: str, source: str = "<table>", key: str = "optics.spectra") -> SpectraTable:
    """Parse the text of an ε table (see the module docstring)."""
    rows = _rows(text, source, key)
    if len(rows) < 3:
        raise PlanError(key, f"{source}: needs a header and at least two wavelengths")
    (hline, header), body = rows[0], rows[1:]
    header = [h.strip() for h in header]
    if header[0] != "wavelength_nm":
        raise PlanError(key, f"{source} line {hline}: the first column must be 'wavelength_nm'")
    names, cols, rsd_cols = _columns(header, source, hline, key)
    wl = np.empty(len(body))
    eps = np.empty((len(body), len(names)))
    rsd = np.full((len(body), len(names)), np.nan)
    for r, (ln, cells) in enumerate(body):
        if len(cells) != len(header):
            raise PlanError(key, f"{source} line {ln}: expected {len(header)} fields, got {len(cells)}")
        wl[r] = _number(cells[0], f"{source} line {ln}, wavelength_nm", key, *WAVELENGTH_RANGE_NM)
        for j, c in enumerate(cols):
            eps[r, j] = _number(cells[c], f"{source} line {ln}, {names[j]}", key, 0.0, MAX_EPSILON)
        for j, c in rsd_cols.items():
            rsd[r, j] = _number(cells[c], f"{source} line {ln}, {header[c]}", key, 0.0, MAX_RSD)
    bad = np.flatnonzero(np.diff(wl) <= 0)
    if bad.size:
        ln = body[int(bad[0]) + 1][0]
        raise PlanError(key, f"{source} line {ln}: wavelengths must rise from row to row")
    return SpectraTable(wl, tuple(names), eps, rsd, source)


def _columns(header: list[str], source: str, line: int, key: str):
    """Absorber names, their column indices, and {absorber index: rsd column index}."""
    names: list[str] = []
    cols: list[int] = []
    rsd_for: dict[str, int] = {}
    common = None
    for c, h in enumerate(header[1:], start=1):
        if not h:
            raise PlanError(key, f"{source} line {line}: column {c + 1} has no name")
        if h == "rsd":
            common = c
        elif h.endswith("_rsd"):
            rsd_for[h[: -len("_rsd")]] = c
        else:
            if h in names:
                raise PlanError(key, f"{source} line {line}: column '{visible(h)}' appears twice")
            names.append(h)
            cols.append(c)
    if not names:
        raise PlanError(key, f"{source} line {line}: no species columns after wavelength_nm")
    for n in rsd_for:
        if n not in names:
            raise PlanError(
                key, f"{source} line {line}: '{visible(n)}_rsd' has no column '{visible(n)}' beside it"
            )
    rsd_cols = {j: rsd_for.get(n, common) for j, n in enumerate(names)}
    return names, cols, {j: c for j, c in rsd_cols.items() if c is not None}


def _number(cell: str, where: str, key: str, lo: float, hi: float) -> float:
    c = cell.strip()
    try:
        v = float(c)
    except ValueError:
        hint = "; write a decimal point (1.50, not 1,50)" if "," in c else ""
        raise PlanError(key, f"{where}: '{visible(c)}' is not a number{hint}") from None
    if not (math.isfinite(v) and lo <= v <= hi):
        raise PlanError(key, f"{where}: {c} is outside {lo:g}–{hi:g}")
    return v


def _rows(text: str, source: str, key: str) -> list[tuple[int, list[str]]]:
    lines = text.removeprefix("\ufeff").splitlines()
    out: list[tuple[int, list[str]]] = []
    header_seen = False
    for ln, line in enumerate(lines, start=1):
        if not line.strip() or (not header_seen and line.lstrip().startswith("#")):
            continue
        if ";" in line and "," not in line:
            raise PlanError(
                key, f"{source} line {ln}: the table looks semicolon-separated: save it with commas"
            )
        try:
            cells = next(csv.reader(io.StringIO(line)))
        except (csv.Error, StopIteration) as exc:
            raise PlanError(key, f"{source} line {ln}: not readable as CSV ({exc})") from None
        out.append((ln, cells))
        header_seen = True
        if len(out) > MAX_TABLE_ROWS + 1:
            raise PlanError(key, f"{source}: more than {MAX_TABLE_ROWS} wavelengths")
    return out


def attach_spectra_table(plan, base_dir: Path):
    """Read the table ``plan.optics.spectra`` names (relative to ``base_dir``), check it against the
    plan and keep it with the plan (``plan.spectra_table``); a plan without one is returned as is."""
    o = plan.optics
    if o.spectra is None:
        return plan
    path = Path(o.spectra)
    table = read_spectra_table(path if path.is_absolute() else base_dir / path)
    absorbers = {"M", "L", *(s.name for s in plan.species)}
    for name in table.names:
        if name not in absorbers:
            raise PlanError(
                "optics.spectra",
                f"{table.source}: column '{visible(name)}' is not a species, M or L "
                f"(known: {', '.join(sorted(absorbers))})",
            )
        if name in o.bands:
            raise PlanError(
                f"optics.bands.{name}", f"{name} has a column in {table.source} too: give its spectrum once"
            )
    if o.window_nm is not None:
        lo, hi = o.window_nm
        w = table.wavelength_nm
        if lo < w[0] - 1e-9 or hi > w[-1] + 1e-9:
            raise PlanError(
                "optics.window_nm",
                f"[{lo:g}, {hi:g}] nm reaches beyond the ε table ({w[0]:g}–{w[-1]:g} nm): narrow the "
                f"window or extend the table",
            )
    else:
        from .plan_parts import MAX_WAVELENGTHS

        n = int(round((table.wavelength_nm[-1] - table.wavelength_nm[0]) / o.step_nm)) + 1
        if n > MAX_WAVELENGTHS:
            raise PlanError(
                "optics.step_nm",
                f"the table's range holds {n} wavelengths at {o.step_nm:g} nm; at most {MAX_WAVELENGTHS}: "
                f"take a larger step or give optics.window_nm",
            )
    plan._spectra_table = table
    return plan
