"""Reagent hazards for the printed sheets: GHS statements, pictograms, clashes between reagents.

The data live in ``planner/data/reagents.toml``; every entry records its source, whether it was
recalled (``from_memory``) and when it was last reviewed. Statement wording follows the GHS / CLP
standard phrases [source: UN GHS Rev. 9 (2021) Annex 3; Regulation (EC) No 1272/2008 Annex III —
texts recalled, verify against the current edition]. The library supports the sheet; it never
replaces the supplier's safety data sheet, and the sheet says so.
"""

from __future__ import annotations

import functools
import re
from collections.abc import Iterable
from dataclasses import dataclass
from importlib import resources

import tomllib

from ..inputs.errors import InputError

__all__ = [
    "ALWAYS",
    "CLASSES",
    "CMR_CODES",
    "GENERAL_CAUTIONS",
    "H_STATEMENTS",
    "NO_DATA",
    "PICTOGRAMS",
    "SIGNAL_WORDS",
    "Clash",
    "PlanReagent",
    "ReagentHazards",
    "SafetyDataError",
    "clashes",
    "hazards_for",
    "infer_from_label",
    "is_cmr_code",
    "library",
    "lookup",
    "statement_text",
    "validate_library",
]

ALWAYS = "Follow the supplier's SDS and your institution's rules."
NO_DATA = "no hazard data in the library: consult the supplier's safety data sheet"
SIGNAL_WORDS = ("Danger", "Warning", "")

PICTOGRAMS: dict[str, str] = {
    # source: UN GHS Rev. 9 Annex 3 §A3.4 / CLP Annex V (names recalled)
    "GHS01": "Exploding bomb",
    "GHS02": "Flame",
    "GHS03": "Flame over circle",
    "GHS04": "Gas cylinder",
    "GHS05": "Corrosion",
    "GHS06": "Skull and crossbones",
    "GHS07": "Exclamation mark",
    "GHS08": "Health hazard",
    "GHS09": "Environment",
}

H_STATEMENTS: dict[str, str] = {
    # physical hazards
    "H226": "Flammable liquid and vapour.",
    "H271": "May cause fire or explosion; strong oxidiser.",
    "H272": "May intensify fire; oxidiser.",
    "H290": "May be corrosive to metals.",
    # health hazards
    "H301": "Toxic if swallowed.",
    "H302": "Harmful if swallowed.",
    "H311": "Toxic in contact with skin.",
    "H312": "Harmful in contact with skin.",
    "H314": "Causes severe skin burns and eye damage.",
    "H315": "Causes skin irritation.",
    "H317": "May cause an allergic skin reaction.",
    "H318": "Causes serious eye damage.",
    "H319": "Causes serious eye irritation.",
    "H331": "Toxic if inhaled.",
    "H332": "Harmful if inhaled.",
    "H334": "May cause allergy or asthma symptoms or breathing difficulties if inhaled.",
    "H335": "May cause respiratory irritation.",
    "H340": "May cause genetic defects.",
    "H341": "Suspected of causing genetic defects.",
    "H350": "May cause cancer.",
    "H350i": "May cause cancer by inhalation.",
    "H351": "Suspected of causing cancer.",
    "H360": "May damage fertility or the unborn child.",
    "H360F": "May damage fertility.",
    "H360D": "May damage the unborn child.",
    "H360FD": "May damage fertility. May damage the unborn child.",
    "H360Fd": "May damage fertility. Suspected of damaging the unborn child.",
    "H360Df": "May damage the unborn child. Suspected of damaging fertility.",
    "H361": "Suspected of damaging fertility or the unborn child.",
    "H361f": "Suspected of damaging fertility.",
    "H361d": "Suspected of damaging the unborn child.",
    "H361fd": "Suspected of damaging fertility. Suspected of damaging the unborn child.",
    "H362": "May cause harm to breast-fed children.",
    "H372": "Causes damage to organs through prolonged or repeated exposure.",
    "H373": "May cause damage to organs through prolonged or repeated exposure.",
    # environmental hazards
    "H400": "Very toxic to aquatic life.",
    "H410": "Very toxic to aquatic life with long lasting effects.",
    "H411": "Toxic to aquatic life with long lasting effects.",
    "H412": "Harmful to aquatic life with long lasting effects.",
    # combined statements (their own standard wording)
    "H302+H312": "Harmful if swallowed or in contact with skin.",
    "H302+H332": "Harmful if swallowed or if inhaled.",
    "H302+H312+H332": "Harmful if swallowed, in contact with skin or if inhaled.",
    "H301+H331": "Toxic if swallowed or if inhaled.",
    # supplemental EU statements (CLP Annex II)
    "EUH032": "Contact with acids liberates very toxic gas.",
}

