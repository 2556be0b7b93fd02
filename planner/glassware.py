"""Glassware catalogue, tolerances turned into standard uncertainties, and volume grids.

The catalogue (``planner/data/glassware.toml``) stores class A tolerances; class B is computed as
twice class A (ASTM E287 §1.1.2, ASTM E288 §1.1.2). Micropipettes have no class and carry the
ISO 8655-2:2002 systematic and random limits instead.

Tolerance → standard uncertainty follows EURACHEM/CITAC QUAM (3rd ed., 2012): a triangular
distribution for a glassware tolerance, ``a/√6``; a rectangular one when nothing else is known,
``a/√3`` (GUM, JCGM 100:2008, 4.3.7); a reading resolution ``δ`` gives ``δ/√12`` (GUM F.2.2.1).

Every delivery is split into a *random* part, independent from one delivery to the next, and a
*systematic* part, shared by every delivery made with the same device (its calibration error) in
the same session (the lab's offset from the 20 °C calibration temperature). The two behave
differently in a fit: replicates average the first, never the second.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass, replace
from importlib import resources

import numpy as np

try:  # Python ≥ 3.11
    import tomllib
except ModuleNotFoundError:  # pragma: no cover - Python 3.10 fallback
    import tomli as tomllib

__all__ = [
    "CLASSES",
    "CLASS_B_FACTOR",
    "KINDS",
    "SINGLE_VOLUME_KINDS",
    "WATER_EXPANSION_PER_C",
    "DeliveryUncertainty",
    "GlasswareError",
    "GlasswareItem",
    "catalogue",
    "check_volume",
    "delivery_uncertainty",
    "flask_volume_uncertainty",
    "lookup",
    "on_grid",
    "snap_to_grid",
    "u_reading",
    "u_rectangular",
    "u_temperature",
    "u_triangular",
    "volume_grid",
]

KINDS = ("burette", "pipette", "graduated-pipette", "flask", "micropipette")
"""Kind names, as the plan file spells them ("pipette" is one-mark, "flask" volumetric)."""

CLASSES = ("A", "B")
"""Glassware classes; micropipettes have none."""

CLASS_B_FACTOR = 2.0
"""Class B tolerance / class A tolerance [source: ASTM E287 §1.1.2, ASTM E288 §1.1.2]."""

SINGLE_VOLUME_KINDS = ("pipette", "flask")
"""Kinds that hold or deliver only their capacity."""

WATER_EXPANSION_PER_C = 2.1e-4
"""Volume expansion coefficient of water near 20 °C, 1/°C [source: EURACHEM/CITAC QUAM, example A1]."""

READING_FRACTION_OF_GRADUATION = 0.2
"""A meniscus is read to ±1/5 of the smallest subdivision [common practice]: ±0.02 mL on a 0.1 mL
scale, ±0.01 mL on a 0.05 mL scale, the ±0.01–0.02 mL that domain.md quotes for a burette reading."""

DEFAULT_READING_HALF_WIDTH_mL = 0.02
"""Reading half-width when an item has no recorded graduation [common practice, domain.md §3]."""

MICROPIPETTE_MIN_FRACTION = 0.1
"""Lower end of a variable micropipette's usable range, fraction of nominal [from memory: ISO 8655-2]."""

REPEATABILITY_PER_U_CALIBRATION = 0.02 / (0.1 / math.sqrt(6.0))
"""Fill-to-mark repeatability (sd) per triangular calibration uncertainty, used when none is given.

Derived from EURACHEM/CITAC QUAM example A1 (100 mL flask, ±0.1 mL, repeatability 0.02 mL), i.e.
about 0.49: the one published pair we have for class A glassware [derived]."""

MIN_STEP_mL = 1e-6
"""Smallest grid step accepted (1 nL): below any real device; keeps 10-decimal rounding exact."""

_GRID_DECIMALS = 10
_GRID_ATOL_mL = 1e-10  # the resolution of the 10-decimal rounding
_MAX_GRID_POINTS = 1_000_000


class GlasswareError(ValueError):
    """A glassware choice or a volume the user asked for cannot be honoured; the message says why."""


