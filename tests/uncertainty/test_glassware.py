"""Tests for planner.uncertainty.catalogue and delivery: catalogue values, tolerance → uncertainty,
deliveries, grids."""

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from planner.uncertainty.catalogue import CLASS_B_FACTOR, KINDS, GlasswareError, catalogue, lookup
from planner.uncertainty.delivery import (
    check_volume,
    delivery_uncertainty,
    flask_volume_uncertainty,
    on_grid,
    snap_to_grid,
    u_reading,
    u_rectangular,
    u_temperature,
    u_triangular,
    volume_grid,
)

# --------------------------------------------------------------------------------------------------
# catalogue against the standards (kind, capacity_mL, tolerance_mL, from_memory where recalled)
# --------------------------------------------------------------------------------------------------
DOMAIN_TABLE = [
    ("pipette", 1.0, 0.006, False),  # source: ASTM E969
    ("pipette", 2.0, 0.006, False),  # source: ASTM E969
    ("pipette", 5.0, 0.01, False),  # source: ASTM E969
    ("pipette", 10.0, 0.02, True),  # from memory: ASTM E969
    ("pipette", 25.0, 0.03, True),  # from memory: ASTM E969
    ("flask", 25.0, 0.03, False),  # source: ASTM E288
    ("flask", 50.0, 0.05, False),  # source: ASTM E288
    ("flask", 100.0, 0.08, False),  # source: ASTM E288
    ("flask", 250.0, 0.12, False),  # source: ASTM E288
    ("flask", 10.0, 0.02, True),  # from memory: ASTM E288
    ("burette", 10.0, 0.02, True),  # from memory: ASTM E287 / ISO 385
    ("burette", 25.0, 0.03, True),  # from memory: ASTM E287 / ISO 385
    ("burette", 50.0, 0.05, False),  # source: ISO 385 50 mL class A ±0.05
    ("graduated-pipette", 2.0, 0.010, False),  # source: USP <31>
    ("graduated-pipette", 5.0, 0.020, False),  # source: USP <31>
    ("graduated-pipette", 10.0, 0.030, False),  # source: USP <31>
    ("micropipette", 1.0, 0.008, False),  # source: ISO 8655-2:2002, 1000 µL systematic ±8 µL
]


@pytest.mark.parametrize(("kind", "capacity_mL", "tolerance_mL", "from_memory"), DOMAIN_TABLE)
def test_catalogue_matches_domain_table(kind, capacity_mL, tolerance_mL, from_memory):
    item = lookup(kind, capacity_mL)
    assert item.tolerance_mL == pytest.approx(tolerance_mL, rel=1e-12)
    assert item.from_memory is from_memory
    assert item.source  # every entry names its standard


def test_burette_subdivisions_from_domain_table():
    assert lookup("burette", 10).graduation_mL == pytest.approx(
        0.05
    )  # from memory: 10 mL burette graduated in 0.05 mL
    assert lookup("burette", 50).graduation_mL == pytest.approx(
        0.1
    )  # from memory: 50 mL burette graduated in 0.1 mL


def test_micropipette_random_limit_from_iso_8655():
    item = lookup("micropipette", 1.0)
    assert item.random_mL == pytest.approx(0.003)  # source: ISO 8655-2:2002, 1000 µL random 3 µL
    assert item.cls is None


def test_catalogue_sizes_the_brief_asks_for():
    sizes = {
        "burette": {10, 25, 50},
        "pipette": {1, 2, 5, 10, 25},
        "flask": {1, 2, 5, 10, 25, 50, 100, 250, 500, 1000},
        "graduated-pipette": {1, 2, 5, 10},
        "micropipette": {0.01, 0.02, 0.1, 0.2, 1.0, 5.0},
        "piston-burette": {1, 5, 10, 25, 50},
    }  # source: the task brief's list of common sizes (issue 20 adds the 1, 2 and 5 mL flasks)
    have = {k: {it.capacity_mL for it in catalogue() if it.kind == k} for k in KINDS}
    for kind, caps in sizes.items():
        assert {round(c, 6) for c in have[kind]} == {round(float(c), 6) for c in caps}


