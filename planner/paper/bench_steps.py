"""What the bench is told before the tubes: order of addition, dispensers, blank and checklist."""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

from ..inputs.errors import KplanError
from ..inputs.plan import Plan
from ..inputs.recipe import Recipe
from . import fmt

DEFAULT_ADDITION = ("medium", "ligand", "other", "metal")
"""Default order of addition by role: buffer or diluent first, then ligand, then metal last, so the
metal never meets a concentrated reagent in an undiluted drop, where it could precipitate or
hydrolyse [common practice]."""

PREFILL_FRACTION = 0.5  # put in about half of the smallest diluent share first [common practice]
MIX_INVERSIONS = 10  # inversions to mix a stoppered volumetric flask [common practice]


class RenderError(KplanError):
    """A sheet cannot be made as asked; the message names the argument and the fix."""


@dataclass(frozen=True)
class Step:
    """One line of the order of addition: what to add and a short reason (may be "")."""

    text: str
    why: str = ""


# --------------------------------------------------------------------------------------------------
# order of addition
# --------------------------------------------------------------------------------------------------
def stock_role(plan: Plan, sid: str) -> str:
    """'metal' (holds M), 'ligand' (holds L only), 'medium' (buffer/diluent: neither) or 'other'."""
    s = plan.stock_by_id(sid)
    if "M" in s.conc:
        return "metal"
    if "L" in s.conc:
        return "ligand"
    if s.diluent or not s.conc:
        return "medium"
    return "other"  # pragma: no cover - a stock's conc only holds M or L today


def addition_order(plan: Plan, recipe: Recipe, order: Sequence[str] | None = None) -> tuple[str, ...]:
    """The dispensed stocks in the order they go into each tube.

    ``order`` (stock ids, e.g. from a future plan key) overrides the default; it must list every
    dispensed stock once. The default sorts by :data:`DEFAULT_ADDITION`, plan order within a role.

    Raises
    ------
    RenderError
        When ``order`` misses, repeats or invents a stock.
    """
    dispensed = recipe.dispensed_ids(plan)
    if order is not None:
        order = tuple(order)
        unknown = [s for s in order if s not in dispensed]
        missing = [s for s in dispensed if s not in order]
        if unknown or missing or len(set(order)) != len(order):
            raise RenderError(
                f"order = {list(order)}: list every dispensed stock once ({', '.join(dispensed)})"
                + (f"; unknown: {', '.join(unknown)}" if unknown else "")
                + (f"; missing: {', '.join(missing)}" if missing else "")
            )
        return order
    rank = {r: i for i, r in enumerate(DEFAULT_ADDITION)}
    return tuple(sorted(dispensed, key=lambda s: (rank[stock_role(plan, s)], dispensed.index(s))))


def _nice_floor(x: float) -> float:
    """Largest 1, 2 or 5 × 10^k not above ``x`` (a round volume to pour by eye)."""
    if not x > 0:
        return 0.0
    e = math.floor(math.log10(x))
    for m in (5.0, 2.0, 1.0):
        if m * 10.0**e <= x * (1 + 1e-12):
            return m * 10.0**e
    return 10.0 ** (e - 1) * 5.0  # pragma: no cover - unreachable: 1 × 10^e ≤ x always


def addition_steps(plan: Plan, recipe: Recipe, order: tuple[str, ...], custom: bool) -> list[Step]:
    """The order of addition as sentences, stated once above the tube table."""
    g = plan.glassware
    dil = plan.diluent
    steps: list[Step] = []
    to_mark = g.make_up == "to-mark" and dil is not None
    if to_mark:
        least = float(recipe.column(dil.id).min())
        prefill = _nice_floor(PREFILL_FRACTION * least)
        if prefill >= 0.1 * g.tube_volume_mL:
            steps.append(
                Step(
                    f"about {fmt.sig(prefill, 2)} mL of {dil.id} first (by eye)",
                    "nothing is added to an empty flask",
                )
            )
        else:
            steps.append(
                Step(f"a little {dil.id} first where there is room", "nothing is added to an empty flask")
            )
    for sid in order:
        role = stock_role(plan, sid)
        d = plan.dispenser_for(sid)
        how = f" from the {dispenser_text(d)}" if d else ""
        why = ""
        if not custom and role == "metal" and sid == order[-1]:
            why = "last, into the diluted medium, so it cannot precipitate or hydrolyse"
        label = {"metal": "metal", "ligand": "ligand", "medium": "medium", "other": "stock"}[role]
        steps.append(Step(f"{sid} ({label}){how}", why))
    if to_mark:
        steps.append(
            Step(
                f"{dil.id} to the mark; stopper and invert {MIX_INVERSIONS} times",
                "mix only once the volume is complete",
            )
        )
    else:
        steps.append(Step("cap and mix by inverting (or draw up and expel a few times in the cuvette)"))
    return steps


