"""Rainfall totals, antecedent indices and intensity-duration thresholds (watch.rainfall)."""

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from watch.errors import ConfigError, ModelError
from watch.rainfall import (
    CAINE_1980,
    GUZZETTI_2008_GLOBAL,
    IntensityDurationThreshold,
    antecedent_precipitation_index,
    antecedent_rainfall,
    gauge_for_section,
    mean_intensity,
    moving_totals,
    current_event,
    event_exceedance,
    rain_events,
    rain_total,
    window_totals,
)


def _hourly(values, start="2026-01-01 01:00"):
    index = pd.date_range(start, periods=len(values), freq="1h", tz="UTC")
    return pd.Series(np.asarray(values, dtype=float), index=index, name="rain_mm")


def _brute_total(rain, end, length):
    # Definition of the window: depths reported at times in (end - length, end].
    return sum(v for t, v in rain.items() if end - length < t <= end)


# --------------------------------------------------------------------------------------------
# Totals
# --------------------------------------------------------------------------------------------


def test_constant_hourly_rain_gives_window_length_times_rate():
    # Closed form: 1 mm every hour -> the total over w hours is w mm once the window is full.
    totals = moving_totals(_hourly(np.ones(24 * 31)))
    last = totals.iloc[-1]
    expected = {"rain_1h_mm": 1, "rain_24h_mm": 24, "rain_3d_mm": 72, "rain_7d_mm": 168,
                "rain_30d_mm": 720}
    for column, value in expected.items():
        assert last[column] == pytest.approx(value, rel=1e-12)
    # Windows that reach before the record are NaN, not understated partial sums.
    assert np.isnan(totals["rain_24h_mm"].iloc[22])
    assert totals["rain_24h_mm"].iloc[23] == pytest.approx(24.0, rel=1e-12)


def test_partial_windows_have_no_total():
    # The one partial-window rule: a window starting before the record (first report time
    # minus the reporting interval) has no total, in every function that gives one.
    rain = _hourly([1.0, 2.0, 3.0])  # covers 00:00 to 03:00
    np.testing.assert_allclose(moving_totals(rain)["rain_1h_mm"], [1.0, 2.0, 3.0], rtol=1e-12)
    assert np.isnan(moving_totals(rain)["rain_24h_mm"]).all()
    assert rain_total(rain, "2026-01-01 03:00", 3.0) == pytest.approx(6.0, rel=1e-12)
    assert np.isnan(rain_total(rain, "2026-01-01 03:00", 3.5))
    np.testing.assert_allclose(window_totals(rain, rain.index, 2.0), [np.nan, 3.0, 5.0],
                               rtol=1e-12)


@settings(max_examples=60, deadline=None)
@given(
    gaps_min=st.lists(st.integers(1, 600), min_size=1, max_size=60),
    depths=st.lists(st.floats(0.0, 30.0), min_size=60, max_size=60),
)
def test_moving_totals_on_irregular_series_match_the_window_definition(gaps_min, depths):
    times = pd.Timestamp("2026-01-01", tz="UTC") + pd.to_timedelta(np.cumsum(gaps_min), "min")
    rain = pd.Series(depths[: len(times)], index=times)
    windows = {"rain_1h_mm": pd.Timedelta(hours=1), "rain_24h_mm": pd.Timedelta(hours=24)}
    totals = moving_totals(rain, windows)
    interval = pd.Series(times).diff().median() if len(times) > 1 else pd.Timedelta(0)
    for name, length in windows.items():
        expected = [_brute_total(rain, t, length) if t - length >= times[0] - interval else np.nan
                    for t in rain.index]  # fmt: skip
        np.testing.assert_allclose(totals[name], expected, rtol=1e-9, atol=1e-9)


