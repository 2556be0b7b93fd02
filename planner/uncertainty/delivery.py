"""Standard uncertainty of a delivered volume, and volume grids.


Tolerance → standard uncertainty follows EURACHEM/CITAC QUAM (3rd ed., 2012): a triangular
distribution for a glassware tolerance, ``a/√6``; a rectangular one when nothing else is known,
``a/√3`` (GUM, JCGM 100:2008, 4.3.7); a reading resolution ``δ`` gives ``δ/√12`` (GUM F.2.2.1).

Every delivery is split into a *random* part, independent from one delivery to the next, and a
*systematic* part, shared by every delivery made with the same device (its calibration error) in
the same session (the lab's offset from the 20 °C calibration temperature). The two behave
differently in a fit: replicates average the first, never the second.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .catalogue import (
    GRID_DECIMALS,
    KINDS,
    MAX_GRID_POINTS,
    MICROPIPETTE_MIN_FRACTION,
    PISTON_KINDS,
    READING_FRACTION_OF_GRADUATION,
    READING_KINDS,
    REPEATABILITY_PER_U_CALIBRATION,
    SINGLE_VOLUME_KINDS,
    WATER_EXPANSION_PER_C,
    DEFAULT_READING_HALF_WIDTH_mL,
    GlasswareError,
    GlasswareItem,
    GRID_ATOL_mL,
    MIN_STEP_mL,
)


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


def reading_u_mL(item: GlasswareItem) -> float:
    """Standard uncertainty of one reading of a device read on a scale or a counter, mL.

    A delivery is the difference of two readings [common practice], so one reading carries 1/√2 of a
    delivery's random error: a measured repeatability (sd of one delivery) or a piston burette's ISO
    8655-3 random limit gives ``s/√2``; a glass scale without a measurement is read to ±1/5 of its
    smallest subdivision (:data:`READING_FRACTION_OF_GRADUATION`), rectangular, ``(g/5)/√3`` (GUM
    JCGM 100:2008 4.3.7).
    """
    if item.repeatability_mL is not None:
        return item.repeatability_mL / math.sqrt(2.0)
    if item.kind == "piston-burette":
        if item.random_mL is None:
            raise GlasswareError(f"{item.label} has no random limit; give its measured repeatability")
        return item.random_mL / math.sqrt(2.0)
    half = (
        READING_FRACTION_OF_GRADUATION * item.graduation_mL
        if item.graduation_mL is not None
        else DEFAULT_READING_HALF_WIDTH_mL
    )
    return float(u_rectangular(half))


def _random_and_calibration(item: GlasswareItem, v: np.ndarray, repeatability_mL: float | None):
    """(random sd per delivery, calibration sd of each volume) before the temperature term."""
    rep = item.repeatability_mL if repeatability_mL is None else repeatability_mL
    if item.kind in READING_KINDS:
        random = math.sqrt(2.0) * reading_u_mL(item) if rep is None else rep
        # a piston device's limit is a maximum permissible error (rectangular), glass a tolerance
        u_cal = (
            u_rectangular(item.tolerance_mL) if item.kind in PISTON_KINDS else u_triangular(item.tolerance_mL)
        )
        return random, u_cal * v / item.capacity_mL
    if item.kind in SINGLE_VOLUME_KINDS:
        u_cal = float(u_triangular(item.tolerance_mL))
        return (REPEATABILITY_PER_U_CALIBRATION * u_cal if rep is None else rep), np.full_like(v, u_cal)
    if item.kind == "micropipette":
        r = item.random_mL if rep is None else rep
        if r is None:
            raise GlasswareError(
                f"{item.label} has no random limit; give its measured repeatability "
                "(or random_mL to lookup())"
            )
        return r, np.full_like(v, float(u_rectangular(item.tolerance_mL)))
    raise GlasswareError(  # pragma: no cover - lookup() guards kinds
        f"unknown glassware kind {item.kind!r}; use one of: {', '.join(KINDS)}"
    )


def delivery_uncertainty(
    item: GlasswareItem, volume_mL, *, delta_T_C: float = 0.0, repeatability_mL: float | None = None
) -> DeliveryUncertainty:
    """Random and systematic standard uncertainty of each delivered volume.

    Vectorised over ``volume_mL``; a volume of 0 means "not delivered" and carries no uncertainty.

    Model, per kind:

    - **burette**, **graduated-pipette**, **piston-burette**: a delivery is the difference of two
      readings [common practice], each with :func:`reading_u_mL`, so ``random = √2 · u_read`` (a
      measured repeatability is the sd of one delivery and is used as it is). The calibration limit
      ``a`` holds at capacity; it is scaled with the fraction of the scale used, ``systematic =
      u(a)·V/capacity`` with ``u(a) = a/√6`` for glass (triangular, QUAM A1–A3) and ``a/√3`` for a
      piston burette's maximum permissible error (rectangular, GUM 4.3.7); the proportional scaling is
      an assumption: the error of a partial delivery grows along the bore or the piston's stroke.
    - **pipette** (one-mark), **flask**: only the capacity (volume 0 = not used); ``systematic =
      a/√6`` (QUAM A1); random = fill-to-mark repeatability, by default
      :data:`REPEATABILITY_PER_U_CALIBRATION` × ``a/√6`` (the QUAM A1 ratio).
    - **micropipette**: ISO 8655-2:2002 limits; for a variable pipette the limits at nominal, in µL,
      apply to every selected volume [from memory: ISO 8655-2:2002], so both stay constant below
      nominal. Systematic limit rectangular, ``a/√3`` (a maximum permissible error with no known
      distribution, GUM 4.3.7); the random limit is already a standard deviation.

    A device's measured repeatability (``item.repeatability_mL``, or the argument) replaces the default
    random part. The temperature term ``V·α·ΔT/√3`` (QUAM A1) goes into the **systematic** part: the
    lab's offset from the 20 °C calibration temperature is the same for every delivery made in one
    session, so it does not average out over replicates [derived].

    Parameters
    ----------
    item : GlasswareItem
    volume_mL : array_like
        Delivered volumes, mL.
    delta_T_C : float
        Half-width of the band of lab temperatures around the calibration temperature, °C.
    repeatability_mL : float, optional
        Measured per-delivery standard deviation, mL; replaces the device's random model.

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
    random, calibration = _random_and_calibration(item, v, repeatability_mL)
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


