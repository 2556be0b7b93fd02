"""The model check in the design and the assessment: a 1:2 or 2:1 complex the main model leaves out."""

from __future__ import annotations

import numpy as np
import pytest

from planner.inputs.plan import PlanError, parse_plan_text
from planner.jobs.compile import compile_study
from planner.jobs.plan.assess import assess
from planner.jobs.plan.design import design, design_study
from planner.jobs.plan.even import even_series
from planner.paper.json_out import to_json

from ...conftest import scenario_text


@pytest.fixture(scope="module")
def designs():
    study = compile_study(parse_plan_text(scenario_text("teaching")))
    return study, design_study(study, seed=0, check_model=False), design_study(study, seed=0)


def test_default_alternatives_for_a_single_one_to_one_complex(designs):
    study, _, _ = designs
    assert [name for name, _ in study.alternatives] == ["ML2", "M2L"]
    ml2 = dict(study.alternatives)["ML2"]
    # derived: log β₂ = 2 log β₁ − log 4 (a stepwise constant a statistical factor 4 below the first)
    assert ml2.log_beta[-1] == pytest.approx(2 * 3.3 - np.log10(4.0))


def test_guarded_design_catches_a_left_out_complex_at_a_small_cost(designs):
    # the target-optimal design has as many compositions as parameters and cannot reveal ML2 or M2L
    # (detection at about the test's 5 % level); the guarded design reveals each in most experiments
    _, plain, guarded = designs
    mc = guarded.model_check
    assert mc is not None and mc.replaced and 1 <= mc.moves <= guarded.recipe.n_tubes
    for g, t in mc.detection:
        assert t.power_noise_free < 0.2, (g.alternative, t.power_noise_free)
        assert g.power >= 0.8, (g.alternative, g.power)
        assert abs(g.power - g.power_noise_free) < 0.1  # simulation and noncentral χ² agree
    # the check_weight 0.25 of the plan caps the cost at ×1.25
    assert 1.0 <= mc.se_guarded_over_target_only <= 1.25 + 1e-9
    assert mc.se_target_only == pytest.approx(plain.se_target, rel=1e-9)
    assert guarded.se_target == pytest.approx(mc.se_guarded, rel=1e-9)
    assert len({tuple(row) for row in guarded.recipe.volumes_mL}) > len(
        {tuple(r) for r in plain.recipe.volumes_mL}
    )


def test_zero_weight_gives_the_target_optimal_design():
    text = scenario_text("teaching").replace("goal_se = 0.05", "goal_se = 0.05\ncheck_weight = 0.0")
    plan = parse_plan_text(text)
    a = design(plan, seed=0)
    b = design(plan, seed=0, check_model=False)
    np.testing.assert_array_equal(a.recipe.volumes_mL, b.recipe.volumes_mL)


def test_assess_reports_detection_power_for_any_recipe():
    plan = parse_plan_text(scenario_text("teaching"))
    a = assess(plan, even_series(plan), trials=200, seed=1)
    rows = to_json(a)["model_check"]
    assert [r["alternative"] for r in rows] == ["ML2", "M2L"]
    assert all(0.0 <= r["power"] <= 1.0 and r["dof"] == 6 for r in rows)
    assert any(c.id == "model-check" for c in a.checks)


def test_listed_alternative_and_no_check():
    base = scenario_text("teaching")
    listed = base.replace(
        "goal_se = 0.05",
        'goal_se = 0.05\n\n[[design.alternative]]\nname = "ML3"\n'
        "formula = { M = 1, L = 3 }\nlog_beta = 8.0\nepsilon = 15000",
    )
    assert [n for n, _ in compile_study(parse_plan_text(listed)).alternatives] == ["ML3"]
    none = base.replace("goal_se = 0.05", 'goal_se = 0.05\ncheck = "none"')
    assert compile_study(parse_plan_text(none)).alternatives == ()
    clash = base.replace(
        "goal_se = 0.05",
        'goal_se = 0.05\n\n[[design.alternative]]\nname = "ML"\nformula = { M = 1, L = 2 }\nlog_beta = 6.0',
    )
    with pytest.raises(PlanError, match=r"design.alternative\[0\].name"):
        parse_plan_text(clash)
