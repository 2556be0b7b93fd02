"""The one JSON serializer: every ``--json`` structure keeps the keys other tooling reads (README: keys are
kept, only added), every result class it names exists, and its values are strict JSON."""

from __future__ import annotations

import importlib
import json
import math
from pathlib import Path

import numpy as np
import pytest

from planner.paper.json_out import SHAPES, json_safe, to_json

from ..conftest import ROOT, scenario_text

GOLDEN = Path(__file__).resolve().parents[1] / "data" / "json-keys.json"


def key_paths(obj, path: str = "") -> set[str]:
    """Every key path of a JSON value: ``a.b`` for nested objects, ``a[]`` for the items of a list."""
    out: set[str] = set()
    if isinstance(obj, dict):
        for k, v in obj.items():
            p = f"{path}.{k}" if path else k
            out.add(p)
            out |= key_paths(v, p)
    elif isinstance(obj, list):
        for v in obj:
            out |= key_paths(v, f"{path}[]")
    return out


def outputs() -> dict[str, dict]:
    """The JSON of each job on the teaching scenario (and a titration and whole spectra from the examples),
    with the options the golden key sets were recorded with."""
    from planner import (
        assess_study,
        class_set,
        compile_study,
        design,
        expected_state,
        fit_readings,
        grade_class,
        load_plan,
        next_batch,
        parse_plan_text,
        read_recipe_csv,
        roster_of_count,
        run_series,
        stock_needs,
    )
    from planner.inputs.gradebook import parse_key_csv
    from planner.inputs.readings import Readings
    from planner.jobs.classroom.stock_list import class_stocks
    from planner.jobs.spectra.assess import assess_spectra
    from planner.jobs.titration.titrate import design_titration
    from planner.paper import cards as pc
    from planner.paper.json_out import cards_json, stocks_json

    plan = parse_plan_text(scenario_text("teaching"))
    study = compile_study(plan)
    d = design(plan, seed=1)
    a = assess_study(study, d.recipe, trials=50, seed=1, suggest=True)
    y = expected_state(study.model, d.recipe).absorbance + np.random.default_rng(3).normal(0, 0.004, 8)
    readings = Readings(d.recipe, y)
    first = Readings(d.recipe.take(np.arange(8) < 1), y[:1])
    out = {
        "assess": to_json(a),
        "design": to_json(d),
        "design-after": to_json(next_batch(study, first, tubes=3, seed=1)),
        "fit": to_json(fit_readings(plan, readings)),
        "stocks": stocks_json(plan.title, stock_needs(plan, d.recipe)),
    }
    for m in ("job", "calibration", "mole-ratio"):
        out[f"series-{m}"] = to_json(run_series(plan, m))
    roster = roster_of_count(3)
    cs = class_set(plan, roster, seed=1)
    stocks = class_stocks(plan, [c.recipe for c in cs.cards], roster)
    out["cards"] = cards_json(cs, stocks, ["cards.pdf"])
    key = parse_key_csv(pc.key_csv(plan, cs), plan)
    results = {k.student: dict(zip(k.recipe.tubes, k.expected.tolist(), strict=True)) for k in key}
    results["S02"] = {t: v + 0.05 for t, v in results["S02"].items()}  # a missing blank: diagnosed
    out["grade"] = to_json(grade_class(study, key, results))
    tit = load_plan(ROOT / "examples" / "titration-cuvette.toml")
    out["design-titration"] = to_json(design_titration(compile_study(tit)))
    sp = load_plan(ROOT / "examples" / "spectra-ml-ml2.toml")
    rec = read_recipe_csv(ROOT / "examples" / "spectra-ml-ml2.csv", sp)
    out["assess-spectra"] = to_json(assess_spectra(compile_study(sp), rec, trials=20, seed=1))
    return out


@pytest.fixture(scope="module")
def made():
    return outputs()


def test_every_json_structure_keeps_its_keys(made):
    golden = json.loads(GOLDEN.read_text(encoding="utf-8"))
    assert set(golden) == set(made)
    for name, keys in golden.items():
        missing = set(keys) - key_paths(made[name])
        assert not missing, (name, sorted(missing)[:10])


def test_the_structures_are_strict_json(made):
    for name, obj in made.items():
        text = json.dumps(obj, allow_nan=False)  # raises on NaN, Infinity and non-JSON values
        assert json.loads(text) == obj, name


def test_every_shape_names_a_result_class():
    for path in SHAPES:
        module, cls = path.rsplit(".", 1)
        assert isinstance(getattr(importlib.import_module(module), cls), type), path


def test_json_safe_makes_plain_values():
    value = {1: np.float64(math.nan), "a": (np.int64(3), np.bool_(True), np.array([1.5, math.inf]))}
    assert json_safe(value) == {"1": None, "a": [3, True, [1.5, None]]}
    with pytest.raises(TypeError, match="no JSON structure"):
        to_json(object())
