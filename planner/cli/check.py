"""``kplan check``: validate a plan and show what was understood."""

from __future__ import annotations

from ..inputs.text import plural
from .app import app, out
from .app import safe_text as S
from .options import PlanFile


@app.command()
def check(plan: PlanFile) -> None:
    """Validate a plan and show what was understood: species, constants, stocks, glassware."""
    from ..inputs.plan import load_plan
    from ..jobs.devices import plan_devices

    p = load_plan(plan)
    out.print(f"[bold]{S(p.title)}[/bold]  ({S(plan)})")
    _print_components(p)
    _print_species(p)
    _print_optics(p)
    devices = plan_devices(p)
    by_stock = {
        st.id: devices.items[j] for st, j in zip(p.stock, devices.stock_device, strict=True) if j >= 0
    }
    _print_stocks(p, by_stock)
    _print_glassware(p, devices)
    _print_design(p, by_stock)
    _print_outcome(p)


def _print_components(p) -> None:
    from rich.table import Table

    t = Table(title="Components")
    for c in ("component", "label", "charge / pH"):
        t.add_column(c)
    t.add_row("M", S(p.components.M.label), f"{p.components.M.charge:+d}")
    t.add_row("L", S(p.components.L.label), f"{p.components.L.charge:+d}")
    if p.components.H is not None:
        t.add_row("H", "H+", f"pH {p.components.H.pH:.2f} (buffered)")
    out.print(t)


def _print_species(p) -> None:
    """Each species' formula, guess, sd and ε, and whether it is fitted; the free components' ε."""
    from rich.table import Table

    t = Table(title="Species and constants")
    for c in ("species", "formula", "log β (guess)", "± sd", "ε / L mol⁻¹ cm⁻¹", "fitted?"):
        t.add_column(c)
    for s in p.species:
        f = " ".join(f"{k}{v if v != 1 else ''}" for k, v in s.formula.items() if v)
        e = p.optics.epsilon.get(s.name)
        t.add_row(
            S(s.name),
            S(f),
            f"{s.log_beta:.2f}",
            f"{s.log_beta_sd:.2f}",
            f"{e.value:g} ± {e.rsd:.0%}" if e else "—",
            "yes" if s.log_beta_sd > 0 else "held fixed",
        )
    for comp in ("M", "L"):
        e = p.optics.epsilon.get(comp)
        if e:
            t.add_row(f"{comp} (free)", comp, "—", "—", f"{e.value:g} ± {e.rsd:.0%}", "—")
    out.print(t)


def _print_optics(p) -> None:
    o = p.optics
    out.print(
        f"Optics: {o.wavelength_nm:g} nm, path {o.path_cm:g} cm, linear range "
        f"{o.linear_range[0]:g}–{o.linear_range[1]:g}, stray light {o.stray_light:g}, "
        f"noise k1={o.noise.k1:g} k2={o.noise.k2:g} k3={o.noise.k3:g}"
    )
    if o.has_spectra:
        _print_spectra_keys(p)


def _print_stocks(p, by_stock) -> None:
    """Each stock's concentrations, ions, uncertainty, what is on hand and the dispenser that delivers it."""
    from rich.table import Table

    from ..paper import fmt

    t = Table(title="Stocks")
    for c in ("id", "label", "M", "L", "other ions", "rsd", "on hand", "dispenser"):
        t.add_column(c)
    for s in p.stock:
        # the catalogue's name: no class for piston devices or a device given by its tolerance alone
        item = by_stock.get(s.id)
        disp = S(item.label) if item else ("diluent" if s.diluent else "[yellow]none[/yellow]")
        t.add_row(
            S(s.id),
            S(s.label),
            fmt.conc(s.conc["M"]) if "M" in s.conc else "",
            fmt.conc(s.conc["L"]) if "L" in s.conc else "",
            S(", ".join(f"{k} {fmt.conc(v)}" for k, v in s.ions.items())),
            f"{s.conc_rsd:.1%}",
            f"{s.on_hand:g} mL" if s.on_hand else "—",
            disp,
        )
    out.print(t)


def _print_glassware(p, devices) -> None:
    """The tubes' settings, each dispenser's tolerance and uncertainty, the make-up flask; a warning for a
    grid finer than a device is read."""
    from rich.table import Table

    from ..paper import fmt
    from ..paper.bench_volumes import grid_finer_than_reading

    g = p.glassware
    out.print(
        f"{'Cell' if p.titration else 'Tubes'}: {g.tube_volume_mL:g} mL, make-up {g.make_up}, grid "
        f"{g.step_mL:g} mL (volumes printed with {fmt.step_decimals(g.step_mL)} decimals), "
        f"min {g.min_volume_mL:g} mL, rinse {g.rinse_mL:g} mL, dead volume {g.dead_volume_mL:g} mL"
    )
    t = Table(title="Glassware (from the catalogue and the plan)")
    for c in ("device", "tolerance", "read to", "random sd", "u, full delivery", "source", "delivers"):
        t.add_column(c)
    for d, item in zip(p.glassware.dispenser, devices.items, strict=True):
        t.add_row(*_dispenser_cells(item), S(", ".join(d.stocks)))
    if devices.flask is not None:
        t.add_row(*_flask_cells(devices.flask), "make-up of every tube")
    out.print(t)
    for label, step, res in grid_finer_than_reading(p):
        out.print(
            f"[yellow]warning:[/yellow] the grid (step = {step:g} mL) is finer than the {S(label)} is read "
            f"({res:g} mL): the sheet's volumes ask for more than the device shows; use a step of at least "
            f"{res:g} mL or state the device's graduation"
        )


