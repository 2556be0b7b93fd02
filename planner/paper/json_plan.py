"""The ``--json`` shapes of planning: assessments, designs, model checks, whole spectra, classic series."""

from __future__ import annotations

from .json_fields import attrs, finite, float_or_none, num, nums


# --------------------------------------------------------------------------------------------------
# planning: checks, assessment, what limits it, the model check, designs
# --------------------------------------------------------------------------------------------------
def check_json(c) -> dict:
    return {"id": c.id, "status": c.status, "message": c.message}


def parameter_json(q) -> dict:
    """One fitted parameter of an assessment (:class:`~planner.jobs.plan.assess.ParameterRow`)."""
    return {
        "name": q.name,
        **float_or_none(q, "guess true"),
        **finite(q, "se mc_sd mc_bias"),  # the Monte-Carlo's are None without trials
        "mc_ci95": None if q.mc_ci95 is None else nums(q.mc_ci95),
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
            "matrix": [[num(x) for x in row] for row in a.cramer_rao.corr],
        }
    if a.mc is not None:
        out["monte_carlo"] = {"trials": int(a.mc.estimates.shape[0]), "failed_fraction": a.mc.failed_fraction}
    if a.profile is not None:
        out["profile"] = {
            "log_beta": [float(x) for x in a.profile.log_beta],
            "delta_chi2": nums(a.profile.delta_chi2),
            "low_unbounded": a.profile.low_unbounded,
            "high_unbounded": a.profile.high_unbounded,
        }
    if a.limits is not None:
        out.update(limits_json(a.limits))
    if a.detection is not None:
        out["model_check"] = [alternative_json(d) for d in a.detection]
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
        **finite(d, "power power_noise_free noncentrality"),
        **attrs(d, "dof trials"),
    }


def spectra_detection_json(d) -> dict:
    """:func:`detection_json` of whole spectra: the factor analysis and the best single wavelength too."""
    return {
        **detection_json(d),
        **finite(d, "power_factors power_either"),
        "factors_main": d.factors_main,
        "best_single_wavelength_nm": num(d.best_single_wavelength_nm),
        "power_noise_free_single_wavelength": num(d.power_noise_free_single),
        "noncentrality_single_wavelength": num(d.noncentrality_single),
        "dof_single_wavelength": d.dof_single,
    }


def alternative_json(d) -> dict:
    """One alternative model's detection: :func:`spectra_detection_json` for whole spectra, else
    :func:`detection_json` (as :data:`~planner.paper.json_out.SHAPES` picks by the class)."""
    # by the class's name, as SHAPES picks: importing the class would load the factor analysis and, with
    # it, scipy (0.8 s of CPU) in every design of one wavelength
    whole = (
        f"{type(d).__module__}.{type(d).__qualname__}" == "planner.jobs.spectra.detection.SpectraDetection"
    )
    return spectra_detection_json(d) if whole else detection_json(d)


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
        "se_target_only": num(model_check.se_target_only),
        "se_guarded": num(model_check.se_guarded),
        "se_cost_ratio": num(model_check.se_guarded_over_target_only),
        "power_goal": POWER_GOAL,
        "power_margin": MARGIN,
        "reason": model_check.reason,
        "advice": list(model_check.advice),
        "alternatives": [
            {
                **alternative_json(g),
                "power_target_only": num(g.power if not model_check.replaced else t.power_noise_free),
                "power_noise_free_target_only": num(
                    g.power_noise_free if not model_check.replaced else t.power_noise_free
                ),
                other: num(t.power_noise_free),
                "power_best_any_cost": num(model_check.best_power[k])
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
            **attrs(d, "criterion robust seed target efficiency_bound"),
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
        "se_target": num(d.se_target),
        "se_equal_aliquots": num(d.se_equal),
        "se_ratio_vs_equal": num(d.se_equal_over_design),
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
            {"name": n, "estimate": num(e), "se": num(s)}
            for n, e, s in zip(nb.fit.names, nb.fit.estimate, nb.fit.se, strict=True)
        ],
        "se_now": num(nb.se_now),
        "se_after": num(nb.se_after),
        "se_after_even_batch": num(nb.se_after_even),
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
        "se_whole_spectrum": num(se),
        "best_single_wavelength_nm": num(sp.best_single_wavelength_nm),
        "se_best_single_wavelength": num(sp.se_best_single_wavelength),
        "se_ratio_single_over_spectrum": num(sp.se_best_single_wavelength / se) if se > 0 else None,
        "factors": factor_outlook_json(sp.factors) if sp.factors is not None else None,
        "by_wavelength": [
            {
                "wavelength_nm": float(w),
                "information_share": num(sp.information_share[k])
                if sp.information_share is not None
                else None,
                "se_single": num(sp.se_single[k]),
                "eligible": bool(sp.eligible[k]),
            }
            for k, w in enumerate(sp.wavelength_nm)
        ],
    }
    if sp.with_single_design:
        out["se_single_wavelength_design"] = num(sp.se_single_wavelength_design)
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
    return attrs(f, "model separation_sd nested log_beta epsilon_M_cm")
