"""Plan files: TOML loading and the plan's errors; the schema is in :mod:`planner.inputs.plan_schema`.

A plan describes one metal–ligand study (components, species and their guessed constants, optics,
stocks, glassware, design goals). :func:`load_plan` reads and validates it; every problem becomes a
single :class:`PlanError` naming the key path, what was wrong and how to fix it.

Limits on the input itself: a plan file of at most :data:`MAX_PLAN_BYTES` bytes, nested at most
:data:`MAX_DEPTH` levels deep; the limits on each value are the schema's.
"""

from __future__ import annotations

import difflib
from pathlib import Path
from typing import Any

import tomllib
from pydantic import BaseModel, ValidationError

from .files import read_user_text
from .limits import MAX_DEPTH, MAX_PLAN_BYTES
from .names import ion_charge, unknown_name
from .plan_fields import PlanError, StrictModel
from .plan_parts import COMPONENTS
from .plan_schema import (
    ACTIVITY_MODELS,
    CRITERIA,
    DISPENSER_KINDS,
    MAKE_UP_MODES,
    MICROPIPETTE_DEAD_ML,
    MICROPIPETTE_RINSE_ML,
    MIN_LINEAR_WIDTH,
    MIN_PATH_CM,
    MIN_PURITY,
    PISTON_DISPENSERS,
    REPEATABILITY_MAX_FRACTION,
    Balance,
    Band,
    Component,
    Components,
    DesignSettings,
    Dispenser,
    Epsilon,
    Flask,
    Glassware,
    Medium,
    Noise,
    Optics,
    Plan,
    Protons,
    Species,
    Stock,
)
from .spectra_table import attach_spectra_table

# the schema's names stay importable from here, where callers have always found them
__all__ = [
    "ACTIVITY_MODELS",
    "Balance",
    "Band",
    "COMPONENTS",
    "CRITERIA",
    "Component",
    "Components",
    "DISPENSER_KINDS",
    "DesignSettings",
    "Dispenser",
    "Epsilon",
    "Flask",
    "Glassware",
    "MAKE_UP_MODES",
    "MAX_DEPTH",
    "MAX_PLAN_BYTES",
    "MICROPIPETTE_DEAD_ML",
    "MICROPIPETTE_RINSE_ML",
    "MIN_LINEAR_WIDTH",
    "MIN_PATH_CM",
    "MIN_PURITY",
    "Medium",
    "Noise",
    "Optics",
    "PISTON_DISPENSERS",
    "Plan",
    "PlanError",
    "Protons",
    "REPEATABILITY_MAX_FRACTION",
    "Species",
    "Stock",
    "StrictModel",
    "ion_charge",
    "load_plan",
    "parse_plan",
    "parse_plan_text",
    "unknown_name",
]


def _loc_to_path(loc: tuple, root: type[BaseModel]) -> str:
    parts: list[str] = []
    for item in loc:
        if isinstance(item, int):
            parts[-1:] = [f"{parts[-1]}[{item}]"] if parts else [f"[{item}]"]
        else:
            parts.append(str(item))
    return ".".join(parts)


def _fields_at(loc: tuple) -> list[str]:
    """The keys allowed at a location, for 'did you mean' on unknown keys."""
    model: Any = Plan
    for item in loc[:-1]:
        if isinstance(item, int):
            continue
        if not (isinstance(model, type) and issubclass(model, BaseModel)):
            return []
        field = next((f for n, f in model.model_fields.items() if (f.alias or n) == item or n == item), None)
        if field is None:
            return []
        model = _inner_model(field.annotation)
    if isinstance(model, type) and issubclass(model, BaseModel):
        return [f.alias or n for n, f in model.model_fields.items()]
    return []


def _inner_model(ann: Any) -> Any:
    import typing

    if isinstance(ann, type) and issubclass(ann, BaseModel):
        return ann
    for arg in typing.get_args(ann):
        inner = _inner_model(arg)
        if inner is not None:
            return inner
    return None