CMR_CODES = ("H340", "H341", "H350", "H351", "H360", "H361", "H362")
"""Carcinogenic, mutagenic or toxic for reproduction: these codes and their lettered variants
(H350i, H360D, H361fd …) [source: CLP Annex I parts 3.5–3.7]."""

CLASSES = ("acid", "base", "oxidiser", "perchlorate", "thiocyanate", "reducer", "organic")

_CLASH_RULES: tuple[tuple[str, str, str], ...] = (
    # (class a, class b, what to do) — wording ours; the chemistry is standard laboratory practice
    (
        "thiocyanate",
        "acid",
        "Thiocyanate with acid: acid on the solid or a concentrated thiocyanate solution releases a very "
        "toxic gas (EUH032). Dilute the thiocyanate first and add it to the diluted acid medium, never the "
        "other way round; keep thiocyanate and acid waste apart.",
    ),
    (
        "oxidiser",
        "organic",
        "Oxidising salt or acid with organic material: keep the solids and concentrates apart, away from "
        "paper and solvents; wipe spills up while wet.",
    ),
    (
        "perchlorate",
        "organic",
        "Perchlorate with organic compounds: dried residues can explode. Never evaporate or heat "
        "perchlorate solutions that contain organic matter; rinse glassware before it dries.",
    ),
    (
        "perchlorate",
        "reducer",
        "Perchlorate with a reducing agent: keep the solids apart; mix only as dilute solutions.",
    ),
    (
        "acid",
        "base",
        "Acid with ammonia or an amine: neutralising the concentrates is strongly exothermic. Dilute each "
        "first, add slowly with stirring, in a fume hood.",
    ),
    (
        "oxidiser",
        "reducer",
        "Oxidiser with a reducing agent (e.g. nitrate or nitric acid with thiocyanate): mix only as dilute "
        "solutions; never combine the solids or concentrates.",
    ),
)

GENERAL_CAUTIONS: tuple[str, ...] = (
    "Wear eye protection (safety glasses; goggles where a reagent is corrosive), nitrile gloves and a "
    "lab coat for every step, weighing included.",
    "Acids: add acid to water, never water to acid; dilute concentrated acids in a fume hood and rinse "
    "any splash on skin with plenty of water at once.",
    "Do not pipette by mouth; use a pipette filler.",
    "Label every flask and tube with its contents and the date.",
    "Collect metal-containing solutions and rinses in the metal waste container; nothing containing "
    "metal salts goes down the drain.",
)


class SafetyDataError(InputError):
    """The reagent library is malformed; the message names the entry, the key and the fix."""


@dataclass(frozen=True)
class ReagentHazards:
    """One library entry.

    Attributes
    ----------
    name : the reagent as written on the sheet.
    aliases : other names it is found by.
    formula : formula for people (display only).
    signal_word : "Danger", "Warning" or "" (not classified).
    hazard_codes : GHS/CLP codes, combined codes as "H302+H332".
    pictograms : GHS01…GHS09.
    classes : incompatibility classes (see ``CLASSES``).
    incompatible, ppe : what to keep it from, what to wear (beyond the usual).
    waste, notes : disposal and remarks.
    source, from_memory, checked : provenance of the entry.
    """

    name: str
    aliases: tuple[str, ...]
    formula: str
    signal_word: str
    hazard_codes: tuple[str, ...]
    pictograms: tuple[str, ...]
    classes: tuple[str, ...]
    incompatible: tuple[str, ...]
    ppe: tuple[str, ...]
    waste: str
    notes: str
    source: str
    from_memory: bool
    checked: str

    def __repr__(self) -> str:
        return (
            f"ReagentHazards({self.name!r}: {self.signal_word or 'not classified'}, "
            f"{', '.join(self.hazard_codes)})"
        )

    @property
    def cmr_codes(self) -> tuple[str, ...]:
        """The codes that make it carcinogenic, mutagenic or toxic for reproduction."""
        return tuple(c for c in self.hazard_codes if any(is_cmr_code(p) for p in c.split("+")))

    @property
    def cmr(self) -> bool:
        return bool(self.cmr_codes)

    @property
    def classified(self) -> bool:
        return bool(self.hazard_codes)

    def statements(self) -> tuple[tuple[str, str], ...]:
        """(code, text) for every hazard statement."""
        return tuple((c, statement_text(c)) for c in self.hazard_codes)


@dataclass(frozen=True)
class PlanReagent:
    """A reagent a plan's stocks use, with the stocks that hold it.

    Attributes
    ----------
    name : the library name, or the name/label as the plan gives it when the library lacks it.
    stock_ids : stocks that contain it.
    hazards : the library entry, or None.
    inferred : True when read from a stock label rather than its ``reagent`` key.
    message : why there are no data (None when ``hazards`` is given).
    """

    name: str
    stock_ids: tuple[str, ...]
    hazards: ReagentHazards | None
    inferred: bool = False
    message: str | None = None


