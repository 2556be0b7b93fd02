"""Two PDFs that print alike: the same pixels (rendered by poppler's pdftoppm) and the same words on each
page; shared by the tests of the stamped cards and the stamped key."""

from __future__ import annotations

import io
import re
import subprocess

import numpy as np


def pixels(pdf: bytes, tmp_path, tag: str, last: int | None = None, dpi: int = 100) -> list[np.ndarray]:
    from PIL import Image

    src = tmp_path / f"{tag}.pdf"
    src.write_bytes(pdf)
    upto = ["-l", str(last)] if last else []
    subprocess.run(["pdftoppm", "-r", str(dpi), "-gray", *upto, str(src), str(tmp_path / tag)], check=True)
    files = sorted(tmp_path.glob(f"{tag}-*.pgm"))
    return [np.asarray(Image.open(f), dtype=int) for f in files]


def words(pdf: bytes) -> list[list[str]]:
    from pypdf import PdfReader

    return [sorted(re.split(r"\s+", p.extract_text().strip())) for p in PdfReader(io.BytesIO(pdf)).pages]


def same_print(stamped: bytes, whole: bytes, tmp_path, pages=None) -> None:
    last = max(pages) + 1 if pages is not None else None
    a, b = pixels(stamped, tmp_path, "stamped", last), pixels(whole, tmp_path, "whole", last)
    assert len(a) == len(b)
    for i in pages if pages is not None else range(len(a)):
        assert a[i].shape == b[i].shape
        differ = np.abs(a[i] - b[i]) > 32  # a quarter of the grey scale: a glyph moved, not antialiasing
        assert differ.mean() < 1e-4, (i, np.unique(np.nonzero(differ)[0])[:20])
    wa, wb = words(stamped), words(whole)
    for i in pages if pages is not None else range(len(wa)):
        assert wa[i] == wb[i], i
