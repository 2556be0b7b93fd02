"""Every limit of the tool, defined once; the jobs enforce them (a library caller meets the same limits
as the command line), and the command line's options take their bounds from here.

A limit keeps a request the tool accepts from running away with memory or time: each is far above any
real experiment (a design has a dozen tubes, a class a few dozen students) and is stated in the README.
The same word means the same thing everywhere: *tubes* is the number of tubes in one recipe (a design, a
card, a classic series), *replicates* the repeated tubes of a calibration series, *additions* the
aliquots of an in-cuvette titration, *trials* the simulated experiments of a Monte Carlo.
"""

from __future__ import annotations

import math

from .errors import LimitError

# --- counts a job is asked for -----------------------------------------------------------------------
MAX_TUBES = 200  # tubes in one recipe: design.tubes, a design, a card, a classic series' points
MAX_REPLICATES = 20  # replicate tubes of a calibration series (beyond a few, a global fit is better)
MAX_ADDITIONS = 60  # aliquots of an in-cuvette titration (a cuvette holds a few mL)
MAX_TRIALS = 100_000  # Monte-Carlo experiments: 2000 give an SE to a few per cent
MAX_STUDENTS = 2000  # students in a roster, a key or a results file (a whole year's intake)
MAX_CARDS = 500  # cards in one class set (a larger class: one class set per section)
MAX_CLASS_TUBES = 10_000  # tubes on all the cards of one class set together (cards × tubes per card)

# --- the plan ------------------------------------------------------------------------------------------
MAX_PLAN_BYTES = 1_000_000  # a plan is a page of TOML; anything this large is not one
MAX_DEPTH = 50  # nesting levels of tables and arrays; a plan needs about 4
MAX_SPECIES = 40  # species in a plan (complexes, protonated ligands, hydroxo species); a study has a few
MAX_STOCKS = 20  # stocks in a plan
MAX_DISPENSERS = 20  # dispensers in a plan
MAX_ALTERNATIVES = 10  # alternative species of the model check
MAX_IONS = 20  # ions listed in one stock
MAX_GRID_LEVELS = 20_000  # grid volumes per stock (tube_volume / step); the design enumerates them
MAX_QUANTITY_CHARS = 60  # "0.0200 mol/L" is 12; no quantity needs a page of text
MAX_TEXT = 200  # characters in a title, label, name, reagent name or formula
MAX_IDENTIFIER = 40  # characters in a stock id, species name, ion name or tube label
MAX_STUDENT_ID = 64  # characters of a student id

# --- tables (CSV) the tool reads ----------------------------------------------------------------------
MAX_CSV_BYTES = 1_000_000  # a recipe, readings or schedule file
MAX_ROWS = 1000  # tubes in a recipe or readings file (a design has at most MAX_TUBES)
MAX_STEPS = 200  # rows of a titration schedule
MAX_CLASS_ROWS = 100_000  # rows of a key or results file: 2000 students with 50 tubes each
MAX_CLASS_CSV_BYTES = 20_000_000  # a key or results file of MAX_CLASS_ROWS rows
MAX_ROSTER_BYTES = 1_000_000  # a roster of MAX_STUDENTS students
MAX_CELL_CHARS = 1000  # characters in one cell of any table
MAX_WAVELENGTHS = 4001  # points of a spectrum: 400 nm at 0.1 nm, or 100–2000 nm at about 0.5 nm
MAX_EPSILON_ROWS = 20_000  # wavelengths of an ε table: 100–2000 nm at 0.1 nm
MAX_EPSILON_BYTES = 2_000_000  # an ε table of MAX_EPSILON_ROWS rows and a handful of species
MAX_SPECTRA_ROWS = 500_000  # readings in a long spectra table: 200 tubes × 2500 wavelengths
MAX_SPECTRA_BYTES = 16_000_000  # a long spectra table of MAX_SPECTRA_ROWS rows


def check_count(value: object, name: str, limit: int, *, least: int = 1, fix: str = "") -> int:
    """``value`` as an int if it is a whole number in [least, limit], else a :class:`LimitError`.

    Parameters
    ----------
    value : the count asked for.
    name : the parameter's name, for the message ("tubes", "trials").
    limit, least : the allowed range.
    fix : what to do instead when the count is too large (appended to the message).
    """
    whole = isinstance(value, int) or (
        isinstance(value, float) and math.isfinite(value) and value.is_integer()
    )
    if isinstance(value, bool) or not whole:
        raise LimitError(f"{name} = {value!r}: give a whole number between {least} and {limit}")
    n = int(value)  # type: ignore[arg-type]
    if n < least:
        raise LimitError(f"{name} = {n}: give at least {least}")
    if n > limit:
        raise LimitError(f"{name} = {n}: at most {limit}{'; ' + fix if fix else ''}")
    return n


def check_class_size(students: int, tubes: object) -> tuple[int, int]:
    """(tubes per card, students) of a class set, or a :class:`LimitError`: at most :data:`MAX_TUBES`
    tubes per card, :data:`MAX_CARDS` cards and :data:`MAX_CLASS_TUBES` tubes on all of them."""
    n = check_count(tubes, "tubes (per card)", MAX_TUBES)
    cards = check_count(
        students, "students", MAX_CARDS, fix="make one class set per section (a roster per section)"
    )
    if n * cards > MAX_CLASS_TUBES:
        raise LimitError(
            f"{cards} students × {n} tubes = {n * cards} tubes: a class set has at most {MAX_CLASS_TUBES}; "
            "use fewer tubes per card or make one class set per section"
        )
    return n, cards


__all__ = [name for name in dir() if name.startswith("MAX_")] + ["check_class_size", "check_count"]
