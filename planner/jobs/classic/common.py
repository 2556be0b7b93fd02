"""What every classic series shares: the corrected absorbance, grid snapping, curves between the tubes,
scaled stocks, the range check and the result object that ``kplan series`` prints.

Names from the rest of the package come through :mod:`._deps` (``plan_model`` and ``assess_tubes``
included), so a move elsewhere in the package changes that one file.
"""

from __future__ import annotations

import warnings
from contextlib import contextmanager
from dataclasses import dataclass, field, replace

import numpy as np

from ._deps import (
    RANGE_RISK,
    ActivityWarning,
    Assessment,
    Check,
    Model,
    Plan,
    PlanError,
    Recipe,
    TubeState,
    blanks,
    free_parameters,
    make_recipe,
    predict,
    range_band,
    tube_ions_M,
)
from ._deps import snap_to_grid as snap  # the one rounding to the grid (the methods call it snap)

STATUSES = ("pass", "warn", "fail")
# checks of kplan assess that keep their meaning for every classic series; the others (saturation
# window, conversion, …) judge a binding-curve design and would mislead here. The linear-range check is
# assess's own, so a series and ``kplan assess`` of its recipe always agree.
KEPT_ASSESS_CHECKS = (
    "linear-range",
    "glassware",
    "stock-budget",
    "ionic-strength",
    "hydrolysis",
    "protonation",
)
# cuvette path lengths on sale [common practice: 0.1–10 cm cells]
PATHS_CM = (0.1, 0.2, 0.5, 1.0, 2.0, 4.0, 5.0, 10.0)
# dilutions (and concentrations) of both stocks tried when no total keeps the readings in range
SCALES = (0.5, 2.0, 0.25, 4.0, 0.2, 5.0, 0.1, 10.0, 0.05, 20.0, 0.02, 50.0, 0.01, 100.0)


class SeriesInfeasible(PlanError):
    """The series cannot be made with these stocks and this glassware at the method's defaults: not bad
    input (exit 2) but a series that cannot answer its question (exit 1); the message says what would."""


@dataclass(frozen=True)
class ClassicSeries:
    """A classic series planned and judged.

    Attributes
    ----------
    method : "job" | "calibration" | "mole-ratio" | "survey".
    title : the plan's title.
    question : what the series is meant to answer, one sentence.
    recipe : the tubes (volumes in mL on the plan's grid); none when the series cannot be made.
    assessment : expected tubes and error budget of the recipe (no precision analysis), or None.
    checks : method checks followed by the kept checks of ``kplan assess``, worst first.
    answers : True when the series can answer its question (no check fails).
    verdict_reason : one sentence.
    extra : the method's own findings by their JSON key (``extremum_mole_fraction``, ``discrimination``, …),
        plain values and result objects (:func:`planner.paper.json_out.to_json` makes them JSON).
    columns : per-tube values shown beside the volumes: name -> (n,) array.
    notes : the method's findings, one line each, for people (the JSON carries the numbers).
    """

    method: str
    title: str
    question: str
    recipe: Recipe
    assessment: Assessment | None
    checks: tuple[Check, ...]
    answers: bool
    verdict_reason: str
    extra: dict = field(default_factory=dict, hash=False)
    columns: dict = field(default_factory=dict, hash=False)
    notes: tuple[str, ...] = ()

    def __repr__(self) -> str:
        return f"ClassicSeries({self.method}, {self.recipe.n_tubes} tubes, answers={self.answers})"

    @property
    def exit_code(self) -> int:
        return 0 if self.answers else 1


def infeasible(method: str, plan: Plan, question: str, exc: SeriesInfeasible) -> ClassicSeries:
    """The series that cannot be made: no tubes, one failing check that says why and what would."""
    ids = tuple(st.id for st in plan.stock)
    empty = Recipe((), ids, np.zeros((0, len(ids))), np.zeros(0))
    check = Check("feasible", "fail", f"{exc.key}: {exc.message}" if exc.key else exc.message)
    return ClassicSeries(
        method, plan.title, question, empty, None, (check,), False, f"cannot be made: {exc.message}"
    )


