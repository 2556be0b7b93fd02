"""What sets the mass weighed for a stock: the recipe's need, the flask, or the balance's minimum weight.

A stock is made up in a volumetric flask; its mass to weigh is ``c·V·M/P`` for that flask (QUAM A1), so
the flask's size sets the mass, and the flask is chosen from what the recipe needs (with its rinse and
dead volume), the plan's own flask, the volume to keep on hand, or a usual minimum. When that mass is
below the balance's minimum weight (USP <41>: ``m ≥ 2000·s``), a concentrate is weighed and diluted
(:func:`planner.uncertainty.stocks.prepare_stock`), and the minimum weight sets the mass instead.

For a scarce reagent the flask is the smallest catalogue flask that holds what the recipe needs, and a
dilution chain is chosen for the least reagent weighed rather than the best precision.
"""

from __future__ import annotations

from dataclasses import dataclass

from ...uncertainty import stocks as stk

__all__ = [
    "DEFAULT_MIN_FLASK_mL",
    "FLASK_REASONS",
    "FlaskChoice",
    "MassBasis",
    "choose_flask",
    "mass_basis",
]

DEFAULT_MIN_FLASK_mL = 50.0
"""Smallest flask a stock is made in unless it is scarce: below it, weighing and make-up errors grow and
a second batch is soon needed [common practice]."""

FLASK_REASONS = ("plan", "recipe", "on-hand", "default", "least-reagent")
"""Why a stock's flask has its size: the plan names it, it is the smallest that holds what the recipe
needs, it holds the volume to keep on hand, it is the usual minimum (:data:`DEFAULT_MIN_FLASK_mL`), or
(a scarce stock) a larger flask lets a dilution chain reach the minimum weight with less reagent."""


@dataclass(frozen=True)
class FlaskChoice:
    """The flask a stock is made up in and why it has that size (one of :data:`FLASK_REASONS`)."""

    flask_mL: float
    reason: str


def choose_flask(
    plan_flask_mL: float | None, need_mL: float | None, on_hand_mL: float | None, *, scarce: bool = False
) -> FlaskChoice:
    """The plan's flask for the stock, else the smallest catalogue flask holding what is needed.

    Not scarce: the largest of the recipe's need, the volume on hand and :data:`DEFAULT_MIN_FLASK_mL`.
    Scarce: the recipe's need alone (the volume on hand when there is no recipe; else the usual minimum).

    Raises
    ------
    StockError
        More than the largest flask holds.
    """
    if plan_flask_mL:
        return FlaskChoice(float(plan_flask_mL), "plan")
    wants = {"recipe": need_mL or 0.0, "on-hand": on_hand_mL or 0.0, "default": DEFAULT_MIN_FLASK_mL}
    if scarce:
        if need_mL:
            wants = {"recipe": need_mL}
        elif on_hand_mL:
            wants = {"on-hand": on_hand_mL}
    reason = max(wants, key=lambda k: wants[k])
    return FlaskChoice(stk.flask_for_volume(wants[reason]).capacity_mL, reason)


@dataclass(frozen=True)
class MassBasis:
    """What sets the mass of a weighed stock.

    Attributes
    ----------
    set_by : "recipe" (the smallest flask that holds what the recipe needs), "flask" (a larger flask: the
        plan's, the volume on hand, or the usual minimum — see ``flask_reason``) or "minimum-weight" (the
        mass in the flask would be below the balance's minimum weight, so a concentrate is weighed).
    flask_reason : why the final flask has its size (one of :data:`FLASK_REASONS`).
    mass_g : the mass weighed, g.
    recipe_mass_g : the reagent the recipe's volume holds (tubes, rinse and dead volume), g; None without a
        recipe.
    min_weight_g : the balance's USP <41> minimum weight, g.
    direct_mass_g : the mass a direct weighing into the final flask would need, g.
    repeatability_to_weigh_directly_g : the balance repeatability at which ``direct_mass_g`` reaches the
        minimum weight (``m/2000``, USP <41>), g; None when the mass is not set by the minimum weight.
    scarce : the stock was planned as scarce.
    least_mass_g : the least this balance and the catalogue's glassware let one weigh for the recipe: the
        mass of the scarce plan of this stock, g.
    """

    set_by: str
    flask_reason: str
    mass_g: float
    recipe_mass_g: float | None
    min_weight_g: float
    direct_mass_g: float
    repeatability_to_weigh_directly_g: float | None
    scarce: bool
    least_mass_g: float | None = None


def mass_basis(
    prep: stk.StockPreparation,
    flask: FlaskChoice,
    need_mL: float | None,
    *,
    scarce: bool,
    scarce_prep: stk.StockPreparation | None = None,
) -> MassBasis:
    """What sets ``prep``'s mass (see :class:`MassBasis`); ``scarce_prep`` is the same stock planned as
    scarce (``prep`` itself when it is), the least reagent one can weigh for it."""
    per_mL = prep.mass_g / (prep.weighed_conc_M * prep.weighed_flask.capacity_mL)  # g per (mol/L · mL)
    recipe_mass = None if need_mL is None else prep.conc_M * need_mL * per_mL
    if prep.steps:
        set_by = "minimum-weight"
    elif flask.reason in ("recipe", "least-reagent"):
        set_by = "recipe"
    else:
        set_by = "flask"
    alt = None if scarce_prep is None else min(scarce_prep.mass_g, prep.mass_g)
    return MassBasis(
        set_by,
        flask.reason,
        prep.mass_g,
        recipe_mass,
        prep.min_weight_g,
        prep.direct_mass_g,
        prep.direct_mass_g / stk.USP41_FACTOR if set_by == "minimum-weight" else None,
        scarce,
        alt,
    )