def _dispenser_cells(item) -> tuple[str, ...]:
    """A dispenser's row of the glassware table, up to its source."""
    import numpy as np

    from ..uncertainty.catalogue import reading_resolution_mL
    from ..uncertainty.delivery import delivery_uncertainty

    du = delivery_uncertainty(item, np.array([item.capacity_mL]))
    src = item.source + (" (from memory)" if item.from_memory else "")
    res = reading_resolution_mL(item)
    rand = f"{float(du.random_mL[0]):.2g} mL" + (" (measured)" if item.repeatability_mL else "")
    return (
        S(item.label),
        f"± {item.tolerance_mL:g} mL",
        f"{res:g} mL" if res else ("the mark" if item.kind == "pipette" else "—"),
        rand,
        f"{float(du.combined_mL[0]):.3g} mL",
        S(src),
    )


def _flask_cells(fl) -> tuple[str, ...]:
    """The make-up flask's row of the glassware table, up to its source."""
    from ..uncertainty.delivery import flask_volume_uncertainty

    src = fl.source + (" (from memory)" if fl.from_memory else "")
    return (
        S(fl.label),
        f"± {fl.tolerance_mL:g} mL",
        "the mark",
        "—",
        f"{flask_volume_uncertainty(fl):.3g} mL",
        S(src),
    )


def _print_outcome(p) -> None:
    """ "plan OK", or with a warning naming the stocks no dispenser delivers."""
    # a stock that is measured out needs a dispenser (the diluent under to-mark is poured to the mark;
    # a titration's cell and titrant are checked by the schedule)
    missing = [
        st.id
        for st in p.stock
        if p.dispenser_for(st.id) is None and not (st.diluent and p.glassware.make_up == "to-mark")
    ]
    if missing:
        out.print(
            f"[yellow]warning:[/yellow] no dispenser delivers {S(', '.join(missing))}: add "
            f"{'it' if len(missing) == 1 else 'them'} to a [[glassware.dispenser]] stocks list "
            "before designing or printing"
        )
        out.print("[yellow]plan OK, with the warning above[/yellow]")
        return
    out.print("[green]plan OK[/green]")


def _print_design(p, by_stock) -> None:
    """The design settings; a titration plan's additions in place of the tubes of a series."""
    from ..paper import fmt

    d = p.design
    settings = (
        f"target {S(p.target)}, criterion {d.criterion}, robust {'yes' if d.robust else 'no'}, "
        f"goal SE {d.goal_se:g}"
    )
    if p.titration is not None:
        out.print(_titration_line(p, by_stock))
        out.print(f"Design: {settings}")
        return
    fixed = ", ".join(f"{k} {fmt.volume(v, p.glassware.step_mL)} mL" for k, v in d.fixed.items())
    out.print(f"Design: {plural(d.tubes, 'tube')}, {settings}" + (f", fixed {S(fixed)}" if fixed else ""))


def _titration_line(p, by_stock) -> str:
    """What a titration plan adds, in place of the tubes of a series: the cell's start, the additions of
    the titrant and their grid, and what is done between readings."""
    from ..paper import fmt

    t = p.titration
    step = t.step_mL or p.glassware.step_mL
    dev = by_stock.get(t.titrant)
    device = f" from the {S(dev.label)}" if dev is not None else ""
    return (
        f"Titration: {fmt.volume(t.start_volume_mL, step)} mL of {S(t.cell)} in the cell, then "
        f"{plural(t.additions, 'addition')} of {S(t.titrant)}{device} on a {step:g} mL grid, up to "
        f"{fmt.volume(t.max_volume_mL, step)} mL in the cell; between readings: {S(t.equilibrate)}"
    )


def _print_spectra_keys(p) -> None:
    """What the plan says about whole spectra: the window and where each absorber's spectrum comes from."""
    from ..jobs.compile import compile_study

    study = compile_study(p)
    sp = study.spectra
    o = p.optics
    w = sp.wavelength_nm
    table = p.spectra_table
    parts = []
    for k, name in enumerate(study.model.absorbers):
        if not sp.absorbing[k]:
            continue
        src = "table" if table is not None and name in table.names else "band"
        parts.append(f"{S(name)} ({src}, {'fitted' if sp.free[k] else 'known'})")
    for name, _ in study.alternatives:  # the model check's alternatives: their own spectrum or the target's
        own = "table" if table is not None and name in table.names else "band" if name in o.bands else None
        label = own or "the target's, scaled"
        parts.append(f"{S(name)} (alternative: {label})")
    out.print(
        f"Whole spectra: {w[0]:g}–{w[-1]:g} nm every {o.step_nm:g} nm ({w.size} wavelengths)"
        + (f", bandwidth {o.bandwidth_nm:g} nm" if o.bandwidth_nm else "")
        + f", stray light and readout noise ×{o.edge_rise:g} at the window's ends; spectra: "
        + (", ".join(parts) or "none")
    )
