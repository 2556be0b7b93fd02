"""Stocks for a plan: how to make each one, how much a recipe needs, and whether there is enough.

Plan-level glue over :mod:`planner.uncertainty.stocks` (weighing, dilution chains, uncertainty) and
:mod:`planner.uncertainty.catalogue`.
"""

from __future__ import annotations

import math
import re
from collections.abc import Collection
from dataclasses import dataclass, replace

import numpy as np

from ...inputs.names import unknown_name
from ...inputs.plan import Plan, PlanError, ion_charge
from ...inputs.recipe import Recipe
from ...uncertainty import catalogue
from ...uncertainty import stocks as stk
from ...uncertainty.catalogue import GlasswareError
from .mass_basis import FlaskChoice, MassBasis, choose_flask, mass_basis

# --------------------------------------------------------------------------------------------------
# every solute of a stock: the M/L salt, the other ions paired into common salts, the charge balance
# --------------------------------------------------------------------------------------------------
SOLVENT = "deionised water"
"""What every stock is dissolved in and made up with (the plan has no solvent key; aqueous work)."""

# Ions of the small salt table: core (as written in plans, lower case) -> (formula group, charge, name).
# Formula weights come from molmass, never from this table.
_CATIONS = {
    "h": ("H", 1, "hydrogen"),
    "li": ("Li", 1, "lithium"),
    "na": ("Na", 1, "sodium"),
    "k": ("K", 1, "potassium"),
    "nh4": ("NH4", 1, "ammonium"),
    "mg": ("Mg", 2, "magnesium"),
    "ca": ("Ca", 2, "calcium"),
}
_ANIONS = {
    "cl": ("Cl", -1, "chloride"),
    "br": ("Br", -1, "bromide"),
    "no3": ("NO3", -1, "nitrate"),
    "clo4": ("ClO4", -1, "perchlorate"),
    "so4": ("SO4", -2, "sulfate"),
    "oh": ("OH", -1, "hydroxide"),
    "oac": ("CH3COO", -1, "acetate"),
    "clac": ("ClCH2COO", -1, "chloroacetate"),
    "hepes": ("C8H17N2O4S", -1, "HEPES"),
}
_SPELLINGS = {"ac": "oac", "ch3coo": "oac", "clch2coo": "clac"}
"""Other ways plans write an anion of the table -> the table's core."""
_ANIONS |= {spelling: _ANIONS[core] for spelling, core in _SPELLINGS.items()}
_AS_SOLD = {("Na", "ClO4"): "NaClO4.H2O"}
"""Salts usually sold as a hydrate, weighed as such [common practice: sodium perchlorate monohydrate]."""
_SOLUTIONS = {"H", "OH"}
"""Acids and bases are added from a standardised solution, not weighed [common practice]."""


@dataclass(frozen=True)
class Solute:
    """One thing dissolved in a stock.

    Attributes
    ----------
    role : "component" (the salt supplying M or L), "salt" (weighed), "solution" (an acid or base
        added from a standardised solution) or "unpaired" (ions no salt in the table pairs).
    formula, name : what it is ("KNO3", "potassium nitrate"); the plan's formula for a component.
    conc_M : its concentration in the stock, mol/L (of the salt or acid).
    ions : the ions of the plan it supplies (plan spelling).
    formula_weight_g_mol, mass_g : from molmass and the stock's flask (None when not weighed).
    """

    role: str
    formula: str
    name: str
    conc_M: float
    ions: tuple[str, ...]
    formula_weight_g_mol: float | None = None
    mass_g: float | None = None


@dataclass(frozen=True)
class ChargeGap:
    """The listed ions (and the M/L salt) of a stock do not balance in charge.

    Attributes
    ----------
    ion : the counter-ion that is missing ("NO3-" when the salt's formula names it, else "an anion" /
        "a cation"); conc_M its concentration, as a monovalent ion when unknown.
    ionic_strength_low : fraction by which the stock's ionic strength is understated, 1 − I_listed/I.
    """

    ion: str
    conc_M: float
    ionic_strength_low: float


