"""The ``--json`` shapes of the numerical core's results and the reagent library."""

from __future__ import annotations

import numpy as np

from .json_fields import attrs, float_or_none, num, nums


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
        "n_iter_median": num(np.median(n_iter)),
        "n_iter_max": int(n_iter.max()),
        "theta_mean": nums(good.mean(axis=0) if good.size else nan),
        "theta_sd": nums(good.std(axis=0, ddof=1) if good.shape[0] > 1 else nan),
        "se_median": nums(np.median(se[conv], axis=0) if good.size else nan),
        "chi2_median": num(np.median(chi2[conv])) if good.size else None,
    }
    if r.status is not None:
        codes, counts = np.unique(np.atleast_1d(r.status), return_counts=True)
        out["status_counts"] = {str(int(c)): int(n) for c, n in zip(codes, counts, strict=True)}
    if theta.shape[0] == 1:
        out["theta"] = nums(theta[0])
        out["se"] = nums(se[0])
        out["chi2"] = num(chi2[0])
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
        **attrs(d, "criterion target"),
        "support": [int(i) for i in idx],
        "weights": [float(w) for w in d.weights[idx]],
        **float_or_none(d, "criterion_value max_sensitivity bound"),
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
        **attrs(d, "n_tubes"),
        **float_or_none(d, "criterion_value efficiency"),
        "starts": int(d.starts),
    }


def hazards_json(h) -> dict:
    """A reagent's entry in the library (GHS signal word, statements, pictograms, handling)."""
    from .safety import PICTOGRAMS

    return {
        **attrs(h, "name formula signal_word"),
        "statements": [{"code": c, "text": t} for c, t in h.statements()],
        "pictograms": [{"code": p, "name": PICTOGRAMS[p]} for p in h.pictograms],
        **attrs(h, "cmr cmr_codes classes incompatible ppe waste notes source from_memory checked"),
    }


def plan_reagent_json(r) -> dict:
    return {
        **attrs(r, "name stock_ids inferred message"),
        "hazards": hazards_json(r.hazards) if r.hazards else None,
    }


def clash_json(c) -> dict:
    return attrs(c, "classes reagents advice")