def test_total_and_intensity_at_a_time_between_readings():
    rain = _hourly([2.0, 4.0, 6.0, 8.0])  # ends 01:00 .. 04:00
    # (00:30, 02:30] holds the 01:00 and 02:00 depths.
    assert rain_total(rain, "2026-01-01 02:30", 2.0) == pytest.approx(6.0, rel=1e-12)
    # (01:00, 04:00]: 4 + 6 + 8 = 18 mm in 3 h -> 6 mm/h.
    assert mean_intensity(rain, "2026-01-01 04:00", 3.0) == pytest.approx(6.0, rel=1e-12)
    # One hour is 1/24 day: (03:00, 04:00] holds 8 mm.
    assert antecedent_rainfall(rain, "2026-01-01 04:00", 1 / 24) == pytest.approx(8.0, rel=1e-12)


def test_rain_series_problems_are_refused():
    with pytest.raises(ModelError, match="missing depths"):
        moving_totals(_hourly([1.0, np.nan]))
    with pytest.raises(ModelError, match="negative depth"):
        moving_totals(_hourly([1.0, -0.2]))
    with pytest.raises(ModelError, match="must increase strictly"):
        moving_totals(_hourly([1.0, 2.0])[::-1])
    with pytest.raises(ConfigError, match="positive number of hours, got -1"):
        rain_total(_hourly([1.0, 2.0]), "2026-01-01 02:00", -1.0)


def test_antecedent_precipitation_index_decays_geometrically():
    # Kohler and Linsley (1951): API_d = k API_(d-1) + P_d; one wet day of 10 mm then dry days
    # gives API = 10 k^n n days later (closed form of the recursion).
    rain = _hourly(np.zeros(24 * 6), start="2026-01-01 01:00")
    rain.iloc[5] = 10.0  # 06:00 on 1 January
    api = antecedent_precipitation_index(rain, decay=0.9)
    assert api.index[0] == pd.Timestamp("2026-01-01", tz="UTC")
    np.testing.assert_allclose(api.to_numpy(), 10.0 * 0.9 ** np.arange(6), rtol=1e-12)
    # The series ends at 00:00 on 7 January: that depth belongs to 6 January, so six days.
    assert api.index[-1] == pd.Timestamp("2026-01-06", tz="UTC")
    with pytest.raises(ConfigError, match="between 0 and 1, got 1.2"):
        antecedent_precipitation_index(rain, decay=1.2)


# --------------------------------------------------------------------------------------------
# Intensity-duration thresholds
# --------------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("duration_h", "intensity"),
    [
        # Caine (1980), I = 14.82 D^-0.39 [mm/h, h], evaluated by hand from the equation.
        (10 / 60, 29.8076),
        (1.0, 14.82),
        (24.0, 4.29107),
        (240.0, 1.74810),
    ],
)
def test_caine_1980(duration_h, intensity):
    assert CAINE_1980.intensity(duration_h) == pytest.approx(intensity, rel=1e-5)


@pytest.mark.parametrize(
    ("duration_h", "intensity"),
    [
        # Guzzetti et al. (2008), global threshold I = 2.20 D^-0.44, evaluated from the equation.
        (0.1, 6.05930),
        (1.0, 2.20),
        (24.0, 0.543413),
        (1000.0, 0.105299),
    ],
)
def test_guzzetti_2008_global(duration_h, intensity):
    assert GUZZETTI_2008_GLOBAL.intensity(duration_h) == pytest.approx(intensity, rel=1e-5)


def test_threshold_on_arrays_and_exceedance():
    d = np.array([1.0, 24.0])
    np.testing.assert_allclose(CAINE_1980.intensity(d), [14.82, 4.29107], rtol=1e-5)
    np.testing.assert_array_equal(CAINE_1980.exceeded([14.82, 4.0], d), [True, False])
    assert CAINE_1980.exceedance_ratio(29.64, 1.0) == pytest.approx(2.0, rel=1e-12)


def test_out_of_range_duration_is_reported_not_extrapolated():
    with pytest.raises(ModelError, match=r"duration\(s\) \[300.0\] h outside the range of "
                                         r"threshold Caine 1980"):
        CAINE_1980.intensity([24.0, 300.0])
    assert CAINE_1980.intensity(300.0, extrapolate=True) == pytest.approx(
        14.82 * 300.0**-0.39, rel=1e-12
    )