def ion_core(name: str, charge: int) -> str:
    """The ion without its charge, lower case: 'Cu2+' → 'cu', 'SO4 2-' → 'so4', '[SO4]2-' → 'so4'."""
    s = name.strip()
    s = re.sub(r"[+-]\d+$", "", s) if re.search(r"[A-Za-z\])\d][+-]\d+$", s) else re.sub(r"[+-]+$", "", s)
    if abs(charge) > 1:
        s = re.sub(rf"\s*{abs(charge)}$", "", s.rstrip())
    return s.strip().strip("[]").strip().lower()


def _salt(cat: str, an: str) -> tuple[str, str, int, int]:
    """(formula, name, cations per unit, anions per unit) of the neutral salt of two table ions."""
    cf, zc, cn = _CATIONS[cat]
    af, za, anm = _ANIONS[an]
    g = math.gcd(zc, -za)
    nc, na = -za // g, zc // g
    part = lambda f, n: f if n == 1 else (f"{f}{n}" if f.isalpha() and len(f) <= 2 else f"({f}){n}")  # noqa: E731
    # carboxylates and other organic anions are written anion first, as on their bottles (CH3COONa)
    organic = "C" in re.sub(r"Cl", "", af)
    formula = _AS_SOLD.get((cf, af), part(af, na) + part(cf, nc) if organic else part(cf, nc) + part(af, na))
    name = f"{'HEPES sodium salt' if af.startswith('C8') and cf == 'Na' else f'{cn} {anm}'}"
    if cf == "H":
        name = {
            "Cl": "hydrochloric acid",
            "NO3": "nitric acid",
            "ClO4": "perchloric acid",
            "SO4": "sulfuric acid",
            "CH3COO": "acetic acid",
        }.get(af, f"the acid of {anm}")
    elif af == "OH":
        name = f"{cn} hydroxide"
    return formula, name, nc, na


def stock_solutes(
    components: dict[str, tuple[float, int, str]],
    ions: dict[str, tuple[float, int]],
    formula: str | None,
    flask_mL: float | None,
) -> tuple[tuple[Solute, ...], ChargeGap | None]:
    """Every solute a stock's concentrations imply, with masses for ``flask_mL``, and its charge gap.

    Parameters
    ----------
    components : "M"/"L" -> (concentration mol/L, charge, label) for what the stock holds.
    ions : the stock's other ions, plan name -> (concentration mol/L, charge).
    formula : the plan's formula: of the M/L salt when the stock holds M or L, else of its one salt.
    flask_mL : the flask the stock is made up in (None: no masses).

    The M/L salt's counter-ion is taken from the listed ions of the opposite sign: the one its formula
    names, else one whose charge matches exactly, else the largest. The remaining ions are paired into
    neutral salts from a small table (K+ with NO3- → KNO3), largest amounts first; what is left of one
    sign is a charge gap, named after the ion the formula implies when it names one.
    """
    eq = {n: c * abs(z) for n, (c, z) in ions.items()}  # charge equivalents still unassigned, mol/L
    # amounts below this are rounding residues of the subtractions, not ions
    tol = 1e-9 * max([*eq.values(), *(c * abs(z) for c, z, _ in components.values()), 1e-12])
    out: list[Solute] = []
    for _comp, (c, z, label) in components.items():  # at most M and L
        need, taken = c * abs(z), []
        opp = [n for n, (_, zz) in ions.items() if zz * z < 0]
        named = [n for n in opp if formula and _names(formula, ion_core(n, ions[n][1]))]
        exact = [n for n in opp if math.isclose(eq[n], need, rel_tol=1e-3)]
        for n in named + exact + sorted(opp, key=lambda n: -eq[n]):
            if need <= tol or eq[n] <= tol or n in taken:
                continue
            use = min(need, eq[n])
            eq[n] -= use
            need -= use
            taken.append(n)
        out.append(Solute("component", formula or "", f"{label} salt" if z else label, c, (label, *taken)))
        if need > tol:
            eq[("-" if z > 0 else "+") + "gap"] = need
    cations = [n for n, (_, z) in ions.items() if z > 0]
    anions = [n for n, (_, z) in ions.items() if z < 0]
    for cat in sorted(cations, key=lambda n: -eq[n]):  # a handful of ions
        for an in sorted(anions, key=lambda n: -eq[n]):
            kc, ka = ion_core(cat, ions[cat][1]), ion_core(an, ions[an][1])
            if eq[cat] <= tol or eq[an] <= tol or kc not in _CATIONS or ka not in _ANIONS:
                continue
            f, name, nc, na = _salt(kc, ka)
            units = min(eq[cat], eq[an]) / (nc * _CATIONS[kc][1])  # mol/L of the salt
            eq[cat] -= units * nc * _CATIONS[kc][1]
            eq[an] -= units * na * -_ANIONS[ka][1]
            role = "solution" if {_CATIONS[kc][0], _ANIONS[ka][0]} & _SOLUTIONS else "salt"
            out.append(Solute(role, f, name, units, (cat, an)))
    left = {n: v for n, v in eq.items() if v > tol and not n.endswith("gap")}
    if len({ions[n][1] > 0 for n in left}) == 2:  # both signs left: no salt in the table pairs them
        # (one sign alone lacks its counter-ion: that is the charge gap, reported once)
        out.append(Solute("unpaired", "", "no common salt in the table", 0.0, tuple(left)))
    if not components and formula and sum(s.role == "salt" for s in out) == 1:
        k = next(i for i, s in enumerate(out) if s.role == "salt")  # the plan names the salt it weighs
        out[k] = replace(out[k], formula=formula)
    if flask_mL:
        out = [_with_mass(s, flask_mL) for s in out]
    return tuple(out), _charge_gap(components, ions, {n: v for n, v in eq.items() if v > tol}, formula)


