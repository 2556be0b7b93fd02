"""In-cuvette titrations as jobs: the schedule's points, the design of an aliquot schedule, and the usual
equal-aliquot schedule it is compared with.

The design searches schedules whose aliquots grow geometrically, v_j = a·g^(j−1) on the dispenser's grid
(a from the dispenser's smallest volume up to the whole room in the cell, g from 1 — equal aliquots — to
2.5), for each stock of the plan that could be the titrant (it holds the titrant's component and has a
dispenser). Geometric growth keeps the ratio of titrant to cell reactant spreading over decades, as the
binding curve asks (the information about K sits where the complex is 20–80 % formed). Each schedule is
scored by the Cramér–Rao SE of the target with the titration's full covariance (correlated deliveries),
averaged as mean log SE over the guess's prior nodes when the design is robust; schedules with a reading
outside the linear range at any node within ±2 sd, or that overflow the cell, are left out. All schedules
and nodes are speciated in one batch.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np

from ...inference.precision import ReadingModel, cramer_rao, unpack
from ...inference.study import Study
from ...inputs.limits import MAX_ADDITIONS, check_count
from ...inputs.recipe import Recipe, RecipeError
from ...inputs.schedule import Schedule
from ...inputs.text import plural
from ...model.compiled import predict, tube_ions_M
from ...uncertainty import delivery
from ...uncertainty.titration import reads_cumulatively, titration_budget, titration_recipe
from ..plan.assess import Assessment, assess_study

GROWTH = (1.0, 1.1, 1.2, 1.3, 1.45, 1.6, 1.8, 2.0, 2.5)
N_FIRST = 24  # first-aliquot sizes tried, log-spaced over the dispenser's range
FILL = (0.3, 0.4, 0.5, 0.6, 0.7, 0.8, 0.9, 1.0)  # shares of the cell's room a schedule may fill


@dataclass(frozen=True)
class TitrationDesign:
    """A designed aliquot schedule and how it compares with equal aliquots.

    Attributes
    ----------
    schedule, recipe : the designed schedule and its points as recipe rows.
    titrant : the stock chosen as titrant.
    se_target, se_equal : SE(log β[target]) at the guess of the design and of equal aliquots (same number).
    robust : whether the design averaged over the guess's uncertainty.
    candidates, feasible : schedules tried and those inside the linear range and the cell.
    study : the compiled plan; assessment : the assessment of the designed schedule's points.
    """

    schedule: Schedule
    recipe: Recipe
    titrant: str
    se_target: float
    se_equal: float
    robust: bool
    candidates: int
    feasible: int
    study: Study = field(repr=False, compare=False)
    assessment: Assessment | None = field(default=None, repr=False, compare=False)

    @property
    def se_equal_over_design(self) -> float:
        """SE(equal aliquots) / SE(designed schedule): above 1 the design is better."""
        return self.se_equal / self.se_target if self.se_target > 0 else float("nan")


def schedule_points(study: Study, schedule: Schedule) -> Recipe:
    """The points of ``schedule`` as recipe rows (checked against the cell and the dispensers)."""
    return titration_recipe(study.bench, schedule)


def read_points(path, plan, study: Study, *, readings: bool = False):
    """The recipe in PATH for ``plan``: a tube recipe CSV, or (for a plan with [titration]) a titration
    schedule CSV (step, aliquot_mL[, absorbance]) turned into its points. With ``readings``: a Readings
    object (an absorbance column is then required)."""
    from ...inputs.readings import Readings, read_readings_csv
    from ...inputs.recipe import read_recipe_csv
    from ...inputs.schedule import read_schedule_csv

    if plan.titration is None:
        return read_readings_csv(path, plan) if readings else read_recipe_csv(path, plan)
    schedule = read_schedule_csv(path, need_absorbance=readings)
    rec = schedule_points(study, schedule)
    return Readings(rec, schedule.absorbance) if readings else rec


def equal_schedule(study: Study, additions: int | None = None) -> Schedule:
    """The usual schedule: equal aliquots on the dispenser's grid filling the cell's room."""
    t = study.bench.titration
    n = int(additions or t.additions)
    room = t.max_volume_mL - t.start_volume_mL
    k = study.bench.devices.stock_device[study.bench.stock_index(t.titrant)]
    if k >= 0 and reads_cumulatively(study.bench.devices.items[k]):  # one filling of the burette
        room = min(room, study.bench.devices.items[k].capacity_mL)
    v = np.floor(room / n / t.step_mL + 1e-9) * t.step_mL
    return Schedule(tuple(str(k + 1) for k in range(n)), np.full(n, np.round(v, 10)))


def _with_titrant(study: Study, sid: str) -> Study:
    t = study.bench.titration
    return (
        study
        if sid == t.titrant
        else replace(study, bench=replace(study.bench, titration=replace(t, titrant=sid)))
    )


def _titrant_options(study: Study) -> list[str]:
    """Stocks that could be the titrant: they hold what the plan's titrant holds (M or L) and have a '
    'dispenser."""
    b, m = study.bench, study.model
    t = b.titration
    comp = m.stock_conc_M[b.stock_index(t.titrant)] > 0
    out = []
    for k, sid in enumerate(b.stock_ids):
        if sid == t.cell or b.devices.stock_device[k] < 0:
            continue
        if np.array_equal(m.stock_conc_M[k] > 0, comp):
            out.append(sid)
    return out or [t.titrant]


