"""Heads at a time and piezometric lines through them (watch.groundwater).

Reference for interpolation: numpy.interp (linear interpolation between instruments is the
closed form the line must reproduce where it lies below the ground). Section geometry is the
invented WC-040 example of docs/formats.md (demo data, not a reference).
"""

from datetime import timedelta

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.stats import linregress

from watch.errors import ConfigError, ModelError
from watch.groundwater import (
    FALLBACK_DESIGN_LINE,
    FALLBACK_NONE,
    FALLBACK_RAINFALL_MODEL,
    FALLBACK_REMAINING,
    FLAGGED,
    MISSING,
    SOURCE_DESIGN_LINE,
    SOURCE_INSTRUMENTS,
    SOURCE_RAINFALL_MODEL,
    STALE,
    SideRule,
    build_water_line,
    latest_heads,
    rate_of_rise,
)

GROUND = np.array([[0, 62.0], [18, 62.0], [42, 50.0], [60, 50.0]])
DESIGN = np.array([[0, 58.0], [42, 50.5], [60, 50.5]])


def _readings(rows):
    return pd.DataFrame(
        rows, columns=["instrument_id", "time_utc", "head_m", "quality", "source_line"]
    )


# --------------------------------------------------------------------------------------------
# latest_heads
# --------------------------------------------------------------------------------------------

READINGS = _readings(
    [
        ("P1", "2026-01-10 00:00", 55.0, "ok", 1),
        ("P1", "2026-01-10 01:00", 55.2, "ok", 2),
        ("P1", "2026-01-10 02:00", 59.9, "spike", 3),
        ("P2", "2026-01-09 12:00", 51.0, "ok", 4),
        ("P3", "2026-01-10 01:30", 52.0, "flat", 5),
        ("P3", "2026-01-09 00:00", 51.5, "ok", 6),
    ]
)


def test_reading_exactly_at_the_time_is_used():
    snapshot = latest_heads(READINGS, "2026-01-10 01:00", timedelta(hours=6))
    assert snapshot.head_by_instrument["P1"] == pytest.approx(55.2, rel=1e-12)
    assert snapshot.heads.loc["P1", "source_line"] == 2
    assert snapshot.heads.loc["P1", "age_hours"] == pytest.approx(0.0, abs=1e-12)


def test_between_readings_the_earlier_one_is_used_and_later_ones_ignored():
    snapshot = latest_heads(READINGS, "2026-01-10 00:59:59", timedelta(hours=6))
    assert snapshot.head_by_instrument["P1"] == pytest.approx(55.0, rel=1e-12)
    assert snapshot.heads.loc["P1", "reading_index"] == 0
    assert snapshot.heads.loc["P1", "age_hours"] == pytest.approx(59 / 60 + 59 / 3600, rel=1e-9)


def test_flagged_latest_reading_falls_back_to_the_latest_good_one():
    snapshot = latest_heads(READINGS, "2026-01-10 03:00", timedelta(hours=6))
    assert snapshot.head_by_instrument["P1"] == pytest.approx(55.2, rel=1e-12)


def test_exclusion_reasons_missing_stale_flagged():
    snapshot = latest_heads(
        READINGS, "2026-01-10 03:00", timedelta(hours=6), instruments=["P1", "P2", "P3", "P4"]
    )
    assert snapshot.reasons == {"P2": STALE, "P3": FLAGGED, "P4": MISSING}
    assert "older than 6 h" in snapshot.excluded["P2"].detail
    assert snapshot.excluded["P3"].last_time_utc == pd.Timestamp("2026-01-10 01:30", tz="UTC")


def test_reading_exactly_max_age_old_still_counts():
    snapshot = latest_heads(READINGS, "2026-01-09 18:00", timedelta(hours=6))
    assert snapshot.head_by_instrument["P2"] == pytest.approx(51.0, rel=1e-12)
    later = latest_heads(READINGS, "2026-01-09 18:00:01", timedelta(hours=6))
    assert later.reasons["P2"] == STALE


def test_max_age_per_instrument_and_aware_times():
    ages = {"P1": timedelta(hours=1), "P2": timedelta(hours=24), "P3": timedelta(hours=48)}
    # 04:00 in UTC+02:00 is 02:00 UTC.
    snapshot = latest_heads(READINGS, "2026-01-10 04:00+02:00", ages)
    assert snapshot.at == pd.Timestamp("2026-01-10 02:00", tz="UTC")
    assert snapshot.head_by_instrument == pytest.approx({"P1": 55.2, "P2": 51.0, "P3": 51.5})


