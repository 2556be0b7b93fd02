"""Tests for planner.paper.safety and the reagent library: statement texts, pictograms, CMR flag, lookup,
label inference, clashes and the plan-level hazard list."""

from __future__ import annotations

import dataclasses
import re

import pytest
import tomllib
from hypothesis import given, settings
from hypothesis import strategies as st

from planner.inputs.plan import parse_plan
from planner.paper import safety
from planner.paper.json_out import to_json
from planner.paper.safety import (
    ALWAYS,
    CMR_CODES,
    H_STATEMENTS,
    NO_DATA,
    PICTOGRAMS,
    SafetyDataError,
    clashes,
    hazards_for,
    infer_from_label,
    is_cmr_code,
    library,
    lookup,
    statement_text,
    validate_library,
)

from ..conftest import scenario_text

LIB = library()
ALL_CODES = sorted({c for e in LIB for c in e.hazard_codes})


def plan_with(stocks_patch: dict[str, dict]):
    """The teaching scenario with some stocks' keys replaced (None removes a key)."""
    data = tomllib.loads(scenario_text("teaching"))
    for s in data["stock"]:
        for k, v in stocks_patch.get(s["id"], {}).items():
            if v is None:
                s.pop(k, None)
            else:
                s[k] = v
    return parse_plan(data)


# --------------------------------------------------------------------------------------------------
# statement texts and pictograms
# --------------------------------------------------------------------------------------------------
@pytest.mark.parametrize("code", ALL_CODES)
def test_every_code_used_has_text(code):
    text = statement_text(code)
    assert text and text[0].isupper() and text.endswith(".")
    for part in code.split("+"):  # combined statements: each part is a known statement too
        assert part in H_STATEMENTS


def test_statement_wording_reference_values():
    # source: UN GHS Rev. 9 Annex 3 / CLP Annex III standard phrases (recalled)
    assert statement_text("H314") == "Causes severe skin burns and eye damage."
    assert statement_text("H302") == "Harmful if swallowed."
    assert statement_text("H350i") == "May cause cancer by inhalation."
    assert statement_text("H302+H312+H332") == "Harmful if swallowed, in contact with skin or if inhaled."
    # source: CLP Annex II, EUH032
    assert statement_text("EUH032") == "Contact with acids liberates very toxic gas."


def test_unknown_code_raises_with_fix():
    with pytest.raises(KeyError, match="H_STATEMENTS"):
        statement_text("H999")
    # derived: a combination of known codes falls back to its parts' texts
    assert statement_text("H315+H319") == "Causes skin irritation. Causes serious eye irritation."


def test_pictogram_table_is_ghs01_to_ghs09():
    # source: UN GHS Annex 3 §A3.4: nine pictograms GHS01–GHS09
    assert sorted(PICTOGRAMS) == [f"GHS0{i}" for i in range(1, 10)]
    assert PICTOGRAMS["GHS05"] == "Corrosion" and PICTOGRAMS["GHS08"] == "Health hazard"  # from memory


# Pictogram each statement calls for, and the precedence rules that drop GHS07
# [from memory: CLP Annex I / Annex V and Art. 26; GHS Annex 1].
_PICTO_FOR = {
    "GHS02": {"H226"},
    "GHS03": {"H271", "H272"},
    "GHS05": {"H290", "H314", "H318"},
    "GHS06": {"H301", "H311", "H331"},
    "GHS07": {"H302", "H312", "H332", "H315", "H317", "H319", "H335"},
    "GHS08": {"H334", "H340", "H341", "H350", "H351", "H360", "H361", "H372", "H373"},
    "GHS09": {"H400", "H410", "H411"},
}


def _base(code: str) -> str:
    return re.match(r"(H\d{3}|EUH\d{3})", code).group(1)


def _expected_pictograms(codes) -> set[str]:
    parts = {_base(p) for c in codes for p in c.split("+")}
    want = {g for g, hs in _PICTO_FOR.items() if parts & hs}
    if "GHS07" in want:
        why07 = parts & _PICTO_FOR["GHS07"]
        if "GHS06" in want:
            why07 = set()  # GHS06 present: no GHS07
        if "GHS05" in want:
            why07 -= {"H315", "H319"}  # corrosion covers skin and eye irritation
        if parts & {"H334"}:
            why07 -= {"H315", "H317", "H319"}  # respiratory sensitiser (GHS08) covers these
        if not why07:
            want.discard("GHS07")
    return want


