"""Field types of the plan schema: numbers checked to be finite, not booleans and inside stated physical
ranges; quantities with units parsed by pint; identifiers and text checked.

Every number is checked at the schema: finite, not a boolean, and inside a physically generous range
(the range is stated in the message). The ranges:

===========================================  ==============================  =============
key                                          range                           unit
===========================================  ==============================  =============
``temperature_C``                            −20 … 150                       °C
``stock.conc``, ``stock.ions``               1e-12 … 20                      mol/L
``medium.reference_ionic_strength``          0 … 5                           mol/L
``design.ionic_strength``                    0 (excluded) … 5                mol/L
``species.log_beta``                         −50 … 60                        log10 units
``species.log_beta_sd``                      0 … 10                          log10 units
``species.formula`` counts                   −20 … 20                        integer
``components.M/L.charge``                    −10 … 10                        integer
``components.H.pH``                          −2 … 16
``size_A``                                   0 (excluded) … 50               Å
``optics.wavelength_nm``, ``bands.peak_nm``  100 … 2000                      nm
``optics.bandwidth_nm``                      0 (excluded) … 500              nm
``bands.fwhm_nm``                            0 (excluded) … 2000             nm
``optics.path_cm``                           0.001 … 100                     cm
``optics.epsilon.value``, ``epsilon_max``    0 … 1e6                         L mol⁻¹ cm⁻¹
``optics.epsilon.rsd``                       0 … 5                           relative
``optics.noise.k1/k2/k3``                    0 … 1                           transmittance
``optics.linear_range``                      0 … 10, ≥ 0.05 wide             absorbance
``optics.stray_light``                       0 … 1 (excluded)                fraction
``optics.display_step``                      0 … 1                           absorbance
``stock.conc_rsd``                           0 … 1 (excluded)                relative
``stock.purity``                             0.5 … 1                         fraction
tube_volume, step, flask, capacity, on_hand  1e-6 … 10 000                   mL
dispenser graduation, repeatability,         1e-6 … 10 000 (graduation ≤       mL
systematic                                   capacity, repeatability ≤ 10 %)
min_volume, rinse, dead_volume, fixed        0, or 1e-6 … 10 000             mL
``glassware.step``                           ≤ 20 000 levels to tube_volume
``glassware.delta_T_C``                      −30 … 30                        °C
``glassware.balance`` masses                 0 (excluded) … 1000             g
``design.goal_se``                           0 (excluded) … 5                log10 units
``design.ionic_strength_tolerance``          0 … 1 (both excluded)           relative
``design.tubes``                             1 … 200                         integer
``species``, ``stock`` (counts)              ≤ 40, ≤ 20                      entries
``design.check_weight``                      0 … 1 (excluded)                SE cost cap w:
                                                                             guarded SE ≤
                                                                             ×(1 + w)
``titration`` volumes                        1e-6 … 10 000                   mL
``titration.additions``                      1 … 60                          integer
===========================================  ==============================  =============
"""

from __future__ import annotations

import math
from typing import Annotated, Any

from pydantic import AfterValidator, BaseModel, BeforeValidator, ConfigDict

from .errors import LocatedError
from .text import check_identifier, check_text
from .units import UnitError, parse_quantity


class PlanError(LocatedError):
    """A plan that cannot be used, with the key path and a hint for the fix.

    Parameters
    ----------
    key : str
        Dotted key path inside the plan (``stock[2].conc.M``), or "" for the whole file.
    message : str
        What was wrong and how to fix it.
    """


MAX_VOLUME_ML = 10_000.0  # 10 L: larger than any flask, burette or tube a plan describes
MIN_VOLUME_ML = 1e-6  # 1 nL: far below any dispenser; smaller non-zero volumes only break the numerics


def _no_bool(v: Any) -> Any:
    # TOML has true/false, and pydantic would read them as 1 and 0: a boolean is never a number here
    if isinstance(v, bool):
        raise ValueError(f"expected a number, got {str(v).lower()}")
    return v


def _range(
    lo: float,
    hi: float,
    unit: str = "",
    *,
    lo_open: bool = False,
    hi_open: bool = False,
    what: str = "",
    hint: str = "",
) -> AfterValidator:
    """A validator refusing non-finite values and values outside [lo, hi] (open ends as asked)."""
    u = f" {unit}" if unit else ""
    if lo_open:
        where = f"above {lo:g} and at most {hi:g}{u}"
    elif hi_open:
        where = f"at least {lo:g} and below {hi:g}{u}"
    else:
        where = f"between {lo:g} and {hi:g}{u}"

    def check(v: float) -> float:
        finite = isinstance(v, int) or math.isfinite(v)  # an int of 400 digits is finite but not a float
        ok = finite and (v > lo if lo_open else v >= lo) and (v < hi if hi_open else v <= hi)
        if not ok:
            shown = (
                f"{v:g}"
                if not isinstance(v, int) or abs(v) < 10**15
                else f"a {len(str(abs(v)))}-digit number"
            )
            raise ValueError(f"must be {what}{where}, got {shown}{u}{hint}")
        return v

    return AfterValidator(check)


def _quantity(kind: str) -> BeforeValidator:
    def parse(v: Any) -> float:
        try:
            return parse_quantity(v, kind)
        except UnitError as exc:
            raise ValueError(str(exc)) from None

    return BeforeValidator(parse)


def number_in(lo: float, hi: float, unit: str = "", **kw: Any) -> Any:
    return Annotated[float, BeforeValidator(_no_bool), _range(lo, hi, unit, **kw)]


def integer_in(lo: int, hi: int) -> Any:
    return Annotated[int, BeforeValidator(_no_bool), _range(lo, hi)]


def _ident(what: str) -> AfterValidator:
    return AfterValidator(lambda v: check_identifier(v, what))


_conc = _quantity("concentration")
_vol = _quantity("volume")

Conc = Annotated[
    float,
    _conc,
    _range(1e-12, 20, "mol/L", what="a positive concentration ", hint="; leave it out if the stock has none"),
]
IonicStrength = Annotated[float, _conc, _range(0, 5, "mol/L")]
IonicStrengthTarget = Annotated[float, _conc, _range(0, 5, "mol/L", lo_open=True)]


def _zero_or(v: float) -> float:
    # 0 means "none" (no rinse, no minimum); any other volume must be one a dispenser could deliver
    if v == 0:
        return v
    if not (math.isfinite(v) and MIN_VOLUME_ML <= v <= MAX_VOLUME_ML):
        raise ValueError(f"must be 0 or between {MIN_VOLUME_ML:g} and {MAX_VOLUME_ML:g} mL, got {v:g} mL")
    return v


Volume = Annotated[float, _vol, _range(MIN_VOLUME_ML, MAX_VOLUME_ML, "mL")]
VolumeOrZero = Annotated[float, _vol, AfterValidator(_zero_or)]
Mass = Annotated[float, _quantity("mass"), _range(0, 1000, "g", lo_open=True)]
Fraction = number_in(0, 1)
FractionBelow1 = number_in(0, 1, hi_open=True)
RelSD = number_in(0, 5)
SizeA = number_in(0, 50, "Å", lo_open=True)
Wavelength = number_in(100, 2000, "nm")
Epsilon_ = number_in(0, 1e6, "L/mol/cm")
Absorbance = number_in(0, 10)
LogBeta = number_in(-50, 60)
Stoich = integer_in(-20, 20)
Charge = integer_in(-10, 10)
Text = Annotated[str, AfterValidator(check_text)]
SpeciesName = Annotated[str, _ident("species name")]
StockId = Annotated[str, _ident("stock id")]


class StrictModel(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True, populate_by_name=True)
