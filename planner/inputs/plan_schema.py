"""The plan file's schema: pydantic models of one study, each number checked for range and sense.

Every number is checked at the schema: finite, not a boolean, and inside a physically generous range
(the range is stated in the message); the table of ranges is in :mod:`planner.inputs.plan_fields`.
Titles and labels hold at most 200 characters; identifiers (stock ids, species and ion names) at most
40 printable characters (see :mod:`planner.inputs.text`).
"""

from __future__ import annotations

from typing import Any, Literal

from pydantic import (
    Field,
    PrivateAttr,
    field_validator,
    model_validator,
)

from .formulas import formula_mass_g_mol
from .limits import (
    MAX_ALTERNATIVES,
    MAX_DISPENSERS,
    MAX_GRID_LEVELS,
    MAX_IONS,
    MAX_SPECIES,
    MAX_STOCKS,
    MAX_TUBES,
)
from .names import ion_charge, unknown_name
from .plan_fields import (
    Absorbance,
    Charge,
    Conc,
    Epsilon_,
    Fraction,
    FractionBelow1,
    IonicStrength,
    IonicStrengthTarget,
    Mass,
    PlanError,
    RelSD,
    SizeA,
    StockId,
    StrictModel,
    Text,
    Volume,
    VolumeOrZero,
    Wavelength,
    integer_in,
    number_in,
)
from .plan_parts import Alternative, SpeciesCore, Titration, check_spectra_keys
from .spectra_table import SpectraTable
from .text import check_identifier

DISPENSER_KINDS = ("burette", "pipette", "graduated-pipette", "micropipette", "piston-burette")
PISTON_DISPENSERS = ("micropipette", "piston-burette")  # ISO 8655 devices: no class, a systematic limit
MAKE_UP_MODES = ("to-mark", "added")
CRITERIA = ("target", "all")
ACTIVITY_MODELS = ("davies", "extended-dh", "none")

MIN_PATH_CM = 0.001  # 10 µm: thinner than any cuvette or demountable cell
MIN_LINEAR_WIDTH = 0.05  # absorbance units: a narrower linear range is a typo
MIN_PURITY = 0.5  # an assay below 50 % is not a reagent the stocks are made from
MICROPIPETTE_RINSE_ML = 0.2  # pre-wetting the tip two or three times [common practice]
MICROPIPETTE_DEAD_ML = 0.1  # what a vial keeps below a micropipette tip's reach [common practice]


class Component(StrictModel):
    """A metal or ligand component: a label for people and its charge (for ionic strength)."""

    label: Text = ""
    charge: Charge = 0
    size_angstrom: SizeA | None = Field(default=None, alias="size_A")


class Protons(StrictModel):
    """Protons held at a buffered pH: folded into conditional constants."""

    pH: number_in(-2, 16)
    size_angstrom: SizeA = Field(default=9.0, alias="size_A")


class Components(StrictModel):
    M: Component
    L: Component
    H: Protons | None = None


class Species(SpeciesCore):
    log_beta_sd: number_in(0, 10) = 0.0
    size_angstrom: SizeA | None = Field(default=None, alias="size_A")


class Epsilon(StrictModel):
    value: Epsilon_
    rsd: RelSD = 0.0


class Noise(StrictModel):
    k1: Fraction = 0.003
    k2: Fraction = 0.0
    k3: Fraction = 0.0


class Band(StrictModel):
    peak_nm: Wavelength
    fwhm_nm: number_in(0, 2000, "nm", lo_open=True)
    epsilon_max: Epsilon_


