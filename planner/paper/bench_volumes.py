"""Volumes as the bench sees them: which device measures each stock, and what it is read to.

Volumes are written with the decimals of the plan's grid (:func:`planner.paper.fmt.volume`); this module
says, in words for the bench, how finely each dispenser is read: a glass scale to a fifth of its smallest
subdivision [common practice], a piston device to its display or setting step, a one-mark pipette to its
mark. No plan-file key appears in these texts.
"""

from __future__ import annotations

from collections.abc import Sequence

from ..inputs.plan import Plan
from ..uncertainty.catalogue import GlasswareItem, reading_resolution_mL
from . import fmt

__all__ = [
    "device_items",
    "grid_finer_than_reading",
    "reading_how",
    "reading_note",
    "reading_text",
    "titrant_unit",
    "volume_step_mL",
]


def device_items(plan: Plan) -> dict[str, GlasswareItem]:
    """Stock id → the catalogue item (with the plan's own figures) that dispenses it."""
    from ..jobs.devices import plan_devices  # light: `kplan check` prints these without the numerics

    devices = plan_devices(plan)
    return {
        s.id: devices.items[int(j)] for s, j in zip(plan.stock, devices.stock_device, strict=True) if j >= 0
    }


def _ml(x: float) -> str:
    return f"{x:g} mL" if x >= 0.001 else f"{x * 1000.0:g} µL"


def reading_how(item: GlasswareItem) -> str:
    """How finely a reading device is read, e.g. "(marks every 0.05 mL) to 0.01 mL"; "" for devices that
    are not read."""
    res = reading_resolution_mL(item)
    if item.kind == "piston-burette":
        return f"to {_ml(res)}" if res else ""
    if item.kind not in ("burette", "graduated-pipette"):
        return ""
    if res is None:
        return "to a fifth of its smallest subdivision"
    return f"(marks every {_ml(item.graduation_mL)}) to {_ml(res)}"  # type: ignore[arg-type]


def reading_text(item: GlasswareItem) -> str:
    """How a volume is measured out with ``item``, e.g. "read the class A 10 mL burette (marks every
    0.05 mL) to 0.01 mL"."""
    g = item.graduation_mL
    if item.kind == "pipette":
        return f"fill the {item.label} to its mark for each portion"
    if item.kind == "micropipette":
        step = f" (it sets in steps of {g * 1000.0:g} µL)" if g else ""
        return f"set the {item.label} to the volume shown{step}"
    what = f"the {item.label}'s display" if item.kind == "piston-burette" else f"the {item.label}"
    return " ".join(x for x in ("read", what, reading_how(item)) if x)


def reading_note(plan: Plan, stock_ids: Sequence[str]) -> str:
    """One sentence for a sheet: the grid the volumes are on and how each device that measures
    ``stock_ids`` is read."""
    items = device_items(plan)
    seen: list[GlasswareItem] = []
    for sid in stock_ids:
        it = items.get(sid)
        if it is not None and it not in seen:
            seen.append(it)
    step = plan.glassware.step_mL
    head = f"Volumes in mL, on a {fmt.volume(step, step)} mL grid"
    if not seen:
        return head + "."
    dials = [it for it in seen if it.kind == "micropipette" and it.graduation_mL is None]
    parts = [reading_text(it) for it in seen if it not in dials]
    if len(dials) > 1:  # one phrase for every micropipette set to the volume shown
        names = [it.label.removesuffix(" micropipette") for it in dials]
        parts.insert(0, f"set the {', '.join(names[:-1])} and {names[-1]} micropipettes to the volume shown")
    elif dials:
        parts.insert(0, reading_text(dials[0]))
    return f"{head}: {'; '.join(parts)}."


def grid_finer_than_reading(plan: Plan) -> list[tuple[str, float, float]]:
    """(device label, grid step, reading resolution) where the plan's grid asks for volumes finer than
    the device can be read to (a 0.01 mL grid on a burette read to 0.02 mL)."""
    step = plan.glassware.step_mL
    out = []
    for it in dict.fromkeys(device_items(plan).values()):
        res = reading_resolution_mL(it)
        if res is not None and step < res * (1 - 1e-9):
            out.append((it.label, step, res))
    return out


def volume_step_mL(plan: Plan) -> float:
    """The grid a plan's recipe volumes sit on: the titrant's under ``[titration]``, else the glassware's."""
    t = plan.titration
    return (t.step_mL or plan.glassware.step_mL) if t is not None else plan.glassware.step_mL


def titrant_unit(item: GlasswareItem | None) -> tuple[str, float]:
    """(unit, factor from mL) the titrant's volumes are written in: µL for a micropipette, whose dial
    reads µL, else mL (a burette's scale)."""
    if item is not None and item.kind == "micropipette":
        return "µL", 1000.0
    return "mL", 1.0
