"""Parts of the plan schema beside the main tables: what every species declares (its formula checked
once), the alternative species of the model check, and the in-cuvette titration table."""

from __future__ import annotations

from pydantic import Field, field_validator, model_validator

from .limits import MAX_ADDITIONS, MAX_WAVELENGTHS
from .plan_fields import (
    Epsilon_,
    LogBeta,
    PlanError,
    SpeciesName,
    StockId,
    Stoich,
    StrictModel,
    Text,
    Volume,
    integer_in,
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


class SpeciesCore(StrictModel):
    """What every species declares, in the model (``[[species]]``) or as an alternative of the model
    check: its name, its stoichiometry (checked by :func:`check_formula`) and log β."""

    name: SpeciesName
    formula: dict[str, Stoich]
    log_beta: LogBeta

    _formula = field_validator("formula")(lambda v: check_formula(v))


class Alternative(SpeciesCore):
    """A species the main model leaves out, which the design should be able to detect (e.g. ML2)."""

    epsilon: Epsilon_ | None = None


class Titration(StrictModel):
    """An in-cuvette titration: a start volume of one stock in the cell, aliquots of another added to it."""

    cell: StockId
    titrant: StockId
    start_volume_mL: Volume = Field(alias="start_volume")
    max_volume_mL: Volume = Field(alias="max_volume")
    additions: integer_in(1, MAX_ADDITIONS) = 12
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


def check_spectra_keys(plan, absorbers: set[str]) -> None:
    """The whole-spectrum keys of ``[optics]`` against the rest of the plan, each error naming its key.

    ``optics.window_nm`` without a table needs ``[optics.bands]``; ``spectra_rsd`` names absorbers; the
    window holds at most :data:`MAX_WAVELENGTHS` points; spectra and an in-cuvette titration do not mix
    (yet). The table itself is checked when it is read
    (:func:`planner.inputs.spectra_table.attach_spectra_table`).
    """
    o = plan.optics
    if not (o.spectra is not None or o.window_nm is not None):
        if o.spectra_rsd:
            raise PlanError(
                "optics.spectra_rsd", "is for whole spectra: give optics.spectra or window_nm too"
            )
        return
    if plan.titration is not None:
        raise PlanError(
            "optics.spectra" if o.spectra is not None else "optics.window_nm",
            "whole spectra are planned for separately made tubes; an in-cuvette titration reads one "
            "wavelength: remove the spectra keys or the [titration] table",
        )
    if o.spectra is None and not o.bands:
        raise PlanError(
            "optics.window_nm",
            "a window needs the species' spectra: give optics.spectra = 'eps.csv' (an ε table) or "
            "[optics.bands] with a Gaussian band per absorbing species",
        )
    for key in o.spectra_rsd:
        if key not in absorbers:
            raise PlanError(f"optics.spectra_rsd.{key}", f"'{key}' is not a species, M or L")
    if o.window_nm is not None:
        n = int(round((o.window_nm[1] - o.window_nm[0]) / o.step_nm)) + 1
        if n > MAX_WAVELENGTHS:
            raise PlanError(
                "optics.step_nm",
                f"the window holds {n} wavelengths at {o.step_nm:g} nm; at most {MAX_WAVELENGTHS}: "
                f"take a larger step",
            )
        if n < 2:
            raise PlanError("optics.step_nm", "the step is wider than the window: take a smaller step")