def test_nan_head_with_good_quality_counts_as_flagged():
    rows = _readings([("P1", "2026-01-10 00:00", np.nan, "ok", 1)])
    snapshot = latest_heads(rows, "2026-01-10 01:00", timedelta(hours=6))
    assert snapshot.reasons == {"P1": FLAGGED}


def test_latest_heads_rejects_bad_configuration():
    with pytest.raises(ConfigError, match="lack the column"):
        latest_heads(READINGS.drop(columns="quality"), "2026-01-10", timedelta(hours=1))
    with pytest.raises(ConfigError, match="must be zero or positive"):
        latest_heads(READINGS, "2026-01-10", timedelta(hours=-1))
    with pytest.raises(ConfigError, match=r"no maximum reading age given .* \['P3'\]"):
        latest_heads(READINGS, "2026-01-10", {"P1": timedelta(1), "P2": timedelta(1)})


# --------------------------------------------------------------------------------------------
# build_water_line
# --------------------------------------------------------------------------------------------

OFFSETS = {"P1": 10.0, "P2": 30.0, "P3": 50.0}
HEADS = {"P1": 58.0, "P2": 52.0, "P3": 48.0}


def test_between_instruments_the_line_is_numpy_interp_of_the_heads():
    line = build_water_line(
        OFFSETS, HEADS, GROUND, SideRule.hold_level(), SideRule.hold_level(), DESIGN
    )
    x = np.linspace(10.0, 50.0, 401)
    expected = np.interp(x, [10.0, 30.0, 50.0], [58.0, 52.0, 48.0])  # below the ground here
    assert np.all(expected < np.interp(x, GROUND[:, 0], GROUND[:, 1]))
    np.testing.assert_allclose(line.elevation_at(x), expected, rtol=1e-12)
    assert line.source == SOURCE_INSTRUMENTS and line.fallback == FALLBACK_NONE
    assert line.instruments_used == ("P1", "P2", "P3")
    assert line.points[0, 0] == 0.0 and line.points[-1, 0] == 60.0


def test_hold_level_beyond_the_outer_instruments():
    line = build_water_line(
        OFFSETS, HEADS, GROUND, SideRule.hold_level(), SideRule.hold_level(), DESIGN
    )
    np.testing.assert_allclose(line.elevation_at([0.0, 5.0]), [58.0, 58.0], rtol=1e-12)
    # 48 m is below the 50 m ground beyond the toe, so it holds to the end.
    np.testing.assert_allclose(line.elevation_at([55.0, 60.0]), [48.0, 48.0], rtol=1e-12)
    assert (line.left_rule, line.right_rule) == ("hold level", "hold level")


def test_below_ground_rule_follows_the_ground_vertices():
    heads = {"P2": 53.0}
    line = build_water_line(
        {"P2": 30.0}, heads, GROUND, SideRule.below_ground(2.0), SideRule.below_ground(1.0)
    )
    # Left: ground 62 m at x = 0 and 18 -> 60 m, then straight to the instrument.
    np.testing.assert_allclose(line.elevation_at([0.0, 18.0]), [60.0, 60.0], rtol=1e-12)
    np.testing.assert_allclose(line.elevation_at(24.0), 0.5 * (60.0 + 53.0), rtol=1e-12)
    # Right: ground vertices 42 and 60 m at 50 m -> 49 m.
    np.testing.assert_allclose(line.elevation_at([42.0, 60.0]), [49.0, 49.0], rtol=1e-12)
    assert line.right_rule == "below ground (1 m)"


def test_fixed_level_from_an_offset_like_a_toe_ditch():
    line = build_water_line(
        {"P1": 10.0, "P2": 30.0},
        {"P1": 58.0, "P2": 53.0},
        GROUND,
        SideRule.hold_level(),
        SideRule.fixed_level(49.2, offset_m=45.0),
    )
    np.testing.assert_allclose(line.elevation_at([45.0, 52.0, 60.0]), [49.2] * 3, rtol=1e-12)
    np.testing.assert_allclose(line.elevation_at(37.5), np.interp(37.5, [30, 45], [53, 49.2]))


def test_fixed_level_offset_on_the_wrong_side_is_refused():
    with pytest.raises(ConfigError, match="right fixed level starts at x = 20 m"):
        build_water_line(
            OFFSETS, HEADS, GROUND, SideRule.hold_level(), SideRule.fixed_level(49.0, 20.0)
        )


