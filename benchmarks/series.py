"""Benchmark: `kplan series` on the demo plan, every method, against the 2 s goal.

Scenario: the built-in teaching scenario (the demo plan). The survey needs bands, which the teaching
plan does not have, so an invented set is added for it (complex at 560 nm, a ligand band at 470 nm, a
weak metal band at 800 nm). Each method runs through the same function the command calls, three times;
the best time is printed against the goal. For the survey, whose inner work is vectorised over
wavelengths, the baseline in the same run is the plain way: one Cramér–Rao evaluation per wavelength
(model, expected tubes, error budget, Jacobian and F⁻¹ through the functions `kplan assess` uses, on the
plan moved to that wavelength), timed on every 25th wavelength and scaled to the whole grid; the SEs of
both ways are compared on those wavelengths.

The Job and mole-ratio series screen many candidate series on the glassware's grid at once (assess's own
range screen over the guess's uncertainty, batched); the baseline is the plain loop, one screen call per
candidate, timed on every 20th candidate and scaled.

Run: python benchmarks/series.py
"""

from __future__ import annotations

import time
from importlib import resources

import numpy as np

from planner.inference.precision import ReadingModel, cramer_rao, free_parameters, pack
from planner.inputs.plan import parse_plan_text
from planner.jobs.classic import plan_model, run_series
from planner.jobs.classic.survey import _epsilon_by_wavelength, _grid, _plan_at, _se_by_wavelength
from planner.jobs.compile import error_budget, expected_state
from planner.jobs.plan.even import even_series
from planner.model.compiled import tube_ions_M
from planner.paper.json_out import to_json

GOAL_S = 2.0
BANDS = """
[optics.bands]
ML = { peak_nm = 560, fwhm_nm = 110, epsilon_max = 1000.0 }
L = { peak_nm = 470, fwhm_nm = 90, epsilon_max = 900.0 }
M = { peak_nm = 800, fwhm_nm = 200, epsilon_max = 12.0 }

[[stock]]"""


def best_of(fn, repeat: int = 3) -> tuple[float, object]:
    best, out = np.inf, None
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t0)
    return best, out


def describe(method: str, s: dict) -> str:
    if method == "job":
        return f"extremum x_M = {s['extremum_mole_fraction']:.3f}; " + ", ".join(
            f"{d['model']} {d['separation_sd']:.1f} sd" for d in s["discrimination"]
        )
    if method == "calibration":
        f = s["fraction_converted"]
        return f"converted {f['at_guess']:.3f} at the guess, {f['worst']:.3f} at worst"
    if method == "mole-ratio":
        return f"break {s['break_ratio']:.3f} ± {s['break_ratio_sd']:.3f}"
    return f"{s['wavelength_nm']:g} nm, SE {s['se_at_wavelength']:.4f}"


def main() -> None:
    text = resources.files("planner.data").joinpath("scenarios", "teaching.toml").read_text(encoding="utf-8")
    plan = parse_plan_text(text)
    banded = parse_plan_text(text.replace("[[stock]]", BANDS, 1))
    print(f"{'method':<12} {'time / s':>9} {'goal / s':>9}  result")
    for method, p in (("job", plan), ("calibration", plan), ("mole-ratio", plan), ("survey", banded)):
        t, r = best_of(lambda m=method, q=p: run_series(q, m))
        s = to_json(r)
        what = describe(method, s)
        flag = "ok" if t <= GOAL_S else "SLOW"
        print(f"{method:<12} {t:9.3f} {GOAL_S:9.1f}  {flag}; {what} (exit {r.exit_code})")

    # survey baseline: one Cramér–Rao evaluation per wavelength
    model = plan_model(banded)
    recipe = even_series(banded)
    lam = _grid(banded)
    eps = _epsilon_by_wavelength(banded, model, lam)
    pick = np.arange(0, lam.size, 25)
    t0 = time.perf_counter()
    plain = [one_wavelength_se(_plan_at(banded, model, float(lam[k]), eps[k]), recipe) for k in pick]
    per = (time.perf_counter() - t0) / pick.size
    t_ours, _ = best_of(lambda: run_series(banded, "survey"))
    ours = _se_by_wavelength(banded, model, recipe, eps)[0][pick]
    ok = np.isfinite(plain) & np.isfinite(ours)
    diff = float(np.max(np.abs(np.asarray(plain)[ok] / ours[ok] - 1))) if ok.any() else float("nan")
    print(
        f"survey over {lam.size} wavelengths: vectorised {t_ours:.3f} s; one Cramér–Rao per wavelength "
        f"{per * lam.size:.2f} s (scaled from {pick.size}); ratio {per * lam.size / t_ours:.0f}×; "
        f"largest relative SE difference {diff:.1e}"
    )
    candidate_screen(plan)


def candidate_screen(plan) -> None:
    """The Job series' candidates of the teaching plan screened batched vs one call per candidate."""
    from planner.jobs.classic import job
    from planner.jobs.classic.common import pure_stock, screen

    model = plan_model(plan)
    m_id, l_id = pure_stock(plan, "M")[1], pure_stock(plan, "L")[1]
    g = plan.glassware
    room = job._Room(g.step_mL, 0.5, 9.5, (10.0, 10.0), job._peaks(model))
    S, vm = job._candidates(job._sums(room), 9, room)
    vol, tot = job._volumes(plan, (m_id, l_id), S, vm, g.step_mL)
    t_batch, (worst, _) = best_of(lambda: screen(plan, model, vol, tot))
    pick = np.arange(0, S.size, 20)
    t0 = time.perf_counter()
    one = [screen(plan, model, vol[k : k + 1], tot[k : k + 1])[0][0] for k in pick]
    per = (time.perf_counter() - t0) / pick.size
    diff = float(np.max(np.abs(np.asarray(one) - worst[pick])))
    print(
        f"Job candidates ({S.size} series of 9 tubes): batched screen {t_batch:.3f} s; one call per "
        f"candidate {per * S.size:.2f} s (scaled from {pick.size}); ratio {per * S.size / t_batch:.0f}×; "
        f"largest risk difference {diff:.1e}"
    )


def one_wavelength_se(p, recipe) -> float:
    m = plan_model(p)
    st = expected_state(m, recipe)
    cov = error_budget(p, m, recipe, st).total
    params = free_parameters(m, p.target, blank_offset=p.design.blank_offset)
    reading = ReadingModel(m, params, st.totals_M, tube_ions_M(m, recipe.volumes_mL, recipe.total_volume_mL))
    cr = cramer_rao(reading.jac(pack(m, params)[None, :])[0], cov)
    return float(cr.se[params.target])


if __name__ == "__main__":
    main()
