"""Design of recipes that maximise the information about K, on the glassware's real volume grid.

Candidates are every combination of dispensed volumes on the plan's grid; each carries the whitened
Jacobian of its reading. Errors shared across tubes (stock concentrations, device calibration) enter as
nuisance parameters with a unit Gaussian prior, which keeps the information additive over tubes and is
exactly equivalent to the full-covariance Fisher information for the target criterion (Woodbury
identity). The "all" (D-optimal) criterion uses the independent errors only, since adding the nuisance
factors would make it a Ds criterion over more parameters; the reported SEs always use the full budget. The exact design comes from :func:`planner.optimal.exact_design` (Fedorov exchange), the bound
from :func:`planner.optimal.approximate_design` (checked by the equivalence theorem). Robust designs
average the criterion over quadrature nodes of the guesses' uncertainty (Chaloner & Larntz 1989,
J. Stat. Plan. Inference 21:191).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ..inference import approximate, exchange
from ..inference.design_criteria import CRITERIA, DesignError
from ..inference.precision import ReadingModel
from ..inference.priors import Nodes
from ..inference.study import Study
from ..inputs.plan import Plan
from ..inputs.recipe import Recipe, concat_recipes, totals_M
from ..model.compiled import Model, predict, tube_ions_M
from ..model.jacobians import absorbance_derivatives
from ..uncertainty import delivery
from ..uncertainty.budget import error_factors
from .assess import assess_study, stock_shortfalls
from .checks import RANGE_RISK, prior_range_risk
from .compile import compile_study
from .series import even_series_for

__all__ = ["CRITERIA", "Design", "DesignError", "candidate_tubes", "design"]

MAX_CANDIDATES = 40000  # above this the grid is searched coarsely first, then refined locally
@dataclass(frozen=True)
class Candidates:
    """Every tube the glassware can make.

    Attributes
    ----------
    recipe : all candidates as one recipe (C tubes).
    designed_ids : the stock ids whose volumes are chosen.
    n_grid : number of grid combinations (before the linear-range screen).
    step_mL : the grid step used.
    """

    recipe: Recipe
    designed_ids: tuple[str, ...]
    n_grid: int
    step_mL: float


def _levels(lo: float, hi: float, step: float, allow_zero: bool) -> np.ndarray:
    k0 = max(int(math.ceil(lo / step - 1e-9)), 1)
    k1 = int(math.floor(hi / step + 1e-9))
    lv = np.round(np.arange(k0, k1 + 1) * step, 10)
    return np.concatenate([[0.0], lv]) if allow_zero else lv


def candidate_tubes(study: Study, *, step_mL: float | None = None,
                    caps_mL: dict[str, float] | None = None) -> Candidates:
    """All combinations of designed volumes on the grid that fit the tube (before the range screen).

    Under ``make_up = "to-mark"`` the dispensed volumes (fixed and background ones included) add up to
    at most the tube less ``glassware.make_up_min``, so every flask still takes diluent to its mark.

    Parameters
    ----------
    step_mL : grid step (default the plan's; a multiple of it for a coarse search).
    caps_mL : per-stock upper limits on one tube's volume (e.g. from the stock budget).
    """
    g = study.bench
    devices = g.devices
    step = step_mL or g.step_mL
    fixed = g.fixed_mL
    designed = [s for s in g.stock_ids if s not in (g.diluent_id, g.background_id) and s not in fixed]
    if not designed:
        raise DesignError("design.fixed fixes every stock: nothing is left to vary; remove a stock from fixed")
    # under to-mark the flask keeps make_up_min of room for the diluent (Bench.room_mL)
    room = g.room_mL - sum(fixed.values())
    levels = []
    for sid in designed:
        k = g.stock_index(sid)
        cap = room
        low = max(g.min_volume_mL, step)
        j = devices.stock_device[k]
        if j >= 0:
            cap = min(cap, devices.items[j].capacity_mL)
            low = max(low, delivery.smallest_delivery_mL(devices.items[j]))
        if caps_mL and sid in caps_mL:
            cap = min(cap, caps_mL[sid])
        levels.append(_levels(low, cap, step, allow_zero=True))
    # cartesian product, then keep what fits (vectorised over the grid)
    mesh = np.stack([m.ravel() for m in np.meshgrid(*levels, indexing="ij")], axis=1)
    fits = mesh.sum(axis=1) <= room + 1e-9
    mesh = mesh[fits]
    rec = _complete(study, designed, mesh, "c")
    return Candidates(rec, tuple(designed), rec.n_tubes, step)


def _complete(study: Study, designed, mesh: np.ndarray, prefix: str) -> Recipe:
    """Candidate recipe from designed volumes (C, d): fixed volumes, the background electrolyte that
    levels the ionic strength, and the diluent remainder under ``make_up = "added"``."""
    g = study.bench
    vols = {sid: mesh[:, j] for j, sid in enumerate(designed)}
    for sid, v in g.fixed_mL.items():
        vols[sid] = np.full(mesh.shape[0], v)
    if g.background_id is not None and g.background_id not in g.fixed_mL:
        vols = level_ionic_strength(study, vols)
    if not g.to_mark and g.diluent_id is not None:
        rest = g.tube_volume_mL - sum(vols.values())
        ok = (rest <= 1e-9) | (rest >= g.min_volume_mL - 1e-9)
        vols = {k: v[ok] for k, v in vols.items()}
        vols[g.diluent_id] = np.maximum(rest[ok], 0.0)
    n = len(next(iter(vols.values())))
    if n == 0:
        raise DesignError("no tube fits: the fixed volumes and min_volume leave no room in tube_volume")
    return g.make_recipe(vols, [f"{prefix}{i}" for i in range(n)])


def level_ionic_strength(study: Study, vols: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    """Add the background-electrolyte volume that brings every tube to the same ionic strength.

    The target is ``design.ionic_strength`` (default: the highest ionic strength among the tubes
    without background electrolyte, so every tube can be raised to it). With the diluent filling the
    rest, I = I₀ + V_bg (I_bg − I_dil)/V_tube, I₀ the tube's ionic strength with no background stock
    (from the full speciation, so complexation's change of charges counts). The volume is rounded to the
    grid; tubes that cannot reach the target within ``design.ionic_strength_tolerance`` (no room, or
    volume below min_volume) are dropped.
    """

    g = study.bench
    bg = g.background_id
    model = study.model
    n = len(next(iter(vols.values())))
    tube = g.tube_volume_mL
    rec0 = g.make_recipe({**vols, bg: np.zeros(n)} if g.to_mark else
                         {**vols, bg: np.zeros(n), g.diluent_id: np.maximum(tube - sum(vols.values()), 0.0)})
    tot = totals_M(rec0, model.stock_conc_M)
    ions = tube_ions_M(model, rec0.volumes_mL, rec0.total_volume_mL)
    st = predict(model, tot, ions, warn=False)
    I0 = st.ionic_strength_M
    k_bg = model.stock_ids.index(bg)
    i_bg = 0.5 * float(model.stock_ion_M[k_bg] @ model.ion_charges**2)
    dil = g.diluent_id
    i_dil = 0.5 * float(model.stock_ion_M[model.stock_ids.index(dil)] @ model.ion_charges**2) if dil else 0.0
    if not i_bg > i_dil:
        raise DesignError(f"stock {bg}: the background electrolyte ({i_bg:.3g} M ionic strength) must be "
                          f"stronger than the diluent ({i_dil:.3g} M) to level the tubes")
    target = study.ionic_strength_M or float(I0.max())
    v_bg = np.round(np.maximum(target - I0, 0.0) * tube / (i_bg - i_dil) / g.step_mL) * g.step_mL
    v_bg = np.round(v_bg, 10)
    I = I0 + v_bg * (i_bg - i_dil) / tube
    room = g.room_mL - sum(vols.values())
    ok = (np.abs(I - target) <= study.ionic_strength_tolerance * target) & (v_bg <= room + 1e-9)
    ok &= (v_bg == 0) | (v_bg >= g.min_volume_mL - 1e-9)
    if not ok.any():
        raise DesignError(f"no tube can be brought to I = {target:.3g} M with stock {bg}: set "
                          f"design.ionic_strength lower, use a more concentrated background stock, or widen "
                          f"design.ionic_strength_tolerance")
    out = {k: v[ok] for k, v in vols.items()}
    out[bg] = v_bg[ok]
    return out


@dataclass(frozen=True)
class Design:
    """A designed recipe and how good it is.

    Attributes
    ----------
    recipe : the designed tubes.
    criterion, robust, seed : what was optimised.
    n_candidates, n_feasible : candidates on the grid and those inside the linear range robustly.
    exact : the exact design on the candidates (counts).
    approx : the best approximate design (the bound).
    efficiency_bound : lower bound on the exact design's efficiency against the best approximate
        design over all designs on the candidates (exact efficiency × equivalence-theorem bound).
    se_target : SE(log β[target]) of the design at the guess (Cramér–Rao, full error budget).
    se_even : the same for the evenly spaced series of the same size.
    se_across : list of (true log β, SE of design, SE of even series) across the guess's range.
    notes : what the optimiser did that the user should know (coarse search, budget caps...).
    model_check : the model check (:class:`planner.jobs.model_check.ModelCheck`), or None without one.
    """

    recipe: Recipe
    criterion: str
    robust: bool
    seed: int
    n_candidates: int
    n_feasible: int
    exact: exchange.ExactDesign
    approx: approximate.ApproximateDesign
    efficiency_bound: float
    se_target: float
    se_even: float
    se_across: tuple[tuple[float, float, float], ...]
    target: str
    notes: tuple[str, ...] = field(default=())
    assessment_summary: dict = field(default_factory=dict, hash=False)
    model_check: object | None = field(default=None, compare=False)

    def __repr__(self) -> str:
        return (f"Design({self.recipe.n_tubes} tubes, {self.criterion}, robust={self.robust}, "
                f"SE={self.se_target:.3g} vs even {self.se_even:.3g}, efficiency ≥ {self.efficiency_bound:.3f})")

    @property
    def se_ratio_vs_even(self) -> float:
        return self.se_even / self.se_target if self.se_target > 0 else float("nan")

    def summary(self) -> dict:
        """The design JSON: the assessment's baseline keys plus criterion and efficiency_bound."""
        out = dict(self.assessment_summary)
        out.update({
            "criterion": self.criterion,
            "robust": self.robust,
            "seed": self.seed,
            "target": self.target,
            "efficiency_bound": self.efficiency_bound,
            "exact_efficiency": float(self.exact.efficiency),
            "candidates": self.n_candidates,
            "candidates_feasible": self.n_feasible,
            "se_target": self.se_target,
            "se_even_series": self.se_even,
            "se_ratio_vs_even": self.se_ratio_vs_even,
            "se_across_guess": [{"log_beta": a, "se_design": b, "se_even_series": c} for a, b, c in self.se_across],
            "notes": list(self.notes),
        })
        if self.model_check is not None:
            out["model_check"] = self.model_check.summary()
        return out


def _information_rows(study: Study, cand: Candidates, nodes: Nodes, criterion: str, *, volumetric: bool = True,
                      with_sd: bool = False):
    """Whitened Jacobian rows F (G, C, 1, P') and prior M0 (P', P') for every candidate and node (and,
    with ``with_sd``, the independent sd (G, C) each row was whitened by)."""
    model, params = study.model, study.params
    rec = cand.recipe
    tot = totals_M(rec, model.stock_conc_M)
    ions = tube_ions_M(model, rec.volumes_mL, rec.total_volume_mL)
    reading = ReadingModel(model, params, tot, ions)
    G = nodes.theta.shape[0]
    from ..inference.precision import unpack

    lb, eps, _ = unpack(model, params, nodes.theta)
    st = predict(model, np.broadcast_to(tot, (G,) + tot.shape), np.broadcast_to(ions, (G,) + ions.shape),
                 log_beta=lb, epsilon_M_cm=eps, warn=False)
    J = reading.jac(nodes.theta)                                            # (G, C, P)
    der = absorbance_derivatives(model, st, eps)
    var = np.empty(st.absorbance.shape)
    shared = []
    for gi in range(G):  # a handful of nodes; each vectorised over candidates
        sub = st[gi]
        f = error_factors(study.bench, model, rec, sub, dA_dtotals=der.dA_dtotals[gi])
        var[gi] = f.photometric_var + (f.delivery_random_var if volumetric else 0.0)
        shared.append(np.concatenate([f.J_stock, f.J_device], axis=1) if volumetric else
                      np.zeros((rec.n_tubes, 0)))
    sd = np.sqrt(var)
    # spread of each reading from the absorptivities' uncertainty (they enter linearly), for the screen
    eps_sd = model.epsilon_M_cm * model.epsilon_rsd
    band = np.sqrt(np.sum((der.dA_depsilon * eps_sd) ** 2, axis=-1))          # (G, C)
    Fth = J / sd[..., None]
    S = np.stack(shared)                                                    # (G, C, k + d)
    keep = np.any(S != 0, axis=(0, 1)) if S.size else np.zeros(0, dtype=bool)
    if criterion == "target" and keep.any():
        Fs = S[..., keep] / sd[..., None]
        F = np.concatenate([Fth, Fs], axis=-1)
        P = Fth.shape[-1]
        M0 = np.zeros((F.shape[-1],) * 2)
        M0[P:, P:] = np.eye(F.shape[-1] - P)  # each shared error: a unit-sd nuisance factor
    else:
        F = Fth
        M0 = None
    if with_sd:
        return F[:, :, None, :], M0, st, band, sd
    return F[:, :, None, :], M0, st, band


def _range_mask(model: Model, st, weights: np.ndarray, band: np.ndarray) -> np.ndarray:
    """Candidates that leave the linear range for at most RANGE_RISK of the guesses' uncertainty."""
    lo, hi = model.linear_range
    return prior_range_risk(st.absorbance, band, weights, lo, hi) <= RANGE_RISK + 1e-12


def design(plan: Plan, *, tubes: int | None = None, criterion: str | None = None, robust: bool | None = None,
           seed: int = 0, volumetric: bool = True, starts: int = 8, check_model: bool | None = None) -> Design:
    """Choose each tube's volumes to resolve the target constant as precisely as possible.

    Parameters
    ----------
    tubes, criterion, robust : override the plan's design keys.
    seed : seed of the random starts of the exchange algorithm.
    volumetric : include delivery and stock errors (False: photometric noise only — for analytic checks).
    check_model : guard against the plan's alternative models (default: the plan's ``design.check``);
        False gives the target-optimal design alone.

    The plan is compiled once (:func:`planner.jobs.compile.compile_study`); see :func:`design_study`.
    """
    return design_study(compile_study(plan), tubes=tubes, criterion=criterion, robust=robust, seed=seed,
                        volumetric=volumetric, starts=starts, check_model=check_model)


def design_study(study: Study, *, tubes: int | None = None, criterion: str | None = None,
                 robust: bool | None = None, seed: int = 0, volumetric: bool = True, starts: int = 8,
                 check_model: bool | None = None, prior_tubes: Recipe | None = None) -> Design:
    """:func:`design` on a compiled plan (``check_model`` overrides the plan's model check).

    ``prior_tubes`` are tubes measured before: their information (whitened rows in the same parameters
    and nuisance factors as the candidates, at every prior node) is in hand, and the new tubes complete
    it (Chaloner & Verdinelli 1995, Stat. Sci. 10:273); see :mod:`planner.jobs.sequential`.
    """
    n = int(tubes or study.tubes)
    crit = criterion or study.criterion
    if crit not in CRITERIA:
        raise DesignError(f"criterion '{crit}': choose one of {', '.join(CRITERIA)}")
    rob = study.robust if robust is None else bool(robust)
    model, params = study.model, study.params
    if params.size == 0:
        raise DesignError("nothing is fitted: give the target species log_beta_sd > 0 (and ε an rsd if unknown)")
    if crit == "target" and params.target < 0:
        raise DesignError(f"the target {study.target} has log_beta_sd = 0 (held fixed): give it log_beta_sd > 0")
    if n < params.size:
        raise DesignError(f"{n} tubes cannot determine the {params.size} fitted parameters "
                          f"({', '.join(params.names)}): ask for at least {params.size} tubes")
    nodes = study.nodes(rob)
    notes: list[str] = []
    caps: dict[str, float] = {}
    for _attempt in range(4):
        try:
            rec, ex, ap, n_grid, n_feas, coarse, final = _solve(study, nodes, crit, n, seed, caps, volumetric,
                                                                 starts, prior_tubes)
        except DesignError as exc:
            if not caps:
                raise
            # the caps came from the stock on hand: that is what binds, not the linear range
            limits = ", ".join(f"{k} at most {v:.2f} mL per tube" for k, v in caps.items())
            raise DesignError(f"the stock on hand binds: {limits} (on hand less rinse and dead volume, shared by "
                              f"{n} tubes) leaves no sound recipe ({exc}); make more of it (on_hand) or ask for "
                              f"fewer tubes") from None
        if coarse:
            notes.append(coarse)
        over = _budget_overruns(study, rec)
        if not over:
            break
        for sid, (used, avail) in over.items():
            per_tube = max(avail, 0.0) / n
            caps[sid] = min(caps.get(sid, math.inf), per_tube)
            notes.append(f"stock {sid}: the first design used {used:.1f} mL but only {avail:.1f} mL is usable "
                         f"(on hand less rinse and dead volume); capped at {per_tube:.2f} mL per tube")
    else:
        raise DesignError("the stock budget cannot be met: make more of "
                          + ", ".join(_budget_overruns(study, rec)) + " (on_hand) or use fewer tubes")
    check = None
    use_check = study.check_weight > 0 if check_model is None else bool(check_model)
    if use_check and study.alternatives and crit == "target":
        from .model_check import guard

        check = guard(study, *final, rec, volumetric=volumetric, seed=seed, prior=prior_tubes)
        if _budget_overruns(study, check.recipe):
            notes.append("the model-check design would overrun a stock on hand: kept the target-only design")
        else:
            rec = check.recipe
    a = assess_study(study, rec, trials=0)
    even = even_series_for(study, n)
    se_d = float(a.target_se) if a.target_se is not None else float("nan")
    # the comparisons need only the Cramér–Rao SE: skip their χ² profiles
    ae = assess_study(study, even, trials=0, profile_chi2=False, model_check=False)
    se_e = float(ae.target_se) if ae.target_se is not None else float("nan")
    across = []
    t = study.target
    j = model.index(t)
    sd = float(model.log_beta_sd[j])
    if sd > 0:
        for k in (-2, -1, 0, 1, 2):
            val = float(model.log_beta[j] + k * sd)
            sa = assess_study(study, rec, trials=0, at={t: val}, profile_chi2=False,
                              model_check=False).target_se
            sb = assess_study(study, even, trials=0, at={t: val}, profile_chi2=False,
                              model_check=False).target_se
            across.append((val, float(sa), float(sb)))
    eff = float(ex.efficiency) * float(ap.efficiency_lower_bound)
    return Design(rec, crit, rob, seed, n_grid, n_feas, ex, ap, min(eff, 1.0), se_d, se_e, tuple(across), t,
                  tuple(notes), a.summary(), check)


def _solve(study: Study, nodes, crit, n, seed, caps, volumetric, starts, prior=None):
    g = study.bench
    cand = candidate_tubes(study, caps_mL=caps)
    coarse_note = ""
    factor = 1
    if cand.n_grid > MAX_CANDIDATES:
        d = len(cand.designed_ids)
        factor = int(math.ceil((cand.n_grid / MAX_CANDIDATES) ** (1.0 / d)))
        cand = candidate_tubes(study, step_mL=g.step_mL * factor, caps_mL=caps)
        coarse_note = (f"searched a {g.step_mL * factor:g} mL grid first ({cand.n_grid} candidates), then refined "
                       f"on the {g.step_mL:g} mL grid near the chosen tubes")
    ex, ap, rec, n_feas, support, final = _exact_on(study, nodes, crit, n, seed, cand, volumetric, starts, prior)
    n_grid = cand.n_grid
    if factor > 1:
        # refine on the fine grid around the chosen tubes, re-centring until the support settles
        base = cand
        for _ in range(3):
            fine = _neighbourhood(study, base, support, factor, caps)
            ex, ap, rec, n_feas, new_support, final = _exact_on(study, nodes, crit, n, seed, fine, volumetric,
                                                                starts, prior)
            n_grid = fine.n_grid
            moved = not np.array_equal(fine.recipe.volumes_mL[new_support], base.recipe.volumes_mL[support])
            base, support = fine, new_support
            if not moved:
                break
    return rec, ex, ap, n_grid, n_feas, coarse_note, final


def _exact_on(study: Study, nodes, crit, n, seed, cand, volumetric, starts, prior=None):
    model, params = study.model, study.params
    F, M0, st, band = rows_with_prior(study, cand, prior, nodes, crit, volumetric=volumetric)
    ok = _range_mask(model, st, nodes.weights, band)
    if not ok.any():
        lo, hi = model.linear_range
        raise DesignError(
            f"no candidate tube keeps the absorbance inside optics.linear_range [{lo:g}, {hi:g}] over the "
            f"guess's range: use more dilute stocks or a shorter path (if too high), more concentrated stocks "
            f"or a longer path (if too low), or widen linear_range")
    idx = np.flatnonzero(ok)
    Fk = F[:, idx]
    target = params.target if crit == "target" else None
    kw = dict(criterion=crit, target=target, M0=M0, node_weights=nodes.weights)
    try:
        ap = approximate.approximate_design(Fk, n_tubes=n, **kw)
        ex = exchange.exact_design(Fk, n, rng=np.random.default_rng(seed), starts=starts, approx=ap, **kw)
    except DesignError as exc:
        lo, hi = model.linear_range
        raise DesignError(
            f"only {idx.size} of {cand.n_grid} candidate tubes stay inside optics.linear_range [{lo:g}, {hi:g}] "
            f"over the guess's range, and they cannot determine every fitted parameter ({exc}). Use more "
            f"dilute stocks or smaller fixed volumes if readings run high, a longer path if they run low, "
            f"or hold more parameters fixed (rsd = 0)") from None
    out = recipe_from_counts(study, cand, idx, ex.counts)
    return ex, ap, out, int(ok.sum()), idx[np.flatnonzero(ex.counts)], (cand, idx, ex.counts)


def rows_with_prior(study: Study, cand: Candidates, prior: Recipe | None, nodes: Nodes, crit: str, *,
                    volumetric: bool = True, with_sd: bool = False):
    """:func:`_information_rows` of the candidates, with the information of tubes measured before
    (``prior``) added to M0. Both are computed in one call, so they share the nuisance columns."""
    if prior is None:
        return _information_rows(study, cand, nodes, crit, volumetric=volumetric, with_sd=with_sd)
    C = cand.recipe.n_tubes
    r = cand.recipe
    union = concat_recipes([r, prior], ["candidate", "prior"])
    out = _information_rows(study, Candidates(union, cand.designed_ids, union.n_tubes, cand.step_mL), nodes, crit,
                            volumetric=volumetric, with_sd=True)
    F, M0, st, band, sd = out
    Fp = F[:, C:, 0, :]
    info = np.einsum("gnp,gnq->gpq", Fp, Fp)                                # (G, P', P')
    M0 = info + (0.0 if M0 is None else M0)
    st = st[:, :C]
    res = (F[:, :C], M0, st, band[:, :C])
    return (*res, sd[:, :C]) if with_sd else res



def recipe_from_counts(study: Study, cand: Candidates, idx: np.ndarray, counts: np.ndarray) -> Recipe:
    """The recipe of ``counts`` tubes at candidates ``idx``, ordered the way a bench series is laid out."""
    chosen = np.repeat(idx, counts)
    rec = cand.recipe
    vols = {sid: rec.column(sid)[chosen] for sid in study.bench.dispensed_ids(rec)}
    order = np.lexsort([vols[s] for s in reversed(cand.designed_ids)])
    vols = {k: v[order] for k, v in vols.items()}
    return study.bench.make_recipe(vols)


def _neighbourhood(study: Study, coarse: Candidates, support: np.ndarray, factor, caps) -> Candidates:
    """Fine-grid candidates within ±factor steps of the coarse support, plus the coarse candidates
    themselves (so the refined search can always keep the coarse solution)."""
    g = study.bench
    devices = g.devices
    support = coarse.recipe.volumes_mL[support]
    ids = coarse.designed_ids
    cols = [coarse.recipe.stock_ids.index(s) for s in ids]
    rows = []
    offs = np.arange(-factor, factor + 1) * g.step_mL
    for sup in support:
        centre = sup[cols]
        grids = [np.maximum(c + offs, 0.0) for c in centre]
        mesh = np.stack([m.ravel() for m in np.meshgrid(*grids, indexing="ij")], axis=1)
        rows.append(mesh)
    rows.append(coarse.recipe.volumes_mL[:, cols])
    mesh = np.unique(np.round(np.concatenate(rows), 10), axis=0)
    room = g.room_mL - sum(g.fixed_mL.values())
    ok = mesh.sum(axis=1) <= room + 1e-9
    ok &= np.all((mesh == 0) | (mesh >= g.min_volume_mL - 1e-9), axis=1)
    for j, sid in enumerate(ids):
        dv = devices.stock_device[g.stock_index(sid)]
        if dv >= 0:
            ok &= mesh[:, j] <= devices.items[dv].capacity_mL + 1e-9
            vmin = delivery.smallest_delivery_mL(devices.items[dv])
            ok &= (mesh[:, j] == 0) | (mesh[:, j] >= vmin - 1e-9)
        if caps and sid in caps:
            ok &= mesh[:, j] <= caps[sid] + 1e-9
    rec = _complete(study, ids, mesh[ok], "f")
    return Candidates(rec, ids, rec.n_tubes, g.step_mL)


def _budget_overruns(study: Study, rec: Recipe) -> dict[str, tuple[float, float]]:
    """Stocks whose recipe use exceeds on_hand less rinse and dead volume: id -> (used, usable). The
    diluent fills the rest of each tube and is not capped."""
    return {sid: (used, have - (need - used)) for sid, used, need, have in stock_shortfalls(study.bench, rec)
            if sid != study.bench.diluent_id}
