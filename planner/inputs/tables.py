"""Tables: one reader for every CSV the tool reads, one writer for every CSV it writes.

The rules, the same for every kind of table (:data:`KINDS`: recipes, readings, titration schedules,
spectra, rosters, ε tables, keys and results):

- UTF-8 text (a byte-order mark is accepted) from a regular file, at most ``spec.max_bytes`` bytes;
- blank lines are skipped anywhere; a line starting with ``#`` is a comment above the header only —
  below it every line is a row, so a tube may be labelled ``#3``;
- the header is the first other line; fields are separated by ``,`` and quoted with ``"`` as in
  RFC 4180 (a quote inside a quoted cell is doubled; a quoted cell may not run over lines);
- a ``;``-separated file with decimal commas, as spreadsheets write it in such locales, is read as it was
  meant where the kind of table allows it (``spec.decimal_comma``: the measured data — readings,
  schedules, spectra, keys, results); elsewhere it is refused with the fix, and a tab-separated file
  always is;
- every row has as many cells as the header; cells are trimmed, at most :data:`MAX_CELL_CHARS`
  characters, and hold no control or text-direction character;
- at most ``spec.max_rows`` rows and ``spec.max_bytes`` bytes (every kind's limits: :data:`KINDS`);
- a cell the tool wrote with a leading apostrophe so that a spreadsheet keeps it as text (OWASP, "CSV
  Injection") is read back as it was before: :func:`guard_cell` and :func:`unguard_cell` are inverses.

Every error names the file and its true line number (as an editor numbers it, the first line being 1).
The standard library's csv module does the quoting; pandas is not used because its reader cannot say
on which physical line a cell was, nor refuse a comment below the header.
"""

from __future__ import annotations

import csv
import math
import re
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass, replace
from pathlib import Path

from .errors import LocatedError
from .files import read_user_text
from .limits import (
    MAX_CELL_CHARS,
    MAX_CLASS_CSV_BYTES,
    MAX_CLASS_ROWS,
    MAX_CSV_BYTES,
    MAX_EPSILON_BYTES,
    MAX_EPSILON_ROWS,
    MAX_ROSTER_BYTES,
    MAX_ROWS,
    MAX_SPECTRA_BYTES,
    MAX_SPECTRA_ROWS,
    MAX_STEPS,
    MAX_STUDENTS,
)
from .text import first_unsafe, visible

# A plain decimal number with a point: no 'nan', 'inf', '1_000' or hex, which float() would take.
NUMBER = re.compile(r"[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?")

# a control or text-direction character other than the line break (which ends a row, not a cell)
_UNSAFE_IN_LINE = re.compile(
    "[\x00-\x09\x0b-\x1f\x7f-\x9f\u061c\u200e\u200f\u2028\u2029\u202a-\u202e\u2066-\u2069]"
)

# Characters that make a spreadsheet read a cell as a formula when they come first. source: OWASP,
# "CSV Injection" (= + - @ tab CR) and ASVS 4.0 requirement 5.3.x / 5.0 1.2.10 (also NUL).
FORMULA_TRIGGERS = frozenset("=+-@\t\r\0")


class TableError(LocatedError):
    """A table that cannot be read; ``key`` names the file, line and column."""


@dataclass(frozen=True)
class TableSpec:
    """What kind of table is read, and its limits.

    Attributes
    ----------
    what : the kind, for messages ("recipe", "readings", "roster").
    header_example : a header to suggest, e.g. "tube,<stock>,...".
    row_word : what one row is, for messages ("tube", "student", "step").
    max_rows, max_bytes : limits.
    decimal_comma : whether a ``;``-separated file with decimal commas is read.
    error : the error class raised, called as ``error(key, message)``.
    """

    what: str
    header_example: str
    row_word: str = "row"
    max_rows: int = MAX_ROWS
    max_bytes: int = MAX_CSV_BYTES
    decimal_comma: bool = False
    error: Callable[[str, str], Exception] = TableError


