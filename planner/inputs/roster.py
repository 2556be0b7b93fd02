"""Class rosters: who gets a card. A CSV with ``id`` and ``name`` (optional ``section`` and ``bench``),
or ``--count N`` for numbered students.

A roster that cannot be used raises :class:`RosterError` (a :class:`~planner.inputs.plan.PlanError`,
so the command line prints one line naming the row or column and the fix, and exits 2). Names are
kept exactly as typed (any script); the printed sheets escape them.
"""

from __future__ import annotations

import csv
import io
import unicodedata
from dataclasses import dataclass
from pathlib import Path

from .plan import PlanError

__all__ = [
    "MAX_FIELD",
    "MAX_STUDENTS",
    "Roster",
    "RosterError",
    "parse_roster_csv",
    "read_roster_csv",
    "roster_of_count",
]

REQUIRED = ("id", "name")
OPTIONAL = ("section", "bench")
MAX_STUDENTS = 2000  # a whole year's intake; far above any one lab
MAX_FIELD = 20000  # characters per cell; longer text is surely not a name
ID_MAX = 64  # characters of a student id (it names a row of the key)


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


def _clean(value: str) -> str:
    return value.strip()


def _has_controls(text: str) -> bool:
    """Control characters other than the bidirectional marks (which a name in a right-to-left script
    may legitimately carry); they are printed as text anyway, but an id must stay plain."""
    return any(unicodedata.category(ch) in ("Cc", "Cf") for ch in text)


def parse_roster_csv(text: str, source: str = "<roster>") -> Roster:  # noqa: C901
    """Parse a roster CSV (UTF-8; a byte-order mark is accepted).

    Raises
    ------
    RosterError
        For a missing column, an empty id or name, a duplicate id, a semicolon-separated file, an
        over-long cell or an empty roster; the message names the row (as a spreadsheet numbers it,
        the header being row 1) or the column, and the fix.
    """
    if text.startswith("\ufeff"):
        text = text[1:]
    if not text.strip():
        raise RosterError(
            source, "the roster is empty: write a header line 'id,name' and one line per student"
        )
    first = text.splitlines()[0]
    if ";" in first and "," not in first:
        raise RosterError(
            f"{source} row 1",
            "the columns are separated by semicolons: save the roster as "
            "comma-separated CSV (id,name,section,bench)",
        )
    if "\t" in first and "," not in first:
        raise RosterError(
            f"{source} row 1",
            "the columns are separated by tabs: save the roster as "
            "comma-separated CSV (id,name,section,bench)",
        )
    try:
        rows = list(csv.reader(io.StringIO(text, newline="")))
    except csv.Error as exc:
        raise RosterError(source, f"not readable as CSV ({exc}): save it as comma-separated UTF-8") from None
    header = [_clean(h).lower() for h in rows[0]]
    for col in REQUIRED:
        if col not in header:
            raise RosterError(
                f"{source} column '{col}'",
                f"missing: the header must name the columns "
                f"id and name (optional: section, bench); it has {', '.join(header) or 'nothing'}",
            )
    unknown = [h for h in header if h and h not in REQUIRED + OPTIONAL]
    if unknown:
        raise RosterError(
            f"{source} column '{unknown[0]}'",
            "unknown column: use id, name, section and bench (rename or delete the others)",
        )
    dup_cols = sorted({h for h in header if h and header.count(h) > 1})
    if dup_cols:
        raise RosterError(f"{source} column '{dup_cols[0]}'", "appears twice in the header: keep one")
    col = {h: header.index(h) for h in REQUIRED + OPTIONAL if h in header}
    ids: list[str] = []
    names: list[str] = []
    sections: list[str] = []
    benches: list[str] = []
    seen: dict[str, int] = {}
    for r, row in enumerate(rows[1:], start=2):
        if not any(_clean(c) for c in row):
            continue  # blank line
        if len(row) > len(header):
            raise RosterError(
                f"{source} row {r}",
                f"has {len(row)} cells but the header has {len(header)}: "
                f'a name with a comma must be quoted ("Surname, Given")',
            )
        cells = {h: (_clean(row[j]) if j < len(row) else "") for h, j in col.items()}
        for h, v in cells.items():
            if len(v) > MAX_FIELD:
                raise RosterError(
                    f"{source} row {r} column '{h}'",
                    f"{len(v)} characters: shorten it to at most {MAX_FIELD}",
                )
        sid, name = cells["id"], cells["name"]
        if not sid:
            raise RosterError(f"{source} row {r} column 'id'", "empty: give every student an id")
        if len(sid) > ID_MAX or _has_controls(sid):
            raise RosterError(
                f"{source} row {r} column 'id'",
                f"use a plain id of at most {ID_MAX} characters without control or direction characters",
            )
        if not name:
            raise RosterError(
                f"{source} row {r} column 'name'", f"empty for id {sid}: write the student's name"
            )
        if sid in seen:
            raise RosterError(
                f"{source} row {r} column 'id'",
                f"'{sid}' is already used in row {seen[sid]}: give every student a different id",
            )
        seen[sid] = r
        ids.append(sid)
        names.append(name)
        sections.append(cells.get("section", ""))
        benches.append(cells.get("bench", ""))
        if len(ids) > MAX_STUDENTS:
            raise RosterError(f"{source} row {r}", f"more than {MAX_STUDENTS} students: split the roster")
    if not ids:
        raise RosterError(source, "no students: add one line per student under the header id,name")
    return Roster(tuple(ids), tuple(names), tuple(sections), tuple(benches))


def read_roster_csv(path: str | Path) -> Roster:
    """Read and parse a roster file (see :func:`parse_roster_csv`)."""
    p = Path(path)
    try:
        data = p.read_bytes()
    except OSError as exc:
        raise RosterError(str(p), f"cannot read the roster ({exc.strerror or exc}): check the path") from None
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise RosterError(str(p), f"not UTF-8 (byte {exc.start}): save the roster as CSV UTF-8") from None
    return parse_roster_csv(text, str(p))


def roster_of_count(n: int) -> Roster:
    """``n`` numbered students (ids S01, S02, …; the name line is left for the student to fill)."""
    if isinstance(n, bool) or not isinstance(n, int) or n < 1:
        raise RosterError("--count", f"{n!r}: give a whole number of students ≥ 1")
    if n > MAX_STUDENTS:
        raise RosterError("--count", f"{n}: at most {MAX_STUDENTS} students")
    width = max(2, len(str(n)))
    ids = tuple(f"S{i:0{width}d}" for i in range(1, n + 1))
    return Roster(ids, tuple("" for _ in ids), tuple("" for _ in ids), tuple("" for _ in ids))
