"""Plan files: schema (pydantic), TOML loading, unit parsing, and :class:`PlanError`.

A plan describes one metal–ligand study (components, species and their guessed constants, optics,
stocks, glassware, design goals). :func:`load_plan` reads and validates it; every problem becomes a
single :class:`PlanError` naming the key path, what was wrong and how to fix it.
"""

from __future__ import annotations

import difflib
from pathlib import Path
from typing import Annotated, Any, Literal

import tomllib
from pydantic import (
    BaseModel,
    BeforeValidator,
    ConfigDict,
    Field,
    ValidationError,
    field_validator,
    model_validator,
)

from .names import ion_charge, unknown_name
from .units import UnitError, parse_quantity

COMPONENTS = ("M", "L", "H")
DISPENSER_KINDS = ("burette", "pipette", "graduated-pipette", "micropipette")
MAKE_UP_MODES = ("to-mark", "added")
CRITERIA = ("target", "all")
ACTIVITY_MODELS = ("davies", "extended-dh", "none")


class PlanError(ValueError):
    """A plan that cannot be used, with the key path and a hint for the fix.

    Parameters
    ----------
    key : str
        Dotted key path inside the plan (``stock[2].conc.M``), or "" for the whole file.
    message : str
        What was wrong and how to fix it.
    """

    def __init__(self, key: str, message: str):
        self.key = key
        self.message = message
        super().__init__(f"{key}: {message}" if key else message)


def _conc(v: Any) -> float:
    try:
        return parse_quantity(v, "concentration")
    except UnitError as exc:
        raise ValueError(str(exc)) from None


def _vol(v: Any) -> float:
    try:
        return parse_quantity(v, "volume")
    except UnitError as exc:
        raise ValueError(str(exc)) from None


def _mass(v: Any) -> float:
    try:
        return parse_quantity(v, "mass")
    except UnitError as exc:
        raise ValueError(str(exc)) from None


Conc = Annotated[float, BeforeValidator(_conc)]
Volume = Annotated[float, BeforeValidator(_vol)]
Mass = Annotated[float, BeforeValidator(_mass)]


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True, populate_by_name=True)


class Component(_Strict):
    """A metal or ligand component: a label for people and its charge (for ionic strength)."""

    label: str = ""
    charge: int = 0
    size_angstrom: float | None = Field(default=None, alias="size_A", gt=0)


class Protons(_Strict):
    """Protons held at a buffered pH: folded into conditional constants."""

    pH: float = Field(ge=-2, le=16)
    size_angstrom: float = Field(default=9.0, alias="size_A", gt=0)


class Components(_Strict):
    M: Component
    L: Component
    H: Protons | None = None


class Species(_Strict):
    name: str = Field(min_length=1)
    formula: dict[str, int]
    log_beta: float
    log_beta_sd: float = Field(default=0.0, ge=0)
    size_angstrom: float | None = Field(default=None, alias="size_A", gt=0)

    @field_validator("formula")
    @classmethod
    def _formula(cls, v: dict[str, int]) -> dict[str, int]:
        for comp, n in v.items():
            if comp not in COMPONENTS:
                raise ValueError(
                    f"formula names unknown component '{comp}': use M, L and (with [components.H]) H"
                )
            if comp in ("M", "L") and n < 0:
                raise ValueError(f"formula {comp} = {n}: only H may be negative (hydroxo species)")
        if not any(v.get(c, 0) for c in ("M", "L")):
            raise ValueError("formula must contain M or L, e.g. { M = 1, L = 1 }")
        return v


class Alternative(_Strict):
    """A species the main model leaves out, which the design should be able to detect (e.g. ML2)."""

    name: str = Field(min_length=1)
    formula: dict[str, int]
    log_beta: float
    epsilon: float | None = Field(default=None, ge=0)

    _formula = field_validator("formula")(Species._formula.__func__)


class Epsilon(_Strict):
    value: float = Field(ge=0)
    rsd: float = Field(default=0.0, ge=0)


class Noise(_Strict):
    k1: float = Field(default=0.003, ge=0)
    k2: float = Field(default=0.0, ge=0)
    k3: float = Field(default=0.0, ge=0)


class Band(_Strict):
    peak_nm: float = Field(gt=0)
    fwhm_nm: float = Field(gt=0)
    epsilon_max: float = Field(ge=0)


