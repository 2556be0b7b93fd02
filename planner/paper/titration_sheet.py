"""The titration sheet: the cell, each addition with the volume added so far, the expected reading with its
band, an empty column for the reading, when to stop, and the safety box."""

from __future__ import annotations

from . import fmt
from .sheets import safety_context


def titration_context(plan, recipe, summary: dict, *, date: str, paper: str) -> dict:
    """Template context (plain values only) of the titration sheet for the schedule's points ``recipe``."""
    t = plan.titration
    cell = plan.stock_by_id(t.cell)
    tit = plan.stock_by_id(t.titrant)
    o = plan.optics
    lo, hi = o.linear_range
    kt = recipe.stock_ids.index(t.titrant)
    added = recipe.volumes_mL[:, kt]
    prev = 0.0
    rows = []
    for i, row in enumerate(summary["tubes"]):
        aliquot = added[i] - prev
        prev = added[i]
        a, sd = row["absorbance"], row["absorbance_sd"]
        rows.append(
            {
                "step": recipe.tubes[i],
                "aliquot": fmt.fixed(aliquot * 1000.0, 1),
                "added": fmt.fixed(added[i] * 1000.0, 1),
                "cell": fmt.fixed(t.start_volume_mL + added[i], 0.001),
                "expected": f"{fmt.fixed(a, 0.001)} ± {fmt.fixed(2 * sd, 0.001)}",
                "out": not lo <= a <= hi,
            }
        )
    disp = plan.dispenser_for(t.titrant)
    start_disp = plan.dispenser_for(t.cell)
    steps = [
        "Switch the spectrophotometer on early so the lamp is stable; set the wavelength to "
        f"{fmt.sig(o.wavelength_nm, 3)} nm and zero it on a cuvette of the medium the stocks are made in.",
        f"Deliver {fmt.fixed(t.start_volume_mL, 0.001)} mL of {cell.label or cell.id} into the clean, "
        f"dry cuvette"
        + (f" with the {start_disp.capacity_mL:g} mL {start_disp.kind}" if start_disp else "")
        + ".",
        f"For each step below: add the aliquot of {tit.label or tit.id}"
        + (f" with the {fmt.sig(disp.capacity_mL * 1000, 3)} µL {disp.kind}" if disp else "")
        + f" below the surface, {t.equilibrate}, then write the reading in the empty column.",
        f"Stop, and tell the person in charge, if a reading falls outside "
        f"{fmt.fixed(lo, 0.01)}–{fmt.fixed(hi, 0.01)} "
        "(the instrument's linear range) or is far outside its expected band, if the cell would hold "
        "more than "
        f"{fmt.fixed(t.max_volume_mL, 0.001)} mL, or if the solution turns cloudy.",
    ]
    return {
        "title": plan.title,
        "date": date,
        "paper": paper,
        "rows": rows,
        "steps": steps,
        "facts": [
            ("Wavelength", f"{fmt.sig(o.wavelength_nm, 3)} nm"),
            ("Path", f"{o.path_cm:g} cm"),
            ("Cell at start", f"{fmt.fixed(t.start_volume_mL, 0.001)} mL"),
            ("Cell at most", f"{fmt.fixed(t.max_volume_mL, 0.001)} mL"),
            ("Titrant", tit.label or tit.id),
            ("Additions", str(len(rows))),
        ],
        "safety": safety_context(plan),
    }


def titration_sheet(plan, recipe, assessment, *, paper: str = "A4", fmt_: str = "pdf", date=None) -> bytes:
    from .render import _check, _date_text, _out, render_html

    _check(paper, fmt_)
    ctx = titration_context(plan, recipe, assessment.summary(), date=_date_text(date), paper=paper)
    return _out(render_html("titration_sheet.html.j2", ctx), fmt_)