def _names(formula: str, core: str) -> bool:
    """True when ``formula`` contains the ion ``core`` (case-sensitive on the table's spelling)."""
    group = (_ANIONS.get(core) or _CATIONS.get(core) or (core,))[0]
    return re.search(rf"{re.escape(group)}(?![a-z])", formula) is not None


def _with_mass(s: Solute, flask_mL: float) -> Solute:
    if s.role != "salt":
        return s
    fw = stk.formula_weight_g_mol(s.formula)
    return replace(s, formula_weight_g_mol=fw, mass_g=stk.mass_for_conc_g(s.conc_M, flask_mL, fw))


def _charge_gap(components, ions, eq, formula) -> ChargeGap | None:
    gaps = {k: v for k, v in eq.items() if k.endswith("gap")}
    spare = {
        +1: sum(v for n, v in eq.items() if not n.endswith("gap") and ions[n][1] > 0),
        -1: sum(v for n, v in eq.items() if not n.endswith("gap") and ions[n][1] < 0),
    }
    # missing charge: a component left without counter-ion, or listed ions of one sign left over
    sign, amount = None, 0.0
    if gaps:
        key, amount = next(iter(gaps.items()))
        sign = -1 if key.startswith("-") else +1
    elif spare[+1] != spare[-1]:  # residues were dropped by the caller
        sign = -1 if spare[+1] > spare[-1] else +1
        amount = abs(spare[+1] - spare[-1])
    if sign is None:
        return None
    table = _ANIONS if sign < 0 else _CATIONS
    z = 1
    ion = "an anion" if sign < 0 else "a cation"
    for _core, (group, zz, _) in sorted(table.items(), key=lambda kv: -len(kv[1][0])):
        if formula and zz * sign > 0 and re.search(rf"{re.escape(group)}(?![a-z])", formula):
            z = abs(zz)
            ion = f"{group}{'' if z == 1 else f' {z}'}{'-' if sign < 0 else '+'}"
            break
    c = amount / z
    I_listed = 0.5 * (
        sum(c_ * z_ * z_ for c_, z_ in ions.values()) + sum(c_ * z_ * z_ for c_, z_, _ in components.values())
    )
    I_full = I_listed + 0.5 * c * z * z
    return ChargeGap(ion, c, 1.0 - I_listed / I_full if I_full > 0 else 0.0)