def _candidates(study: Study, n: int) -> list[np.ndarray]:
    t = study.bench.titration
    dev = study.bench.devices.items[study.bench.devices.stock_device[study.bench.stock_index(t.titrant)]]
    room = t.max_volume_mL - t.start_volume_mL
    if reads_cumulatively(dev):  # a burette delivers the whole titration from one filling
        room = min(room, dev.capacity_mL)
    vmin = max(delivery.smallest_delivery_mL(dev), t.step_mL)
    vmax = min(dev.capacity_mL, room)
    if vmin > vmax:
        return []
    firsts = np.unique(np.round(np.geomspace(vmin, vmax, N_FIRST) / t.step_mL) * t.step_mL)
    seen, out = set(), []
    j = np.arange(n)
    # first aliquots on a log grid, and those that fill a share of the cell's room at each growth
    pairs = [(a, g) for a in firsts for g in GROWTH]
    pairs += [(f * room / np.sum(g**j), g) for g in GROWTH for f in FILL]
    for a, g in pairs:  # a few hundred schedules at most; each scored in the batch below
        v = np.round(np.floor(a * g**j / t.step_mL + 1e-9) * t.step_mL, 10)
        v = np.clip(v, vmin, dev.capacity_mL)
        if v.sum() > room * (1 + 1e-9):
            continue
        key = tuple(v)
        if key not in seen:
            seen.add(key)
            out.append(v)
    return out


def _score(study: Study, schedules: list[np.ndarray], robust: bool) -> tuple[np.ndarray, np.ndarray]:
    """Mean log SE over the prior nodes (inf where infeasible) and the SE at the guess, per schedule."""
    model, params = study.model, study.params
    lo, hi = model.linear_range
    recipes = [
        titration_recipe(study.bench, Schedule(tuple(str(k + 1) for k in range(v.size)), v))
        for v in schedules
    ]
    S, n = len(recipes), recipes[0].n_tubes
    tot = np.stack([(r.volumes_mL @ model.stock_conc_M) / r.total_volume_mL[:, None] for r in recipes])
    ions = np.stack([tube_ions_M(model, r.volumes_mL, r.total_volume_mL) for r in recipes])
    nodes = study.nodes(robust)
    G = nodes.theta.shape[0]
    theta = np.repeat(nodes.theta, S, axis=0)  # (G·S, P): node-major
    reading = ReadingModel(model, params, np.tile(tot, (G, 1, 1)), np.tile(ions, (G, 1, 1)))
    A = reading.f(theta).reshape(G, S, n)
    J = reading.jac(theta).reshape(G, S, n, params.size)
    inner = np.abs(nodes.theta - params.guess).max(axis=1) <= 2.0 * max(params.prior_sd.max(), 0.0) + 1e-12
    feasible = np.all((A[inner] >= lo) & (A[inner] <= hi), axis=(0, 2))
    t = params.target
    log_se = np.full((G, S), np.inf)
    lb, eps, _ = unpack(model, params, nodes.theta)
    for g in range(G):  # a handful of nodes
        states = predict(model, tot, ions, log_beta=lb[g], epsilon_M_cm=eps[g], warn=False)
        for s in np.flatnonzero(feasible):  # per schedule: an n×n covariance and a P×P inverse
            st = states[s]
            cov = titration_budget(study.bench, model, recipes[s], st).total
            se = cramer_rao(J[g, s], cov).se[t]
            log_se[g, s] = np.log(se) if np.isfinite(se) else np.inf
    centre = int(np.argmin(np.abs(nodes.theta - params.guess).sum(axis=1)))
    return nodes.weights @ np.where(np.isfinite(log_se), log_se, 1e6), np.exp(log_se[centre])


def design_titration(
    study: Study, *, additions: int | None = None, robust: bool | None = None
) -> TitrationDesign:
    """Choose the aliquot schedule (and titrant stock) that resolves the target constant best."""
    t = study.bench.titration
    if t is None:
        raise RecipeError("titration", "the plan has no [titration] table")
    if study.params.target < 0:
        raise RecipeError("design.target", f"the target {study.target} is held fixed (log_beta_sd = 0)")
    n = check_count(additions or t.additions, "additions", MAX_ADDITIONS)
    if n < study.params.size:
        raise RecipeError(
            "titration.additions", f"{plural(n, 'addition')} cannot determine {study.params.size} parameters"
        )
    rob = study.robust if robust is None else bool(robust)
    best = None
    n_cand = n_feas = 0
    for sid in _titrant_options(study):
        st = _with_titrant(study, sid)
        cands = _candidates(st, n)
        if not cands:
            continue
        crit, se0 = _score(st, cands, rob)
        n_cand += len(cands)
        n_feas += int(np.sum(crit < 1e5))
        k = int(np.argmin(crit))
        if crit[k] < 1e5 and (best is None or crit[k] < best[0]):
            best = (crit[k], st, cands[k], float(se0[k]))
    if best is None:
        lo, hi = study.model.linear_range
        raise RecipeError(
            "titration",
            f"no aliquot schedule keeps every reading inside the linear range "
            f"[{lo:g}, {hi:g}] over the guess's range: change the cell's or the titrant's "
            f"concentration, the start volume or the path",
        )
    _, st, v, se = best
    sched = Schedule(tuple(str(k + 1) for k in range(v.size)), v)
    rec = titration_recipe(st.bench, sched)
    a = assess_study(st, rec, trials=0, model_check=False)
    eq = equal_schedule(st, n)
    try:
        se_eq = float(
            assess_study(
                st, titration_recipe(st.bench, eq), trials=0, profile_chi2=False, model_check=False
            ).target_se
        )
    except RecipeError:
        se_eq = float("nan")
    return TitrationDesign(
        sched,
        rec,
        st.bench.titration.titrant,
        float(a.target_se),
        se_eq,
        rob,
        n_cand,
        n_feas,
        st,
        a,
    )
