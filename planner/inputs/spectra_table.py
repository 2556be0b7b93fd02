"""The ε table of a plan with whole spectra (``optics.spectra = "eps.csv"``).

One row per wavelength: ``wavelength_nm`` first, then one column per absorbing species (or free ``M``/
``L``) with its molar absorptivity (L mol⁻¹ cm⁻¹); optionally an ``rsd`` column (the relative
uncertainty of every species' ε at that wavelength) and ``<name>_rsd`` columns (one species'). Wavelengths
rise strictly. Read by the one table reader (:mod:`planner.inputs.tables`: comments above the header,
quoting, limits, true line numbers); every problem is a :class:`PlanError` on ``optics.spectra``.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .limits import MAX_WAVELENGTHS
from .plan_fields import PlanError
from .tables import Table, parse_table, read_table_text, table_spec
from .text import visible

MAX_EPSILON = 1e6  # L mol⁻¹ cm⁻¹, as for optics.epsilon
MAX_RSD = 5.0  # as for optics.epsilon.rsd
WAVELENGTH_RANGE_NM = (100.0, 2000.0)  # as for optics.wavelength_nm
KEY = "optics.spectra"


def _error(key: str, message: str) -> PlanError:
    return PlanError(KEY, f"{key}: {message}" if key else message)


EPSILON_TABLE = table_spec("ε table", _error)


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


def read_spectra_table(path: str | Path) -> SpectraTable:
    """Read the ε table at ``path`` (see the module docstring)."""
    return parse_spectra_table(read_table_text(path, EPSILON_TABLE), str(path))


def parse_spectra_table(text: str, source: str = "<table>") -> SpectraTable:
    """Parse the text of an ε table (see the module docstring)."""
    t = parse_table(text, EPSILON_TABLE, source)
    if len(t.rows) < 2:
        raise _error(source, "needs at least two wavelengths")
    if t.header[0] != "wavelength_nm":
        raise _error(t.where(), "the first column must be 'wavelength_nm'")
    names, cols, rsd_cols = _columns(t)
    wl = np.array([_bounded(t, r, 0, *WAVELENGTH_RANGE_NM, "a wavelength in nm") for r in t.rows])
    eps = np.array([[_bounded(t, r, c, 0.0, MAX_EPSILON, "an ε") for c in cols] for r in t.rows])
    rsd = np.full(eps.shape, np.nan)
    for j, c in rsd_cols.items():
        rsd[:, j] = [_bounded(t, r, c, 0.0, MAX_RSD, "a relative sd") for r in t.rows]
    bad = np.flatnonzero(np.diff(wl) <= 0)
    if bad.size:
        raise _error(t.where(t.rows[int(bad[0]) + 1].line), "wavelengths must rise from row to row")
    return SpectraTable(wl, tuple(names), eps, rsd, source)


def _bounded(t: Table, row, j: int, lo: float, hi: float, what: str) -> float:
    v = t.number(row, j, what)
    if not lo <= v <= hi:
        raise _error(t.where(row.line, t.header[j]), f"{v:g} is outside {lo:g}–{hi:g}")
    return v


def _columns(t: Table):
    """Absorber names, their column indices, and {absorber index: rsd column index}."""
    names: list[str] = []
    cols: list[int] = []
    rsd_for: dict[str, int] = {}
    common = None
    for c, h in enumerate(t.header[1:], start=1):
        if h == "rsd":
            common = c
        elif h.endswith("_rsd"):
            rsd_for[h[: -len("_rsd")]] = c
        else:
            if h in names:
                raise _error(t.where(), f"column '{visible(h)}' appears twice")
            names.append(h)
            cols.append(c)
    if not names:
        raise _error(t.where(), "no species columns after wavelength_nm")
    for n in rsd_for:
        if n not in names:
            raise _error(t.where(), f"'{visible(n)}_rsd' has no column '{visible(n)}' beside it")
    rsd_cols = {j: rsd_for.get(n, common) for j, n in enumerate(names)}
    return names, cols, {j: c for j, c in rsd_cols.items() if c is not None}


def attach_spectra_table(plan, base_dir: Path):
    """Read the table ``plan.optics.spectra`` names (relative to ``base_dir``), check it against the
    plan and keep it with the plan (``plan.spectra_table``); a plan without one is returned as is."""
    o = plan.optics
    if o.spectra is None:
        return plan
    path = Path(o.spectra)
    table = read_spectra_table(path if path.is_absolute() else base_dir / path)
    # an alternative of the model check ([[design.alternative]]) may have its spectrum in the table too
    absorbers = {"M", "L", *(s.name for s in plan.species), *(a.name for a in plan.design.alternative)}
    for name in table.names:
        if name not in absorbers:
            raise PlanError(
                KEY,
                f"{table.source}: column '{visible(name)}' is not a species, M, L or a "
                f"[[design.alternative]] (known: {', '.join(sorted(absorbers))})",
            )
        if name in o.bands:
            raise PlanError(
                f"optics.bands.{name}", f"{name} has a column in {table.source} too: give its spectrum once"
            )
    w = table.wavelength_nm
    if o.window_nm is not None:
        lo, hi = o.window_nm
        if lo < w[0] - 1e-9 or hi > w[-1] + 1e-9:
            raise PlanError(
                "optics.window_nm",
                f"[{lo:g}, {hi:g}] nm reaches beyond the ε table ({w[0]:g}–{w[-1]:g} nm): narrow the "
                f"window or extend the table",
            )
    else:
        n = int(round((w[-1] - w[0]) / o.step_nm)) + 1
        if n > MAX_WAVELENGTHS:
            raise PlanError(
                "optics.step_nm",
                f"the table's range holds {n} wavelengths at {o.step_nm:g} nm; at most {MAX_WAVELENGTHS}: "
                f"take a larger step or give optics.window_nm",
            )
    plan._spectra_table = table
    return plan
