"""Quality checks of readings: what is rejected, what is kept with a flag.

Rejected (never stored as readings; listed in ``rejected_rows`` with the reason):
  * instruments not in the site file;
  * times later than now + ``future_tolerance_minutes`` or before ``oldest_reading``;
  * vibrating-wire readings lacking the temperature or barometric value their calibration
    corrects for.

Kept with a quality flag (later stages use only ``quality == 'ok'``), worst first:
  * ``out_of_range``: raw value outside the instrument's ``valid_range``; for rain, a negative
    depth or tip count;
  * ``spike``: the head rose faster than the piezometer's ``max_rise_rate`` [m/h] since the
    previous reading within the valid range (falls are not flagged: the return after a spike
    is a good reading);
  * ``flat``: the raw value has not changed for ``flat_line_hours`` or longer (piezometers only;
    a dry rain gauge legitimately reports 0 for days). Readings are flagged from the moment the
    run reaches that length, so the result does not depend on how files are cut;
  * ``implausible`` (rain gauges): more rain in one reading than the world's greatest point
    rainfalls allow for the time it covers (``world_record_rainfall_mm``), or a running total
    above the world's greatest 12-month rainfall when the gauge has no ``valid_range``. Every
    gauge has this limit, whatever its configuration; such a reading never feeds a trigger;
  * ``no_baseline``: first reading of a cumulative rain gauge with nothing stored before it; its
    rain depth is unknown (NULL), not guessed.

Kept as good but marked (``gap_start``; column ``rainfall.gap_start_utc``): the depth of a
cumulative gauge's reading that follows a gap in its record. Its increment covers the whole gap
(a week missing, then 40 mm in one 15-minute step), so the depth is known but not when it fell:
``watch.rainfall`` counts it only in windows that contain the whole gap and never in an
intensity. A gap is an increment spanning more than ``GAP_FACTOR`` times the gauge's usual
reporting interval, the median spacing of its last ``USUAL_INTERVAL_READINGS`` readings before
it (``usual_intervals``). Tipping-bucket and interval gauges report the rain of their own
interval only: the rain of a gap is lost, not lumped, so their readings are never marked (a
total over a window with missing reports is a lower bound; ``slipwatch rain`` says so).

The rain of a cumulative gauge is derived from the stored record, not from the order in which
files arrived: ``rain_record`` is a function of the gauge's readings in time order, and the
ingest recomputes it from the first reading a file adds whenever that file lands inside the
stored record (see ``watch.ingest.settle_rain_record``).

The functions take one instrument's rows sorted by time plus its last stored state, and are
vectorised over the rows.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime, timedelta, timezone

import numpy as np
import pandas as pd

from watch.config import IngestSettings, Piezometer, RainGauge
from watch.conversions import piezometer_values, rain_from_cumulative, rain_values

__all__ = [
    "QUALITY_OK",
    "QUALITY_FLAGS",
    "Previous",
    "time_window_problems",
    "out_of_range",
    "spikes",
    "flat_lines",
    "assess_piezometer",
    "assess_rain_gauge",
    "RainBefore",
    "rain_record",
    "usual_intervals",
    "GAP_FACTOR",
    "USUAL_INTERVAL_READINGS",
    "world_record_rainfall_mm",
    "GREATEST_12_MONTH_RAINFALL_MM",
]

QUALITY_OK = "ok"
QUALITY_FLAGS = ("out_of_range", "spike", "flat", "implausible", "no_baseline")

#: The world's greatest observed 12-month point rainfall [mm]: 26,461 mm at Cherrapunji, India,
#: August 1860 to July 1861 (WMO World Weather and Climate Extremes Archive; value from memory).
#: A running total above it cannot be one season's rain: the default upper limit of the raw value
#: of a cumulative gauge without ``valid_range``, and of a reading whose duration is unknown.
GREATEST_12_MONTH_RAINFALL_MM = 26_461.0


#: An increment of a cumulative gauge that spans more than this many usual reporting intervals
#: follows a gap in the record. 1.5 marks every increment that covers a missing report (2
#: intervals or more) while allowing a logger clock to jitter by up to half an interval (our
#: choice, not a published value).
GAP_FACTOR = 1.5

#: Readings whose spacings give a gauge's usual reporting interval (their median). Taken from
#: the record before each reading, never after it, so the interval of a reading depends only on
#: the record up to it: the same whatever order the files arrived in. 24 spacings (6 h of a
#: 15-minute gauge) let the median ignore a gap of up to 11 missing spacings among them (our
#: choice). The site file has no reporting interval of its own, so the record is the source.
USUAL_INTERVAL_READINGS = 24


def world_record_rainfall_mm(duration_h):
    """Envelope of the world's greatest observed point rainfalls [mm] over a duration [h].

    P = 422 D^0.475   (P [mm], D [h]; 16.6 D^0.475 in inches)

    No rain gauge has recorded more than this over any duration from about a minute to two
    years, so a reading above it is a fault, not a storm.

    Parameters
    ----------
    duration_h : float or array
        Duration [h] the rain depth fell in (> 0).

    References
    ----------
    Jennings, A. H. (1950). World's greatest observed point rainfalls. Monthly Weather Review
    78(1), 4-5. The envelope as restated in WMO (2009), Manual on Estimation of Probable
    Maximum Precipitation (PMP), WMO-No. 1045, section 1.1 (coefficients from memory).
    """
    return 422.0 * np.asarray(duration_h, dtype=float) ** 0.475


@dataclass(frozen=True)
class Previous:
    """An instrument's last stored reading before the rows being checked."""

    time: np.datetime64  # [s], UTC
    raw_value: float
    flat_since: np.datetime64 | None = None  # start of the run of identical raw values
    head_time: np.datetime64 | None = None  # the last reading within its valid range ...
    head_m: float = np.nan  # ... and its head [m]


