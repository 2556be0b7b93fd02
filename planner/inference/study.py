"""A plan compiled for the numerics: one frozen object that every layer below the jobs works from.

The jobs (``planner.jobs``) turn the validated plan into a :class:`Study` once
(:func:`planner.jobs.compile.compile_study`); the model, the error budget, the precision analysis and
the design optimiser take the study (or its parts), never the plan itself.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np

from ..model.compiled import Model
from ..model.spectra import Spectra
from ..uncertainty.bench import Bench
from .precision import Parameters
from .priors import Nodes, prior_nodes

ANALYSES = ("global", "double-reciprocal", "one-to-one")


@dataclass(frozen=True)
class Study:
    """Everything a job needs from a plan, as numbers.

    Attributes
    ----------
    title : the study's name, printed on every output.
    model : chemistry and optics (:class:`planner.model.compiled.Model`).
    bench : glassware, make-up and allowances (:class:`planner.uncertainty.bench.Bench`).
    params : the parameters a fit estimates (free log β, ε and optionally a blank offset).
    target : the species whose constant must be resolved.
    goal_se : "resolved" means SE(log β[target]) ≤ goal_se (log10 units).
    analysis : the analysis the plan intends ("global", "double-reciprocal", "one-to-one").
    tubes : the plan's number of tubes for a design.
    criterion : "target" or "all" (the design criterion).
    robust : whether designs average over the guesses' uncertainty.
    ionic_strength_M : the ionic strength designed tubes are levelled to (None: the highest candidate's).
    ionic_strength_tolerance : allowed relative deviation from it.
    alternatives : (name, model) pairs: the main model with one more species each, which a recipe's data
        should be able to tell from the main model (empty: no model check).
    check_weight : the SE cost the model check may spend: the guarded design's SE of the target at most
        ×(1 + check_weight) the target-only design's (0: no guard).
    spectra : the species' spectra and the instrument over the window when the plan records whole
        spectra (:class:`planner.model.spectra.Spectra`), else None (one wavelength).
    alternative_spectra : with spectra, the (W,) spectrum of the species each alternative adds (in the
        order of ``alternatives``), for the model check with whole spectra; else empty.
    """

    title: str
    model: Model
    bench: Bench
    params: Parameters
    target: str
    goal_se: float
    analysis: str
    tubes: int
    criterion: str
    robust: bool
    ionic_strength_M: float | None
    ionic_strength_tolerance: float
    alternatives: tuple[tuple[str, Model], ...] = ()
    check_weight: float = 0.0
    spectra: Spectra | None = None
    alternative_spectra: tuple[np.ndarray, ...] = ()

    def __post_init__(self) -> None:
        # "frozen" holds for the arrays too: a job that changed the model in place would silently change
        # every later result computed from the same study
        _read_only(self, set())

    def __repr__(self) -> str:
        return (
            f"Study({self.title!r}, target={self.target}, params={list(self.params.names)}, {self.bench!r})"
        )

    def nodes(self, robust: bool | None = None) -> Nodes:
        """Quadrature nodes over the guesses' uncertainty (the guess alone when not robust)."""
        return prior_nodes(self.params, self.robust if robust is None else robust)


def _read_only(obj: object, seen: set[int]) -> None:
    """Make every numpy array reachable through dataclass fields, tuples and dicts read-only."""
    if id(obj) in seen:
        return
    seen.add(id(obj))
    if isinstance(obj, np.ndarray):
        obj.flags.writeable = False
    elif dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        for f in dataclasses.fields(obj):
            _read_only(getattr(obj, f.name), seen)
    elif isinstance(obj, tuple | list):
        for x in obj:
            _read_only(x, seen)
    elif isinstance(obj, dict):
        for x in obj.values():
            _read_only(x, seen)