@pytest.mark.parametrize("entry", LIB, ids=[e.name for e in LIB])
def test_pictograms_follow_the_statements(entry):
    assert set(entry.pictograms) == _expected_pictograms(entry.hazard_codes)


_ALWAYS_DANGER = {"H271", "H301", "H311", "H314", "H318", "H331", "H334", "H340", "H350", "H360", "H372"}
# from memory: these categories carry "Danger" under GHS/CLP whatever else the substance is


@pytest.mark.parametrize("entry", LIB, ids=[e.name for e in LIB])
def test_signal_word_matches_codes(entry):
    parts = {_base(p) for c in entry.hazard_codes for p in c.split("+")}
    if parts & _ALWAYS_DANGER:
        assert entry.signal_word == "Danger"
    if entry.pictograms:
        assert entry.signal_word in ("Danger", "Warning")
    else:
        assert entry.signal_word in ("", "Warning")


# --------------------------------------------------------------------------------------------------
# CMR flag
# --------------------------------------------------------------------------------------------------
@pytest.mark.parametrize(
    "code",
    ["H340", "H341", "H350", "H350i", "H351", "H360", "H360D", "H360Fd", "H361", "H361d", "H361fd", "H362"],
)
def test_cmr_codes_and_variants(code):
    assert is_cmr_code(code)  # source: CLP Annex I parts 3.5–3.7


@pytest.mark.parametrize("code", ["H334", "H372", "H317", "H302+H332", "EUH032", "H3500", "h350"])
def test_not_cmr(code):
    assert not is_cmr_code(code)


def test_cmr_entries():
    # from memory: nickel(II) salts are CMR (harmonised CLP classification); salicylic acid carries H361d
    for name in (
        "nickel(II) sulfate hexahydrate",
        "nickel(II) nitrate hexahydrate",
        "nickel(II) chloride hexahydrate",
        "salicylic acid",
    ):
        assert lookup(name).cmr, name
    assert lookup("nickel(II) sulfate").cmr_codes == ("H341", "H350i", "H360D")
    assert lookup("salicylic acid").cmr_codes == ("H361d",)
    for name in ("copper(II) sulfate pentahydrate", "potassium thiocyanate", "ethylenediamine"):
        assert not lookup(name).cmr, name
    assert set(CMR_CODES) == {"H340", "H341", "H350", "H351", "H360", "H361", "H362"}


# --------------------------------------------------------------------------------------------------
# the library against recalled classifications, and its provenance
# --------------------------------------------------------------------------------------------------
@pytest.mark.parametrize(
    ("name", "codes"),
    [
        ("potassium thiocyanate", {"H302+H312+H332", "H412", "EUH032"}),  # source: CLP Annex VI 615-030-00-5
        ("iron(III) nitrate nonahydrate", {"H272", "H315", "H319"}),  # from memory
        ("nitric acid", {"H290", "H314"}),  # from memory
        ("copper(II) sulfate pentahydrate", {"H302", "H315", "H319", "H410"}),  # from memory
        (
            "ethylenediamine",
            {"H226", "H302", "H312", "H314", "H317", "H334"},
        ),  # source: supplier SDS 2018
        ("ammonia solution", {"H314", "H335", "H400"}),  # from memory
        ("salicylic acid", {"H302", "H318", "H361d"}),  # from memory
    ],
)
def test_library_matches_domain_primer(name, codes):
    assert set(lookup(name).hazard_codes) == codes


def test_nickel_salts_carry_the_domain_cmr_set():
    # from memory: nickel(II) salts H317, H334, H341, H350i, H360D, H372, H410
    want = {"H317", "H334", "H341", "H350i", "H360D", "H372", "H410"}
    for name in ("nickel(II) sulfate", "nickel(II) nitrate", "nickel(II) chloride"):
        assert want <= set(lookup(name).hazard_codes), name


