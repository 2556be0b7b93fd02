"""Whole spectra on paper: the report's figures for a plan with spectra, and the fit report (the fitted
constants, the fitted spectra with their bands, the factor analysis and each tube's residuals)."""

from __future__ import annotations

import numpy as np

from . import fmt


def report_figures(assessment, summary: dict) -> list[dict]:
    """The design report's figures for whole spectra."""
    from markupsafe import Markup

    from ..jobs.spectra.curves import spectra_curves
    from . import figures as fig
    from . import spectra_figures as sf

    sp = summary["spectra"]
    rows = sp["by_wavelength"]
    curves = spectra_curves(assessment.study, assessment.recipe)
    share = np.array([np.nan if r["information_share"] is None else r["information_share"] for r in rows])
    se1 = np.array([np.inf if r["se_single"] is None else r["se_single"] for r in rows])
    ok = np.array([r["eligible"] for r in rows])
    target = assessment.study.target
    label = fmt.param_label(f"log_beta[{target}]")
    out = [
        {
            "svg": Markup(sf.information_svg(curves, share)),
            "caption": f"The species' spectra (solid: fitted at every wavelength; dashed: known) and where "
            f"the "
            f"information about {label} lies: each wavelength's share, from the whole-spectrum Cramér–Rao "
            f"bound.",
        },
        {
            "svg": Markup(
                sf.single_wavelength_svg(curves.wavelength_nm, se1, ok, sp["se_whole_spectrum"] or np.nan)
            ),
            "caption": f"SE of {label} from one wavelength alone (where the highest reading is in the linear "
            f"range) "
            f"against the whole spectrum.",
        },
        {
            "svg": Markup(sf.tube_spectra_svg(curves)),
            "caption": "Each tube's expected spectrum; readings above the linear range would be left out.",
        },
    ]
    mc = fig.assessment_mc_figure(
        assessment,
        "Monte-Carlo fits of simulated whole-spectrum experiments against the Cramér–Rao normal curve.",
    )
    return out + ([mc] if mc is not None else [])


def report_facts(plan, facts: list) -> list:
    """The report's facts with the window in place of the single wavelength."""
    from ..jobs.compile_spectra import window_grid

    w = window_grid(plan)
    o = plan.optics
    window = f"{w[0]:g}–{w[-1]:g} nm every {o.step_nm:g} nm, path {fmt.fixed(o.path_cm, 0.001)} cm"
    return [("Whole spectra", window) if k == "Wavelength" else (k, v) for k, v in facts]


def fit_context(plan, fit, *, paper: str, date: str) -> dict:
    """Template context of the fit report of whole spectra (``templates/spectra_fit.html.j2``)."""
    from markupsafe import Markup

    from . import spectra_figures as sf

    s = fit.summary()
    guess = None
    if plan is not None:
        from ..jobs.compile import compile_study

        sp = compile_study(plan).spectra.at(fit.wavelength_nm)
        idx = [plan_index(plan, n) for n in fit.spectra_names]
        guess = np.array(
            [sp.epsilon_M_cm[:, i] if i is not None else np.zeros(fit.wavelength_nm.size) for i in idx]
        )
    figs = [
        {
            "svg": Markup(
                sf.fitted_spectra_svg(
                    fit.wavelength_nm, fit.spectra_names, fit.epsilon, fit.epsilon_se, guess
                )
            ),
            "caption": "Fitted spectra with ±2 SE bands (the constants' uncertainty included); dashed: the "
            "plan's "
            "guesses.",
        }
    ]
    if fit.factors is not None:
        figs.append(
            {
                "svg": Markup(
                    sf.singular_values_svg(fit.factors.singular_values[:12], fit.factors.n_indicator)
                ),
                "caption": "Singular values of the data matrix; marked: the significant factors by "
                "Malinowski's "
                "indicator function.",
            }
        )
    params = [
        {
            "name": fmt_label(p["name"]),
            "estimate": _num(p["estimate"], 4),
            "se": _num(p["se"], 2),
            "promised": _num(p["promised_se"], 2),
            "ci": _ci(p.get("profile_ci95")),
        }
        for p in s["parameters"]
    ]
    ctx = {
        "paper": paper,
        "title": fit.title,
        "date": date,
        "determined": fit.determined,
        "reason": fit.reason,
        "facts": [
            ("Readings", f"{s['readings_used']} used, {s['readings_left_out']} left out"),
            ("Tubes × wavelengths", f"{len(fit.tubes)} × {fit.wavelength_nm.size}"),
            ("χ²", f"{fmt.sig(fit.chi2, 4)} on {fit.dof} degrees of freedom"),
        ],
        "chi2_verdict": _sentence(fit.chi2_verdict),
        "factor_verdict": _sentence(fit.factor_verdict),
        "params": params,
        "figures": figs,
        "tubes": [
            {
                "tube": t["tube"],
                "rms": _num(t["rms_standardised"], 3),
                "p": _num(t["p_value"], 3),
                "outlier": t["outlier"],
            }
            for t in s["tubes"]
        ],
        "excluded": s["excluded"],
    }
    return ctx


def _sentence(text: str) -> str:
    return text[:1].upper() + text[1:]


def plan_index(plan, name: str) -> int | None:
    absorbers = ["M", "L", *(sp.name for sp in plan.species)]
    return absorbers.index(name) if name in absorbers else None


def fmt_label(name: str) -> str:
    return fmt.param_label(name)


def _num(x, digits: int) -> str:
    return "—" if x is None else fmt.sig(x, digits)


def _ci(ci) -> str:
    if not ci:
        return "—"
    lo, hi = ci
    return f"{_num(lo, 4) if lo is not None else '(open)'} – {_num(hi, 4) if hi is not None else '(open)'}"