def test_entries_not_in_domain_table_are_from_memory():
    listed = {(k, c) for k, c, _, _ in DOMAIN_TABLE}
    for it in catalogue():
        if (it.kind, it.capacity_mL) not in listed:
            assert it.from_memory, it  # common practice: anything not checked against a table is flagged


def test_class_b_is_twice_class_a_for_every_classed_entry():
    classed = [it for it in catalogue() if it.cls is not None]
    assert classed
    for it in classed:
        b = lookup(it.kind, it.capacity_mL, "B")
        # source: ASTM E287 §1.1.2, E288 §1.1.2 (class B = 2 × class A)
        assert b.tolerance_mL == pytest.approx(2.0 * it.tolerance_mL, rel=1e-12)
        assert b.cls == "B"
    assert CLASS_B_FACTOR == 2.0  # source: ASTM E287 §1.1.2


def test_iso_385_50_ml_burette_class_b():
    assert lookup("burette", 50, "B").tolerance_mL == pytest.approx(0.10)  # source: ISO 385 50 mL B ±0.10


def test_micropipettes_have_no_class():
    assert all(it.cls is None for it in catalogue() if it.kind == "micropipette")
    with pytest.raises(GlasswareError, match="no class"):
        lookup("micropipette", 0.2, "B")
    assert lookup("micropipette", 0.2, None) == lookup("micropipette", 0.2)


def test_catalogue_rejects_duplicates_and_classes():
    from planner.uncertainty.catalogue import _parse_catalogue

    entry = {"kind": "flask", "capacity_mL": 10.0, "class": "A", "tolerance_mL": 0.02, "source": "x"}
    with pytest.raises(GlasswareError, match="twice"):
        _parse_catalogue({"item": [entry, dict(entry)]})
    with pytest.raises(GlasswareError, match="class 'A' only"):
        _parse_catalogue({"item": [entry | {"class": "B"}]})


def test_catalogue_loaded_once():
    assert catalogue() is catalogue()


def test_lookup_unknown_capacity_lists_catalogue():
    with pytest.raises(GlasswareError) as err:
        lookup("flask", 20)
    msg = str(err.value)
    assert "20 mL" in msg and "25" in msg and "tolerance_mL" in msg


def test_lookup_unknown_kind_lists_kinds():
    with pytest.raises(GlasswareError, match="graduated-pipette"):
        lookup("beaker", 100)


def test_lookup_bad_class():
    with pytest.raises(GlasswareError, match="'A' or 'B'"):
        lookup("flask", 100, "C")


def test_tolerance_override_and_user_item():
    item = lookup("flask", 100, tolerance_mL=0.1)
    assert item.tolerance_mL == 0.1 and not item.from_memory and "user-supplied" in item.source
    own = lookup("pipette", 20, tolerance_mL=0.03)
    assert own.capacity_mL == 20 and own.tolerance_mL == 0.03
    with pytest.raises(GlasswareError):
        lookup("pipette", 20, tolerance_mL=-0.03)


# --------------------------------------------------------------------------------------------------
# tolerance → standard uncertainty
# --------------------------------------------------------------------------------------------------
def test_distribution_divisors():
    assert u_triangular(0.1) == pytest.approx(0.1 / math.sqrt(6))  # source: QUAM 3rd ed. A1 (a/√6)
    assert u_rectangular(0.1) == pytest.approx(0.1 / math.sqrt(3))  # source: GUM JCGM 100:2008 4.3.7
    assert u_reading(0.001) == pytest.approx(0.001 / math.sqrt(12))  # source: GUM F.2.2.1
    assert u_triangular(0.1) == pytest.approx(0.041, abs=5e-4)  # source: QUAM A1, 0.1/√6 = 0.04 mL
    with pytest.raises(GlasswareError):
        u_triangular(-1.0)


def test_temperature_term_quam_a1():
    # source: QUAM A1, 100 mL × 4 °C × 2.1e-4 /°C = 0.084 mL, rectangular → 0.084/√3 ≈ 0.05 mL
    assert u_temperature(100.0, 4.0) == pytest.approx(0.084 / math.sqrt(3), rel=1e-12)
    assert u_temperature(100.0, -4.0) == pytest.approx(u_temperature(100.0, 4.0))
    assert u_temperature(100.0, 4.0) == pytest.approx(0.05, abs=0.002)  # source: QUAM A1 (0.05 mL)


