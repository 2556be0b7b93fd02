"""Rich tables of the core's results (assessment, design, stock needs), shared by several commands."""

from __future__ import annotations

import math

import numpy as np
from rich.table import Table

from ..inputs.text import plural
from ..paper import fmt
from ..paper.bench_volumes import volume_step_mL
from .app import out
from .app import safe_text as S


def print_assessment(a, p) -> None:  # noqa: C901
    """Rich tables of an assessment: verdict first, then parameters, checks and tubes."""
    out.print(f"[bold]{S(a.title)}[/bold]")
    vcol = {"resolved": "green", "bounded": "yellow", "unresolved": "red"}
    if a.verdict:
        out.print(f"Verdict: [bold {vcol[a.verdict]}]{a.verdict}[/] — {S(a.verdict_reason)}")
    elif a.verdict_reason:
        out.print(S(a.verdict_reason))
    if a.parameters:
        t = Table(title="Parameters")
        for c in ("parameter", "guess", "assumed true", "SE (Cramér–Rao)", "MC sd", "MC bias", "MC 95 %"):
            t.add_column(c, justify="right")
        for q in a.parameters:
            ci = q.get("mc_ci95")
            t.add_row(
                S(q["name"]),
                fmt.sig(q["guess"], 4),
                fmt.sig(q["true"], 4),
                fmt.sig(q["se"], 2),
                fmt.sig(q.get("mc_sd"), 2),
                fmt.sig(q.get("mc_bias"), 2),
                f"{fmt.sig(ci[0], 4)} – {fmt.sig(ci[1], 4)}" if ci and ci[0] is not None else "—",
            )
        out.print(t)
        if a.cramer_rao is not None and len(a.parameters) > 1:
            t = Table(title="Correlations")
            t.add_column("")
            for n in a.params.names:
                t.add_column(S(n), justify="right")
            for i, n in enumerate(a.params.names):
                t.add_row(S(n), *(fmt.sig(x, 2) for x in a.cramer_rao.corr[i]))
            out.print(t)
        if a.mc is not None and a.mc.failed_fraction > 0:
            out.print(f"Monte Carlo: {a.mc.failed_fraction:.1%} of fits failed")
    if a.profile is not None:
        pr = a.profile
        side = []
        if pr.low_unbounded:
            side.append("cannot be told from K → 0")
        if pr.high_unbounded:
            side.append("cannot be told from K → ∞")
        out.print(
            f"χ² profile of log β[{S(p.target)}] (other parameters refitted; 3.84 = 95 % threshold)"
            + (f" — {'; '.join(side)}" if side else "")
        )
        t = Table(show_header=True, box=None, pad_edge=False)
        picks = np.unique(np.linspace(0, pr.log_beta.size - 1, 9).round().astype(int))
        t.add_column("log β", justify="right")
        for k in picks:
            t.add_column(
                ("K→0 " if k == 0 else "K→∞ " if k == pr.log_beta.size - 1 else "") + f"{pr.log_beta[k]:.2f}",
                justify="right",
            )
        t.add_row("Δχ²", *(fmt.sig(float(pr.delta_chi2[k]), 3) for k in picks))
        out.print(t)
    if a.limits is not None:
        for line in a.limits.lines():
            out.print(S(line))
    colour = {"pass": "green", "warn": "yellow", "fail": "red"}
    t = Table(title="Checks")
    for c in ("check", "status", "what was found / what to do"):
        t.add_column(c)
    for c in a.checks:
        t.add_row(S(c.id), f"[{colour[c.status]}]{c.status}[/]", S(c.message))
    out.print(t)
    m = a.model
    r = a.recipe
    dispensed = r.dispensed_ids(p)
    t = Table(title="Tubes")
    for c in (
        "tube",
        *(f"{S(s)} / mL" for s in dispensed),
        "M tot",
        "L tot",
        *(S(x) for x in m.species),
        "A ± sd",
        "saturation",
        "I / M",
    ):
        t.add_column(c, justify="right")
    rows = a.tube_rows()
    lo, hi = m.linear_range
    step = volume_step_mL(p)
    st = a.state
    for i, tube in enumerate(r.tubes):
        A = rows[i]["absorbance"]
        a_txt = f"{A:.3f} ± {rows[i]['absorbance_sd']:.3f}"
        if not lo <= A <= hi:
            a_txt = f"[red]{a_txt} out[/red]"
        t.add_row(
            S(tube),
            *(fmt.volume(r.column(s)[i], step) for s in dispensed),
            fmt.conc(st.totals_M[i, 0]),
            fmt.conc(st.totals_M[i, 1]),
            *(fmt.conc(st.species_M[i, k]) for k in range(len(m.species))),
            a_txt,
            f"{st.saturation[i]:.2f}",
            f"{st.ionic_strength_M[i]:.3g}",
        )
    out.print(t)


