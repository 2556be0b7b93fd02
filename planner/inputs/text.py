"""User-supplied text at the edge: length limits, identifiers, and characters unsafe on a terminal.

Text from plans and CSV files ends up on terminals, in file names of nobody's choosing and on paper.
Two rules, applied here and nowhere else:

- identifiers (stock ids, species names, ion names, tube labels) must be short, printable and free of
  control and bidirectional-override characters: :func:`check_identifier` refuses them;
- free text (titles, labels) may hold anything printable up to :data:`MAX_TEXT` characters; whatever
  it holds is shown through :func:`visible`, which turns every unsafe character into a ``\\uXXXX``
  escape so it cannot move the cursor, recolour the terminal, open a link or reverse a line.
"""

from __future__ import annotations

import re

from .limits import MAX_IDENTIFIER, MAX_TEXT

# C0 and C1 control characters (ESC starts terminal escape sequences, OSC 8 makes links), DEL, the
# bidirectional embeddings/overrides/isolates and marks (they reorder what is shown, U+202E reverses a
# line), and the Unicode line/paragraph separators (some terminals start a new line on them).
_UNSAFE = re.compile("[\x00-\x1f\x7f-\x9f\u061c\u200e\u200f\u2028\u2029\u202a-\u202e\u2066-\u2069]")


def visible(text: object) -> str:
    """``text`` with every control or bidirectional-formatting character written as ``\\uXXXX``
    (U+202E becomes the six characters ``\\u202e``; ESC becomes ``\\u001b``)."""
    return _UNSAFE.sub(lambda m: f"\\u{ord(m.group()):04x}", str(text))


def first_unsafe(text: str) -> str | None:
    """The first control or bidirectional-formatting character of ``text`` as ``U+XXXX``, or None."""
    m = _UNSAFE.search(text)
    return f"U+{ord(m.group()):04X}" if m else None


def check_identifier(text: str, what: str) -> str:
    """Return ``text`` if it is usable as an identifier, else raise ValueError saying why.

    Parameters
    ----------
    text : the identifier as written.
    what : what it names, for the message ("stock id", "tube label").
    """
    if not text.strip():
        raise ValueError(f"{what} is empty: give it a short name such as 'CU' or 'T1'")
    if text != text.strip():
        raise ValueError(f"{what} '{visible(text)}' starts or ends with a space: remove it")
    bad = first_unsafe(text)
    if bad:
        raise ValueError(
            f"{what} '{visible(text)}' contains the control or text-direction character {bad}: "
            "use letters, digits and punctuation only"
        )
    if len(text) > MAX_IDENTIFIER:
        raise ValueError(f"{what} is {len(text)} characters long; at most {MAX_IDENTIFIER}: shorten it")
    return text


def check_text(text: str, what: str = "text") -> str:
    """Return ``text`` if it is at most :data:`MAX_TEXT` characters, else raise ValueError."""
    if len(text) > MAX_TEXT:
        raise ValueError(f"{what} is {len(text)} characters long; at most {MAX_TEXT}: shorten it")
    return text


def plural(n: int | float, word: str, many: str | None = None) -> str:
    """``n`` with ``word`` in the number it takes: ``plural(1, "tube")`` → "1 tube", ``plural(3, "tube")``
    → "3 tubes", ``plural(2, "copy", "copies")`` → "2 copies". Counts print as integers."""
    k = int(n) if float(n) == int(n) else n
    return f"{k} {word if k == 1 else (many or word + 's')}"


def tube_list(labels, mask, most: int = 6) -> str:
    """The labels where ``mask`` is true, comma-separated, the first ``most`` of them ("T1, T2, …")."""
    sel = [t for t, m in zip(labels, mask, strict=True) if m]
    return ", ".join(sel[:most]) + (" …" if len(sel) > most else "")