def test_flask_volume_uncertainty_quam_a1():
    flask = lookup("flask", 100, tolerance_mL=0.1)  # source: QUAM A1, 100 mL flask ±0.1 mL
    u = flask_volume_uncertainty(flask, delta_T_C=4.0, repeatability_mL=0.02)  # source: QUAM A1
    assert round(u, 4) == pytest.approx(0.0665)  # source: QUAM A1, u(V) = 0.0665 mL


def test_flask_volume_uncertainty_rejects_other_kinds():
    with pytest.raises(GlasswareError, match="volumetric flask"):
        flask_volume_uncertainty(lookup("pipette", 10))


# --------------------------------------------------------------------------------------------------
# deliveries
# --------------------------------------------------------------------------------------------------
def test_burette_reading_within_common_practice_range():
    # common practice: a burette reading is good to about ±0.01–0.02 mL; random part of
    # a delivery is √2 × the rectangular u of that half-width (difference of two readings).
    for cap in (10, 25, 50):
        item = lookup("burette", cap)
        half_width = delivery_uncertainty(item, cap / 2).random_mL * math.sqrt(3) / math.sqrt(2)
        assert 0.01 - 1e-12 <= half_width <= 0.02 + 1e-12


def test_burette_model():
    item = lookup("burette", 50)
    d = delivery_uncertainty(item, [10.0, 50.0])
    # derived: reading ±0.1/5 mL rectangular, two readings
    assert d.random_mL == pytest.approx(np.full(2, math.sqrt(2) * 0.02 / math.sqrt(3)))
    # derived: ISO 385 ±0.05 mL triangular, scaled with the fraction of the scale used
    assert d.systematic_mL == pytest.approx(0.05 / math.sqrt(6) * np.array([0.2, 1.0]))
    d_rep = delivery_uncertainty(item, [10.0], repeatability_mL=0.005)
    assert d_rep.random_mL == pytest.approx([0.005])  # derived: the user's repeatability replaces the model


def test_temperature_goes_to_systematic_only():
    item = lookup("burette", 25)
    cold = delivery_uncertainty(item, [5.0, 20.0])
    warm = delivery_uncertainty(item, [5.0, 20.0], delta_T_C=3.0)
    assert np.array_equal(cold.random_mL, warm.random_mL)
    assert np.all(warm.systematic_mL > cold.systematic_mL)
    # derived: systematic = √(calibration² + (V·α·ΔT/√3)²)
    assert warm.temperature_mL == pytest.approx(u_temperature(np.array([5.0, 20.0]), 3.0))
    assert warm.systematic_mL == pytest.approx(np.hypot(warm.calibration_mL, warm.temperature_mL))


def test_one_mark_pipette_only_its_capacity():
    item = lookup("pipette", 10)
    d = delivery_uncertainty(item, [10.0, 0.0])
    assert d.systematic_mL[0] == pytest.approx(
        0.02 / math.sqrt(6)
    )  # from memory: E969 10 mL ±0.02, triangular
    assert d.random_mL[1] == 0 and d.systematic_mL[1] == 0  # derived: volume 0 = not used
    with pytest.raises(GlasswareError, match="only its capacity"):
        delivery_uncertainty(item, [5.0])


def test_micropipette_iso_8655_limits_constant_below_nominal():
    item = lookup("micropipette", 1.0)
    d = delivery_uncertainty(item, [0.1, 0.5, 1.0])
    assert d.random_mL == pytest.approx(np.full(3, 0.003))  # source: ISO 8655-2:2002, 3 µL
    # source: ISO 8655-2:2002 ±8 µL systematic (rectangular, GUM 4.3.7); constant in µL below nominal
    # (from memory: the 2002 edition applies the nominal limits to every selected volume)
    assert d.systematic_mL == pytest.approx(np.full(3, 0.008 / math.sqrt(3)))
    with pytest.raises(GlasswareError, match="below the smallest"):
        delivery_uncertainty(item, [0.05])  # from memory: ISO 8655 usable range starts at 10 % nominal