KEY_HEADER = "student,name,section,tube,<stock>,...,absorbance,band_low,band_high"  # kplan cards' key.csv

# Every kind of table the tool reads: the words its messages use and its limits. The measured data come
# from spreadsheets, so their decimal commas are read as meant; recipes, rosters and ε tables are not.
_KINDS = (
    # what, header to suggest, one row is a, at most rows, at most bytes, decimal commas read
    ("recipe", "tube,<stock>,...", "tube", MAX_ROWS, MAX_CSV_BYTES, False),
    ("readings", "tube,<stock>,...,absorbance", "tube", MAX_ROWS, MAX_CSV_BYTES, True),
    ("schedule", "step,aliquot_mL[,absorbance]", "step", MAX_STEPS, MAX_CSV_BYTES, True),
    ("spectra", "tube,wavelength_nm,absorbance", "reading", MAX_SPECTRA_ROWS, MAX_SPECTRA_BYTES, True),
    ("roster", "id,name,section,bench", "student", MAX_STUDENTS, MAX_ROSTER_BYTES, False),
    ("ε table", "wavelength_nm,<species>,...", "wavelength", MAX_EPSILON_ROWS, MAX_EPSILON_BYTES, False),
    ("key", KEY_HEADER, "row", MAX_CLASS_ROWS, MAX_CLASS_CSV_BYTES, True),
    ("results", "student,tube,absorbance", "reading", MAX_CLASS_ROWS, MAX_CLASS_CSV_BYTES, True),
)
KINDS: dict[str, TableSpec] = {kind[0]: TableSpec(*kind) for kind in _KINDS}


def table_spec(what: str, error: Callable[[str, str], Exception]) -> TableSpec:
    """The spec of the kind of table ``what`` (a key of :data:`KINDS`) whose every problem is ``error``."""
    return replace(KINDS[what], error=error)


@dataclass(frozen=True)
class Row:
    """One data row: its line in the file and its cells (trimmed, apostrophe guard removed)."""

    line: int
    cells: tuple[str, ...]


@dataclass(frozen=True)
class Table:
    """A table read by the rules of the module docstring.

    Attributes
    ----------
    source : the file name, for messages.
    header : the column names (trimmed, as written).
    header_line : the header's line in the file.
    rows : the data rows, in file order.
    decimal_comma : True for a ``;``-separated file whose numbers have decimal commas.
    spec : the kind of table.
    """

    source: str
    header: tuple[str, ...]
    header_line: int
    rows: tuple[Row, ...]
    decimal_comma: bool
    spec: TableSpec

    def index(self, *names: str, fold_case: bool = False) -> int | None:
        """The position of the first column named one of ``names``, or None."""
        head = [h.lower() for h in self.header] if fold_case else list(self.header)
        for n in names:
            key = n.lower() if fold_case else n
            if key in head:
                return head.index(key)
        return None

    def where(self, line: int | None = None, column: str | None = None) -> str:
        """``file line N, column`` for messages (``file header`` for the header)."""
        if line is None:
            return f"{self.source} header" if column is None else f"{self.source} column '{visible(column)}'"
        return f"{self.source} line {line}" + (f", {visible(column)}" if column else "")

    def fail(self, key: str, message: str) -> Exception:
        """The error of this kind of table (raise it)."""
        return self.spec.error(key, message)

    def number(self, row: Row, j: int, what: str = "a number") -> float:
        """The number in cell ``j`` of ``row`` (decimal comma in a ``;`` file), or an error naming it."""
        c = row.cells[j]
        if not self.decimal_comma and NUMBER.fullmatch(c):  # the common case, without building a message
            v = float(c)
            if math.isfinite(v):
                return v
        return parse_number(
            c,
            self.where(row.line, self.header[j]),
            what,
            error=self.spec.error,
            decimal_comma=self.decimal_comma,
        )