def test_user_threshold_validation():
    with pytest.raises(ConfigError, match="a must be positive"):
        IntensityDurationThreshold(-1.0, 0.5, 1.0, 10.0, "bad")
    with pytest.raises(ConfigError, match="need 0 < d_min_h < d_max_h, got 10.0 and 1.0"):
        IntensityDurationThreshold(5.0, 0.5, 10.0, 1.0, "bad")


def _events_by_hand(rain, gap_h):
    """Rain events by their definition, one report at a time (Brunetti et al. 2010): a wet
    report starts a new event when the dry time since the last wet report's end, up to the
    start of its own interval, is at least the gap."""
    step = pd.Series(rain.index).diff().median() if len(rain) > 1 else pd.Timedelta(0)
    events, last_end = [], None
    for t, v in rain.items():
        if v <= 0:
            continue
        if last_end is None or (t - step) - last_end >= pd.Timedelta(hours=gap_h):
            events.append([t - step, t, 0.0, t])
        events[-1][1] = t
        last_end = t
    for e in events:
        e[2] = float(rain[(rain.index >= e[3]) & (rain.index <= e[1])].sum())
    return events


@settings(max_examples=60, deadline=None)
@given(
    wet=st.lists(st.booleans(), min_size=1, max_size=300),
    gap_h=st.sampled_from([1.0, 6.0, 24.0, 48.0]),
)
def test_rain_events_follow_their_definition(wet, gap_h):
    rain = _hourly(np.where(wet, 2.0, 0.0))
    found = rain_events(rain, gap_h)
    expected = _events_by_hand(rain, gap_h)
    assert [(e.start, e.end) for e in found] == [(e[0], e[1]) for e in expected]
    np.testing.assert_allclose([e.total_mm for e in found], [e[2] for e in expected], rtol=1e-12)
    for e in found:
        assert e.duration_h == (e.end - e.start) / pd.Timedelta(hours=1)
        step = pd.Timedelta(hours=1 if len(rain) > 1 else 0)  # one report: interval unknown
        assert e.complete == (e.start - pd.Timedelta(hours=gap_h) >= rain.index[0] - step)


def test_two_storms_closer_than_the_dry_gap_are_one_event():
    # 10 mm/h for 3 h, 30 dry hours, 5 mm/h for 2 h: one event with the 48 h gap of Brunetti
    # et al. (2010), D = 3 + 30 + 2 = 35 h and I = 40 / 35 mm/h; two events with a 24 h gap.
    depths = np.r_[np.zeros(60), [10.0] * 3, np.zeros(30), [5.0] * 2, np.zeros(4)]
    rain = _hourly(depths)
    (event,) = rain_events(rain, 48.0)
    assert event.duration_h == 35.0 and event.total_mm == pytest.approx(40.0, rel=1e-12)
    assert event.complete  # 60 dry hours before it are on record
    assert len(rain_events(rain, 24.0)) == 2
    at = rain.index[-1]
    result = event_exceedance(rain, at, CAINE_1980)
    # Caine (1980): I = 14.82 D^-0.39 at D = 35 h.
    assert result.ratio == pytest.approx((40.0 / 35.0) / (14.82 * 35.0**-0.39), rel=1e-12)
    assert result.testable and not result.exceeded
    # The same rain on sliding windows ending now would have compared 10 mm over its last
    # 6 h: the event is what the curve is drawn for.
    assert current_event(rain, at, 24.0).duration_h == 2.0


def test_an_intense_event_exceeds_caine_and_an_ended_one_is_not_under_way():
    # 30 mm in one hour after two dry days: D = 1 h, I = 30 mm/h, 30 / 14.82 = 2.02 times the
    # curve of Caine (1980).
    rain = _hourly(np.r_[np.zeros(50), 30.0, np.zeros(60)])
    during = event_exceedance(rain, rain.index[50], CAINE_1980)
    assert during.exceeded and during.ratio == pytest.approx(30.0 / 14.82, rel=1e-12)
    assert during.duration_h == 1.0
    # 47 h after the rain the event is still under way; 48 h after it, it is over.
    assert event_exceedance(rain, rain.index[50] + pd.Timedelta(hours=47), CAINE_1980).ratio \
        == pytest.approx(30.0 / 14.82, rel=1e-12)
    over = event_exceedance(rain, rain.index[50] + pd.Timedelta(hours=48), CAINE_1980)
    assert over.event is None and over.ratio == 0.0 and over.testable


