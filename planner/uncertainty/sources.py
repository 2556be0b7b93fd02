"""The error budget split by the source a user can change: each dispenser, the make-up flask, each
stock's concentration, the photometer.

The budget (:mod:`planner.uncertainty.budget`) keeps the covariance by kind (photometric, delivery,
stock); here the delivery part is split further by device — the random errors of every delivery a
device makes and its calibration error shared by all of them — because "use a better pipette for CU"
is a change a chemist can make, and "delivery" is not. The sources are independent and their
covariances add up to the budget's total (GUM JCGM 100:2008 §5.1, law of propagation of uncertainty).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..inputs.recipe import Recipe
from ..model.compiled import Model, TubeState
from ..model.jacobians import absorbance_derivatives
from .bench import Bench
from .budget import ErrorBudget, delivery_sds
from .covariance import volume_derivatives

KINDS = ("photometric", "device", "flask", "stock")


@dataclass(frozen=True)
class ErrorSource:
    """One independent source of the readings' covariance.

    Attributes
    ----------
    label : for people, e.g. "class A 10 mL burette (CU, DY)".
    kind : "photometric" | "device" | "flask" | "stock".
    index : the device's index in the bench (device), the stock's (stock), else −1.
    cov : (n, n) its covariance of the readings.
    """

    label: str
    kind: str
    index: int
    cov: np.ndarray


def error_sources(
    bench: Bench, model: Model, recipe: Recipe, state: TubeState, budget: ErrorBudget
) -> list[ErrorSource]:
    """The budget's covariance split by source (they add up to ``budget.total``); sources that add
    nothing (an unused device, a stock without uncertainty) are left out."""
    out = [ErrorSource("photometric noise", "photometric", -1, budget.photometric)]
    devices = bench.devices
    used = bench.dispensed_ids(recipe)
    if bench.titration is not None:  # cumulative additions: the random part is not per device
        if np.any(budget.delivery_random):
            out.append(
                ErrorSource("deliveries (random, along the titration)", "device", -1, budget.delivery_random)
            )
        for j, item in enumerate(devices.items):
            col = budget.J_device[:, j]
            if np.any(col):
                out.append(ErrorSource(f"{item.label} (calibration)", "device", j, np.outer(col, col)))
    else:
        dA_dtotals = absorbance_derivatives(model, state).dA_dtotals
        dA_dV, dA_dVtot = volume_derivatives(bench, recipe, dA_dtotals, model.stock_conc_M)
        sds = delivery_sds(bench, recipe)
        for j, item in enumerate(devices.items):
            ks = [k for k, sid in enumerate(recipe.stock_ids) if devices.stock_device[k] == j and sid in used]
            if not ks:
                continue
            var = np.sum((dA_dV[:, ks] * sds.random_mL[:, ks]) ** 2, axis=1)
            col = budget.J_device[:, j]
            cov = np.diag(var) + np.outer(col, col)
            if np.any(cov):
                sids = ", ".join(recipe.stock_ids[k] for k in ks)
                out.append(ErrorSource(f"{item.label} ({sids})", "device", j, cov))
        if devices.flask is not None and sds.flask_mL > 0:
            var = (dA_dVtot * sds.flask_mL) ** 2
            out.append(ErrorSource(f"make-up flask ({devices.flask.label})", "flask", -1, np.diag(var)))
    for k, sid in enumerate(recipe.stock_ids):
        col = budget.J_stock[:, k]
        if np.any(col):
            rsd = float(model.stock_conc_rsd[model.stock_ids.index(sid)])
            out.append(ErrorSource(f"stock {sid} concentration (±{rsd:.2%})", "stock", k, np.outer(col, col)))
    return out