def time_window_problems(times: np.ndarray, now: datetime, settings: IngestSettings) -> tuple[np.ndarray, list[str]]:
    """(ok mask, reason per row ('' when ok)) for times outside [oldest_reading, now + tolerance]."""
    latest = np.datetime64(_naive_utc(now + timedelta(minutes=settings.future_tolerance_minutes)), "s")
    oldest = np.datetime64(_naive_utc(settings.oldest_reading), "s")
    future = times > latest
    past = times < oldest
    reasons = np.full(len(times), "", dtype=object)
    reasons[future] = (
        f"time is in the future (after {np.datetime_as_string(latest, timezone='UTC')}: now plus "
        f"{settings.future_tolerance_minutes:g} min tolerance; logger clock wrong?)"
    )
    reasons[past] = f"time is before oldest_reading {np.datetime_as_string(oldest, timezone='UTC')}"
    return ~(future | past), reasons


def _naive_utc(moment: datetime) -> datetime:
    if moment.tzinfo is None:
        raise ValueError(f"naive datetime {moment!r}: give a time zone")
    return moment.astimezone(timezone.utc).replace(tzinfo=None)


def out_of_range(values: np.ndarray, valid_range: tuple[float, float] | None) -> np.ndarray:
    """True where a value lies outside [low, high] (inclusive bounds are valid)."""
    values = np.asarray(values, dtype=float)
    if valid_range is None:
        return np.zeros(values.shape, dtype=bool)
    low, high = valid_range
    return (values < low) | (values > high)


def spikes(times: np.ndarray, head_m: np.ndarray, max_rise_rate: float | None, previous: Previous | None = None) -> np.ndarray:
    """True where the head rose faster than ``max_rise_rate`` [m/h] since the reading before.

    Parameters
    ----------
    times : datetime64[s] array, sorted
    head_m : array [m]
    max_rise_rate : float [m/h] or None (no check)
    previous : the last stored reading before ``times[0]``, or None
    """
    n = len(times)
    if max_rise_rate is None or n == 0:
        return np.zeros(n, dtype=bool)
    t = times.astype("datetime64[s]").astype(np.int64).astype(float)
    h = np.asarray(head_m, dtype=float)
    known = previous is not None and previous.head_time is not None
    t0 = float(previous.head_time.astype("datetime64[s]").astype(np.int64)) if known else np.nan
    h0 = previous.head_m if known else np.nan
    dt_h = (t - np.concatenate(([t0], t[:-1]))) / 3600.0
    rise = h - np.concatenate(([h0], h[:-1]))
    with np.errstate(divide="ignore", invalid="ignore"):
        rate = rise / dt_h
    # A repeated time (dt = 0) is a duplicate or a conflict, handled elsewhere, not a spike.
    return (dt_h > 0) & (rate > max_rise_rate)


def flat_lines(times: np.ndarray, raw_value: np.ndarray, flat_line_hours: float, previous: Previous | None = None) -> np.ndarray:
    """True where the raw value has been identical for ``flat_line_hours`` or longer.

    A run of identical values starts at its first reading; a run that began before
    ``times[0]`` (same value as ``previous``) starts at ``previous.flat_since``.
    """
    n = len(times)
    if n == 0:
        return np.zeros(0, dtype=bool)
    t = times.astype("datetime64[s]").astype(np.int64)
    v = np.asarray(raw_value, dtype=float)
    new_run = np.concatenate(([True], v[1:] != v[:-1]))
    run_id = np.cumsum(new_run) - 1
    run_start = t[new_run][run_id]
    if previous is not None and previous.flat_since is not None and v[0] == previous.raw_value:
        run_start = np.where(run_id == 0, previous.flat_since.astype("datetime64[s]").astype(np.int64), run_start)
    return (t - run_start) >= flat_line_hours * 3600.0