# --------------------------------------------------------------------------------------------------
# small texts
# --------------------------------------------------------------------------------------------------
def dispenser_text(d) -> str:
    """The plan's dispenser as the bench names it ("class A 10 mL burette", "1000 µL micropipette"); no
    class where the plan gives the device by its tolerance alone."""
    from ..jobs.compile import dispenser_item

    return dispenser_item(d).label


def blank_text(plan: Plan) -> tuple[str, str]:
    """(short name, full sentence) of the blank to zero the instrument on."""
    dil = plan.diluent
    if dil is None:
        media = [s for s in plan.stock if not s.conc]
        if len(media) == 1:
            dil = media[0]
    if dil is not None:
        name = f"{dil.id} ({dil.label})" if dil.label else dil.id
        return name, f"zero the instrument on a tube of {name}"
    name = "the medium without metal or ligand"
    return name, (
        "zero the instrument on a tube made like the others with the metal and ligand stocks "
        "left out (their volume replaced by water or the medium)"
    )


def checklist(plan: Plan, blank: str) -> list[str]:
    """The measurement steps, in our own words."""
    o = plan.optics
    wl = f"{fmt.sig(o.wavelength_nm, 3)} nm"
    lo, hi = (fmt.fixed(x, 0.01) for x in o.linear_range)
    if o.has_spectra:
        return _spectra_checklist(plan, blank, lo, hi)
    return [
        "Switch the spectrophotometer on early so the lamp is warm and stable before the first reading.",
        f"Set the wavelength to {wl}.",
        f"Fill a clean cuvette with the blank, {blank}, and zero the instrument on it at {wl}.",
        "For each tube: rinse the cuvette twice with a little of that tube's solution, fill it, wipe the "
        "clear faces with lens tissue, and put it in the holder the same way round every time.",
        "Read each tube and write the value in the empty “measured A” column of the tube table.",
        f"Re-read the blank every few tubes; re-zero if it has drifted. A reading outside {lo}–{hi} "
        "is outside the linear range: note it rather than dilute the tube.",
    ]


def spectrum_text(plan: Plan) -> str:
    """The range the instrument records, e.g. "400–700 nm every 1 nm (bandwidth 2 nm)"."""
    from ..jobs.compile_spectra import window_grid

    o = plan.optics
    w = window_grid(plan)
    slit = f" (bandwidth {o.bandwidth_nm:g} nm)" if o.bandwidth_nm else ""
    return f"{w[0]:g}–{w[-1]:g} nm every {o.step_nm:g} nm{slit}"


def _spectra_checklist(plan: Plan, blank: str, lo: str, hi: str) -> list[str]:
    span = spectrum_text(plan)
    return [
        "Switch the spectrophotometer on early so the lamp is warm and stable before the first reading.",
        f"Set it to record the spectrum {span}.",
        f"Fill a clean cuvette with the blank, {blank}, and record the baseline on it over that whole range.",
        "For each tube: rinse the cuvette twice with a little of that tube's solution, fill it, wipe the "
        "clear faces with lens tissue, and put it in the holder the same way round every time.",
        "Record each tube's spectrum and save it under the tube's label; write its highest reading in the "
        "empty “measured A” column of the tube table.",
        f"Re-record the blank every few tubes; re-zero if it has drifted. Parts of a spectrum above {hi} are "
        "outside the linear range: note them rather than dilute the tube.",
    ]
