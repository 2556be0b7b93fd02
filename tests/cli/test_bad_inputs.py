"""Bad-input corpus: every case is one shipped example mutated in a temporary folder and run through the
console entry point (``planner.cli.main``, the function the ``kplan`` script calls).

The promise checked for every case: exit code 2, exactly one non-empty line on stderr that names the key
or path at fault, no traceback, and no file left in the working folder.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import warnings
from pathlib import Path

import pytest

from planner.inputs.files import OutputError, write_atomic_many

from ..conftest import ROOT
from ..conftest import run_cli as run

EXAMPLES = ROOT / "examples"
ADDED = "cuvette-1to1"  # make_up = "added": stocks ZN, ZC, BUF (the diluent, dispensed)
TO_MARK = "stepwise-weak"  # make_up = "to-mark": stocks CU, BD and the diluent NA
PLAN = EXAMPLES / f"{ADDED}.toml"
RECIPE = EXAMPLES / f"{ADDED}.csv"


def example(name: str) -> str:
    return (EXAMPLES / f"{name}.toml").read_text(encoding="utf-8")


def mutate(name: str, old: str, new: str) -> str:
    text = example(name)
    assert old in text, f"the mutation's anchor {old!r} is not in {name}.toml"
    return text.replace(old, new, 1)


def assert_refused(code: int, err: str, needle: str) -> None:
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert code == 2, (code, err)
    assert len(lines) == 1, err
    assert lines[0].startswith("error: "), err
    assert needle in lines[0], (needle, err)
    assert "Traceback" not in err


@pytest.fixture
def workdir(tmp_path, monkeypatch):
    """A working folder that is the current directory; the test asserts nothing new appears in it."""
    monkeypatch.chdir(tmp_path)
    return tmp_path


def listing(folder: Path) -> set[str]:
    return {str(p.relative_to(folder)) for p in folder.rglob("*")}


# ---------------------------------------------------------------------------------------------------
# plans: (id, example, text replaced, replacement, what the message must name)
# ---------------------------------------------------------------------------------------------------
TITLE = 'title = "Zinc(II) with chromogenic ligand Zc in the cuvette (1:1)"'
PLAN_CASES = [
    # values past validation: NaN, ±inf, booleans and absurd magnitudes, refused with the bound
    (
        "temperature-bool",
        ADDED,
        "temperature_C = 22.0",
        "temperature_C = true",
        "temperature_C: expected a number",
    ),
    ("temperature-nan", ADDED, "temperature_C = 22.0", "temperature_C = nan", "temperature_C"),
    ("temperature-hot", ADDED, "temperature_C = 22.0", "temperature_C = 500", "150"),
    ("conc-huge", ADDED, 'conc = { M = "0.500 mM" }', 'conc = { M = "1e3 M" }', "stock[0].conc.M"),
    ("conc-nan", ADDED, 'conc = { M = "0.500 mM" }', "conc = { M = nan }", "stock[0].conc.M"),
    (
        "conc-inf-string",
        ADDED,
        'conc = { M = "0.500 mM" }',
        'conc = { M = "inf M" }',
        "stock[0].conc.M: cannot read 'inf M'",
    ),
    ("conc-zero", ADDED, 'conc = { M = "0.500 mM" }', 'conc = { M = "0 M" }', "positive"),
    ("ions-huge", ADDED, '"Na+" = "25 mM", "HEPES-"', '"Na+" = "1e6 M", "HEPES-"', "stock[0].ions.Na+"),
    ("epsilon-inf", ADDED, "ML = { value = 21000.0", "ML = { value = inf", "optics.epsilon.ML.value"),
    ("epsilon-huge", ADDED, "ML = { value = 21000.0", "ML = { value = 1e9", "1e+06"),
    ("epsilon-bool", ADDED, "ML = { value = 21000.0", "ML = { value = true", "optics.epsilon.ML.value"),
    ("path-zero", ADDED, "path_cm = 1.000", "path_cm = 0", "optics.path_cm"),
    ("path-long", ADDED, "path_cm = 1.000", "path_cm = 1000", "100 cm"),
    ("noise-negative", ADDED, "k1 = 0.002", "k1 = -0.1", "optics.noise.k1"),
    ("noise-huge", ADDED, "k3 = 0.001", "k3 = 2", "optics.noise.k3"),
    ("stray-light-one", ADDED, "stray_light = 0.0005", "stray_light = 1", "optics.stray_light"),
    (
        "linear-range-inf",
        ADDED,
        "linear_range = [0.08, 1.20]",
        "linear_range = [0.08, inf]",
        "optics.linear_range[1]",
    ),
    ("log-beta-nan", ADDED, "log_beta = 4.60", "log_beta = nan", "species[0].log_beta"),
    ("log-beta-huge", ADDED, "log_beta = 4.60", "log_beta = 1e300", "60"),
    ("log-beta-sd-negative", ADDED, "log_beta_sd = 0.40", "log_beta_sd = -1", "species[0].log_beta_sd"),
    ("log-beta-sd-huge", ADDED, "log_beta_sd = 0.40", "log_beta_sd = 50", "species[0].log_beta_sd"),
    (
        "reference-I-high",
        ADDED,
        "[optics]",
        '[medium]\nreference_ionic_strength = "9 M"\n\n[optics]',
        "medium.reference_ionic_strength",
    ),
    (
        "reference-I-negative",
        ADDED,
        "[optics]",
        "[medium]\nreference_ionic_strength = -0.1\n\n[optics]",
        "medium.reference_ionic_strength",
    ),
    (
        "design-I-zero",
        ADDED,
        "goal_se = 0.05",
        'goal_se = 0.05\nionic_strength = "0 M"',
        "design.ionic_strength",
    ),
    ("min-volume-negative", ADDED, 'min_volume = "0.020 mL"', 'min_volume = "-1 mL"', "glassware.min_volume"),
    ("tube-volume-huge", ADDED, 'tube_volume = "3.000 mL"', 'tube_volume = "100 L"', "10000 mL"),
    ("tube-volume-inf", ADDED, 'tube_volume = "3.000 mL"', "tube_volume = inf", "glassware.tube_volume"),
    (
        "fixed-negative",
        ADDED,
        "goal_se = 0.05",
        'goal_se = 0.05\nfixed = { ZN = "-1 mL" }',
        "design.fixed.ZN",
    ),
    ("on-hand-inf", ADDED, 'on_hand = "20 mL"', "on_hand = inf", "stock[0].on_hand"),
    ("fixed-denormal", ADDED, "goal_se = 0.05", "goal_se = 0.05\nfixed = { ZN = 1e-300 }", "design.fixed.ZN"),
    (
        "tube-volume-denormal",
        ADDED,
        'tube_volume = "3.000 mL"',
        'tube_volume = "1e-300 mL"',
        "glassware.tube_volume",
    ),
    ("on-hand-zero", ADDED, 'on_hand = "20 mL"', 'on_hand = "0 mL"', "stock[0].on_hand"),
    (
        "flask-negative",
        ADDED,
        'formula = "ZnSO4.7H2O"',
        'formula = "ZnSO4.7H2O"\nflask = "-5 mL"',
        "stock[0].flask",
    ),
    ("step-zero", ADDED, 'step = "0.010 mL"', "step = 0", "glassware.step"),
    ("rinse-huge", ADDED, 'rinse = "0.5 mL"', 'rinse = "1e9 mL"', "glassware.rinse"),
    (
        "dead-volume-negative",
        ADDED,
        'rinse = "0.5 mL"',
        'rinse = "0.5 mL"\ndead_volume = -1',
        "glassware.dead_volume",
    ),
    ("capacity-nan", ADDED, 'capacity = "1000 uL"', 'capacity = "nan uL"', "glassware.dispenser[0].capacity"),
    ("wavelength-low", ADDED, "wavelength_nm = 520", "wavelength_nm = 50", "100 and 2000 nm"),
    ("wavelength-nan", ADDED, "wavelength_nm = 520", "wavelength_nm = nan", "optics.wavelength_nm"),
    ("goal-se-zero", ADDED, "goal_se = 0.05", "goal_se = 0", "design.goal_se"),
    ("goal-se-inf", ADDED, "goal_se = 0.05", "goal_se = inf", "design.goal_se"),
    (
        "charge-bool",
        ADDED,
        'label = "Zn2+", charge = 2',
        'label = "Zn2+", charge = true',
        "components.M.charge",
    ),
    ("tubes-bool", ADDED, "tubes = 8", "tubes = true", "design.tubes"),
    (
        "species-no-metal-no-ligand",
        ADDED,
        "formula = { M = 1, L = 1 }",
        "formula = { M = 0, L = 0 }",
        "species[0].formula",
    ),
    (
        "diluent-fixed-under-to-mark",
        TO_MARK,
        'fixed = { CU = "2.50 mL" }',
        'fixed = { CU = "2.50 mL", NA = "1 mL" }',
        "design.fixed.NA",
    ),
    # resource limits at the input edge
    ("step-too-fine", ADDED, 'step = "0.010 mL"', 'step = "0.0001 mL"', "20000"),
    ("title-too-long", ADDED, TITLE, f'title = "{"x" * 300}"', "title"),
    ("label-too-long", ADDED, 'label = "zinc(II) sulfate', f'label = "{"y" * 300}', "stock[0].label"),
    (
        "quantity-too-long",
        ADDED,
        'conc = { M = "0.500 mM" }',
        f'conc = {{ M = "{"1" * 100} mM" }}',
        "stock[0].conc.M",
    ),
    ("nested-deep", ADDED, TITLE, TITLE + "\nx = " + "[" * 5000 + "]" * 5000, "nested"),
    ("nested-moderately", ADDED, TITLE, TITLE + "\nx = " + "[" * 60 + "]" * 60, "at most 50"),
    # identifiers with control or text-direction characters; text limits
    ("stock-id-escape", ADDED, 'id = "ZN"', 'id = "Z\\u001b[2JN"', "stock[0].id"),
    ("stock-id-space", ADDED, 'id = "ZN"', 'id = " ZN"', "stock[0].id"),
    ("species-name-bidi", ADDED, 'name = "ML"', 'name = "M\\u202eL"', "species[0].name"),
    ("species-name-long", ADDED, 'name = "ML"', f'name = "{"M" * 41}"', "species[0].name"),
    ("ion-name-control", ADDED, '"Na+" = "25 mM", "HEPES-"', '"Na\\u0007+" = "25 mM", "HEPES-"', "ion name"),
    # messages name the key that was written
    (
        "misspelt-required",
        ADDED,
        "wavelength_nm = 520",
        "wavelenght_nm = 520",
        "did you mean 'wavelength_nm'",
    ),
    ("misspelt-tube-volume", ADDED, "tube_volume =", "tube_volum =", "glassware.tube_volum"),
    ("misspelt-in-list", ADDED, "conc_rsd = 0.004", "conc_rds = 0.004", "stock[0].conc_rds"),
]


@pytest.mark.parametrize("name,old,new,needle", [c[1:] for c in PLAN_CASES], ids=[c[0] for c in PLAN_CASES])
def test_bad_plan(workdir, capsys, monkeypatch, name, old, new, needle):
    plan = workdir / "plan.toml"
    plan.write_text(mutate(name, old, new), encoding="utf-8")
    before = listing(workdir)
    code, _, err = run(capsys, monkeypatch, "check", plan)
    assert_refused(code, err, needle)
    assert listing(workdir) == before


def _plan_files(workdir: Path) -> list[tuple[str, bytes]]:
    return [
        ("plan-over-1MB", example(ADDED).encode() + b"# padding\n" * 120_000),
        ("plan-not-utf8", example(ADDED).encode().replace(b"Zinc(II)", b"Zinc\xff(II)")),
    ]


@pytest.mark.parametrize(
    "case,needle",
    [
        ("plan-over-1MB", "1 MB"),
        ("plan-not-utf8", "UTF-8"),
        ("plan-is-folder", "folder"),
        ("plan-missing", "not found"),
    ],
)
def test_bad_plan_file(workdir, capsys, monkeypatch, case, needle):
    plan = workdir / "plan.toml"
    if case == "plan-is-folder":
        plan.mkdir()
    elif case != "plan-missing":
        plan.write_bytes(dict(_plan_files(workdir))[case])
    before = listing(workdir)
    code, _, err = run(capsys, monkeypatch, "check", plan)
    assert_refused(code, err, needle)
    assert "plan.toml" in err
    assert listing(workdir) == before


# ---------------------------------------------------------------------------------------------------
# recipes (run through `kplan stocks PLAN RECIPE`, which reads the recipe but runs no Monte Carlo)
# ---------------------------------------------------------------------------------------------------
CSV_CASES = [
    ("only-tube-column", ADDED, "tube\nC1\nC2\n", "only a 'tube' column"),
    ("huge-cell", ADDED, 'tube,ZN,ZC,BUF\nC1,"' + "9" * 200_000 + '",0.1,2.5\n', "line 2"),
    ("unclosed-quote", ADDED, 'tube,ZN,ZC,BUF\n"C1,0.2,0.1,2.5\n' + "C2,0.2,0.1,2.5\n" * 10, "line 2"),
    ("semicolons", ADDED, "tube;ZN;ZC;BUF\nC1;0,2;0,1;2,5\n", "semicolon-separated"),
    ("tabs", ADDED, "tube\tZN\tZC\tBUF\nC1\t0.2\t0.1\t2.5\n", "tab-separated"),
    ("decimal-comma", ADDED, "tube,ZN,ZC,BUF\nC1,0,2,0,1,2,5\n", "decimal comma"),
    ("decimal-comma-quoted", ADDED, 'tube,ZN,ZC,BUF\nC1,"0,2",0.1,2.5\n', "line 2, ZN"),
    ("nan-volume", ADDED, "tube,ZN,ZC,BUF\nC1,nan,0.1,2.5\n", "line 2, ZN"),
    ("inf-volume", ADDED, "tube,ZN,ZC,BUF\nC1,0.2,inf,2.5\n", "line 2, ZC"),
    ("denormal-volume", ADDED, "tube,ZN,ZC,BUF\nC1,1e-300,0.1,2.5\n", "line 2, ZN: 1e-300 mL"),
    ("huge-volume", ADDED, "tube,ZN,ZC,BUF\nC1,0.2,0.1,1e6\n", "line 2, BUF: 1e+06 mL"),
    ("blank-volume", ADDED, "tube,ZN,ZC,BUF\nC1,0.2,,2.5\n", "line 2, ZC"),
    (
        "too-many-rows",
        ADDED,
        "tube,ZN,ZC,BUF\n" + "".join(f"C{i},0.2,0.1,2.5\n" for i in range(1001)),
        "1000",
    ),
    ("empty", ADDED, "# only a comment\n\n", "empty"),
    ("no-tubes", ADDED, "tube,ZN,ZC,BUF\n", "no tubes"),
    ("unknown-column", ADDED, "tube,ZN,ZX,BUF\nC1,0.2,0.1,2.5\n", "column 'ZX'"),
    ("duplicate-tube", ADDED, "tube,ZN,ZC,BUF\n#3,0.2,0.1,2.5\n#3,0.2,0.2,2.4\n", "'#3' appears twice"),
    ("tube-label-escape", ADDED, "tube,ZN,ZC,BUF\nC\x1b[31m1,0.2,0.1,2.5\n", "line 2, tube"),
    ("tube-label-bidi", ADDED, "tube,ZN,ZC,BUF\nC\u202e1,0.2,0.1,2.5\n", "U+202E"),
    ("tube-label-empty", ADDED, "tube,ZN,ZC,BUF\n,0.2,0.1,2.5\n", "line 2, tube"),
    ("header-not-tube", ADDED, "ZN,ZC,BUF\n0.2,0.1,2.5\n", "first column must be 'tube'"),
    ("diluent-not-remainder", TO_MARK, "tube,CU,BD,NA\nS1,2.50,1.00,7.00\n", "tube S1, NA"),
    ("tube-overfull", TO_MARK, "tube,CU,BD\nS1,45,10\n", "tube S1"),
]


@pytest.mark.parametrize("name,text,needle", [c[1:] for c in CSV_CASES], ids=[c[0] for c in CSV_CASES])
def test_bad_recipe(workdir, capsys, monkeypatch, name, text, needle):
    rec = workdir / "recipe.csv"
    rec.write_text(text, encoding="utf-8")
    before = listing(workdir)
    code, _, err = run(capsys, monkeypatch, "stocks", EXAMPLES / f"{name}.toml", rec)
    assert_refused(code, err, needle)
    assert "\x1b" not in err and "\u202e" not in err
    assert listing(workdir) == before


@pytest.mark.parametrize(
    "cell,needle",
    [
        ("nan", "readings.csv line 3, absorbance: 'nan' is not an absorbance"),
        ("1e400", "readings.csv line 3, absorbance: '1e400' is out of range"),
        ("-inf", "readings.csv line 3, absorbance"),
        ("25", "readings.csv, tube C2: absorbance 25"),
    ],
)
def test_bad_reading(workdir, capsys, monkeypatch, cell, needle):
    rec = workdir / "readings.csv"
    rec.write_text(
        f"tube,ZN,ZC,BUF,absorbance\nC1,0.2,0.15,2.65,0.31\nC2,0.2,0.3,2.5,{cell}\nC3,0.2,0.45,2.35,0.52\n"
    )
    before = listing(workdir)
    code, _, err = run(capsys, monkeypatch, "fit", PLAN, rec)
    assert_refused(code, err, needle)
    assert listing(workdir) == before


def test_readings_follow_the_recipe_rules(workdir, capsys, monkeypatch):
    # a quoted label with a comma and a tube labelled '#3' are tubes, in readings as in recipes
    rec = workdir / "readings.csv"
    rec.write_text(
        '# measured on the bench\ntube,ZN,ZC,BUF,absorbance\n"P,3",0.2,0.15,2.65,0.31\n'
        "#3,0.2,0.3,2.5,0.45\nC3,0.2,0.45,2.35,0.52\nC4,0.2,0.6,2.2,0.57\n"
    )
    code, out, err = run(capsys, monkeypatch, "fit", PLAN, rec, "--json")
    assert code == 0, err
    assert [t["tube"] for t in json.loads(out)["tubes"]] == ["P,3", "#3", "C3", "C4"]


def test_recipe_over_1MB_and_not_utf8(workdir, capsys, monkeypatch):
    rec = workdir / "recipe.csv"
    rec.write_bytes(b"tube,ZN,ZC,BUF\n" + b"# padding\n" * 110_000)
    code, _, err = run(capsys, monkeypatch, "stocks", EXAMPLES / f"{ADDED}.toml", rec)
    assert_refused(code, err, "1 MB")
    rec.write_bytes(b"tube,ZN,ZC,BUF\nC\xff1,0.2,0.1,2.5\n")
    code, _, err = run(capsys, monkeypatch, "stocks", EXAMPLES / f"{ADDED}.toml", rec)
    assert_refused(code, err, "UTF-8")


# ---------------------------------------------------------------------------------------------------
# output paths and command-line options (checked before any work is done)
# ---------------------------------------------------------------------------------------------------
LONG = "n" * 300
OPTION_CASES = [
    ("sheet-out-folder", ["sheet", PLAN, RECIPE, "--out", "folder"], "folder: it is a folder"),
    ("sheet-out-under-file", ["sheet", PLAN, RECIPE, "--out", "afile/prep.pdf"], "'afile' is a file"),
    ("sheet-out-empty", ["sheet", PLAN, RECIPE, "--out", ""], "no file name"),
    ("sheet-out-long-name", ["sheet", PLAN, RECIPE, "--out", LONG + ".pdf"], "shorten it"),
    ("report-out-under-file", ["report", PLAN, RECIPE, "--out", "afile/sub/r.pdf"], "'afile' is a file"),
    ("report-out-folder-dot", ["report", PLAN, RECIPE, "--out", "."], "no file name"),
    ("design-out-is-file", ["design", PLAN, "--out", "afile"], "afile: it is a file"),
    ("design-out-under-file", ["design", PLAN, "--out", "afile/d"], "'afile' is a file"),
    ("design-out-long-name", ["design", PLAN, "--out", LONG], "shorten it"),
    ("new-under-file", ["new", "afile/plan.toml"], "'afile' is a file"),
    ("new-empty", ["new", ""], "no file name"),
    ("new-folder", ["new", "folder"], "it is a folder"),
    ("new-long-name", ["new", LONG + ".toml"], "shorten it"),
    ("demo-out-is-file", ["demo", "--out", "afile"], "afile: it is a file"),
    ("report-design-list", ["report", PLAN, RECIPE, "--out", "r.pdf", "--design", "list.json"], "an array"),
    ("report-design-string", ["report", PLAN, RECIPE, "--out", "r.pdf", "--design", "str.json"], "a string"),
    (
        "report-design-not-json",
        ["report", PLAN, RECIPE, "--out", "r.pdf", "--design", "afile"],
        "--design afile",
    ),
    (
        "report-design-bad-key",
        ["report", PLAN, RECIPE, "--out", "r.pdf", "--design", "bad.json"],
        "criterion",
    ),
    (
        "report-design-missing",
        ["report", PLAN, RECIPE, "--out", "r.pdf", "--design", "nope.json"],
        "--design",
    ),
    ("design-too-many-tubes", ["design", PLAN, "--tubes", "500"], "--tubes"),
    ("assess-too-many-trials", ["assess", PLAN, RECIPE, "--trials", "100000000"], "--trials"),
    ("assess-negative-seed", ["assess", PLAN, RECIPE, "--seed", "-1"], "--seed"),
    ("cards-negative-seed", ["cards", PLAN, "--count", "3", "--seed", "-1"], "--seed"),
    ("assess-at-nan", ["assess", PLAN, RECIPE, "--at", "ML=nan"], "--at ML=nan"),
    ("assess-at-huge", ["assess", PLAN, RECIPE, "--at", "ML=1e9"], "--at ML=1e9"),
    ("unknown-option", ["check", PLAN, "--bogus"], "--bogus"),
    ("missing-argument", ["assess", PLAN], "Missing argument 'recipe'"),
    ("unknown-command", ["chekc", PLAN], "chekc"),
]


@pytest.mark.parametrize("args,needle", [c[1:] for c in OPTION_CASES], ids=[c[0] for c in OPTION_CASES])
def test_bad_output_or_option(workdir, capsys, monkeypatch, args, needle):
    (workdir / "afile").write_text("not a folder\n")
    (workdir / "folder").mkdir()
    (workdir / "list.json").write_text("[1, 2]\n")
    (workdir / "str.json").write_text('"design"\n')
    (workdir / "bad.json").write_text('{"criterion": 5}\n')
    before = listing(workdir)
    code, _, err = run(capsys, monkeypatch, *args)
    assert_refused(code, err, needle)
    assert listing(workdir) == before


def test_corpus_size():
    n = len(PLAN_CASES) + 4 + len(CSV_CASES) + 4 + 1 + len(OPTION_CASES)
    assert n >= 60, n


# ---------------------------------------------------------------------------------------------------
# the same path through the installed console script's module entry (a separate interpreter)
# ---------------------------------------------------------------------------------------------------
@pytest.mark.parametrize(
    "mutation,needle",
    [
        (("temperature_C = 22.0", "temperature_C = false"), "temperature_C"),
        (("wavelength_nm = 520", "wavelenght_nm = 520"), "did you mean 'wavelength_nm'"),
    ],
)
def test_subprocess_one_line(tmp_path, mutation, needle):
    plan = tmp_path / "plan.toml"
    plan.write_text(mutate(ADDED, *mutation), encoding="utf-8")
    res = subprocess.run(
        [sys.executable, "-m", "planner", "check", str(plan)],
        capture_output=True,
        text=True,
        timeout=120,
        env={**os.environ, "COLUMNS": "200"},
    )
    assert_refused(res.returncode, res.stderr, needle)
    assert res.stdout == ""


# ---------------------------------------------------------------------------------------------------
# user text is printed as text
# ---------------------------------------------------------------------------------------------------
HOSTILE = "x [/bold] y [link=file:///etc/passwd]z[/link] \\u202e\\u001b]8;;http://a\\u0007 :warning:"


@pytest.mark.parametrize("command", ["check", "stocks"])
def test_markup_and_controls_in_title_print_as_text(workdir, capsys, monkeypatch, command):
    plan = workdir / "plan.toml"
    plan.write_text(
        mutate(ADDED, TITLE, f'title = "{HOSTILE}"').replace(
            'label = "zinc(II) sulfate', 'label = "[red]zinc\\u2066(II) sulfate'
        ),
        encoding="utf-8",
    )
    code, out, err = run(capsys, monkeypatch, command, plan)
    assert code == 0, err
    assert "[/bold] y [link=file:///etc/passwd]z[/link]" in out and ":warning:" in out
    assert "\\u202e\\u001b]8;;http://a\\u0007" in out
    assert not any(ch in out for ch in "\x1b\x07\u202e\u2066")
    if command == "check":
        assert "[red]zinc\\u2066(II)" in out


def test_markup_in_tube_labels_prints_as_text(workdir, capsys, monkeypatch):
    rec = workdir / "r.csv"
    rec.write_text(RECIPE.read_text().replace("C1,", '"[bold]P,3",').replace("C2,", "#3,"))
    code, out, err = run(capsys, monkeypatch, "assess", PLAN, rec, "--trials", "0")
    assert code in (0, 1), err  # 1: the recipe does not resolve K; still printed
    assert "[bold]P,3" in out and "#3" in out


def test_error_messages_are_escaped(workdir, capsys, monkeypatch):
    plan = workdir / "plan.toml"
    plan.write_text(mutate(ADDED, "[optics]", '[optics]\n"[bold]\\u001b[2J" = 1'), encoding="utf-8")
    code, _, err = run(capsys, monkeypatch, "check", plan)
    assert_refused(code, err, "optics.[bold]\\u001b[2J: unknown key")
    assert "\x1b" not in err


# ---------------------------------------------------------------------------------------------------
# JSON, warnings, Ctrl-C, and the design's two files as one unit
# ---------------------------------------------------------------------------------------------------
def test_json_has_no_nan(capsys, monkeypatch):
    from planner.cli.app import dump_json

    text = dump_json({"a": float("nan"), "b": [float("inf"), 1.5], "c": __import__("numpy").float64("-inf")})
    assert json.loads(text) == {"a": None, "b": [None, 1.5], "c": None}

    def strict(token):
        raise AssertionError(f"non-standard JSON token {token}")

    code, out, err = run(capsys, monkeypatch, "assess", PLAN, RECIPE, "--json", "--trials", "0")
    assert code in (0, 1), err  # 1: the recipe does not resolve K; still printed
    data = json.loads(out, parse_constant=strict)
    assert data["parameters"] and data["tubes"]


def test_library_warnings_hidden_own_warnings_one_line(capsys, monkeypatch):
    from planner.inputs import plan as plan_module  # the command imports load_plan when it runs
    from planner.model.activity import ActivityWarning

    real = plan_module.load_plan

    def noisy(path):
        warnings.warn("some library detail", DeprecationWarning, stacklevel=1)
        warnings.warn("overflow in a library", RuntimeWarning, stacklevel=1)
        warnings.warn(
            "ionic strength reaches 2.00 M: treat activity corrections as rough",
            ActivityWarning,
            stacklevel=1,
        )
        return real(path)

    monkeypatch.setattr(plan_module, "load_plan", noisy)
    code, out, err = run(capsys, monkeypatch, "check", PLAN)
    assert code == 0 and "plan OK" in out
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert lines == ["warning: ionic strength reaches 2.00 M: treat activity corrections as rough"]


def test_ctrl_c_exits_130_quietly(capsys, monkeypatch):
    def interrupted(*a, **k):
        raise KeyboardInterrupt

    monkeypatch.setattr("planner.jobs.stocks.needs.stock_needs", interrupted)
    code, out, err = run(capsys, monkeypatch, "stocks", PLAN)
    assert code == 130
    assert "Traceback" not in err and "KeyboardInterrupt" not in err and "Aborted" not in err


def test_design_files_are_one_unit(tmp_path, monkeypatch):
    out = tmp_path / "d"
    out.mkdir()
    (out / "recipe.csv").write_text("old recipe")
    real = os.replace
    calls = []

    def second_fails(src, dst):
        calls.append(dst)
        if len(calls) == 2:
            raise OSError(28, "No space left on device", str(src))
        return real(src, dst)

    monkeypatch.setattr("planner.inputs.files.os.replace", second_fails)
    with pytest.raises(OutputError, match="disk is full"):
        write_atomic_many({out / "recipe.csv": "new recipe", out / "design.json": "{}"})
    # neither: the recipe is back as it was, no design.json, no temporary or backup file
    assert (out / "recipe.csv").read_text() == "old recipe"
    assert sorted(p.name for p in out.iterdir()) == ["recipe.csv"]
    monkeypatch.setattr("planner.inputs.files.os.replace", real)
    write_atomic_many({out / "recipe.csv": "new recipe", out / "design.json": "{}"})
    assert (out / "recipe.csv").read_text() == "new recipe" and (out / "design.json").read_text() == "{}"
    assert sorted(p.name for p in out.iterdir()) == ["design.json", "recipe.csv"]


@pytest.mark.parametrize(
    "ch",
    [
        "\x00",
        "\x07",
        "\t",
        "\n",
        "\x1b",
        "\x7f",
        "\x85",
        "\x9b",
        "\u200e",
        "\u2028",
        "\u202a",
        "\u202e",
        "\u2066",
        "\u2069",
    ],
)
def test_visible_escapes_every_unsafe_character(ch):
    from planner.cli.app import safe_text
    from planner.inputs.text import check_identifier, visible

    assert visible(f"a{ch}b") == f"a\\u{ord(ch):04x}b"
    assert ch not in safe_text(f"[b]{ch}")
    with pytest.raises(ValueError, match=f"U\\+{ord(ch):04X}"):
        check_identifier(f"a{ch}b", "stock id")


def test_visible_keeps_ordinary_unicode():
    from planner.inputs.text import visible

    text = "Cu²⁺ · log β ± 0.05 — µL, Å, é"
    assert visible(text) == text