def finish(
    method: str,
    plan: Plan,
    question: str,
    recipe: Recipe,
    a: Assessment,
    own: list[Check],
    extra: dict,
    columns: dict,
    reason_ok: str,
    reason_bad: str | None = None,
    notes: tuple[str, ...] = (),
    range_fix: str = "",
) -> ClassicSeries:
    """Merge the method's checks with the kept assess checks, sort worst first and decide the verdict.

    ``range_fix`` is what would keep the readings in range, added to assess's linear-range check when it
    does not pass (its status stays assess's own)."""
    kept = [
        Check(c.id, c.status, f"{c.message}; {range_fix}")
        if c.id == "linear-range" and c.status != "pass" and range_fix
        else c
        for c in a.checks
        if c.id in KEPT_ASSESS_CHECKS
    ]
    checks = sorted(own + kept, key=lambda c: -STATUSES.index(c.status))
    failed = [c for c in checks if c.status == "fail"]
    answers = not failed
    if answers:
        reason = reason_ok
    else:
        reason = reason_bad or f"check '{failed[0].id}' fails: {failed[0].message}"
    return ClassicSeries(
        method, plan.title, question, recipe, a, tuple(checks), answers, reason, extra, columns, tuple(notes)
    )


def series_points(tubes, x_name: str, x, y, sd) -> list[dict]:
    """Each tube's point of the series' plot: its ``x_name`` value, the corrected absorbance and that
    reading's ±2 sd band (the method's ``series`` finding)."""
    return [
        {
            "tube": t,
            x_name: float(x[i]),
            "corrected_absorbance": float(y[i]),
            "band_2sd": [float(y[i] - 2 * sd[i]), float(y[i] + 2 * sd[i])],
        }
        for i, t in enumerate(tubes)
    ]


def curve_points(x_name: str, x, y) -> dict:
    """The smooth curve between the tubes (every other point), as the method's ``curve`` finding."""
    return {x_name: x[::2].tolist(), "corrected_absorbance": y[::2].tolist()}


# ----------------------------------------------------------------------------------------------------
# numbers shared by the methods


def pure_stock(plan: Plan, comp: str) -> tuple[int, str, float]:
    """(index, id, concentration) of the first stock that holds ``comp`` ("M" or "L") and not the other."""
    other = "L" if comp == "M" else "M"
    for k, s in enumerate(plan.stock):
        if s.conc.get(comp) and not s.conc.get(other):
            return k, s.id, float(s.conc[comp])
    name = "metal" if comp == "M" else "ligand"
    raise PlanError(
        "stock",
        f"a classic series needs a stock of the {name} alone: add a [[stock]] with "
        f"conc = {{ {comp} = '...' }} and no {other}",
    )


def capacity_mL(plan: Plan, sid: str) -> float:
    """Largest single delivery of the dispenser that delivers ``sid`` (inf when none is named)."""
    d = plan.dispenser_for(sid)
    return float(d.capacity_mL) if d is not None else float("inf")


def fill_volumes(plan: Plan, dispensed: dict[str, np.ndarray]) -> tuple[np.ndarray, np.ndarray]:
    """(…, k) volumes of every stock (diluent filled under ``to-mark``) and (…,) total volumes, for
    arbitrary (unsnapped, batched) compositions; used for curves between the tubes."""
    ids = [s.id for s in plan.stock]
    shape = np.broadcast(*dispensed.values()).shape
    vol = np.zeros(shape + (len(ids),))
    for sid, v in dispensed.items():
        vol[..., ids.index(sid)] = v
    for sid, v in plan.design.fixed.items():
        if sid not in dispensed:
            vol[..., ids.index(sid)] = v
    tube = plan.glassware.tube_volume_mL
    dil = plan.diluent
    if dil is not None and dil.id not in dispensed:
        j = ids.index(dil.id)
        vol[..., j] = 0.0
        vol[..., j] = np.maximum(tube - vol.sum(axis=-1), 0.0)
        total = np.full(shape, tube)
    else:
        total = vol.sum(axis=-1)
    return vol, total


