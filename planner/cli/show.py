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

STATUS_COLOUR = {"pass": "green", "warn": "yellow", "fail": "red"}
VERDICT_COLOUR = {"resolved": "green", "bounded": "yellow", "unresolved": "red"}


def print_checks(checks) -> None:
    """The checks' table: each check's status and what was found or what to do."""
    t = Table(title="Checks")
    for c in ("check", "status", "what was found / what to do"):
        t.add_column(c)
    for c in checks:
        t.add_row(S(c.id), f"[{STATUS_COLOUR[c.status]}]{c.status}[/]", S(c.message))
    out.print(t)


def reading_texts(a, *, flag: bool = True) -> list[str]:
    """Each tube's expected reading "A ± sd" (every error source); with ``flag``, the readings outside the
    linear range in red, marked "out"."""
    lo, hi = a.model.linear_range
    texts = []
    for A, sd in zip(a.state.absorbance.tolist(), a.absorbance_sd.tolist(), strict=True):
        txt = f"{A:.3f} ± {sd:.3f}"
        texts.append(f"[red]{txt} out[/red]" if flag and not lo <= A <= hi else txt)
    return texts


def totals_columns(state) -> dict[str, list[str]]:
    """The metal's and the ligand's total concentration in each tube, as ``tube_table`` columns."""
    return {name: [fmt.conc(x) for x in state.totals_M[:, k]] for k, name in enumerate(("M tot", "L tot"))}


def tube_table(title: str, recipe, p, step: float, columns: dict[str, list[str]]) -> Table:
    """The tubes of ``recipe``: each label, the volume of every dispensed stock on the grid ``step``, then
    ``columns`` (heading → one text per tube, already safe), all right-aligned."""
    dispensed = recipe.dispensed_ids(p)
    t = Table(title=title)
    for c in ("tube", *(f"{S(s)} / mL" for s in dispensed), *columns):
        t.add_column(c, justify="right")
    vols = [recipe.column(s) for s in dispensed]
    for i, tube in enumerate(recipe.tubes):
        t.add_row(S(tube), *(fmt.volume(v[i], step) for v in vols), *(col[i] for col in columns.values()))
    return t


def print_verdict(a) -> None:
    vcol = VERDICT_COLOUR
    if a.verdict:
        out.print(f"Verdict: [bold {vcol[a.verdict]}]{a.verdict}[/] — {S(a.verdict_reason)}")
    elif a.verdict_reason:
        out.print(S(a.verdict_reason))


def print_assessment(a, p) -> None:
    """Rich tables of an assessment: verdict first, then parameters, checks and tubes."""
    out.print(f"[bold]{S(a.title)}[/bold]")
    print_verdict(a)
    if a.parameters:
        _print_parameters(a)
    if a.profile is not None:
        _print_profile(a.profile, p.target)
    if a.limits is not None:
        for line in a.limits.lines():
            out.print(S(line))
    print_checks(a.checks)
    st, m = a.state, a.model
    columns = {
        **totals_columns(st),
        **{S(x): [fmt.conc(c) for c in st.species_M[:, k]] for k, x in enumerate(m.species)},
        "A ± sd": reading_texts(a),
        "saturation": [f"{x:.2f}" for x in st.saturation],
        "I / M": [f"{x:.3g}" for x in st.ionic_strength_M],
    }
    out.print(tube_table("Tubes", a.recipe, p, volume_step_mL(p), columns))