class Optics(StrictModel):
    wavelength_nm: Wavelength
    path_cm: number_in(MIN_PATH_CM, 100, "cm") = 1.0
    linear_range: tuple[Absorbance, Absorbance] = (0.1, 1.0)
    stray_light: FractionBelow1 = 0.0
    noise: Noise = Noise()
    display_step: number_in(0, 1) = 0.0
    bandwidth_nm: number_in(0, 500, "nm", lo_open=True) | None = None
    epsilon: dict[str, Epsilon] = Field(default_factory=dict)
    bands: dict[str, Band] = Field(default_factory=dict)
    # whole spectra (planner.model.spectra): an ε table and/or the bands over an instrument window
    spectra: Text | None = None
    window_nm: tuple[Wavelength, Wavelength] | None = None
    step_nm: number_in(0, 100, "nm", lo_open=True) = 1.0
    edge_rise: number_in(1, 1000) = 2.0
    spectra_rsd: dict[str, RelSD] = Field(default_factory=dict)

    @field_validator("window_nm")
    @classmethod
    def _window(cls, v: tuple[float, float] | None) -> tuple[float, float] | None:
        if v is not None and not v[0] < v[1]:
            raise ValueError(f"{v[0]:g} nm must be below {v[1]:g} nm, e.g. window_nm = [400, 700]")
        return v

    @property
    def has_spectra(self) -> bool:
        """True when the plan describes whole spectra (an ε table or a window over the bands)."""
        return self.spectra is not None or self.window_nm is not None

    @field_validator("linear_range")
    @classmethod
    def _range(cls, v: tuple[float, float]) -> tuple[float, float]:
        lo, hi = v
        if not lo < hi:
            raise ValueError(f"lo = {lo} must be below hi = {hi}, e.g. linear_range = [0.05, 1.00]")
        if lo < 0:
            raise ValueError(f"lo = {lo} is negative: absorbance windows start at 0 or above")
        if hi - lo < MIN_LINEAR_WIDTH:
            raise ValueError(
                f"[{lo:g}, {hi:g}] is {hi - lo:.3g} wide; a photometer's linear range is at least "
                f"{MIN_LINEAR_WIDTH:g} absorbance units wide, e.g. linear_range = [0.1, 1.0]"
            )
        return v


class Stock(StrictModel):
    id: StockId
    label: Text = ""
    conc: dict[str, Conc] = Field(default_factory=dict)
    ions: dict[str, Conc] = Field(default_factory=dict, max_length=MAX_IONS)
    conc_rsd: FractionBelow1 = 0.0
    on_hand: Volume | None = None
    reagent: Text | None = None
    formula: Text | None = None
    purity: number_in(MIN_PURITY, 1, what="an assay fraction ") | None = None
    flask_mL: Volume | None = Field(default=None, alias="flask")
    diluent: bool = False
    background: bool = False
    scarce: bool = False  # make the least of it: the smallest flask and the least reagent weighed

    @field_validator("formula")
    @classmethod
    def _solid(cls, v: str | None) -> str | None:
        if v is not None:
            formula_mass_g_mol(v)  # a formula molmass cannot read is refused now, not at the weighing
        return v

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
                check_identifier(ion, "ion name")
                ion_charge(ion)
            except ValueError as exc:
                raise PlanError(ion, str(exc)) from None
            if not c > 0:
                raise PlanError(ion, f"{c:g} M: concentrations must be positive (or leave it out)")
        return v


class Flask(StrictModel):
    capacity_mL: Volume = Field(alias="capacity")
    # unset: the catalogue's class A, or no class when the flask is described by its tolerance alone
    cls: Literal["A", "B"] | None = Field(default=None, alias="class")
    tolerance_mL: VolumeOrZero | None = Field(default=None, alias="tolerance")


class Balance(StrictModel):
    readability_g: Mass = Field(default=1e-4, alias="readability")
    repeatability_g: Mass = Field(default=1e-4, alias="repeatability")

    @model_validator(mode="after")
    def _positive(self) -> Balance:
        if not (self.readability_g > 0 and self.repeatability_g > 0):
            raise ValueError("readability and repeatability must be positive masses, e.g. '0.1 mg'")
        return self


REPEATABILITY_MAX_FRACTION = 0.1  # a delivery's sd above 10 % of capacity is a unit slip, not a device