def assess_piezometer(rows: pd.DataFrame, piezometer: Piezometer, settings: IngestSettings,
                      previous: Previous | None = None) -> tuple[pd.DataFrame, list[tuple[int, str]]]:  # fmt: skip
    """Convert and check one piezometer's rows (sorted by time).

    Returns the kept rows with ``pore_pressure_kpa``, ``head_m`` and ``quality`` added, and
    (line, reason) for the rejected ones.
    """
    problems = []
    keep = np.ones(len(rows), dtype=bool)
    calibration = piezometer.calibration
    if piezometer.reading == "vibrating_wire":
        for needed, column, what in (
            (calibration.needs_temperature, "temperature_c", "a temperature (temperature_factor is set)"),
            (calibration.needs_barometric, "barometric_kpa", "a barometric pressure (zero_barometric is set)"),
        ):
            if needed:
                lacking = np.isnan(rows[column].to_numpy(dtype=float))
                problems += [
                    (int(line), f"vibrating-wire reading of {piezometer.id} has no {what}")
                    for line in rows["line"].to_numpy()[lacking & keep]
                ]
                keep &= ~lacking
    rows = rows[keep]
    raw = rows["raw_value"].to_numpy(dtype=float)
    pressure, head = piezometer_values(
        piezometer, raw, rows["temperature_c"].to_numpy(dtype=float), rows["barometric_kpa"].to_numpy(dtype=float)
    )
    times = rows["time_utc"].to_numpy(dtype="datetime64[s]")
    quality = np.full(len(rows), QUALITY_OK, dtype=object)
    quality[flat_lines(times, raw, settings.flat_line_hours, previous)] = "flat"
    outside = out_of_range(raw, piezometer.valid_range)
    # Rates of rise between in-range readings only: the reading after a wild value is no spike.
    inside = np.flatnonzero(~outside)
    quality[inside[spikes(times[inside], head[inside], piezometer.max_rise_rate, previous)]] = "spike"
    quality[outside] = "out_of_range"
    return rows.assign(pore_pressure_kpa=pressure, head_m=head, quality=quality), problems


@dataclass(frozen=True)
class RainBefore:
    """A gauge's stored record just before the readings being derived: the last reading that
    is a usable base of a running total (quality ok or no_baseline) and the last reading of any
    quality. Times are datetime64[s], UTC."""

    base_time: np.datetime64 | None = None
    base_raw: float = np.nan
    last_time: np.datetime64 | None = None
    last_raw: float = np.nan
    #: Times of the last USUAL_INTERVAL_READINGS + 1 readings (any quality), oldest first:
    #: the spacings that give the usual reporting interval of the first readings derived.
    recent_times: tuple = ()


def usual_intervals(times: np.ndarray, earlier: np.ndarray | None = None) -> np.ndarray:
    """The usual reporting interval [s] before each of ``times``: the median of the spacings of
    the last USUAL_INTERVAL_READINGS readings before it (``earlier`` then ``times``, sorted,
    datetime64[s]); NaN where there are none (fewer than two readings before it)."""
    times = np.asarray(times, dtype="datetime64[s]")
    earlier = np.asarray(earlier if earlier is not None else [], dtype="datetime64[s]")
    every = np.concatenate((earlier, times)).astype(np.int64).astype(float)
    spacings = pd.Series(np.diff(every))
    median = spacings.rolling(USUAL_INTERVAL_READINGS, min_periods=1).median().to_numpy()
    # Reading p of ``every`` has the spacings ending at reading p - 1: median[p - 2].
    positions = np.arange(len(earlier), len(every)) - 2
    usual = np.full(len(times), np.nan)
    known = positions >= 0
    usual[known] = median[positions[known]]
    return usual


