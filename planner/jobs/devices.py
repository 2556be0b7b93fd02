"""The plan's glassware looked up in the catalogue (light: ``kplan check`` uses it without the numerics)."""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from ..inputs.plan import PISTON_DISPENSERS, Dispenser, Plan, PlanError
from ..uncertainty import catalogue
from ..uncertainty.bench import Devices


def plan_devices(plan: Plan) -> Devices:
    """Look every dispenser (and the make-up flask) up in the glassware catalogue.

    Raises
    ------
    PlanError
        When the catalogue has no such device (naming the dispenser and the sizes it has).
    """
    items = []
    for j, d in enumerate(plan.glassware.dispenser):
        try:
            items.append(dispenser_item(d))
        except catalogue.GlasswareError as exc:
            what = (
                "systematic = '...' and repeatability = '...'" if d.kind in PISTON_DISPENSERS else "tolerance"
            )
            raise PlanError(f"glassware.dispenser[{j}]", f"{exc}; or give {what} to describe it") from None
    dev = np.full(len(plan.stock), -1, dtype=int)
    for k, s in enumerate(plan.stock):
        for j, d in enumerate(plan.glassware.dispenser):
            if s.id in d.stocks:
                dev[k] = j
                break
    flask = None
    if plan.glassware.make_up == "to-mark":
        f = plan.glassware.flask
        cap = f.capacity_mL if f else plan.glassware.tube_volume_mL
        try:
            flask = catalogue.lookup("flask", cap, f.cls if f else None, f.tolerance_mL if f else None)
        except catalogue.GlasswareError as exc:
            raise PlanError(
                "glassware.flask", f"{exc}; give flask = {{ capacity = '...', tolerance = '...' }}"
            ) from None
        if abs(flask.capacity_mL - plan.glassware.tube_volume_mL) > 1e-9 * flask.capacity_mL:
            raise PlanError(
                "glassware.flask",
                f"a {flask.capacity_mL:g} mL flask cannot make up {plan.glassware.tube_volume_mL:g} mL "
                f"tubes: make tube_volume and the flask capacity equal",
            )
    return Devices(tuple(items), dev, flask)


def dispenser_item(d: Dispenser) -> catalogue.GlasswareItem:
    """A plan's ``[[glassware.dispenser]]`` as a catalogue item, with the figures the plan states (its
    graduation, a measured repeatability, a micropipette's or piston burette's systematic error).

    Raises
    ------
    catalogue.GlasswareError
        A size the catalogue lacks and the plan does not describe, or figures it cannot use.
    """
    item = catalogue.lookup(
        d.kind,
        d.capacity_mL,
        d.cls,
        d.limit_mL,
        graduation_mL=d.graduation_mL,
        repeatability_mL=d.repeatability_mL,
    )
    if d.systematic_mL is not None:  # the lab's own figure, not a catalogue or certificate tolerance
        item = replace(item, source="systematic error measured by the lab (plan)")
    return item
