"""Dilution chains: the search over one-mark pipettes and volumetric flasks for a stock too dilute to weigh
directly, vectorised per chain length."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import NamedTuple

import numpy as np

from .catalogue import REPEATABILITY_PER_U_CALIBRATION, GlasswareItem
from .delivery import delivery_uncertainty, flask_volume_uncertainty, u_triangular
from .weighing import mass_for_conc_g

PIPETTE_DRAW_FRACTION = 0.5
"""An aliquot may use at most half of the solution it is drawn from, leaving enough to rinse the
pipette with that solution first [common practice]."""
SCARCE_MASS_SLACK = 0.05
"""For a scarce reagent, chains weighing within 5 % of the least mass count as equally frugal and the
most precise of them is chosen [design choice: 5 % of a few hundred mg is below a weighing's scatter
on a spatula]."""

CHAIN_U_SLACK = 0.01
"""Dilution chains whose relative uncertainty is within 1 % (relative) of the best are treated as
equally precise, and the one weighing the least reagent is chosen [design choice: a 1 % change in a
stock's u is invisible next to the other terms of a fit]."""


@dataclass(frozen=True)
class DilutionStep:
    """One aliquot: ``pipette`` of ``from_conc_M`` made up to the mark of ``flask``.

    Attributes
    ----------
    pipette : GlasswareItem
        One-mark pipette delivering the aliquot.
    flask : GlasswareItem
        Volumetric flask the aliquot is made up in.
    from_conc_M, to_conc_M : float
        Concentration drawn from and obtained, mol/L.
    u_rel : float
        Relative standard uncertainty of this step's dilution factor (pipette and flask, combined).
    """

    pipette: GlasswareItem
    flask: GlasswareItem
    from_conc_M: float
    to_conc_M: float
    u_rel: float

    @property
    def factor(self) -> float:
        """Dilution factor, flask / pipette volume."""
        return self.flask.capacity_mL / self.pipette.capacity_mL


def single_volume_u_rel(
    item: GlasswareItem, repeatability_mL: float | None = None, delta_T_C: float = 0.0
) -> float:
    """Relative combined u of one fill (flask) or one delivery (one-mark pipette)."""
    if item.kind == "flask":
        rep = (
            REPEATABILITY_PER_U_CALIBRATION * float(u_triangular(item.tolerance_mL))
            if repeatability_mL is None
            else repeatability_mL
        )
        return flask_volume_uncertainty(item, delta_T_C=delta_T_C, repeatability_mL=rep) / item.capacity_mL
    d = delivery_uncertainty(item, item.capacity_mL, delta_T_C=delta_T_C, repeatability_mL=repeatability_mL)
    return float(d.combined_mL) / item.capacity_mL


class ChainItems(NamedTuple):
    """Capacities (mL) and relative volume uncertainties of the glassware a dilution chain may use."""

    V: np.ndarray  # flask capacities
    v: np.ndarray  # pipette capacities
    u_weighed: np.ndarray  # each flask as the weighed one (temperature counted there only)
    u_flask: np.ndarray  # each flask as an intermediate one
    u_pip: np.ndarray
    u_final: float
    V_final: float


def best_chain(
    conc,
    final,
    fw,
    purity,
    u_m,
    min_wt,
    u_purity_rel,
    delta_T_C,
    flask_rep,
    flasks,
    pipettes,
    max_chain,
    prefer="precision",
):
    """Search every chain of 1..max_chain steps, vectorised per chain length; None if none fits."""
    # Per-item relative uncertainties, computed once (temperature only at the weighed flask).
    items = ChainItems(
        V=np.array([f.capacity_mL for f in flasks]),
        v=np.array([q.capacity_mL for q in pipettes]),
        u_weighed=np.array([single_volume_u_rel(f, flask_rep, delta_T_C) for f in flasks]),
        u_flask=np.array([single_volume_u_rel(f) for f in flasks]),
        u_pip=np.array([single_volume_u_rel(q) for q in pipettes]),
        u_final=single_volume_u_rel(final),
        V_final=final.capacity_mL,
    )
    found = []  # prefer="reagent": (mass, u, k, index) of the best chain of each length
    for k in range(1, max_chain + 1):
        shape, ok, mass, u2 = chains_of_length(k, items, conc, fw, purity, u_purity_rel)
        ok &= mass >= min_wt
        if not ok.any():
            continue
        u_rel = np.sqrt(u2 + (u_m / mass) ** 2).ravel()
        found.append(pick_of_length(prefer, k, shape, np.flatnonzero(ok), mass.ravel(), u_rel))
        if prefer != "reagent":
            break
    if not found:
        return None
    if prefer == "reagent":
        least = min(f[0] for f in found)
        found = sorted(
            (f for f in found if f[0] <= (1.0 + SCARCE_MASS_SLACK) * least), key=lambda f: (f[1], f[2])
        )
    _, _, k, best = found[0]
    return build_chain(
        best,
        k,
        conc,
        final,
        fw,
        purity,
        u_m,
        u_purity_rel,
        flasks,
        pipettes,
        items.u_weighed,
        items.u_flask,
        items.u_pip,
        items.u_final,
    )


def chains_of_length(k: int, items: ChainItems, conc, fw, purity, u_purity_rel):
    """Every chain of ``k`` steps at once: its grid shape, which chains are allowed (aliquot ≤ half the
    solution drawn from, at least twofold dilution), the mass weighed and the squared relative
    uncertainty without the balance term."""
    V, v = items.V, items.v
    nF, nP = V.size, v.size
    # Axes: V0 (weighed flask), then (pipette, flask) for each of the k-1 intermediate steps, then
    # the last pipette into the final flask. Broadcast index grids keep this a handful of arrays.
    shape = (nF,) + (nP, nF) * (k - 1) + (nP,)
    idx = np.indices(shape, sparse=True)
    i_flasks = [idx[0]] + [idx[2 + 2 * j] for j in range(k - 1)]  # V0, V1..V_{k-1}
    i_pips = [idx[1 + 2 * j] for j in range(k - 1)] + [idx[-1]]  # v1..vk
    vols_from = [V[i] for i in i_flasks]  # solution each aliquot comes from
    vols_to = [V[i] for i in i_flasks[1:]] + [np.asarray(items.V_final)]  # flask each aliquot goes into
    vols_pip = [v[i] for i in i_pips]

    ok = np.ones(shape, dtype=bool)
    log_factor = np.zeros(shape)
    u2 = np.broadcast_to(items.u_weighed[idx[0]] ** 2 + u_purity_rel**2 + items.u_final**2, shape).copy()
    for j in range(k):
        ok &= vols_pip[j] <= PIPETTE_DRAW_FRACTION * vols_from[j]
        ok &= vols_to[j] >= 2.0 * vols_pip[j]
        log_factor = log_factor + np.log(vols_to[j] / vols_pip[j])
        u2 = u2 + items.u_pip[i_pips[j]] ** 2
    for j in range(1, k):
        u2 = u2 + items.u_flask[i_flasks[j]] ** 2
    weighed_conc = conc * np.exp(log_factor)
    mass = weighed_conc * V[idx[0]] * 1e-3 * fw / purity
    return shape, ok, mass, u2


def pick_of_length(prefer: str, k: int, shape, flat: np.ndarray, mass: np.ndarray, u_rel: np.ndarray):
    """The best allowed chain of one length (``flat``: allowed chains' flat indices) as (mass, u, k,
    index); for ``prefer="precision"`` mass and u are not needed later and are returned as 0."""
    if prefer == "reagent":
        # the least reagent that still reaches the minimum weight; of those within the slack, the
        # most precise
        m = mass[flat]
        near = flat[m <= (1.0 + SCARCE_MASS_SLACK) * m.min()]
        i = near[np.argmin(u_rel[near])]
        return (float(mass[i]), float(u_rel[i]), k, np.unravel_index(i, shape))
    # Chains within CHAIN_U_SLACK of the best u are equally good in practice: of those, weigh the
    # least reagent (less waste, less exposure); then the smaller u.
    near = flat[u_rel[flat] <= (1.0 + CHAIN_U_SLACK) * u_rel[flat].min()]
    order = np.lexsort((u_rel[near], mass[near]))
    return (0.0, 0.0, k, np.unravel_index(near[order[0]], shape))


def build_chain(
    best, k, conc, final, fw, purity, u_m, u_purity_rel, flasks, pipettes, u_weighed, u_flask, u_pip, u_final
) -> dict:
    i_flasks = [int(best[0])] + [int(best[2 + 2 * j]) for j in range(k - 1)]
    i_pips = [int(best[1 + 2 * j]) for j in range(k - 1)] + [int(best[-1])]
    to_items = [flasks[i] for i in i_flasks[1:]] + [final]
    to_u = [u_flask[i] for i in i_flasks[1:]] + [u_final]
    # Work backwards from the final concentration so the chain's last step lands exactly on conc_M.
    concs = [conc]
    for j in reversed(range(k)):
        concs.insert(0, concs[0] * to_items[j].capacity_mL / pipettes[i_pips[j]].capacity_mL)
    steps = tuple(
        DilutionStep(
            pipette=pipettes[i_pips[j]],
            flask=to_items[j],
            from_conc_M=concs[j],
            to_conc_M=concs[j + 1],
            u_rel=math.hypot(u_pip[i_pips[j]], to_u[j]),
        )
        for j in range(k)
    )
    weighed_flask = flasks[i_flasks[0]]
    mass = mass_for_conc_g(concs[0], weighed_flask.capacity_mL, fw, purity)
    parts = {"balance": u_m / mass, "purity": u_purity_rel, "flask": float(u_weighed[i_flasks[0]])}
    parts.update({f"dilution_{j + 1}": s.u_rel for j, s in enumerate(steps)})
    u_rel = math.sqrt(sum(x * x for x in parts.values()))
    return dict(
        mass_g=mass,
        u_conc_M=u_rel * conc,
        u_parts=parts,
        steps=steps,
        weighed_flask=weighed_flask,
        weighed_conc_M=concs[0],
    )
