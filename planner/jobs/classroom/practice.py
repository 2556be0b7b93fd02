"""Simulated students and classes, for trying the grading before a lab, for the tests and the benchmarks.

A class shares one bottle of each stock (each stock's concentration error drawn once for the class);
every student has their own dispensers and makes and reads their own tubes. The world may differ from
the plan's guess (``truth``: the true constants and absorptivities). One slip per student can be
injected (:data:`planner.jobs.classroom.mixup.KINDS`, and ``dilute-stock``: a ten-fold dilute stock, one
of the ``wrong-stock`` slips); :func:`inject` returns, with the readings, a
fragment the right explanation's text contains and the size of the slip (the whitened norm of the change
it makes to the noise-free readings: below ~3 it hides in the noise).
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from ...inference.precision import whitening
from ...inference.simulate import simulate
from ...inference.study import Study
from ...inputs.gradebook import KeyCard
from ...inputs.recipe import Recipe
from ...model.compiled import Model
from ...uncertainty.budget import error_budget
from ..compile import expected_state
from .slips import MISREAD_STEPS_ML, TENFOLD, fmt_mL, used_stocks

BAND_SD = 2.0  # the key's acceptance band, as kplan cards writes it: ±2 sd of each tube's full budget
DRIFT_PER_READING = 0.01  # absorbance per reading
NOISE_FACTOR = 5.0  # photometric noise × this
PERCENT_T = "percent-T"


def world(
    study: Study, rng: np.random.Generator, *, log_beta_shift: float = 0.0, epsilon_factor: float = 1.0
) -> Model:
    """The model of a world off the plan's guess: every log β shifted, every fitted ε scaled, and one bottle
    of each stock with its concentration error drawn (the class's bottles)."""
    m = study.model
    eps = m.epsilon_M_cm * np.where(m.epsilon_rsd > 0, epsilon_factor, 1.0)
    conc = m.stock_conc_M * (1.0 + m.stock_conc_rsd * rng.standard_normal(m.stock_conc_M.shape[0]))[:, None]
    return replace(m, log_beta=m.log_beta + log_beta_shift, epsilon_M_cm=eps, stock_conc_M=conc)


def inject(
    study: Study, recipe: Recipe, kind: str | None, rng: np.random.Generator, *, truth: Model | None = None
) -> tuple[np.ndarray, str, float]:
    """One student's readings of ``recipe`` with one slip of ``kind`` (None: clean).

    ``truth`` is the world (default: the plan's guess, with the stock errors drawn for this student alone);
    given, its stocks are the class's bottles and are not redrawn."""
    model, bench = study.model, study.bench
    real = truth or model
    n = recipe.n_tubes
    V, Vt, C = recipe.volumes_mL.copy(), recipe.total_volume_mL.copy(), real.stock_conc_M.copy()
    used = used_stocks(bench, recipe)
    i = int(rng.integers(n))
    j = used[int(rng.integers(len(used)))]
    tag = ""
    if kind in ("wrong-stock", "dilute-stock"):
        fac = TENFOLD[int(rng.integers(len(TENFOLD)))] if kind == "wrong-stock" else 0.1
        C[j] = C[j] * fac
        tag = f"{recipe.stock_ids[j]} taken from a bottle {fac:g}×"
    elif kind == "swapped-stocks" and len(used) >= 2:
        a, b = used[0], used[1]
        V[:, [a, b]] = V[:, [b, a]]
        tag = f"{recipe.stock_ids[a]} and {recipe.stock_ids[b]} swapped"
    elif kind == "misread-volume":
        d = MISREAD_STEPS_ML[int(rng.integers(2))]  # the 1 mL slips (0.1 mL ones hide in the noise)
        if V[i, j] + d < 0:
            d = -d
        V[i, j] += d
        tag = f"{recipe.tubes[i]}: {recipe.stock_ids[j]} {fmt_mL(V[i, j])}"
    elif kind == "not-made-up":
        jd = recipe.stock_ids.index(bench.diluent_id)
        i = int(np.argmax(V[:, jd] * (1 + 0.01 * rng.random(n))))  # a tube with water to leave out
        Vt[i] -= 0.5 * V[i, jd]
        tag = f"{recipe.tubes[i]} not made up"
    m = replace(real, stock_conc_M=C)
    rec = Recipe(recipe.tubes, recipe.stock_ids, V, Vt)
    sim = simulate(bench, m, rec, rng, 1, stock=truth is None)
    a = sim.absorbance[0]
    clean = expected_state(real, recipe)
    shifted = expected_state(m, rec).absorbance
    a, shifted, tag = _reading_slip(kind, a, shifted, clean.absorbance, sim, recipe, rng, tag)
    if kind == PERCENT_T:
        return a, tag, float("inf")  # never hidden: the numbers are not absorbances
    W = whitening(error_budget(bench, model, recipe, expected_state(model, recipe)).total)
    return a, tag, float(np.linalg.norm(W @ (shifted - clean.absorbance)))


def _reading_slip(kind, a, shifted, clean, sim, recipe: Recipe, rng, tag):
    """Slips made at the instrument: on the readings, not in the tubes."""
    n = a.size
    if kind == "swapped-tubes":
        i = int(rng.integers(n))
        k = (i + 1 + int(rng.integers(n - 1))) % n
        a[[i, k]] = a[[k, i]]
        shifted = clean.copy()
        shifted[[i, k]] = shifted[[k, i]]
        lo, hi = sorted((i, k))
        tag = f"{recipe.tubes[lo]} and {recipe.tubes[hi]} swapped"
    elif kind == "wavelength":
        a, shifted, tag = a * 0.85, clean * 0.85, "scaled"
    elif kind == "blank":
        a, shifted, tag = a + 0.05, clean + 0.05, "shifted"
    elif kind == "drift":
        step = DRIFT_PER_READING * np.arange(1.0, n + 1.0)
        a, shifted, tag = a + step, clean + step, "drifted"
    elif kind == "noise":
        extra = np.sqrt(NOISE_FACTOR**2 - 1.0) * sim.state.absorbance_sd[0] * rng.standard_normal(n)
        a, shifted, tag = a + extra, clean + extra, "scatter"
    elif kind == PERCENT_T:
        a, tag = 100.0 * 10.0 ** (-a), "%T"
    return a, shifted, tag


def key_cards(study: Study, recipes: list[Recipe], students: list[str]) -> tuple[KeyCard, ...]:
    """The instructor's key for these recipes, as kplan cards writes it: each tube's expected reading at the
    plan's guess with a ±2 sd band of its full error budget."""
    cards = []
    for k, (sid, rec) in enumerate(zip(students, recipes, strict=True)):  # bookkeeping per student
        state = expected_state(study.model, rec)
        sd = np.sqrt(np.diag(error_budget(study.bench, study.model, rec, state).total))
        a = state.absorbance
        cards.append(
            KeyCard(sid, f"Student {k + 1}", "AB"[k % 2], rec, a, a - BAND_SD * sd, a + BAND_SD * sd)
        )
    return tuple(cards)


def student_recipes(base: Recipe, study: Study, count: int, rng: np.random.Generator) -> list[Recipe]:
    """``count`` different recipes near ``base`` on the plan's grid: each dispensed volume moved by up to
    three grid steps (staying at or above the smallest volume), the diluent making up the rest."""
    bench = study.bench
    step, vmin = bench.step_mL, bench.min_volume_mL
    cols = [base.stock_ids.index(s) for s in bench.dispensed_ids(base)]
    out = []
    for _ in range(count):
        V = base.volumes_mL.copy()
        moved = V[:, cols] + step * rng.integers(-3, 4, size=(base.n_tubes, len(cols)))
        V[:, cols] = np.where(V[:, cols] > 0, np.maximum(np.round(moved / step) * step, vmin), 0.0)
        if bench.to_mark and bench.diluent_id in base.stock_ids:
            jd = base.stock_ids.index(bench.diluent_id)
            V[:, jd] = base.total_volume_mL - (V.sum(axis=1) - V[:, jd])
        out.append(Recipe(base.tubes, base.stock_ids, np.round(V, 6), base.total_volume_mL.copy()))
    return out


def simulate_class(
    study: Study,
    cards: tuple[KeyCard, ...],
    slips: dict[str, str],
    rng: np.random.Generator,
    *,
    truth: Model | None = None,
) -> tuple[dict[str, dict[str, float]], dict[str, tuple[str, float]]]:
    """Results (student → tube → reading, rounded to the display's 0.0001) of a class in the world
    ``truth`` (default: a world at the guess with the class's bottles drawn), with ``slips`` (student →
    kind); returns the results and, per slipped student, the fragment their explanation should contain and
    the slip's size (see :func:`inject`)."""
    real = truth or world(study, rng)
    results, tags = {}, {}
    for c in cards:  # one student at a time: each has their own slip and dispensers
        kind = slips.get(c.student)
        a, tag, size = inject(study, c.recipe, kind, rng, truth=real)
        results[c.student] = {t: float(x) for t, x in zip(c.recipe.tubes, np.round(a, 4), strict=True)}
        if kind is not None:
            tags[c.student] = (tag, size)
    return results, tags
