"""Class rosters: who gets a card. A CSV with ``id`` and ``name`` (optional ``section`` and ``bench``),
or ``--count N`` for numbered students.

A roster that cannot be used raises :class:`RosterError` (a :class:`~planner.inputs.plan.PlanError`,
so the command line prints one line naming the line or column and the fix, and exits 2). Names are
kept exactly as typed (any script, trimmed); the printed sheets escape them. A roster follows the rules
of every table (:mod:`planner.inputs.tables`): what a recipe refuses (control and text-direction
characters, quoted line breaks, over-long cells, a semicolon-separated file), a roster refuses too.
"""

from __future__ import annotations

import unicodedata
from dataclasses import dataclass
from pathlib import Path

from .limits import MAX_STUDENT_ID, MAX_STUDENTS, MAX_TEXT, check_count
from .plan import PlanError
from .tables import Table, parse_table, read_table_text, table_spec
from .text import visible

__all__ = [
    "MAX_STUDENTS",
    "Roster",
    "RosterError",
    "parse_roster_csv",
    "read_roster_csv",
    "roster_of_count",
]

REQUIRED = ("id", "name")
OPTIONAL = ("section", "bench")
ID_MAX = MAX_STUDENT_ID  # older name


class RosterError(PlanError):
    """A roster that cannot be used; ``key`` names the file, row or column."""


@dataclass(frozen=True)
class Roster:
    """The students of a class, in roster order.

    Attributes
    ----------
    ids : unique student ids (as typed, trimmed).
    names : each student's name, as typed (trimmed).
    sections : each student's section ("" when the roster has none).
    benches : each student's bench ("" when the roster has none: every student then has a bench of
        their own).
    """

    ids: tuple[str, ...]
    names: tuple[str, ...]
    sections: tuple[str, ...]
    benches: tuple[str, ...]

    def __len__(self) -> int:
        return len(self.ids)

    def __repr__(self) -> str:
        return f"Roster({len(self)} students, {len(set(self.sections))} section(s))"

    def bench_keys(self) -> tuple[tuple[str, str], ...]:
        """Each student's bench as (section, bench): a bench is set up once per section that meets
        at it; a student without a bench has one of their own."""
        return tuple(
            (sec, b if b else f"\x00{sid}")
            for sid, sec, b in zip(self.ids, self.sections, self.benches, strict=True)
        )


ROSTER = table_spec("roster", RosterError)


def _has_controls(text: str) -> bool:
    """Control or format characters (zero-width and direction marks included): an id must stay plain."""
    return any(unicodedata.category(ch) in ("Cc", "Cf") for ch in text)


def parse_roster_csv(text: str, source: str = "<roster>") -> Roster:
    """Parse a roster CSV (UTF-8; a byte-order mark is accepted), by the rules every table follows
    (:mod:`planner.inputs.tables`: no control or text-direction characters, cells of limited length).

    Raises
    ------
    RosterError
        For a missing column, an empty id or name, a duplicate id, a semicolon-separated file, an
        over-long cell or an empty roster; the message names the file's line or the column, and the fix.
    """
    table = parse_table(text, ROSTER, source)
    col = _columns(table)
    ids: list[str] = []
    seen: dict[str, int] = {}
    people: list[tuple[str, str, str, str]] = []
    for r in table.rows:
        sid, name, section, bench = (r.cells[col[h]] if h in col else "" for h in REQUIRED + OPTIONAL)
        _check_student(table, r.line, sid, name)
        if sid in seen:
            raise RosterError(
                table.where(r.line, "id"),
                f"'{visible(sid)}' is already used on line {seen[sid]}: give every student a different id",
            )
        seen[sid] = r.line
        ids.append(sid)
        people.append((sid, name, section, bench))
    if not people:
        raise RosterError(source, "no students: add one line per student under the header id,name")
    return Roster(*(tuple(p[k] for p in people) for k in range(4)))


def _columns(table: Table) -> dict[str, int]:
    """Column positions of id, name (required), section and bench (optional); nothing else allowed."""
    header = [h.lower() for h in table.header]
    for c in REQUIRED:
        if c not in header:
            raise RosterError(
                table.where(column=c),
                "missing: the header must name the columns id and name (optional: section, bench); "
                f"it has {', '.join(visible(h) for h in header)}",
            )
    unknown = [h for h in table.header if h.lower() not in REQUIRED + OPTIONAL]
    if unknown:
        raise RosterError(
            table.where(column=unknown[0]),
            "unknown column: use id, name, section and bench (rename or delete the others)",
        )
    dup = next((h for h in header if header.count(h) > 1), None)
    if dup is not None:
        raise RosterError(table.where(column=dup), "appears twice in the header: keep one")
    return {h: k for k, h in enumerate(header)}


def _check_student(table: Table, line: int, sid: str, name: str) -> None:
    if not sid:
        raise RosterError(table.where(line, "id"), "empty: give every student an id")
    if len(sid) > MAX_STUDENT_ID or _has_controls(sid):
        raise RosterError(
            table.where(line, "id"),
            f"use a plain id of at most {MAX_STUDENT_ID} characters without control or direction characters",
        )
    if not name:
        raise RosterError(table.where(line, "name"), f"empty for id {visible(sid)}: write the student's name")
    if len(name) > MAX_TEXT:
        raise RosterError(
            table.where(line, "name"), f"{len(name)} characters: shorten it to at most {MAX_TEXT}"
        )


def read_roster_csv(path: str | Path) -> Roster:
    """Read and parse a roster file (see :func:`parse_roster_csv`): a regular file of at most
    :data:`~planner.inputs.limits.MAX_ROSTER_BYTES` bytes."""
    return parse_roster_csv(read_table_text(path, ROSTER), str(path))


def roster_of_count(n: int) -> Roster:
    """``n`` numbered students (ids S01, S02, …; the name line is left for the student to fill)."""
    n = check_count(n, "count (students)", MAX_STUDENTS)
    width = max(2, len(str(n)))
    ids = tuple(f"S{i:0{width}d}" for i in range(1, n + 1))
    return Roster(ids, tuple("" for _ in ids), tuple("" for _ in ids), tuple("" for _ in ids))
