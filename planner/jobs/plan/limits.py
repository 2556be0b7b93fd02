"""What limits the precision of a recipe, and the one change that would help most.

The variance of the target's log β is split by source — the photometer, each dispenser (its random
errors and calibration), the make-up flask, each stock's concentration — by the exact sandwich
decomposition of :mod:`planner.inference.shares` (the shares sum to 1), in the fit as it will be made.
Beside them: how much having to fit the absorptivities (the guess's ε is only a guess) multiplies that
variance, and the SE were they known. Then a short list of changes a chemist can make
is priced by assessing the same recipe again with each (the Cramér–Rao SE, full error budget): another
dispenser from the glassware catalogue for each device, a longer cuvette that keeps every reading in the
linear range, more tubes (the recipe made several times), a standardised stock. The best is reported,
and when the goal is missed, which of them would reach it.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from ...inference.precision import Parameters, ReadingModel, cramer_rao, whitening_of
from ...inference.shares import variance_shares
from ...inference.study import Study
from ...inputs.recipe import Recipe, concat_recipes
from ...model.compiled import tube_ions_M
from ...uncertainty import catalogue, delivery
from ...uncertainty.budget import ErrorBudget, error_budget
from ...uncertainty.sources import error_sources
from ..compile import expected_state
from .checks import RANGE_RISK, range_band

# cuvette path lengths on sale [common practice: 0.1–10 cm rectangular and cylindrical cells]
PATHS_CM = (0.1, 0.2, 0.5, 1.0, 2.0, 4.0, 5.0, 10.0)
# a stock standardised against a primary standard (e.g. an EDTA titration) is known to about 0.1 %
# [common practice]
STANDARDISED_RSD = 0.001
MAX_TUBES = 200  # the most tubes a change may ask for (the command line's limit)
WORTH = 0.99  # a change must lower the SE by at least 1 % to be offered
DEVICE_KINDS = ("burette", "graduated-pipette", "micropipette")  # deliver any volume on a grid


@dataclass(frozen=True)
class Share:
    """One source's share of Var(log β[target]); ``kind`` as in :mod:`planner.uncertainty.sources`."""

    source: str
    share: float
    kind: str
    ref: str = ""  # the stock id (kind "stock")


@dataclass(frozen=True)
class Change:
    """A change priced by assessing the recipe again with it: ``se`` is SE(log β[target]) after it."""

    change: str
    se: float
    kind: str


@dataclass(frozen=True)
class Limits:
    """What limits the precision of a recipe.

    Attributes
    ----------
    target : the species whose constant is resolved.
    se : SE(log β[target]) of the recipe as it is.
    goal : the plan's goal_se.
    shares : by source, largest first (they sum to 1).
    changes : the changes priced, best first (empty unless asked for).
    epsilon_factor : Var / Var with the fitted absorptivities known (1 when none is fitted).
    epsilon_names : the fitted absorptivities.
    """

    target: str
    se: float
    goal: float
    shares: tuple[Share, ...]
    changes: tuple[Change, ...] = ()
    epsilon_factor: float = 1.0
    epsilon_names: tuple[str, ...] = ()

    @property
    def best(self) -> Change | None:
        return self.changes[0] if self.changes else None

    @property
    def reaches_goal(self) -> tuple[Change, ...]:
        return tuple(c for c in self.changes if c.se <= self.goal)

    @property
    def se_if_epsilon_known(self) -> float:
        """SE(log β[target]) were the fitted absorptivities known."""
        return float(self.se / np.sqrt(self.epsilon_factor))

    def lines(self) -> list[str]:
        """The findings for people, one line each."""
        shown = [s for s in self.shares if s.share >= 0.005][:6]
        out = [
            f"what limits SE(log β[{self.target}]) = {self.se:.3g} (shares of its variance): "
            + ", ".join(f"{s.source} {s.share:.0%}" for s in shown)
        ]
        if self.epsilon_names and self.epsilon_factor > 1.0 + 1e-9:
            out.append(
                f"fitting {', '.join(self.epsilon_names)} alongside the constant multiplies its variance by "
                f"×{self.epsilon_factor:.3g} (SE {self.se_if_epsilon_known:.3g} were ε known)"
            )
        best = self.best
        if best is not None:
            others = ", ".join(f"{c.change}: {c.se:.3g}" for c in self.changes[1:4])
            out.append(
                f"the change that would help most: {best.change} — SE {self.se:.3g} → {best.se:.3g}"
                + (f" (others: {others})" if others else "")
            )
        elif self.changes == () and self.shares:
            out.append("no single change on the list (another dispenser, a longer path, more tubes) helps")
        return out


def precision_shares(
    study: Study,
    recipe: Recipe,
    state,
    budget: ErrorBudget,
    J: np.ndarray,
    params: Parameters,
    se: float,
    goal: float,
) -> Limits | None:
    """Shares of Var(log β[target]) by source, largest first, and the factor fitting ε costs; None when the
    target is not fitted or the information is singular."""
    t = params.target
    if t < 0 or J.shape[0] < params.size:
        return None
    sources = error_sources(study.bench, study.model, recipe, state, budget)
    eps = [p for p in range(params.size) if params.kind[p] == 1]
    try:
        vs = variance_shares(J, [s.cov for s in sources], t, eps)
    except np.linalg.LinAlgError:
        return None
    if not np.isfinite(vs.variance) or vs.variance <= 0:
        return None
    shares = [
        Share(s.label, float(v), s.kind, recipe.stock_ids[s.index] if s.kind == "stock" else "")
        for s, v in zip(sources, vs.shares, strict=True)
    ]
    names = tuple(params.names[p].replace("epsilon", "ε") for p in eps)
    return Limits(
        study.target,
        se,
        goal,
        tuple(sorted(shares, key=lambda s: -s.share)),
        epsilon_factor=float(vs.nuisance_factor),
        epsilon_names=names,
    )