# ------------------------------------------------------------------------------------------------------
# numbers
# ------------------------------------------------------------------------------------------------------
def parse_number(
    cell: str,
    where: str,
    what: str = "a number",
    *,
    error: Callable[[str, str], Exception] = TableError,
    decimal_comma: bool = False,
) -> float:
    """A finite plain decimal number from a cell, or ``error(where, message)`` with the fix."""
    c = cell.strip()
    if decimal_comma:
        c = c.replace(",", ".")
    if not NUMBER.fullmatch(c):
        hint = (
            "; write a decimal point (1.50, not 1,50)"
            if re.fullmatch(r"[+-]?\d*,\d+", c)
            else "; leave no blanks"
            if not c
            else ""
        )
        raise error(where, f"'{visible(cell.strip())}' is not {what}{hint}")
    v = float(c)
    if not math.isfinite(v):  # '1e400' is a plain decimal, but past the largest float
        raise error(where, f"'{cell.strip()}' is out of range for {what}")
    return v


# ------------------------------------------------------------------------------------------------------
# the formula guard (written and read back)
# ------------------------------------------------------------------------------------------------------
def formula_risk(text: str) -> bool:
    """Whether a spreadsheet would take ``text`` for a formula: it starts (after spaces) with one of
    :data:`FORMULA_TRIGGERS` and is not a plain number (``-0.012`` is a number, ``-1+2`` a formula)."""
    s = text.lstrip(" ")
    return s[:1] in FORMULA_TRIGGERS and not NUMBER.fullmatch(s.strip())


def guard_cell(text: str) -> str:
    """``text`` as a CSV cell a spreadsheet keeps as text: a leading apostrophe where it would be a
    formula (source: OWASP, "CSV Injection"), and where the text itself starts with an apostrophe that
    :func:`unguard_cell` would otherwise remove, so that ``unguard_cell(guard_cell(t)) == t``."""
    if formula_risk(text) or _escaped(text):
        return "'" + text
    return text


def unguard_cell(cell: str) -> str:
    """The text a guarded cell stands for: one leading apostrophe removed where :func:`guard_cell` put
    it (before a formula trigger or another apostrophe); any other cell unchanged."""
    return cell[1:] if _escaped(cell) else cell


def _escaped(cell: str) -> bool:
    return cell[:1] == "'" and (cell[1:2] == "'" or formula_risk(cell[1:]))


# ------------------------------------------------------------------------------------------------------
# writing
# ------------------------------------------------------------------------------------------------------
def csv_cell(value: object) -> str:
    """One cell as written: text shown safely (control characters as ``\\uXXXX``) and guarded against
    formulas; None as empty; numbers as given (format them before, as the column needs)."""
    if value is None:
        return ""
    if isinstance(value, float):
        return repr(value) if math.isfinite(value) else ""
    return guard_cell(visible(value))


def write_csv(header: Sequence[object], rows: Iterable[Sequence[object]]) -> str:
    """CSV text (comma-separated, ``\\n`` line ends, RFC 4180 quoting) whose every text cell is data,
    never a formula; what :func:`parse_table` reads back."""
    import io

    buf = io.StringIO()
    head = [csv_cell(h) for h in header]
    # a ';' or a tab in a column name would make the header look like another separator's: quote it
    odd = any(";" in h or "\t" in h for h in head)
    csv.writer(buf, lineterminator="\n", quoting=csv.QUOTE_ALL if odd else csv.QUOTE_MINIMAL).writerow(head)
    w = csv.writer(buf, lineterminator="\n")
    for r in rows:
        w.writerow([csv_cell(c) for c in r])
    return buf.getvalue()


# ------------------------------------------------------------------------------------------------------
# reading
# ------------------------------------------------------------------------------------------------------
def read_table(path: str | Path, spec: TableSpec) -> Table:
    """Read the table in ``path`` (see the module docstring)."""
    return parse_table(read_table_text(path, spec), spec, str(path))