def test_over_capacity_raises_with_names():
    with pytest.raises(GlasswareError) as err:
        delivery_uncertainty(lookup("burette", 10), [12.0])
    assert "10 mL burette" in str(err.value) and "12" in str(err.value)


def test_check_volume_rules():
    burette = lookup("burette", 25)
    check_volume(burette, [0.0, 0.05, 24.95], step_mL=0.05)
    with pytest.raises(GlasswareError, match="multiple"):
        check_volume(burette, [0.07], step_mL=0.05)
    with pytest.raises(GlasswareError, match="smallest"):
        check_volume(burette, [0.3], min_volume_mL=0.5)
    with pytest.raises(GlasswareError, match="≥ 0"):
        check_volume(burette, [-1.0])
    with pytest.raises(GlasswareError, match="only its capacity"):
        check_volume(lookup("flask", 50), [25.0])


def test_volume_grid_has_no_float_drift():
    grid = volume_grid(0.0, 0.3, 0.1)
    assert grid.tolist() == [0.0, 0.1, 0.2, 0.3]  # derived: exact decimal multiples, not 0.30000000000000004
    assert volume_grid(0.05, 1.0, 0.05)[-1] == 1.0  # derived
    with pytest.raises(GlasswareError):
        volume_grid(1.0, 0.5, 0.1)
    with pytest.raises(GlasswareError):
        volume_grid(-1.0, 0.5, 0.1)


# --------------------------------------------------------------------------------------------------
# invariants (hypothesis)
# --------------------------------------------------------------------------------------------------
steps = st.sampled_from([0.001, 0.002, 0.005, 0.01, 0.02, 0.05, 0.1, 0.25, 0.5, 1.0]) | st.floats(
    min_value=1e-4, max_value=5.0, allow_nan=False, allow_infinity=False
)
volumes = st.floats(min_value=0.0, max_value=1000.0, allow_nan=False, allow_infinity=False)


@settings(max_examples=150, deadline=None)
@given(v=volumes, step=steps)
def test_snap_lands_on_grid_and_is_idempotent(v, step):
    snapped = snap_to_grid(v, step)
    assert on_grid(snapped, step)
    assert snapped >= 0
    assert abs(snapped - v) <= step / 2 + 1e-9
    assert snap_to_grid(snapped, step) == pytest.approx(snapped, abs=1e-12)


@settings(max_examples=150, deadline=None)
@given(k=st.integers(min_value=0, max_value=100_000), step=steps)
def test_on_grid_values_unchanged_by_snap(k, step):
    v = k * step  # float drift included on purpose
    assert on_grid(v, step)
    assert snap_to_grid(v, step) == pytest.approx(v, rel=1e-9, abs=1e-10)


@settings(max_examples=100, deadline=None)
@given(lo=st.floats(0.0, 50.0), width=st.floats(0.0, 50.0), step=steps)
def test_volume_grid_on_grid_within_bounds(lo, width, step):
    hi = lo + width
    try:
        grid = volume_grid(lo, hi, step)
    except GlasswareError:
        assert math.floor(hi / step + 1e-9) < math.ceil(lo / step - 1e-9) or (hi - lo) / step > 1e6
        return
    assert np.all(on_grid(grid, step))
    assert np.all(grid >= lo) and np.all(grid <= hi)
    assert np.all(grid >= 0)
    assert np.all(np.diff(grid) > 0)


items = st.sampled_from(
    [it for it in catalogue() if it.kind in ("burette", "graduated-pipette", "micropipette")]
)


@settings(max_examples=100, deadline=None)
@given(item=items, fractions=st.lists(st.floats(0.1, 1.0), min_size=2, max_size=20), dT=st.floats(0.0, 10.0))
def test_delivery_uncertainty_nonnegative_and_monotone(item, fractions, dT):
    v = np.sort(np.asarray(fractions)) * item.capacity_mL
    d = delivery_uncertainty(item, v, delta_T_C=dT)
    for part in (d.random_mL, d.systematic_mL, d.combined_mL):
        assert np.all(part >= 0)
    assert np.all(np.diff(d.combined_mL) >= -1e-15)
    assert np.all(np.diff(d.systematic_mL) >= -1e-15)


