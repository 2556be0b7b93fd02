"""The keyword options of an assessment, one set for one wavelength and for whole spectra.

:func:`planner.jobs.plan.assess.assess_study` and :func:`planner.jobs.spectra.assess.assess_spectra` take
``**options: Unpack[...]`` of these typed dicts, so a type checker or an editor sees every keyword with
its type; :func:`with_defaults` fills in what the caller left out and refuses a keyword that is not
there, as Python refuses one (TypeError).
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from typing import TypedDict, TypeVar, cast

from ...inputs.limits import MAX_TRIALS, check_count

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
    """The options of a one-wavelength assessment (defaults: :data:`STUDY_DEFAULTS`).

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
STUDY_DEFAULTS: StudyAssessOptions = {**ASSESS_DEFAULTS, "precision": True, "suggest": False, "shares": True}

Options = TypeVar("Options", bound=Mapping[str, object])


def with_defaults(options: Options, defaults: Options) -> Options:
    """Every option: ``options`` over ``defaults``, the number of trials checked."""
    unknown = sorted(set(options) - set(defaults))
    if unknown:
        raise TypeError(f"unexpected keyword argument '{unknown[0]}'")
    run = {**defaults, **options}
    run["trials"] = check_count(run["trials"], "trials", MAX_TRIALS, least=0)
    return cast(Options, run)