@dataclass(frozen=True)
class GlasswareItem:
    """One device of the catalogue (or a user-supplied one).

    Attributes
    ----------
    kind : str
        One of :data:`KINDS`.
    capacity_mL : float
        Nominal capacity, mL (a micropipette's nominal, i.e. largest selectable, volume).
    cls : str or None
        "A" or "B"; None for micropipettes, which have no class.
    tolerance_mL : float
        ± limit of error at capacity, mL; for a micropipette the ISO 8655-2 maximum permissible
        systematic error.
    graduation_mL : float or None
        Smallest subdivision, mL, for kinds that have one.
    random_mL : float or None
        Micropipettes: ISO 8655-2 maximum permissible random error (a standard deviation), mL.
    source : str
        Standard the tolerance comes from.
    from_memory : bool
        True when the tolerance is recalled rather than read from the cited table.
    note : str
        Anything else worth knowing (for example, a recalled graduation).
    """

    kind: str
    capacity_mL: float
    cls: str | None
    tolerance_mL: float
    graduation_mL: float | None
    random_mL: float | None
    source: str
    from_memory: bool
    note: str = ""

    @property
    def label(self) -> str:
        """Human name for prep sheets, e.g. ``"class A 50 mL burette"``."""
        if self.kind == "micropipette":
            return f"{_fmt(self.capacity_mL * 1000.0)} µL micropipette"
        names = {"pipette": "one-mark pipette", "flask": "volumetric flask"}
        return f"class {self.cls} {_fmt(self.capacity_mL)} mL {names.get(self.kind, self.kind)}"

    def summary(self) -> dict:
        """Plain JSON-safe description."""
        return {
            "kind": self.kind,
            "capacity_mL": float(self.capacity_mL),
            "class": self.cls,
            "tolerance_mL": float(self.tolerance_mL),
            "graduation_mL": None if self.graduation_mL is None else float(self.graduation_mL),
            "random_mL": None if self.random_mL is None else float(self.random_mL),
            "source": self.source,
            "from_memory": bool(self.from_memory),
            "note": self.note,
            "label": self.label,
        }


def _fmt(x: float) -> str:
    return f"{x:g}"


# --------------------------------------------------------------------------------------------------
# catalogue
# --------------------------------------------------------------------------------------------------
def _parse_catalogue(data: dict) -> tuple[GlasswareItem, ...]:
    """Validate the TOML table and build items, sorted by kind (in :data:`KINDS` order) and capacity."""
    entries = data.get("item")
    if not isinstance(entries, list) or not entries:
        raise GlasswareError("glassware catalogue has no [[item]] entries")
    items = []
    for i, e in enumerate(entries):
        where = f"glassware catalogue entry {i + 1}"
        kind = e.get("kind")
        if kind not in KINDS:
            raise GlasswareError(f"{where}: kind {kind!r} is not one of {', '.join(KINDS)}")
        cls = e.get("class")
        if kind == "micropipette":
            if cls is not None:
                raise GlasswareError(f"{where}: micropipettes have no class; remove 'class'")
            if e.get("random_mL") is None:
                raise GlasswareError(f"{where}: a micropipette needs random_mL (ISO 8655-2 random limit)")
        elif cls != "A":
            raise GlasswareError(f"{where}: store class 'A' only (class B is computed as 2 × A)")
        for key in ("capacity_mL", "tolerance_mL"):
            value = e.get(key)
            if not isinstance(value, (int, float)) or not value > 0:
                raise GlasswareError(f"{where}: {key} must be a positive number, got {value!r}")
        items.append(
            GlasswareItem(
                kind=kind,
                capacity_mL=float(e["capacity_mL"]),
                cls=cls,
                tolerance_mL=float(e["tolerance_mL"]),
                graduation_mL=None if e.get("graduation_mL") is None else float(e["graduation_mL"]),
                random_mL=None if e.get("random_mL") is None else float(e["random_mL"]),
                source=str(e.get("source", "")),
                from_memory=bool(e.get("from_memory", True)),
                note=str(e.get("note", "")),
            )
        )
    seen = set()
    for it in items:
        key = (it.kind, round(it.capacity_mL, 9))
        if key in seen:
            raise GlasswareError(f"glassware catalogue lists the {it.label} twice; keep one entry")
        seen.add(key)
    items.sort(key=lambda it: (KINDS.index(it.kind), it.capacity_mL))
    return tuple(items)