class Dispenser(StrictModel):
    kind: Literal["burette", "pipette", "graduated-pipette", "micropipette", "piston-burette"]
    capacity_mL: Volume = Field(alias="capacity")
    # unset: the catalogue's class A, or no class when the device is described by its tolerance alone
    cls: Literal["A", "B"] | None = Field(default=None, alias="class")
    tolerance_mL: VolumeOrZero | None = Field(default=None, alias="tolerance")
    graduation_mL: Volume | None = Field(default=None, alias="graduation")
    repeatability_mL: Volume | None = Field(default=None, alias="repeatability")
    systematic_mL: Volume | None = Field(default=None, alias="systematic")
    stocks: list[str] = Field(min_length=1, max_length=MAX_STOCKS)

    @model_validator(mode="after")
    def _figures(self) -> Dispenser:
        piston = self.kind in PISTON_DISPENSERS
        if piston and self.cls is not None:
            raise PlanError(
                "class", f"a {self.kind} has no class: remove it (give systematic = '...' instead)"
            )
        if self.systematic_mL is not None and not piston:
            raise PlanError(
                "systematic",
                f"only a micropipette or piston burette states a systematic error; a {self.kind} gives its "
                "tolerance = '...'",
            )
        if self.systematic_mL is not None and self.tolerance_mL is not None:
            raise PlanError("systematic", "give systematic or tolerance, not both (they are the same limit)")
        if self.graduation_mL is not None:
            if self.kind == "pipette":
                raise PlanError("graduation", "a one-mark pipette has no graduation: remove it")
            if self.graduation_mL > self.capacity_mL:
                raise PlanError(
                    "graduation",
                    f"{self.graduation_mL:g} mL is more than the {self.capacity_mL:g} mL capacity: give the "
                    "smallest subdivision, e.g. graduation = '0.05 mL'",
                )
        if (
            self.repeatability_mL is not None
            and self.repeatability_mL > REPEATABILITY_MAX_FRACTION * self.capacity_mL
        ):
            raise PlanError(
                "repeatability",
                f"{self.repeatability_mL:g} mL is more than {REPEATABILITY_MAX_FRACTION:.0%} of the "
                f"{self.capacity_mL:g} mL capacity: give the standard deviation of one delivery, e.g. "
                "repeatability = '0.003 mL'",
            )
        return self

    @property
    def limit_mL(self) -> float | None:
        """The stated tolerance, or a piston device's measured systematic error (the same limit)."""
        return self.systematic_mL if self.systematic_mL is not None else self.tolerance_mL


class Glassware(StrictModel):
    tube_volume_mL: Volume = Field(alias="tube_volume")
    make_up: Literal["to-mark", "added"] = "to-mark"
    flask: Flask | None = None
    step_mL: Volume = Field(default=0.05, alias="step")
    min_volume_mL: VolumeOrZero = Field(default=0.0, alias="min_volume")
    rinse_mL: VolumeOrZero = Field(default=2.0, alias="rinse")
    dead_volume_mL: VolumeOrZero = Field(default=1.0, alias="dead_volume")
    make_up_min_mL: VolumeOrZero | None = Field(default=None, alias="make_up_min")
    delta_T_C: number_in(-30, 30, "°C") = 0.0
    balance: Balance = Balance()
    order: list[str] | None = None
    dispenser: list[Dispenser] = Field(default_factory=list, max_length=MAX_DISPENSERS)

    @model_validator(mode="before")
    @classmethod
    def _allowances_by_kind(cls, data: Any) -> Any:
        # rinse and dead volume a dispenser needs depend on its kind: a burette is rinsed with a few mL and
        # keeps about 1 mL below its last mark; a micropipette tip is pre-wetted with a fraction of a mL
        # and the vial keeps a little [common practice]. Unset, they follow the plan's largest kind.
        if not isinstance(data, dict) or not isinstance(data.get("dispenser"), list):
            return data
        kinds = {d.get("kind") for d in data["dispenser"] if isinstance(d, dict)}
        if kinds and kinds <= {"micropipette"}:
            data = dict(data)
            data.setdefault("rinse", MICROPIPETTE_RINSE_ML)
            data.setdefault("dead_volume", MICROPIPETTE_DEAD_ML)
        return data

    @model_validator(mode="after")
    def _grid(self) -> Glassware:
        # the design enumerates every grid volume of every stock: a step far below the tube volume
        # would ask for millions of levels (and as many candidate tubes per stock)
        levels = self.tube_volume_mL / self.step_mL
        if levels > MAX_GRID_LEVELS:
            raise PlanError(
                "step",
                f"{self.step_mL:g} mL gives {levels:.3g} grid levels up to tube_volume = "
                f"{self.tube_volume_mL:g} mL; at most {MAX_GRID_LEVELS}: use a step of at least "
                f"{self.tube_volume_mL / MAX_GRID_LEVELS:.2g} mL",
            )
        if self.make_up_min_mL is not None and not self.make_up_min_mL < self.tube_volume_mL:
            raise PlanError(
                "make_up_min",
                f"{self.make_up_min_mL:g} mL must be below tube_volume "
                f"({self.tube_volume_mL:g} mL), e.g. make_up_min = '0.5 mL'",
            )
        return self


class Medium(StrictModel):
    activity_model: Literal["davies", "extended-dh", "none"] = "davies"
    reference_ionic_strength_M: IonicStrength | None = Field(default=None, alias="reference_ionic_strength")


