"""The error budget: covariance of the tubes' absorbances from every source, kept apart.

Sources:
- photometric noise of each reading (three-term model), independent per tube;
- each delivery's random error (reading, repeatability), independent per tube and delivery;
- each device's calibration error, shared by every delivery from that device (burette, pipette);
- the make-up volume (one flask per tube under ``to-mark``), independent per tube;
- each stock's concentration error, systematic: shared by every tube made from that stock.

They are pushed through the model linearly, with the analytic derivatives of
:func:`planner.model.jacobians.absorbance_derivatives` and the chain rule to volumes and stock
concentrations (GUM JCGM 100:2008 §5, law of propagation of uncertainty).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..inputs.recipe import Recipe, RecipeError
from ..inputs.text import tube_list
from ..model.compiled import Model, TubeState
from ..model.jacobians import absorbance_derivatives
from . import delivery
from .bench import Bench
from .covariance import ErrorBudget, stock_factors, volume_derivatives
from .titration import titration_budget

__all__ = [
    "PARTS",
    "ErrorBudget",
    "error_budget",
    "error_factors",
    "glassware_problems",
    "require_glassware_fits",
    "volume_derivatives",
]

PARTS = ("photometric", "delivery", "stock")


def glassware_problems(bench: Bench, recipe: Recipe) -> list[tuple[str, str]]:
    """Every way the recipe does not fit the glassware: (key, message) pairs, empty if it fits.

    Checks: a dispensed stock with no dispenser, volumes off the plan's grid, below ``min_volume``,
    more than the device's capacity in one delivery, a one-mark pipette asked for another volume, or
    (under ``make_up = "to-mark"``) a flask left with less than ``make_up_min`` for the diluent, where
    it could not be made up to the mark.
    """
    devices = bench.devices
    out: list[tuple[str, str]] = []
    if bench.titration is not None:  # a titration's points were checked when the schedule was read
        return out
    if bench.to_mark and bench.diluent_id is not None and bench.diluent_id in recipe.stock_ids:
        rest = recipe.volumes_mL[:, recipe.stock_ids.index(bench.diluent_id)]
        short = rest < bench.make_up_min_mL - 1e-9
        if short.any():
            out.append(
                (
                    "glassware.make_up_min",
                    f"{tube_list(recipe.tubes, short, 4)} leave {rest[short].min():g} mL of "
                    f"{bench.diluent_id} to make up to the mark, less than make_up_min = "
                    f"{bench.make_up_min_mL:g} mL: dispense at most {bench.room_mL:g} mL in all (more "
                    "concentrated stocks or fewer mL of each)",
                )
            )
    for sid in bench.dispensed_ids(recipe):
        k = recipe.stock_ids.index(sid)
        v = recipe.volumes_mL[:, k]
        used = v > 0
        if not used.any():
            continue
        j = devices.stock_device[k]
        if j < 0:
            out.append(
                (
                    f"stock {sid}",
                    "no dispenser delivers it: add its id to a [[glassware.dispenser]] stocks list",
                )
            )
            continue
        out.extend((f"stock {sid}", m) for m in _delivery_problems(bench, devices.items[j], recipe.tubes, v))
    return out


def _delivery_problems(bench: Bench, item, labels, v: np.ndarray) -> list[str]:
    """What the dispenser ``item`` cannot deliver of one stock's volumes ``v`` (one per tube)."""
    used = v > 0

    def first(mask) -> str:
        return ", ".join([t for t, m in zip(labels, mask, strict=True) if m][:4])

    off = used & ~delivery.on_grid(v, bench.step_mL)
    off_txt = [f"{t} ({x:g} mL)" for t, x, o in zip(labels, v, off, strict=True) if o]
    vmin = delivery.smallest_delivery_mL(item)
    cap = item.capacity_mL
    wrong = used & (np.abs(v - cap) > 1e-9 * cap) if item.kind == "pipette" else np.zeros_like(used)
    tests = (
        (
            off,
            lambda: (
                f"volumes off the {bench.step_mL:g} mL grid in {', '.join(off_txt[:4])}"
                f"{' …' if len(off_txt) > 4 else ''}: round them to the grid"
            ),
        ),
        (
            small := used & (v < bench.min_volume_mL - 1e-12),
            lambda: (
                f"below min_volume = {bench.min_volume_mL:g} mL in {first(small)}: use a more dilute "
                "stock or a smaller dispenser"
            ),
        ),
        (
            tiny := used & (v < vmin * (1 - 1e-9)),
            lambda: (
                f"below the smallest volume the {item.label} delivers ({vmin:g} mL) in "
                f"{tube_list(labels, tiny, 4)}: use a smaller device or a more dilute stock"
            ),
        ),
        (
            over := used & (v > cap * (1 + 1e-9)),
            lambda: (
                f"more than the {item.label} holds ({cap:g} mL) in {first(over)}: use a larger device "
                "or a more concentrated stock"
            ),
        ),
        (
            wrong,
            lambda: (
                f"a one-mark pipette delivers only {cap:g} mL (asked otherwise in {first(wrong)}): use "
                "a burette or graduated pipette"
            ),
        ),
    )
    return [message() for mask, message in tests if mask.any()]


def require_glassware_fits(bench: Bench, recipe: Recipe) -> None:
    """Raise :class:`RecipeError` for the first glassware problem of the recipe."""
    problems = glassware_problems(bench, recipe)
    if problems:
        raise RecipeError(*problems[0])


