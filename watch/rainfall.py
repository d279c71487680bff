"""Rainfall numerics: moving-window totals, intensity, antecedent rainfall and
intensity-duration trigger curves.

Pure functions on a rain series: a pandas Series of ``rain_mm`` [mm] indexed by the UTC time at
the END of each reporting interval (the depth fell in the interval ending at that time), time
increasing, gaps allowed. Windows are time-based: the total over a window of length w ending at
t is the sum of the depths reported at times in (t - w, t]. Naive times are taken as UTC (the
store's convention).

Missing data must be handled by the caller: a series holding NaN is refused, because a gauge
that reported nothing and a gauge that was down look the same in a sum.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy.signal import lfilter

from watch.errors import ConfigError, ModelError

#: The moving windows reported for every gauge: column name -> window length.
DEFAULT_WINDOWS: dict[str, pd.Timedelta] = {
    "rain_1h_mm": pd.Timedelta(hours=1),
    "rain_24h_mm": pd.Timedelta(hours=24),
    "rain_3d_mm": pd.Timedelta(days=3),
    "rain_7d_mm": pd.Timedelta(days=7),
    "rain_30d_mm": pd.Timedelta(days=30),
}

#: Durations [h] at which a rainfall event is compared with an intensity-duration curve when the
#: caller gives none: from one hour to ten days. Common practice is to test the durations of
#: the event itself; a fixed ladder keeps alerts comparable between gauges.
DEFAULT_EVENT_DURATIONS_H = (1.0, 2.0, 3.0, 6.0, 12.0, 24.0, 48.0, 72.0, 96.0, 120.0, 168.0, 240.0)


def _checked_series(rain: pd.Series) -> pd.Series:
    if not isinstance(rain, pd.Series) or not isinstance(rain.index, pd.DatetimeIndex):
        raise ModelError("rain must be a pandas Series of rain_mm indexed by time (UTC)")
    if len(rain) == 0:
        raise ModelError("the rain series is empty")
    values = rain.astype(float)
    if values.isna().any():
        first = values.index[values.isna()][0]
        raise ModelError(
            f"the rain series has missing depths (first at {first}); drop or fill them "
            "explicitly before computing totals"
        )
    if (values < 0).any():
        first = values.index[values < 0][0]
        raise ModelError(f"the rain series has a negative depth at {first}: {values[first]} mm")
    index = values.index
    index = index.tz_localize("UTC") if index.tz is None else index.tz_convert("UTC")
    if not index.is_monotonic_increasing or index.has_duplicates:
        raise ModelError("the rain series times must increase strictly (sort and merge them)")
    return pd.Series(values.to_numpy(), index=index, name="rain_mm")


def _as_utc(time) -> pd.Timestamp:
    stamp = pd.Timestamp(time)
    return stamp.tz_localize("UTC") if stamp.tzinfo is None else stamp.tz_convert("UTC")


def _record_start(rain: pd.Series) -> pd.Timestamp:
    """Start of the period the series covers: its first time minus its typical interval (the
    first depth fell in the interval ending at the first time)."""
    if len(rain) < 2:
        return rain.index[0]
    return rain.index[0] - pd.Series(rain.index).diff().median()


def moving_totals(
    rain: pd.Series,
    windows: Mapping[str, pd.Timedelta] | None = None,
    require_full_window: bool = True,
) -> pd.DataFrame:
    """Rain totals over moving time windows ending at each reading time.

    total_w(t) = sum of rain_mm at times in (t - w, t]

    Parameters
    ----------
    rain : pandas.Series
        Depth of rain [mm] per interval, indexed by interval end time (UTC).
    windows : mapping of str to Timedelta, optional
        Column name -> window length; default :data:`DEFAULT_WINDOWS` (1 h, 24 h, 3 d, 7 d,
        30 d).
    require_full_window : bool
        When True (default) a total whose window starts before the series does is NaN rather
        than a partial sum that would understate it.

    Returns
    -------
    pandas.DataFrame
        One column per window [mm], same index as ``rain``.
    """
    rain = _checked_series(rain)
    windows = DEFAULT_WINDOWS if windows is None else windows
    start = _record_start(rain)
    columns = {}
    for name, length in windows.items():
        length = pd.Timedelta(length)
        if length <= pd.Timedelta(0):
            raise ConfigError(f"window {name} must be longer than zero, got {length}")
        total = rain.rolling(length, closed="right").sum()
        if require_full_window:
            total[rain.index - length < start] = np.nan
        columns[name] = total
    return pd.DataFrame(columns, index=rain.index)


def rain_total(rain: pd.Series, end, duration_h: float) -> float:
    """Rain [mm] that fell in the ``duration_h`` [h] ending at ``end``: sum over (end - D, end].

    Raises ModelError when the window starts before the series does (the total would be
    partial)."""
    return _window_total(_checked_series(rain), _as_utc(end), duration_h)


def _window_total(rain: pd.Series, end: pd.Timestamp, duration_h: float) -> float:
    if not (np.isfinite(duration_h) and duration_h > 0):
        raise ConfigError(f"duration must be a positive number of hours, got {duration_h}")
    begin = end - pd.Timedelta(hours=duration_h)
    if begin < _record_start(rain):
        raise ModelError(
            f"the rain record starts at {_record_start(rain)}, after the start of the "
            f"{duration_h:g} h window ending at {end}"
        )
    in_window = (rain.index > begin) & (rain.index <= end)
    return float(rain[in_window].sum())


def mean_intensity(rain: pd.Series, end, duration_h: float) -> float:
    """Mean rainfall intensity I = P / D [mm/h] over the ``duration_h`` [h] ending at ``end``,
    with P the total [mm] over (end - D, end]."""
    return rain_total(rain, end, duration_h) / duration_h


def antecedent_rainfall(rain: pd.Series, at, days: float) -> float:
    """Antecedent rainfall [mm]: the total over the ``days`` [d] before ``at``, (at - N d, at]."""
    return rain_total(rain, at, 24.0 * days)


def antecedent_precipitation_index(rain: pd.Series, decay: float) -> pd.Series:
    """Daily antecedent precipitation index (API) of Kohler and Linsley (1951).

    API_d = k * API_(d-1) + P_d

    with P_d the rain of UTC day d [mm] and k the daily decay constant [-]. Values of k between
    0.85 and 0.98 are usual (from memory; calibrate for the site). The index starts at zero on
    the first day of the series, so the first weeks understate it; a day inside the series
    with no report counts as dry.

    Parameters
    ----------
    rain : pandas.Series
        Depth of rain [mm] per interval, indexed by interval end time (UTC).
    decay : float
        k, 0 < k < 1 [-].

    Returns
    -------
    pandas.Series
        ``api_mm`` [mm] per UTC day (labelled by the day's start).

    References
    ----------
    Kohler, M. A. and Linsley, R. K. (1951). Predicting the runoff from storm rainfall.
    Research Paper 34, U.S. Weather Bureau, Washington, D.C.
    """
    if not (np.isfinite(decay) and 0.0 < decay < 1.0):
        raise ConfigError(f"API decay constant k must be between 0 and 1, got {decay}")
    rain = _checked_series(rain)
    # A depth reported at exactly midnight fell in the day that ends then.
    day = (rain.index - pd.Timedelta(1, "ns")).floor("D")
    daily = rain.groupby(day).sum()
    daily = daily.reindex(pd.date_range(day[0], day[-1], freq="D"), fill_value=0.0)
    api = lfilter([1.0], [1.0, -decay], daily.to_numpy())
    return pd.Series(api, index=daily.index, name="api_mm")


# --------------------------------------------------------------------------------------------
# Intensity-duration thresholds
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class IntensityDurationThreshold:
    """A rainfall intensity-duration threshold I = a * D^(-b).

    Attributes
    ----------
    a : float
        Intensity at D = 1 h [mm/h].
    b : float
        Exponent [-].
    d_min_h, d_max_h : float
        Range of durations [h] over which the curve was defined.
    name : str
    reference : str
        Where the curve comes from (author, year, journal), or who set it.
    """

    a: float
    b: float
    d_min_h: float
    d_max_h: float
    name: str
    reference: str = ""

    def __post_init__(self) -> None:
        if not (np.isfinite(self.a) and self.a > 0):
            raise ConfigError(f"threshold {self.name}: a must be positive [mm/h], got {self.a}")
        if not np.isfinite(self.b):
            raise ConfigError(f"threshold {self.name}: b must be a finite number, got {self.b}")
        if not (0 < self.d_min_h < self.d_max_h < np.inf):
            raise ConfigError(
                f"threshold {self.name}: need 0 < d_min_h < d_max_h, got "
                f"{self.d_min_h} and {self.d_max_h}"
            )

    def in_range(self, d_hours) -> np.ndarray:
        """True where the duration [h] lies in the curve's range."""
        d = np.asarray(d_hours, dtype=float)
        return (d >= self.d_min_h) & (d <= self.d_max_h)

    def intensity(self, d_hours, extrapolate: bool = False):
        """Threshold intensity I = a * D^(-b) [mm/h] at duration ``d_hours`` [h].

        Raises ModelError for a duration outside [d_min_h, d_max_h] unless ``extrapolate``."""
        d = np.asarray(d_hours, dtype=float)
        if not extrapolate and not np.all(self.in_range(d)):
            outside = np.atleast_1d(d)[~np.atleast_1d(self.in_range(d))]
            raise ModelError(
                f"duration(s) {outside.tolist()} h outside the range of threshold "
                f"{self.name} ({self.d_min_h:g} to {self.d_max_h:g} h); pass extrapolate=True "
                "to use the curve beyond it knowingly"
            )
        value = self.a * d ** (-self.b)
        return float(value) if value.ndim == 0 else value

    def exceedance_ratio(self, intensity_mm_h, d_hours, extrapolate: bool = False):
        """I / I_threshold(D) [-]: 1 on the curve, above 1 above it."""
        return np.asarray(intensity_mm_h, dtype=float) / self.intensity(d_hours, extrapolate)

    def exceeded(self, intensity_mm_h, d_hours, extrapolate: bool = False):
        """True where the rainfall (D [h], I [mm/h]) lies on or above the curve."""
        return self.exceedance_ratio(intensity_mm_h, d_hours, extrapolate) >= 1.0


#: Caine (1980), world-wide lower bound for shallow landslides and debris flows,
#: I = 14.82 D^-0.39, I [mm/h], D [h], for 10 minutes < D < 10 days.
CAINE_1980 = IntensityDurationThreshold(
    a=14.82,
    b=0.39,
    d_min_h=10.0 / 60.0,
    d_max_h=240.0,
    name="Caine 1980",
    reference=(
        "Caine, N. (1980). The rainfall intensity-duration control of shallow landslides and "
        "debris flows. Geografiska Annaler, Series A, 62(1/2), 23-27."
    ),
)

#: Guzzetti et al. (2008), global minimum threshold, I = 2.20 D^-0.44, I [mm/h], D [h]; range
#: 0.1 h < D < 1000 h (range from memory: check against the paper before relying on its ends).
GUZZETTI_2008_GLOBAL = IntensityDurationThreshold(
    a=2.20,
    b=0.44,
    d_min_h=0.1,
    d_max_h=1000.0,
    name="Guzzetti et al. 2008 global",
    reference=(
        "Guzzetti, F., Peruccacci, S., Rossi, M. and Stark, C. P. (2008). The rainfall "
        "intensity-duration control of shallow landslides and debris flows: an update. "
        "Landslides 5(1), 3-17."
    ),
)


@dataclass(frozen=True)
class EventExceedance:
    """A rain record compared with an intensity-duration threshold at several durations.

    Attributes
    ----------
    threshold : str
        Name of the curve.
    end : pandas.Timestamp
        End of the rainfall (UTC).
    ratio : float
        Worst (largest) I / I_threshold(D) over the durations tested [-]; NaN when no duration
        could be tested.
    duration_h : float
        Duration [h] of the worst ratio.
    intensity_mm_h, threshold_mm_h : float
        Mean intensity over that duration and the curve's intensity there [mm/h].
    exceeded : bool
        ratio >= 1.
    durations_h, ratios : ndarray
        Every duration tested [h] and its ratio [-].
    skipped : tuple of str
        Durations not tested, and why (outside the curve, shorter than the reporting interval,
        longer than the record).
    """

    threshold: str
    end: pd.Timestamp
    ratio: float
    duration_h: float
    intensity_mm_h: float
    threshold_mm_h: float
    exceeded: bool
    durations_h: np.ndarray
    ratios: np.ndarray
    skipped: tuple[str, ...]


def worst_exceedance(
    rain: pd.Series,
    end,
    threshold: IntensityDurationThreshold,
    durations_h: Sequence[float] = DEFAULT_EVENT_DURATIONS_H,
) -> EventExceedance:
    """Worst exceedance ratio of the rain ending at ``end`` over a set of durations.

    For each duration D: I(D) = P(end - D, end] / D [mm/h], ratio = I(D) / (a D^-b). Durations
    outside the curve's range, shorter than the series' typical reporting interval (the depth
    of one report would be spread over too short a time), or reaching before the record are
    skipped and listed.

    Parameters
    ----------
    rain : pandas.Series
        Depth of rain [mm] per interval, indexed by interval end time (UTC).
    end : time
        End of the rainfall to assess (naive = UTC).
    threshold : IntensityDurationThreshold
    durations_h : sequence of float
        Durations to test [h].
    """
    rain = _checked_series(rain)
    end = _as_utc(end)
    step_h = (
        pd.Series(rain.index).diff().median() / pd.Timedelta(hours=1) if len(rain) > 1 else 0.0
    )
    start = _record_start(rain)
    # Window totals from positions in the (increasing) times: the same sums over (end - D,
    # end] as _window_total, without a boolean mask and a record-start check per duration.
    times = rain.index.as_unit("ns").asi8  # Timestamp.value is in ns whatever the unit
    depths = rain.to_numpy()
    last = np.searchsorted(times, end.value, side="right")
    tested, ratios, intensities, skipped = [], [], [], []
    for d in sorted(float(d) for d in durations_h):
        if not threshold.in_range(d):
            skipped.append(f"{d:g} h: outside {threshold.name} ({threshold.d_min_h:g}-"
                           f"{threshold.d_max_h:g} h)")
        elif d < step_h:
            skipped.append(f"{d:g} h: shorter than the reporting interval ({step_h:g} h)")
        elif end - pd.Timedelta(hours=d) < start:
            skipped.append(f"{d:g} h: longer than the rain record before {end}")
        else:
            first = np.searchsorted(times, (end - pd.Timedelta(hours=d)).value, side="right")
            intensity = float(depths[first:last].sum()) / d
            tested.append(d)
            intensities.append(intensity)
            ratios.append(intensity / threshold.intensity(d))
    tested_array, ratio_array = np.array(tested), np.array(ratios)
    if not tested:
        return EventExceedance(
            threshold.name, end, np.nan, np.nan, np.nan, np.nan, False,
            tested_array, ratio_array, tuple(skipped),
        )
    worst = int(np.argmax(ratio_array))
    return EventExceedance(
        threshold=threshold.name,
        end=end,
        ratio=float(ratio_array[worst]),
        duration_h=tested[worst],
        intensity_mm_h=intensities[worst],
        threshold_mm_h=threshold.intensity(tested[worst]),
        exceeded=bool(ratio_array[worst] >= 1.0),
        durations_h=tested_array,
        ratios=ratio_array,
        skipped=tuple(skipped),
    )


def gauge_for_section(
    section_location: Sequence[float] | None,
    gauge_locations: Mapping[str, Sequence[float]],
    named: str | None = None,
) -> str:
    """The rain gauge that serves a section: the named one, else the nearest (plan distance).

    Parameters
    ----------
    section_location : (easting, northing) [m] or None
    gauge_locations : mapping of gauge id to (easting, northing) [m]
    named : str, optional
        The gauge the site file names for the section.
    """
    if named is not None:
        if named not in gauge_locations:
            raise ConfigError(f"section names rain gauge {named!r}, which the site does not list "
                              f"(gauges: {sorted(gauge_locations)})")
        return named
    if not gauge_locations:
        raise ConfigError("the site lists no rain gauge")
    if section_location is None:
        raise ConfigError("the section has neither a named gauge nor a location to find the "
                          "nearest one")
    ids = list(gauge_locations)
    where = np.asarray([gauge_locations[i] for i in ids], dtype=float)
    distance = np.hypot(*(where - np.asarray(section_location, dtype=float)).T)
    return ids[int(np.argmin(distance))]