class DesignSettings(StrictModel):
    tubes: integer_in(1, MAX_TUBES) = 8
    target: str | None = None
    criterion: Literal["target", "all"] = "target"
    robust: bool = True
    goal_se: number_in(0, 5, lo_open=True) = 0.05
    fixed: dict[str, VolumeOrZero] = Field(default_factory=dict)
    blank_offset: bool = False
    ionic_strength_M: IonicStrengthTarget | None = Field(default=None, alias="ionic_strength")
    ionic_strength_tolerance: number_in(0, 1, lo_open=True, hi_open=True) = 0.02
    analysis: Literal["global", "double-reciprocal", "one-to-one"] = "global"
    check: Literal["auto", "none"] = "auto"
    # a cap on the SE cost of the model check, not a weight: the guarded design's SE of the target may be
    # at most ×(1 + check_weight) the target-only design's (the key keeps its older name)
    check_weight: number_in(
        0,
        1,
        hi_open=True,
        what="the model check's cap on the SE cost w (the guarded design's SE at most ×(1 + w) the "
        "target-only one; 0: no guard), ",
    ) = 0.25
    alternative: list[Alternative] = Field(default_factory=list, max_length=MAX_ALTERNATIVES)
    card_series: Literal["binding-curve", "mole-ratio", "job"] = "binding-curve"


