"""The titration sheet: the cell, each addition with the volume added so far, the expected reading with its
band, an empty column for the reading, when to stop, and the safety box."""

from __future__ import annotations

import numpy as np

from ..uncertainty.catalogue import TITRANT_READING_KINDS
from . import fmt
from .bench_volumes import device_items, reading_how, titrant_unit
from .sheets import dispenser_text, safety_context


def _titrant_step(t, tit, disp, item) -> str:
    """The sentence saying how each portion is added (read along a burette, or set on a pipette)."""
    who = tit.label or tit.id
    if item is not None and item.kind in TITRANT_READING_KINDS:
        return (
            f"Fill the {item.label} with {who}, read it {reading_how(item)} and write that first reading "
            "down. "
            f"For each step below: run in the portion below the surface, read the burette again, "
            f"{t.equilibrate}, then write the absorbance in the empty column. The volume added so far is "
            "the reading minus the first one; do not refill the burette during the titration."
        )
    return (
        f"For each step below: add the portion of {who}"
        + (f" with the {dispenser_text(disp)}" if disp else "")
        + f" below the surface, {t.equilibrate}, then write the reading in the empty column."
    )


def titration_context(plan, recipe, assessment, *, date: str, paper: str) -> dict:
    """Template context (plain values only) of the titration sheet for the schedule's points ``recipe``."""
    t = plan.titration
    cell = plan.stock_by_id(t.cell)
    tit = plan.stock_by_id(t.titrant)
    o = plan.optics
    lo, hi = o.linear_range
    kt = recipe.stock_ids.index(t.titrant)
    added = recipe.volumes_mL[:, kt]
    items = device_items(plan)
    item = items.get(t.titrant)
    unit, f = titrant_unit(item)
    step = t.step_mL or plan.glassware.step_mL
    v_step = step * f  # the portions' grid in the unit they are written in
    cell_dec = max(fmt.step_decimals(step), fmt.step_decimals(t.start_volume_mL), 2)
    aliquots = np.diff(np.concatenate([[0.0], added]))
    rows = []
    absorbance, sd_all = assessment.state.absorbance.tolist(), assessment.absorbance_sd.tolist()
    for i, (a, sd) in enumerate(zip(absorbance, sd_all, strict=True)):
        rows.append(
            {
                "step": recipe.tubes[i],
                "aliquot": fmt.volume(aliquots[i] * f, v_step),
                "added": fmt.volume(added[i] * f, v_step),
                "cell": f"{t.start_volume_mL + added[i]:.{cell_dec}f}",
                "expected": f"{fmt.fixed(a, 0.001)} ± {fmt.fixed(2 * sd, 0.001)}",
                "out": not lo <= a <= hi,
            }
        )
    disp = plan.dispenser_for(t.titrant)
    start_disp = plan.dispenser_for(t.cell)
    start = f"{t.start_volume_mL:.{cell_dec}f}"
    steps = [
        "Switch the spectrophotometer on early so the lamp is stable; set the wavelength to "
        f"{fmt.sig(o.wavelength_nm, 3)} nm and zero it on a cuvette of the medium the stocks are made in.",
        f"Deliver {start} mL of {cell.label or cell.id} into the clean, dry cell"
        + (f" with the {dispenser_text(start_disp)}" if start_disp else "")
        + ".",
        _titrant_step(t, tit, disp, item),
        f"Stop, and tell the person in charge, if a reading falls outside "
        f"{fmt.fixed(lo, 0.01)}–{fmt.fixed(hi, 0.01)} "
        "(the instrument's linear range) or is far outside its expected band, if the cell would hold "
        "more than "
        f"{t.max_volume_mL:.{cell_dec}f} mL, or if the solution turns cloudy.",
    ]
    cumulative = item is not None and item.kind in TITRANT_READING_KINDS
    return {
        "title": plan.title,
        "date": date,
        "paper": paper,
        "rows": rows,
        "steps": steps,
        "unit": unit,
        "added_head": "Added so far (reading − first)" if cumulative else "Added so far",
        "error_note": (
            "each burette reading, the start volume and the stock concentrations (the burette's reading "
            "errors do not add up along the titration)"
            if cumulative
            else "each portion (their errors add up along the titration), the start volume and the stock "
            "concentrations"
        ),
        "facts": [
            ("Wavelength", f"{fmt.sig(o.wavelength_nm, 3)} nm"),
            ("Path", f"{o.path_cm:g} cm"),
            ("Cell at start", f"{start} mL"),
            ("Cell at most", f"{t.max_volume_mL:.{cell_dec}f} mL"),
            ("Titrant", tit.label or tit.id),
            ("Additions", str(len(rows))),
        ],
        "safety": safety_context(plan),
    }


def titration_sheet(plan, recipe, assessment, *, paper: str = "A4", fmt_: str = "pdf", date=None) -> bytes:
    from .render import date_text, output_bytes, render_html, validate_paper_format

    validate_paper_format(paper, fmt_)
    ctx = titration_context(plan, recipe, assessment, date=date_text(date), paper=paper)
    return output_bytes(render_html("titration_sheet.html.j2", ctx), fmt_)