@functools.cache
def catalogue() -> tuple[GlasswareItem, ...]:
    """All catalogue items (class A, or class-free micropipettes), loaded once from the package data.

    Returns
    -------
    tuple of GlasswareItem
        Sorted by kind (in :data:`KINDS` order), then capacity.
    """
    text = resources.files("planner.data").joinpath("glassware.toml").read_text(encoding="utf-8")
    return _parse_catalogue(tomllib.loads(text))


def _capacities(kind: str) -> list[float]:
    return [it.capacity_mL for it in catalogue() if it.kind == kind]


def _describe_capacities(kind: str) -> str:
    caps = _capacities(kind)
    if kind == "micropipette":
        return ", ".join(_fmt(c * 1000.0) for c in caps) + " µL"
    return ", ".join(_fmt(c) for c in caps) + " mL"


def lookup(
    kind: str,
    capacity_mL: float,
    cls: str | None = "A",
    tolerance_mL: float | None = None,
    *,
    graduation_mL: float | None = None,
    random_mL: float | None = None,
) -> GlasswareItem:
    """Find a device in the catalogue, or describe one the user owns.

    Parameters
    ----------
    kind : str
        One of :data:`KINDS`.
    capacity_mL : float
        Capacity, mL (micropipettes: nominal volume in mL, e.g. 0.2 for a 200 µL pipette).
    cls : {"A", "B"} or None
        Glassware class; class B tolerance = 2 × class A (ASTM E287 §1.1.2, E288 §1.1.2). Ignored for
        micropipettes when "A" or None (they have no class); "B" is refused for them.
    tolerance_mL : float, optional
        Override the tolerance (± mL; a micropipette's systematic limit), e.g. from a calibration
        certificate. With it, a capacity missing from the catalogue becomes a user-supplied item.
    graduation_mL, random_mL : float, optional
        For a user-supplied item: its smallest subdivision, its random limit (micropipettes).

    Returns
    -------
    GlasswareItem

    Raises
    ------
    GlasswareError
        Unknown kind or class, bad numbers, or a capacity the catalogue lacks (the message lists
        the capacities it has).
    """
    if kind not in KINDS:
        raise GlasswareError(f"unknown glassware kind {kind!r}; use one of: {', '.join(KINDS)}")
    if kind == "micropipette":
        if cls not in (None, "A"):
            raise GlasswareError(
                f"micropipettes have no class (got cls={cls!r}); omit the class, they carry ISO 8655-2 "
                "systematic and random limits instead"
            )
        cls = None
    elif cls not in CLASSES:
        raise GlasswareError(f"unknown glassware class {cls!r} for a {kind}; use 'A' or 'B'")
    if not (isinstance(capacity_mL, (int, float, np.floating, np.integer)) and math.isfinite(capacity_mL)
            and capacity_mL > 0):
        raise GlasswareError(f"{kind} capacity must be a positive number of mL, got {capacity_mL!r}")
    for name, value in (("tolerance_mL", tolerance_mL), ("graduation_mL", graduation_mL),
                        ("random_mL", random_mL)):
        if value is not None and not (math.isfinite(value) and value > 0):
            raise GlasswareError(f"{kind} {name} must be a positive number of mL, got {value!r}")

    base = next(
        (it for it in catalogue() if it.kind == kind and math.isclose(it.capacity_mL, capacity_mL,
                                                                      rel_tol=1e-9)),
        None,
    )
    if base is None:
        if tolerance_mL is None:
            shown = f"{_fmt(capacity_mL * 1000.0)} µL" if kind == "micropipette" else f"{_fmt(capacity_mL)} mL"
            raise GlasswareError(
                f"no {kind} of {shown} in the glassware catalogue; it has {_describe_capacities(kind)}. "
                "Pick one of those, or give tolerance_mL for your own device"
            )
        # A user-supplied device: the user vouches for the tolerance at the class asked for.
        return GlasswareItem(
            kind=kind, capacity_mL=float(capacity_mL), cls=cls, tolerance_mL=float(tolerance_mL),
            graduation_mL=graduation_mL, random_mL=random_mL, source="user-supplied tolerance",
            from_memory=False,
        )

    item = base
    if cls == "B":
        item = replace(
            item,
            cls="B",
            tolerance_mL=CLASS_B_FACTOR * item.tolerance_mL,
            source=f"{item.source}; class B = 2 × class A (ASTM E287 §1.1.2, E288 §1.1.2)",
        )
    changes = {}
    if tolerance_mL is not None:
        changes.update(tolerance_mL=float(tolerance_mL), from_memory=False,
                       source=f"user-supplied tolerance (catalogue: {item.source})")
    if graduation_mL is not None:
        changes["graduation_mL"] = float(graduation_mL)
    if random_mL is not None:
        changes["random_mL"] = float(random_mL)
    return replace(item, **changes) if changes else item


