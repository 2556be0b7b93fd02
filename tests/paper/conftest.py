"""The teaching scenario, compiled once per test module: the class-set tests' fixtures serve the card and
sheet tests too."""

from __future__ import annotations

from ..jobs.classroom.conftest import plan, study

__all__ = ["plan", "study"]