def read_table_text(path: str | Path, spec: TableSpec) -> str:
    """The text of a table file, or one error saying it is missing, not a file, too large or not UTF-8."""
    return read_user_text(
        path,
        what=spec.what,
        limit_bytes=spec.max_bytes,
        error=spec.error,
        kind="a .csv file",
        too_large_hint=(
            f"a {spec.what} holds at most {spec.max_rows} {spec.row_word}s: check that this is the right file"
        ),
        encoding="utf-8-sig",
    )


def parse_table(text: str, spec: TableSpec, source: str = "<table>") -> Table:
    """A :class:`Table` from CSV text (see the module docstring); every problem is ``spec.error``."""
    lines = text.removeprefix("\ufeff").replace("\r\n", "\n").replace("\r", "\n").split("\n")
    h = 0
    while h < len(lines) and (not lines[h].strip() or lines[h].lstrip().startswith("#")):
        h += 1  # blank lines and comments above the header
    if h == len(lines):
        raise spec.error(
            source,
            f"the {spec.what} is empty: expected a header '{spec.header_example}' and one row per "
            f"{spec.row_word}",
        )
    delimiter, decimal_comma = _dialect(lines[h], spec, f"{source} line {h + 1}")
    records = _records(lines, h, delimiter, spec, source)
    header_line, header = records[0]
    header = tuple(_clean(c, spec, source, None, "") for c in header)
    _check_header(header, spec, source)
    width = len(header)
    if _UNSAFE_IN_LINE.search(text) is None:  # the common case: no cell can hold a control character
        rows = [Row(line, _clean_row(cells, header, spec, source, line)) for line, cells in records[1:]]
    else:
        rows = [
            Row(line, tuple(_clean(c, spec, source, line, n) for c, n in zip(cells, header, strict=True)))
            if len(cells) == width
            else _clean_row(cells, header, spec, source, line)  # raises the width error
            for line, cells in records[1:]
        ]
    return Table(source, header, header_line, tuple(rows), decimal_comma, spec)


def _clean_row(
    cells: list[str], header: tuple[str, ...], spec: TableSpec, source: str, line: int
) -> tuple[str, ...]:
    """A row of a text known to hold no control character: trimmed, length-checked, guard removed."""
    if len(cells) != len(header):
        raise spec.error(f"{source} line {line}", _width_message(len(header), len(cells), spec))
    out = tuple(c.strip() for c in cells)
    if max(map(len, out)) > MAX_CELL_CHARS:
        return tuple(_clean(c, spec, source, line, n) for c, n in zip(cells, header, strict=True))  # raises
    return tuple(unguard_cell(c) if c[:1] == "'" else c for c in out)


_COMMA_NUMBER = re.compile(r"[+-]?\d+,\d+(\s*nm)?")  # a number with a decimal comma, as a column name


def _dialect(first: str, spec: TableSpec, where: str) -> tuple[str, bool]:
    """The field separator from the header line (the one that splits it, quotes respected), and
    whether numbers have decimal commas."""
    semi = _split(first, ";")
    if (
        spec.decimal_comma
        and len(semi) > 1
        and all(_COMMA_NUMBER.fullmatch(c.strip()) for c in semi if "," in c)
    ):
        return ";", True  # a wide spectra header: its column names are wavelengths with decimal commas
    comma = _split(first, ",")
    if len(comma) > 1:
        if spec.decimal_comma and any(";" in c for c in comma):
            raise spec.error(
                where,
                "mixes ';' and ',' between fields: save the file as CSV with ',' between fields and '.' "
                "as the decimal point",
            )
        return ",", False
    if len(_split(first, ";")) > 1:
        if spec.decimal_comma:
            return ";", True
        raise spec.error(
            where,
            f"the file looks semicolon-separated (semicolons between fields): kplan reads the {spec.what} "
            f"as comma-separated values with a decimal point, e.g. '{spec.header_example}'; export it as "
            "CSV with commas",
        )
    if len(_split(first, "\t")) > 1:
        raise spec.error(
            where,
            f"the file looks tab-separated: kplan reads the {spec.what} as comma-separated values "
            f"(header '{spec.header_example}'); export it as CSV with commas",
        )
    return ",", False


