"""What one wavelength of the window would give on its own: the Cramér–Rao SE of the target from the
readings at that wavelength alone, for every wavelength at once.

At each wavelength the single-wavelength fit estimates the free constants and the ε of every absorber
whose spectrum is unknown (as ``kplan assess`` does at ``optics.wavelength_nm``), with the readings'
covariance at that wavelength: photometric noise plus the tubes' delivery and stock errors (the same
budget, taken at that wavelength alone). A wavelength is eligible when the highest reading there is inside
the linear range (the survey's rule, :mod:`planner.jobs.classic.survey`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .reading import Expected, SpectraModel


@dataclass(frozen=True)
class SingleWavelengths:
    """The target's SE from each wavelength alone.

    Attributes
    ----------
    se : (W,) Cramér–Rao SE of the target from that wavelength's readings (inf where singular).
    eligible : (W,) the highest reading there inside the linear range.
    best : index of the eligible wavelength with the smallest SE (−1 when none is eligible).
    """

    se: np.ndarray
    eligible: np.ndarray
    best: int

    @property
    def best_se(self) -> float:
        return float(self.se[self.best]) if self.best >= 0 else float("nan")


def wavelength_rows(sm: SpectraModel, ex: Expected, theta: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """At every wavelength on its own: the Jacobian J (W, n, P + s) of its readings in the free constants
    and the ε of each fitted spectrum there, and the readings' covariance (W, n, n) at that wavelength."""
    C, dC, K, dK = sm.basis(np.atleast_2d(theta))
    E = sm.true_spectra()
    dA = dK[0] + np.einsum("nsp,sw->nwp", dC[0], E)  # (n, W, P)
    J = np.concatenate([dA, np.broadcast_to(C[0][:, None, :], dA.shape[:2] + C.shape[-1:])], axis=-1)
    J = np.swapaxes(J, 0, 1)  # (W, n, P + s)
    b = ex.budget
    S = np.swapaxes(b.factors(), 0, 1)  # (W, n, r)
    n = J.shape[1]
    cov = np.einsum("wn,nm->wnm", b.photometric_var.T, np.eye(n)) + S @ np.swapaxes(S, 1, 2)
    return J, cov


def single_wavelengths(sm: SpectraModel, ex: Expected, theta: np.ndarray) -> SingleWavelengths:
    """SE of the target from every wavelength on its own, vectorised over wavelengths."""
    t = sm.params.target
    J, cov = wavelength_rows(sm, ex, theta)
    F = np.swapaxes(J, 1, 2) @ np.linalg.solve(cov, J)
    se = np.full(J.shape[0], np.inf)
    if t >= 0:
        cond = np.linalg.cond(F)
        ok = np.isfinite(cond) & (cond < 1e14)
        if ok.any():
            se[ok] = np.sqrt(np.maximum(np.linalg.inv(F[ok])[:, t, t], 0.0))
    lo, hi = sm.model.linear_range
    top = ex.readings.absorbance.max(axis=0)
    eligible = (top >= lo) & (top <= hi) & np.isfinite(se)
    best = int(np.flatnonzero(eligible)[np.argmin(se[eligible])]) if eligible.any() else -1
    return SingleWavelengths(se, eligible, best)
