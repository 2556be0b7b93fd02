"""Compile a plan's whole-spectrum keys (``optics.spectra``, ``window_nm``, ``step_nm``, ``bandwidth_nm``,
``edge_rise``, ``spectra_rsd``, ``[optics.bands]``) into :class:`planner.model.spectra.Spectra`.

Where each absorber's spectrum comes from: its column in the ε table, else its Gaussian band; an absorber
with neither does not absorb in the window. Its relative uncertainty: the table's ``<name>_rsd`` column,
else its ``rsd`` column, else ``optics.spectra_rsd.<name>``, else ``optics.epsilon.<name>.rsd``, else 0
(a known spectrum). A spectrum with rsd > 0 anywhere is fitted, one ε per wavelength.
"""

from __future__ import annotations

import numpy as np

from ..inputs.plan import Plan
from ..model import spectra as sp
from ..model.compiled import Model

__all__ = [
    "alternative_spectra",
    "build_spectra",
    "instrument_at_working_wavelength",
    "own_spectrum",
    "table_epsilon_at",
    "window_grid",
]


def window_grid(plan: Plan) -> np.ndarray:
    """The instrument's wavelengths: ``window_nm`` (default: the ε table's range) every ``step_nm``."""
    o = plan.optics
    if o.window_nm is not None:
        lo, hi = o.window_nm
    else:
        w = plan.spectra_table.wavelength_nm
        lo, hi = float(w[0]), float(w[-1])
    g = np.round(lo + o.step_nm * np.arange(int(round((hi - lo) / o.step_nm)) + 1), 9)
    return g[g <= hi + 1e-9]


def _rsd(plan: Plan, name: str, table_rsd: np.ndarray | None, size: int) -> np.ndarray:
    if table_rsd is not None and np.all(np.isfinite(table_rsd)):
        return table_rsd
    o = plan.optics
    if name in o.spectra_rsd:
        single = o.spectra_rsd[name]
    elif name in o.epsilon:
        single = o.epsilon[name].rsd
    else:
        single = 0.0
    return np.full(size, float(single))


def _absorber_spectra(plan: Plan, absorbers, grid: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(W, 2 + S) ε and rsd of every absorber on ``grid`` (zeros for those without a spectrum)."""
    o = plan.optics
    table = plan.spectra_table
    eps = np.zeros((grid.size, len(absorbers)))
    rsd = np.zeros_like(eps)
    if table is not None:
        smooth = sp.slit_smoothed(table.wavelength_nm, table.epsilon_M_cm, grid, o.bandwidth_nm)
        rsd_tab = sp.slit_smoothed(table.wavelength_nm, np.nan_to_num(table.rsd), grid, None)
        for j, name in enumerate(table.names):
            if name not in absorbers:  # an alternative of the model check: alternative_spectra
                continue
            a = absorbers.index(name)
            eps[:, a] = smooth[:, j]
            has = bool(np.all(np.isfinite(table.rsd[:, j])))
            rsd[:, a] = _rsd(plan, name, rsd_tab[:, j] if has else None, grid.size)
    for name, band in o.bands.items():
        if name not in absorbers:
            continue
        a = absorbers.index(name)
        eps[:, a] = sp.band_spectrum(grid, band.peak_nm, band.fwhm_nm, band.epsilon_max, o.bandwidth_nm)
        rsd[:, a] = _rsd(plan, name, None, grid.size)
    return eps, rsd


def build_spectra(plan: Plan, model: Model) -> sp.Spectra | None:
    """The plan's spectra over the instrument's window, or None for a single-wavelength plan."""
    if not plan.optics.has_spectra:
        return None
    o = plan.optics
    grid = window_grid(plan)
    eps, rsd = _absorber_spectra(plan, model.absorbers, grid)
    stray, noise = sp.instrument(grid, o.stray_light, (o.noise.k1, o.noise.k2, o.noise.k3), o.edge_rise)
    free = np.any(rsd > 0, axis=0) & np.any(eps > 0, axis=0)
    return sp.Spectra(grid, eps, rsd, free, stray, noise, o.display_step)


def table_epsilon_at(plan: Plan, name: str) -> tuple[float, float] | None:
    """(ε, rsd) of ``name`` at ``optics.wavelength_nm`` from the ε table (bandwidth applied), or None
    when the table has no column for it: the single-wavelength jobs read a table plan there."""
    table = plan.spectra_table
    if table is None or name not in table.names:
        return None
    j = table.names.index(name)
    at = np.array([plan.optics.wavelength_nm])
    e = sp.slit_smoothed(table.wavelength_nm, table.epsilon_M_cm[:, [j]], at, plan.optics.bandwidth_nm)[0, 0]
    col = table.rsd[:, j]
    tab = np.interp(at, table.wavelength_nm, col) if np.all(np.isfinite(col)) else None
    return float(e), float(_rsd(plan, name, tab, 1)[0])


def instrument_at_working_wavelength(plan: Plan) -> tuple[float, tuple[float, float, float]]:
    """Stray light and noise terms at ``optics.wavelength_nm``: the plan's own values, or, when the plan
    records a window, the window's instrument there (stray light and readout noise rise toward its ends,
    :func:`planner.model.spectra.instrument`), so one wavelength and the whole spectrum agree on it."""
    o = plan.optics
    n = o.noise
    if not o.has_spectra:
        return o.stray_light, (n.k1, n.k2, n.k3)
    grid = window_grid(plan)
    stray, k = sp.instrument(grid, o.stray_light, (n.k1, n.k2, n.k3), o.edge_rise)
    w = float(np.clip(o.wavelength_nm, grid[0], grid[-1]))
    return float(np.interp(w, grid, stray)), tuple(float(np.interp(w, grid, k[:, j])) for j in range(3))


def own_spectrum(plan: Plan, name: str, grid: np.ndarray) -> np.ndarray | None:
    """(W,) ε of ``name`` on ``grid`` from its column in the ε table or its band, or None without one."""
    o = plan.optics
    table = plan.spectra_table
    if table is not None and name in table.names:
        j = table.names.index(name)
        return sp.slit_smoothed(table.wavelength_nm, table.epsilon_M_cm[:, [j]], grid, o.bandwidth_nm)[:, 0]
    band = o.bands.get(name)
    if band is not None:
        return sp.band_spectrum(grid, band.peak_nm, band.fwhm_nm, band.epsilon_max, o.bandwidth_nm)
    return None


def alternative_spectra(
    plan: Plan, model: Model, spectra: sp.Spectra | None, alternatives: tuple[tuple[str, Model], ...]
) -> tuple[np.ndarray, ...]:
    """(W,) spectrum of the species each alternative model adds, for the model check with whole spectra.

    Its own column in the ε table or its band when the plan gives one; otherwise the target's spectrum
    scaled to the alternative's ε at ``optics.wavelength_nm`` (the single-wavelength check's ε, which
    defaults to the target's: then the same spectrum per complex). Empty without spectra.
    """
    if spectra is None:
        return ()
    grid = spectra.wavelength_nm
    j = model.absorbers.index(plan.target)
    target = spectra.epsilon_M_cm[:, j]
    eps_t = float(model.epsilon_M_cm[j])
    out = []
    for name, alt in alternatives:
        own = own_spectrum(plan, name, grid)
        if own is None:
            eps_a = float(alt.epsilon_M_cm[alt.absorbers.index(name)])
            own = target * (eps_a / eps_t if eps_t > 0 else 1.0)
        out.append(np.asarray(own, dtype=float))
    return tuple(out)