class Optics(_Strict):
    wavelength_nm: float = Field(gt=0)
    path_cm: float = Field(default=1.0, gt=0)
    linear_range: tuple[float, float] = (0.1, 1.0)
    stray_light: float = Field(default=0.0, ge=0, lt=1)
    noise: Noise = Noise()
    display_step: float = Field(default=0.0, ge=0)
    bandwidth_nm: float | None = Field(default=None, gt=0)
    epsilon: dict[str, Epsilon] = Field(default_factory=dict)
    bands: dict[str, Band] = Field(default_factory=dict)

    @field_validator("linear_range")
    @classmethod
    def _range(cls, v: tuple[float, float]) -> tuple[float, float]:
        lo, hi = v
        if not lo < hi:
            raise ValueError(f"lo = {lo} must be below hi = {hi}, e.g. linear_range = [0.05, 1.00]")
        if lo < 0:
            raise ValueError(f"lo = {lo} is negative: absorbance windows start at 0 or above")
        return v


class Stock(_Strict):
    id: str = Field(min_length=1)
    label: str = ""
    conc: dict[str, Conc] = Field(default_factory=dict)
    ions: dict[str, Conc] = Field(default_factory=dict)
    conc_rsd: float = Field(default=0.0, ge=0, lt=1)
    on_hand: Volume | None = None
    reagent: str | None = None
    formula: str | None = None
    purity: float | None = Field(default=None, gt=0, le=1)
    flask_mL: Volume | None = Field(default=None, alias="flask")
    diluent: bool = False
    background: bool = False

    @field_validator("conc")
    @classmethod
    def _conc_keys(cls, v: dict[str, float]) -> dict[str, float]:
        for comp, c in v.items():
            if comp not in ("M", "L"):
                raise PlanError(comp, "unknown component: a stock's conc lists components M and L only")
            if not c > 0:
                raise PlanError(comp, f"{c:g} M: concentrations must be positive (or leave it out)")
        return v

    @field_validator("ions")
    @classmethod
    def _ions(cls, v: dict[str, float]) -> dict[str, float]:
        for ion, c in v.items():
            try:
                ion_charge(ion)
            except ValueError as exc:
                raise PlanError(ion, str(exc)) from None
            if not c > 0:
                raise PlanError(ion, f"{c:g} M: concentrations must be positive (or leave it out)")
        return v

    @field_validator("on_hand")
    @classmethod
    def _on_hand(cls, v: float | None) -> float | None:
        if v is not None and not v > 0:
            raise ValueError(f"on_hand = {v} mL must be positive")
        return v


class Flask(_Strict):
    capacity_mL: Volume = Field(alias="capacity")
    cls: Literal["A", "B"] = Field(default="A", alias="class")
    tolerance_mL: Volume | None = Field(default=None, alias="tolerance")


class Balance(_Strict):
    readability_g: Mass = Field(default=1e-4, alias="readability")
    repeatability_g: Mass = Field(default=1e-4, alias="repeatability")

    @model_validator(mode="after")
    def _positive(self) -> Balance:
        if not (self.readability_g > 0 and self.repeatability_g > 0):
            raise ValueError("readability and repeatability must be positive masses, e.g. '0.1 mg'")
        return self


class Dispenser(_Strict):
    kind: Literal["burette", "pipette", "graduated-pipette", "micropipette"]
    capacity_mL: Volume = Field(alias="capacity")
    cls: Literal["A", "B"] = Field(default="A", alias="class")
    tolerance_mL: Volume | None = Field(default=None, alias="tolerance")
    stocks: list[str] = Field(min_length=1)

    @field_validator("capacity_mL")
    @classmethod
    def _cap(cls, v: float) -> float:
        if not v > 0:
            raise ValueError(f"capacity = {v} mL must be positive")
        return v


