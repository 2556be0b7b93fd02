"""The glassware catalogue (``planner/data/glassware.toml``): devices, their tolerances and sources.

The catalogue stores class A tolerances; class B is computed as twice class A (ASTM E287 §1.1.2,
ASTM E288 §1.1.2). Piston-operated devices (micropipettes, ISO 8655-2; piston burettes, ISO 8655-3) have
no class and carry a systematic and a random limit instead. A device the plan describes only by its
tolerance has no class either: nobody vouched for one.
"""

from __future__ import annotations

import functools
import math
import sys
from dataclasses import dataclass, replace
from importlib import resources
from typing import Any

import numpy as np

from ..inputs.errors import InputError

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover - Python 3.10 fallback
    import tomli as tomllib

KINDS = ("burette", "pipette", "graduated-pipette", "flask", "micropipette", "piston-burette")
"""Kind names, as the plan file spells them ("pipette" is one-mark, "flask" volumetric, "piston-burette"
a syringe or motor-driven piston burette)."""

CLASSES = ("A", "B")
"""Glassware classes; piston-operated devices have none."""

PISTON_KINDS = ("micropipette", "piston-burette")
"""Piston-operated devices (ISO 8655): no class; a systematic and a random limit instead."""

READING_KINDS = ("burette", "graduated-pipette", "piston-burette")
"""Devices whose delivery is the difference of two readings of a scale or a counter [common practice]."""

TITRANT_READING_KINDS = ("burette", "piston-burette")
"""Titrant dispensers read before the first addition and after each one, without refilling: the volume
added by point k is R_k − R_0, so reading errors do not accumulate along a titration [common practice].
Aliquot devices (micropipette, one-mark or graduated pipette filled for each aliquot) add independent
deliveries instead, whose errors do."""

CLASS_B_FACTOR = 2.0
"""Class B tolerance / class A tolerance [source: ASTM E287 §1.1.2, ASTM E288 §1.1.2]."""

SINGLE_VOLUME_KINDS = ("pipette", "flask")
"""Kinds that hold or deliver only their capacity."""

WATER_EXPANSION_PER_C = 2.1e-4
"""Volume expansion coefficient of water near 20 °C, 1/°C [source: EURACHEM/CITAC QUAM, example A1]."""

READING_FRACTION_OF_GRADUATION = 0.2
"""A meniscus is read to ±1/5 of the smallest subdivision [common practice]: ±0.02 mL on a 0.1 mL
scale, ±0.01 mL on a 0.05 mL scale, the ±0.01–0.02 mL commonly quoted for a burette reading."""

DEFAULT_READING_HALF_WIDTH_mL = 0.02
"""Reading half-width when an item has no recorded graduation [common practice]."""

MICROPIPETTE_MIN_FRACTION = 0.1
"""Lower end of a variable micropipette's usable range, fraction of nominal [from memory: ISO 8655-2]."""

REPEATABILITY_PER_U_CALIBRATION = 0.02 / (0.1 / math.sqrt(6.0))
"""Fill-to-mark repeatability (sd) per triangular calibration uncertainty, used when none is given.

Derived from EURACHEM/CITAC QUAM example A1 (100 mL flask, ±0.1 mL, repeatability 0.02 mL), i.e.
about 0.49: the one published pair we have for class A glassware [derived]."""

MIN_STEP_mL = 1e-6
"""Smallest grid step accepted (1 nL): below any real device; keeps 10-decimal rounding exact."""

GRID_DECIMALS = 10
GRID_ATOL_mL = 1e-10  # the resolution of the 10-decimal rounding
MAX_GRID_POINTS = 1_000_000