def _split(line: str, delimiter: str) -> list[str]:
    try:
        return next(csv.reader([line], delimiter=delimiter))
    except (csv.Error, StopIteration):
        return [line]


def _records(lines: list[str], h: int, delimiter: str, spec: TableSpec, source: str):
    """(line, raw cells) of the header and every non-blank row below it, by csv's quoting rules."""
    reader = csv.reader(iter(lines[h:]), delimiter=delimiter, strict=True)
    out: list[tuple[int, list[str]]] = []
    last = 0  # the line (counted from the header) the previous record ended on
    try:
        for cells in reader:
            start, last = last + 1, reader.line_num
            if start != last:
                raise spec.error(
                    f"{source} line {h + start}",
                    "a quoted cell runs over several lines (an unclosed quote?): close the quote on "
                    "that line",
                )
            if not any(c.strip() for c in cells):
                continue
            out.append((h + start, cells))
            if len(out) > spec.max_rows + 1:
                raise spec.error(
                    source,
                    f"more than {spec.max_rows} {spec.row_word}s: a {spec.what} holds at most "
                    f"{spec.max_rows} rows; split the file",
                )
    except csv.Error as exc:
        line = h + last + 1  # the line the failing record starts on (an unclosed quote runs on)
        if "field larger" in str(exc):
            raise spec.error(
                f"{source} line {line}",
                f"a cell is longer than {MAX_CELL_CHARS} characters (an unclosed quote?): check the "
                "quotes on that line",
            ) from None
        raise spec.error(
            f"{source} line {line}",
            f"not readable as CSV ({exc}): a cell with a quote must be quoted whole, the quote doubled "
            '("5"" tube")',
        ) from None
    return out


def _clean(cell: str, spec: TableSpec, source: str, line: int | None, column: str) -> str:
    """A cell trimmed and checked (length, control and text-direction characters), guard removed."""
    where = f"{source} header" if line is None else f"{source} line {line}, {visible(column)}"
    c = cell.strip()
    if len(c) > MAX_CELL_CHARS:
        raise spec.error(where, f"a cell of {len(c)} characters; at most {MAX_CELL_CHARS}: shorten it")
    bad = first_unsafe(cell)  # before trimming: a tab or a line separator at either end counts too
    if bad:
        raise spec.error(
            where,
            f"'{visible(c)}' contains the control or text-direction character {bad}: remove it "
            "(letters of any script, digits and punctuation are fine)",
        )
    return unguard_cell(c)


def _check_header(header: tuple[str, ...], spec: TableSpec, source: str) -> None:
    for k, name in enumerate(header):
        if not name:
            raise spec.error(f"{source} header", f"column {k + 1} has no name: name it or delete it")
    dup = next((n for n in header if header.count(n) > 1), None)
    if dup is not None:
        raise spec.error(f"{source} column '{visible(dup)}'", "appears twice in the header: keep one")


def _width_message(width: int, got: int, spec: TableSpec) -> str:
    msg = f"expected {width} fields, got {got}"
    if got > width:
        comma = (
            ""
            if spec.decimal_comma
            else "a decimal comma? write numbers with a decimal point (1.50, not 1,50); "
        )
        return f'{msg}; {comma}quote text that contains commas ("Surname, Given")'
    return msg + ": fill every column (write 0 rather than nothing for a volume)"


__all__ = [
    "FORMULA_TRIGGERS",
    "KINDS",
    "NUMBER",
    "Row",
    "Table",
    "TableError",
    "TableSpec",
    "csv_cell",
    "formula_risk",
    "guard_cell",
    "parse_number",
    "parse_table",
    "read_table",
    "read_table_text",
    "table_spec",
    "unguard_cell",
    "write_csv",
]