@settings(max_examples=60, deadline=None)
@given(a=st.floats(0.0, 10.0), V=st.floats(0.0, 1000.0), dT=st.floats(-10.0, 10.0))
def test_standard_uncertainties_nonnegative(a, V, dT):
    for u in (u_triangular(a), u_rectangular(a), u_reading(a), u_temperature(V, dT)):
        assert u >= 0


# --------------------------------------------------------------------------------------------------
# devices described by the plan (issue 20): no class without one, the lab's own figures
# --------------------------------------------------------------------------------------------------
def test_a_device_given_by_its_tolerance_alone_has_no_class():
    flask = lookup("flask", 2.0, None, 0.02)
    assert flask.cls is None and flask.label == "2 mL volumetric flask" and "class" not in flask.label
    own = lookup("burette", 7.0, None, 0.02, graduation_mL=0.02)
    assert own.cls is None and own.label == "7 mL burette"
    assert (
        lookup("flask", 2.0, None).label == "class A 2 mL volumetric flask"
    )  # nothing stated: the catalogue's
    assert lookup("flask", 2.0, "A", 0.02).cls == "A"  # a class the user names is kept


def test_small_flasks_are_in_the_catalogue():
    # from memory: ASTM E288 / E237 class A 1 mL ±0.010, 2 mL ±0.015, 5 mL ±0.020 (recalled, flagged so)
    for cap, tol in ((1.0, 0.010), (2.0, 0.015), (5.0, 0.020)):
        it = lookup("flask", cap)
        assert it.tolerance_mL == pytest.approx(tol) and it.from_memory and "E288" in it.source


def test_piston_burettes_have_no_class_and_read_to_their_display():
    from planner.uncertainty.catalogue import reading_resolution_mL

    it = lookup("piston-burette", 10.0)
    assert it.cls is None and it.label == "10 mL piston burette" and it.from_memory
    assert reading_resolution_mL(it) == it.graduation_mL
    with pytest.raises(GlasswareError, match="no class"):
        lookup("piston-burette", 10.0, "B")
    # a piston burette's limit is a maximum permissible error: rectangular (GUM 4.3.7), scaled along
    # the stroke like a burette's; its random limit is the sd of one delivery (ISO 8655)
    du = delivery_uncertainty(it, np.array([5.0]))
    assert du.calibration_mL[0] == pytest.approx(it.tolerance_mL / math.sqrt(3.0) * 0.5)
    assert du.random_mL[0] == pytest.approx(it.random_mL)


def test_measured_repeatability_replaces_the_reading_model():
    from planner.uncertainty.delivery import reading_u_mL

    plain = lookup("burette", 10.0)
    # source: GUM 4.3.7 — read to ±1/5 of the 0.05 mL subdivision, rectangular: u = 0.01/√3
    assert reading_u_mL(plain) == pytest.approx(0.01 / math.sqrt(3.0))
    own = lookup("burette", 10.0, repeatability_mL=0.004)
    # derived: a delivery is the difference of two readings, so one reading carries s/√2
    assert reading_u_mL(own) == pytest.approx(0.004 / math.sqrt(2.0))
    assert delivery_uncertainty(own, np.array([3.0])).random_mL[0] == pytest.approx(0.004)
    mp = lookup("micropipette", 1.0, None, 0.004, repeatability_mL=0.0015)
    du = delivery_uncertainty(mp, np.array([0.5]))
    assert du.random_mL[0] == pytest.approx(0.0015)
    assert du.calibration_mL[0] == pytest.approx(0.004 / math.sqrt(3.0))  # rectangular, GUM 4.3.7


def test_the_plans_figures_reach_the_budget():
    from planner.inputs.plan import parse_plan_text
    from planner.jobs.compile import compile_study

    from ..conftest import scenario_text

    text = scenario_text("teaching").replace(
        'kind = "burette"\ncapacity = "10 mL"\nclass = "A"\n',
        'kind = "burette"\ncapacity = "10 mL"\nrepeatability = "0.004 mL"\ngraduation = "0.02 mL"\n',
    )
    item = compile_study(parse_plan_text(text)).bench.devices.items[0]
    assert (item.repeatability_mL, item.graduation_mL, item.cls) == (0.004, 0.02, "A")
