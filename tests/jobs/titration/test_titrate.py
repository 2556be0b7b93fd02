"""Designing, assessing, fitting and printing an in-cuvette titration through the command line."""

from __future__ import annotations

import json

import numpy as np

from planner.inference.simulate import simulate
from planner.inputs.plan import load_plan
from planner.inputs.schedule import Schedule, parse_schedule_csv, schedule_to_csv
from planner.jobs.compile import compile_study
from planner.jobs.titration.titrate import design_titration, equal_schedule, schedule_points
from planner.paper.json_out import to_json

from ...cli.test_design_after import run
from ...conftest import ROOT

EXAMPLE = ROOT / "examples" / "titration-cuvette.toml"


def test_design_beats_or_matches_equal_aliquots():
    st = compile_study(load_plan(EXAMPLE))
    d = design_titration(st)
    assert d.se_target <= d.se_equal * 1.001
    assert d.recipe.total_volume_mL.max() <= st.bench.titration.max_volume_mL + 1e-9
    lo, hi = st.model.linear_range
    a = np.array([r["absorbance"] for r in to_json(d)["tubes"]])
    assert np.all((a >= lo) & (a <= hi))
    eq = equal_schedule(st)
    assert np.allclose(eq.aliquot_mL, eq.aliquot_mL[0]) and eq.added_mL[-1] <= 1.0 + 1e-9


def test_schedule_csv_round_trip():
    s = Schedule(("1", "2", "3"), np.array([0.01, 0.025, 0.05]))
    back = parse_schedule_csv(schedule_to_csv(s))
    assert back.steps == s.steps and np.allclose(back.aliquot_mL, s.aliquot_mL) and back.absorbance is None


def test_titration_through_the_command_line(tmp_path, capsys, monkeypatch):
    out_dir = tmp_path / "d"
    code, out, err = run(capsys, monkeypatch, "design", EXAMPLE, "--out", out_dir, "--json")
    assert code == 0, err
    summary = json.loads(out)
    assert summary["titration"]["se_ratio_vs_equal"] >= 0.999
    sched = out_dir / "schedule.csv"
    code, out, err = run(capsys, monkeypatch, "assess", EXAMPLE, sched, "--json", "--trials", "200")
    assert code in (0, 1), err
    a = json.loads(out)
    assert len(a["tubes"]) == summary["titration"]["additions"]
    # simulated readings at log β = 4.3, fitted back through kplan fit
    st = compile_study(load_plan(EXAMPLE))
    s = parse_schedule_csv(sched.read_text(encoding="utf-8"))
    rec = schedule_points(st, s)
    lb = st.model.log_beta.copy()
    lb[0] = 4.3
    A = simulate(st.bench, st.model, rec, np.random.default_rng(2), 1, log_beta=lb).absorbance[0]
    readings = tmp_path / "readings.csv"
    readings.write_text(schedule_to_csv(Schedule(s.steps, s.aliquot_mL, A)), encoding="utf-8")
    code, out, err = run(capsys, monkeypatch, "fit", EXAMPLE, readings, "--json")
    assert code == 0, err
    f = json.loads(out)
    p = f["parameters"][0]
    assert abs(p["estimate"] - 4.3) < 4 * p["se"]
    code, out, err = run(
        capsys, monkeypatch, "sheet", EXAMPLE, sched, "--html", "--out", tmp_path / "s.html", "--trials", "0"
    )
    assert code == 0, err
    html = (tmp_path / "s.html").read_text(encoding="utf-8")
    assert "Titration sheet" in html and "Added so far" in html and "safety data sheet" in html.lower()
    over = tmp_path / "over.csv"
    over.write_text(
        "step,aliquot_mL\n1,0.1\n" * 1 + "".join(f"{k},0.1\n" for k in range(2, 12)), encoding="utf-8"
    )
    code, _, err = run(capsys, monkeypatch, "assess", EXAMPLE, over)
    assert code == 2 and "max_volume" in err and len(err.strip().splitlines()) == 1


def test_a_burette_titration_is_designed_within_one_filling():
    # the 10 mL burette holds less than the cell's room (20 mL): every schedule tried, and the equal
    # portions it is compared with, stay within one filling [common practice: no refill mid-titration]
    from planner.inputs.plan import parse_plan_text

    text = (ROOT / "examples" / "titration-burette.toml").read_text(encoding="utf-8")
    text = text.replace('tube_volume = "35.00 mL"', 'tube_volume = "45.00 mL"')  # max_volume ≤ the vessel
    st = compile_study(parse_plan_text(text.replace('max_volume = "35.00 mL"', 'max_volume = "45.00 mL"')))
    d = design_titration(st)
    assert d.schedule.added_mL[-1] <= 10.0 + 1e-9
    assert equal_schedule(st).added_mL[-1] <= 10.0 + 1e-9
    assert np.isfinite(d.se_equal) and d.se_target <= d.se_equal * (1 + 1e-9)