def flask_volume_uncertainty(
    item: GlasswareItem, *, delta_T_C: float = 0.0, repeatability_mL: float = 0.0
) -> float:
    """Combined standard uncertainty of the volume of a filled volumetric flask, mL.

    ``u(V) = √((a/√6)² + s² + (V·α·ΔT/√3)²)``: calibration (triangular), fill repeatability ``s``
    and temperature (rectangular) [source: EURACHEM/CITAC QUAM, 3rd ed. 2012, example A1].
    """
    if item.kind != "flask":
        raise GlasswareError(
            f"flask_volume_uncertainty needs a volumetric flask, got a {item.kind}; "
            "use delivery_uncertainty for delivering devices"
        )
    parts = np.array(
        [
            float(u_triangular(item.tolerance_mL)),
            float(_nonnegative(repeatability_mL, "repeatability_mL")),
            float(u_temperature(item.capacity_mL, delta_T_C)),
        ]
    )
    return float(np.sqrt(np.sum(parts**2)))


# --------------------------------------------------------------------------------------------------
# volume checks and grids
# --------------------------------------------------------------------------------------------------
def _shown(values: np.ndarray, limit: int = 5) -> str:
    vals = [f"{float(x):g}" for x in np.ravel(values)[:limit]]
    more = " …" if np.size(values) > limit else ""
    return ", ".join(vals) + more


def smallest_delivery_mL(item: GlasswareItem) -> float:
    """Smallest volume the device is specified to deliver (10 % of nominal for a micropipette,
    ISO 8655-2 — from memory; 0 for glassware, whose limit is the plan's min_volume)."""
    return MICROPIPETTE_MIN_FRACTION * item.capacity_mL if item.kind == "micropipette" else 0.0


def check_volume(
    item: GlasswareItem, volume_mL, *, step_mL: float | None = None, min_volume_mL: float | None = None
) -> None:
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
            f"{label}: {_shown(v[over])} mL exceeds its {cap:g} mL capacity; "
            "split the delivery or choose a larger device"
        )
    used = v > 0
    if item.kind in SINGLE_VOLUME_KINDS:
        off = used & ~np.isclose(v, cap, rtol=1e-9, atol=0.0)
        if np.any(off):
            raise GlasswareError(
                f"{label} holds only its capacity, {cap:g} mL, but {_shown(v[off])} mL was asked; "
                "use a burette, graduated pipette or micropipette, or a one-mark pipette of that size"
            )
    if min_volume_mL is None and item.kind == "micropipette":
        min_volume_mL = MICROPIPETTE_MIN_FRACTION * cap
    if min_volume_mL is not None:
        low = used & (v < min_volume_mL * (1.0 - 1e-9))
        if np.any(low):
            raise GlasswareError(
                f"{label}: {_shown(v[low])} mL is below the smallest volume allowed, "
                f"{min_volume_mL:g} mL; use a smaller device or a more dilute stock"
            )
    if step_mL is not None:
        off = ~on_grid(v, step_mL)
        if np.any(off):
            raise GlasswareError(
                f"{label}: {_shown(v[off])} mL is not a multiple of the {step_mL:g} mL step "
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
    return gap <= np.maximum(rtol * np.maximum(np.abs(v), step), GRID_ATOL_mL)


def snap_to_grid(volume_mL, step_mL: float) -> np.ndarray:
    """Nearest multiple of ``step_mL`` (built as integer × step, rounded to 10 decimals against drift)."""
    step = _check_step(step_mL)
    v = np.asarray(volume_mL, dtype=float)
    return np.round(np.rint(v / step) * step, GRID_DECIMALS)


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
        raise GlasswareError(
            f"volume grid needs 0 ≤ min_mL ≤ max_mL, got min_mL={min_mL!r}, max_mL={max_mL!r}"
        )
    if (hi - lo) / step > MAX_GRID_POINTS:
        raise GlasswareError(
            f"volume grid {lo:g}–{hi:g} mL in steps of {step:g} mL has more than "
            f"{MAX_GRID_POINTS} points; use a coarser step"
        )
    k_lo = math.ceil(lo / step - 1e-9)
    k_hi = math.floor(hi / step + 1e-9)
    if k_hi < k_lo:
        raise GlasswareError(
            f"no multiple of {step:g} mL lies in [{lo:g}, {hi:g}] mL; widen the range or use a finer step"
        )
    grid = np.round(np.arange(k_lo, k_hi + 1, dtype=float) * step, GRID_DECIMALS)
    # The 1e-9 slack may put an end point a hair outside the bounds; clipping moves it < 1e-9·step.
    return np.clip(grid, lo, hi)