@dataclass(frozen=True)
class Clash:
    """Two incompatibility classes present in one plan, the reagents involved and what to do."""

    classes: tuple[str, str]
    reagents: tuple[str, ...]
    advice: str


# --------------------------------------------------------------------------------------------------
def is_cmr_code(code: str) -> bool:
    """True for H340/H341/H350/H351/H360/H361/H362 and their lettered variants (H350i, H360Fd, …)."""
    m = re.fullmatch(r"(H\d{3})[A-Za-z]*", code.strip())
    return bool(m) and m.group(1) in CMR_CODES


def statement_text(code: str) -> str:
    """Standard wording of a hazard statement; combined codes fall back to their parts joined.

    Raises
    ------
    KeyError
        For a code the table lacks (the library validation catches this before any sheet is made).
    """
    if code in H_STATEMENTS:
        return H_STATEMENTS[code]
    parts = code.split("+")
    if len(parts) > 1 and all(p in H_STATEMENTS for p in parts):
        return " ".join(H_STATEMENTS[p] for p in parts)
    raise KeyError(f"hazard statement {code!r} has no text: add it to planner.paper.safety.H_STATEMENTS")


def _norm(name: str) -> str:
    """Lookup key: lower case, one kind of hydrate dot, single spaces, no space before '('."""
    s = name.strip().lower()
    for dot in ("·", "•", "∙", "⋅", "*"):
        s = s.replace(dot, ".")
    s = re.sub(r"\s+", " ", s)
    s = re.sub(r"\s+\(", "(", s)
    return s


_STR_KEYS = ("name", "formula", "signal_word", "waste", "notes", "source", "checked")
_LIST_KEYS = ("aliases", "hazard_codes", "pictograms", "classes", "incompatible", "ppe")


def _entry(i: int, raw: dict) -> ReagentHazards:
    where = f"reagents.toml reagent[{i}] ({raw.get('name', '?')})"
    missing = [k for k in (*_STR_KEYS, *_LIST_KEYS, "from_memory") if k not in raw]
    if missing:
        raise SafetyDataError(f"{where}: missing {', '.join(missing)}; every entry needs all keys")
    extra = set(raw) - {*_STR_KEYS, *_LIST_KEYS, "from_memory"}
    if extra:
        raise SafetyDataError(f"{where}: unknown key(s) {', '.join(sorted(extra))}")
    return ReagentHazards(
        **{k: str(raw[k]) for k in _STR_KEYS},
        **{k: tuple(str(x) for x in raw[k]) for k in _LIST_KEYS},
        from_memory=bool(raw["from_memory"]),
    )


def validate_library(entries: Iterable[ReagentHazards]) -> None:
    """Check the library: known codes, pictograms, signal words, classes; unique names and aliases.

    Raises
    ------
    SafetyDataError
        Naming the entry and what to fix.
    """
    seen: dict[str, str] = {}
    for e in entries:
        if e.signal_word not in SIGNAL_WORDS:
            raise SafetyDataError(
                f"{e.name}: signal_word {e.signal_word!r} must be 'Danger', 'Warning' or ''"
            )
        for c in e.hazard_codes:
            try:
                statement_text(c)
            except KeyError as exc:
                raise SafetyDataError(f"{e.name}: {exc.args[0]}") from None
        for p in e.pictograms:
            if p not in PICTOGRAMS:
                raise SafetyDataError(f"{e.name}: pictogram {p!r} is not one of GHS01…GHS09")
        for c in e.classes:
            if c not in CLASSES:
                raise SafetyDataError(f"{e.name}: class {c!r} is not one of {', '.join(CLASSES)}")
        if e.hazard_codes and not e.signal_word and e.pictograms:
            raise SafetyDataError(f"{e.name}: classified with pictograms but no signal word")
        if not e.source.strip() or not e.checked.strip():
            raise SafetyDataError(f"{e.name}: every entry needs a source and a checked date")
        for key in (e.name, *e.aliases):
            k = _norm(key)
            if k in seen and seen[k] != e.name:
                raise SafetyDataError(f"{e.name}: name or alias {key!r} is also used by {seen[k]}; keep one")
            seen[k] = e.name


@functools.lru_cache(maxsize=1)
def library() -> tuple[ReagentHazards, ...]:
    """Every entry of ``planner/data/reagents.toml``, validated (cached)."""
    text = resources.files("planner.data").joinpath("reagents.toml").read_text(encoding="utf-8")
    try:
        raw = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise SafetyDataError(f"reagents.toml: TOML syntax error: {exc}") from None
    entries = tuple(_entry(i, r) for i, r in enumerate(raw.get("reagent", [])))
    validate_library(entries)
    return entries


@functools.lru_cache(maxsize=1)
def _index() -> dict[str, ReagentHazards]:
    return {_norm(k): e for e in library() for k in (e.name, *e.aliases)}


