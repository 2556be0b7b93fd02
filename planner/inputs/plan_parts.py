"""Parts of the plan schema beside the main tables: the formula check shared by species, the
alternative species of the model check, and the in-cuvette titration table."""

from __future__ import annotations

from pydantic import Field, field_validator, model_validator

from .limits import MAX_ADDITIONS
from .plan_fields import (
    Epsilon_,
    LogBeta,
    PlanError,
    SpeciesName,
    StockId,
    Stoich,
    Text,
    Volume,
    _int,
    _Strict,
)

COMPONENTS = ("M", "L", "H")


def check_formula(v: dict[str, int]) -> dict[str, int]:
    """A species' stoichiometry: components M, L (≥ 0) and H; at least one of M and L."""
    for comp, n in v.items():
        if comp not in COMPONENTS:
            raise ValueError(
                f"formula names unknown component '{comp}': use M, L and (with [components.H]) H"
            )
        if comp in ("M", "L") and n < 0:
            raise ValueError(f"formula {comp} = {n}: only H may be negative (hydroxo species)")
    if not any(v.get(c, 0) for c in ("M", "L")):
        raise ValueError("formula must contain M or L, e.g. { M = 1, L = 1 }")
    nonzero = {c: n for c, n in v.items() if n}
    if nonzero in ({"M": 1}, {"L": 1}):
        comp = next(iter(nonzero))
        raise ValueError(
            f"formula {{ {comp} = 1 }} is the free component {comp} itself, not a species: give the "
            "complex's stoichiometry, e.g. { M = 1, L = 1 }"
        )
    return v


class Alternative(_Strict):
    """A species the main model leaves out, which the design should be able to detect (e.g. ML2)."""

    name: SpeciesName
    formula: dict[str, Stoich]
    log_beta: LogBeta
    epsilon: Epsilon_ | None = None

    _formula = field_validator("formula")(lambda v: check_formula(v))


class Titration(_Strict):
    """An in-cuvette titration: a start volume of one stock in the cell, aliquots of another added to it."""

    cell: StockId
    titrant: StockId
    start_volume_mL: Volume = Field(alias="start_volume")
    max_volume_mL: Volume = Field(alias="max_volume")
    additions: _int(1, MAX_ADDITIONS) = 12
    step_mL: Volume | None = Field(default=None, alias="step")
    equilibrate: Text = "mix, then wait 1 min before reading"

    @model_validator(mode="after")
    def _volumes(self) -> Titration:
        if not self.max_volume_mL > self.start_volume_mL:
            raise PlanError(
                "max_volume",
                f"{self.max_volume_mL:g} mL must exceed start_volume = "
                f"{self.start_volume_mL:g} mL: leave room for the additions",
            )
        return self