def _first_error_of(err: Any) -> PlanError:
    """One pydantic error (a dict) as a PlanError with the key path and a readable message."""
    loc = tuple(err.get("loc", ()))
    path = _loc_to_path(loc, Plan)
    kind = err.get("type", "")
    msg = str(err.get("msg", "invalid value"))
    if kind == "extra_forbidden":
        allowed = _fields_at(loc)
        near = difflib.get_close_matches(str(loc[-1]), allowed, n=1)
        hint = f"; did you mean '{near[0]}'?" if near else ""
        return PlanError(path, f"unknown key{hint} (allowed here: {', '.join(allowed)})")
    if kind == "missing":
        return PlanError(path, "is required but missing: add it (see the README's plan-file keys)")
    if kind == "too_long":
        ctx = err.get("ctx") or {}
        return PlanError(
            path,
            f"{ctx.get('actual_length', 'too many')} entries; at most {ctx.get('max_length')}: "
            "a plan describes one study (see the README's limits)",
        )
    if kind in ("greater_than", "greater_than_equal", "less_than", "less_than_equal"):
        return PlanError(path, f"{msg.lower()}, got {err.get('input')!r}")
    for prefix in ("Value error, ", "Assertion failed, "):
        if msg.startswith(prefix):
            msg = msg[len(prefix) :]
    if kind == "literal_error":
        msg = msg.replace("Input should be", "must be one of")
    return PlanError(path, msg)


def parse_plan(data: dict[str, Any]) -> Plan:
    """Validate an already-parsed TOML document into a :class:`Plan`."""
    try:
        return Plan.model_validate(data)
    except PlanError:
        raise
    except ValidationError as exc:
        errors = exc.errors()
        # an unknown key first: a misspelt required key also shows up as "missing" under its real name,
        # and the key the user actually wrote (with the nearest allowed one) is what helps
        for err in errors:
            if err.get("type") == "extra_forbidden":
                raise _first_error_of(err) from None
        # a PlanError raised inside a validator arrives wrapped; keep its key path
        for err in errors:
            ctx = err.get("ctx", {}) or {}
            inner = ctx.get("error")
            if isinstance(inner, PlanError):
                return_path = _loc_to_path(tuple(err.get("loc", ())), Plan)
                key = ".".join(p for p in (return_path, inner.key) if p)
                raise PlanError(key, inner.message) from None
        present = [e for e in errors if e.get("type") != "missing"]
        raise _first_error_of((present or errors)[0]) from None


def load_plan(path: str | Path) -> Plan:
    """Read and validate a plan file.

    Raises
    ------
    PlanError
        For a missing file, a TOML syntax error (with its line) or any schema problem.
    """
    p = Path(path)
    text = read_user_text(
        p,
        what="plan",
        limit_bytes=MAX_PLAN_BYTES,
        error=PlanError,
        kind="a .toml file",
        missing_hint=", or make one with 'kplan new'",
        too_large_hint="a plan is a short TOML file; check that this is the right file",
    )
    return parse_plan_text(text, source=str(p), base_dir=p.parent)


def parse_plan_text(text: str, source: str = "<plan>", *, base_dir: str | Path | None = None) -> Plan:
    """Parse and validate the text of a plan; ``source`` names it in messages. Files the plan names
    (``optics.spectra``) are read relative to ``base_dir`` (default: the working folder)."""
    # editors on some systems start UTF-8 files with a byte-order mark, which TOML does not allow
    text = text.removeprefix("\ufeff")
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise PlanError("", f"{source}: TOML syntax error: {exc} — fix the line shown") from None
    except RecursionError:
        raise PlanError(
            "",
            f"{source}: arrays or tables nested too deeply to read (at most {MAX_DEPTH} "
            "levels): a plan needs only a few",
        ) from None
    depth = _depth(data)
    if depth > MAX_DEPTH:
        raise PlanError(
            "",
            f"{source}: arrays or tables nested {depth} levels deep; at most {MAX_DEPTH}: "
            "a plan needs only a few",
        )
    return attach_spectra_table(parse_plan(data), Path(base_dir) if base_dir is not None else Path())


def _depth(data: Any) -> int:
    """Nesting depth of a parsed TOML document (iterative: a deep document must not exhaust the stack)."""
    deepest, todo = 0, [(data, 1)]
    while todo:
        item, d = todo.pop()
        deepest = max(deepest, d)
        if isinstance(item, dict):
            todo.extend((v, d + 1) for v in item.values())
        elif isinstance(item, list):
            todo.extend((v, d + 1) for v in item)
    return deepest