class Plan(StrictModel):
    """A validated plan; quantities are floats in mol/L and mL (names carry the unit)."""

    title: Text = "untitled study"
    temperature_C: number_in(-20, 150, "°C") = 25.0
    components: Components
    species: list[Species] = Field(min_length=1, max_length=MAX_SPECIES)
    optics: Optics
    stock: list[Stock] = Field(min_length=1, max_length=MAX_STOCKS)
    glassware: Glassware
    medium: Medium = Medium()
    design: DesignSettings = DesignSettings()
    titration: Titration | None = None
    _spectra_table: SpectraTable | None = PrivateAttr(default=None)

    @property
    def spectra_table(self) -> SpectraTable | None:
        """The ε table named by ``optics.spectra``, read when the plan was loaded (None without one)."""
        return self._spectra_table

    # -- cross-field checks, each naming its key ---------------------------------------------------
    @model_validator(mode="after")
    def _cross(self) -> Plan:
        names = [s.name for s in self.species]
        reserved = {"M", "L", "H"}
        self._cross_species(names, reserved)
        ids = [s.id for s in self.stock]
        self._cross_stocks(ids)
        self._cross_glassware(ids)
        self._cross_design(ids, names)
        self._cross_extras(names, reserved)
        return self

    def _cross_species(self, names: list[str], reserved: set[str]) -> None:
        """Species names unique and not components; H only with [components.H]; optics keys known."""
        for i, s in enumerate(self.species):
            if s.name in reserved:
                raise PlanError(
                    f"species[{i}].name", f"'{s.name}' is a component; name the species e.g. 'ML'"
                )
            if names.count(s.name) > 1:
                raise PlanError(f"species[{i}].name", f"species '{s.name}' is defined twice")
            if s.formula.get("H", 0) and self.components.H is None:
                raise PlanError(
                    f"species[{i}].formula",
                    "uses H but the plan has no [components.H]: add H = { pH = ... } under [components]",
                )
        absorbers = set(names) | {"M", "L"}
        alternatives = {a.name for a in self.design.alternative}  # a band for the model check's spectra
        for table, keys in (("epsilon", self.optics.epsilon), ("bands", self.optics.bands)):
            known = absorbers | alternatives if table == "bands" else absorbers
            for key in keys:
                if key not in known:
                    raise PlanError(f"optics.{table}.{key}", unknown_name("species", key, sorted(known)))

    def _cross_stocks(self, ids: list[str]) -> None:
        """Stock ids unique; one diluent at most (one needed under to-mark), one background stock at
        most and holding ions only; some stock holds the metal and some the ligand."""
        for i, s in enumerate(self.stock):
            if ids.count(s.id) > 1:
                raise PlanError(f"stock[{i}].id", f"stock id '{s.id}' is defined twice")
            if s.background and s.diluent:
                raise PlanError(
                    f"stock[{i}].background",
                    "a stock cannot be both the diluent and the background "
                    "electrolyte: the diluent fills the tube, the background stock levels I",
                )
            if s.background and (s.conc or not s.ions):
                raise PlanError(
                    f"stock[{i}].background",
                    "a background-electrolyte stock holds only inert ions: give it ions = { ... } and "
                    "no conc",
                )
        if sum(s.background for s in self.stock) > 1:
            raise PlanError("stock", "more than one stock has background = true: keep one")
        diluents = [s.id for s in self.stock if s.diluent]
        if len(diluents) > 1:
            raise PlanError(
                "stock", f"more than one stock has diluent = true ({', '.join(diluents)}): keep one"
            )
        if self.glassware.make_up == "to-mark" and not diluents:
            raise PlanError(
                "stock", "make_up = 'to-mark' needs a diluent: mark one stock with diluent = true"
            )
        for comp, what in (("M", "metal"), ("L", "ligand")):
            if not any(s.conc.get(comp) for s in self.stock):
                raise PlanError(
                    "stock",
                    f"no stock contains the {what} {comp}: give one stock conc = {{ {comp} = '...' }}",
                )

    def _cross_glassware(self, ids: list[str]) -> None:
        """Dispensers and the order of addition name stocks of the plan, each once."""
        for j, d in enumerate(self.glassware.dispenser):
            for k, sid in enumerate(d.stocks):
                if sid not in ids:
                    raise PlanError(
                        f"glassware.dispenser[{j}].stocks[{k}]", unknown_name("stock id", sid, ids)
                    )
        if self.glassware.order is not None:
            for k, sid in enumerate(self.glassware.order):
                if sid not in ids:
                    raise PlanError(f"glassware.order[{k}]", unknown_name("stock id", sid, ids))
            if len(set(self.glassware.order)) != len(self.glassware.order):
                raise PlanError("glassware.order", "a stock is listed twice: name each stock once")

    def _cross_design(self, ids: list[str], names: list[str]) -> None:
        """Fixed volumes name dispensed stocks and fit in a tube; the target is a species."""
        for sid in self.design.fixed:
            if sid not in ids:
                raise PlanError(f"design.fixed.{sid}", unknown_name("stock id", sid, ids))
        dil = self.diluent
        if dil is not None and self.glassware.make_up == "to-mark" and dil.id in self.design.fixed:
            raise PlanError(
                f"design.fixed.{dil.id}",
                "the diluent fills each tube to the mark under "
                "make_up = 'to-mark', so its volume cannot be fixed: remove it from design.fixed",
            )
        fixed_total = sum(self.design.fixed.values())
        if fixed_total > self.glassware.tube_volume_mL * (1 + 1e-12):
            raise PlanError(
                "design.fixed",
                f"fixed volumes add up to {fixed_total:g} mL, more than tube_volume = "
                f"{self.glassware.tube_volume_mL:g} mL: reduce them or use a larger tube",
            )
        if self.design.target is not None and self.design.target not in names:
            raise PlanError("design.target", unknown_name("species", self.design.target, names))

    def _cross_extras(self, names: list[str], reserved: set[str]) -> None:
        """Alternative species of the model check and the titration table, each naming its key."""
        alt_names = [a.name for a in self.design.alternative]
        for i, alt in enumerate(self.design.alternative):
            key = f"design.alternative[{i}]"
            if alt.name in reserved or alt.name in names or alt_names.count(alt.name) > 1:
                raise PlanError(
                    f"{key}.name",
                    f"'{alt.name}' is already a component or species: give the "
                    "alternative species a name of its own, e.g. 'ML2'",
                )
            if alt.formula.get("H", 0) and self.components.H is None:
                raise PlanError(f"{key}.formula", "uses H but the plan has no [components.H]")
        if self.titration is not None:
            t = self.titration
            ids = [s.id for s in self.stock]
            for key, sid in (("cell", t.cell), ("titrant", t.titrant)):
                if sid not in ids:
                    raise PlanError(f"titration.{key}", unknown_name("stock id", sid, ids))
            if t.cell == t.titrant:
                raise PlanError("titration.titrant", "the titrant must be another stock than the cell's")
            if self.glassware.make_up != "added":
                raise PlanError(
                    "glassware.make_up", "an in-cuvette titration adds every volume: set make_up = 'added'"
                )
            if t.max_volume_mL > self.glassware.tube_volume_mL * (1 + 1e-12):
                raise PlanError(
                    "titration.max_volume",
                    f"{t.max_volume_mL:g} mL is more than the cuvette holds (glassware.tube_volume = "
                    f"{self.glassware.tube_volume_mL:g} mL): at most the tube volume",
                )
        check_spectra_keys(self, set(names) | reserved - {"H"})

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
