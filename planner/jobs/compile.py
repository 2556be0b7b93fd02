"""Compile a validated plan, once per job, into the numbers every layer below the jobs works from.

:func:`compile_study` is the one place where the pydantic :class:`~planner.inputs.plan.Plan` becomes
arrays: the :class:`~planner.model.compiled.Model` (chemistry and optics), the
:class:`~planner.uncertainty.bench.Bench` (glassware, make-up, allowances) and the free parameters,
together a :class:`~planner.inference.study.Study`. Nothing below this layer takes a ``Plan``.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np

from ..inference.precision import Parameters, free_parameters, unpack
from ..inference.study import Study
from ..inputs.plan import Plan, PlanError, ion_charge, unknown_name
from ..inputs.recipe import Recipe, totals_M
from ..model import optics
from ..model.compiled import Model, TubeState, predict, tube_ions_M
from ..model.variants import default_alternatives, with_species
from ..uncertainty import budget as _budget
from ..uncertainty.bench import Bench, Devices, TitrationSetup
from .compile_spectra import (
    alternative_spectra,
    build_spectra,
    instrument_at_working_wavelength,
    own_spectrum,
    table_epsilon_at,
)
from .devices import dispenser_item, plan_devices

__all__ = [
    "MAKE_UP_MIN_FRACTION",
    "build_model",
    "compile_bench",
    "compile_study",
    "dispenser_item",
    "error_budget",
    "expected_state",
    "make_up_min_mL",
    "plan_devices",
    "true_constants",
]


def build_model(plan: Plan) -> Model:
    """Turn a validated plan into arrays (a pure function of the plan)."""
    sp = plan.species
    stoich = np.array(
        [[s.formula.get("M", 0), s.formula.get("L", 0), s.formula.get("H", 0)] for s in sp], dtype=int
    )
    comps = plan.components
    charges = np.array([comps.M.charge, comps.L.charge, 1], dtype=float)
    absorbers = ("M", "L", *(s.name for s in sp))
    band_ratio = {}
    eps = np.zeros(len(absorbers))
    rsd = np.zeros(len(absorbers))
    for j, name in enumerate(absorbers):
        e = plan.optics.epsilon.get(name)
        from_table = table_epsilon_at(plan, name) if e is None else None
        if from_table is not None:  # a plan with an ε table reads it at wavelength_nm for one wavelength
            eps[j], rsd[j] = from_table
        elif e is not None:
            band = plan.optics.bands.get(name)
            factor = optics.bandwidth_factor(plan.optics.bandwidth_nm, band.fwhm_nm if band else None)
            band_ratio[name] = factor
            eps[j] = e.value * factor
            rsd[j] = e.rsd
    default_size = 4.0  # Å, a middling Kielland size when the plan gives none [common practice]
    sizes = np.array(
        [comps.M.size_angstrom or default_size, comps.L.size_angstrom or default_size]
        + [s.size_angstrom or default_size for s in sp]
    )
    ion_names = sorted({ion for s in plan.stock for ion in s.ions})
    ion_z = np.array([ion_charge(i) for i in ion_names], dtype=float)
    stock_ion = np.array([[s.ions.get(i, 0.0) for i in ion_names] for s in plan.stock], dtype=float)
    stock_ion = stock_ion.reshape(len(plan.stock), len(ion_names))
    stray, noise_k = instrument_at_working_wavelength(plan)
    return Model(
        species=tuple(s.name for s in sp),
        stoich=stoich,
        log_beta=np.array([s.log_beta for s in sp], dtype=float),
        log_beta_sd=np.array([s.log_beta_sd for s in sp], dtype=float),
        pH=comps.H.pH if comps.H is not None else None,
        charges=charges,
        sizes_angstrom=sizes,
        absorbers=absorbers,
        epsilon_M_cm=eps,
        epsilon_rsd=rsd,
        path_cm=plan.optics.path_cm,
        stray_light=stray,
        noise_k=noise_k,
        display_step=plan.optics.display_step,
        linear_range=tuple(plan.optics.linear_range),
        stock_ids=tuple(s.id for s in plan.stock),
        stock_conc_M=np.array(
            [[s.conc.get("M", 0.0), s.conc.get("L", 0.0)] for s in plan.stock], dtype=float
        ),
        stock_conc_rsd=np.array([s.conc_rsd for s in plan.stock], dtype=float),
        ion_names=tuple(ion_names),
        ion_charges=ion_z,
        stock_ion_M=stock_ion,
        activity_model=plan.medium.activity_model,
        reference_ionic_strength_M=plan.medium.reference_ionic_strength_M,
        temperature_C=plan.temperature_C,
    )


def compile_bench(plan: Plan) -> Bench:
    """The plan's glassware as numbers (dispensers looked up in the catalogue once)."""
    g = plan.glassware
    dil, bg = plan.diluent, plan.background
    return Bench(
        stock_ids=tuple(s.id for s in plan.stock),
        devices=plan_devices(plan),
        make_up=g.make_up,
        tube_volume_mL=g.tube_volume_mL if plan.titration is None else plan.titration.max_volume_mL,
        step_mL=g.step_mL,
        min_volume_mL=g.min_volume_mL,
        rinse_mL=g.rinse_mL,
        dead_volume_mL=g.dead_volume_mL,
        delta_T_C=g.delta_T_C,
        diluent_id=dil.id if dil is not None else None,
        background_id=bg.id if bg is not None else None,
        fixed_mL=dict(plan.design.fixed),
        on_hand_mL=np.array([np.nan if s.on_hand is None else s.on_hand for s in plan.stock], dtype=float),
        titration=None
        if plan.titration is None
        else TitrationSetup(
            plan.titration.cell,
            plan.titration.titrant,
            plan.titration.start_volume_mL,
            plan.titration.max_volume_mL,
            plan.titration.step_mL or g.step_mL,
            plan.titration.additions,
            plan.titration.equilibrate,
        ),
        make_up_min_mL=make_up_min_mL(plan),
    )


