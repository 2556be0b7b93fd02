"""Monte-Carlo experiments: whole studies drawn with every error source, all trials at once.

Each simulated experiment draws each stock's concentration error once (shared by its tubes), each
device's calibration error once, every delivery's random error, each tube's make-up volume, and the
photometric noise of every reading. The randomness comes only from the ``rng`` passed in.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..inputs.recipe import Recipe
from ..model.compiled import Model, TubeState, predict, tube_ions_M
from ..uncertainty.bench import Bench
from ..uncertainty.budget import delivery_sds


@dataclass(frozen=True)
class Experiments:
    """T simulated experiments of an n-tube recipe.

    Attributes
    ----------
    absorbance : (T, n) simulated readings.
    totals_M : (T, n, 2) the true totals in each simulated tube (what the nominal recipe missed).
    state : TubeState of the true tubes (noise-free readings), batch shape (T, n).
    """

    absorbance: np.ndarray
    totals_M: np.ndarray
    state: TubeState


def simulate(
    bench: Bench,
    model: Model,
    recipe: Recipe,
    rng: np.random.Generator,
    n_trials: int,
    *,
    log_beta: np.ndarray | None = None,
    epsilon_M_cm: np.ndarray | None = None,
    photometric: bool = True,
    delivery: bool = True,
    stock: bool = True,
) -> Experiments:
    """Draw ``n_trials`` whole experiments of ``recipe``.

    Parameters
    ----------
    log_beta, epsilon_M_cm : the "true" constants and absorptivities (default: the plan's guesses);
        (S,) / (2 + S,) for all trials, or (T, S) / (T, 2 + S) per trial.
    photometric, delivery, stock : switch each error source on or off.
    """
    T = int(n_trials)
    n, k = recipe.volumes_mL.shape
    sds = delivery_sds(bench, recipe)
    devices = bench.devices
    V = np.broadcast_to(recipe.volumes_mL, (T, n, k)).copy()
    C = np.broadcast_to(model.stock_conc_M, (T, k, 2)).copy()
    # draw in a fixed order so each source's stream does not depend on the others' switches
    z_stock = rng.standard_normal((T, k))
    z_dev = rng.standard_normal((T, max(len(devices.items), 1)))
    z_del = rng.standard_normal((T, n, k))
    z_flask = rng.standard_normal((T, n))
    z_read = rng.standard_normal((T, n))
    if stock:
        C = C * (1.0 + model.stock_conc_rsd[None, :, None] * z_stock[:, :, None])
    if bench.titration is not None:  # one titration per trial: accumulated aliquots, one start volume
        from ..uncertainty.titration import titration_volumes

        V, _ = titration_volumes(bench, recipe, rng, T, delivery_errors=delivery)
    elif delivery:
        dev = devices.stock_device
        z_sys = np.where(dev[None, :] >= 0, z_dev[:, np.maximum(dev, 0)], 0.0)  # (T, k)
        V = V + sds.random_mL * z_del + sds.systematic_mL * z_sys[:, None, :]
        V = np.where(recipe.volumes_mL > 0, np.maximum(V, 0.0), 0.0)
    if bench.to_mark and bench.titration is None:
        Vtot = np.broadcast_to(recipe.total_volume_mL, (T, n)).copy()
        if delivery:
            Vtot = Vtot + sds.flask_mL * z_flask
    else:
        Vtot = V.sum(axis=-1)
    totals = np.einsum("tnk,tkc->tnc", V, C) / Vtot[..., None]
    ions = tube_ions_M(model, V, Vtot)
    lb = None if log_beta is None else np.asarray(log_beta, dtype=float)
    eps = None if epsilon_M_cm is None else np.asarray(epsilon_M_cm, dtype=float)
    state = predict(model, totals, ions, log_beta=lb, epsilon_M_cm=eps, warn=False)
    a = state.absorbance
    if photometric:
        a = a + state.absorbance_sd * z_read
    return Experiments(a, totals, state)
