"""The whole-spectrum example, loaded once per test module, and plan variants of it."""

from __future__ import annotations

from functools import lru_cache

from planner.inputs.plan import load_plan, parse_plan_text
from planner.inputs.recipe import read_recipe_csv
from planner.jobs.compile import compile_study

from ...conftest import ROOT

EXAMPLE = ROOT / "examples" / "spectra-ml-ml2.toml"
RECIPE = ROOT / "examples" / "spectra-ml-ml2.csv"

# a design of the example (kplan design examples/spectra-ml-ml2.toml, seed 0)
DESIGNED = """tube,CU,PZ
T1,0.50,0.10
T2,0.50,0.10
T3,0.50,0.10
T4,0.50,0.45
T5,0.50,0.45
T6,0.50,0.50
T7,0.50,0.50
T8,0.50,1.65
T9,0.50,1.65
T10,0.50,1.65
T11,0.50,1.75
T12,0.50,9.00
"""


def variant(**replace: str):
    """The example plan with lines replaced (``key = value`` by their key) as a new plan."""
    lines = EXAMPLE.read_text(encoding="utf-8").splitlines()
    out = []
    for line in lines:
        key = line.split("=", 1)[0].strip()
        out.append(f"{key} = {replace.pop(key)}" if key in replace else line)
    assert not replace, f"no such keys: {list(replace)}"
    return parse_plan_text("\n".join(out), base_dir=EXAMPLE.parent)


@lru_cache(maxsize=4)
def example(step_nm: float | None = None):
    """(plan, study, designed recipe) of the example, optionally read every ``step_nm``."""
    from planner.inputs.recipe import parse_recipe_csv

    plan = load_plan(EXAMPLE) if step_nm is None else variant(step_nm=str(step_nm))
    return plan, compile_study(plan), parse_recipe_csv(DESIGNED, plan)


def even_recipe(plan):
    return read_recipe_csv(RECIPE, plan)


CHECK = ROOT / "examples" / "spectra-ml-check.toml"
CHECK_RECIPE = ROOT / "examples" / "spectra-ml-check.csv"
ALTERNATIVE_ML2 = '[[design.alternative]]\nname = "ML2"\nformula = { M = 1, L = 2 }\nlog_beta = 3.80\n'


def _with_keys(text: str, replace: dict[str, str]) -> str:
    """``text`` with the lines ``key = value`` of the given keys replaced."""
    out = []
    for line in text.splitlines():
        key = line.split("=", 1)[0].strip()
        out.append(f"{key} = {replace.pop(key)}" if key in replace else line)
    assert not replace, f"no such keys: {list(replace)}"
    return "\n".join(out) + "\n"


def check_variant(
    step_nm: float | None = None, ml2_log_beta: float | None = None, table_dir=None, **keys: str
):
    """The model-check example (a 1:1 plan, ML2 left out), read every ``step_nm``, with the listed ML2 at
    another log β and other ``key = value`` lines; with ``table_dir``, no listed alternative (the default
    ML2 and M2L, with the target's spectrum) and the ε table without its ML2 column, written there."""
    text = CHECK.read_text(encoding="utf-8")
    assert ALTERNATIVE_ML2 in text
    if step_nm is not None:
        text = text.replace("step_nm = 1.0", f"step_nm = {step_nm}")
    if ml2_log_beta is not None:
        text = text.replace("log_beta = 3.80", f"log_beta = {ml2_log_beta}")
    if keys:
        text = _with_keys(text, dict(keys))
    base = CHECK.parent
    if table_dir is not None:
        text = text.replace(ALTERNATIVE_ML2, "")
        rows = (CHECK.parent / "spectra-ml-ml2-epsilon.csv").read_text(encoding="utf-8").splitlines()
        kept = [r if r.startswith("#") else ",".join(r.split(",")[:3]) for r in rows]
        (table_dir / "spectra-ml-ml2-epsilon.csv").write_text("\n".join(kept) + "\n", encoding="utf-8")
        base = table_dir
    return parse_plan_text(text, base_dir=base)