def rain_record(times: np.ndarray, raw: np.ndarray, gauge: RainGauge,
                before: RainBefore | None = None) -> tuple[np.ndarray, np.ndarray, np.ndarray]:  # fmt: skip
    """(rain_mm, quality, gap_start) of one gauge's readings in time order, from their raw
    values alone.

    Interval and tip gauges: the depth of each reading (watch.conversions). Cumulative gauges:
    the increase of the running total since the last reading that is a usable base, or the total
    itself after a reset (watch.conversions.rain_from_cumulative). When that increase is
    implausible but the increase from the reading just before is not, the reading before was a
    level shift (a logger swapped without a reset) and becomes the base. A reading whose rain
    exceeds ``world_record_rainfall_mm`` over the time since its base is flagged
    ``implausible`` and is no base for the next one, so one wild total cannot turn the readings
    after it into a burst of rain.

    ``gap_start`` (datetime64[s], NaT for most readings): for a good reading of a cumulative
    gauge whose increment spans more than GAP_FACTOR usual intervals (``usual_intervals``),
    the time of its base: the depth fell some time between then and the reading.

    The result depends only on the readings and ``before``: the same record gives the same
    depths whatever order its files arrived in. The loop is sequential by nature (each base
    depends on the flags before it); the ingest runs it over the readings a file adds.
    """
    times = np.asarray(times, dtype="datetime64[s]")
    raw = np.asarray(raw, dtype=float)
    before = before or RainBefore()
    n = len(raw)
    quality = np.full(n, QUALITY_OK, dtype=object)
    limit = gauge.valid_range
    if limit is None and gauge.reporting == "cumulative_mm":
        limit = (0.0, GREATEST_12_MONTH_RAINFALL_MM)
    wild = out_of_range(raw, gauge.valid_range) | (raw < 0)
    quality[wild] = "out_of_range"
    implausible_total = ~wild & out_of_range(raw, limit)
    quality[implausible_total] = "implausible"
    seconds = times.astype(np.int64).astype(float)
    gap_start = np.full(n, np.datetime64("NaT"), dtype="datetime64[s]")
    if gauge.reporting != "cumulative_mm":
        # A count per interval: the rain of a gap is missing, never lumped into the next report.
        rain = rain_values(gauge, raw)
        previous = np.concatenate(([_seconds(before.last_time)], seconds[:-1])) if n else seconds
        for i in np.flatnonzero(quality == QUALITY_OK):
            if not _plausible(rain[i], previous[i], seconds[i]):
                quality[i] = "implausible"
        return rain, quality, gap_start

    rain = np.full(n, np.nan)
    usual = usual_intervals(times, np.asarray(before.recent_times, dtype="datetime64[s]"))
    base_t, base_c = _seconds(before.base_time), before.base_raw
    last_t, last_c = _seconds(before.last_time), before.last_raw
    for i in range(n):
        t, c = seconds[i], raw[i]
        if quality[i] == QUALITY_OK:
            if np.isnan(base_c):
                quality[i] = "no_baseline"
                base_t, base_c = t, c
            else:
                depth = float(rain_from_cumulative([c], base_c)[0])
                if _plausible(depth, base_t, t):
                    since = base_t
                    rain[i], base_t, base_c = depth, t, c
                else:
                    shifted = float(rain_from_cumulative([c], last_c)[0]) if np.isfinite(last_c) else np.nan
                    since = last_t
                    if last_t != base_t and np.isfinite(shifted) and _plausible(shifted, last_t, t):
                        rain[i], base_t, base_c = shifted, t, c
                    else:
                        rain[i], quality[i] = depth, "implausible"
                if quality[i] == QUALITY_OK and t - since > GAP_FACTOR * usual[i]:
                    gap_start[i] = np.datetime64(int(since), "s")
        elif not np.isnan(base_c):
            rain[i] = float(rain_from_cumulative([c], base_c)[0])
        last_t, last_c = t, c
    return rain, quality, gap_start


def _seconds(time: np.datetime64 | None) -> float:
    """Seconds since 1970 of a datetime64 (NaN for None)."""
    return np.nan if time is None else float(np.datetime64(time, "s").astype(np.int64))


def _plausible(depth_mm: float, start_s: float, end_s: float) -> bool:
    """Whether ``depth_mm`` of rain can have fallen from ``start_s`` to ``end_s`` [s]: within
    the world-record envelope, or within the greatest 12-month rainfall when the duration is
    unknown (no reading before, or the same time)."""
    duration_h = (end_s - start_s) / 3600.0
    if not np.isfinite(duration_h) or duration_h <= 0:
        return depth_mm <= GREATEST_12_MONTH_RAINFALL_MM
    return depth_mm <= float(world_record_rainfall_mm(duration_h))


def assess_rain_gauge(rows: pd.DataFrame, gauge: RainGauge, before: RainBefore | None = None) -> pd.DataFrame:
    """Convert and check one rain gauge's rows (sorted by time); adds ``rain_mm``, ``quality``
    and ``gap_start`` (see ``rain_record``)."""
    rain, quality, gap_start = rain_record(rows["time_utc"].to_numpy(dtype="datetime64[s]"),
                                           rows["raw_value"].to_numpy(dtype=float), gauge, before)  # fmt: skip
    return rows.assign(rain_mm=rain, quality=quality, gap_start=gap_start)