class Glassware(_Strict):
    tube_volume_mL: Volume = Field(alias="tube_volume")
    make_up: Literal["to-mark", "added"] = "to-mark"
    flask: Flask | None = None
    step_mL: Volume = Field(default=0.05, alias="step")
    min_volume_mL: Volume = Field(default=0.0, alias="min_volume")
    rinse_mL: Volume = Field(default=2.0, alias="rinse")
    dead_volume_mL: Volume = Field(default=1.0, alias="dead_volume")
    make_up_min_mL: Volume | None = Field(default=None, alias="make_up_min")
    delta_T_C: float = Field(default=0.0, ge=-30, le=30)
    balance: Balance = Balance()
    order: list[str] | None = None
    dispenser: list[Dispenser] = Field(default_factory=list)

    @model_validator(mode="after")
    def _positive(self) -> Glassware:
        if not self.tube_volume_mL > 0:
            raise ValueError(f"tube_volume = {self.tube_volume_mL} mL must be positive")
        if not self.step_mL > 0:
            raise ValueError(f"step = {self.step_mL} mL must be positive, e.g. step = '0.05 mL'")
        if self.min_volume_mL < 0:
            raise ValueError(f"min_volume = {self.min_volume_mL} mL must not be negative")
        if self.make_up_min_mL is not None and not 0 <= self.make_up_min_mL < self.tube_volume_mL:
            raise ValueError(f"make_up_min = {self.make_up_min_mL} mL must be ≥ 0 and below tube_volume "
                             f"({self.tube_volume_mL} mL), e.g. make_up_min = '0.5 mL'")
        return self


class Titration(_Strict):
    """An in-cuvette titration: a start volume of one stock in the cell, aliquots of another added to it."""

    cell: str = Field(min_length=1)
    titrant: str = Field(min_length=1)
    start_volume_mL: Volume = Field(alias="start_volume")
    max_volume_mL: Volume = Field(alias="max_volume")
    additions: int = Field(default=12, ge=1, le=60)
    step_mL: Volume | None = Field(default=None, alias="step")
    equilibrate: str = Field(default="mix, then wait 1 min before reading", max_length=200)

    @model_validator(mode="after")
    def _volumes(self) -> Titration:
        if not self.start_volume_mL > 0:
            raise ValueError(f"start_volume = {self.start_volume_mL} mL must be positive")
        if not self.max_volume_mL > self.start_volume_mL:
            raise ValueError(f"max_volume = {self.max_volume_mL} mL must exceed start_volume = "
                             f"{self.start_volume_mL} mL: leave room for the additions")
        if self.step_mL is not None and not self.step_mL > 0:
            raise ValueError(f"step = {self.step_mL} mL must be positive, e.g. step = '0.005 mL'")
        return self


class Medium(_Strict):
    activity_model: Literal["davies", "extended-dh", "none"] = "davies"
    reference_ionic_strength_M: Conc | None = Field(default=None, alias="reference_ionic_strength")


class Design(_Strict):
    tubes: int = Field(default=8, ge=1, le=200)
    target: str | None = None
    criterion: Literal["target", "all"] = "target"
    robust: bool = True
    goal_se: float = Field(default=0.05, gt=0)
    fixed: dict[str, Volume] = Field(default_factory=dict)
    blank_offset: bool = False
    ionic_strength_M: Conc | None = Field(default=None, alias="ionic_strength")
    ionic_strength_tolerance: float = Field(default=0.02, gt=0, lt=1)
    analysis: Literal["global", "double-reciprocal", "one-to-one"] = "global"
    check: Literal["auto", "none"] = "auto"
    check_weight: float = Field(default=0.25, ge=0, lt=1)
    alternative: list[Alternative] = Field(default_factory=list)