def lookup(reagent_name: str) -> ReagentHazards | None:
    """The library entry for a reagent name, alias or formula (case-insensitive), else None."""
    if not isinstance(reagent_name, str) or not reagent_name.strip():
        return None
    return _index().get(_norm(reagent_name))


MIN_INFER_ALIAS = 3  # shorter aliases ("en") are looked up but never read out of free text


def infer_from_label(label: str) -> tuple[ReagentHazards, ...]:
    """Reagents a stock label names unambiguously (whole-word matches of names and aliases).

    A match inside a longer match is dropped ("CuSO4" inside "CuSO4.5H2O"); every name or alias
    belongs to one entry (checked by :func:`validate_library`), so each match is unambiguous.
    """
    text = _norm(label or "")
    spans: list[tuple[int, int, ReagentHazards]] = []
    for key, e in _index().items():
        if len(key) < MIN_INFER_ALIAS:
            continue
        for m in re.finditer(rf"(?<![a-z0-9]){re.escape(key)}(?![a-z0-9])", text):
            spans.append((m.start(), m.end(), e))
    spans.sort(key=lambda s: (s[0], -(s[1] - s[0])))
    kept: list[tuple[int, int, ReagentHazards]] = []
    for s in spans:
        if kept and s[0] < kept[-1][1]:
            continue  # inside (or overlapping) a longer, earlier match
        kept.append(s)
    out: list[ReagentHazards] = []
    for _, _, e in kept:
        if e not in out:
            out.append(e)
    return tuple(out)


def hazards_for(plan) -> list[PlanReagent]:
    """The reagents of every stock of ``plan``, grouped, in plan order.

    A stock's ``reagent`` key is looked up; without one, reagents its label names are used
    (marked ``inferred``). A stock with neither gets an entry saying there are no data.
    """
    groups: dict[str, dict] = {}

    def add(key: str, name: str, sid: str, hz: ReagentHazards | None, inferred: bool, msg: str | None):
        g = groups.setdefault(key, {"name": name, "ids": [], "hz": hz, "inferred": inferred, "msg": msg})
        if sid not in g["ids"]:
            g["ids"].append(sid)
        g["inferred"] = g["inferred"] and inferred  # named explicitly anywhere: not inferred

    for s in plan.stock:
        if s.reagent:
            hz = lookup(s.reagent)
            if hz is not None:
                add(hz.name, hz.name, s.id, hz, False, None)
            else:
                add("?" + _norm(s.reagent), s.reagent, s.id, None, False, NO_DATA)
            continue
        found = infer_from_label(s.label)
        for hz in found:
            add(hz.name, hz.name, s.id, hz, True, None)
        # the label may name only the medium ("… in 0.10 M KNO3"): the metal or ligand it carries
        # still needs data of its own unless an inferred entry is that component's salt
        uncovered = [
            c
            for c in ("M", "L")
            if c in s.conc and not any(_carries(hz, getattr(plan.components, c).label) for hz in found)
        ]
        if uncovered or not found:
            what = " and ".join({"M": "the metal", "L": "the ligand"}[c] for c in uncovered) or "it"
            add(
                "#" + s.id,
                s.label or s.id,
                s.id,
                None,
                False,
                f"stock {s.id}: no reagent named for {what}; {NO_DATA}",
            )  # plan keys: report notes
    return [
        PlanReagent(g["name"], tuple(g["ids"]), g["hz"], g["inferred"], g["msg"]) for g in groups.values()
    ]


def _carries(hz: ReagentHazards, component_label: str) -> bool:
    """True when entry ``hz`` plausibly supplies the component labelled e.g. 'Cu2+' or 'SCN-'."""
    core = re.sub(r"[\s\d]*[+-]+\d*$", "", component_label.strip()).strip("[]() ")
    if not core:
        return False
    if _norm(core) in {_norm(k) for k in (hz.name, *hz.aliases)}:
        return True
    return re.search(rf"{re.escape(core)}(?![a-z])", hz.formula) is not None


def clashes(reagents: Iterable[PlanReagent]) -> list[Clash]:
    """Incompatibilities between reagents of one plan (pairs of classes present together)."""
    by_class: dict[str, list[str]] = {}
    for r in reagents:
        if r.hazards is None:
            continue
        for c in r.hazards.classes:
            by_class.setdefault(c, []).append(r.name)
    out = []
    for a, b, advice in _CLASH_RULES:
        if a in by_class and b in by_class:
            names = tuple(dict.fromkeys(by_class[a] + by_class[b]))
            if len(names) == 1 and set(by_class[a]) == set(by_class[b]):
                continue  # one reagent in both classes (acetic acid: acid and organic) is no clash
            out.append(Clash((a, b), names, advice))
    return out