def print_design(d, p) -> None:
    """The designed recipe, its promise and the comparison with an evenly spaced series."""
    s = d.summary()
    out.print(f"[bold]{S(p.title)}[/bold] — design")
    vcol = {"resolved": "green", "bounded": "yellow", "unresolved": "red"}
    if d.verdict:
        out.print(f"Verdict: [bold {vcol[d.verdict]}]{d.verdict}[/] — {S(d.verdict_reason)}")
    out.print(
        f"criterion {d.criterion}, {'robust over the guess' if d.robust else 'at the guess only'}, "
        f"{plural(d.recipe.n_tubes, 'tube')}, seed {d.seed}; "
        f"{plural(d.n_candidates, 'candidate tube')} on the grid, "
        f"{d.n_feasible} inside the linear range over the guess's range"
    )
    for note in d.notes:
        out.print(f"[yellow]note:[/yellow] {S(note)}")
    t = Table(title="Designed recipe")
    dispensed = d.recipe.dispensed_ids(p)
    for c in ("tube", *(f"{S(x)} / mL" for x in dispensed), "A ± sd", "saturation"):
        t.add_column(c, justify="right")
    for i, row in enumerate(s["tubes"]):
        t.add_row(
            S(row["tube"]),
            *(fmt.volume(d.recipe.column(x)[i], p.glassware.step_mL) for x in dispensed),
            f"{row['absorbance']:.3f} ± {row['absorbance_sd']:.3f}",
            f"{row['saturation']:.2f}",
        )
    out.print(t)
    target = S(p.target)
    ratio = d.se_even_over_design
    compare = (
        (
            f"×{fmt.sig(ratio, 2)} better"
            if ratio >= 1
            else f"×{fmt.sig(1 / ratio, 2)} worse: the even series wins here"
        )
        if ratio == ratio
        else "no comparison"
    )
    out.print(
        f"SE(log β[{target}]) at the guess: [bold]{fmt.sig(d.se_target, 2)}[/bold]; evenly spaced series "
        f"of {plural(d.recipe.n_tubes, 'tube')}: {fmt.sig(d.se_even, 2)} ({compare}); "
        f"efficiency ≥ {math.floor(d.efficiency_bound * 1000) / 1000:.3f} of the best possible on these "
        f"candidates"
    )
    if d.se_across:
        t = Table(title=f"SE(log β[{target}]) if the truth differs from the guess")
        for c in (f"true log β[{target}]", "designed", "evenly spaced"):
            t.add_column(c, justify="right")
        for a, b, c in d.se_across:
            t.add_row(f"{a:.2f}", fmt.sig(b, 2), fmt.sig(c, 2))
        out.print(t)
    if d.limits is not None:
        for line in d.limits.lines():
            out.print(S(line))
    mc = d.model_check
    if mc is not None:
        _print_model_check(mc, target)
    bad = [c for c in s["checks"] if c["status"] != "pass"]
    for c in bad:
        out.print(f"[yellow]{S(c['id'])}[/yellow]: {S(c['message'])}")