class GlasswareError(InputError):
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
        Smallest subdivision, mL, for kinds that have one (a piston device's display or setting step).
    random_mL : float or None
        Piston-operated devices: ISO 8655 maximum permissible random error (a standard deviation), mL.
    source : str
        Standard the tolerance comes from.
    from_memory : bool
        True when the tolerance is recalled rather than read from the cited table.
    note : str
        Anything else worth knowing (for example, a recalled graduation).
    repeatability_mL : float or None
        A measured standard deviation of one delivery (e.g. from a gravimetric check, ISO 8655-6),
        replacing the default random model; None when not measured.
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
    repeatability_mL: float | None = None

    @property
    def label(self) -> str:
        """Human name for prep sheets, e.g. ``"class A 50 mL burette"``; no class where none is known."""
        if self.kind == "micropipette":
            return f"{self.capacity_mL * 1000.0:g} µL micropipette"
        names = {
            "pipette": "one-mark pipette",
            "graduated-pipette": "graduated pipette",
            "flask": "volumetric flask",
            "piston-burette": "piston burette",
        }
        what = f"{self.capacity_mL:g} mL {names.get(self.kind, self.kind)}"
        return what if self.cls is None else f"class {self.cls} {what}"


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
        if kind in PISTON_KINDS:
            if cls is not None:
                raise GlasswareError(f"{where}: a {kind} has no class; remove 'class'")
            if e.get("random_mL") is None:
                raise GlasswareError(f"{where}: a {kind} needs random_mL (its ISO 8655 random limit)")
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
    seen: set[tuple[str, float]] = set()
    for it in items:
        ident = (it.kind, round(it.capacity_mL, 9))
        if ident in seen:
            raise GlasswareError(f"glassware catalogue lists the {it.label} twice; keep one entry")
        seen.add(ident)
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
        return ", ".join(f"{c * 1000.0:g}" for c in caps) + " µL"
    return ", ".join(f"{c:g}" for c in caps) + " mL"


def _checked_class(kind: str, cls: str | None, tolerance_mL: float | None) -> str | None:
    """The class a looked-up device carries (see :func:`lookup`)."""
    if kind not in KINDS:
        raise GlasswareError(f"unknown glassware kind {kind!r}; use one of: {', '.join(KINDS)}")
    if kind in PISTON_KINDS:
        if cls not in (None, "A"):
            raise GlasswareError(
                f"a {kind} has no class (got cls={cls!r}); omit the class, it carries ISO 8655 "
                "systematic and random limits instead"
            )
        return None
    if cls is None:
        return None if tolerance_mL is not None else "A"  # described by its tolerance alone: no class
    if cls not in CLASSES:
        raise GlasswareError(f"unknown glassware class {cls!r} for a {kind}; use 'A' or 'B'")
    return cls


def _check_figures(kind: str, capacity_mL, tolerance_mL, graduation_mL, random_mL, repeatability_mL) -> None:
    if not (
        isinstance(capacity_mL, (int, float, np.floating, np.integer))
        and math.isfinite(capacity_mL)
        and capacity_mL > 0
    ):
        raise GlasswareError(f"{kind} capacity must be a positive number of mL, got {capacity_mL!r}")
    for name, value in (
        ("tolerance_mL", tolerance_mL),
        ("graduation_mL", graduation_mL),
        ("random_mL", random_mL),
        ("repeatability_mL", repeatability_mL),
    ):
        if value is not None and not (math.isfinite(value) and value > 0):
            raise GlasswareError(f"{kind} {name} must be a positive number of mL, got {value!r}")
    if graduation_mL is not None and graduation_mL > capacity_mL * (1 + 1e-9):
        raise GlasswareError(
            f"{kind} graduation_mL {graduation_mL:g} is more than its {float(capacity_mL):g} mL "
            "capacity; give its smallest subdivision"
        )


def lookup(
    kind: str,
    capacity_mL: float,
    cls: str | None = "A",
    tolerance_mL: float | None = None,
    *,
    graduation_mL: float | None = None,
    random_mL: float | None = None,
    repeatability_mL: float | None = None,
) -> GlasswareItem:
    """Find a device in the catalogue, or describe one the user owns.

    Parameters
    ----------
    kind : str
        One of :data:`KINDS`.
    capacity_mL : float
        Capacity, mL (micropipettes: nominal volume in mL, e.g. 0.2 for a 200 µL pipette).
    cls : {"A", "B"} or None
        Glassware class; class B tolerance = 2 × class A (ASTM E287 §1.1.2, E288 §1.1.2). None means
        "not stated": the catalogue's class A, or no class at all when ``tolerance_mL`` describes the
        device. Piston-operated devices have no class: "A" or None is accepted, "B" refused.
    tolerance_mL : float, optional
        Override the tolerance (± mL; a piston device's systematic limit), e.g. from a calibration
        certificate. With it, a capacity missing from the catalogue becomes a user-supplied item.
    graduation_mL : float, optional
        The device's smallest subdivision (a piston device's display or setting step), mL.
    random_mL : float, optional
        For a user-supplied piston device: its random limit (a standard deviation), mL.
    repeatability_mL : float, optional
        A measured standard deviation of one delivery, mL (replaces the default random model).

    Returns
    -------
    GlasswareItem

    Raises
    ------
    GlasswareError
        Unknown kind or class, bad numbers, or a capacity the catalogue lacks (the message lists
        the capacities it has).
    """
    cls = _checked_class(kind, cls, tolerance_mL)
    _check_figures(kind, capacity_mL, tolerance_mL, graduation_mL, random_mL, repeatability_mL)
    base = next(
        (
            it
            for it in catalogue()
            if it.kind == kind and math.isclose(it.capacity_mL, capacity_mL, rel_tol=1e-9)
        ),
        None,
    )
    figures = (graduation_mL, random_mL, repeatability_mL)
    if base is None:
        return _user_device(kind, capacity_mL, cls, tolerance_mL, figures)
    return _adapted(base, cls, tolerance_mL, figures)


def _user_device(kind: str, capacity_mL: float, cls, tolerance_mL, figures) -> GlasswareItem:
    """A device the catalogue lacks, described by the user's tolerance (refused without one).
    ``figures`` = (graduation_mL, random_mL, repeatability_mL)."""
    graduation_mL, random_mL, repeatability_mL = figures
    if tolerance_mL is None:
        shown = f"{capacity_mL * 1000.0:g} µL" if kind == "micropipette" else f"{capacity_mL:g} mL"
        raise GlasswareError(
            f"no {kind} of {shown} in the glassware catalogue; it has {_describe_capacities(kind)}. "
            "Pick one of those, or give tolerance_mL for your own device"
        )
    # A user-supplied device: the user vouches for the tolerance (and the class, if they name one).
    return GlasswareItem(
        kind=kind,
        capacity_mL=float(capacity_mL),
        cls=cls,
        tolerance_mL=float(tolerance_mL),
        graduation_mL=graduation_mL,
        random_mL=random_mL,
        source="user-supplied tolerance",
        from_memory=False,
        repeatability_mL=repeatability_mL,
    )


def _adapted(item: GlasswareItem, cls, tolerance_mL, figures) -> GlasswareItem:
    """A catalogue device in class B (twice class A's tolerance) and with the user's own figures, if given.
    ``figures`` = (graduation_mL, random_mL, repeatability_mL)."""
    graduation_mL, random_mL, repeatability_mL = figures
    if cls == "B":
        item = replace(
            item,
            cls="B",
            tolerance_mL=CLASS_B_FACTOR * item.tolerance_mL,
            source=f"{item.source}; class B = 2 × class A (ASTM E287 §1.1.2, E288 §1.1.2)",
        )
    changes: dict[str, Any] = {}
    if tolerance_mL is not None:
        changes.update(
            cls=cls,
            tolerance_mL=float(tolerance_mL),
            from_memory=False,
            source=f"user-supplied tolerance (catalogue: {item.source})",
        )
    if graduation_mL is not None:
        changes["graduation_mL"] = float(graduation_mL)
    if random_mL is not None:
        changes["random_mL"] = float(random_mL)
    if repeatability_mL is not None:
        changes["repeatability_mL"] = float(repeatability_mL)
    return replace(item, **changes) if changes else item


def reading_resolution_mL(item: GlasswareItem) -> float | None:
    """How finely a volume is read on the device, mL, or None when it is not read (a one-mark pipette or
    flask fills to its mark) or its graduation is unknown.

    Glass scales (burette, graduated pipette) are read to ±1/5 of the smallest subdivision
    (:data:`READING_FRACTION_OF_GRADUATION`, common practice); a piston device to its display or
    setting step.
    """
    g = item.graduation_mL
    if g is None or item.kind in SINGLE_VOLUME_KINDS:
        return None
    return READING_FRACTION_OF_GRADUATION * g if item.kind in ("burette", "graduated-pipette") else g