def _print_parameters(a) -> None:
    """Every fitted parameter (guess, assumed truth, SE, the Monte Carlo's figures) and the correlations."""
    t = Table(title="Parameters")
    for c in ("parameter", "guess", "assumed true", "SE (Cramér–Rao)", "MC sd", "MC bias", "MC 95 %"):
        t.add_column(c, justify="right")
    for q in a.parameters:
        ci = (_finite(q.mc_ci95[0]), _finite(q.mc_ci95[1])) if q.mc_ci95 is not None else None
        t.add_row(
            S(q.name),
            fmt.sig(q.guess, 4),
            fmt.sig(q.true, 4),
            fmt.sig(_finite(q.se), 2),
            fmt.sig(_finite(q.mc_sd), 2),
            fmt.sig(_finite(q.mc_bias), 2),
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


def _print_profile(pr, target: str) -> None:
    """The χ² profile of the target's log β at a few values across its range."""
    side = []
    if pr.low_unbounded:
        side.append("cannot be told from K → 0")
    if pr.high_unbounded:
        side.append("cannot be told from K → ∞")
    out.print(
        f"χ² profile of log β[{S(target)}] (other parameters refitted; 3.84 = 95 % threshold)"
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


def print_design(d, p) -> None:
    """The designed recipe, its promise and the comparison with an evenly spaced series."""
    out.print(f"[bold]{S(p.title)}[/bold] — design")
    if d.verdict:
        out.print(f"Verdict: [bold {VERDICT_COLOUR[d.verdict]}]{d.verdict}[/] — {S(d.verdict_reason)}")
    out.print(
        f"criterion {d.criterion}, {'robust over the guess' if d.robust else 'at the guess only'}, "
        f"{plural(d.recipe.n_tubes, 'tube')}, seed {d.seed}; "
        f"{plural(d.n_candidates, 'candidate tube')} on the grid, "
        f"{d.n_feasible} inside the linear range over the guess's range"
    )
    for note in d.notes:
        out.print(f"[yellow]note:[/yellow] {S(note)}")
    da = d.assessment
    columns = {
        "A ± sd": reading_texts(da, flag=False),
        "saturation": [f"{x:.2f}" for x in da.state.saturation],
    }
    out.print(tube_table("Designed recipe", d.recipe, p, p.glassware.step_mL, columns))
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
    if d.model_check is not None:
        _print_model_check(d.model_check, target)
    for c in da.checks:
        if c.status != "pass":
            out.print(f"[yellow]{S(c.id)}[/yellow]: {S(c.message)}")


def _print_model_check(model_check, target: str) -> None:
    """The model check of a design: the chosen design's simulated power beside the other design's."""
    from ..jobs.plan.model_check import POWER_SATURATED

    t = Table(
        title=f"Model check (SE may cost up to ×{model_check.cost_cap:.3g}): would the data reveal a "
        "left-out complex?"
    )
    other = (
        "target-only design"
        if model_check.replaced
        else f"best guarded design (×{fmt.sig(model_check.se_guarded_over_target_only, 3)})"
    )
    for c in ("if the system also formed", "this design", other, "best on these candidates"):
        t.add_column(c, justify="right")
    for k, (g, o) in enumerate(model_check.detection):
        best = model_check.best_power[k] if k < len(model_check.best_power) else float("nan")
        # the search stops adding noncentrality at 95 % power (it buys precision instead): "at least"
        best_txt = f"≥ {_pct(best)}" if best >= POWER_SATURATED - 5e-3 else _pct(best)
        t.add_row(S(g.alternative), _pct(g.power), _pct(o.power_noise_free), best_txt)
    out.print(t)
    out.print(
        "share of experiments whose χ² test (5 % level) rejects the main model: this design simulated, the "
        "others from the exact noncentrality"
    )
    out.print(S(model_check.reason))
    for line in model_check.advice:
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
        lines, _ = prep_lines(p, n.id, n)
        how = S(" ".join(lines))
        advice = mass_advice_text(n)
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


def _finite(x) -> float | None:
    """A finite float, or None (shown as "—")."""
    x = float(x) if x is not None else float("nan")
    return x if math.isfinite(x) else None


def print_spectra(sp, target: str, wavelength_nm: float = float("nan"), detection=None) -> None:
    """The whole-spectrum part of an assessment or design (its ``spectra`` facts, or None: nothing to
    print): against the best single wavelength, where the information lies, what a factor analysis
    would see and, with ``detection`` (the model check's results per alternative), how the whole-spectrum
    fit would reveal each alternative."""
    if sp is None:
        return
    w = sp.wavelength_nm
    t = S(target)
    out.print(
        f"Whole spectra: {w.size} wavelengths {w[0]:g}–{w[-1]:g} nm, {sp.readings_used} of "
        f"{sp.readings} readings used; fitted spectra: {S(', '.join(sp.fitted_spectra)) or 'none'}"
    )
    best = sp.best_single_wavelength_nm
    ratio = _finite(sp.se_ratio_single_over_spectrum)
    whole = _finite(sp.se_whole_spectrum)
    if best is not None and ratio is not None:
        out.print(
            f"SE(log β[{t}]) from every wavelength: [bold]{fmt.sig(whole, 2)}[/bold]; from the "
            f"best single wavelength ({best:g} nm): {fmt.sig(_finite(sp.se_best_single_wavelength), 2)} "
            f"(×{fmt.sig(ratio, 2)} {'better' if ratio >= 1 else 'worse'} with the whole spectrum)"
        )
    alone = _finite(sp.se_single_wavelength_design) if sp.with_single_design else None
    if alone is not None:
        out.print(
            f"A design for one wavelength ({wavelength_nm:g} nm) alone would reach SE {fmt.sig(alone, 2)} "
            f"there; this one, read as whole spectra: {fmt.sig(whole, 2)}"
        )
    if w.size:
        tab = Table(title=f"Where the information about log β[{t}] lies")
        for c in (
            "wavelength / nm",
            "share of the information per wavelength",
            "SE from that wavelength alone",
        ):
            tab.add_column(c, justify="right")
        picks = np.unique(np.linspace(0, w.size - 1, min(11, w.size)).round().astype(int))
        for k in picks:
            share = _finite(sp.information_share[k]) if sp.information_share is not None else None
            tab.add_row(
                f"{float(w[k]):g}",
                f"{share * 100:.2f} %" if share is not None else "—",
                fmt.sig(_finite(sp.se_single[k]), 2) + ("" if sp.eligible[k] else " (out of range)"),
            )
        out.print(tab)
    fa = sp.factors
    if fa is not None and fa.found_share is not None:
        out.print(
            f"Factor analysis of simulated data matrices: {fa.above_noise} of the model's "
            f"{fa.absorbing_species} absorbing species stand above the noise; found in "
            f"{fa.found_share:.0%}"
        )
    _print_spectra_model_check(detection or ())


def model_check_alternatives(d) -> tuple:
    """The design's model check per alternative (the chosen design's detection), or () without one."""
    return tuple(g for g, _ in d.model_check.detection) if d.model_check is not None else ()


def _print_spectra_model_check(detection) -> None:
    """Per alternative: how the whole-spectrum fit would reveal it (χ² test, factor analysis), beside the
    best single wavelength."""
    from ..paper.json_out import to_json

    for r in (to_json(d) for d in detection):
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