def test_design_line_rule_beyond_the_instruments():
    line = build_water_line(
        {"P2": 30.0}, {"P2": 53.0}, GROUND, SideRule.design_line(), SideRule.design_line(),
        DESIGN,
    )
    np.testing.assert_allclose(line.elevation_at(0.0), 58.0, rtol=1e-12)
    np.testing.assert_allclose(line.elevation_at([42.0, 60.0]), [50.0, 50.0], rtol=1e-12)
    # The design line (50.5 m) is above the 50 m ground beyond x = 42: clipped.
    assert np.all(line.elevation_at(np.linspace(42, 60, 19)) <= 50.0 + 1e-12)


def test_parallel_to_design_line_shifts_the_design_line_by_the_instruments_departure():
    # One instrument 1.2 m above the design line at x = 30: beyond it, the line is the design
    # line raised by 1.2 m (numpy.interp of the design vertices, shifted), then clipped.
    design_at_30 = np.interp(30.0, DESIGN[:, 0], DESIGN[:, 1])
    line = build_water_line(
        {"P1": 30.0}, {"P1": design_at_30 + 1.2}, GROUND,
        SideRule.parallel_to_design_line(), SideRule.parallel_to_design_line(), DESIGN,
    )
    xs = np.array([0.0, 10.0, 42.0, 60.0])
    expected = np.minimum(np.interp(xs, DESIGN[:, 0], DESIGN[:, 1]) + 1.2,
                          np.interp(xs, GROUND[:, 0], GROUND[:, 1]))
    np.testing.assert_allclose(np.interp(xs, line.points[:, 0], line.points[:, 1]), expected,
                               rtol=1e-12)
    assert line.left_rule == "parallel to design line"


def test_head_above_ground_is_clipped_with_a_warning_and_crossings_added():
    line = build_water_line(
        {"P1": 30.0}, {"P1": 57.0}, GROUND, SideRule.hold_level(), SideRule.hold_level()
    )
    ground_at_30 = np.interp(30.0, GROUND[:, 0], GROUND[:, 1])  # 56 m
    assert line.elevation_at(30.0) == pytest.approx(ground_at_30, rel=1e-12)
    assert any("above the ground" in w for w in line.warnings)
    # The level 57 m meets the 62 -> 50 m slope at x = 18 + 24 * 5 / 12 = 28 m: a vertex there.
    assert np.any(np.isclose(line.points[:, 0], 28.0, rtol=1e-12))
    assert line.elevation_at(20.0) == pytest.approx(57.0, rel=1e-12)


def test_ponding_allowed_keeps_the_line_above_ground():
    line = build_water_line(
        {"P1": 50.0}, {"P1": 51.0}, GROUND, SideRule.hold_level(), SideRule.hold_level(),
        allow_ponding=True,
    )
    assert line.elevation_at(55.0) == pytest.approx(51.0, rel=1e-12)
    assert line.warnings == ()


def test_fallback_remaining_instruments_is_recorded():
    line = build_water_line(
        OFFSETS,
        {"P1": 58.0, "P3": 48.0},
        GROUND,
        SideRule.hold_level(),
        SideRule.hold_level(),
        exclusions={"P2": STALE},
    )
    assert line.fallback == FALLBACK_REMAINING
    assert line.excluded == {"P2": STALE}
    assert "P2: stale" in line.fallback_reason
    assert line.instruments_used == ("P1", "P3")
    assert line.elevation_at(30.0) == pytest.approx(53.0, rel=1e-12)


def test_fallback_rainfall_model_when_no_instrument_is_usable():
    line = build_water_line(
        OFFSETS,
        {},
        GROUND,
        SideRule.hold_level(),
        SideRule.hold_level(),
        DESIGN,
        model_heads={"P2": 52.5},
        exclusions={"P1": FLAGGED, "P2": STALE, "P3": MISSING},
    )
    assert line.source == SOURCE_RAINFALL_MODEL and line.fallback == FALLBACK_RAINFALL_MODEL
    assert "P1: flagged; P2: stale; P3: missing" in line.fallback_reason
    assert line.heads_used == {"P2": 52.5}
    assert line.elevation_at(30.0) == pytest.approx(52.5, rel=1e-12)


