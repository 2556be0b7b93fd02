"""``kplan fit``: fit measured readings with the plan's model."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer

from ..inputs.text import plural
from .app import UserError, app, dump_json, out
from .app import safe_text as S
from .options import JsonFlag, PlanFile, flag_option, path_option


@app.command()
def fit(
    plan: PlanFile,
    readings: Annotated[Path, typer.Argument(help="CSV: the recipe columns plus an 'absorbance' column")],
    as_json: JsonFlag = False,
    exclude: Annotated[
        str | None,
        typer.Option("--exclude", metavar="TUBES", help="tubes to leave out, comma-separated, e.g. T3,T7"),
    ] = None,
    keep_out_of_range: Annotated[
        bool,
        flag_option("fit readings outside the linear range too (left out by default)", "--keep-out-of-range"),
    ] = False,
    recipe: Annotated[
        Path | None,
        path_option(
            "with whole spectra: the recipe CSV of the tubes read (unless the spectra carry the stock "
            "columns)"
        ),
    ] = None,
    report: Annotated[
        Path | None, path_option("with whole spectra: write a PDF (or .html) of the fit")
    ] = None,
) -> None:
    """Fit measured readings with the plan's model, and compare the result with the plan's promise.
    Exit code 1 when the readings do not determine the constants."""
    from ..inputs.plan import load_plan
    from ..jobs.compile import compile_study
    from ..jobs.measure.fit import check_absorbances, fit_study
    from .options import read_points

    p = load_plan(plan)
    study = compile_study(p)
    skip = tuple(x.strip() for x in (exclude or "").split(",") if x.strip())
    if study.spectra is not None:
        return _fit_spectra(p, study, (plan, readings), recipe, skip, keep_out_of_range, as_json, report)
    if recipe is not None or report is not None:
        raise UserError(
            "--recipe and --report are for plans with whole spectra (optics.spectra or window_nm)"
        )
    data = read_points(readings, p, study, readings=True)
    check_absorbances(data.absorbance, data.recipe.tubes, str(readings))
    f = fit_study(study, data, exclude=skip, keep_out_of_range=keep_out_of_range)
    if as_json:
        print(dump_json(f))
    else:
        _print_fit(f, p, (plan, readings), skip)
    _exit_code(f)


def _fit_spectra(p, study, paths: tuple[Path, Path], recipe: Path | None, skip, keep, as_json: bool, report):
    """``kplan fit`` of whole spectra: the constants, the fitted spectra and the factor analysis."""
    from ..inputs.files import check_output_file, write_atomic_bytes
    from ..inputs.recipe import read_recipe_csv
    from ..inputs.spectra_readings import read_spectra_readings
    from ..jobs.spectra.fit import fit_spectra

    readings = paths[1]
    if report is not None:
        check_output_file(report, inputs=(*paths, recipe))
    data = read_spectra_readings(readings, p)
    if recipe is not None:
        data = data.with_recipe(read_recipe_csv(recipe, p), str(recipe))
    elif data.recipe is None:
        raise UserError(
            f"{readings}: the spectra carry no stock columns: give the recipe of the tubes with "
            "--recipe RECIPE"
        )
    f = fit_spectra(study, data, exclude=skip, keep_out_of_range=keep)
    if report is not None:
        from ..paper.render import fit_report

        html = report.suffix.lower() in (".html", ".htm")
        write_atomic_bytes(report, fit_report(p, f, kind="html" if html else "pdf"))
    if as_json:
        print(dump_json(f))
    else:
        print_spectra_fit(f, p)
        if report is not None:
            out.print(f"wrote {S(report)}")
    _exit_code(f)


def _exit_code(f) -> None:
    """Exit 1 when the readings do not determine the constants, or when the target's constant was held
    at the plan's value (not fitted): either way the readings did not measure it (README, exit codes)."""
    from ..jobs.measure.fit import target_fitted

    if not f.determined or not target_fitted(f):
        raise typer.Exit(1)


def _print_held_target(f, p) -> None:
    """Say plainly that the target's constant was not fitted when the plan holds it fixed."""
    from ..jobs.measure.fit import target_fitted

    if target_fitted(f):
        return
    i = next(k for k, s in enumerate(p.species) if s.name == f.target)
    out.print(
        f"[red]target not fitted:[/red] log β[{S(f.target)}] was held at the plan's value "
        f"{p.species[i].log_beta:.2f} (species[{i}].log_beta_sd = 0), not fitted: these readings did not "
        "measure it, and the fit says nothing about it. To fit it, give the guess its uncertainty "
        "(log_beta_sd > 0)"
    )