def _print_model_check(mc, target: str) -> None:
    """The model check of a design: the chosen design's simulated power beside the other design's."""
    from ..jobs.plan.model_check import POWER_SATURATED

    t = Table(
        title=f"Model check (SE may cost up to ×{mc.cost_cap:.3g}): would the data reveal a left-out complex?"
    )
    other = (
        "target-only design"
        if mc.replaced
        else f"best guarded design (×{fmt.sig(mc.se_guarded_over_target_only, 3)})"
    )
    for c in ("if the system also formed", "this design", other, "best on these candidates"):
        t.add_column(c, justify="right")
    for k, (g, o) in enumerate(mc.detection):
        best = mc.best_power[k] if k < len(mc.best_power) else float("nan")
        # the search stops adding noncentrality at 95 % power (it buys precision instead): "at least"
        best_txt = f"≥ {_pct(best)}" if best >= POWER_SATURATED - 5e-3 else _pct(best)
        t.add_row(S(g.alternative), _pct(g.power), _pct(o.power_noise_free), best_txt)
    out.print(t)
    out.print(
        "share of experiments whose χ² test (5 % level) rejects the main model: this design simulated, the "
        "others from the exact noncentrality"
    )
    out.print(S(mc.reason))
    for line in mc.advice:
        out.print(f"[yellow]note:[/yellow] {S(line)}")


def _pct(x) -> str:
    return "—" if x is None or not math.isfinite(x) else f"{x:.0%}"


def print_stock_needs(p, needs, with_recipe: bool) -> None:
    from ..paper.stock_text import mass_advice_text, prep_lines

    out.print(f"[bold]{S(p.title)}[/bold] — stocks")
    t = Table(title="Preparation")
    for c in ("stock", "concentration", "how to make it", "u (rel.)", "plan assumes"):
        t.add_column(c)
    for n in needs:
        s = p.stock_by_id(n.id)
        conc = S(", ".join(f"{k} {fmt.conc(v)}" for k, v in s.conc.items()) or "—")
        # the same words as the prep sheet: every solute the stock's conc and ions imply, solvent, flask,
        # what sets the mass; then, for the author, how to weigh less
        summary = n.summary()
        lines, _ = prep_lines(p, n.id, summary)
        how = S(" ".join(lines))
        advice = mass_advice_text(summary)
        if advice:
            how += f" [cyan]{S(advice)}[/cyan]"
        if n.scarce:
            how = "[bold](scarce)[/bold] " + how
        if n.preparation is not None:
            pr = n.preparation
            if pr.mass_g < pr.min_weight_g:
                how += f" [red](below the {pr.min_weight_g:.3f} g minimum weight)[/red]"
            u = f"{pr.u_rel:.2%}"
            flag = "" if n.plan_rsd >= pr.u_rel * 0.999 else " [yellow](below what weighing gives)[/yellow]"
            assumed = f"{n.plan_rsd:.2%}{flag}"
        else:
            if n.problem:
                how += f" [yellow]({S(n.problem)})[/yellow]"
            u, assumed = "—", f"{n.plan_rsd:.2%}"
        t.add_row(S(n.id), conc, how, u, assumed)
    out.print(t)
    if with_recipe:
        t = Table(title="Volumes needed (recipe + rinse + dead volume)")
        for c in ("stock", "recipe / mL", "tubes", "needed / mL", "on hand / mL", ""):
            t.add_column(c)
        for n in needs:
            ok = n.enough
            mark = (
                "" if ok is None else ("[green]enough[/green]" if ok else "[red]NOT ENOUGH: make more[/red]")
            )
            t.add_row(
                S(n.id),
                f"{n.recipe_mL:.2f}",
                str(n.deliveries),
                f"{n.needed_mL:.1f}",
                f"{n.on_hand_mL:g}" if n.on_hand_mL is not None else "—",
                mark,
            )
        out.print(t)