def test_fallback_design_line_last():
    line = build_water_line(
        OFFSETS, {}, GROUND, SideRule.hold_level(), SideRule.hold_level(), DESIGN,
        exclusions={"P1": STALE},
    )
    assert line.source == SOURCE_DESIGN_LINE and line.fallback == FALLBACK_DESIGN_LINE
    assert line.excluded == {"P1": STALE, "P2": "no head given", "P3": "no head given"}
    x = np.linspace(0, 42, 43)
    design, ground = np.interp(x, *DESIGN.T), np.interp(x, *GROUND.T)
    np.testing.assert_allclose(line.elevation_at(x), np.minimum(design, ground), rtol=1e-12)


def test_nothing_to_draw_raises():
    with pytest.raises(ModelError, match=r"no usable instrument head \(P1: stale"):
        build_water_line(
            {"P1": 10.0}, {}, GROUND, SideRule.hold_level(), SideRule.hold_level(),
            exclusions={"P1": STALE},
        )


def test_water_line_configuration_errors():
    with pytest.raises(ConfigError, match="off the section"):
        build_water_line({"P1": 70.0}, {"P1": 50.0}, GROUND, SideRule.hold_level(),
                         SideRule.hold_level())
    with pytest.raises(ConfigError, match="both at x = 10 m"):
        build_water_line({"P1": 10.0, "P2": 10.0}, {"P1": 50.0}, GROUND,
                         SideRule.hold_level(), SideRule.hold_level())
    with pytest.raises(ConfigError, match=r"instrument\(s\) \['P9'\] that do not inform"):
        build_water_line({"P1": 10.0}, {"P9": 50.0}, GROUND, SideRule.hold_level(),
                         SideRule.hold_level())
    with pytest.raises(ConfigError, match="needs the section's design line"):
        build_water_line({"P1": 10.0}, {"P1": 50.0}, GROUND, SideRule.design_line(),
                         SideRule.hold_level())
    with pytest.raises(ConfigError, match="x must increase strictly"):
        build_water_line({"P1": 10.0}, {"P1": 50.0}, GROUND[::-1], SideRule.hold_level(),
                         SideRule.hold_level())
    with pytest.raises(ConfigError, match="unknown water-line side rule 'spring'"):
        SideRule("spring")
    with pytest.raises(ConfigError, match="needs a depth >= 0 m below the surface, got -1"):
        SideRule.below_ground(-1.0)


_rules = st.one_of(
    st.just(SideRule.hold_level()),
    st.floats(0.0, 5.0).map(SideRule.below_ground),
    st.floats(40.0, 70.0).map(SideRule.fixed_level),
    st.just(SideRule.design_line()),
)


@settings(max_examples=200, deadline=None)
@given(
    heads=st.lists(st.floats(40.0, 70.0), min_size=1, max_size=4),
    offsets=st.lists(st.floats(0.0, 60.0), min_size=4, max_size=4, unique=True),
    left=_rules,
    right=_rules,
)
def test_line_is_never_above_the_ground_unless_ponding(heads, offsets, left, right):
    # Invariant of the construction: y = min(line, ground) at every x.
    names = [f"P{i}" for i in range(len(heads))]
    line = build_water_line(
        dict(zip(names, offsets)), dict(zip(names, heads)), GROUND, left, right, DESIGN
    )
    x = np.union1d(np.linspace(0.0, 60.0, 601), line.points[:, 0])
    ground = np.interp(x, GROUND[:, 0], GROUND[:, 1])
    assert np.all(line.elevation_at(x) <= ground + 1e-9)
    assert np.all(np.diff(line.points[:, 0]) > 0)
    assert line.points[0, 0] == 0.0 and line.points[-1, 0] == 60.0


# --------------------------------------------------------------------------------------------
# End to end: readings -> heads -> line -> solver
# --------------------------------------------------------------------------------------------


def _section_dict(water_points):
    # The WC-040 example of docs/formats.md (invented demo geometry), with both soils drained
    # so that the water line changes the factor of safety.
    return {
        "section": {"id": "WC-040"},
        "ground": {"points": GROUND.tolist()},
        "base": {"points": [[0, 40.0], [60, 40.0]]},
        "material": [
            {"name": "Till", "model": "drained", "unit_weight": 19.0,
             "unit_weight_saturated": 20.0, "cohesion": 5.0, "friction_angle": 30.0,
             "water": "main"},
            {"name": "Mudstone", "model": "drained", "unit_weight": 20.0, "cohesion": 8.0,
             "friction_angle": 26.0, "water": "main"},
        ],
        "stratum": [{"material": "Till", "bottom": [[0, 55.0], [60, 46.0]]},
                    {"material": "Mudstone"}],
        "water_line": [{"name": "main", "points": np.asarray(water_points).tolist()}],
    }