MAKE_UP_MIN_FRACTION = 0.05
"""Default least diluent per flask under ``to-mark``: 5 % of the tube volume, enough to rinse the neck
and bring the meniscus to the mark by dropper [common practice]."""


def make_up_min_mL(plan: Plan) -> float:
    """The plan's ``glassware.make_up_min`` (default 5 % of the tube), 0 when nothing is made up to a mark."""
    g = plan.glassware
    if g.make_up != "to-mark" or plan.diluent is None:
        return 0.0
    return g.make_up_min_mL if g.make_up_min_mL is not None else MAKE_UP_MIN_FRACTION * g.tube_volume_mL


def compile_study(plan: Plan) -> Study:
    """Compile ``plan`` into a :class:`Study` (model, bench, free parameters, design settings)."""
    model = build_model(plan)
    d = plan.design
    alternatives = compile_alternatives(plan, model)
    spectra = build_spectra(plan, model)
    return Study(
        title=plan.title,
        model=model,
        bench=compile_bench(plan),
        params=free_parameters(model, plan.target, blank_offset=d.blank_offset),
        target=plan.target,
        goal_se=d.goal_se,
        analysis=d.analysis,
        tubes=d.tubes,
        criterion=d.criterion,
        robust=d.robust,
        ionic_strength_M=d.ionic_strength_M,
        ionic_strength_tolerance=d.ionic_strength_tolerance,
        alternatives=alternatives,
        check_weight=d.check_weight if d.check != "none" else 0.0,
        spectra=spectra,
        alternative_spectra=alternative_spectra(plan, model, spectra, alternatives),
    )


def compile_alternatives(plan: Plan, model: Model) -> tuple[tuple[str, Model], ...]:
    """The models the design should be able to tell from the main one: the plan's
    ``[[design.alternative]]`` entries, else (``check = "auto"``) a 1:2 and a 2:1 complex beside a single
    1:1 complex (:func:`planner.model.variants.default_alternatives`)."""
    d = plan.design
    if d.check == "none":
        return ()
    target_eps = float(model.epsilon_M_cm[2 + model.index(plan.target)])
    listed = [
        (
            a.name,
            (a.formula.get("M", 0), a.formula.get("L", 0), a.formula.get("H", 0)),
            a.log_beta,
            _alternative_epsilon(plan, a.name, target_eps) if a.epsilon is None else a.epsilon,
        )
        for a in d.alternative
    ]
    specs = listed or default_alternatives(model, plan.target)
    return tuple((name, with_species(model, name, st, lb, eps)) for name, st, lb, eps in specs)


def _alternative_epsilon(plan: Plan, name: str, target_eps: float) -> float:
    """ε of a listed alternative without ``epsilon``: from its own spectrum at ``optics.wavelength_nm``
    when a plan with whole spectra gives one (ε table column or band), else the target's."""
    if not plan.optics.has_spectra:
        return target_eps
    own = own_spectrum(plan, name, np.array([plan.optics.wavelength_nm]))
    return target_eps if own is None else float(own[0])


def error_budget(
    plan: Plan,
    model: Model,
    recipe: Recipe,
    state: TubeState,
    devices: Devices | None = None,
    *,
    delta_T_C: float | None = None,
) -> _budget.ErrorBudget:
    """The error budget of ``recipe`` from a plan (public entry point; see
    :func:`planner.uncertainty.budget.error_budget`, which takes the compiled bench)."""
    bench = compile_bench(plan)
    if devices is not None:
        from dataclasses import replace

        bench = replace(bench, devices=devices)
    return _budget.error_budget(bench, model, recipe, state, delta_T_C=delta_T_C)


def expected_state(model: Model, recipe: Recipe, *, batch: int | None = None, **kw) -> TubeState:
    """Speciation and readings of every tube of ``recipe`` (at the guesses unless overridden); with
    ``batch``, the same tubes at ``batch`` sets of constants at once (``log_beta`` (batch, S), …)."""
    tot = totals_M(recipe, model.stock_conc_M)
    ions = tube_ions_M(model, recipe.volumes_mL, recipe.total_volume_mL)
    if batch is not None:
        tot = np.broadcast_to(tot, (batch,) + tot.shape)
        ions = np.broadcast_to(ions, (batch,) + ions.shape)
    return predict(model, tot, ions, **kw)


def expected_at(
    model: Model, params: Parameters, recipe: Recipe, theta: np.ndarray
) -> tuple[TubeState, np.ndarray]:
    """Every tube of ``recipe`` at each parameter vector of ``theta`` (G, P) at once: the states (G, n) and
    the absorptivities (G, A) they were computed with."""
    lb, eps, _ = unpack(model, params, theta)
    return expected_state(model, recipe, batch=theta.shape[0], log_beta=lb, epsilon_M_cm=eps, warn=False), eps


def true_constants(model: Model, at: Mapping[str, float] | None) -> np.ndarray:
    """log β with the overrides ``at`` (species name → log β) applied."""
    lb = model.log_beta.copy()
    for name, value in (at or {}).items():
        if name not in model.species:
            raise PlanError(f"at[{name}]", unknown_name("species", name, list(model.species)))
        lb[model.index(name)] = float(value)
    return lb
