"""The keyword options of the assessments and the designs, one set each for one wavelength and whole
spectra.

:func:`planner.jobs.plan.assess.assess_study`, :func:`planner.jobs.spectra.assess.assess_spectra`,
:func:`planner.jobs.plan.design.design_study` and :func:`planner.jobs.spectra.design.design_spectra` take
``**options: Unpack[...]`` of these typed dicts, so a type checker or an editor sees every keyword with
its type; :func:`with_defaults` fills in what the caller left out and refuses a keyword that is not
there, as Python refuses one (TypeError); :func:`shows_keywords` gives each function the signature that
``help()``, ``inspect.signature`` and a notebook's completion show, every keyword with its default.
"""

from __future__ import annotations

import inspect
from collections.abc import Callable, Mapping
from typing import Any, TypedDict, TypeVar, cast

from ...inputs.limits import MAX_TRIALS, check_count
from ...inputs.recipe import Recipe

DEFAULT_TRIALS = 2000


class AssessOptions(TypedDict, total=False):
    """What every assessment takes; each may be left out (defaults: :data:`ASSESS_DEFAULTS`).

    Attributes
    ----------
    trials : Monte-Carlo experiments (0: Cramér–Rao only; default 2000).
    seed : seed of the numpy Generators of the Monte Carlo and the simulated checks (default 0).
    at : assumed true log β per species name (default: the plan's guesses).
    profile_chi2 : False skips the χ² profile (the design's comparisons use the Cramér–Rao SE only).
    model_check : False skips the detection power of the plan's alternative models.
    detection_trials : simulated experiments per alternative model (default min(trials, 400)).
    model_check_fix : what the model-check check advises (default: the assessment's advice).
    progress : callback(done, total) for long Monte-Carlo runs.
    """

    trials: int
    seed: int
    at: Mapping[str, float] | None
    profile_chi2: bool
    model_check: bool
    detection_trials: int | None
    model_check_fix: str | None
    progress: Callable[[int, int], None] | None


class StudyAssessOptions(AssessOptions, total=False):
    """The options of a one-wavelength assessment (defaults: :data:`STUDY_ASSESS_DEFAULTS`).

    Attributes
    ----------
    precision : False skips Fisher information, Monte Carlo and profile (default True).
    suggest : price the changes that would improve the precision (:mod:`planner.jobs.plan.limits`;
        default False).
    shares : False skips what limits the precision (``limits`` is None): for callers that print none of
        it (the cards of a class set); the verdict does not read it (default True).
    """

    precision: bool
    suggest: bool
    shares: bool


class DesignOptions(TypedDict, total=False):
    """What every design takes; each may be left out (defaults: :data:`DESIGN_DEFAULTS`).

    Attributes
    ----------
    tubes, criterion, robust : override the plan's design keys (None: the plan's).
    seed : seed of the random starts of the exchange algorithm (default 0).
    starts : random starts of the exchange algorithm (default 8).
    check_model : guard against the plan's alternative models (default None: the plan's ``design.check``);
        False gives the target-optimal design alone.
    """

    tubes: int | None
    criterion: str | None
    robust: bool | None
    seed: int
    starts: int
    check_model: bool | None


class StudyDesignOptions(DesignOptions, total=False):
    """The options of a one-wavelength design (defaults: :data:`STUDY_DESIGN_DEFAULTS`).

    Attributes
    ----------
    volumetric : include delivery and stock errors (default True; False: photometric noise only — for
        analytic checks).
    prior_tubes : tubes measured before: their information (whitened rows in the same parameters and
        nuisance factors as the candidates, at every prior node) is in hand, and the new tubes complete it
        (Chaloner & Verdinelli 1995, Stat. Sci. 10:273); see :mod:`planner.jobs.plan.sequential`.
    """

    volumetric: bool
    prior_tubes: Recipe | None


ASSESS_DEFAULTS: AssessOptions = {
    "trials": DEFAULT_TRIALS,
    "seed": 0,
    "at": None,
    "profile_chi2": True,
    "model_check": True,
    "detection_trials": None,
    "model_check_fix": None,
    "progress": None,
}
STUDY_ASSESS_DEFAULTS: StudyAssessOptions = {
    **ASSESS_DEFAULTS,
    "precision": True,
    "suggest": False,
    "shares": True,
}
DESIGN_DEFAULTS: DesignOptions = {
    "tubes": None,
    "criterion": None,
    "robust": None,
    "seed": 0,
    "starts": 8,
    "check_model": None,
}
STUDY_DESIGN_DEFAULTS: StudyDesignOptions = {**DESIGN_DEFAULTS, "volumetric": True, "prior_tubes": None}

Options = TypeVar("Options", bound=Mapping[str, object])


def with_defaults(options: Options, defaults: Options) -> Options:
    """Every option: ``options`` over ``defaults``."""
    unknown = sorted(set(options) - set(defaults))
    if unknown:
        raise TypeError(f"unexpected keyword argument '{unknown[0]}'")
    return cast(Options, {**defaults, **options})


def assess_run(options: Options, defaults: Options) -> Options:
    """Every option of an assessment (:func:`with_defaults`), the number of trials checked."""
    run = dict(with_defaults(options, defaults))
    run["trials"] = check_count(run["trials"], "trials", MAX_TRIALS, least=0)
    return cast(Options, run)


F = TypeVar("F", bound=Callable[..., Any])


def shows_keywords(options: type, defaults: Mapping[str, object]) -> Callable[[F], F]:
    """Decorator: the function's ``**options`` shown as the keyword-only parameters of ``options`` (a
    typed dict) with their ``defaults``, so that ``help()`` and completion list them. Calls are unchanged."""

    def show(func: F) -> F:
        sig = inspect.signature(func)
        kept = [p for p in sig.parameters.values() if p.kind is not inspect.Parameter.VAR_KEYWORD]
        # a typed dict holds its annotations as forward references: shown as their text, like the rest
        types = {
            k: getattr(t, "__forward_arg__", t) for k, t in getattr(options, "__annotations__", {}).items()
        }
        keywords = [
            inspect.Parameter(
                k, inspect.Parameter.KEYWORD_ONLY, default=v, annotation=types.get(k, inspect.Parameter.empty)
            )
            for k, v in defaults.items()
        ]
        func.__signature__ = sig.replace(parameters=[*kept, *keywords])  # type: ignore[attr-defined]
        return func

    return show
