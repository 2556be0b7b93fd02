"""The error budget of whole spectra: every tube read at every wavelength.

The volumetric errors of a tube (each delivery's random error, the make-up flask, each device's
calibration, each stock's concentration) change the tube's totals of metal and ligand, and through them
its reading at every wavelength at once: they are perfectly correlated across the wavelengths of one
tube (and the shared ones across tubes). Only the photometric noise is independent per reading. So the
covariance of the n × W readings is

    Σ = diag(σ²_photometric) + G Σ_t Gᵀ,   G[(i, λ), (i, c)] = ∂A_iλ/∂t_ic,

with Σ_t the covariance of the 2n totals: a 2 × 2 block per tube from its own deliveries plus the low-rank
part every tube shares (stocks, devices). :func:`spectra_budget` returns Σ as the diagonal, the loadings
G (n, W, 2) and a square root R (n, 2, r) of Σ_t (R Rᵀ = Σ_t, r ≤ 2n), never an (nW)² matrix.
Propagation as in
:mod:`planner.uncertainty.budget` (GUM JCGM 100:2008 §5), the totals' derivatives by the volume chain
rule of :func:`planner.uncertainty.covariance.volume_derivatives`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..inputs.recipe import Recipe
from ..model.compiled import Model
from .bench import Bench
from .budget import delivery_sds
from .covariance import volume_derivatives


@dataclass(frozen=True)
class TotalsErrors:
    """The volumetric error budget of each tube's totals of M and L (mol/L).

    Attributes
    ----------
    random_cov : (n, 2, 2) covariance of each tube's own errors (its deliveries, its flask).
    shared : (n, 2, q) totals per 1-sd error of each stock's concentration (the first
        ``stock_columns`` columns) and each device's calibration (the rest), shared by every tube made
        with that stock or device.
    stock_columns : how many of the shared columns belong to stocks.
    """

    random_cov: np.ndarray
    shared: np.ndarray
    stock_columns: int

    def covariance(self) -> np.ndarray:
        """(2n, 2n) covariance of the totals, tube-major (M then L of tube 1, then tube 2, …)."""
        n = self.random_cov.shape[0]
        cov = np.zeros((2 * n, 2 * n))
        for c in range(2):
            for d in range(2):
                cov[c::2, d::2][np.diag_indices(n)] = self.random_cov[:, c, d]
        F = self.shared.reshape(2 * n, -1)
        return cov + F @ F.T


def totals_errors(bench: Bench, model: Model, recipe: Recipe) -> TotalsErrors:
    """Each tube's totals' error budget (see :class:`TotalsErrors`), vectorised over tubes."""
    n, k = recipe.volumes_mL.shape
    dV = np.empty((n, k, 2))
    dVtot = np.empty((n, 2))
    for c in range(2):  # the chain rule with "absorbance" = one total gives that total's derivatives
        dV[..., c], dVtot[:, c] = volume_derivatives(
            bench, recipe, np.broadcast_to(np.eye(2)[c], (n, 2)), model.stock_conc_M
        )
    sds = delivery_sds(bench, recipe)
    a = dV * sds.random_mL[..., None]  # (n, k, 2)
    b = dVtot * sds.flask_mL  # (n, 2)
    random_cov = np.einsum("nkc,nkd->ncd", a, a) + b[:, :, None] * b[:, None, :]
    devices = bench.devices
    onehot = (devices.stock_device[:, None] == np.arange(len(devices.items))[None, :]).astype(float)
    dev = np.einsum("nkc,kd->ncd", dV * sds.systematic_mL[..., None], onehot)
    # a stock's concentration error scales its share of each total: t_ic = Σ_k V_ik C_kc / V_i
    share = recipe.volumes_mL / recipe.total_volume_mL[:, None]  # (n, k)
    stock = share[:, None, :] * (model.stock_conc_M * model.stock_conc_rsd[:, None]).T[None, :, :]
    return TotalsErrors(random_cov, np.concatenate([stock, dev], axis=-1), k)


@dataclass(frozen=True)
class SpectraBudget:
    """Covariance of the linearised readings (n tubes × W wavelengths), by source, never (nW)².

    Attributes
    ----------
    photometric_var : (n, W) variance of each reading from the photometric noise, once the stray-light
        curve is undone (σ²/slope²).
    loadings : (n, W, 2) ∂A_iλ/∂(M_tot, L_tot) of each reading.
    mixing : (n, 2, r) R with R Rᵀ the covariance of the totals (tube-major): the volumetric part of the
        readings' covariance is G R Rᵀ Gᵀ (delivery and stock errors, correlated across the wavelengths
        of a tube and, for the shared ones, across tubes).
    sd_parts : {"photometric", "delivery", "stock"}: (n, W) sd of each reading from each part.
    """

    photometric_var: np.ndarray
    loadings: np.ndarray
    mixing: np.ndarray
    sd_parts: dict

    def factors(self) -> np.ndarray:
        """(n, W, r) S = G R, the volumetric part's square root (S Sᵀ)."""
        return np.einsum("iwc,icr->iwr", self.loadings, self.mixing)

    @property
    def total_sd(self) -> np.ndarray:
        """(n, W) sd of each reading from every source."""
        return np.sqrt(self.photometric_var + np.sum(self.factors() ** 2, axis=-1))

    def __repr__(self) -> str:
        return "SpectraBudget(" + ", ".join(f"{k} sd ≤ {v.max():.2g}" for k, v in self.sd_parts.items()) + ")"


def _sqrt_psd(cov: np.ndarray) -> np.ndarray:
    """R with R Rᵀ = cov for a positive semi-definite matrix (zero directions dropped)."""
    w, v = np.linalg.eigh(0.5 * (cov + cov.T))
    keep = w > max(float(w.max(initial=0.0)), 0.0) * 1e-14
    return v[:, keep] * np.sqrt(w[keep])


def spectra_budget(errors: TotalsErrors, dA_dtotals: np.ndarray, linear_sd: np.ndarray) -> SpectraBudget:
    """Push the totals' errors to every reading.

    Parameters
    ----------
    errors : the totals' budget (:func:`totals_errors`).
    dA_dtotals : (n, W, 2) ∂A_iλ/∂(M_tot, L_tot) of the Beer–Lambert absorbance.
    linear_sd : (n, W) photometric sd of the linearised readings.
    """
    n = dA_dtotals.shape[0]
    R = _sqrt_psd(errors.covariance()).reshape(n, 2, -1)  # (n, 2, r): S[i, λ, :] = Σ_c G[i, λ, c] R[i, c, :]
    rand = np.einsum("iwc,icd,iwd->iw", dA_dtotals, errors.random_cov, dA_dtotals)
    k = errors.stock_columns
    dev = np.einsum("iwc,icq->iwq", dA_dtotals, errors.shared[:, :, k:])
    stock = np.einsum("iwc,icq->iwq", dA_dtotals, errors.shared[:, :, :k])
    parts = {
        "photometric": linear_sd,
        "delivery": np.sqrt(np.maximum(rand, 0.0) + np.sum(dev**2, axis=-1)),
        "stock": np.sqrt(np.sum(stock**2, axis=-1)),
    }
    return SpectraBudget(linear_sd**2, dA_dtotals, R, parts)