# --------------------------------------------------------------------------------------------------
# standard uncertainties
# --------------------------------------------------------------------------------------------------
def _nonnegative(x, name: str) -> np.ndarray:
    arr = np.asarray(x, dtype=float)
    if not np.all(np.isfinite(arr)) or np.any(arr < 0):
        raise GlasswareError(f"{name} must be finite and ≥ 0, got {x!r}")
    return arr


def u_triangular(a):
    """Standard uncertainty of a ± ``a`` limit with a triangular distribution, ``a/√6``.

    Used for glassware tolerances, whose values cluster near nominal [source: EURACHEM/CITAC QUAM,
    3rd ed. 2012, examples A1–A3].
    """
    return _nonnegative(a, "half-width") / math.sqrt(6.0)


def u_rectangular(a):
    """Standard uncertainty of a ± ``a`` limit with a rectangular distribution, ``a/√3``.

    Used when only the bounds are known [source: GUM, JCGM 100:2008, 4.3.7].
    """
    return _nonnegative(a, "half-width") / math.sqrt(3.0)


def u_reading(resolution):
    """Standard uncertainty of a reading rounded to ``resolution``, ``δ/√12``.

    [source: GUM, JCGM 100:2008, F.2.2.1]: a rectangular distribution of full width δ.
    """
    return _nonnegative(resolution, "resolution") / math.sqrt(12.0)


def u_temperature(volume_mL, delta_T_C, coefficient_per_C: float = WATER_EXPANSION_PER_C):
    """Standard uncertainty of a volume from a temperature offset, ``|V·α·ΔT|/√3``.

    The liquid's expansion over a ±ΔT band around the calibration temperature, taken as rectangular
    [source: EURACHEM/CITAC QUAM, 3rd ed. 2012, example A1]. Glass expansion (~1e-5 /°C) is an order
    of magnitude smaller and neglected, as in QUAM.
    """
    v = _nonnegative(volume_mL, "volume_mL")
    dT = np.asarray(delta_T_C, dtype=float)
    if not np.all(np.isfinite(dT)):
        raise GlasswareError(f"delta_T_C must be a finite number of °C, got {delta_T_C!r}")
    return np.abs(v * coefficient_per_C * dT) / math.sqrt(3.0)


# --------------------------------------------------------------------------------------------------
# deliveries
# --------------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class DeliveryUncertainty:
    """Standard uncertainties of delivered volumes, split by how they correlate.

    Attributes
    ----------
    random_mL : ndarray
        Independent from one delivery to the next (reading, fill-to-mark repeatability), mL.
    systematic_mL : ndarray
        Shared by every delivery from this device, mL: ``√(calibration² + temperature²)``. Within one
        device the correlation between deliveries i and j is 1 (covariance ``s_i·s_j``).
    calibration_mL : ndarray
        The device's calibration part of ``systematic_mL`` (this device only), mL.
    temperature_mL : ndarray
        The lab-temperature part of ``systematic_mL``, mL. It is shared by *every* device used in the
        session, not just this one, so a covariance model may correlate it across devices.
    """

    random_mL: np.ndarray
    systematic_mL: np.ndarray
    calibration_mL: np.ndarray
    temperature_mL: np.ndarray

    @property
    def combined_mL(self) -> np.ndarray:
        """Combined standard uncertainty of a single delivery, ``√(random² + systematic²)``, mL."""
        return np.hypot(self.random_mL, self.systematic_mL)