@dataclass(frozen=True)
class StockNeed:
    """One stock's preparation and consumption.

    Attributes
    ----------
    id, label : the stock.
    component : "M" or "L" (the component its formula supplies), or None.
    preparation : StockPreparation, or None when the plan gives no formula (or it needs no weighing).
    problem : why no preparation could be computed (None if fine or not asked).
    recipe_mL : total volume the recipe uses (None without a recipe).
    deliveries : number of tubes that receive it.
    needed_mL : recipe total plus rinse and dead-volume allowance.
    on_hand_mL : what the plan says is available (None if unstated).
    plan_rsd : the conc_rsd the plan assumes.
    solutes : every solute the stock's conc and ions imply (:func:`stock_solutes`), masses for ``flask_mL``.
    solvent : what it is dissolved in and made up with.
    flask_mL : the volumetric flask it is made up in (the preparation's, the plan's, or the smallest
        that holds what is needed, at least 50 mL unless the stock is scarce); None when none fits.
    charge_gap : the counter-ion its listed ions lack, or None when they balance.
    mass_basis : what sets the mass weighed (:class:`~planner.jobs.stocks.mass_basis.MassBasis`), or
        None when nothing is weighed for the stock's metal or ligand.
    scarce : the stock was planned as scarce (the least reagent, the smallest flask).
    """

    id: str
    label: str
    component: str | None
    preparation: stk.StockPreparation | None
    problem: str | None
    recipe_mL: float | None
    deliveries: int
    needed_mL: float | None
    on_hand_mL: float | None
    plan_rsd: float
    solutes: tuple = ()
    solvent: str = ""
    flask_mL: float | None = None
    charge_gap: ChargeGap | None = None
    mass_basis: MassBasis | None = None
    scarce: bool = False

    @property
    def enough(self) -> bool | None:
        if self.needed_mL is None or self.on_hand_mL is None:
            return None
        return self.on_hand_mL >= self.needed_mL

    @property
    def flask_label(self) -> str | None:
        """The flask as the bench names it ("100 mL volumetric flask, class A")."""
        return _flask_label(self.flask_mL)


def _flask_label(flask_mL: float | None) -> str | None:
    if flask_mL is None:
        return None
    try:
        return catalogue.lookup("flask", flask_mL).label
    except GlasswareError:  # a plan's own flask size, not in the catalogue
        return f"{flask_mL:g} mL volumetric flask"


def stock_needs(
    plan: Plan, recipe: Recipe | None = None, *, scarce: Collection[str] = ()
) -> tuple[StockNeed, ...]:
    """Preparation and consumption of every stock in the plan.

    Parameters
    ----------
    recipe : the tubes, for the volumes needed (and, for a scarce stock, the flask that holds them).
    scarce : ids of stocks to plan as scarce, besides those the plan marks ``scarce = true``: the smallest
        flask that holds what the recipe needs, and a dilution chain chosen for the least reagent.

    Raises
    ------
    PlanError
        ``scarce`` names a stock the plan does not have.
    """
    ids = [s.id for s in plan.stock]
    for sid in scarce:
        if sid not in ids:
            raise PlanError("scarce", unknown_name("stock id", sid, ids))
    out = []
    for k, s in enumerate(plan.stock):
        used, n_del, need = _consumption(plan, recipe, k)
        out.append(_stock_need(plan, s, used, n_del, need, s.scarce or s.id in scarce))
    return tuple(out)


def _consumption(plan: Plan, recipe: Recipe | None, k: int) -> tuple[float | None, int, float | None]:
    """(volume in the tubes, tubes that take it, volume needed with rinse and dead volume) of stock k."""
    if recipe is None:
        return None, 0, None
    g = plan.glassware
    v = recipe.volumes_mL[:, k]
    used = float(v.sum())
    n_del = int(np.count_nonzero(v > 0))
    need = float(
        stk.volume_needed_mL(
            used,
            n_del,
            rinse_mL=g.rinse_mL if n_del else 0.0,
            dead_volume_mL=g.dead_volume_mL if n_del else 0.0,
        )
    )
    return used, n_del, need


def catalogue_flasks_mL() -> list[float]:
    """Capacities of the catalogue's volumetric flasks, ascending."""
    return [it.capacity_mL for it in catalogue.catalogue() if it.kind == "flask"]