@dataclass(frozen=True)
class DeliverySds:
    """Standard uncertainties of every volume in a recipe.

    Attributes
    ----------
    random_mL : (n, k) independent per tube and delivery.
    systematic_mL : (n, k) calibration part, fully correlated across deliveries of the same device.
    flask_mL : sd of each tube's make-up volume (0 under ``added``).
    """

    random_mL: np.ndarray
    systematic_mL: np.ndarray
    flask_mL: float


def delivery_sds(bench: Bench, recipe: Recipe, *, delta_T_C: float | None = None) -> DeliverySds:
    """Random and systematic sd of every (tube, stock) volume, and of the make-up volume."""
    devices = bench.devices
    dT = bench.delta_T_C if delta_T_C is None else delta_T_C
    n, k = recipe.volumes_mL.shape
    u_rand = np.zeros((n, k))
    u_sys = np.zeros((n, k))
    dispensed = bench.dispensed_ids(recipe)
    for kk, sid in enumerate(recipe.stock_ids):  # a handful of stocks; each vectorised over tubes
        j = devices.stock_device[kk]
        if sid not in dispensed or j < 0:
            continue
        item = devices.items[j]
        v = recipe.volumes_mL[:, kk]
        if item.kind == "pipette":
            # a one-mark pipette may be used several times for a multiple of its volume
            reps = np.round(v / item.capacity_mL)
            du = delivery.delivery_uncertainty(item, np.where(reps > 0, item.capacity_mL, 0.0), delta_T_C=dT)
            u_rand[:, kk] = du.random_mL * np.sqrt(reps)
            u_sys[:, kk] = du.systematic_mL * reps
            continue
        one = np.minimum(v, item.capacity_mL)
        # below the device's smallest volume its specification does not hold (flagged by the glassware
        # check); take the uncertainty at that smallest volume instead of refusing to assess
        vmin = delivery.smallest_delivery_mL(item)
        du = delivery.delivery_uncertainty(item, np.where(v > 0, np.maximum(one, vmin), 0.0), delta_T_C=dT)
        # a volume beyond capacity needs refills: each refill is another delivery
        refills = np.maximum(np.ceil(v / item.capacity_mL - 1e-9), 1.0)
        u_rand[:, kk] = np.where(v > 0, du.random_mL * np.sqrt(refills), 0.0)
        u_sys[:, kk] = np.where(v > 0, du.systematic_mL * v / np.where(one > 0, one, 1.0), 0.0)
    u_flask = 0.0
    if devices.flask is not None:
        u_flask = float(delivery.flask_volume_uncertainty(devices.flask, delta_T_C=dT))
    return DeliverySds(u_rand, u_sys, u_flask)


@dataclass(frozen=True)
class ErrorFactors:
    """The error budget without n × n matrices (for many candidate tubes at once).

    Attributes
    ----------
    photometric_var : (n,) photometric variance of each reading.
    delivery_random_var : (n,) random delivery and make-up variance of each reading.
    J_stock : (n, k) dA per 1-sd concentration error of each stock (shared across tubes).
    J_device : (n, d) dA per 1-sd calibration error of each device (shared across its deliveries).
    """

    photometric_var: np.ndarray
    delivery_random_var: np.ndarray
    J_stock: np.ndarray
    J_device: np.ndarray

    @property
    def independent_var(self) -> np.ndarray:
        return self.photometric_var + self.delivery_random_var


def error_factors(
    bench: Bench,
    model: Model,
    recipe: Recipe,
    state: TubeState,
    *,
    delta_T_C: float | None = None,
    dA_dtotals: np.ndarray | None = None,
    sds: DeliverySds | None = None,
) -> ErrorFactors:
    """Per-tube variances and shared-error factors (see :class:`ErrorFactors`); vectorised over tubes.

    ``sds`` (:func:`delivery_sds` of the recipe) depends on the volumes only: a caller that evaluates
    the same tubes at several parameter values computes it once."""
    if dA_dtotals is None:
        dA_dtotals = absorbance_derivatives(model, state).dA_dtotals
    dA_dV, dA_dVtot = volume_derivatives(bench, recipe, dA_dtotals, model.stock_conc_M)
    if sds is None:
        sds = delivery_sds(bench, recipe, delta_T_C=delta_T_C)
    devices = bench.devices
    var_rand = np.sum((dA_dV * sds.random_mL) ** 2, axis=-1) + (dA_dVtot * sds.flask_mL) ** 2
    nd = len(devices.items)
    onehot = (devices.stock_device[:, None] == np.arange(nd)[None, :]).astype(float)  # (k, d)
    J_dev = (dA_dV * sds.systematic_mL) @ onehot
    J_stock = stock_factors(model, recipe, dA_dtotals)
    return ErrorFactors(state.absorbance_sd**2, var_rand, J_stock, J_dev)


def error_budget(
    bench: Bench, model: Model, recipe: Recipe, state: TubeState, *, delta_T_C: float | None = None
) -> ErrorBudget:
    """Propagate every error source to the covariance of the tubes' absorbances.

    Parameters
    ----------
    delta_T_C : lab temperature minus the glassware's calibration temperature (default: the plan's).
    """
    if bench.titration is not None:  # cumulative additions: correlated along the titration
        return titration_budget(bench, model, recipe, state, delta_T_C=delta_T_C)
    f = error_factors(bench, model, recipe, state, delta_T_C=delta_T_C)
    return ErrorBudget.from_factors(f.photometric_var, np.diag(f.delivery_random_var), f.J_stock, f.J_device)
