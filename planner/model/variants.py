"""Variants of a compiled model: the same tubes with one more species (an alternative stoichiometry the
main model leaves out), used to ask whether a recipe's data could tell the two apart."""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from .compiled import Model

DEFAULT_SIZE_ANGSTROM = 4.0  # Å, as for the plan's own species without a size [common practice]


def with_species(
    model: Model, name: str, stoich: tuple[int, int, int], log_beta: float, epsilon_M_cm: float
) -> Model:
    """``model`` with one more species M_p L_q H_r (its constant held at ``log_beta``, not fitted).

    Parameters
    ----------
    stoich : (p, q, r) of the new species.
    log_beta : log10 of its overall constant, in the plan's medium.
    epsilon_M_cm : its molar absorptivity at the working wavelength, L mol⁻¹ cm⁻¹.
    """
    if name in model.species or name in ("M", "L", "H"):
        raise ValueError(f"species '{name}' is already in the model")
    return replace(
        model,
        species=(*model.species, name),
        stoich=np.vstack([model.stoich, np.asarray(stoich, dtype=int)[None, :]]),
        log_beta=np.append(model.log_beta, float(log_beta)),
        log_beta_sd=np.append(model.log_beta_sd, 0.0),
        sizes_angstrom=np.append(model.sizes_angstrom, DEFAULT_SIZE_ANGSTROM),
        absorbers=(*model.absorbers, name),
        epsilon_M_cm=np.append(model.epsilon_M_cm, float(epsilon_M_cm)),
        epsilon_rsd=np.append(model.epsilon_rsd, 0.0),
    )


def default_alternatives(model: Model, target: str) -> list[tuple[str, tuple[int, int, int], float, float]]:
    """The usual doubts about a single 1:1 complex: a 1:2 (ML2) and a 2:1 (M2L) complex as well.

    Each is guessed with a second stepwise constant a statistical factor of 4 below the first,
    log β₂ = 2 log β₁ − log 4 (two equivalent sites) [from memory: the statistical effect on stepwise
    constants], and the same molar absorptivity as ML per complex. Returns (name, (p, q, r), log β, ε);
    empty unless the target is the model's only M–L complex and it is 1:1.
    """
    j = model.index(target)
    p, q, r = (int(x) for x in model.stoich[j])
    if (p, q, r) != (1, 1, 0) or int(model.complex_mask.sum()) != 1:
        return []
    lb2 = 2.0 * float(model.log_beta[j]) - float(np.log10(4.0))
    eps = float(model.epsilon_M_cm[2 + j])
    out = []
    for name, st in (("ML2", (1, 2, 0)), ("M2L", (2, 1, 0))):
        if name not in model.species:
            out.append((name, st, lb2, eps))
    return out
