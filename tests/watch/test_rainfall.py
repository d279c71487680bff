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
    rain_total,
    worst_exceedance,
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


def test_partial_windows_kept_when_asked():
    totals = moving_totals(_hourly([1.0, 2.0, 3.0]), require_full_window=False)
    np.testing.assert_allclose(totals["rain_24h_mm"], [1.0, 3.0, 6.0], rtol=1e-12)


@settings(max_examples=60, deadline=None)
@given(
    gaps_min=st.lists(st.integers(1, 600), min_size=1, max_size=60),
    depths=st.lists(st.floats(0.0, 30.0), min_size=60, max_size=60),
)
def test_moving_totals_on_irregular_series_match_the_window_definition(gaps_min, depths):
    times = pd.Timestamp("2026-01-01", tz="UTC") + pd.to_timedelta(np.cumsum(gaps_min), "min")
    rain = pd.Series(depths[: len(times)], index=times)
    windows = {"rain_1h_mm": pd.Timedelta(hours=1), "rain_24h_mm": pd.Timedelta(hours=24)}
    totals = moving_totals(rain, windows, require_full_window=False)
    for name, length in windows.items():
        expected = [_brute_total(rain, t, length) for t in rain.index]
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
    with pytest.raises(ModelError, match="rain record starts at"):
        rain_total(_hourly([1.0, 2.0]), "2026-01-01 02:00", 24.0)
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


def test_worst_exceedance_picks_the_worst_duration():
    # 30 mm in the last hour of a dry two days: I(1 h) = 30 mm/h against Caine's 14.82 mm/h is
    # ratio 2.024; longer durations dilute it (I(2 h) = 15 against 11.29: 1.33).
    rain = _hourly(np.r_[np.zeros(47), 30.0])
    result = worst_exceedance(rain, rain.index[-1], CAINE_1980)
    assert result.duration_h == 1.0
    assert result.ratio == pytest.approx(30.0 / 14.82, rel=1e-12)
    assert result.exceeded
    np.testing.assert_allclose(
        result.ratios[:2], [30 / 14.82, 15 / (14.82 * 2**-0.39)], rtol=1e-12
    )
    assert any("72 h: longer than the rain record" in s for s in result.skipped)


def test_worst_exceedance_skips_durations_shorter_than_the_reporting_interval():
    rain = pd.Series(
        [0.0, 5.0, 50.0], index=pd.date_range("2026-01-01", periods=3, freq="6h", tz="UTC")
    )
    result = worst_exceedance(rain, rain.index[-1], CAINE_1980, durations_h=[1.0, 6.0, 12.0])
    assert list(result.durations_h) == [6.0, 12.0]
    assert result.skipped == ("1 h: shorter than the reporting interval (6 h)",)


def test_gauge_for_section_named_or_nearest():
    gauges = {"RG-N": (1200.0, 900.0), "RG-S": (1300.0, 700.0)}
    assert gauge_for_section((1250.0, 830.0), gauges) == "RG-N"
    assert gauge_for_section((1290.0, 720.0), gauges) == "RG-S"
    assert gauge_for_section((1290.0, 720.0), gauges, named="RG-N") == "RG-N"
    with pytest.raises(ConfigError, match="names rain gauge 'RG-X'"):
        gauge_for_section(None, gauges, named="RG-X")


@pytest.mark.parametrize("unit", ["s", "us", "ns"])
def test_worst_exceedance_uses_the_same_window_totals_as_rain_total(unit):
    """The ratio per duration is rain_total(end, D) / D over the curve's intensity (Caine 1980
    and Guzzetti et al. 2008 curves), whatever the time resolution of the series' index."""
    rng = np.random.default_rng(7)
    for _ in range(20):
        n = int(rng.integers(2, 1500))
        index = pd.date_range("2026-01-01", periods=n, freq="15min", tz="UTC").as_unit(unit)
        depths = np.where(rng.random(n) < 0.7, 0.0, rng.gamma(0.5, 2.0, n)).round(1)
        rain = pd.Series(depths, index=index)
        end = index[int(rng.integers(0, n))] + pd.Timedelta(minutes=int(rng.integers(0, 30)))
        for curve in (CAINE_1980, GUZZETTI_2008_GLOBAL):
            found = worst_exceedance(rain, end, curve)
            expected = [rain_total(rain, end, d) / d / curve.intensity(d) for d in found.durations_h]
            np.testing.assert_allclose(found.ratios, expected, rtol=1e-12, atol=0)
