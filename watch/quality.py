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
  * ``no_baseline``: first reading of a cumulative rain gauge with nothing stored before it; its
    rain depth is unknown (NULL), not guessed.

The functions take one instrument's rows sorted by time plus its last stored state, and are
vectorised over the rows.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime, timedelta, timezone

import numpy as np
import pandas as pd

from watch.config import IngestSettings, Piezometer, RainGauge
from watch.conversions import piezometer_values, rain_values

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
]

QUALITY_OK = "ok"
QUALITY_FLAGS = ("out_of_range", "spike", "flat", "no_baseline")


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


def assess_rain_gauge(rows: pd.DataFrame, gauge: RainGauge, previous_total: float | None = None) -> pd.DataFrame:
    """Convert and check one rain gauge's rows (sorted by time); adds ``rain_mm`` and ``quality``."""
    raw = rows["raw_value"].to_numpy(dtype=float)
    rain = rain_values(gauge, raw, np.nan if previous_total is None else previous_total)
    quality = np.full(len(rows), QUALITY_OK, dtype=object)
    if gauge.reporting == "cumulative_mm" and previous_total is None and len(rows):
        quality[0] = "no_baseline"
    bad = out_of_range(raw, gauge.valid_range) | (raw < 0)
    quality[bad] = "out_of_range"
    return rows.assign(rain_mm=rain, quality=quality)
