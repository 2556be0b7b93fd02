"""The small pieces every ``--json`` shape is built from: finite floats, columns as rows, attributes."""

from __future__ import annotations

import math


def num(x) -> float | None:
    """A float for JSON: None for a missing or non-finite value."""
    x = float(x) if x is not None else float("nan")
    return x if math.isfinite(x) else None


def nums(values) -> list[float | None]:
    return [num(x) for x in values]


def table(**columns) -> list[dict]:
    """One dict per row from equal-length columns, keys in the order given."""
    keys = list(columns)
    return [dict(zip(keys, row, strict=True)) for row in zip(*columns.values(), strict=True)]


def attrs(obj, names: str) -> dict:
    """``{name: obj.name}`` for the space-separated ``names`` (values made JSON by :func:`json_safe`)."""
    return {n: getattr(obj, n) for n in names.split()}


def finite(obj, names: str) -> dict:
    """``{name: obj.name}`` as finite floats, None where missing or not finite."""
    return {n: num(getattr(obj, n)) for n in names.split()}


def float_or_none(obj, names: str) -> dict:
    """``{name: float(obj.name)}``, None where the attribute is None."""
    return {n: None if getattr(obj, n) is None else float(getattr(obj, n)) for n in names.split()}
