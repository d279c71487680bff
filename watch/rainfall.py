"""Rainfall numerics: moving-window totals, intensity, antecedent rainfall, rain events and
intensity-duration trigger curves.

Pure functions on a rain series: a pandas Series of ``rain_mm`` [mm] indexed by the UTC time at
the END of each reporting interval (the depth fell in the interval ending at that time), time
increasing, gaps allowed. Windows are time-based: the total over a window of length w ending at
t is the sum of the depths reported at times in (t - w, t]. Naive times are taken as UTC (the
store's convention).

One partial-window rule, for every window total of the service (triggers, forecasts, cycles;
all go through :func:`window_totals`): the record starts at its first report time minus its
typical reporting interval (the first depth fell in the interval ending then); a window that
starts before the record does has no total (NaN), never a partial sum that would understate
the rain.

Missing data must be handled by the caller: a series holding NaN is refused, because a gauge
that reported nothing and a gauge that was down look the same in a sum.

Rain after a gap: a cumulative gauge's first report after a gap in its record carries the rain
of the whole gap (``watch.quality``, ``gap_start``). The functions that take ``gap_start`` (a
Series on the same times as the rain: the start of the time each report's depth covers when it
follows a gap, NaT otherwise) count such a depth only in a window that contains the whole
(gap start, report time]; a window that overlaps only part of it has no total (NaN: when the
rain fell inside the gap is unknown), and a rain event holding such a depth is not compared
with an intensity-duration curve.
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
    return rain.index[0] - _interval(rain)


def _interval(rain: pd.Series) -> pd.Timedelta:
    """The typical reporting interval (median spacing); zero for a single report."""
    if len(rain) < 2:
        return pd.Timedelta(0)
    return pd.Series(rain.index).diff().median()


def window_totals(rain: pd.Series, ends, duration_h: float, gap_start: pd.Series | None = None) -> np.ndarray:
    """Rain totals [mm] over the ``duration_h`` [h] ending at each time of ``ends``.

    total(t) = sum of rain_mm at times in (t - D, t]

    NaN where the window starts before the record does (the module's partial-window rule), or
    where it overlaps only part of the time a report after a gap covers (the module's rule of
    rain after a gap): this is the one window-total function of the service.

    Parameters
    ----------
    rain : pandas.Series
        Depth of rain [mm] per interval, indexed by interval end time (UTC).
    ends : time or sequence of times
        Window ends (naive = UTC).
    duration_h : float
        Window length D [h], > 0.
    gap_start : pandas.Series, optional
        Per report, the start of the time its depth covers when it follows a gap in the
        record (NaT otherwise), on the times of ``rain``.

    Returns
    -------
    ndarray
        One total per end [mm].
    """
    rain = _checked_series(rain)
    return _totals(rain, ends, duration_h, _gap_spans(rain, gap_start))


def _gap_spans(rain: pd.Series, gap_start: pd.Series | None) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(start [ns], end [ns], depth [mm]) of the reports of a checked series that follow a gap."""
    if gap_start is None:
        return np.zeros(0, np.int64), np.zeros(0, np.int64), np.zeros(0)
    if len(gap_start) != len(rain):
        raise ModelError(f"gap_start has {len(gap_start)} values for {len(rain)} rain reports")
    starts = pd.DatetimeIndex(pd.to_datetime(gap_start.to_numpy(), utc=True))
    marked = ~starts.isna()
    ends = rain.index.as_unit("ns").asi8[marked]
    begins = starts[marked].as_unit("ns").asi8
    if (begins >= ends).any():
        raise ModelError("a gap start is not before the time of its report")
    return begins, ends, rain.to_numpy()[marked]


def _totals(rain: pd.Series, ends, duration_h: float,
            gaps: tuple[np.ndarray, np.ndarray, np.ndarray] | None = None) -> np.ndarray:  # fmt: skip
    """:func:`window_totals` of a checked series: cumulative sums at the window ends' positions
    in the (increasing) report times."""
    if not (np.isfinite(duration_h) and duration_h > 0):
        raise ConfigError(f"duration must be a positive number of hours, got {duration_h}")
    stamps = pd.DatetimeIndex(pd.to_datetime(np.atleast_1d(ends), utc=True))
    length = pd.Timedelta(hours=duration_h)
    times = rain.index.as_unit("ns").asi8  # Timestamp.value is in ns whatever the unit
    cumulative = np.r_[0.0, np.cumsum(rain.to_numpy())]
    last = np.searchsorted(times, stamps.as_unit("ns").asi8, side="right")
    first = np.searchsorted(times, (stamps - length).as_unit("ns").asi8, side="right")
    totals = np.maximum(cumulative[last] - cumulative[first], 0.0)  # no rounding below 0
    unknown = stamps - length < _record_start(rain)
    window_end = stamps.as_unit("ns").asi8
    window_start = (stamps - length).as_unit("ns").asi8
    for begin, end, _ in zip(*(gaps if gaps is not None else ())):
        # (window_start, window_end] overlaps (begin, end] without containing it.
        overlaps = (begin < window_end) & (end > window_start)
        unknown |= overlaps & ~((begin >= window_start) & (end <= window_end))
    return np.where(unknown, np.nan, totals)


def moving_totals(
    rain: pd.Series,
    windows: Mapping[str, pd.Timedelta] | None = None,
    gap_start: pd.Series | None = None,
) -> pd.DataFrame:
    """Rain totals over moving time windows ending at each reading time (:func:`window_totals`).

    Parameters
    ----------
    rain : pandas.Series
        Depth of rain [mm] per interval, indexed by interval end time (UTC).
    windows : mapping of str to Timedelta, optional
        Column name -> window length; default :data:`DEFAULT_WINDOWS` (1 h, 24 h, 3 d, 7 d,
        30 d).
    gap_start : pandas.Series, optional
        As for :func:`window_totals`.

    Returns
    -------
    pandas.DataFrame
        One column per window [mm], same index as ``rain``; NaN where the window starts
        before the record (the module's partial-window rule) or cuts a gap.
    """
    rain = _checked_series(rain)
    gaps = _gap_spans(rain, gap_start)
    windows = DEFAULT_WINDOWS if windows is None else windows
    columns = {}
    for name, length in windows.items():
        hours = pd.Timedelta(length) / pd.Timedelta(hours=1)
        if not hours > 0:
            raise ConfigError(f"window {name} must be longer than zero, got {length}")
        columns[name] = _totals(rain, rain.index, hours, gaps)
    return pd.DataFrame(columns, index=rain.index)


def rain_total(rain: pd.Series, end, duration_h: float, gap_start: pd.Series | None = None) -> float:
    """Rain [mm] that fell in the ``duration_h`` [h] ending at ``end``: sum over (end - D, end];
    NaN when the window starts before the record does or cuts a gap (:func:`window_totals`)."""
    return float(window_totals(rain, end, duration_h, gap_start)[0])


def mean_intensity(rain: pd.Series, end, duration_h: float, gap_start: pd.Series | None = None) -> float:
    """Mean rainfall intensity I = P / D [mm/h] over the ``duration_h`` [h] ending at ``end``,
    with P the total [mm] over (end - D, end] (NaN for a partial window or one that cuts a
    gap; a window that holds a whole gap gives the mean over the window, as its total is
    known)."""
    return rain_total(rain, end, duration_h, gap_start) / duration_h


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
#: I = 14.82 D^-0.39, I [mm/h], D [h] the duration of the rain event, for 10 minutes < D < 10
#: days (the range of the events Caine compiled; from memory).
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

#: Guzzetti et al. (2008), global minimum threshold, I = 2.20 D^-0.44, I [mm/h], D [h] the
#: duration of the rain event; range 0.1 h < D < 1000 h (range from memory: check against the
#: paper before relying on its ends).
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


#: Dry spell [h] that separates two rain events: 48 h, the separation Brunetti et al. (2010) and
#: Peruccacci et al. (2012) used for the warm season when they reconstructed the rain events
#: behind intensity-duration thresholds (they used 96 h in the cold season; both values from
#: memory: check the papers before relying on them). Caine (1980) and Guzzetti et al. (2008)
#: took (D, I) as the duration and mean intensity of the whole rain event that triggered each
#: landslide; neither fixes a dry spell, which the compiled studies chose for themselves.
DEFAULT_DRY_GAP_H = 48.0

#: References of the event definition, for reports.
EVENT_REFERENCES = (
    "Brunetti, M. T., Peruccacci, S., Rossi, M., Luciani, S., Valigi, D. and Guzzetti, F. "
    "(2010). Rainfall thresholds for the possible occurrence of landslides in Italy. Natural "
    "Hazards and Earth System Sciences 10, 447-458.",
    "Peruccacci, S., Brunetti, M. T., Luciani, S., Vennari, C. and Guzzetti, F. (2012). "
    "Lithological and seasonal control on rainfall thresholds for the possible initiation of "
    "landslides in central Italy. Geomorphology 139-140, 79-90.",
)


@dataclass(frozen=True)
class RainEvent:
    """A rain event: rain separated from the rain before and after it by a dry spell of at
    least the dry gap (:func:`rain_events`).

    Attributes
    ----------
    start : pandas.Timestamp
        Start of its first wet interval (the first wet report time minus the reporting
        interval) (UTC).
    end : pandas.Timestamp
        Time of its last wet report (UTC).
    total_mm : float
        Rain of the event [mm], dry intervals inside it included.
    duration_h : float
        D = end - start [h].
    complete : bool
        The record reaches back a whole dry gap before the event, so it cannot have started
        earlier; when False, D and the total are lower bounds.
    """

    start: pd.Timestamp
    end: pd.Timestamp
    total_mm: float
    duration_h: float
    complete: bool

    @property
    def mean_intensity_mm_h(self) -> float:
        """I = total / D [mm/h]."""
        return self.total_mm / self.duration_h


def rain_events(rain: pd.Series, dry_gap_h: float = DEFAULT_DRY_GAP_H) -> tuple[RainEvent, ...]:
    """The rain events of a record: wet reports closer together than the dry gap form one event.

    Two wet reports (depth > 0) belong to one event when the dry spell between them (the time
    from the end of the earlier one to the start of the later one's interval) is shorter than
    ``dry_gap_h``; the event runs from the start of its first wet interval to its last wet
    report, dry intervals inside it included (Brunetti et al. 2010; :data:`DEFAULT_DRY_GAP_H`).
    A gap in the reports counts as dry: the caller refuses a gauge that stopped reporting.

    Parameters
    ----------
    rain : pandas.Series
        Depth of rain [mm] per interval, indexed by interval end time (UTC).
    dry_gap_h : float
        Shortest dry spell that ends an event [h], > 0.

    Returns
    -------
    tuple of RainEvent
        In time order; empty when no rain fell.
    """
    if not (np.isfinite(dry_gap_h) and dry_gap_h > 0):
        raise ConfigError(f"dry gap must be a positive number of hours, got {dry_gap_h}")
    rain = _checked_series(rain)
    interval = _interval(rain)
    wet = rain[rain > 0]
    if wet.empty:
        return ()
    gap = pd.Timedelta(hours=dry_gap_h)
    starts_of_wet = wet.index - interval
    # A new event where the dry spell before a wet report reaches the gap.
    dry_before = starts_of_wet[1:] - wet.index[:-1]
    breaks = np.r_[0, np.flatnonzero(dry_before >= gap) + 1, len(wet)]
    record_start = _record_start(rain)
    events = []
    for first, last in zip(breaks[:-1], breaks[1:]):
        start, end = starts_of_wet[first], wet.index[last - 1]
        events.append(RainEvent(
            start=start,
            end=end,
            total_mm=float(rain[(rain.index >= wet.index[first]) & (rain.index <= end)].sum()),
            duration_h=float((end - start) / pd.Timedelta(hours=1)),
            complete=bool(start - gap >= record_start),
        ))  # fmt: skip
    return tuple(events)


def current_event(rain: pd.Series, at, dry_gap_h: float = DEFAULT_DRY_GAP_H) -> RainEvent | None:
    """The rain event under way at ``at``: the event of the reports up to ``at`` whose last
    wet report is less than ``dry_gap_h`` before it; None when the last rain is older (the
    event is over) or none fell."""
    at = _as_utc(at)
    rain = _checked_series(rain)
    events = rain_events(rain[rain.index <= at], dry_gap_h) if (rain.index <= at).any() else ()
    if not events or at - events[-1].end >= pd.Timedelta(hours=dry_gap_h):
        return None
    return events[-1]


@dataclass(frozen=True)
class EventExceedance:
    """The rain event under way at a time compared with an intensity-duration threshold.

    Attributes
    ----------
    threshold : str
        Name of the curve.
    at : pandas.Timestamp
        Time of the comparison (UTC).
    event : RainEvent or None
        The event under way (None: no rain within the dry gap before ``at``).
    ratio : float
        I / I_threshold(D) of the event [-]; 0 with no event under way; NaN when the event
        cannot be compared (``testable`` False).
    duration_h, intensity_mm_h : float
        D [h] and mean intensity I [mm/h] of the event (NaN without one).
    threshold_mm_h : float
        The curve's intensity at D [mm/h] (NaN when not testable or no event).
    exceeded : bool
        ratio >= 1.
    testable : bool
        False when the event's duration lies outside the curve's range or its start lies
        before the record (its D and total are then only lower bounds).
    reason : str
        Why not testable ("" otherwise).
    """

    threshold: str
    at: pd.Timestamp
    event: RainEvent | None
    ratio: float
    duration_h: float
    intensity_mm_h: float
    threshold_mm_h: float
    exceeded: bool
    testable: bool
    reason: str = ""


def event_exceedance(
    rain: pd.Series,
    at,
    threshold: IntensityDurationThreshold,
    dry_gap_h: float = DEFAULT_DRY_GAP_H,
    gap_start: pd.Series | None = None,
) -> EventExceedance:
    """The rain event under way at ``at`` against an intensity-duration threshold.

    As the thresholds were drawn (Caine 1980; Guzzetti et al. 2008), the comparison is of the
    rain event's duration D and mean intensity I = E / D: ratio = I / (a D^-b). The event is
    :func:`current_event` (separated by a dry spell of ``dry_gap_h``); it is compared only when
    D lies in the curve's range of durations (outside it the curve was not drawn and is not
    extrapolated) and the record reaches back a dry gap before the event.

    Parameters
    ----------
    rain : pandas.Series
        Depth of rain [mm] per interval, indexed by interval end time (UTC).
    at : time
        Time of the comparison (naive = UTC).
    threshold : IntensityDurationThreshold
    dry_gap_h : float
        Dry spell that separates events [h] (default :data:`DEFAULT_DRY_GAP_H`).
    gap_start : pandas.Series, optional
        As for :func:`window_totals`: an event holding rain reported after a gap in the
        record is not compared (when its rain fell, hence D and I, is unknown).
    """
    at = _as_utc(at)
    event = current_event(rain, at, dry_gap_h)
    if event is None:
        return EventExceedance(threshold.name, at, None, 0.0, np.nan, np.nan, np.nan, False, True)
    d, intensity = event.duration_h, event.mean_intensity_mm_h
    reason = ""
    if not d > 0:
        reason = "the record has one report: no reporting interval gives the event a duration"
    elif not threshold.in_range(d):
        reason = (f"the rain event of {d:g} h lies outside the durations of {threshold.name} "
                  f"({threshold.d_min_h:g} to {threshold.d_max_h:g} h)")
    elif not event.complete:
        reason = (f"the rain record does not reach {dry_gap_h:g} h before the event that "
                  f"started by {event.start.isoformat()}: its duration and intensity are unknown")
    else:
        begins, ends, depths = _gap_spans(_checked_series(rain), gap_start)
        inside = ((ends > event.start.value) & (ends <= event.end.value) & (depths > 0)
                  if begins.size else np.zeros(0, dtype=bool))  # fmt: skip
        if inside.any():
            k = int(np.flatnonzero(inside)[0])
            reason = (f"the event holds {depths[k]:g} mm reported at {pd.Timestamp(ends[k], tz='UTC').isoformat()} "
                      f"after a gap in the record since {pd.Timestamp(begins[k], tz='UTC').isoformat()}: "
                      "when it fell, hence the event's duration and intensity, is unknown")
    if reason:
        return EventExceedance(threshold.name, at, event, np.nan, d, intensity, np.nan, False,
                               False, reason)  # fmt: skip
    limit = threshold.intensity(d)
    ratio = intensity / limit
    return EventExceedance(threshold.name, at, event, float(ratio), d, intensity, float(limit),
                           bool(ratio >= 1.0), True)  # fmt: skip


def rain_record_reach(
    thresholds: Sequence[IntensityDurationThreshold] = (),
    dry_gap_h: float = DEFAULT_DRY_GAP_H,
    window_hours: Sequence[float] = (),
) -> pd.Timedelta:
    """How far back a rain record must reach to give the window totals of ``window_hours``
    [h] and to place the start of any event the curves ``thresholds`` can be compared with
    (their longest duration plus the dry gap before it), plus one day for the first report's
    interval."""
    hours = [0.0] + [float(h) for h in window_hours]
    hours += [t.d_max_h + float(dry_gap_h) for t in thresholds]
    return pd.Timedelta(hours=max(hours)) + pd.Timedelta(days=1)


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