class Plan(_Strict):
    """A validated plan; quantities are floats in mol/L and mL (names carry the unit)."""

    title: str = "untitled study"
    temperature_C: float = Field(default=25.0, ge=0, le=100)
    components: Components
    species: list[Species] = Field(min_length=1)
    optics: Optics
    stock: list[Stock] = Field(min_length=1)
    glassware: Glassware
    medium: Medium = Medium()
    design: Design = Design()
    titration: Titration | None = None

    # -- cross-field checks, each naming its key ---------------------------------------------------
    @model_validator(mode="after")
    def _cross(self) -> Plan:
        names = [s.name for s in self.species]
        reserved = {"M", "L", "H"}
        for i, s in enumerate(self.species):
            if s.name in reserved:
                raise PlanError(f"species[{i}].name", f"'{s.name}' is a component; name the species e.g. 'ML'")
            if names.count(s.name) > 1:
                raise PlanError(f"species[{i}].name", f"species '{s.name}' is defined twice")
            if s.formula.get("H", 0) and self.components.H is None:
                raise PlanError(
                    f"species[{i}].formula",
                    "uses H but the plan has no [components.H]: add H = { pH = ... } under [components]",
                )
        alt_names = [a.name for a in self.design.alternative]
        for i, alt in enumerate(self.design.alternative):
            key = f"design.alternative[{i}]"
            if alt.name in reserved or alt.name in names or alt_names.count(alt.name) > 1:
                raise PlanError(f"{key}.name", f"'{alt.name}' is already a component or species: give the "
                                "alternative species a name of its own, e.g. 'ML2'")
            if alt.formula.get("H", 0) and self.components.H is None:
                raise PlanError(f"{key}.formula", "uses H but the plan has no [components.H]")
        absorbers = set(names) | {"M", "L"}
        for key in self.optics.epsilon:
            if key not in absorbers:
                raise PlanError(f"optics.epsilon.{key}", unknown_name("species", key, sorted(absorbers)))
        for key in self.optics.bands:
            if key not in absorbers:
                raise PlanError(f"optics.bands.{key}", unknown_name("species", key, sorted(absorbers)))
        ids = [s.id for s in self.stock]
        for i, s in enumerate(self.stock):
            if ids.count(s.id) > 1:
                raise PlanError(f"stock[{i}].id", f"stock id '{s.id}' is defined twice")
        for i, s in enumerate(self.stock):
            if s.background and s.diluent:
                raise PlanError(f"stock[{i}].background", "a stock cannot be both the diluent and the background "
                                "electrolyte: the diluent fills the tube, the background stock levels I")
            if s.background and (s.conc or not s.ions):
                raise PlanError(f"stock[{i}].background", "a background-electrolyte stock holds only inert ions: "
                                "give it ions = { ... } and no conc")
        if sum(s.background for s in self.stock) > 1:
            raise PlanError("stock", "more than one stock has background = true: keep one")
        diluents = [s.id for s in self.stock if s.diluent]
        if len(diluents) > 1:
            raise PlanError("stock", f"more than one stock has diluent = true ({', '.join(diluents)}): keep one")
        if self.glassware.make_up == "to-mark" and not diluents:
            raise PlanError(
                "stock",
                "make_up = 'to-mark' needs a diluent: mark one stock with diluent = true",
            )
        for j, d in enumerate(self.glassware.dispenser):
            for k, sid in enumerate(d.stocks):
                if sid not in ids:
                    raise PlanError(f"glassware.dispenser[{j}].stocks[{k}]", unknown_name("stock id", sid, ids))
        if self.glassware.order is not None:
            for k, sid in enumerate(self.glassware.order):
                if sid not in ids:
                    raise PlanError(f"glassware.order[{k}]", unknown_name("stock id", sid, ids))
            if len(set(self.glassware.order)) != len(self.glassware.order):
                raise PlanError("glassware.order", "a stock is listed twice: name each stock once")
        for sid in self.design.fixed:
            if sid not in ids:
                raise PlanError(f"design.fixed.{sid}", unknown_name("stock id", sid, ids))
        for sid, v in self.design.fixed.items():
            if v < 0:
                raise PlanError(f"design.fixed.{sid}", f"{v} mL is negative")
        fixed_total = sum(self.design.fixed.values())
        if fixed_total > self.glassware.tube_volume_mL * (1 + 1e-12):
            raise PlanError(
                "design.fixed",
                f"fixed volumes add up to {fixed_total:g} mL, more than tube_volume = "
                f"{self.glassware.tube_volume_mL:g} mL: reduce them or use a larger tube",
            )
        if self.design.target is not None and self.design.target not in names:
            raise PlanError("design.target", unknown_name("species", self.design.target, names))
        if not any(s.conc.get("M") for s in self.stock):
            raise PlanError("stock", "no stock contains the metal M: give one stock conc = { M = '...' }")
        if not any(s.conc.get("L") for s in self.stock):
            raise PlanError("stock", "no stock contains the ligand L: give one stock conc = { L = '...' }")
        if self.titration is not None:
            t = self.titration
            for key, sid in (("cell", t.cell), ("titrant", t.titrant)):
                if sid not in ids:
                    raise PlanError(f"titration.{key}", unknown_name("stock id", sid, ids))
            if t.cell == t.titrant:
                raise PlanError("titration.titrant", "the titrant must be another stock than the cell's")
            if self.glassware.make_up != "added":
                raise PlanError("glassware.make_up", "an in-cuvette titration adds every volume: set "
                                "make_up = 'added'")
        return self

    # -- convenience -------------------------------------------------------------------------------
    @property
    def target(self) -> str:
        """The species whose constant must be resolved (default: the first species with log_beta_sd > 0)."""
        if self.design.target:
            return self.design.target
        for s in self.species:
            if s.log_beta_sd > 0 and s.formula.get("M", 0) and s.formula.get("L", 0):
                return s.name
        return self.species[0].name

    @property
    def diluent(self) -> Stock | None:
        return next((s for s in self.stock if s.diluent), None)

    def stock_by_id(self, sid: str) -> Stock:
        for s in self.stock:
            if s.id == sid:
                return s
        raise PlanError("stock", unknown_name("stock id", sid, [s.id for s in self.stock]))

    @property
    def background(self) -> Stock | None:
        return next((s for s in self.stock if s.background), None)

    def dispenser_for(self, sid: str) -> Dispenser | None:
        return next((d for d in self.glassware.dispenser if sid in d.stocks), None)


