"""In-cuvette titrations: the points as recipe rows, and the error budget of cumulative additions.

A start volume V₀ of the cell's stock is put in the cuvette, then aliquots v₁, v₂, … of the titrant; point
k holds V₀ of the cell stock and V_k = v₁ + … + v_k of the titrant in V₀ + V_k, so the totals follow the
cumulative dilution c = Σ c_s V_s / V_total exactly as for a tube made with those volumes.

The errors are not those of separate tubes:
- the titrant delivered by point k is the sum of k deliveries, so its random errors accumulate along the
  titration: cov(V_k, V_l) = Σ_{j ≤ min(k, l)} σ_j² (a random walk), and the dispenser's calibration error
  (systematic, proportional to the volume) is shared by every aliquot: it adds s_k s_l with
  s_k = Σ_{j ≤ k} s_j;
- the start volume's error (random and calibration) is shared by every point.
Both are pushed through the same derivatives of the readings as the tube model (GUM JCGM 100:2008 §5).
"""

from __future__ import annotations

import numpy as np

from ..inputs.recipe import Recipe, RecipeError
from ..inputs.schedule import Schedule
from ..model.compiled import Model, TubeState
from ..model.jacobians import absorbance_derivatives
from . import delivery
from .bench import Bench, TitrationSetup
from .covariance import ErrorBudget, volume_derivatives


def _setup(bench: Bench) -> TitrationSetup:
    """The bench's titration (the callers are reached only for titration plans)."""
    assert bench.titration is not None, "not a titration plan"
    return bench.titration


def _devices(bench: Bench):
    t = _setup(bench)
    ks, kt = bench.stock_index(t.cell), bench.stock_index(t.titrant)
    js, jt = bench.devices.stock_device[ks], bench.devices.stock_device[kt]
    return (
        ks,
        kt,
        (bench.devices.items[js] if js >= 0 else None),
        (bench.devices.items[jt] if jt >= 0 else None),
    )


def titration_recipe(bench: Bench, schedule: Schedule) -> Recipe:
    """The recipe rows of a schedule's points, after checking it against the cell and the dispensers.

    Raises
    ------
    RecipeError
        A schedule that overflows the cell, an aliquot the dispenser cannot deliver (below its smallest
        volume, above its capacity, off the grid), or stocks without a dispenser.
    """
    t = bench.titration
    if t is None:
        raise RecipeError(
            "schedule",
            "the plan has no [titration] table: a schedule needs one (cell, titrant, "
            "start_volume, max_volume)",
        )
    ks, kt, cell_dev, tit_dev = _devices(bench)
    if cell_dev is None:
        raise RecipeError(
            f"stock {t.cell}",
            "no dispenser delivers the start volume: add it to a [[glassware.dispenser]] stocks list",
        )
    if tit_dev is None:
        raise RecipeError(
            f"stock {t.titrant}",
            "no dispenser delivers the aliquots: add it to a "
            "[[glassware.dispenser]] stocks list (a micropipette or a syringe burette)",
        )
    v = schedule.aliquot_mL
    added = np.cumsum(v)
    room = t.max_volume_mL - t.start_volume_mL
    over = np.flatnonzero(added > room * (1 + 1e-9))
    if over.size:
        k = over[0]
        raise RecipeError(
            f"schedule step {schedule.steps[k]}",
            f"the cell would hold {t.start_volume_mL + added[k]:g} "
            f"mL, more than max_volume = {t.max_volume_mL:g} mL: use fewer or smaller aliquots",
        )
    used = v > 0
    vmin = delivery.smallest_delivery_mL(tit_dev)
    small = np.flatnonzero(used & (v < vmin * (1 - 1e-9)))
    if small.size:
        k = small[0]
        raise RecipeError(
            f"schedule step {schedule.steps[k]}",
            f"aliquot {v[k]:g} mL is below the smallest volume the "
            f"{tit_dev.label} delivers ({vmin:g} mL): use a more dilute titrant or a smaller dispenser",
        )
    big = np.flatnonzero(v > tit_dev.capacity_mL * (1 + 1e-9))
    if big.size:
        k = big[0]
        raise RecipeError(
            f"schedule step {schedule.steps[k]}",
            f"aliquot {v[k]:g} mL is more than the {tit_dev.label} "
            f"holds ({tit_dev.capacity_mL:g} mL): split it or use a larger dispenser",
        )
    off = np.flatnonzero(used & ~delivery.on_grid(v, t.step_mL))
    if off.size:
        k = off[0]
        raise RecipeError(
            f"schedule step {schedule.steps[k]}",
            f"aliquot {v[k]:g} mL is off the {t.step_mL:g} mL grid of the titrant's dispenser: round it",
        )
    n = v.size
    vols = np.zeros((n, len(bench.stock_ids)))
    vols[:, ks] = t.start_volume_mL
    vols[:, kt] = added
    return Recipe(schedule.steps, bench.stock_ids, vols, t.start_volume_mL + added)


