"""The ``--json`` shapes after the measurement: the fits of readings and of whole spectra."""

from __future__ import annotations

from .json_fields import attrs, finite, num, nums, table


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
        row = {"name": n, "estimate": num(e), "se": num(s), "promised_se": num(p)}
        if own is not None:
            row["se_error_model"] = num(own[k])
        if n == t:
            ci = fit.profile_ci95
            row["profile_ci95"] = [num(ci[0]), num(ci[1])] if ci is not None else None
        rows.append(row)
    return rows


def fit_head(fit) -> dict:
    """The keys every fit's JSON starts with: title, target, converged, determined, reason, parameters,
    χ² with its dof, both tails and verdict, and the tubes left out; ``target_fitted`` is false when the
    plan held the target's constant fixed (then the fit did not measure it)."""
    from ..jobs.measure.fit import target_fitted

    return {
        **attrs(fit, "title target converged determined reason"),
        "target_fitted": target_fitted(fit),
        "parameters": fit_parameter_rows(fit),
        "chi2": num(fit.chi2),
        "dof": fit.dof,
        **finite(fit, "p_value p_low"),
        "chi2_verdict": fit.chi2_verdict,
        "excluded": [{"tube": tb, "reason": r} for tb, r in fit.excluded],
    }


def fit_json(fit) -> dict:
    """``kplan fit --json``: the constants, χ², the interval's widening, the suspects and every tube."""
    return {
        **fit_head(fit),
        "interval_scale": num(fit.interval_scale),
        "interval_note": fit.interval_note,
        "suspects": [{"tube": tb, "z": num(z), "shift": num(d)} for tb, z, d in fit.suspects],
        "tubes": table(
            tube=fit.recipe.tubes,
            absorbance=nums(fit.absorbance),
            fitted=nums(fit.fitted),
            residual=nums(fit.residual),
            standardised=nums(fit.standardised),
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
            {"tube": tb, "rms_standardised": num(rms), "p_value": num(p), "outlier": bool(o)}
            for tb, rms, p, o in zip(fit.tubes, fit.tube_rms, fit.tube_p, fit.outlier_tubes, strict=True)
        ],
        "readings_used": int(fit.used.sum()),
        "readings_left_out": fit.readings_left_out,
        "wavelengths_left_out": fit.wavelengths_left_out,
        "spectra": {
            "wavelength_nm": [float(w) for w in fit.wavelength_nm],
            "species": {
                n: {"epsilon": nums(fit.epsilon[k]), "se": nums(fit.epsilon_se[k])}
                for k, n in enumerate(fit.spectra_names)
            },
        },
        "factors": {
            "singular_values": nums(fa.singular_values[:12]) if fa else [],
            "significant_indicator": fa.n_indicator if fa else None,
            "significant_f_test": fa.n_f_test if fa else None,
            **attrs(fit, "absorbing_species above_noise"),
            "verdict": fit.factor_verdict,
        },
    }