def _reading_u_mL(item: GlasswareItem) -> float:
    half = (
        READING_FRACTION_OF_GRADUATION * item.graduation_mL
        if item.graduation_mL is not None
        else DEFAULT_READING_HALF_WIDTH_mL
    )
    return float(u_rectangular(half))


def delivery_uncertainty(item: GlasswareItem, volume_mL, *, delta_T_C: float = 0.0,
                         repeatability_mL: float | None = None) -> DeliveryUncertainty:
    """Random and systematic standard uncertainty of each delivered volume.

    Vectorised over ``volume_mL``; a volume of 0 means "not delivered" and carries no uncertainty.

    Model, per kind:

    - **burette**, **graduated-pipette**: a delivery is the difference of two readings [common
      practice], each read to ±1/5 of a subdivision (rectangular, GUM 4.3.7), so
      ``random = √2 · (g/5)/√3``. The calibration tolerance ``a`` is the limit at capacity; it is
      scaled with the fraction of the scale used, ``systematic = (a/√6)·V/capacity`` (triangular,
      QUAM A1–A3; the proportional scaling is an assumption: the error of a partial delivery grows
      along the bore).
    - **pipette** (one-mark), **flask**: only the capacity (volume 0 = not used); ``systematic =
      a/√6`` (QUAM A1); random = fill-to-mark repeatability, by default
      :data:`REPEATABILITY_PER_U_CALIBRATION` × ``a/√6`` (the QUAM A1 ratio).
    - **micropipette**: ISO 8655-2:2002 limits; for a variable pipette the limits at nominal, in µL,
      apply to every selected volume [from memory: ISO 8655-2:2002], so both stay constant below
      nominal. Systematic limit rectangular, ``a/√3`` (a maximum permissible error with no known
      distribution, GUM 4.3.7); the random limit is already a standard deviation.

    The temperature term ``V·α·ΔT/√3`` (QUAM A1) goes into the **systematic** part: the lab's offset
    from the 20 °C calibration temperature is the same for every delivery made in one session, so it
    does not average out over replicates [derived].

    Parameters
    ----------
    item : GlasswareItem
    volume_mL : array_like
        Delivered volumes, mL.
    delta_T_C : float
        Half-width of the band of lab temperatures around the calibration temperature, °C.
    repeatability_mL : float, optional
        Measured per-delivery standard deviation, mL; replaces the default random model.

    Returns
    -------
    DeliveryUncertainty
        Arrays shaped like ``volume_mL``.

    Raises
    ------
    GlasswareError
        Volume above capacity, below a micropipette's usable range, or (one-mark pipette, flask)
        not the capacity.
    """
    v = np.asarray(volume_mL, dtype=float)
    check_volume(item, v)
    if repeatability_mL is not None:
        repeatability_mL = float(_nonnegative(repeatability_mL, "repeatability_mL"))
    delivered = v > 0

    if item.kind in ("burette", "graduated-pipette"):
        random = math.sqrt(2.0) * _reading_u_mL(item) if repeatability_mL is None else repeatability_mL
        calibration = u_triangular(item.tolerance_mL) * v / item.capacity_mL
    elif item.kind in SINGLE_VOLUME_KINDS:
        u_cal = float(u_triangular(item.tolerance_mL))
        random = REPEATABILITY_PER_U_CALIBRATION * u_cal if repeatability_mL is None else repeatability_mL
        calibration = np.full_like(v, u_cal)
    elif item.kind == "micropipette":
        if repeatability_mL is None and item.random_mL is None:
            raise GlasswareError(
                f"{item.label} has no random limit; pass repeatability_mL or random_mL to lookup()"
            )
        random = item.random_mL if repeatability_mL is None else repeatability_mL
        calibration = np.full_like(v, float(u_rectangular(item.tolerance_mL)))
    else:  # pragma: no cover - lookup() guards kinds
        raise GlasswareError(f"unknown glassware kind {item.kind!r}; use one of: {', '.join(KINDS)}")

    temperature = u_temperature(v, delta_T_C)
    zero = np.zeros_like(v)
    calibration = np.where(delivered, calibration, zero)
    temperature = np.where(delivered, temperature, zero)
    return DeliveryUncertainty(
        random_mL=np.where(delivered, random, zero),
        systematic_mL=np.hypot(calibration, temperature),
        calibration_mL=calibration,
        temperature_mL=temperature,
    )


