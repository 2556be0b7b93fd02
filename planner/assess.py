"""Assessment of a recipe: what each tube holds and reads, and the checks that can fail.

The assessment is a frozen dataclass with a JSON-safe :meth:`Assessment.summary` following the
baseline keys of the plan format (``title``, ``verdict``, ``parameters``, ``tubes``, ``checks``).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .model import Model, TubeState, build_model, predict, tube_ions_M
from .plan import Plan
from .recipe import Recipe, totals_M

STATUSES = ("pass", "warn", "fail")


@dataclass(frozen=True)
class Check:
    """One check of a recipe: id, "pass" | "warn" | "fail", and a message that says what to change."""

    id: str
    status: str
    message: str

    def summary(self) -> dict:
        return {"id": self.id, "status": self.status, "message": self.message}


@dataclass(frozen=True)
class Assessment:
    """A recipe judged against its plan.

    Attributes
    ----------
    title : the plan's title.
    recipe : the recipe assessed.
    model : the plan's numerical model.
    state : expected contents and readings of every tube (:class:`planner.model.TubeState`).
    checks : the checks, worst first.
    parameters : per-parameter precision entries (filled by the precision assessment).
    verdict : "resolved" | "bounded" | "unresolved", or None while precision is not assessed.
    """

    title: str
    recipe: Recipe
    model: Model
    state: TubeState
    checks: tuple[Check, ...]
    parameters: tuple[dict, ...] = field(default=())
    verdict: str | None = None

    def __repr__(self) -> str:
        worst = max((STATUSES.index(c.status) for c in self.checks), default=0)
        return f"Assessment({self.recipe.n_tubes} tubes, verdict={self.verdict}, worst check={STATUSES[worst]})"

    def tube_rows(self) -> list[dict]:
        st, r, m = self.state, self.recipe, self.model
        rows = []
        for i, t in enumerate(r.tubes):
            rows.append({
                "tube": t,
                "volumes_mL": {sid: float(r.volumes_mL[i, j]) for j, sid in enumerate(r.stock_ids)},
                "total_M": {"M": float(st.totals_M[i, 0]), "L": float(st.totals_M[i, 1])},
                "species_M": {"M": float(st.free_M[i]), "L": float(st.free_L[i]),
                              **{s: float(st.species_M[i, k]) for k, s in enumerate(m.species)}},
                "absorbance": float(st.absorbance[i]),
                "absorbance_sd": float(st.absorbance_sd[i]),
                "saturation": float(st.saturation[i]),
                "ionic_strength_M": float(st.ionic_strength_M[i]),
                "in_linear_range": bool(m.linear_range[0] <= st.absorbance[i] <= m.linear_range[1]),
            })
        return rows

    def summary(self) -> dict:
        """JSON-safe dict with the baseline keys of the plan format."""
        return {
            "title": self.title,
            "verdict": self.verdict,
            "parameters": list(self.parameters),
            "tubes": self.tube_rows(),
            "checks": [c.summary() for c in self.checks],
        }


def expected_state(plan: Plan, recipe: Recipe, model: Model | None = None, **kw) -> TubeState:
    """Speciation and readings of every tube of ``recipe`` at the plan's guesses."""
    model = model or build_model(plan)
    tot = totals_M(recipe, model.stock_conc_M)
    ions = tube_ions_M(model, recipe.volumes_mL, recipe.total_volume_mL)
    return predict(model, tot, ions, **kw)


def check_linear_range(model: Model, state: TubeState, tubes: tuple[str, ...]) -> Check:
    """Every tube's expected absorbance inside the instrument's linear window."""
    lo, hi = model.linear_range
    a = state.absorbance
    low = [t for t, x in zip(tubes, a, strict=True) if x < lo]
    high = [t for t, x in zip(tubes, a, strict=True) if x > hi]
    if not low and not high:
        return Check("linear-range", "pass",
                     f"all {len(tubes)} tubes read between {lo:g} and {hi:g} "
                     f"(A = {a.min():.3f}–{a.max():.3f})")
    parts = []
    if high:
        parts.append(f"{', '.join(high)} above {hi:g}: use less of the absorbing stock, a shorter path "
                     f"or a wavelength off the band maximum")
    if low:
        parts.append(f"{', '.join(low)} below {lo:g}: use more of the absorbing stock or a longer path")
    return Check("linear-range", "fail", "; ".join(parts))


def check_ionic_strength(state: TubeState) -> Check:
    """Spread of ionic strength across tubes: constants are conditional on the medium."""
    I = state.ionic_strength_M
    mean = float(np.mean(I))
    spread = float((I.max() - I.min()) / mean) if mean > 0 else 0.0
    if spread <= 0.05:  # a few percent keeps activity coefficients constant [common practice]
        return Check("ionic-strength", "pass", f"I = {I.min():.3g}–{I.max():.3g} M (spread {spread:.1%})")
    return Check("ionic-strength", "warn",
                 f"I varies {spread:.0%} across tubes ({I.min():.3g}–{I.max():.3g} M): add background "
                 f"electrolyte so every tube has the same ionic strength")


def assess_recipe(plan: Plan, recipe: Recipe) -> Assessment:
    """Expected tube contents and the checks that need no precision analysis."""
    model = build_model(plan)
    state = expected_state(plan, recipe, model)
    checks = [check_linear_range(model, state, recipe.tubes), check_ionic_strength(state)]
    checks.sort(key=lambda c: -STATUSES.index(c.status))
    return Assessment(plan.title, recipe, model, state, tuple(checks))