REQUIRED = [  # the reagents our scenarios and examples name (brief "sheets")
    "copper(II) nitrate trihydrate",
    "copper(II) sulfate pentahydrate",
    "copper(II) chloride dihydrate",
    "copper(II) perchlorate hexahydrate",
    "zinc sulfate heptahydrate",
    "potassium nitrate",
    "sodium perchlorate",
    "sodium acetate",
    "acetic acid",
    "nitric acid",
    "potassium thiocyanate",
    "iron(III) nitrate nonahydrate",
    "nickel(II) sulfate",
    "ethylenediamine",
    "ammonia solution",
    "salicylic acid",
    "HEPES",
]


@pytest.mark.parametrize("name", REQUIRED)
def test_required_reagents_are_in_the_library(name):
    assert lookup(name) is not None


def test_every_entry_has_provenance():
    with_source = {"potassium thiocyanate", "ethylenediamine"}  # the only entries with a named source
    for e in LIB:
        assert e.checked == "2026-12-01"
        assert e.source.strip()
        assert e.from_memory == (e.name not in with_source), e.name


def test_scenario_reagents_are_found():
    # every reagent the shipped scenarios name must have data (else the sheet says "no data")
    for name in ("teaching", "stepwise", "proton"):
        data = tomllib.loads(scenario_text(name))
        for s in data["stock"]:
            if "reagent" in s:
                assert lookup(s["reagent"]) is not None, (name, s["reagent"])


# --------------------------------------------------------------------------------------------------
# lookup and validation
# --------------------------------------------------------------------------------------------------
def test_lookup_aliases_case_and_hydrate_dots():
    cu = lookup("copper(II) sulfate pentahydrate")
    for alias in (
        "CuSO4·5H2O",
        "cuso4.5h2o",
        "CuSO4*5H2O",
        "  Copper (II)   Sulfate ",
        "COPPER(II) SULPHATE",
    ):
        assert lookup(alias) is cu, alias
    assert lookup("KSCN") is lookup("potassium thiocyanate")
    assert lookup("unobtainium chloride") is None
    assert lookup("") is None


@settings(max_examples=40, deadline=None)
@given(
    i=st.integers(0, 10_000),
    flips=st.lists(st.booleans(), min_size=1, max_size=60),
    pad=st.sampled_from(["", " ", "  ", "\t"]),
)
def test_lookup_ignores_case_and_outer_space(i, flips, pad):
    e = LIB[i % len(LIB)]
    keys = (e.name, *e.aliases)
    key = keys[i % len(keys)]
    mixed = "".join(ch.upper() if flips[k % len(flips)] else ch.lower() for k, ch in enumerate(key))
    assert lookup(pad + mixed + pad) is e


@settings(max_examples=30, deadline=None)
@given(
    i=st.integers(0, 10_000),
    before=st.sampled_from(["", "0.10 M ", "stock of ", "a "]),
    after=st.sampled_from(["", ", 10.0 mM", " in water", " (fresh)"]),
)
def test_label_names_its_reagent(i, before, after):
    e = LIB[i % len(LIB)]
    assert e in infer_from_label(before + e.name + after)


def test_label_inference_whole_words_only():
    assert infer_from_label("ligand H2Ac in chloroacetate buffer") == ()  # 'acetate' is inside a word
    assert infer_from_label("ammonium chloride") == ()  # not ammonia
    found = infer_from_label("copper(II) perchlorate, 0.100 M in 0.50 M NaClO4")
    assert [e.name for e in found] == ["copper(II) perchlorate hexahydrate", "sodium perchlorate"]
    assert infer_from_label("CuSO4.5H2O, 50 mM") == (lookup("CuSO4"),)  # the short alias sits inside


def test_validation_catches_bad_entries():
    good = lookup("potassium nitrate")
    validate_library([good])
    with pytest.raises(SafetyDataError, match="H_STATEMENTS"):
        validate_library([dataclasses.replace(good, hazard_codes=("H999",))])
    with pytest.raises(SafetyDataError, match="pictogram"):
        validate_library([dataclasses.replace(good, pictograms=("GHS10",))])
    with pytest.raises(SafetyDataError, match="also used by"):
        validate_library([good, dataclasses.replace(good, name="other salt", aliases=("kno3",))])
    with pytest.raises(SafetyDataError, match="signal_word"):
        validate_library([dataclasses.replace(good, signal_word="Caution")])
    with pytest.raises(SafetyDataError, match="source"):
        validate_library([dataclasses.replace(good, source=" ")])


