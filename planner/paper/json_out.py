"""Every ``--json`` structure, made in one place from the jobs' result objects.

The jobs return frozen result objects (:class:`~planner.jobs.plan.assess.Assessment`,
:class:`~planner.jobs.plan.design.Design`, :class:`~planner.jobs.measure.fit.Fit`, …); the printed sheets
and the command line read their attributes. JSON is made only here, at the edge: :func:`to_json` turns any
result into the structure the README documents (and ``kplan … --json`` prints, ``design --out`` writes),
and :func:`json_safe` makes any value plain JSON (numpy values made Python ones, NaN and ±inf made null).
One function a shape; a shape used inside another (a check, a stock's preparation) is built by its own
function and called.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Any

import numpy as np

__all__ = ["json_safe", "to_json"]


def _f(x) -> float | None:
    """A float for JSON: None for a missing or non-finite value."""
    x = float(x) if x is not None else float("nan")
    return x if math.isfinite(x) else None


def _floats(values) -> list[float | None]:
    return [_f(x) for x in values]


def _table(**columns) -> list[dict]:
    """One dict per row from equal-length columns, keys in the order given."""
    keys = list(columns)
    return [dict(zip(keys, row, strict=True)) for row in zip(*columns.values(), strict=True)]


def _attrs(obj, names: str) -> dict:
    """``{name: obj.name}`` for the space-separated ``names`` (values made JSON by :func:`json_safe`)."""
    return {n: getattr(obj, n) for n in names.split()}


def _finite(obj, names: str) -> dict:
    """``{name: obj.name}`` as finite floats, None where missing or not finite."""
    return {n: _f(getattr(obj, n)) for n in names.split()}


def _float_or_none(obj, names: str) -> dict:
    """``{name: float(obj.name)}``, None where the attribute is None."""
    return {n: None if getattr(obj, n) is None else float(getattr(obj, n)) for n in names.split()}


def json_safe(obj: Any) -> Any:
    """``obj`` as plain JSON values: dicts, lists, str, int, float, bool and None.

    Numpy scalars and arrays become Python values, every NaN or ±inf becomes None (JSON has neither; a
    strict reader refuses the bare tokens Python's json would write), and a result object of the jobs
    becomes its documented structure (:func:`to_json`).
    """
    if obj is None or isinstance(obj, str | bool | int):
        return obj
    if isinstance(obj, dict):
        return {str(k): json_safe(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [json_safe(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return json_safe(obj.tolist())
    if isinstance(obj, np.generic):
        obj = obj.item()
    if isinstance(obj, float):
        return obj if math.isfinite(obj) else None
    shape = _shape_of(obj)
    if shape is not None:
        return json_safe(shape(obj))
    return obj


def to_json(result: Any) -> dict:
    """The documented JSON structure of a job's result (plain values: ready for ``json.dumps``).

    Raises
    ------
    TypeError
        For an object that has no JSON structure.
    """
    shape = _shape_of(result)
    if shape is None:
        raise TypeError(f"{type(result).__name__} has no JSON structure")
    return json_safe(shape(result))


# --------------------------------------------------------------------------------------------------
# planning: checks, assessment, what limits it, the model check, designs
# --------------------------------------------------------------------------------------------------
def check_json(c) -> dict:
    return {"id": c.id, "status": c.status, "message": c.message}


def parameter_json(q) -> dict:
    """One fitted parameter of an assessment (:class:`~planner.jobs.plan.assess.ParameterRow`)."""
    return {
        "name": q.name,
        "guess": float(q.guess),
        "true": float(q.true),
        "se": _f(q.se),
        "mc_sd": _f(q.mc_sd) if q.mc_sd is not None else None,
        "mc_bias": _f(q.mc_bias) if q.mc_bias is not None else None,
        "mc_ci95": [_f(q.mc_ci95[0]), _f(q.mc_ci95[1])] if q.mc_ci95 is not None else None,
    }


def tube_rows(a) -> list[dict]:
    """Every tube of an assessment: volumes, totals, species, expected reading ± sd (and its parts)."""
    st, r, m = a.state, a.recipe, a.model
    parts = a.absorbance_sd_parts
    total_sd = a.absorbance_sd
    rows = []
    for i, t in enumerate(r.tubes):
        row = {
            "tube": t,
            "volumes_mL": {sid: float(r.volumes_mL[i, j]) for j, sid in enumerate(r.stock_ids)},
            "total_M": {"M": float(st.totals_M[i, 0]), "L": float(st.totals_M[i, 1])},
            "species_M": {
                "M": float(st.free_M[i]),
                "L": float(st.free_L[i]),
                **{s: float(st.species_M[i, k]) for k, s in enumerate(m.species)},
            },
            "absorbance": float(st.absorbance[i]),
            "absorbance_sd": float(total_sd[i]),
            "saturation": float(st.saturation[i]),
            "ionic_strength_M": float(st.ionic_strength_M[i]),
            "in_linear_range": bool(m.linear_range[0] <= st.absorbance[i] <= m.linear_range[1]),
        }
        if parts is not None:
            row["absorbance_sd_parts"] = {k: float(v[i]) for k, v in parts.items()}
        rows.append(row)
    return rows


def assessment_json(a) -> dict:
    """``kplan assess --json``: the baseline keys of the plan format (and a few more)."""
    out: dict = {
        "title": a.title,
        "verdict": a.verdict,
        "verdict_reason": a.verdict_reason,
        "goal_se": a.goal_se,
        "parameters": [parameter_json(q) for q in a.parameters],
        "tubes": tube_rows(a),
        "checks": [check_json(c) for c in a.checks],
    }
    if a.cramer_rao is not None and a.params is not None:
        out["correlation"] = {
            "names": list(a.params.names),
            "matrix": [[_f(x) for x in row] for row in a.cramer_rao.corr],
        }
    if a.mc is not None:
        out["monte_carlo"] = {"trials": int(a.mc.estimates.shape[0]), "failed_fraction": a.mc.failed_fraction}
    if a.profile is not None:
        out["profile"] = {
            "log_beta": [float(x) for x in a.profile.log_beta],
            "delta_chi2": _floats(a.profile.delta_chi2),
            "low_unbounded": a.profile.low_unbounded,
            "high_unbounded": a.profile.high_unbounded,
        }
    if a.limits is not None:
        out.update(limits_json(a.limits))
    if a.detection is not None:
        out["model_check"] = [to_json(d) for d in a.detection]
    if a.spectra is not None:
        out["spectra"] = spectra_facts_json(a.spectra)
    return out


def share_json(s) -> dict:
    return {"source": s.source, "share": float(s.share)}


def change_json(c) -> dict:
    return {"change": c.change, "se": float(c.se), "kind": c.kind}


def limits_json(lim) -> dict:
    """What limits the precision: the shares by source, the cost of fitting ε, the changes priced."""
    out: dict = {"error_shares": [share_json(s) for s in lim.shares]}
    if lim.epsilon_names:
        out["epsilon_fitted"] = {
            "parameters": list(lim.epsilon_names),
            "variance_factor": float(lim.epsilon_factor),
            "se_if_known": float(lim.se_if_epsilon_known),
        }
    if lim.changes:
        out["best_change"] = {**change_json(lim.changes[0]), "se_now": float(lim.se)}
        out["changes"] = [change_json(c) for c in lim.changes]
    return out


def detection_json(d) -> dict:
    """How often the data would reveal one alternative model."""
    return {
        "alternative": d.alternative,
        **_finite(d, "power power_noise_free noncentrality"),
        **_attrs(d, "dof trials"),
    }


def spectra_detection_json(d) -> dict:
    """:func:`detection_json` of whole spectra: the factor analysis and the best single wavelength too."""
    return {
        **detection_json(d),
        **_finite(d, "power_factors power_either"),
        "factors_main": d.factors_main,
        "best_single_wavelength_nm": _f(d.best_single_wavelength_nm),
        "power_noise_free_single_wavelength": _f(d.power_noise_free_single),
        "noncentrality_single_wavelength": _f(d.noncentrality_single),
        "dof_single_wavelength": d.dof_single,
    }


def model_check_json(model_check) -> dict:
    """The design's model check: the chosen design's power beside the other design's, per alternative."""
    from ..inference.discrimination import POWER_GOAL
    from ..jobs.plan.model_check import MARGIN

    other = "power_target_only" if model_check.replaced else "power_best_guarded"
    return {
        "weight": model_check.weight,
        "se_cost_cap": model_check.cost_cap,
        "replaced": model_check.replaced,
        "tubes_moved": model_check.moves,
        "se_target_only": _f(model_check.se_target_only),
        "se_guarded": _f(model_check.se_guarded),
        "se_cost_ratio": _f(model_check.se_guarded_over_target_only),
        "power_goal": POWER_GOAL,
        "power_margin": MARGIN,
        "reason": model_check.reason,
        "advice": list(model_check.advice),
        "alternatives": [
            {
                **to_json(g),
                "power_target_only": _f(g.power if not model_check.replaced else t.power_noise_free),
                "power_noise_free_target_only": _f(
                    g.power_noise_free if not model_check.replaced else t.power_noise_free
                ),
                other: _f(t.power_noise_free),
                "power_best_any_cost": _f(model_check.best_power[k])
                if k < len(model_check.best_power)
                else None,
            }
            for k, (g, t) in enumerate(model_check.detection)
        ],
    }


def design_json(d) -> dict:
    """``kplan design --json`` and ``design.json``: the assessment's keys plus the design's own."""
    out = assessment_json(d.assessment)
    out.update(
        {
            **_attrs(d, "criterion robust seed target efficiency_bound"),
            "exact_efficiency": float(d.exact.efficiency),
            "candidates": d.n_candidates,
            "candidates_feasible": d.n_feasible,
            "se_target": d.se_target,
            "se_even_series": d.se_even,
            "se_ratio_vs_even": d.se_even_over_design,
            "se_across_guess": [
                {"log_beta": a, "se_design": b, "se_even_series": c} for a, b, c in d.se_across
            ],
            "notes": list(d.notes),
            "verdict": d.verdict,
            "verdict_reason": d.verdict_reason,
        }
    )
    if d.model_check is not None:
        out["model_check"] = model_check_json(d.model_check)
    return out


def titration_json(d) -> dict:
    """``kplan design --json`` of a titration: the assessment's keys and the ``titration`` block."""
    out = assessment_json(d.assessment)
    t = d.study.bench.titration
    out["titration"] = {
        "cell": t.cell,
        "titrant": d.titrant,
        "start_volume_mL": t.start_volume_mL,
        "max_volume_mL": t.max_volume_mL,
        "additions": len(d.schedule.steps),
        "aliquots_mL": [float(x) for x in d.schedule.aliquot_mL],
        "added_mL": [float(x) for x in d.schedule.added_mL],
        "se_target": _f(d.se_target),
        "se_equal_aliquots": _f(d.se_equal),
        "se_ratio_vs_equal": _f(d.se_equal_over_design),
        "robust": d.robust,
        "candidates": d.candidates,
        "candidates_feasible": d.feasible,
    }
    return out


def sequential_json(nb) -> dict:
    """The ``sequential`` block of ``design --after``: what the readings taught and what comes next."""
    return {
        "tubes_measured": nb.measured.recipe.n_tubes,
        "fitted": [
            {"name": n, "estimate": _f(e), "se": _f(s)}
            for n, e, s in zip(nb.fit.names, nb.fit.estimate, nb.fit.se, strict=True)
        ],
        "se_now": _f(nb.se_now),
        "se_after": _f(nb.se_after),
        "se_after_even_batch": _f(nb.se_after_even),
        "stop": nb.stop,
        "reason": nb.reason,
        "next_tubes": list(nb.recipe.tubes) if nb.recipe is not None else [],
        "censored": list(nb.censored),
        "prior_carried": True,
    }


def next_batch_json(nb) -> dict:
    """``kplan design --after --json`` and its ``design.json``: the assessment of all tubes together, the
    design's own keys, the SEs of all tubes together and the ``sequential`` block."""
    out: dict = assessment_json(nb.assessment) if nb.assessment is not None else {}
    if nb.design is not None and not nb.stop:
        d = design_json(nb.design)
        for key in ("criterion", "robust", "seed", "target", "efficiency_bound", "exact_efficiency"):
            out[key] = d[key]
        out.update(
            {
                "candidates": d["candidates"],
                "candidates_feasible": d["candidates_feasible"],
                "se_target": nb.se_after,
                "se_even_series": nb.se_after_even,
                "se_ratio_vs_even": nb.se_after_even / nb.se_after if nb.se_after > 0 else None,
                "notes": d["notes"],
            }
        )
    out["sequential"] = sequential_json(nb)
    return out


# --------------------------------------------------------------------------------------------------
# whole spectra
# --------------------------------------------------------------------------------------------------
def spectra_facts_json(sp) -> dict:
    """The ``spectra`` part of an assessment or design of whole spectra."""
    se = sp.se_whole_spectrum
    out = {
        "wavelengths": int(sp.wavelength_nm.size),
        "window_nm": [float(sp.wavelength_nm[0]), float(sp.wavelength_nm[-1])],
        "fitted_spectra": list(sp.fitted_spectra),
        "readings_used": int(sp.readings_used),
        "readings": int(sp.readings),
        "se_whole_spectrum": _f(se),
        "best_single_wavelength_nm": _f(sp.best_single_wavelength_nm),
        "se_best_single_wavelength": _f(sp.se_best_single_wavelength),
        "se_ratio_single_over_spectrum": _f(sp.se_best_single_wavelength / se) if se > 0 else None,
        "factors": factor_outlook_json(sp.factors) if sp.factors is not None else None,
        "by_wavelength": [
            {
                "wavelength_nm": float(w),
                "information_share": _f(sp.information_share[k])
                if sp.information_share is not None
                else None,
                "se_single": _f(sp.se_single[k]),
                "eligible": bool(sp.eligible[k]),
            }
            for k, w in enumerate(sp.wavelength_nm)
        ],
    }
    if sp.with_single_design:
        out["se_single_wavelength_design"] = _f(sp.se_single_wavelength_design)
    return out


def factor_outlook_json(fo) -> dict:
    out: dict = {"absorbing_species": fo.absorbing_species, "above_noise": fo.above_noise}
    out.update(found_share=fo.found_share, found_median=fo.found_median)
    return out


# --------------------------------------------------------------------------------------------------
# classic series
# --------------------------------------------------------------------------------------------------
def classic_series_json(s) -> dict:
    """``kplan series --json``: the verdict, the tubes (as ``kplan assess --json``), the checks and the
    method's own findings."""
    out = {
        "title": s.title,
        "method": s.method,
        "question": s.question,
        "answers": s.answers,
        "verdict_reason": s.verdict_reason,
        "tubes": tube_rows(s.assessment) if s.assessment is not None else [],
        "checks": [check_json(c) for c in s.checks],
    }
    out.update(s.extra)
    return out


def rival_json(f) -> dict:
    """A rival stoichiometry's best fit to a Job curve."""
    return _attrs(f, "model separation_sd nested log_beta epsilon_M_cm")


# --------------------------------------------------------------------------------------------------
# after the measurement
# --------------------------------------------------------------------------------------------------
def fit_parameter_rows(fit) -> list[dict]:
    """The ``parameters`` of a fit (``name``, ``estimate``, ``se``, ``promised_se``, the error model's SE
    where the fit has one, and for the target ``profile_ci95``)."""
    t = f"log_beta[{fit.target}]"
    own = getattr(fit, "se_error_model", None)
    rows = []
    for k, (n, e, s, p) in enumerate(zip(fit.names, fit.estimate, fit.se, fit.promised_se, strict=True)):
        row = {"name": n, "estimate": _f(e), "se": _f(s), "promised_se": _f(p)}
        if own is not None:
            row["se_error_model"] = _f(own[k])
        if n == t:
            ci = fit.profile_ci95
            row["profile_ci95"] = [_f(ci[0]), _f(ci[1])] if ci is not None else None
        rows.append(row)
    return rows


def fit_head(fit) -> dict:
    """The keys every fit's JSON starts with: title, target, converged, determined, reason, parameters,
    χ² with its dof, both tails and verdict, and the tubes left out; ``target_fitted`` is false when the
    plan held the target's constant fixed (then the fit did not measure it)."""
    from ..jobs.measure.fit import target_fitted

    return {
        **_attrs(fit, "title target converged determined reason"),
        "target_fitted": target_fitted(fit),
        "parameters": fit_parameter_rows(fit),
        "chi2": _f(fit.chi2),
        "dof": fit.dof,
        **_finite(fit, "p_value p_low"),
        "chi2_verdict": fit.chi2_verdict,
        "excluded": [{"tube": tb, "reason": r} for tb, r in fit.excluded],
    }


def fit_json(fit) -> dict:
    """``kplan fit --json``: the constants, χ², the interval's widening, the suspects and every tube."""
    return {
        **fit_head(fit),
        "interval_scale": _f(fit.interval_scale),
        "interval_note": fit.interval_note,
        "suspects": [{"tube": tb, "z": _f(z), "shift": _f(d)} for tb, z, d in fit.suspects],
        "tubes": _table(
            tube=fit.recipe.tubes,
            absorbance=_floats(fit.absorbance),
            fitted=_floats(fit.fitted),
            residual=_floats(fit.residual),
            standardised=_floats(fit.standardised),
            used=fit.used.astype(bool),
            outlier=fit.outliers.astype(bool),
        ),
    }


def spectra_fit_json(fit) -> dict:
    """``kplan fit --json`` of whole spectra: the constants, the fitted spectra and the factor analysis."""
    fa = fit.factors
    return {
        **fit_head(fit),
        "tubes": [
            {"tube": tb, "rms_standardised": _f(rms), "p_value": _f(p), "outlier": bool(o)}
            for tb, rms, p, o in zip(fit.tubes, fit.tube_rms, fit.tube_p, fit.outlier_tubes, strict=True)
        ],
        "readings_used": int(fit.used.sum()),
        "readings_left_out": fit.readings_left_out,
        "wavelengths_left_out": fit.wavelengths_left_out,
        "spectra": {
            "wavelength_nm": [float(w) for w in fit.wavelength_nm],
            "species": {
                n: {"epsilon": _floats(fit.epsilon[k]), "se": _floats(fit.epsilon_se[k])}
                for k, n in enumerate(fit.spectra_names)
            },
        },
        "factors": {
            "singular_values": _floats(fa.singular_values[:12]) if fa else [],
            "significant_indicator": fa.n_indicator if fa else None,
            "significant_f_test": fa.n_f_test if fa else None,
            **_attrs(fit, "absorbing_species above_noise"),
            "verdict": fit.factor_verdict,
        },
    }


# --------------------------------------------------------------------------------------------------
# stocks
# --------------------------------------------------------------------------------------------------
def glassware_json(g) -> dict:
    """A catalogue item of glassware."""
    return {
        "kind": g.kind,
        "capacity_mL": float(g.capacity_mL),
        "class": g.cls,
        **_float_or_none(g, "tolerance_mL graduation_mL random_mL repeatability_mL"),
        "source": g.source,
        "from_memory": bool(g.from_memory),
        **_attrs(g, "note label"),
    }


def dilution_step_json(s) -> dict:
    return {
        "pipette_mL": s.pipette.capacity_mL,
        "flask_mL": s.flask.capacity_mL,
        "pipette": s.pipette.label,
        "flask": s.flask.label,
        **_attrs(s, "factor from_conc_M to_conc_M u_rel"),
    }


def preparation_json(p) -> dict:
    """How a stock's metal or ligand salt is weighed (and diluted), with its uncertainty."""
    return {
        **_attrs(p, "conc_M formula formula_weight_g_mol"),
        "flask": glassware_json(p.flask),
        "weighed_flask": glassware_json(p.weighed_flask),
        **_attrs(p, "weighed_conc_M mass_g u_mass_g direct_mass_g min_weight_g purity purity_half_width"),
        **_attrs(p, "u_conc_M u_rel"),
        "u_parts": {k: float(v) for k, v in p.u_parts.items()},
        "steps": [dilution_step_json(s) for s in p.steps],
    }


def solute_json(x) -> dict:
    return _attrs(x, "role formula name conc_M ions formula_weight_g_mol mass_g")


def mass_basis_json(b) -> dict:
    return {
        **_attrs(b, "set_by flask_reason"),
        **_finite(b, "mass_g recipe_mass_g min_weight_g direct_mass_g repeatability_to_weigh_directly_g"),
        "scarce": b.scarce,
        "least_mass_g": _f(b.least_mass_g),
    }


def stock_need_json(n) -> dict:
    """One stock of ``kplan stocks --json``: how to make it and how much is needed."""
    gap = n.charge_gap
    return {
        **_attrs(n, "id label component"),
        "preparation": preparation_json(n.preparation) if n.preparation else None,
        **_attrs(n, "problem recipe_mL deliveries needed_mL on_hand_mL enough plan_rsd"),
        "solutes": [solute_json(x) for x in n.solutes],
        **_attrs(n, "solvent flask_mL"),
        "charge_gap": _attrs(gap, "ion conc_M ionic_strength_low") if gap else None,
        **_attrs(n, "flask_label"),
        "mass_set_by": mass_basis_json(n.mass_basis) if n.mass_basis else None,
        "scarce": n.scarce,
    }


def stocks_json(title: str, needs) -> dict:
    """``kplan stocks --json``."""
    return json_safe({"title": title, "stocks": [stock_need_json(n) for n in needs]})


# --------------------------------------------------------------------------------------------------
# a class: cards, the class stock list, grades
# --------------------------------------------------------------------------------------------------
def spread_json(sp) -> dict:
    lo, mid, hi = sp.saturation
    return {
        "distinct_compositions": sp.distinct,
        "ratio_span": sp.ratio_span if np.isfinite(sp.ratio_span) else None,
        "saturation": {"minus_1sd": list(lo), "guess": list(mid), "plus_1sd": list(hi)},
    }


def card_json(c) -> dict:
    out = {
        "student": c.student,
        "section": c.section,
        "bench": c.bench,
        "passes": c.passes,
        "problems": c.problems,
        "verdict": c.assessment.verdict,
        "se": _f(c.assessment.target_se),
        "series": None
        if c.series is None
        else {"kind": c.series.kind, "varied": c.series.varied, "partner": c.series.partner},
    }
    if c.spread is not None:
        out.update(spread_json(c.spread))
    return out


def class_set_json(cs) -> dict:
    """The class set of ``kplan cards --json`` (the command adds the stocks and the files it wrote)."""
    return {
        **_attrs(cs, "title target goal_se lab"),
        "students": len(cs.cards),
        "tubes_per_student": cs.best.n_tubes,
        **_attrs(cs, "seed sound distinct"),
        "jitter_steps": cs.radius_steps,
        "jitter_mL": cs.radius_steps * cs.step_mL,
        "se": {k: _f(v) for k, v in cs.se.items()},
        "efficiency_vs_best_copies": _f(cs.efficiency),
        "efficiency_vs_best_copies_without_stock": _f(cs.efficiency_without_stock),
        "se_ratio_even_copies_vs_pooled": _f(cs.se["pooled_even_copies"] / cs.se["pooled"]),
        "cards": [card_json(c) for c in cs.cards],
        "failing": [s for s, _ in cs.failing()],
        "notes": list(cs.notes),
    }


def class_stock_json(s) -> dict:
    """One stock of the class stock list."""
    return {
        **_attrs(s, "id label tubes_mL benches allowance_mL total_mL"),
        "sections": [{"section": a, "tubes_mL": v, "benches": b, "total_mL": t} for a, v, b, t in s.sections],
        **_attrs(s, "on_hand_mL enough shortfall_mL"),
        "preparation": preparation_json(s.preparation) if s.preparation else None,
        **_attrs(s, "batches problem"),
        "section_preparations": [
            None if sp is None else {"preparation": preparation_json(sp[0]), "batches": sp[1]}
            for sp in s.section_preparations
        ],
        "make": stock_need_json(s.need) if s.need is not None else None,
        "section_make": [
            None if sn is None else {"make": stock_need_json(sn[0]), "batches": sn[1]}
            for sn in s.section_needs
        ],
    }


def cards_json(cs, stocks, files) -> dict:
    """``kplan cards --json``: the class set, its stock list and the files written."""
    out = class_set_json(cs)
    out["stocks"] = [class_stock_json(s) for s in stocks]
    out["files"] = [str(f) for f in files]
    return json_safe(out)


def student_json(s) -> dict:
    """One student of ``kplan grade --json``: the verdict, the χ² test, their own fit and every reading
    against the key's band and the class's."""
    own = {"log_beta": _f(s.own[0]), "se": _f(s.own[1])} if s.own is not None else None
    return {
        **_attrs(s.card, "student name section"),
        **_attrs(s, "verdict explanation evidence candidate"),
        "chi2": _f(s.chi2),
        "dof": s.dof,
        "p_value": _f(s.p_value),
        **_attrs(s, "judged_against tubes_in_band tubes_in_class_band"),
        "tubes": int(s.in_band.size),
        "own_fit": own,
        "readings": _table(
            tube=s.card.recipe.tubes,
            absorbance=_floats(s.absorbance),
            expected=_floats(s.card.expected),
            band_low=_floats(s.card.band_low),
            band_high=_floats(s.card.band_high),
            in_band=s.in_band.astype(bool),
            class_expected=_floats(s.class_expected),
            class_band_low=_floats(s.class_band_low),
            class_band_high=_floats(s.class_band_high),
            in_class_band=s.in_class_band.astype(bool),
        ),
    }


def pooled_parameter_json(p) -> dict:
    row = {
        "name": p.name,
        **_finite(p, "estimate se"),
        **_attrs(p, "guess guess_sd"),
        "off_by": _f(p.off_by),
        "off_by_sd": _f(p.off_by_sd) if p.off_by_sd is not None else None,
    }
    if p.is_target:
        ci = p.profile_ci95
        row["profile_ci95"] = [_f(ci[0]), _f(ci[1])] if ci is not None else None
    return row


def class_grade_json(g) -> dict:
    """``kplan grade --json``: every student, the class's constants beside the plan's guess, and what the
    key's bands missed because of it."""
    pooled = None
    cm = g.pooled
    if cm is not None:
        pooled = {
            "students": int(cm.used.sum()),
            "tubes": cm.tubes,
            "determined": cm.determined,
            "reason": cm.reason,
            "parameters": [pooled_parameter_json(p) for p in g.pooled_parameters],
            "chi2": _f(cm.chi2),
            "dof": cm.dof,
            "p_value": _f(cm.p_value),
            "p_low": _f(cm.p_low),
            "chi2_verdict": g.pooled_chi2_verdict,
            "interval_scale": _f(cm.scale),
            "stocks": [
                {"stock": sid, "factor": _f(factor), "factor_sd": _f(sd)}
                for sid, factor, sd in g.stock_factors
            ],
        }
    shares = g.band_shares
    return {
        "title": g.title,
        "target": g.target,
        "judged_against": g.judged_against,
        "students": [student_json(s) for s in g.students],
        "pooled": pooled,
        "guess_note": g.guess_note,
        "band_shares": {"key": shares.key, "class": shares.in_class, "readings": shares.readings},
        "key_note": g.key_note,
        "excluded": [{"student": s, "reason": r} for s, r in g.excluded],
        "unknown_students": list(g.unknown),
    }


def explanation_json(e) -> dict:
    return {
        **_attrs(e, "kind text"),
        **_float_or_none(e, "delta_loglik score"),
        "chi2_after": _f(e.chi2_after),
        "passes": bool(e.passes),
    }


def diagnosis_json(d) -> dict:
    """The likely mix-up behind one set of readings, with the explanations ranked."""
    cand = d.candidate
    return {
        "explanation": d.text,
        "kind": d.best.kind if d.best else None,
        "evidence": d.evidence,
        "candidate": cand.text if cand else None,
        "as_likely": [explanation_json(e) for e in d.ties],
        "chi2": float(d.chi2),
        "ranked": [explanation_json(e) for e in d.ranked],
    }


# --------------------------------------------------------------------------------------------------
# the numerical core's results and the reagent library, for the library's user
# --------------------------------------------------------------------------------------------------
def fit_result_json(r) -> dict:
    """A batch of least-squares fits: counts, means and medians (one fit: its θ, SE and χ² too)."""
    theta = np.atleast_2d(r.theta)
    se = np.atleast_2d(r.se)
    chi2 = np.atleast_1d(r.chi2)
    conv = np.atleast_1d(r.converged)
    n_iter = np.atleast_1d(r.n_iter)
    good = theta[conv]
    nan = np.full(theta.shape[1], np.nan)
    out: dict = {
        "n_trials": int(theta.shape[0]),
        "n_params": int(theta.shape[1]),
        "dof": int(r.dof),
        "n_converged": int(conv.sum()),
        "n_iter_median": _f(np.median(n_iter)),
        "n_iter_max": int(n_iter.max()),
        "theta_mean": _floats(good.mean(axis=0) if good.size else nan),
        "theta_sd": _floats(good.std(axis=0, ddof=1) if good.shape[0] > 1 else nan),
        "se_median": _floats(np.median(se[conv], axis=0) if good.size else nan),
        "chi2_median": _f(np.median(chi2[conv])) if good.size else None,
    }
    if r.status is not None:
        codes, counts = np.unique(np.atleast_1d(r.status), return_counts=True)
        out["status_counts"] = {str(int(c)): int(n) for c, n in zip(codes, counts, strict=True)}
    if theta.shape[0] == 1:
        out["theta"] = _floats(theta[0])
        out["se"] = _floats(se[0])
        out["chi2"] = _f(chi2[0])
    return out


def speciation_json(s) -> dict:
    """Concentrations in mol/L as nested lists."""
    return {
        "free_M": np.asarray(s.free_M).tolist(),
        "free_L": np.asarray(s.free_L).tolist(),
        "species_M": np.asarray(s.species_M).tolist(),
        "M_tot_M": np.asarray(s.M_tot_M).tolist(),
        "L_tot_M": np.asarray(s.L_tot_M).tolist(),
    }


def sensitivity_json(s) -> dict:
    """Every field of the sensitivities as nested lists."""
    return {name: np.asarray(value).tolist() for name, value in vars(s).items()}


def approximate_design_json(d) -> dict:
    """An approximate design: support indices and weights, criterion value, equivalence check."""
    idx = d.support
    return {
        **_attrs(d, "criterion target"),
        "support": [int(i) for i in idx],
        "weights": [float(w) for w in d.weights[idx]],
        **_float_or_none(d, "criterion_value max_sensitivity bound"),
        "efficiency_lower_bound": d.efficiency_lower_bound,
        "n_iter": int(d.n_iter),
        "converged": bool(d.converged),
    }


def exact_design_json(d) -> dict:
    """An exact design: support indices and counts, criterion value, efficiency."""
    idx = np.flatnonzero(d.counts)
    return {
        "support": [int(i) for i in idx],
        "counts": [int(c) for c in d.counts[idx]],
        "n_tubes": d.n_tubes,
        "criterion_value": float(d.criterion_value),
        "efficiency": float(d.efficiency),
        "starts": int(d.starts),
    }


def hazards_json(h) -> dict:
    """A reagent's entry in the library (GHS signal word, statements, pictograms, handling)."""
    from .safety import PICTOGRAMS

    return {
        **_attrs(h, "name formula signal_word"),
        "statements": [{"code": c, "text": t} for c, t in h.statements()],
        "pictograms": [{"code": p, "name": PICTOGRAMS[p]} for p in h.pictograms],
        **_attrs(h, "cmr cmr_codes classes incompatible ppe waste notes source from_memory checked"),
    }


def plan_reagent_json(r) -> dict:
    return {
        **_attrs(r, "name stock_ids inferred message"),
        "hazards": hazards_json(r.hazards) if r.hazards else None,
    }


def clash_json(c) -> dict:
    return _attrs(c, "classes reagents advice")


# --------------------------------------------------------------------------------------------------
# which shape a result has (by its class, named so that nothing is imported until a shape is asked for)
# --------------------------------------------------------------------------------------------------
SHAPES: dict[str, Callable[[Any], dict]] = {
    "planner.jobs.plan.checks.Check": check_json,
    "planner.jobs.plan.assess.ParameterRow": parameter_json,
    "planner.jobs.plan.assess.Assessment": assessment_json,
    "planner.jobs.plan.limits.Share": share_json,
    "planner.jobs.plan.limits.Change": change_json,
    "planner.jobs.plan.limits.Limits": limits_json,
    "planner.inference.discrimination.Detection": detection_json,
    "planner.jobs.spectra.detection.SpectraDetection": spectra_detection_json,
    "planner.jobs.plan.model_check.ModelCheck": model_check_json,
    "planner.jobs.plan.design.Design": design_json,
    "planner.jobs.titration.titrate.TitrationDesign": titration_json,
    "planner.jobs.plan.sequential.NextBatch": next_batch_json,
    "planner.jobs.spectra.facts.SpectraFacts": spectra_facts_json,
    "planner.jobs.spectra.facts.FactorOutlook": factor_outlook_json,
    "planner.jobs.classic.common.ClassicSeries": classic_series_json,
    "planner.jobs.classic.rivals.RivalFit": rival_json,
    "planner.jobs.measure.fit.Fit": fit_json,
    "planner.jobs.spectra.fit.SpectraFit": spectra_fit_json,
    "planner.uncertainty.catalogue.GlasswareItem": glassware_json,
    "planner.uncertainty.stocks.DilutionStep": dilution_step_json,
    "planner.uncertainty.stocks.StockPreparation": preparation_json,
    "planner.jobs.stocks.needs.Solute": solute_json,
    "planner.jobs.stocks.mass_basis.MassBasis": mass_basis_json,
    "planner.jobs.stocks.needs.StockNeed": stock_need_json,
    "planner.jobs.classroom._series.Spread": spread_json,
    "planner.jobs.classroom.cards.Card": card_json,
    "planner.jobs.classroom.cards.ClassSet": class_set_json,
    "planner.jobs.classroom.stock_list.ClassStock": class_stock_json,
    "planner.jobs.classroom.grade.StudentGrade": student_json,
    "planner.jobs.classroom.grade_text.PooledParameter": pooled_parameter_json,
    "planner.jobs.classroom.grade.ClassGrade": class_grade_json,
    "planner.jobs.classroom.mixup.Explanation": explanation_json,
    "planner.jobs.classroom.mixup.Diagnosis": diagnosis_json,
    "planner.inference.fit_result.FitResult": fit_result_json,
    "planner.model.speciation.Speciation": speciation_json,
    "planner.model.sensitivities.Sensitivity": sensitivity_json,
    "planner.inference.approximate.ApproximateDesign": approximate_design_json,
    "planner.inference.exchange.ExactDesign": exact_design_json,
    "planner.paper.safety.ReagentHazards": hazards_json,
    "planner.paper.safety.PlanReagent": plan_reagent_json,
    "planner.paper.safety.Clash": clash_json,
}
"""Result class (module.qualified name) → the function that builds its JSON."""


def _shape_of(obj: Any) -> Callable[[Any], dict] | None:
    for cls in type(obj).__mro__:
        shape = SHAPES.get(f"{cls.__module__}.{cls.__qualname__}")
        if shape is not None:
            return shape
    return None