def test_events_outside_a_curve_or_before_the_record_are_not_compared():
    # Caine (1980) was drawn for 10 min to 10 days: a 12-day event is not compared (no
    # extrapolation); Guzzetti et al. (2008), 0.1 to 1000 h (from memory), takes it.
    rain = _hourly(np.r_[np.zeros(50), np.full(288, 1.0)])
    at = rain.index[-1]
    caine = event_exceedance(rain, at, CAINE_1980)
    assert not caine.testable and np.isnan(caine.ratio)
    assert "outside the durations of Caine 1980 (0.166667 to 240 h)" in caine.reason
    guzzetti = event_exceedance(rain, at, GUZZETTI_2008_GLOBAL)
    assert guzzetti.testable
    assert guzzetti.ratio == pytest.approx(1.0 / (2.20 * 288.0**-0.44), rel=1e-12)
    # Rain from the first report on: the record cannot say when the event began.
    early = event_exceedance(_hourly(np.full(5, 3.0)), "2026-01-01 05:00", CAINE_1980)
    assert not early.testable and "does not reach 48 h before the event" in early.reason
    with pytest.raises(ConfigError, match="dry gap must be a positive number of hours, got 0"):
        rain_events(rain, 0.0)


def test_gauge_for_section_named_or_nearest():
    gauges = {"RG-N": (1200.0, 900.0), "RG-S": (1300.0, 700.0)}
    assert gauge_for_section((1250.0, 830.0), gauges) == "RG-N"
    assert gauge_for_section((1290.0, 720.0), gauges) == "RG-S"
    assert gauge_for_section((1290.0, 720.0), gauges, named="RG-N") == "RG-N"
    with pytest.raises(ConfigError, match="names rain gauge 'RG-X'"):
        gauge_for_section(None, gauges, named="RG-X")


@pytest.mark.parametrize("unit", ["s", "us", "ns"])
def test_window_totals_match_the_definition_whatever_the_time_unit(unit):
    """window_totals by position in the times equals the sum over (end - D, end], whatever the
    time resolution of the series' index."""
    rng = np.random.default_rng(7)
    for _ in range(20):
        n = int(rng.integers(2, 1500))
        index = pd.date_range("2026-01-01", periods=n, freq="15min", tz="UTC").as_unit(unit)
        depths = np.where(rng.random(n) < 0.7, 0.0, rng.gamma(0.5, 2.0, n)).round(1)
        rain = pd.Series(depths, index=index)
        end = index[int(rng.integers(0, n))] + pd.Timedelta(minutes=int(rng.integers(0, 30)))
        for d in (0.25, 1.0, 6.0, 24.0):
            length = pd.Timedelta(hours=d)
            expected = (_brute_total(rain, end, length)
                        if end - length >= index[0] - pd.Timedelta(minutes=15) else np.nan)
            np.testing.assert_allclose(rain_total(rain, end, d), expected, rtol=1e-9, atol=1e-9)


def test_rain_record_reach_covers_the_longest_event_and_window():
    # Caine (1980) is drawn up to 10 days: an event of 240 h needs the 48 h dry gap before it
    # on record, plus a day for the first report's interval.
    from watch.rainfall import rain_record_reach

    assert rain_record_reach((CAINE_1980,), 48.0, [24.0]) == pd.Timedelta(hours=240 + 48 + 24)
    assert rain_record_reach((), 48.0, [720.0]) == pd.Timedelta(hours=720 + 24)


# --------------------------------------------------------------------------------------------
# Rain reported after a gap in the record
# --------------------------------------------------------------------------------------------