def test_fos_with_the_line_built_from_readings_equals_fos_with_that_line_given_directly():
    solver_section = pytest.importorskip("solver.section")
    solver_slicing = pytest.importorskip("solver.slicing")
    solver_methods = pytest.importorskip("solver.methods")

    readings = _readings(
        [
            ("P1", "2026-01-20 05:00", 57.6, "ok", 11),
            ("P1", "2026-01-20 06:00", 58.0, "ok", 12),
            ("P2", "2026-01-20 05:30", 47.0, "ok", 13),
            ("P2", "2026-01-20 06:00", 49.9, "spike", 14),
        ]
    )
    snapshot = latest_heads(readings, "2026-01-20 06:00", timedelta(hours=6))
    estimate = build_water_line(
        {"P1": 10.0, "P2": 50.0},
        snapshot.head_by_instrument,
        GROUND,
        SideRule.hold_level(),
        SideRule.hold_level(),
        DESIGN,
    )
    assert list(snapshot.heads["source_line"]) == [12, 13]  # traceable to the feed rows
    # Expected by hand: 58 m held to the left, linear to 47 m at x = 50, held to the right;
    # below the ground everywhere, so no clipping.
    expected = [[0, 58.0], [10, 58.0], [50, 47.0], [60, 47.0]]

    def fos(water_points):
        section = solver_section.section_from_dict(_section_dict(water_points))
        batch = solver_slicing.slice_circles(section, [38.0, 34.0], [68.0, 72.0], [20.0, 26.0])
        assert batch.valid.all(), batch.reason
        result = solver_methods.bishop_simplified(batch.slices)
        assert result.converged.all()
        return result.fos

    from_readings = fos(estimate.points)
    assert np.all(np.isfinite(from_readings))
    np.testing.assert_allclose(from_readings, fos(expected), rtol=1e-9)
    # The water line matters: the design line gives other factors of safety.
    assert not np.allclose(from_readings, fos(DESIGN), rtol=1e-3)


# --------------------------------------------------------------------------------------------
# Rate of rise
# --------------------------------------------------------------------------------------------


@settings(max_examples=60, deadline=None)
@given(
    minutes=st.lists(st.integers(1, 180), min_size=3, max_size=40),
    seed=st.integers(0, 10_000),
)
def test_rate_of_rise_is_the_least_squares_slope(minutes, seed):
    # Reference: numpy.polyfit (degree 1) and scipy.stats.linregress, both ordinary least
    # squares, on the same readings in hours.
    rng = np.random.default_rng(seed)
    hours = np.cumsum(minutes) / 60.0
    heads = 10.0 + 0.05 * hours + rng.normal(0.0, 0.02, hours.size)
    times = pd.Timestamp("2026-11-01T00:00Z") + pd.to_timedelta(hours, unit="h")
    rate = rate_of_rise(times, heads)
    np.testing.assert_allclose(rate, np.polyfit(hours, heads, 1)[0], rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(rate, linregress(hours, heads).slope, rtol=1e-9, atol=1e-12)


def test_rate_of_rise_is_not_set_by_one_end_reading():
    # A steady rise of 0.1 m/h read hourly, with the last reading 0.5 m high (a spike): the
    # two-point difference would give (1.1 + 0.5 - 0) / 11 h = 0.145 m/h; the least-squares
    # slope stays near the trend (numpy.polyfit reference).
    hours = np.arange(12.0)
    heads = 0.1 * hours
    heads[-1] += 0.5
    times = pd.Timestamp("2026-11-01T00:00Z") + pd.to_timedelta(hours, unit="h")
    rate = rate_of_rise(pd.Series(times), pd.Series(heads))
    np.testing.assert_allclose(rate, np.polyfit(hours, heads, 1)[0], rtol=1e-12)
    assert rate < 0.145


def test_rate_of_rise_needs_three_readings_at_two_times():
    t = pd.to_datetime(["2026-11-01T00:00Z", "2026-11-01T01:00Z", "2026-11-01T01:00Z"])
    assert np.isnan(rate_of_rise(t[:2], [1.0, 2.0]))
    assert np.isnan(rate_of_rise([t[1]] * 3, [1.0, 2.0, 3.0]))
    assert np.isnan(rate_of_rise(t, [1.0, np.nan, 2.0]))
    with pytest.raises(ConfigError, match="3 times but 2 heads"):
        rate_of_rise(t, [1.0, 2.0])
