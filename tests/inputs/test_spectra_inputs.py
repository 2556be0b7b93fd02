"""Plan keys of whole spectra, the ε table, and single-wavelength plans left as they were."""

from __future__ import annotations

import numpy as np
import pytest

from planner.inputs.plan import PlanError, parse_plan_text
from planner.inputs.spectra_table import parse_spectra_table
from planner.jobs.compile import compile_study

from ..conftest import ROOT, scenario_text

EXAMPLE = ROOT / "examples" / "spectra-ml-ml2.toml"
TABLE = "wavelength_nm,ML,ML2\n400,10,20\n450,100,200\n500,50,300\n"


def _plan(tmp_path, optics_extra: str, table: str | None = TABLE):
    if table is not None:
        (tmp_path / "eps.csv").write_text(table, encoding="utf-8")
    text = EXAMPLE.read_text(encoding="utf-8")
    start = text.index('spectra = "')
    end = text.index("[[stock]]")
    text = text[:start] + optics_extra + "\n\n" + text[end:]
    return parse_plan_text(text, base_dir=tmp_path)


def test_a_table_plan_is_read_relative_to_the_plan(tmp_path):
    plan = _plan(tmp_path, 'spectra = "eps.csv"\nspectra_rsd = { ML = 0.2 }')
    assert plan.spectra_table.names == ("ML", "ML2")
    sp = compile_study(plan).spectra
    assert sp.wavelength_nm[0] == 400 and sp.wavelength_nm[-1] == 500 and sp.size == 101
    m = compile_study(plan).model
    assert list(sp.free) == [False, False, True, False]  # ML fitted (rsd 0.2), ML2 known (rsd 0)
    # the single-wavelength jobs read the table at optics.wavelength_nm (600 nm is past its end: last value)
    assert m.epsilon_M_cm[m.absorbers.index("ML2")] == pytest.approx(300.0)


@pytest.mark.parametrize(
    "extra, table, key, words",
    [
        ('spectra = "eps.csv"', "wavelength_nm,ML\n400,1\n400,2\n450,3\n", "optics.spectra", "rise"),
        ('spectra = "eps.csv"', "wavelength_nm,ML\n400,1\n450,x\n", "optics.spectra", "line 3"),
        ('spectra = "eps.csv"', "wavelength_nm,QQ\n400,1\n450,2\n", "optics.spectra", "not a species"),
        ('spectra = "eps.csv"', "wl,ML\n400,1\n450,2\n", "optics.spectra", "wavelength_nm"),
        ('spectra = "eps.csv"', "wavelength_nm;ML\n400;1\n450;2\n", "optics.spectra", "semicolon"),
        ('spectra = "eps.csv"\nwindow_nm = [300, 480]', TABLE, "optics.window_nm", "beyond the ε table"),
        ('spectra = "missing.csv"', None, "optics.spectra", "not found"),
        ("window_nm = [400, 700]", None, "optics.window_nm", "needs the species' spectra"),
        ("window_nm = [700, 400]", None, "optics.window_nm", "below"),
        ('spectra = "eps.csv"\nspectra_rsd = { XY = 0.3 }', TABLE, "optics.spectra_rsd.XY", "not a species"),
        ('spectra = "eps.csv"\nwindow_nm = [400, 500]\nstep_nm = 0.01', TABLE, "optics.step_nm", "at most"),
    ],
)
def test_bad_spectra_keys_name_the_key_and_the_fix(tmp_path, extra, table, key, words):
    with pytest.raises(PlanError) as exc:
        _plan(tmp_path, extra, table)
    assert exc.value.key.startswith(key) and words in exc.value.message


def test_bands_with_a_window_make_spectra_and_a_slit_widens_them(tmp_path):
    plan = _plan(
        tmp_path,
        "window_nm = [450, 750]\nstep_nm = 2\nbandwidth_nm = 20\n[optics.bands]\n"
        "ML = { peak_nm = 600, fwhm_nm = 100, epsilon_max = 500 }",
        None,
    )
    sp = compile_study(plan).spectra
    k = compile_study(plan).model.absorbers.index("ML")
    # source: a Gaussian band through a Gaussian slit is a Gaussian of FWHM √(w² + b²), peak w/√(w² + b²)
    assert sp.epsilon_M_cm[:, k].max() == pytest.approx(500 * 100 / np.hypot(100, 20), rel=1e-9)


def test_single_wavelength_plans_have_no_spectra():
    for name in ("teaching", "stepwise", "proton"):
        assert compile_study(parse_plan_text(scenario_text(name))).spectra is None


def test_table_rsd_columns():
    t = parse_spectra_table("wavelength_nm,ML,ML2,rsd,ML2_rsd\n400,1,2,0.1,0.5\n410,1,2,0.2,0.5\n")
    assert np.allclose(t.rsd[:, 0], [0.1, 0.2]) and np.allclose(t.rsd[:, 1], 0.5)


def test_an_alternative_may_have_its_spectrum_in_the_table():
    # the model check with whole spectra reads a listed alternative's spectrum like a species'; a column
    # that names neither is still refused, and the message says an alternative would do
    one = EXAMPLE.read_text(encoding="utf-8").replace(
        '[[species]]\nname = "ML2"\nformula = { M = 1, L = 2 }\nlog_beta = 5.90\nlog_beta_sd = 0.60\n', ""
    )
    one = one.replace("spectra_rsd = { ML = 0.3, ML2 = 0.3 }", "spectra_rsd = { ML = 0.3 }")
    with pytest.raises(PlanError) as exc:
        parse_plan_text(one, base_dir=EXAMPLE.parent)
    assert exc.value.key == "optics.spectra" and "[[design.alternative]]" in exc.value.message
    listed = one + '\n[[design.alternative]]\nname = "ML2"\nformula = { M = 1, L = 2 }\nlog_beta = 4.0\n'
    study = compile_study(parse_plan_text(listed, base_dir=EXAMPLE.parent))
    assert study.model.absorbers == ("M", "L", "ML") and study.alternative_spectra[0].max() > 0


def test_a_band_for_an_alternative(tmp_path):
    text = EXAMPLE.read_text(encoding="utf-8")
    start, end = text.index('spectra = "'), text.index("[[stock]]")
    text = (
        text[:start]
        + "window_nm = [450, 750]\nstep_nm = 5\n[optics.bands]\n"
        + "ML = { peak_nm = 600, fwhm_nm = 100, epsilon_max = 500 }\n"
        + "ML2 = { peak_nm = 650, fwhm_nm = 100, epsilon_max = 500 }\n"
        + "MLB = { peak_nm = 520, fwhm_nm = 80, epsilon_max = 300 }\n\n"
        + text[end:]
    )
    alt = '\n[[design.alternative]]\nname = "MLB"\nformula = { M = 1, L = 3 }\nlog_beta = 7.0\n'
    with pytest.raises(PlanError) as exc:
        parse_plan_text(text)
    assert exc.value.key == "optics.bands.MLB"
    study = compile_study(parse_plan_text(text + alt))
    eps = study.alternative_spectra[0]
    w = study.spectra.wavelength_nm
    assert w[np.argmax(eps)] == 520 and eps.max() == pytest.approx(300.0)
    # the single-wavelength check reads the band at optics.wavelength_nm (600 nm)
    mlb = dict(study.alternatives)["MLB"]
    assert mlb.epsilon_M_cm[-1] == pytest.approx(eps[w == 600][0], rel=1e-12)