def flask_volume_uncertainty(item: GlasswareItem, *, delta_T_C: float = 0.0,
                             repeatability_mL: float = 0.0) -> float:
    """Combined standard uncertainty of the volume of a filled volumetric flask, mL.

    ``u(V) = √((a/√6)² + s² + (V·α·ΔT/√3)²)``: calibration (triangular), fill repeatability ``s``
    and temperature (rectangular) [source: EURACHEM/CITAC QUAM, 3rd ed. 2012, example A1].
    """
    if item.kind != "flask":
        raise GlasswareError(
            f"flask_volume_uncertainty needs a volumetric flask, got a {item.kind}; "
            "use delivery_uncertainty for delivering devices"
        )
    parts = np.array([
        float(u_triangular(item.tolerance_mL)),
        float(_nonnegative(repeatability_mL, "repeatability_mL")),
        float(u_temperature(item.capacity_mL, delta_T_C)),
    ])
    return float(np.sqrt(np.sum(parts**2)))


# --------------------------------------------------------------------------------------------------
# volume checks and grids
# --------------------------------------------------------------------------------------------------
def _shown(values: np.ndarray, limit: int = 5) -> str:
    vals = [_fmt(float(x)) for x in np.ravel(values)[:limit]]
    more = " …" if np.size(values) > limit else ""
    return ", ".join(vals) + more


def smallest_delivery_mL(item: GlasswareItem) -> float:
    """Smallest volume the device is specified to deliver (10 % of nominal for a micropipette,
    ISO 8655-2 — from memory; 0 for glassware, whose limit is the plan's min_volume)."""
    return MICROPIPETTE_MIN_FRACTION * item.capacity_mL if item.kind == "micropipette" else 0.0


def check_volume(item: GlasswareItem, volume_mL, *, step_mL: float | None = None,
                 min_volume_mL: float | None = None) -> None:
    """Refuse volumes a device cannot deliver.

    A volume of 0 means "this device is not used for that tube" and always passes.

    Parameters
    ----------
    item : GlasswareItem
    volume_mL : array_like
        Volumes to deliver, mL.
    step_mL : float, optional
        Grid the volumes must sit on (e.g. a burette's 0.05 mL or a micropipette's setting step).
    min_volume_mL : float, optional
        Smallest volume accepted. For micropipettes it defaults to 10 % of nominal, the lower end of
        the usable range [from memory: ISO 8655-2].

    Raises
    ------
    GlasswareError
        Negative or non-finite, over capacity, below the minimum, off the grid, or (one-mark pipette,
        flask) not the capacity. The message names the device and what to do instead.
    """
    v = np.asarray(volume_mL, dtype=float)
    label = item.label
    bad = ~np.isfinite(v) | (v < 0)
    if np.any(bad):
        raise GlasswareError(f"{label}: volumes must be finite and ≥ 0 mL, got {_shown(v[bad])}")
    cap = item.capacity_mL
    over = v > cap * (1.0 + 1e-9)
    if np.any(over):
        raise GlasswareError(
            f"{label}: {_shown(v[over])} mL exceeds its {_fmt(cap)} mL capacity; "
            "split the delivery or choose a larger device"
        )
    used = v > 0
    if item.kind in SINGLE_VOLUME_KINDS:
        off = used & ~np.isclose(v, cap, rtol=1e-9, atol=0.0)
        if np.any(off):
            raise GlasswareError(
                f"{label} holds only its capacity, {_fmt(cap)} mL, but {_shown(v[off])} mL was asked; "
                "use a burette, graduated pipette or micropipette, or a one-mark pipette of that size"
            )
    if min_volume_mL is None and item.kind == "micropipette":
        min_volume_mL = MICROPIPETTE_MIN_FRACTION * cap
    if min_volume_mL is not None:
        low = used & (v < min_volume_mL * (1.0 - 1e-9))
        if np.any(low):
            raise GlasswareError(
                f"{label}: {_shown(v[low])} mL is below the smallest volume allowed, "
                f"{_fmt(min_volume_mL)} mL; use a smaller device or a more dilute stock"
            )
    if step_mL is not None:
        off = ~on_grid(v, step_mL)
        if np.any(off):
            raise GlasswareError(
                f"{label}: {_shown(v[off])} mL is not a multiple of the {_fmt(step_mL)} mL step "
                f"(nearest: {_shown(snap_to_grid(v[off], step_mL))} mL); snap the recipe to the grid"
            )


