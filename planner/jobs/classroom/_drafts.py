"""Drafted cards before their assessment: each student's tubes (indices into the feasible grid), what the
card varies, and where to look for another card when the assessment rejects one. Made by
:func:`teaching_drafts` (the default: a teaching series per student, :mod:`._series`, chosen together by
:mod:`._select`) or by :func:`planner.jobs.classroom._jitter.pooled_drafts` (``--pooled``)."""

from __future__ import annotations

from collections.abc import Callable, Iterator
from dataclasses import dataclass, field

import numpy as np

from ...inference.study import Study
from ...inputs.text import plural
from ._grid import Grid, set_key
from ._select import card_information, sequential_selection
from ._series import TIERS, Series, teaching_candidates

__all__ = ["Drafts", "teaching_drafts"]


@dataclass
class Drafts:
    """Each student's drafted card.

    Attributes
    ----------
    cards : per student, (n,) feasible grid indices.
    series : per student, what the card varies (None for cards made for the pooled fit alone).
    alternatives : alternatives(student, used keys) yields further (cards, series) for a student whose
        card the assessment rejects, none of whose set of compositions is in ``used``.
    unplaced : students who got no card of their own (a repeat, marked failing).
    radius : largest grid move any tube needed (jittered cards; 0 for teaching series).
    notes : what the instructor should know about how the cards were made.
    """

    cards: list[np.ndarray]
    series: list[Series | None]
    alternatives: Callable[[int, set[bytes]], Iterator[tuple[np.ndarray, Series | None]]]
    unplaced: set[int] = field(default_factory=set)
    radius: int = 0
    notes: list[str] = field(default_factory=list)


def teaching_drafts(study: Study, grid: Grid, n: int, N: int, kind: str, rng: np.random.Generator) -> Drafts:
    """A teaching series for every student, distinct, chosen together for the pooled fit."""
    cand = teaching_candidates(study, grid, n, N, kind, rng)
    notes: list[str] = [cand.note] if cand.note else []
    Mc, M0, nu = card_information(grid, cand.cards)
    chosen, rest = sequential_selection(Mc, M0, nu, study.params.target, N, rng)
    cards = [cand.cards[c] for c in chosen]
    series: list[Series | None] = [cand.series[c] for c in chosen]
    worst = int(cand.tier[chosen].max())
    if kind == "binding-curve" and worst > 0:
        notes.append(
            f"{int(np.count_nonzero(cand.tier < worst))} distinct cards {TIERS[worst - 1]}: the class's "
            f"other cards only {TIERS[worst]}"
        )
    unplaced = set(range(len(cards), N))
    if unplaced:
        notes.append(
            f"only {len(cards)} distinct {kind} cards fit the glassware and the linear range: "
            f"{plural(len(unplaced), 'student')} repeat a card and are marked as failing; give each student "
            f"fewer tubes, or make the cards for the pooled fit alone"
        )
        for s in sorted(unplaced):
            cards.append(cards[s % len(chosen)])
            series.append(series[s % len(chosen)])
    queue = iter(rest)

    def alternatives(student: int, used: set[bytes]) -> Iterator[tuple[np.ndarray, Series | None]]:
        for c in queue:  # the spares, best first, shared by every student who needs one
            if set_key(grid, cand.cards[c]) not in used:
                yield cand.cards[c], cand.series[c]

    return Drafts(cards, series, alternatives, unplaced, 0, notes)
