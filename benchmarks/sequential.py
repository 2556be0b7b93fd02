"""Sequential design against a one-shot design when the guess is two decades off.

Scenario: the teaching plan (guess log β = 3.3 ± 0.5) with the truth at log β = 5.3 and a goal of
SE(log β) ≤ 0.09. Sequential: a first designed batch of 4 tubes, then batches of 4 from
``next_batch`` (fit the readings so far, update the guess, design the next tubes with the information in
hand) until the SE at the truth meets the goal. One-shot: a robust design of the same total at the
wrong guess. Readings are simulated with every error source (seeded). Prints, per seed, the tubes the
sequential plan needed, its SE, the one-shot SE with the same tubes, and the time.

Run: ``python benchmarks/sequential.py [--seeds 5]``
"""

from __future__ import annotations

import argparse
import time
from importlib import resources

import numpy as np

from planner.inference.simulate import simulate
from planner.inputs.plan import parse_plan_text
from planner.inputs.readings import Readings
from planner.inputs.recipe import concat_recipes
from planner.jobs.compile import compile_study
from planner.jobs.plan.assess import assess_study
from planner.jobs.plan.design import design_study
from planner.jobs.plan.sequential import next_batch

TRUTH = 5.3
GOAL = 0.09
BATCH = 4
MAX_TUBES = 40


def se_at_truth(study, recipe) -> float:
    return float(
        assess_study(
            study, recipe, trials=0, at={"ML": TRUTH}, profile_chi2=False, model_check=False
        ).target_se
    )


def main(seeds: int) -> None:
    text = resources.files("planner.data").joinpath("scenarios", "teaching.toml").read_text(encoding="utf-8")
    study = compile_study(parse_plan_text(text.replace("goal_se = 0.05", f"goal_se = {GOAL}")))
    lb = study.model.log_beta.copy()
    lb[0] = TRUTH
    print(
        f"truth log β = {TRUTH}, guess {study.model.log_beta[0]} ± {study.model.log_beta_sd[0]}, goal SE "
        f"{GOAL}"
    )
    print(f"{'seed':>4} {'tubes':>5} {'SE seq':>8} {'SE one-shot':>11} {'s':>6}")
    wins = 0
    for seed in range(seeds):
        rng = np.random.default_rng(seed)
        t0 = time.perf_counter()
        rec = design_study(study, tubes=BATCH, seed=seed).recipe
        A = simulate(study.bench, study.model, rec, rng, 1, log_beta=lb).absorbance[0]
        while se_at_truth(study, rec) > GOAL and rec.n_tubes < MAX_TUBES:
            nb = next_batch(study, Readings(rec, A), tubes=BATCH, seed=seed)
            if nb.recipe is None:
                break
            new = nb.recipe  # numbered after the last measured tube
            rec = concat_recipes([rec, new])
            A = np.concatenate(
                [A, simulate(study.bench, study.model, new, rng, 1, log_beta=lb).absorbance[0]]
            )
        elapsed = time.perf_counter() - t0
        one = se_at_truth(study, design_study(study, tubes=rec.n_tubes, seed=seed).recipe)
        seq = se_at_truth(study, rec)
        wins += one > GOAL >= seq
        print(f"{seed:>4} {rec.n_tubes:>5} {seq:>8.4f} {one:>11.4f} {elapsed:>6.1f}")
    print(
        f"sequential met the goal where a one-shot design of the same size did not in {wins} of {seeds} runs"
    )


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seeds", type=int, default=5)
    main(parser.parse_args().seeds)