def _check_step(step_mL: float) -> float:
    step = float(step_mL)
    if not (math.isfinite(step) and step >= MIN_STEP_mL):
        raise GlasswareError(f"volume step must be a number ≥ {MIN_STEP_mL:g} mL, got {step_mL!r}")
    return step


def on_grid(volume_mL, step_mL: float, *, rtol: float = 1e-9) -> np.ndarray:
    """Whether each volume is an integer multiple of ``step_mL``.

    Tolerance ``max(rtol·max(|V|, step), 1e-10 mL)``: relative for float drift, absolute for the
    10-decimal rounding of :func:`snap_to_grid` and :func:`volume_grid`.
    """
    step = _check_step(step_mL)
    v = np.asarray(volume_mL, dtype=float)
    gap = np.abs(v - np.rint(v / step) * step)
    return gap <= np.maximum(rtol * np.maximum(np.abs(v), step), _GRID_ATOL_mL)


def snap_to_grid(volume_mL, step_mL: float) -> np.ndarray:
    """Nearest multiple of ``step_mL`` (built as integer × step, rounded to 10 decimals against drift)."""
    step = _check_step(step_mL)
    v = np.asarray(volume_mL, dtype=float)
    return np.round(np.rint(v / step) * step, _GRID_DECIMALS)


def volume_grid(min_mL: float, max_mL: float, step_mL: float) -> np.ndarray:
    """Every multiple of ``step_mL`` in ``[min_mL, max_mL]``, ascending.

    Built from integer multiples and rounded to 10 decimals, so 0.1 + 0.2 drift never appears.

    Raises
    ------
    GlasswareError
        Negative or reversed bounds, a bad step, no multiple in range, or more than a million points.
    """
    step = _check_step(step_mL)
    lo, hi = float(min_mL), float(max_mL)
    if not (math.isfinite(lo) and math.isfinite(hi)) or lo < 0 or hi < lo:
        raise GlasswareError(f"volume grid needs 0 ≤ min_mL ≤ max_mL, got min_mL={min_mL!r}, max_mL={max_mL!r}")
    if (hi - lo) / step > _MAX_GRID_POINTS:
        raise GlasswareError(
            f"volume grid {_fmt(lo)}–{_fmt(hi)} mL in steps of {_fmt(step)} mL has more than "
            f"{_MAX_GRID_POINTS} points; use a coarser step"
        )
    k_lo = math.ceil(lo / step - 1e-9)
    k_hi = math.floor(hi / step + 1e-9)
    if k_hi < k_lo:
        raise GlasswareError(
            f"no multiple of {_fmt(step)} mL lies in [{_fmt(lo)}, {_fmt(hi)}] mL; widen the range or "
            "use a finer step"
        )
    grid = np.round(np.arange(k_lo, k_hi + 1, dtype=float) * step, _GRID_DECIMALS)
    # The 1e-9 slack may put an end point a hair outside the bounds; clipping moves it < 1e-9·step.
    return np.clip(grid, lo, hi)