# --------------------------------------------------------------------------------------------------
# hazards of a plan
# --------------------------------------------------------------------------------------------------
def test_hazards_for_teaching_plan(teaching_plan):
    hz = {r.name: r for r in hazards_for(teaching_plan)}
    assert hz["copper(II) nitrate trihydrate"].stock_ids == ("CU",)
    assert not hz["copper(II) nitrate trihydrate"].inferred
    assert "BG" in hz["potassium nitrate"].stock_ids
    # the dye stock names no reagent: the ligand itself has no data, whatever its medium
    unknown = [r for r in hz.values() if r.hazards is None]
    assert [r.stock_ids for r in unknown] == [("DY",)]
    assert NO_DATA in unknown[0].message


def test_unknown_reagent_gets_the_no_data_message():
    plan = plan_with({"CU": {"reagent": "copper(II) unobtainate"}})
    r = next(r for r in hazards_for(plan) if "CU" in r.stock_ids)
    assert r.hazards is None and r.message == NO_DATA
    assert NO_DATA == "no hazard data in the library: consult the supplier's safety data sheet"
    assert ALWAYS == "Follow the supplier's SDS and your institution's rules."


def test_label_inference_when_reagent_missing():
    plan = plan_with({"CU": {"reagent": None, "label": "copper(II) sulfate, 10.0 mM in water"}})
    r = next(r for r in hazards_for(plan) if "CU" in r.stock_ids)
    assert r.name == "copper(II) sulfate pentahydrate" and r.inferred
    # the label names the copper salt, so no 'no data' entry for the metal of CU
    assert not any(x.hazards is None and x.stock_ids == ("CU",) for x in hazards_for(plan))


def test_clash_thiocyanate_with_acid():
    plan = plan_with({"DY": {"reagent": "potassium thiocyanate"}, "BG": {"reagent": "nitric acid"}})
    found = clashes(hazards_for(plan))
    kinds = {c.classes for c in found}
    assert ("thiocyanate", "acid") in kinds  # source: CLP Annex VI EUH032 for KSCN
    adv = next(c.advice for c in found if c.classes == ("thiocyanate", "acid"))
    assert "EUH032" in adv and "toxic gas" in adv


def test_no_clash_within_one_reagent_or_inert_plan():
    plan = plan_with(
        {
            "CU": {"reagent": "copper(II) sulfate pentahydrate"},
            "BG": {"reagent": "acetic acid"},
            "DY": {"label": "dye ligand Dy, 10.0 mM in water"},
        }
    )
    # acetic acid is both acid and organic: that alone is no clash; copper sulfate has no classes
    # (the DY label no longer names KNO3, an oxidiser that would clash with the organic acid)
    assert clashes(hazards_for(plan)) == []


def test_perchlorate_with_organic_clash():
    plan = plan_with({"CU": {"reagent": "copper(II) perchlorate"}, "BG": {"reagent": "HEPES"}})
    assert ("perchlorate", "organic") in {c.classes for c in clashes(hazards_for(plan))}


def test_summary_is_json_safe():
    import json

    s = to_json(lookup("nickel(II) sulfate"))
    assert json.loads(json.dumps(s))["cmr"] is True
    assert {p["code"] for p in s["pictograms"]} == {"GHS07", "GHS08", "GHS09"}
    assert all(st_["text"] for st_ in s["statements"])
    assert to_json(safety.PlanReagent("x", ("A",), None, message=NO_DATA))["message"] == NO_DATA


def test_printed_provenance_cites_no_developer_document():
    # the library's provenance is printed in the safety box of every prep sheet and card: it names
    # public sources (CLP, a supplier SDS) or says "recalled", never the project's own notes
    from importlib import resources

    text = resources.files("planner.data").joinpath("reagents.toml").read_text(encoding="utf-8")
    data = tomllib.loads(text)
    for entry in data.get("reagent", []):
        for key in ("source", "notes", "waste"):
            value = str(entry.get(key, ""))
            assert ".md" not in value and "domain" not in value.lower(), (entry.get("name"), key, value)