def prepare_plan_stock(
    plan: Plan, s, flask_mL: float, comp: str, *, scarce: bool = False
) -> stk.StockPreparation:
    """:func:`planner.uncertainty.stocks.prepare_stock` for the plan's stock ``s`` (its component ``comp``)
    in ``flask_mL``, with the plan's balance and temperature; ``scarce`` chooses a chain for the least
    reagent. (The class stock list can make its stocks the same way.)"""
    g = plan.glassware
    return stk.prepare_stock(
        s.conc[comp],
        flask_mL,
        s.formula,
        purity=s.purity or 1.0,
        balance_readability_g=g.balance.readability_g,
        balance_repeatability_g=g.balance.repeatability_g,
        delta_T_C=g.delta_T_C,
        prefer="reagent" if scarce else "precision",
    )


def _least_reagent(plan: Plan, s, comp: str, need: float | None, upto_mL: float):
    """(preparation, flask choice) of the scarce plan: over the catalogue flasks from the smallest that
    holds what is needed up to ``upto_mL``, the one weighing the least reagent (within the slack of
    :data:`planner.uncertainty.stocks.SCARCE_MASS_SLACK`: fewer dilution steps, then the better u)."""
    first = choose_flask(s.flask_mL, need, s.on_hand, scarce=True)
    if first.reason == "plan":
        return prepare_plan_stock(plan, s, first.flask_mL, comp, scarce=True), first
    sizes = [c for c in catalogue_flasks_mL() if first.flask_mL <= c <= max(upto_mL, first.flask_mL)]
    preps = [(prepare_plan_stock(plan, s, c, comp, scarce=True), c) for c in sizes]  # a handful of flasks
    least = min(p.mass_g for p, _ in preps)
    near = [(p, c) for p, c in preps if p.mass_g <= (1 + stk.SCARCE_MASS_SLACK) * least]
    prep, cap = min(near, key=lambda pc: (len(pc[0].steps), pc[0].u_rel))
    return prep, FlaskChoice(cap, first.reason if cap == first.flask_mL else "least-reagent")


def _weighing(plan: Plan, s, comp: str | None, need: float | None, scarce: bool):
    """(preparation, mass basis, flask choice, problem) of a stock's metal or ligand salt."""
    try:
        usual = choose_flask(s.flask_mL, need, s.on_hand)
    except stk.StockError as exc:
        return None, None, None, str(PlanError(f"stock {s.id}.flask", str(exc)))
    if not (s.formula and comp is not None):
        return None, None, choose_flask(s.flask_mL, need, s.on_hand, scarce=scarce), None
    try:
        least, least_choice = _least_reagent(plan, s, comp, need, usual.flask_mL)
        prep, choice = (
            (least, least_choice) if scarce else (prepare_plan_stock(plan, s, usual.flask_mL, comp), usual)
        )
    except (stk.StockError, GlasswareError) as exc:
        return None, None, usual, str(exc)
    return prep, mass_basis(prep, choice, need, scarce=scarce, scarce_prep=least), choice, None


def flask_choice(s, need_mL: float | None) -> float:
    """The plan's flask for the stock, else the smallest that holds what is needed (at least 50 mL); kept
    for the class stock list."""
    try:
        return choose_flask(s.flask_mL, need_mL, s.on_hand).flask_mL
    except stk.StockError as exc:
        raise PlanError(f"stock {s.id}.flask", str(exc)) from None


def _stock_need(plan: Plan, s, used, n_del, need, scarce: bool) -> StockNeed:
    comp = "M" if "M" in s.conc else ("L" if "L" in s.conc else None)
    prep, basis, choice, problem = _weighing(plan, s, comp, need, scarce)
    flask = prep.flask.capacity_mL if prep is not None else (choice.flask_mL if choice else None)
    comps = {
        c: (s.conc[c], getattr(plan.components, c).charge, getattr(plan.components, c).label or c)
        for c in ("M", "L")
        if c in s.conc
    }
    solutes, gap = (), None
    try:
        solutes, gap = stock_solutes(
            comps, {n: (c, ion_charge(n)) for n, c in s.ions.items()}, s.formula, flask
        )
    except stk.StockError as exc:  # a formula molmass cannot read
        problem = problem or str(exc)
    return StockNeed(
        s.id,
        s.label,
        comp,
        prep,
        problem,
        used,
        n_del,
        need,
        s.on_hand,
        s.conc_rsd,
        solutes,
        SOLVENT,
        flask,
        gap,
        basis,
        scarce,
    )