def _after_gap():
    """A 15-minute record with three days missing: the first report after the gap carries the
    gap's 40 mm (a cumulative gauge's increment), then 0.5 mm every 15 minutes."""
    before = pd.date_range("2026-01-01 00:15", periods=96 * 5, freq="15min", tz="UTC")
    after = pd.date_range(before[-1] + pd.Timedelta(days=3), periods=96, freq="15min", tz="UTC")
    index = before.append(after)
    rain = pd.Series(0.5, index=index, name="rain_mm")
    rain.iloc[len(before)] = 40.0
    gap_start = pd.Series(pd.NaT, index=index, dtype="datetime64[ns, UTC]")
    gap_start.iloc[len(before)] = before[-1]
    return rain, gap_start, before[-1], after[0]


def test_rain_after_a_gap_counts_only_in_windows_that_hold_the_whole_gap():
    rain, gap_start, gap_from, reported = _after_gap()
    # By the definition of a window total (sum over (end - D, end]) and of a report after a
    # gap (its depth fell some time in (gap start, report time]): a 1-hour window ending at the
    # report holds part of the gap only, so its total is unknown; without the mark it would read
    # 40 + 3 x 0 (nothing else in the hour) = 40 mm in one hour.
    assert window_totals(rain, reported, 1.0)[0] == pytest.approx(40.0, rel=1e-12)
    assert np.isnan(window_totals(rain, reported, 1.0, gap_start)[0])
    assert np.isnan(mean_intensity(rain, reported, 1.0, gap_start))
    # 24 h and 48 h windows ending at the report start inside the gap: unknown too; the 3-day
    # window is the gap itself: 40 mm. A window that ends inside the gap is unknown (it may
    # hold some of the 40 mm).
    for hours in (24.0, 48.0):
        assert np.isnan(window_totals(rain, reported, hours, gap_start)[0])
    assert window_totals(rain, reported, 72.0, gap_start)[0] == pytest.approx(40.0, rel=1e-12)
    assert np.isnan(window_totals(rain, gap_from + pd.Timedelta(days=1), 1.0, gap_start)[0])
    # A 7-day window holds the whole gap: 40 mm plus the 0.5 mm reports in it.
    end = reported + pd.Timedelta(hours=2)
    expected = _brute_total(rain, end, pd.Timedelta(days=7))
    assert window_totals(rain, end, 168.0, gap_start)[0] == pytest.approx(expected, rel=1e-12)
    assert expected > 40.0
    # Windows after the report, or before the gap, are as without the mark.
    later = reported + pd.Timedelta(hours=1)
    assert window_totals(rain, later, 1.0, gap_start)[0] == pytest.approx(2.0, rel=1e-12)
    assert window_totals(rain, gap_from, 24.0, gap_start)[0] == pytest.approx(48.0, rel=1e-12)
    totals = moving_totals(rain, gap_start=gap_start)
    assert np.isnan(totals.loc[reported, "rain_1h_mm"]) and totals.loc[later, "rain_1h_mm"] == pytest.approx(2.0)


def test_a_rain_event_holding_rain_reported_after_a_gap_is_not_compared_with_a_curve():
    rain, gap_start, _, reported = _after_gap()
    at = reported + pd.Timedelta(hours=1)
    # Without the mark, 40 mm in the first 15 minutes of a 1.25 h event is far above Caine
    # (1980) I = 14.82 D^-0.39: the burst the gap would invent.
    assert event_exceedance(rain, at, CAINE_1980).exceeded
    marked = event_exceedance(rain, at, CAINE_1980, gap_start=gap_start)
    assert not marked.testable and not marked.exceeded and np.isnan(marked.ratio)
    assert "after a gap in the record" in marked.reason


def test_gap_start_must_match_the_rain_reports():
    rain, gap_start, _, reported = _after_gap()
    with pytest.raises(ModelError, match="gap_start has 10 values for 576 rain reports"):
        window_totals(rain, reported, 1.0, gap_start.iloc[:10])
    wrong = gap_start.copy()
    wrong.iloc[0] = rain.index[0] + pd.Timedelta(hours=1)
    with pytest.raises(ModelError, match="a gap start is not before the time of its report"):
        window_totals(rain, reported, 1.0, wrong)
