"""Figures of whole spectra (report and fit report): drawn here, computed in
:mod:`planner.jobs.spectra` — the species' spectra with where the information lies, the SE from one
wavelength against the whole spectrum, the tubes' expected spectra, the fitted spectra with their bands
and the singular values of a data matrix."""

from __future__ import annotations

import numpy as np

from . import fmt
from .figures import ACCENT, BAND, INK, WARN, _draw, _plain

__all__ = [
    "fitted_spectra_svg",
    "information_svg",
    "single_wavelength_svg",
    "singular_values_svg",
    "tube_spectra_svg",
]

PALETTE = ("#1d5fa7", "#c2570c", "#2f855a", "#6b46c1", "#b7791f", "#2c7a7b")


def information_svg(curves, share: np.ndarray, *, prefix: str = "fi") -> str:
    """The species' spectra (lines, left axis) and each wavelength's share of the information about the
    target (shaded, right axis)."""
    wl = curves.wavelength_nm

    def paint(fig, ax):
        for k, name in enumerate(curves.names):
            style = "-" if curves.fitted[k] else "--"
            ax.plot(wl, curves.epsilon[k], style, color=PALETTE[k % len(PALETTE)], label=_plain(name))
        ax.set_xlabel("wavelength / nm")
        ax.set_ylabel("ε / L mol⁻¹ cm⁻¹")
        ax.set_ylim(bottom=0)
        tw = ax.twinx()
        s = np.nan_to_num(np.asarray(share, dtype=float)) * 100
        tw.fill_between(wl, 0, s, color=BAND, lw=0, zorder=0)
        tw.plot(wl, s, color="#7b8794", lw=0.6)
        tw.set_ylabel("share of the information / %", color="#52606d")
        tw.set_ylim(0, max(float(s.max()), 1e-9) * 1.25)
        ax.set_zorder(tw.get_zorder() + 1)
        ax.patch.set_visible(False)
        ax.legend(loc="upper left", ncol=2)

    return _draw(prefix, paint)


def single_wavelength_svg(wl, se_single, eligible, se_whole: float, *, prefix: str = "fw") -> str:
    """SE of the target from each wavelength alone against the SE from the whole spectrum."""
    se = np.asarray(se_single, dtype=float)
    ok = np.isfinite(se) & np.asarray(eligible, dtype=bool)

    def paint(fig, ax):
        shown = np.where(ok, se, np.nan)
        ax.plot(wl, shown, color=ACCENT, label="one wavelength alone")
        ax.axhline(se_whole, color=WARN, lw=1.0, ls="--", label=f"whole spectrum, SE {fmt.sig(se_whole, 2)}")
        ax.set_yscale("log")
        if ok.any() and np.isfinite(se_whole) and se_whole > 0:  # singular spots would flatten the rest
            ax.set_ylim(se_whole / 2, min(float(np.nanmax(shown)), 300 * se_whole) * 1.5)
        ax.set_xlabel("wavelength / nm")
        ax.set_ylabel("SE of the target log β")
        ax.legend(loc="lower left")

    return _draw(prefix, paint)


def tube_spectra_svg(curves, *, prefix: str = "ft") -> str:
    """Each tube's expected spectrum over the linear-range band."""
    lo, hi = curves.linear_range
    wl = curves.wavelength_nm

    def paint(fig, ax):
        ax.axhspan(
            lo, hi, color=BAND, lw=0, label=f"linear range {fmt.fixed(lo, 0.01)}–{fmt.fixed(hi, 0.01)}"
        )
        n = len(curves.tubes)
        for i in range(n):
            shade = 0.25 + 0.75 * (i / max(n - 1, 1))
            ax.plot(wl, curves.absorbance[i], color=INK, alpha=shade, lw=0.8)
        top = max(hi, float(np.max(curves.absorbance)))
        ax.set_ylim(0, top * 1.1)
        ax.set_xlabel("wavelength / nm")
        ax.set_ylabel("expected absorbance")
        ax.legend(loc="upper left")

    return _draw(prefix, paint)


def fitted_spectra_svg(wl, names, epsilon, se, guess=None, *, prefix: str = "fe") -> str:
    """Fitted spectra with ±2 SE bands (and the plan's guesses dashed)."""

    def paint(fig, ax):
        for k, name in enumerate(names):
            c = PALETTE[k % len(PALETTE)]
            ax.fill_between(wl, epsilon[k] - 2 * se[k], epsilon[k] + 2 * se[k], color=c, alpha=0.2, lw=0)
            ax.plot(wl, epsilon[k], color=c, label=f"{_plain(name)} fitted ± 2 SE")
            if guess is not None:
                ax.plot(wl, guess[k], color=c, lw=0.8, ls="--")
        ax.set_xlabel("wavelength / nm")
        ax.set_ylabel("ε / L mol⁻¹ cm⁻¹")
        ax.legend(loc="upper left")

    return _draw(prefix, paint)


def singular_values_svg(sv, n_factors: int, *, prefix: str = "fv") -> str:
    """Singular values of the data matrix (log scale), the significant ones marked."""
    sv = np.asarray(sv, dtype=float)
    k = np.arange(1, sv.size + 1)

    def paint(fig, ax):
        ax.semilogy(k, sv, "o-", ms=3, color="#7b8794", lw=0.8)
        ax.semilogy(
            k[:n_factors], sv[:n_factors], "o", ms=4.5, color=ACCENT, label=f"{n_factors} significant"
        )
        ax.set_xlabel("factor")
        ax.set_ylabel("singular value")
        ax.legend(loc="upper right")

    return _draw(prefix, paint)
