"""Spreadsheets the tool writes: every text cell data, never a formula, and the same bytes for the same
input (openpyxl stamps the save time into the workbook's properties and its zip entries;
:func:`stable_xlsx` saves with fixed ones instead)."""

from __future__ import annotations

import datetime as dt
import io
import re
import zipfile

from ..inputs.tables import formula_risk
from ..inputs.text import visible

FIXED_TIME = (2000, 1, 1, 0, 0, 0)  # the timestamps written (fixed: same input, same bytes)


def append_row(ws, values) -> None:
    """Append ``values`` to the worksheet ``ws``: numbers as numbers, every text as a text cell.

    openpyxl stores a string that starts with ``=`` as a formula; here every string is stored as text
    (cell type ``s``), with Excel's quote prefix where a spreadsheet would otherwise read it as a formula
    once edited (source: OWASP, "CSV Injection"), and control characters, which XML cannot hold, written
    as visible ``\\uXXXX`` escapes.
    """
    from openpyxl.cell import Cell

    cells = []
    for v in values:
        cell = Cell(ws, value=visible(v) if isinstance(v, str) else v)
        if isinstance(v, str):
            cell.data_type = "s"
            if formula_risk(cell.value):
                cell.quotePrefix = True
        cells.append(cell)
    ws.append(cells)  # the cells made here: no look-up of the row just written (O(cells) in openpyxl)


def stable_xlsx(wb) -> bytes:
    """The bytes of an openpyxl workbook with fixed created/modified times and zip entry times."""
    stamp = dt.datetime(*FIXED_TIME)
    wb.properties.created = stamp
    wb.properties.modified = stamp
    wb.properties.creator = "kplan"
    raw = io.BytesIO()
    wb.save(raw)
    src = zipfile.ZipFile(io.BytesIO(raw.getvalue()))
    out = io.BytesIO()
    with zipfile.ZipFile(out, "w", zipfile.ZIP_DEFLATED) as dst:
        for info in src.infolist():
            body = src.read(info.filename)
            if info.filename == "docProps/core.xml":  # openpyxl stamps the save time: put ours back
                body = _fixed_core(body)
            zi = zipfile.ZipInfo(info.filename, date_time=FIXED_TIME)
            zi.compress_type = zipfile.ZIP_DEFLATED
            zi.external_attr = 0o600 << 16
            dst.writestr(zi, body)
    return out.getvalue()


def _fixed_core(body: bytes) -> bytes:
    y, mo, d, h, mi, sec = FIXED_TIME
    stamp = f"{y:04d}-{mo:02d}-{d:02d}T{h:02d}:{mi:02d}:{sec:02d}Z"
    return re.sub(
        rb"(<dcterms:(?:created|modified)[^>]*>)[^<]*(<)",
        lambda m: m.group(1) + stamp.encode() + m.group(2),
        body,
    )