def series_recipe(plan: Plan, dispensed: dict[str, np.ndarray], tubes: list[str]) -> Recipe:
    """A recipe from the dispensed volumes; under ``make_up = "added"`` the diluent (if the plan has one)
    is dispensed too, so every tube has the tube volume."""
    cols = dict(dispensed)
    dil = plan.diluent
    if plan.glassware.make_up == "added" and dil is not None and dil.id not in cols:
        others = sum(np.asarray(v, dtype=float) for v in cols.values())
        others = others + sum(v for k, v in plan.design.fixed.items() if k not in cols and k != dil.id)
        cols[dil.id] = snap(np.maximum(plan.glassware.tube_volume_mL - others, 0.0), plan.glassware.step_mL)
    return make_recipe(plan, cols, tubes)


@contextmanager
def hypothetical():
    """Silence activity-model warnings while exploring hypothetical tubes (a 10 M excess, a 1000-fold
    stock): the planned tubes are assessed, and warned about, without it."""
    with warnings.catch_warnings(), np.errstate(over="ignore", invalid="ignore"):
        warnings.simplefilter("ignore", ActivityWarning)
        yield


def predict_volumes(model: Model, vol: np.ndarray, total: np.ndarray, **kw) -> TubeState:
    """Tube states for (…, n, k) volumes, vectorised over every leading axis."""
    tot = (vol @ model.stock_conc_M) / total[..., None]
    ions = tube_ions_M(model, vol, total)
    with hypothetical():
        return predict(model, tot, ions, warn=False, **kw)


def free_absorbance(model: Model, totals_M: np.ndarray) -> np.ndarray:
    """b·(ε_M·[M]₀ + ε_L·[L]₀): what the free reagents would read if nothing bound."""
    eM, eL = model.epsilon_M_cm[0], model.epsilon_M_cm[1]
    return model.path_cm * (eM * totals_M[..., 0] + eL * totals_M[..., 1])


def corrected(model: Model, state: TubeState) -> np.ndarray:
    """Corrected absorbance Y = A − ε_M·[M]₀·b − ε_L·[L]₀·b (the reading less the free reagents')."""
    return state.absorbance - free_absorbance(model, state.totals_M)


def scaled_model(model: Model, scale: float, comps=(0, 1)) -> Model:
    """The model with the M and/or L content of every stock multiplied by ``scale`` (other ions kept)."""
    conc = model.stock_conc_M.copy()
    conc[:, list(comps)] *= scale
    return replace(model, stock_conc_M=conc)


def scaled_in_range(model: Model, recipe: Recipe, scale: float) -> tuple[Model, TubeState]:
    """The recipe with both reagents ``scale`` times as concentrated and, where its readings would pass
    the top of the linear range, the path shortened so the highest one sits at the top (absorbance is
    proportional to the path; the noise then stays that of readings inside the range)."""
    ms = scaled_model(model, scale)
    tot = (recipe.volumes_mL @ ms.stock_conc_M) / recipe.total_volume_mL[:, None]
    ions = tube_ions_M(ms, recipe.volumes_mL, recipe.total_volume_mL)
    with hypothetical():
        st = predict(ms, tot, ions, warn=False)
        hi = model.linear_range[1]
        top = float(st.absorbance_true.max())
        if top > hi:
            ms = replace(ms, path_cm=ms.path_cm * hi / top)
            st = predict(ms, tot, ions, warn=False)
    return ms, st


