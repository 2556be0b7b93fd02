"""In-cuvette titrations: the points as recipe rows, and the error budget of cumulative additions.

A start volume V₀ of the cell's stock is put in the cuvette, then aliquots v₁, v₂, … of the titrant; point
k holds V₀ of the cell stock and V_k = v₁ + … + v_k of the titrant in V₀ + V_k, so the totals follow the
cumulative dilution c = Σ c_s V_s / V_total exactly as for a tube made with those volumes.

The errors are not those of separate tubes, and how the titrant's errors correlate depends on the
dispenser [derived from how each is used; common practice] (domain.md §4, in-cuvette titration):
- aliquot devices (micropipette, one-mark or graduated pipette filled for each aliquot): the titrant added
  by point k is the sum of k deliveries, so their random errors accumulate along the titration,
  cov(V_k, V_l) = Σ_{j ≤ min(k, l)} σ_j² (a random walk);
- a burette or piston (syringe) burette, read before the first addition and after each one: the titrant
  added by point k is the difference of two readings, V_k = R_k − R_0, so the reading errors do not
  accumulate: cov(V_k, V_l) = u_read² (1 + δ_kl), every point sharing the first reading's error;
- the dispenser's calibration error (systematic, proportional to the volume for a burette, the same for
  every aliquot of a fixed-volume pipette) is shared by every point: it adds S_k S_l;
- the start volume's error (random and calibration) is shared by every point.
All are pushed through the same derivatives of the readings as the tube model (GUM JCGM 100:2008 §5).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..inputs.recipe import Recipe, RecipeError
from ..inputs.schedule import Schedule
from ..model.compiled import Model, TubeState
from ..model.jacobians import absorbance_derivatives
from . import catalogue, delivery
from .bench import Bench, TitrationSetup
from .covariance import ErrorBudget, stock_factors, volume_derivatives


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
    if reads_cumulatively(tit_dev) and added[-1] > tit_dev.capacity_mL * (1 + 1e-9):
        raise RecipeError(
            "schedule",
            f"the titration adds {added[-1]:g} mL of titrant, more than the {tit_dev.label} holds "
            f"({tit_dev.capacity_mL:g} mL) in one filling: use a larger burette, a more concentrated titrant "
            "or fewer additions",
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


def reads_cumulatively(item) -> bool:
    """Whether the titrant's dispenser is read along the titration (burette, piston burette) rather than
    delivering separate aliquots."""
    return item is not None and item.kind in catalogue.TITRANT_READING_KINDS


@dataclass(frozen=True)
class TitrantErrors:
    """Standard uncertainties of a titration's volumes (see the module docstring).

    Attributes
    ----------
    cumulative : True when the titrant's dispenser is read along the titration (burette, piston burette).
    aliquot_mL : (n,) random sd of each aliquot (aliquot devices; zeros for a burette).
    reading_mL : sd of one reading of a burette (0 for aliquot devices).
    reading_index : (n,) how many readings after the first point k's volume rests on (0: nothing added yet).
    systematic_mL : (n,) calibration (and temperature) sd of the titrant added by each point, shared.
    start_random_mL, start_systematic_mL : the start volume's random and calibration sd.
    """

    cumulative: bool
    aliquot_mL: np.ndarray
    reading_mL: float
    reading_index: np.ndarray
    systematic_mL: np.ndarray
    start_random_mL: float
    start_systematic_mL: float

    def random_cov(self) -> np.ndarray:
        """(n, n) covariance of the titrant added by each point from the random errors, mL²."""
        n = self.aliquot_mL.size
        if self.cumulative:
            m = self.reading_index
            pos = (m > 0).astype(float)
            same = (m[:, None] == m[None, :]).astype(float)
            return self.reading_mL**2 * np.outer(pos, pos) * (1.0 + same)
        walk = np.cumsum(self.aliquot_mL**2)
        return walk[np.minimum.outer(np.arange(n), np.arange(n))]  # Σ_{j ≤ min(k,l)} σ_j²


def titrant_errors(bench: Bench, recipe: Recipe, delta_T_C: float | None = None) -> TitrantErrors:
    """The standard uncertainties of a titration's volumes, by how they correlate."""
    t = _setup(bench)
    dT = bench.delta_T_C if delta_T_C is None else delta_T_C
    _, _, cell_dev, tit_dev = _devices(bench)
    v = aliquots_of(bench, recipe)
    d0 = delivery.delivery_uncertainty(cell_dev, np.array([t.start_volume_mL]), delta_T_C=dT)
    start = (float(d0.random_mL[0]), float(d0.systematic_mL[0]))
    if reads_cumulatively(tit_dev):
        added = np.cumsum(v)
        du = delivery.delivery_uncertainty(tit_dev, np.minimum(added, tit_dev.capacity_mL), delta_T_C=dT)
        return TitrantErrors(
            True, np.zeros_like(v), delivery.reading_u_mL(tit_dev), np.cumsum(v > 0), du.systematic_mL, *start
        )
    du = delivery.delivery_uncertainty(
        tit_dev, np.where(v > 0, np.maximum(v, delivery.smallest_delivery_mL(tit_dev)), 0.0), delta_T_C=dT
    )
    r = np.where(v > 0, du.random_mL, 0.0)
    s = np.where(v > 0, du.systematic_mL, 0.0)
    return TitrantErrors(False, r, 0.0, np.cumsum(v > 0), np.cumsum(s), *start)