def aliquots_of(bench: Bench, recipe: Recipe) -> np.ndarray:
    """(n,) the aliquot added before each point (the recipe rows are points of one titration)."""
    kt = bench.stock_index(_setup(bench).titrant)
    return np.diff(np.concatenate([[0.0], recipe.volumes_mL[:, kt]]))


def _parts(bench: Bench, recipe: Recipe, delta_T_C: float | None):
    """(random sd, systematic sd) of each aliquot (n,) and of the start volume (scalars)."""
    t = _setup(bench)
    dT = bench.delta_T_C if delta_T_C is None else delta_T_C
    _, _, cell_dev, tit_dev = _devices(bench)
    v = aliquots_of(bench, recipe)
    du = delivery.delivery_uncertainty(
        tit_dev, np.where(v > 0, np.maximum(v, delivery.smallest_delivery_mL(tit_dev)), 0.0), delta_T_C=dT
    )
    r = np.where(v > 0, du.random_mL, 0.0)
    s = np.where(v > 0, du.systematic_mL, 0.0)
    d0 = delivery.delivery_uncertainty(cell_dev, np.array([t.start_volume_mL]), delta_T_C=dT)
    return r, s, float(d0.random_mL[0]), float(d0.systematic_mL[0])


def titration_budget(
    bench: Bench, model: Model, recipe: Recipe, state: TubeState, *, delta_T_C: float | None = None
) -> ErrorBudget:
    """Covariance of a titration's readings by source (see the module docstring)."""
    t = _setup(bench)
    ks, kt = bench.stock_index(t.cell), bench.stock_index(t.titrant)
    dA_dtot = absorbance_derivatives(model, state).dA_dtotals
    dA_dV, _ = volume_derivatives(bench, recipe, dA_dtot, model.stock_conc_M)  # "added": dilution included
    d_start, d_tit = dA_dV[:, ks], dA_dV[:, kt]
    r, s, r0, s0 = _parts(bench, recipe, delta_T_C)
    n = recipe.n_tubes
    walk = np.cumsum(r**2)
    cov_rand_V = walk[np.minimum.outer(np.arange(n), np.arange(n))]  # Σ_{j ≤ min(k,l)} σ_j²
    S = np.cumsum(s)
    delivery_random = np.outer(d_tit, d_tit) * cov_rand_V + np.outer(d_start, d_start) * r0**2
    J_dev = np.column_stack([d_tit * S, d_start * s0])  # calibration factors
    J_stock = (
        (dA_dtot @ (model.stock_conc_M * model.stock_conc_rsd[:, None]).T)
        * recipe.volumes_mL
        / recipe.total_volume_mL[:, None]
    )
    return ErrorBudget(
        photometric=np.diag(state.absorbance_sd**2),
        delivery_random=delivery_random,
        delivery_systematic=J_dev @ J_dev.T,
        stock=J_stock @ J_stock.T,
        J_stock=J_stock,
        J_device=J_dev,
    )


def titration_volumes(
    bench: Bench,
    recipe: Recipe,
    rng: np.random.Generator,
    T: int,
    *,
    delivery_errors: bool,
    z_start: np.ndarray | None = None,
) -> tuple[np.ndarray, np.ndarray]:
    """T simulated titrations' volumes (T, n, k) and totals (T, n): one start volume and one calibration
    error per titration, every aliquot's random error, accumulated along the points."""
    t = _setup(bench)
    ks, kt = bench.stock_index(t.cell), bench.stock_index(t.titrant)
    n, k = recipe.volumes_mL.shape
    r, s, r0, s0 = _parts(bench, recipe, None)
    z_alq = rng.standard_normal((T, n))
    z_cal = rng.standard_normal((T, 1))
    z0 = rng.standard_normal((T, 2)) if z_start is None else z_start
    V = np.broadcast_to(recipe.volumes_mL, (T, n, k)).copy()
    if delivery_errors:
        v = aliquots_of(bench, recipe)
        v_true = np.maximum(v + r * z_alq + s * z_cal, 0.0)
        V[:, :, kt] = np.cumsum(v_true, axis=1)
        V[:, :, ks] = np.maximum(t.start_volume_mL + r0 * z0[:, :1] + s0 * z0[:, 1:], 0.0)
    return V, V.sum(axis=-1)
