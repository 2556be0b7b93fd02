"""Stock preparation: masses to weigh, dilution chains, and the stock's concentration uncertainty.

The concentration of a weighed stock is ``c = m·P / (M·V)`` (mass, purity as a mass fraction, molar mass,
flask volume); its relative standard uncertainty combines the relative uncertainties of the factors in
quadrature [source: EURACHEM/CITAC QUAM, 3rd ed. 2012, example A1]. A stock's error is shared by every tube
made from it (systematic); see :mod:`planner.uncertainty.delivery` for per-delivery errors.

When the mass to weigh falls below the balance's minimum weight (USP <41>: ``m ≥ 2000·s``), a
dilution chain is proposed: weigh a more concentrated stock, then take aliquots with one-mark
pipettes into volumetric flasks. Every step's pipette and flask add to the uncertainty.

The weighing itself is in :mod:`planner.uncertainty.weighing`, the chain search in
:mod:`planner.uncertainty.stock_chains`; their public names are importable from here too.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from .catalogue import GlasswareError, GlasswareItem, catalogue, lookup
from .delivery import u_rectangular
from .stock_chains import (
    CHAIN_U_SLACK,
    PIPETTE_DRAW_FRACTION,
    SCARCE_MASS_SLACK,
    DilutionStep,
    best_chain,
    single_volume_u_rel,
)
from .weighing import (
    USP41_FACTOR,
    USP41_READABILITY_FACTOR,
    StockError,
    conc_from_weighing_M,
    effective_repeatability_g,
    formula_weight_g_mol,
    mass_for_conc_g,
    minimum_weight_g,
)

__all__ = [
    "ACS_REAGENT_ASSAY_HALF_WIDTH",
    "CHAIN_U_SLACK",
    "PREFERENCES",
    "PURITY_HALF_WIDTH_FLOOR",
    "SCARCE_MASS_SLACK",
    "PIPETTE_DRAW_FRACTION",
    "USP41_FACTOR",
    "USP41_READABILITY_FACTOR",
    "DilutionStep",
    "StockError",
    "StockPreparation",
    "conc_from_weighing_M",
    "flask_for_volume",
    "formula_weight_g_mol",
    "mass_for_conc_g",
    "minimum_weight_g",
    "prepare_stock",
    "volume_needed_mL",
]

ACS_REAGENT_ASSAY_HALF_WIDTH = 0.02
"""Reagent-grade salts assay 98–102 % [source: ACS Reagent Chemicals]: ±0.02 as a mass fraction."""

PURITY_HALF_WIDTH_FLOOR = 1e-4
"""Smallest purity half-width used by default (0.01 %, the QUAM A1 certificate's ±0.0001)."""

MAX_PURITY = 1.05
"""Upper bound accepted for an assay (hydrates can assay above 100 %, e.g. ACS 98–102 %)."""

PREFERENCES = ("precision", "reagent")
"""What a dilution chain is chosen for: the best precision, or the least reagent (a scarce one)."""


# --------------------------------------------------------------------------------------------------
# results
# --------------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class StockPreparation:
    """How to make a stock, and how well its concentration is known.

    Attributes
    ----------
    conc_M : float
        Final concentration, mol/L.
    flask : GlasswareItem
        Volumetric flask holding the final stock.
    formula : str
        Formula as given.
    formula_weight_g_mol : float
        Molar mass, g/mol.
    mass_g : float
        Mass to weigh, g, corrected for purity (into ``weighed_flask``).
    u_conc_M : float
        Combined standard uncertainty of ``conc_M``, mol/L.
    u_parts : dict
        Relative standard uncertainties (u/value) of each factor: "balance", "purity", "flask" (the
        flask the solid is dissolved in) and, for a chain, "dilution_1", "dilution_2", ...;
        ``u_conc_M / conc_M = √Σ parts²``.
    min_weight_g : float
        USP <41> minimum weight of the balance, g.
    steps : tuple of DilutionStep
        () for direct weighing; otherwise the chain from the weighed stock to the final one.
    weighed_flask : GlasswareItem
        Flask the solid is dissolved in (``flask`` itself for direct weighing).
    weighed_conc_M : float
        Concentration of the weighed stock, mol/L.
    purity, purity_half_width : float
        Assay (mass fraction) and the half-width of its rectangular distribution.
    u_mass_g : float
        Standard uncertainty of the weighed mass, g.
    direct_mass_g : float
        The mass a direct weighing into ``flask`` would need, g (equal to ``mass_g`` without a chain).
    """

    conc_M: float
    flask: GlasswareItem
    formula: str
    formula_weight_g_mol: float
    mass_g: float
    u_conc_M: float
    u_parts: dict = field(hash=False)
    min_weight_g: float
    steps: tuple
    weighed_flask: GlasswareItem
    weighed_conc_M: float
    purity: float
    purity_half_width: float
    u_mass_g: float
    direct_mass_g: float = float("nan")

    @property
    def u_rel(self) -> float:
        """Relative standard uncertainty of the final concentration."""
        return self.u_conc_M / self.conc_M

    def __repr__(self) -> str:
        chain = " → ".join(f"{s.pipette.capacity_mL:g}→{s.flask.capacity_mL:g} mL" for s in self.steps)
        how = f"; dilute {chain}" if chain else ""
        return (
            f"StockPreparation({self.conc_M:.6g} M {self.formula} in {self.flask.label}: weigh "
            f"{self.mass_g:.4f} g into {self.weighed_flask.capacity_mL:g} mL{how}; "
            f"u = {self.u_conc_M:.3g} M ({100 * self.u_rel:.3g} %))"
        )


# --------------------------------------------------------------------------------------------------
# preparation
# --------------------------------------------------------------------------------------------------
def _as_flask(flask) -> GlasswareItem:
    if isinstance(flask, GlasswareItem):
        if flask.kind != "flask":
            raise StockError(f"a stock is made up in a volumetric flask, got a {flask.kind} ({flask.label})")
        return flask
    try:
        return lookup("flask", float(flask))
    except (GlasswareError, TypeError, ValueError) as exc:
        raise StockError(f"cannot use {flask!r} as the stock's flask: {exc}") from None


def _chain_items(kind: str, cls: str, capacities: Sequence[float] | None) -> list[GlasswareItem]:
    if capacities is None:
        caps = [it.capacity_mL for it in catalogue() if it.kind == kind]
    else:
        caps = sorted(float(c) for c in capacities)
    try:
        return [lookup(kind, c, cls) for c in caps]
    except GlasswareError as exc:
        raise StockError(f"dilution-chain glassware: {exc}") from None


def _purity_half_width(purity: float, purity_half_width: float | None) -> float:
    """Default half-width: ACS 98–102 % when the assay is not stated (purity 1.0), otherwise
    |1 − purity| (the certificate's distance from 100 %), at least 1e-4."""
    if purity_half_width is not None:
        hw = float(purity_half_width)
        if not (math.isfinite(hw) and 0 <= hw < purity):
            raise StockError(f"purity_half_width must be ≥ 0 and below the purity, got {purity_half_width!r}")
        return hw
    if purity == 1.0:
        return ACS_REAGENT_ASSAY_HALF_WIDTH
    return max(abs(1.0 - purity), PURITY_HALF_WIDTH_FLOOR)


def prepare_stock(
    conc_M: float,
    flask,
    formula: str,
    *,
    purity: float = 1.0,
    purity_half_width: float | None = None,
    balance_readability_g: float = 1e-4,
    balance_repeatability_g: float = 1e-4,
    delta_T_C: float = 0.0,
    max_chain: int = 3,
    u_mass_g: float | None = None,
    flask_repeatability_mL: float | None = None,
    flasks_mL: Sequence[float] | None = None,
    pipettes_mL: Sequence[float] | None = None,
    prefer: str = "precision",
) -> StockPreparation:
    """Plan the weighing (and, if needed, the dilutions) for a stock of ``conc_M`` in ``flask``.

    Uncertainty model [source: EURACHEM/CITAC QUAM, 3rd ed. 2012, example A1]:
    ``(u_c/c)² = (u_m/m)² + (u_P/P)² + (u_V/V)² + Σ_steps [(u_v/v)² + (u_V/V)²]``.

    - mass: ``u_m = max(s, 0.41·d)`` (USP <41> repeatability, floored by the readability of a net
      weighing); give ``u_mass_g`` to use a calibration-certificate value instead (QUAM A1 does).
    - purity: rectangular, ``u_P = h/√3`` (GUM 4.3.7). Default ``h``: when ``purity`` is left at 1.0
      the assay is taken as not stated, ACS reagent grade 98–102 % (``h = 0.02``); otherwise
      ``h = max(|1 − purity|, 1e-4)``, reading a certificate value such as 0.9999 as 0.9999 ± 0.0001.
    - weighed flask: :func:`planner.uncertainty.delivery.flask_volume_uncertainty` with ``delta_T_C`` and
      ``flask_repeatability_mL`` (default: the QUAM A1 repeatability ratio).
    - dilution steps: each one-mark pipette and flask, calibration + repeatability. No temperature
      term: aliquot and flask are filled at the same temperature, so the liquid's expansion cancels
      in their ratio [derived]; it is counted once, at the weighed flask.
    - the molar mass's uncertainty (standard atomic weights, ≲ 1e-5 relative) is neglected.

    Dilution chain: proposed only when the direct mass is below the USP <41> minimum weight. With
    ``prefer="precision"``: fewest steps first; among chains of that length whose weighed mass reaches
    the minimum weight, those whose ``u_c/c`` is within :data:`CHAIN_U_SLACK` (1 %) of the best, and of
    these the one that weighs the least reagent (ties: smaller ``u_c/c``). With ``prefer="reagent"``
    (a scarce reagent): chains of every length up to ``max_chain``; those weighing at most
    :data:`SCARCE_MASS_SLACK` more than the least mass that still reaches the minimum weight, and of
    these the most precise (ties: fewer steps). Each aliquot is at most half of the solution it is
    drawn from (room to rinse the pipette) and is diluted at least twofold.

    Parameters
    ----------
    conc_M : float
        Final concentration, mol/L.
    flask : GlasswareItem or float
        Final volumetric flask (a number is a class A catalogue capacity in mL).
    formula : str
        Reagent formula as weighed, hydrate water included (e.g. ``"CuSO4·5H2O"``).
    purity : float
        Assay as a mass fraction (0 < purity ≤ 1.05).
    purity_half_width : float, optional
        Half-width of the purity's rectangular distribution; default as above.
    balance_readability_g, balance_repeatability_g : float
        Scale interval d and repeatability sd s of the balance, g.
    delta_T_C : float
        Half-width of the lab temperature band around 20 °C, °C.
    max_chain : int
        Most dilution steps allowed (0: never dilute).
    u_mass_g : float, optional
        Standard uncertainty of the weighed mass, g, replacing the balance model.
    flask_repeatability_mL : float, optional
        Fill-to-mark sd of the flask the solid is dissolved in, mL.
    flasks_mL, pipettes_mL : sequence of float, optional
        Capacities available for a chain (default: every catalogue flask / one-mark pipette), of the
        same class as ``flask``.
    prefer : {"precision", "reagent"}
        What a dilution chain is chosen for (see above): the fewest steps and the best ``u_c/c``, or the
        least reagent weighed.

    Returns
    -------
    StockPreparation

    Raises
    ------
    StockError
        Bad inputs, an unreadable formula, or no chain within ``max_chain`` steps that reaches the
        minimum weight.
    """
    final = _as_flask(flask)
    conc, p = _checked_request(conc_M, purity, max_chain, prefer)
    hw = _purity_half_width(p, purity_half_width)
    fw = formula_weight_g_mol(formula)
    s_eff = effective_repeatability_g(balance_repeatability_g, balance_readability_g)
    min_wt = minimum_weight_g(balance_repeatability_g, readability_g=balance_readability_g)
    u_m = _mass_u_g(u_mass_g, s_eff)
    u_purity_rel = float(u_rectangular(hw)) / p

    try:
        weighed_u_rel_final = single_volume_u_rel(final, flask_repeatability_mL, delta_T_C)
    except GlasswareError as exc:
        raise StockError(str(exc)) from None

    mass_direct = mass_for_conc_g(conc, final.capacity_mL, fw, p)
    common: dict[str, Any] = dict(
        conc_M=conc,
        flask=final,
        formula=formula,
        formula_weight_g_mol=fw,
        min_weight_g=min_wt,
        purity=p,
        purity_half_width=hw,
        u_mass_g=u_m,
        direct_mass_g=mass_direct,
    )
    if mass_direct >= min_wt:
        direct = _weighed_directly(mass_direct, conc, final, u_m, u_purity_rel, weighed_u_rel_final)
        return StockPreparation(**direct, **common)

    cls = final.cls or "A"
    flasks = _chain_items("flask", cls, flasks_mL)
    pipettes = _chain_items("pipette", cls, pipettes_mL)
    chain = best_chain(
        conc,
        final,
        fw,
        p,
        u_m,
        min_wt,
        u_purity_rel,
        delta_T_C,
        flask_repeatability_mL,
        flasks,
        pipettes,
        max_chain,
        prefer,
    )
    if chain is None:
        raise StockError(
            f"{mass_direct * 1e3:.3g} mg of {formula} for {conc:g} M in {final.label} is below the balance's "
            f"minimum weight ({min_wt * 1e3:.3g} mg, USP <41>), and no dilution chain of at most {max_chain} "
            "steps reaches it; raise max_chain, use a larger flask or a balance with better repeatability"
        )
    return StockPreparation(**chain, **common)


def _weighed_directly(mass_g, conc, final, u_m, u_purity_rel, flask_u_rel) -> dict[str, Any]:
    """The preparation's fields when the reagent is weighed straight into the final flask."""
    parts = {"balance": u_m / mass_g, "purity": u_purity_rel, "flask": flask_u_rel}
    u_rel = math.sqrt(sum(v * v for v in parts.values()))
    return dict(
        mass_g=mass_g,
        u_conc_M=u_rel * conc,
        u_parts=parts,
        steps=(),
        weighed_flask=final,
        weighed_conc_M=conc,
    )


def _checked_request(conc_M, purity, max_chain, prefer) -> tuple[float, float]:
    """The stock's concentration and purity as floats, after refusing what cannot be prepared."""
    conc = float(conc_M)
    if not (math.isfinite(conc) and conc > 0):
        raise StockError(f"stock concentration must be a positive number of mol/L, got {conc_M!r}")
    p = float(purity)
    if not (math.isfinite(p) and 0 < p <= MAX_PURITY):
        raise StockError(
            f"purity is a mass fraction in (0, {MAX_PURITY}], got {purity!r} (write 99.5 % as 0.995)"
        )
    if not (isinstance(max_chain, (int, np.integer)) and max_chain >= 0):
        raise StockError(f"max_chain must be a whole number ≥ 0, got {max_chain!r}")
    if prefer not in PREFERENCES:
        raise StockError(f"prefer must be one of {', '.join(PREFERENCES)}, got {prefer!r}")
    return conc, p


def _mass_u_g(u_mass_g: float | None, s_eff: float) -> float:
    """The weighed mass's standard uncertainty: a certificate's ``u_mass_g`` if given, else the balance's."""
    if u_mass_g is None:
        return s_eff
    if not (math.isfinite(u_mass_g) and u_mass_g >= 0):
        raise StockError(f"u_mass_g must be ≥ 0 g, got {u_mass_g!r}")
    return float(u_mass_g)


# --------------------------------------------------------------------------------------------------
# how much to make
# --------------------------------------------------------------------------------------------------
def volume_needed_mL(
    recipe_total_mL,
    n_deliveries,
    *,
    rinse_mL: float = 2.0,
    dead_volume_mL: float = 1.0,
    per_delivery_mL: float = 0.0,
):
    """Volume of a stock to have on hand for a recipe, mL.

    ``need = recipe total + rinse + dead volume + n_deliveries · per_delivery``:

    - ``rinse_mL``: the delivering device is rinsed with the stock before use (two or three small
      portions for a pipette or burette) [common practice];
    - ``dead_volume_mL``: what the device or its reservoir keeps and cannot deliver (a burette's tip
      below the last mark, the film left in a beaker) [common practice];
    - ``per_delivery_mL``: losses repeated at every delivery, such as a micropipette's pre-wetting
      aspiration [common practice].

    Vectorised over ``recipe_total_mL`` and ``n_deliveries`` (e.g. one entry per stock).
    """
    total = np.asarray(recipe_total_mL, dtype=float)
    n = np.asarray(n_deliveries)
    for name, value in (
        ("recipe_total_mL", total),
        ("rinse_mL", rinse_mL),
        ("dead_volume_mL", dead_volume_mL),
        ("per_delivery_mL", per_delivery_mL),
    ):
        arr = np.asarray(value, dtype=float)
        if not np.all(np.isfinite(arr)) or np.any(arr < 0):
            raise StockError(f"{name} must be finite and ≥ 0 mL, got {value!r}")
    if not np.all(np.isfinite(n.astype(float))) or np.any(n < 0) or np.any(n != np.round(n)):
        raise StockError(f"n_deliveries must be whole numbers ≥ 0, got {n_deliveries!r}")
    return total + rinse_mL + dead_volume_mL + n * per_delivery_mL


def flask_for_volume(volume_mL: float, cls: str = "A") -> GlasswareItem:
    """Smallest catalogue volumetric flask holding at least ``volume_mL``.

    Raises
    ------
    StockError
        If even the largest flask is too small (the message says how many fills are needed).
    """
    need = float(volume_mL)
    if not (math.isfinite(need) and need > 0):
        raise StockError(f"volume needed must be a positive number of mL, got {volume_mL!r}")
    caps = [it.capacity_mL for it in catalogue() if it.kind == "flask"]
    for cap in caps:
        if cap >= need:
            return lookup("flask", cap, cls)
    fills = math.ceil(need / caps[-1])
    raise StockError(
        f"{need:g} mL is more than the largest flask in the catalogue ({caps[-1]:g} mL); "
        f"prepare {fills} batches or use a larger vessel"
    )