def titration_budget(
    bench: Bench, model: Model, recipe: Recipe, state: TubeState, *, delta_T_C: float | None = None
) -> ErrorBudget:
    """Covariance of a titration's readings by source (see the module docstring)."""
    t = _setup(bench)
    ks, kt = bench.stock_index(t.cell), bench.stock_index(t.titrant)
    dA_dtot = absorbance_derivatives(model, state).dA_dtotals
    dA_dV, _ = volume_derivatives(bench, recipe, dA_dtot, model.stock_conc_M)  # "added": dilution included
    d_start, d_tit = dA_dV[:, ks], dA_dV[:, kt]
    e = titrant_errors(bench, recipe, delta_T_C)
    delivery_random = (
        np.outer(d_tit, d_tit) * e.random_cov() + np.outer(d_start, d_start) * e.start_random_mL**2
    )
    J_dev = np.column_stack([d_tit * e.systematic_mL, d_start * e.start_systematic_mL])  # calibration factors
    J_stock = stock_factors(model, recipe, dA_dtot)
    return ErrorBudget.from_factors(state.absorbance_sd**2, delivery_random, J_stock, J_dev)


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
    error per titration; every aliquot's random error accumulated along the points (aliquot devices), or
    every burette reading's error, the titrant added by point k being the difference of its reading and
    the first (burette, piston burette)."""
    t = _setup(bench)
    ks, kt = bench.stock_index(t.cell), bench.stock_index(t.titrant)
    n, k = recipe.volumes_mL.shape
    e = titrant_errors(bench, recipe)
    z_alq = rng.standard_normal((T, n + 1 if e.cumulative else n))
    z_cal = rng.standard_normal((T, 1))
    z0 = rng.standard_normal((T, 2)) if z_start is None else z_start
    V = np.broadcast_to(recipe.volumes_mL, (T, n, k)).copy()
    if delivery_errors:
        v = aliquots_of(bench, recipe)
        if e.cumulative:  # readings R_0 … R_m, each with its own error; V_k = R_{m_k} − R_0
            m = e.reading_index
            read = e.reading_mL * (z_alq[:, m] - z_alq[:, :1])
            added = np.cumsum(v) + np.where(m > 0, read, 0.0) + e.systematic_mL * z_cal
            V[:, :, kt] = np.maximum(added, 0.0)
        else:
            S = np.diff(np.concatenate([[0.0], e.systematic_mL]))  # each aliquot's calibration sd
            v_true = np.maximum(v + e.aliquot_mL * z_alq + S * z_cal, 0.0)
            V[:, :, kt] = np.cumsum(v_true, axis=1)
        V[:, :, ks] = np.maximum(
            t.start_volume_mL + e.start_random_mL * z0[:, :1] + e.start_systematic_mL * z0[:, 1:], 0.0
        )
    return V, V.sum(axis=-1)
