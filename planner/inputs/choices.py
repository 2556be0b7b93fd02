"""The choices the command line offers, defined once and light to import (no numpy, no pydantic), so that
``kplan --help`` starts fast; the core modules that use them import them from here."""

from __future__ import annotations

CRITERIA = ("target", "all")
"""Design criteria: the target's variance alone, or D-optimality over every fitted parameter."""

SERIES_METHODS = ("job", "calibration", "mole-ratio", "survey")
"""The classic series ``kplan series --method`` offers (a method is listed only when it is finished)."""

SERIES_METHOD_OPTIONS = {
    "points": ("job", "mole-ratio"),
    "total": ("job", "calibration", "mole-ratio"),
    "limiting": ("calibration",),
    "excess": ("calibration",),
    "replicates": ("calibration",),
    "vary": ("mole-ratio",),
    "max-ratio": ("mole-ratio",),
    "recipe": ("survey",),
}
"""Which options each series method takes (the command refuses the others rather than ignore them)."""

CARD_SERIES = ("binding-curve", "mole-ratio", "job")
"""The kinds of lab ``kplan cards`` makes a teaching series for (``design.card_series``): a binding curve
(one reagent constant, the other rising), a mole-ratio series, or a Job (continuous-variation) series."""

PAPERS = {"A4": "A4", "Letter": "letter"}
"""Paper names accepted (CSS page sizes: ISO 216 A4, 210 × 297 mm; US Letter, 8.5 × 11 in)."""
