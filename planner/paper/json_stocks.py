"""The ``--json`` shapes of stocks: glassware, dilution steps, preparations and what each stock needs."""

from __future__ import annotations

from .json_fields import attrs, finite, float_or_none, num


# --------------------------------------------------------------------------------------------------
# stocks
# --------------------------------------------------------------------------------------------------
def glassware_json(g) -> dict:
    """A catalogue item of glassware."""
    return {
        "kind": g.kind,
        "capacity_mL": float(g.capacity_mL),
        "class": g.cls,
        **float_or_none(g, "tolerance_mL graduation_mL random_mL repeatability_mL"),
        "source": g.source,
        "from_memory": bool(g.from_memory),
        **attrs(g, "note label"),
    }


def dilution_step_json(s) -> dict:
    return {
        "pipette_mL": s.pipette.capacity_mL,
        "flask_mL": s.flask.capacity_mL,
        "pipette": s.pipette.label,
        "flask": s.flask.label,
        **attrs(s, "factor from_conc_M to_conc_M u_rel"),
    }


def preparation_json(p) -> dict:
    """How a stock's metal or ligand salt is weighed (and diluted), with its uncertainty."""
    return {
        **attrs(p, "conc_M formula formula_weight_g_mol"),
        "flask": glassware_json(p.flask),
        "weighed_flask": glassware_json(p.weighed_flask),
        **attrs(p, "weighed_conc_M mass_g u_mass_g direct_mass_g min_weight_g purity purity_half_width"),
        **attrs(p, "u_conc_M u_rel"),
        "u_parts": {k: float(v) for k, v in p.u_parts.items()},
        "steps": [dilution_step_json(s) for s in p.steps],
    }


def solute_json(x) -> dict:
    return attrs(x, "role formula name conc_M ions formula_weight_g_mol mass_g")


def mass_basis_json(b) -> dict:
    return {
        **attrs(b, "set_by flask_reason"),
        **finite(b, "mass_g recipe_mass_g min_weight_g direct_mass_g repeatability_to_weigh_directly_g"),
        "scarce": b.scarce,
        "least_mass_g": num(b.least_mass_g),
    }


def stock_need_json(n) -> dict:
    """One stock of ``kplan stocks --json``: how to make it and how much is needed."""
    gap = n.charge_gap
    return {
        **attrs(n, "id label component"),
        "preparation": preparation_json(n.preparation) if n.preparation else None,
        **attrs(n, "problem recipe_mL deliveries needed_mL on_hand_mL enough plan_rsd"),
        "solutes": [solute_json(x) for x in n.solutes],
        **attrs(n, "solvent flask_mL"),
        "charge_gap": attrs(gap, "ion conc_M ionic_strength_low") if gap else None,
        **attrs(n, "flask_label"),
        "mass_set_by": mass_basis_json(n.mass_basis) if n.mass_basis else None,
        "scarce": n.scarce,
    }