def print_spectra_fit(f, p=None) -> None:
    """The whole-spectrum fit's tables (``p``, the plan, names the target's value when it was held)."""
    from rich.table import Table

    from ..paper import fmt

    w = f.wavelength_nm
    out.print(
        f"[bold]{S(f.title)}[/bold] — global fit of {int(f.used.sum())} readings: {len(f.tubes)} tubes × "
        f"{w.size} wavelengths ({w[0]:g}–{w[-1]:g} nm); fitted spectra: {S(', '.join(f.spectra_names))}"
    )
    for tube, why in f.excluded:
        out.print(f"[yellow]left out[/yellow] {S(tube)}: {S(why)}")
    if f.readings_left_out:
        out.print(f"[yellow]left out[/yellow] {f.readings_left_out} readings above the linear range")
    if f.wavelengths_left_out:
        out.print(f"[yellow]left out[/yellow] {f.wavelengths_left_out} wavelengths outside the plan's window")
    _print_constants(f, "Fitted constants", ".1f", p)
    fa = f.factors
    if fa is not None:
        sv = ", ".join(fmt.sig(float(x), 3) for x in fa.singular_values[:6])
        out.print(f"Singular values of the data matrix: {sv} …")
        out.print(
            f"Factor analysis: {fa.n_indicator} significant factors by Malinowski's indicator function, "
            f"{fa.n_f_test} by the F-test; the model has {f.absorbing_species} absorbing species, "
            f"{f.above_noise} above the noise — {f.factor_verdict}"
        )
    t = Table(title="Tubes")
    for c in ("tube", "RMS standardised residual", "p (its χ²)", ""):
        t.add_column(c, justify="right")
    for tube, rms, p_, o in zip(f.tubes, f.tube_rms, f.tube_p, f.outlier_tubes, strict=True):
        t.add_row(S(tube), f"{rms:.2f}", f"{p_:.3g}", "[red]outlier[/red]" if o else "")
    out.print(t)


def _print_constants(f, title: str, chi2_format: str, p) -> None:
    """Whether the fit determined the constants (and fitted the target's), their table and the χ² test of
    the scatter."""
    if not f.determined:
        out.print(f"[red]not determined:[/red] {S(f.reason)}")
    if p is not None:
        _print_held_target(f, p)
    out.print(_parameter_table(f, title))
    if f.dof >= 1 and f.determined:
        out.print(
            f"χ² = {f.chi2:{chi2_format}} on {f.dof} degrees of freedom (upper tail p = {f.p_value:.2f}, "
            f"lower tail p = {f.p_low:.2f}): {f.chi2_verdict}"
        )


def _parameter_table(f, title: str):
    """Each fitted parameter with its SE, the target's profile interval and the SE the plan promised."""
    from rich.table import Table

    from ..paper import fmt

    t = Table(title=title)
    for c in ("parameter", "estimate", "SE", "95 % interval (profile)", "SE the plan promised"):
        t.add_column(c, justify="right")
    for n, e, se_, pr in zip(f.names, f.estimate, f.se, f.promised_se, strict=True):
        ci = "—"
        if n == f"log_beta[{f.target}]" and f.profile_ci95 is not None:
            lo, hi = f.profile_ci95
            ci = (
                f"{fmt.sig(lo, 4) if lo is not None else '(open)'} – "
                f"{fmt.sig(hi, 4) if hi is not None else '(open)'}"
            )
        t.add_row(S(n), fmt.sig(float(e), 4), fmt.sig(float(se_), 2), ci, fmt.sig(float(pr), 2))
    return t


def _print_fit(f, p, paths: tuple[Path, Path], skip: tuple[str, ...]) -> None:
    plan, readings = paths
    out.print(
        f"[bold]{S(f.title)}[/bold] — fit of {int(f.used.sum())} of {plural(f.recipe.n_tubes, 'reading')}"
    )
    for tube, why in f.excluded:
        hint = " (--keep-out-of-range keeps it)" if "linear range" in why else ""
        out.print(f"[yellow]left out[/yellow] {S(tube)}: {S(why)}{hint}")
    _print_constants(f, "Fitted parameters", ".2f", p)
    if f.determined and f.dof < 1:
        out.print(f.chi2_verdict)
    if f.interval_note:
        out.print(f"[yellow]{S(f.interval_note)}[/yellow]")
    for tube, z, shift in f.suspects:
        cmd = f"kplan fit {plan} {readings} --exclude {','.join((*skip, tube))}"
        out.print(
            f"[red]suspect[/red] {S(tube)}: its reading lies {shift:+.3f} from what the other tubes predict "
            f"(z = {z:+.1f}); to leave it out: {S(cmd)}"
        )
    _print_residuals(f)


def _print_residuals(f) -> None:
    import numpy as np
    from rich.table import Table

    t = Table(title="Residuals")
    for c in ("tube", "measured A", "fitted A", "residual", "standardised"):
        t.add_column(c, justify="right")
    for i, tube in enumerate(f.recipe.tubes):
        z = float(f.standardised[i])
        zt = "—" if not np.isfinite(z) else f"{z:+.2f}"
        if not f.used[i]:
            zt = f"{zt} (left out)"
        elif f.outliers[i]:
            zt = f"[red]{zt} suspect[/red]"
        fa = f"{f.fitted[i]:.3f}" if np.isfinite(f.fitted[i]) else "—"
        rs = f"{f.residual[i]:+.4f}" if np.isfinite(f.residual[i]) else "—"
        t.add_row(S(tube), f"{f.absorbance[i]:.3f}", fa, rs, zt)
    out.print(t)
