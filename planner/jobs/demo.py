"""The built-in demo's recipe: the plain evenly spaced series a hand-made plan would use."""

from __future__ import annotations

from ..inputs.plan import Plan
from ..inputs.recipe import recipe_to_csv
from .plan.even import even_series


def demo_recipe_csv(plan: Plan) -> str:
    """CSV text of the evenly spaced series for ``plan``."""
    return recipe_to_csv(even_series(plan), plan)