def _loc_to_path(loc: tuple, root: type[BaseModel]) -> str:
    parts: list[str] = []
    for item in loc:
        if isinstance(item, int):
            parts[-1:] = [f"{parts[-1]}[{item}]"] if parts else [f"[{item}]"]
        else:
            parts.append(str(item))
    return ".".join(parts)


def _fields_at(loc: tuple) -> list[str]:
    """The keys allowed at a location, for 'did you mean' on unknown keys."""
    model: Any = Plan
    for item in loc[:-1]:
        if isinstance(item, int):
            continue
        if not (isinstance(model, type) and issubclass(model, BaseModel)):
            return []
        field = next(
            (f for n, f in model.model_fields.items() if (f.alias or n) == item or n == item), None
        )
        if field is None:
            return []
        model = _inner_model(field.annotation)
    if isinstance(model, type) and issubclass(model, BaseModel):
        return [f.alias or n for n, f in model.model_fields.items()]
    return []


def _inner_model(ann: Any) -> Any:
    import typing

    if isinstance(ann, type) and issubclass(ann, BaseModel):
        return ann
    for arg in typing.get_args(ann):
        inner = _inner_model(arg)
        if inner is not None:
            return inner
    return None


def _first_error(exc: ValidationError) -> PlanError:
    err = exc.errors()[0]
    loc = tuple(err.get("loc", ()))
    path = _loc_to_path(loc, Plan)
    kind = err.get("type", "")
    msg = str(err.get("msg", "invalid value"))
    if kind == "extra_forbidden":
        allowed = _fields_at(loc)
        near = difflib.get_close_matches(str(loc[-1]), allowed, n=1)
        hint = f"; did you mean '{near[0]}'?" if near else ""
        return PlanError(path, f"unknown key{hint} (allowed here: {', '.join(allowed)})")
    if kind == "missing":
        return PlanError(path, "is required but missing: add it (see the README's plan-file keys)")
    if kind in ("greater_than", "greater_than_equal") and "0" in msg:
        return PlanError(path, f"{msg.lower()}, got {err.get('input')!r}")
    for prefix in ("Value error, ", "Assertion failed, "):
        if msg.startswith(prefix):
            msg = msg[len(prefix):]
    if kind == "literal_error":
        msg = msg.replace("Input should be", "must be one of")
    return PlanError(path, msg)


def parse_plan(data: dict[str, Any]) -> Plan:
    """Validate an already-parsed TOML document into a :class:`Plan`."""
    try:
        return Plan.model_validate(data)
    except PlanError:
        raise
    except ValidationError as exc:
        # a PlanError raised inside a validator arrives wrapped; keep its key path
        for err in exc.errors():
            ctx = err.get("ctx", {}) or {}
            inner = ctx.get("error")
            if isinstance(inner, PlanError):
                return_path = _loc_to_path(tuple(err.get("loc", ())), Plan)
                key = ".".join(p for p in (return_path, inner.key) if p)
                raise PlanError(key, inner.message) from None
        raise _first_error(exc) from None


def load_plan(path: str | Path) -> Plan:
    """Read and validate a plan file.

    Raises
    ------
    PlanError
        For a missing file, a TOML syntax error (with its line) or any schema problem.
    """
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise PlanError("", f"plan file '{p}' not found: check the path, or make one with 'kplan new'") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise PlanError("", f"cannot read plan file '{p}': {exc}") from None
    return parse_plan_text(text, source=str(p))


def parse_plan_text(text: str, source: str = "<plan>") -> Plan:
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise PlanError("", f"{source}: TOML syntax error: {exc} — fix the line shown") from None
    return parse_plan(data)