def target_se(study: Study, recipe: Recipe, log_beta: np.ndarray | None = None) -> float:
    """Cramér–Rao SE(log β[target]) of ``recipe`` (full error budget) at ``log_beta`` (default the guess)."""
    model, params = study.model, study.params
    state = expected_state(model, recipe, log_beta=log_beta)
    budget = error_budget(study.bench, model, recipe, state)
    ions = tube_ions_M(model, recipe.volumes_mL, recipe.total_volume_mL)
    theta = params.guess.copy()
    if log_beta is not None:
        for p in range(params.size):
            if params.kind[p] == 0:
                theta[p] = log_beta[params.index[p]]
    J = ReadingModel(model, params, state.totals_M, ions).jac(theta[None, :])[0]
    se = cramer_rao(J, W=whitening_of(budget)).se
    return float(se[params.target]) if params.target >= 0 else float("nan")


def what_would_help(study: Study, recipe: Recipe, limits: Limits, log_beta=None) -> Limits:
    """``limits`` with the changes priced (best first; only those that lower the SE by ≥ 1 %)."""
    se = limits.se
    if not np.isfinite(se) or study.params.target < 0:
        return limits
    found: list[Change] = []
    for make in (_device_changes, _path_change, _tube_changes, _stock_changes):
        found.extend(make(study, recipe, limits, log_beta))
    good = sorted((c for c in found if np.isfinite(c.se) and c.se <= WORTH * se), key=lambda c: c.se)
    return replace(limits, changes=tuple(good))


def _device_changes(study, recipe, limits, log_beta) -> list[Change]:
    """For each dispenser the recipe uses: the catalogue device (class A or classless) that delivers every
    volume it delivers here in one go and gives the smallest SE."""
    bench = study.bench
    devices = bench.devices
    out = []
    for j, item in enumerate(devices.items):
        ks = [k for k, sid in enumerate(recipe.stock_ids) if devices.stock_device[k] == j]
        v = recipe.volumes_mL[:, ks]
        v = v[v > 0]
        if bench.titration is not None or v.size == 0:
            continue
        best = None
        for cand in catalogue.catalogue():
            if cand.kind not in DEVICE_KINDS or cand.cls not in (None, "A") or cand == item:
                continue
            if cand.capacity_mL < v.max() - 1e-9 or delivery.smallest_delivery_mL(cand) > v.min() + 1e-9:
                continue
            items = list(devices.items)
            items[j] = cand
            s = replace(study, bench=replace(bench, devices=replace(devices, items=tuple(items))))
            se = target_se(s, recipe, log_beta)
            if best is None or se < best.se:
                sids = ", ".join(recipe.stock_ids[k] for k in ks)
                best = Change(f"deliver {sids} with a {cand.label} instead of the {item.label}", se, "device")
        if best is not None:
            out.append(best)
    return out


def _path_change(study, recipe, limits, log_beta) -> list[Change]:
    """The longest cuvette on sale (longer than the plan's) whose readings all stay in the linear range
    over the guess's uncertainty, by the same screen as the linear-range check."""
    model, params = study.model, study.params
    ions = tube_ions_M(model, recipe.volumes_mL, recipe.total_volume_mL)
    state = expected_state(model, recipe)
    for path in sorted((p for p in PATHS_CM if p > model.path_cm * 1.001), reverse=True):
        m = replace(model, path_cm=path)
        risk, _, _ = range_band(m, params, state.totals_M, ions)
        if np.all(risk <= RANGE_RISK + 1e-12):
            s = replace(study, model=m)
            return [
                Change(
                    f"a {path:g} cm cuvette instead of {model.path_cm:g} cm",
                    target_se(s, recipe, log_beta),
                    "path",
                )
            ]
    return []


def _tube_changes(study, recipe, limits, log_beta) -> list[Change]:
    """The recipe made twice; and when the goal is missed, the fewest repeats that reach it."""
    n = recipe.n_tubes
    out = []
    top = MAX_TUBES // max(n, 1)
    if top < 2:
        return out
    se2 = target_se(study, _repeat(recipe, 2), log_beta)
    out.append(Change(f"{2 * n} tubes (each tube made twice)", se2, "tubes"))
    if limits.se > limits.goal and se2 > limits.goal:
        for r in range(3, top + 1):
            se_r = target_se(study, _repeat(recipe, r), log_beta)
            if se_r <= limits.goal:
                out.append(Change(f"{r * n} tubes (each tube made {r} times)", se_r, "tubes"))
                break
    return out


def _repeat(recipe: Recipe, r: int) -> Recipe:
    return concat_recipes([recipe] * r, [f"r{i + 1}" for i in range(r)])


def _stock_changes(study, recipe, limits, log_beta) -> list[Change]:
    """Each stock whose concentration error carries ≥ 5 % of the variance, standardised to 0.1 %."""
    model = study.model
    out = []
    for sh in limits.shares:
        if sh.kind != "stock" or sh.share < 0.05:
            continue
        sid = sh.ref
        k = model.stock_ids.index(sid)
        if model.stock_conc_rsd[k] <= STANDARDISED_RSD:
            continue
        rsd = model.stock_conc_rsd.copy()
        rsd[k] = STANDARDISED_RSD
        s = replace(study, model=replace(model, stock_conc_rsd=rsd))
        out.append(
            Change(
                f"stock {sid} standardised to ±{STANDARDISED_RSD:.1%} (e.g. by titration)",
                target_se(s, recipe, log_beta),
                "stock",
            )
        )
    return out