def screen(plan: Plan, model: Model, vol: np.ndarray, total: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The linear-range screen of ``kplan assess`` for B candidate series at once.

    Parameters
    ----------
    vol : (B, n, k) every stock's volume in each tube of each candidate; total : (B, n) tube volumes.

    Returns
    -------
    worst : (B,) the largest chance of a reading leaving the window over the guesses' uncertainty.
    inside : (B,) every reading inside the window at the guess (blanks held to the top only).
    """
    params = free_parameters(plan, model)
    tot = (vol @ model.stock_conc_M) / total[..., None]
    ions = tube_ions_M(model, vol, total)
    B, n = tot.shape[:2]
    lo, hi = model.linear_range
    with hypothetical():
        st = predict(model, tot, ions, warn=False)
        a = st.absorbance
        inside = np.all((a <= hi) & ((a >= lo) | blanks(tot)), axis=1)
        if params.size:
            risk, _, _ = range_band(model, params, tot.reshape(B * n, 2), ions.reshape(B * n, -1))
            worst = risk.reshape(B, n).max(axis=1)
        else:
            worst = np.where(inside, 0.0, 1.0)
    return worst, inside


def pick(worst: np.ndarray, inside: np.ndarray) -> tuple[int, str]:
    """The candidate to plan (candidates in rising concentration) and the linear-range status it gets:
    the most concentrated that stays in range over the guess's uncertainty ("pass"); else, of those
    inside at the guess, the least at risk ("warn"); else the least at risk ("fail")."""
    ok = np.flatnonzero(worst <= RANGE_RISK + 1e-12)
    if ok.size:
        return int(ok[-1]), "pass"
    idx = np.flatnonzero(inside)
    if idx.size:
        return int(idx[np.argmin(worst[idx])]), "warn"
    return int(np.argmin(worst)), "fail"


def what_would_fit(model: Model, fits, conc_label: str, comps=(0, 1)) -> str:
    """What would keep every reading inside the range over the guess's uncertainty: the nearest cuvette
    path on sale, and the nearest dilution (or concentration) of the stocks of ``comps`` (0 metal, 1
    ligand), for which ``fits(model, scale)`` holds — it screens the method's candidate series with the
    changed model, ``scale`` being the factor on those stocks' concentrations (1 for a path). Where only
    the guess, not its whole range, can be kept inside, that is said instead."""
    paths = sorted(
        (p for p in PATHS_CM if abs(p - model.path_cm) > 1e-9), key=lambda p: abs(np.log(p / model.path_cm))
    )
    for level, good in (("pass", ("pass",)), ("warn", ("pass", "warn"))):
        ways = []
        for path in paths:
            if fits(replace(model, path_cm=path), 1.0) in good:
                ways.append(f"a {path:g} cm cell instead of {model.path_cm:g} cm")
                break
        for sc in SCALES:
            if fits(scaled_model(model, sc, comps), sc) in good:
                how = f"diluted ×{1 / sc:g}" if sc < 1 else f"×{sc:g} as concentrated"
                ways.append(f"{conc_label} {how}")
                break
        if ways and level == "pass":
            return "what would keep every reading inside over the guess's range: " + ", or ".join(ways)
        if ways:
            return (
                "no cell on sale and no dilution keeps every reading inside over the whole range of the "
                "guess; inside at the guess at least: " + ", or ".join(ways)
            )
    return (
        "no cell on sale and no dilution of the stocks keeps the readings inside: they span more of the "
        "window than it holds — a narrower series (fewer points, a smaller ratio range)"
    )


def grid_between(screened: np.ndarray, v: float, step: float, upward: bool, limit: int = 200) -> np.ndarray:
    """The grid volumes not screened yet between ``v`` and the next screened volume above it (``upward``:
    ``v`` is in range and a larger one may be too), or between ``v``'s two neighbours (none is in range:
    the least at risk may lie between); at most ``limit`` of them. ``screened`` is rising."""
    i = int(np.searchsorted(screened, v - 1e-9))
    lo = v if upward else (float(screened[i - 1]) if i > 0 else v)
    hi = float(screened[i + 1]) if i + 1 < screened.size else v
    grid = snap(np.arange(np.round(lo / step) + 1, np.round(hi / step)) * step, step)
    return grid[~np.isin(grid, screened)][:limit]


def status_of(worst: np.ndarray, inside: np.ndarray) -> str:
    """The best linear-range status any of the candidates screened reaches."""
    return pick(worst, inside)[1] if worst.size else "fail"


def fmt_conc(c_M: float) -> str:
    """A concentration for a message: mM or µM as fits."""
    if not np.isfinite(c_M):
        return "—"
    if c_M >= 0.1:
        return f"{c_M:.3g} M"
    if c_M >= 1e-4:
        return f"{c_M * 1e3:.3g} mM"
    return f"{c_M * 1e6:.3g} µM"
