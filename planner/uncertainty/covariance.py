"""The covariance of a set of readings, by source, and the derivatives of a reading by each volume.

Shared by the tube budget (:mod:`planner.uncertainty.budget`) and the titration budget
(:mod:`planner.uncertainty.titration`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..inputs.recipe import Recipe
from ..model.compiled import Model
from .bench import Bench


@dataclass(frozen=True)
class ErrorBudget:
    """Covariance of the n absorbance readings, by source.

    Attributes
    ----------
    photometric : (n, n) diagonal: photometric noise of each reading.
    delivery_random : (n, n) diagonal: random delivery errors and the make-up flask.
    delivery_systematic : (n, n) rank ≤ number of devices: calibration errors shared per device.
    stock : (n, n) rank ≤ number of stocks: stock concentration errors shared across tubes.
    J_stock : (n, k) dA_i per 1-sd error of stock k's concentration (the stock factors).
    J_device : (n, d) dA_i per 1-sd calibration error of device d.
    """

    photometric: np.ndarray
    delivery_random: np.ndarray
    delivery_systematic: np.ndarray
    stock: np.ndarray
    J_stock: np.ndarray
    J_device: np.ndarray

    @classmethod
    def from_factors(
        cls,
        photometric_var: np.ndarray,
        delivery_random: np.ndarray,
        J_stock: np.ndarray,
        J_device: np.ndarray,
    ) -> ErrorBudget:
        """The budget whose shared parts are the outer products of their factors (S Sᵀ per source)."""
        return cls(
            photometric=np.diag(photometric_var),
            delivery_random=delivery_random,
            delivery_systematic=J_device @ J_device.T,
            stock=J_stock @ J_stock.T,
            J_stock=J_stock,
            J_device=J_device,
        )

    @property
    def delivery(self) -> np.ndarray:
        return self.delivery_random + self.delivery_systematic

    @property
    def total(self) -> np.ndarray:
        return self.photometric + self.delivery + self.stock

    @property
    def independent(self) -> np.ndarray:
        """The per-tube (diagonal) part: photometric + random delivery."""
        return self.photometric + self.delivery_random

    def sd_parts(self) -> dict[str, np.ndarray]:
        """(n,) sd of each tube's absorbance from each part (their squares add up to the total)."""
        return {
            "photometric": np.sqrt(np.diag(self.photometric)),
            "delivery": np.sqrt(np.diag(self.delivery)),
            "stock": np.sqrt(np.diag(self.stock)),
        }

    def __repr__(self) -> str:
        sd = self.sd_parts()
        return "ErrorBudget(" + ", ".join(f"{k} sd ≤ {v.max():.2g}" for k, v in sd.items()) + ")"


def volume_derivatives(bench: Bench, recipe: Recipe, dA_dtotals: np.ndarray, stock_conc_M: np.ndarray):
    """dA_i/dV_ik for every stock (n, k) and dA_i/dV_total,i (n,) (make-up volume).

    Under ``to-mark`` the total volume is the flask's; under ``added`` it is the sum of the volumes, so a
    delivery also dilutes everything else.
    """
    V = recipe.total_volume_mL
    tot = (recipe.volumes_mL @ stock_conc_M) / V[:, None]  # (n, 2)
    dA_dV = (dA_dtotals @ stock_conc_M.T) / V[:, None]  # (n, k)
    dA_dVtot = -np.sum(dA_dtotals * tot, axis=-1) / V  # (n,)
    if not bench.to_mark:
        dA_dV = dA_dV + dA_dVtot[..., None]
    return dA_dV, dA_dVtot


def stock_factors(model: Model, recipe: Recipe, dA_dtotals: np.ndarray) -> np.ndarray:
    """(n, k) dA_i per 1-sd error of stock k's concentration: dA/dC_k · C_k · rsd_k, C_k entering tube i
    diluted by V_ik / V_i."""
    return (
        (dA_dtotals @ (model.stock_conc_M * model.stock_conc_rsd[:, None]).T)
        * recipe.volumes_mL
        / recipe.total_volume_mL[:, None]
    )