def print_spectra(summary: dict, target: str, wavelength_nm: float = float("nan")) -> None:
    """The whole-spectrum part of an assessment or design: against the best single wavelength, where the
    information lies, and what a factor analysis would see."""
    sp = summary.get("spectra")
    if not sp:
        return
    lo, hi = sp["window_nm"]
    t = S(target)
    out.print(
        f"Whole spectra: {sp['wavelengths']} wavelengths {lo:g}–{hi:g} nm, {sp['readings_used']} of "
        f"{sp['readings']} readings used; fitted spectra: {S(', '.join(sp['fitted_spectra'])) or 'none'}"
    )
    best = sp.get("best_single_wavelength_nm")
    ratio = sp.get("se_ratio_single_over_spectrum")
    if best is not None and ratio is not None:
        out.print(
            f"SE(log β[{t}]) from every wavelength: [bold]{fmt.sig(sp['se_whole_spectrum'], 2)}[/bold]; "
            f"from the "
            f"best single wavelength ({best:g} nm): {fmt.sig(sp['se_best_single_wavelength'], 2)} "
            f"(×{fmt.sig(ratio, 2)} {'better' if ratio >= 1 else 'worse'} with the whole spectrum)"
        )
    alone = sp.get("se_single_wavelength_design")
    if alone is not None:
        out.print(
            f"A design for one wavelength ({wavelength_nm:g} nm) alone would reach SE {fmt.sig(alone, 2)} "
            f"there; "
            f"this one, read as whole spectra: {fmt.sig(sp['se_whole_spectrum'], 2)}"
        )
    rows = sp["by_wavelength"]
    if rows:
        tab = Table(title=f"Where the information about log β[{t}] lies")
        for c in (
            "wavelength / nm",
            "share of the information per wavelength",
            "SE from that wavelength alone",
        ):
            tab.add_column(c, justify="right")
        picks = np.unique(np.linspace(0, len(rows) - 1, min(11, len(rows))).round().astype(int))
        for k in picks:
            r = rows[k]
            share = r["information_share"]
            tab.add_row(
                f"{r['wavelength_nm']:g}",
                f"{share * 100:.2f} %" if share is not None else "—",
                fmt.sig(r["se_single"], 2) + ("" if r["eligible"] else " (out of range)"),
            )
        out.print(tab)
    fa = sp.get("factors")
    if fa and fa.get("found_share") is not None:
        out.print(
            f"Factor analysis of simulated data matrices: {fa['above_noise']} of the model's "
            f"{fa['absorbing_species']} absorbing species stand above the noise; found in "
            f"{fa['found_share']:.0%}"
        )
    _print_spectra_model_check(summary.get("model_check"))


def _print_spectra_model_check(mc) -> None:
    """Per alternative: how the whole-spectrum fit would reveal it (χ² test, factor analysis), beside the
    best single wavelength."""
    rows = mc.get("alternatives", []) if isinstance(mc, dict) else (mc or [])
    for r in rows:
        if "power_factors" not in r:
            continue
        chi2 = r["power"] if r["power"] is not None else r["power_noise_free"]
        sim = f"in {_pct(chi2)} of simulated experiments" if r["trials"] else f"with power {_pct(chi2)}"
        line = (
            f"Model check with whole spectra, if {S(r['alternative'])} formed too: the fit's χ² test "
            f"rejects the plan's model {sim} (noise-free {_pct(r['power_noise_free'])}, λ = "
            f"{fmt.sig(r['noncentrality'], 3)} on {r['dof']} degrees of freedom)"
        )
        if r["power_factors"] is not None:
            line += f"; the factor analysis finds one factor more in {_pct(r['power_factors'])}"
        if r["best_single_wavelength_nm"] is not None:
            lam1 = fmt.sig(r["noncentrality_single_wavelength"], 3)
            line += (
                f"; the best single wavelength ({r['best_single_wavelength_nm']:g} nm) alone: "
                f"{_pct(r['power_noise_free_single_wavelength'])} (λ = {lam1} on "
                f"{r['dof_single_wavelength']} degrees of freedom)"
            )
        out.print(line)
