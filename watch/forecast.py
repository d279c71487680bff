"""Rainfall at a gauge, rainfall-response models of the piezometers, storm forecasts and the rain
that takes a slope to a trigger level: the service side of :mod:`watch.rainfall` and
:mod:`watch.response`.

* :func:`rainfall_state`: moving totals, intensity, antecedent rainfall and the rain event
  under way against the intensity-duration curves, of one gauge at one time, from the store.
* :func:`calibrate_response_models`: fit each piezometer's rainfall-to-head model on its stored
  history (heads and rain resampled to a regular grid) and store the fit. Models are stored,
  not recomputed on demand: a calibration reads weeks of readings and runs a least-squares fit
  per lag, the assessment cycle needs the model at every run for the fallback, and a stored
  model says exactly which parameters (and which fit) a forecast or an estimated water line
  rested on.
* :func:`model_head_estimator`: heads the stored models estimate for instruments whose readings
  are unusable (the second fallback of a water line).
* :func:`forecast_storm`: the heads, water lines and FoS a uniform storm would bring to a
  section, from the state at a time, with the peak and when it comes.
* :func:`rain_to_trigger`: the smallest storm depth over each duration that takes the FoS to
  each trigger level, by root finding on the forecast.

State of a model at a time: the reservoir content is taken from the instrument's last good
reading at or before that time (s = (h - h0) / G, floored at zero with the base lowered to a
head below h0: :meth:`watch.response.ResponseModel.state_at_head`; so a forecast starts from the
measured head, not from the model's own simulation, and never rises without rain), and the rain
since that reading is run through the model.
Rain and heads are resolved to the model's time step.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field, replace
from datetime import datetime

import numpy as np
import pandas as pd

from solver.errors import SearchError
from solver.search import RankedSurface, SearchResult, warm_reevaluate
from solver.section import Section
from watch.analysis import analyse
from watch.config import Piezometer, SiteConfig
from watch.errors import ConfigError, ModelError
from watch.groundwater import WaterLineEstimate
from watch.rainfall import (
    CAINE_1980,
    DEFAULT_DRY_GAP_H,
    DEFAULT_WINDOWS,
    GUZZETTI_2008_GLOBAL,
    EventExceedance,
    IntensityDurationThreshold,
    event_exceedance,
    gauge_for_section,
    rain_record_reach,
    window_totals,
)
from watch.response import (
    DEFAULT_MIN_NSE,
    MIN_OBSERVATIONS,
    ResponseFit,
    ResponseModel,
    ResponseState,
    fit,
    rain_to_thresholds,
)
from watch.store import Store, utc_text
from watch.waterlines import ModelHeads, load_readings, section_with_lines, water_lines_through
from watch.workspace import Workspace

__all__ = [
    "RainfallState",
    "rainfall_state",
    "rainfall_state_of",
    "Calibration",
    "calibrate_response_models",
    "model_head_estimator",
    "InstrumentForecast",
    "SectionForecast",
    "forecast_storm",
    "TriggerRain",
    "SectionRainToTrigger",
    "rain_to_trigger",
    "ModelStart",
    "model_start",
    "gauge_of",
    "fos_trigger_levels",
    "ForecastReport",
    "forecast_site",
    "RainToTriggerReport",
    "rain_to_trigger_site",
    "calibrate_site",
]

#: Default intensity-duration curves a gauge is compared with.
DEFAULT_THRESHOLDS = (CAINE_1980, GUZZETTI_2008_GLOBAL)

#: Length of the stored history a response model is calibrated on [days]. Long enough to hold
#: several storms and recessions of the wet season; short enough that a drift of the base level
#: over the year does not dominate the fit (our choice, not a published rule).
DEFAULT_CALIBRATION_DAYS = 90.0

#: Time step of the calibration grid [h].
DEFAULT_STEP_H = 1.0

#: Largest share of grid steps with no good rain report a calibration or an estimate accepts
#: (they count as dry). Our choice: beyond it a missing storm could be taken for a dry spell.
MAX_MISSING_RAIN_FRACTION = 0.05

#: Longest time [h] a rainfall-model estimate may carry a head forward from the instrument's
#: last good reading (our choice: a month of wet-season rain already strains a linear model).
MAX_ESTIMATE_HOURS = 30 * 24.0

#: Largest storm depth [mm] rain-to-trigger considers by default: a generous ceiling, not a
#: statistic of any climate; "none up to" this depth is what duty staff read.
DEFAULT_MAX_STORM_MM = 250.0

#: Hours a forecast looks beyond the time the last instrument's peak can come, to show the
#: recession.
RECESSION_VIEW_H = 24.0

#: FoS by which a full search at the found depth may undercut the warm re-evaluation before the
#: root finding is repeated with the new critical surfaces [-] (the depth-to-FoS curve is only
#: as good as the cached surfaces).
SEARCH_CHECK_TOLERANCE = 0.005

#: Full searches rain-to-trigger may run to check the warm re-evaluations of one duration.
MAX_SEARCH_ROUNDS = 3


# --------------------------------------------------------------------------------------------
# Rain from the store
# --------------------------------------------------------------------------------------------


def _utc(time) -> pd.Timestamp:
    stamp = pd.Timestamp(time)
    return stamp.tz_localize("UTC") if stamp.tzinfo is None else stamp.tz_convert("UTC")


def _text(time) -> str:
    return utc_text(_utc(time).to_pydatetime())


def _rain_rows(store: Store, gauge_id: str, start, end) -> pd.DataFrame:
    """Stored rain of a gauge with ``start <= time_utc <= end``: time_utc, rain_mm, ok,
    gap_start (NaT unless the report follows a gap in the record: watch.quality) and on_grid
    (ok, and not after a gap: a depth that can be placed in one step of a time grid)."""
    rows = store.readings(gauge_id, _text(start), _text(end))
    if not rows:
        return pd.DataFrame({"time_utc": pd.to_datetime([], utc=True), "rain_mm": pd.Series(dtype=float),
                             "ok": pd.Series(dtype=bool), "gap_start": pd.to_datetime([], utc=True),
                             "on_grid": pd.Series(dtype=bool)})  # fmt: skip
    frame = pd.DataFrame(rows)
    frame["time_utc"] = pd.to_datetime(frame["time_utc"], utc=True)
    frame["rain_mm"] = pd.to_numeric(frame["rain_mm"], errors="coerce").astype(float)
    frame["ok"] = (frame["quality"] == "ok") & frame["rain_mm"].notna()
    frame["gap_start"] = pd.to_datetime(frame["gap_start_utc"], utc=True)
    frame["on_grid"] = frame["ok"] & frame["gap_start"].isna()
    return frame[["time_utc", "rain_mm", "ok", "gap_start", "on_grid"]]


def _binned(times: pd.Series, values: np.ndarray, ends: pd.DatetimeIndex, step: pd.Timedelta,
            how: str) -> np.ndarray:
    """Values per step (end - step, end] of the grid ``ends``: "sum" (0 where none), "count",
    or "last" (NaN where none). Values outside the grid are left out."""
    t = times.to_numpy(dtype="datetime64[ns]")
    e = ends.to_numpy(dtype="datetime64[ns]")
    index = np.searchsorted(e, t, side="left")
    inside = (index < len(e)) & (t > e[0] - step.to_numpy())
    index, values = index[inside], np.asarray(values, dtype=float)[inside]
    if how == "sum":
        return np.bincount(index, weights=values, minlength=len(e))
    if how == "count":
        return np.bincount(index, minlength=len(e)).astype(float)
    last = np.full(len(e), np.nan)
    if index.size == 0:
        return last
    order = np.argsort(t[inside], kind="stable")
    index, values = index[order], values[order]  # in time order, so the bins never decrease
    final = np.r_[index[1:] != index[:-1], True]  # the last reading of each step
    last[index[final]] = values[final]
    return last


def _rain_grid(store: Store, gauge_id: str, ends: pd.DatetimeIndex, step: pd.Timedelta):
    """(rain per step [mm], whether each step has a good report, start of the gauge's record
    within the grid or None) on the grid ``ends``. The record starts at the gauge's first
    report of any quality minus its reporting interval (the first depth fell in the interval
    ending then; watch.rainfall's rule)."""
    rows = _rain_rows(store, gauge_id, ends[0] - step, ends[-1])
    # Rain reported after a gap fell some time in the gap: no step holds it (a missing step).
    good = rows[rows["on_grid"]]
    rain = _binned(good["time_utc"], good["rain_mm"].to_numpy(), ends, step, "sum")
    reported = _binned(good["time_utc"], np.ones(len(good)), ends, step, "count") > 0
    if rows.empty:
        return rain, reported, None
    times = pd.DatetimeIndex(rows["time_utc"])
    interval = pd.Series(times).diff().median() if len(times) > 1 else pd.Timedelta(0)
    return rain, reported, times[0] - interval


# --------------------------------------------------------------------------------------------
# Rainfall state of a gauge
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class RainfallState:
    """Rain at one gauge up to one time, for rainfall triggers.

    Attributes
    ----------
    gauge_id : str
    at : pandas.Timestamp
    totals_mm : dict of str to float
        Moving totals over (at - w, at] [mm]: ``rain_1h_mm``, ``rain_24h_mm``,
        ``rain_3d_mm``, ``rain_7d_mm``, ``rain_30d_mm`` (the last three are the antecedent
        rainfall). NaN when the record does not reach back over the whole window.
    intensity_mm_h : dict of str to float
        Mean intensity over the last 1 h and 24 h [mm/h].
    missing_reports : dict of str to int
        Per window, the reports the gauge should have sent (at its usual interval) that are
        absent or not of good quality; a total with missing reports is a lower bound.
    exceedances : tuple of EventExceedance
        The rain event under way at ``at`` against each intensity-duration curve.
    worst_ratio : float
        Largest I / I_threshold(D) of the event over the curves [-] (NaN when there is no
        event under way or no curve could be compared); 1 or more means a curve is reached.
    worst_threshold : str
        The curve of the worst ratio ("" when none).
    worst_duration_h : float
        The event's duration D [h].
    last_report_utc : pandas.Timestamp or None
        Latest good report at or before ``at``.
    age_hours : float
        Hours from that report to ``at`` (NaN when none).
    notes : tuple of str
    dry_gap_h : float
        Dry spell that separates rain events [h].
    reports_after_gap : tuple of dict
        Reports of the record read that follow a gap (``time_utc``, ``gap_start_utc``,
        ``rain_mm``): their depth fell some time in the gap (watch.quality).
    """

    gauge_id: str
    at: pd.Timestamp
    totals_mm: dict[str, float]
    intensity_mm_h: dict[str, float]
    missing_reports: dict[str, int]
    exceedances: tuple[EventExceedance, ...]
    worst_ratio: float
    worst_threshold: str
    worst_duration_h: float
    last_report_utc: pd.Timestamp | None
    age_hours: float
    notes: tuple[str, ...] = ()
    dry_gap_h: float = DEFAULT_DRY_GAP_H
    reports_after_gap: tuple[dict, ...] = ()

    def describe(self) -> str:
        """What duty staff read."""
        def mm(v):
            return "n/a" if not np.isfinite(v) else f"{v:.1f} mm"

        t = self.totals_mm
        lines = [
            f"Rain at {self.gauge_id} up to {self.at:%Y-%m-%d %H:%M} UTC: "
            f"1 h {mm(t['rain_1h_mm'])}, 24 h {mm(t['rain_24h_mm'])}, "
            f"3 d {mm(t['rain_3d_mm'])}, 7 d {mm(t['rain_7d_mm'])}, 30 d {mm(t['rain_30d_mm'])}",
            "  last report "
            + ("none" if self.last_report_utc is None
               else f"{self.last_report_utc:%Y-%m-%d %H:%M} UTC ({self.age_hours:.1f} h old)"),
        ]  # fmt: skip
        event = next((e.event for e in self.exceedances if e.event is not None), None)
        if event is None:
            lines.append(f"  no rain event under way (none in the last {self.dry_gap_h:g} h)")
        else:
            lines.append(f"  rain event since {event.start:%Y-%m-%d %H:%M} UTC: "
                         f"{event.total_mm:.1f} mm in {event.duration_h:g} h "
                         f"({event.mean_intensity_mm_h:.2f} mm/h; events end after "
                         f"{self.dry_gap_h:g} h dry)")
        for e in self.exceedances:
            if e.event is None:
                continue
            if e.testable:
                lines.append(f"  {e.threshold}: {e.ratio:.2f} x the curve at {e.duration_h:g} h "
                             f"({e.intensity_mm_h:.2f} mm/h against {e.threshold_mm_h:.2f} "
                             f"mm/h){' EXCEEDED' if e.exceeded else ''}")
            else:
                lines.append(f"  {e.threshold}: not compared ({e.reason})")
        lines += [f"  note: {n}" for n in self.notes]
        return "\n".join(lines)

    def to_dict(self) -> dict:
        def number(v):
            return None if v is None or not np.isfinite(v) else float(v)

        event = next((e.event for e in self.exceedances if e.event is not None), None)
        return {
            "gauge_id": self.gauge_id,
            "time_utc": _text(self.at),
            "totals_mm": {k: number(v) for k, v in self.totals_mm.items()},
            "intensity_mm_h": {k: number(v) for k, v in self.intensity_mm_h.items()},
            "missing_reports": self.missing_reports,
            "worst_ratio": number(self.worst_ratio),
            "worst_threshold": self.worst_threshold,
            "worst_duration_h": number(self.worst_duration_h),
            "dry_gap_h": self.dry_gap_h,
            "event": None if event is None else {
                "start_utc": _text(event.start), "end_utc": _text(event.end),
                "total_mm": event.total_mm, "duration_h": event.duration_h,
                "mean_intensity_mm_h": event.mean_intensity_mm_h, "complete": event.complete,
            },
            "exceedances": [
                {"threshold": e.threshold, "ratio": number(e.ratio),
                 "duration_h": number(e.duration_h), "intensity_mm_h": number(e.intensity_mm_h),
                 "threshold_mm_h": number(e.threshold_mm_h), "exceeded": e.exceeded,
                 "testable": e.testable, "reason": e.reason}  # fmt: skip
                for e in self.exceedances
            ],
            "last_report_utc": None if self.last_report_utc is None else _text(self.last_report_utc),
            "age_hours": number(self.age_hours),
            "notes": list(self.notes),
            "reports_after_gap": list(self.reports_after_gap),
        }


def rainfall_state(
    store: Store,
    gauge_id: str,
    at,
    thresholds: Sequence[IntensityDurationThreshold] = DEFAULT_THRESHOLDS,
    dry_gap_h: float = DEFAULT_DRY_GAP_H,
) -> RainfallState:
    """Rain totals, intensity, antecedent rainfall and I-D exceedance of a gauge at ``at``.

    Totals over (at - w, at] for the windows of :data:`watch.rainfall.DEFAULT_WINDOWS`, from the
    reports of good quality (:func:`watch.rainfall.window_totals`, NaN for a window the record
    does not cover); the rain event under way at ``at`` (separated by a dry spell of
    ``dry_gap_h``) against each curve of ``thresholds`` (default Caine 1980 and Guzzetti et
    al. 2008 global), :func:`watch.rainfall.event_exceedance`.

    Parameters
    ----------
    store : Store
    gauge_id : str
    at : time
        Naive = UTC.
    thresholds : sequence of IntensityDurationThreshold
    dry_gap_h : float
        Dry spell that separates rain events [h].

    Raises
    ------
    ModelError
        The gauge has no good report at or before ``at`` in the record read (the longest
        window, or the longest curve duration plus the dry gap).
    """
    at = _utc(at)
    reach = rain_record_reach(thresholds, dry_gap_h,
                              [w / pd.Timedelta(hours=1) for w in DEFAULT_WINDOWS.values()])
    rows = _rain_rows(store, gauge_id, at - reach, at)
    good = rows[rows["ok"]]
    if good.empty:
        raise ModelError(
            f"rain gauge {gauge_id} has no good report in the {reach / pd.Timedelta(days=1):g} "
            f"days before {_text(at)}; check the gauge and its feed"
        )
    series = pd.Series(good["rain_mm"].to_numpy(), index=pd.DatetimeIndex(good["time_utc"]))
    gap_start = pd.Series(good["gap_start"].to_numpy(), index=series.index)
    interval = (pd.Series(rows["time_utc"]).diff().median()
                if len(rows) > 1 else pd.Timedelta(0))  # fmt: skip
    totals, missing, notes = {}, {}, []
    for name, length in DEFAULT_WINDOWS.items():
        hours = length / pd.Timedelta(hours=1)
        totals[name] = float(window_totals(series, at, hours, gap_start)[0])
        if not np.isfinite(totals[name]):
            notes.append(f"{name}: the rain record does not cover the whole window, or the window holds "
                         "part of a gap in the record")  # fmt: skip
        in_window = int(((series.index > at - length) & (series.index <= at)).sum())
        missing[name] = max(int(length / interval) - in_window, 0) if interval > pd.Timedelta(0) else 0
    for name, count in missing.items():
        if count and np.isfinite(totals[name]):
            notes.append(f"{name}: {count} report(s) missing or flagged; the total is a lower bound")
    after_gap = good[good["gap_start"].notna()]
    reports_after_gap = tuple(
        {"time_utc": _text(t), "gap_start_utc": _text(g), "rain_mm": float(r)}
        for t, g, r in zip(after_gap["time_utc"], after_gap["gap_start"], after_gap["rain_mm"])
    )  # fmt: skip
    notes += [f"{r['rain_mm']:g} mm reported at {r['time_utc']} after a gap in the record since "
              f"{r['gap_start_utc']}: counted only in windows that hold the whole gap, never in an intensity"
              for r in reports_after_gap]  # fmt: skip
    exceedances = tuple(event_exceedance(series, at, t, dry_gap_h, gap_start) for t in thresholds)
    notes += [f"{e.threshold}: not compared: {e.reason}" for e in exceedances if not e.testable]
    tested = [e for e in exceedances if e.testable and e.event is not None]
    worst = max(tested, key=lambda e: e.ratio) if tested else None
    last = series.index[-1]
    return RainfallState(
        gauge_id=gauge_id,
        at=at,
        totals_mm=totals,
        intensity_mm_h={"1h": totals["rain_1h_mm"], "24h": totals["rain_24h_mm"] / 24.0},
        missing_reports=missing,
        exceedances=exceedances,
        worst_ratio=worst.ratio if worst else float("nan"),
        worst_threshold=worst.threshold if worst else "",
        worst_duration_h=worst.duration_h if worst else float("nan"),
        dry_gap_h=float(dry_gap_h),
        last_report_utc=last,
        age_hours=float((at - last) / pd.Timedelta(hours=1)),
        notes=tuple(notes),
        reports_after_gap=reports_after_gap,
    )


def rainfall_state_of(workspace: Workspace, gauge_id: str, at) -> RainfallState:
    """:func:`rainfall_state` of a gauge of the workspace's site."""
    config = workspace.config()
    gauges = [g.id for g in config.rain_gauges]
    if gauge_id not in gauges:
        raise ConfigError(f"{gauge_id!r} is not a [[rain_gauge]] id of the site file "
                          f"(gauges: {', '.join(gauges) or 'none'})")
    with workspace.open_store(read_only=True) as store:
        return rainfall_state(store, gauge_id, at)


# --------------------------------------------------------------------------------------------
# Calibration of the response models
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Calibration:
    """The calibration of one piezometer's response model.

    Attributes
    ----------
    instrument_id, gauge_id : str
    model_id : int or None
        The stored ``response_models`` row; None when no fit could be made.
    usable : bool
    reason : str
        Why the model may or may not forecast, or why no fit was made.
    fit : ResponseFit or None
    record_start_utc, record_end_utc : pandas.Timestamp
    missing_rain_steps : int
        Grid steps without a good rain report (taken as dry).
    """

    instrument_id: str
    gauge_id: str
    model_id: int | None
    usable: bool
    reason: str
    fit: ResponseFit | None
    record_start_utc: pd.Timestamp
    record_end_utc: pd.Timestamp
    missing_rain_steps: int = 0

    def to_dict(self) -> dict:
        model = self.fit.model if self.fit else None
        return {
            "instrument_id": self.instrument_id,
            "gauge_id": self.gauge_id,
            "model_id": self.model_id,
            "usable": self.usable,
            "reason": self.reason,
            "record_start_utc": _text(self.record_start_utc),
            "record_end_utc": _text(self.record_end_utc),
            "missing_rain_steps": self.missing_rain_steps,
            "base_head_m": model.base_head_m if model else None,
            "gain_m_per_mm": model.gain_m_per_mm if model else None,
            "recession_h": model.recession_h if model else None,
            "lag_steps": model.lag_steps if model else None,
            "step_h": model.step_h if model else None,
            "nse": model.nse if model else None,
            "rmse_m": model.rmse_m if model else None,
            "n_observations": self.fit.n_observations if self.fit else 0,
        }


def gauge_of(config: SiteConfig, piezometer: Piezometer) -> str:
    """The rain gauge serving a piezometer: its section's named gauge, else the nearest."""
    ref = config.section(piezometer.section)
    if ref.gauge is not None:
        return ref.gauge
    located = {g.id: g.location for g in config.rain_gauges if g.location is not None}
    try:
        return gauge_for_section(ref.location, located)
    except ConfigError as error:
        raise ConfigError(f"site file [[section]] {ref.id!r}: {error}") from None


def calibrate_response_models(
    store: Store,
    config: SiteConfig,
    at,
    *,
    instruments: Sequence[str] | None = None,
    days: float = DEFAULT_CALIBRATION_DAYS,
    step_h: float = DEFAULT_STEP_H,
    min_nse: float = DEFAULT_MIN_NSE,
    calibrated_utc: datetime | None = None,
) -> list[Calibration]:
    """Calibrate and store the response model of each piezometer on its stored history.

    The record is the ``days`` before ``at``, on a grid of ``step_h`` steps ending at ``at``,
    starting no earlier than the record does (the later of the gauge's first report and the
    instrument's first reading): the head of a step is the last good reading in it (none: no
    observation), the rain the sum of the good reports of the section's gauge in it; a step
    of the record without a good rain report is a missing report. Fitting is
    :func:`watch.response.fit`. Every fit is stored (``response_models``) with its NSE, RMSE
    and whether it may forecast; an instrument whose record cannot be fitted at all (no
    readings or no rain in the window, fewer heads than a fit needs (the reason says how many
    hours more), too many rain steps missing) is reported with the reason and nothing is
    stored for it.

    Parameters
    ----------
    store : Store
        Writable; the rows are written in one transaction.
    config : SiteConfig
    at : time
        End of the record (naive = UTC).
    instruments : sequence of str, optional
        Piezometer ids; default every piezometer of the site.
    days : float
        Length of the record [days], > 0.
    step_h : float
        Grid step [h], > 0.
    min_nse : float
        Smallest Nash-Sutcliffe efficiency of a usable model [-].
    calibrated_utc : datetime, optional
        Time of the calibration (the clock's now); default ``at``.

    Returns
    -------
    list of Calibration
    """
    if not (np.isfinite(days) and days > 0):
        raise ConfigError(f"calibration record must be longer than 0 days, got {days}")
    if not (np.isfinite(step_h) and step_h > 0 and step_h <= 24 * days):
        raise ConfigError(f"calibration step must be between 0 and the record length, got {step_h} h")
    at = _utc(at)
    step = pd.Timedelta(hours=step_h)
    n = int(math.floor(days * 24.0 / step_h))
    ends = pd.DatetimeIndex([at - step * k for k in range(n - 1, -1, -1)])
    piezometers = {p.id: p for p in config.piezometers}
    wanted = list(piezometers) if instruments is None else list(instruments)
    unknown = [i for i in wanted if i not in piezometers]
    if unknown:
        raise ConfigError(f"{unknown} are not [[piezometer]] ids of the site file "
                          f"(piezometers: {', '.join(sorted(piezometers))})")
    results, rows = [], []
    rain_cache: dict[str, tuple] = {}
    for instrument in wanted:
        gauge = gauge_of(config, piezometers[instrument])
        if gauge not in rain_cache:
            rain_cache[gauge] = _rain_grid(store, gauge, ends, step)
        all_rain, reported, rain_start = rain_cache[gauge]
        readings = load_readings(store, [instrument], ends[0] - step, at)
        # The window starts no earlier than the record does: the later of the gauge's first
        # report and the instrument's first reading (any quality), on the grid's steps. Steps
        # before it are not missing reports; they are before the record.
        starts = [ends[0] - step]
        if rain_start is not None:
            starts.append(rain_start)
        if not readings.empty:
            starts.append(readings["time_utc"].min() - step)
        start = max(starts)
        first = int(np.searchsorted(ends - step, start, side="left"))  # first step within it
        window = ends[first:]
        rain = all_rain[first:]
        missing = int(np.sum(~reported[first:]))
        good = readings[(readings["quality"] == "ok") & readings["head_m"].notna()]
        heads = _binned(good["time_utc"], good["head_m"].to_numpy(), window, step, "last") \
            if len(window) else np.empty(0)
        record_start = (window[0] if len(window) else at) - step
        common = dict(instrument_id=instrument, gauge_id=gauge, record_start_utc=record_start,
                      record_end_utc=at, missing_rain_steps=missing)  # fmt: skip
        short = _short_record(instrument, gauge, rain_start, readings, heads, step_h, at, days)
        if short:
            results.append(Calibration(model_id=None, usable=False, fit=None, reason=short,
                                       **common))  # fmt: skip
            continue
        if missing > MAX_MISSING_RAIN_FRACTION * len(window):
            results.append(Calibration(
                model_id=None, usable=False, fit=None,
                reason=f"{missing} of {len(window)} steps since {_text(record_start)} have no "
                f"good report from gauge {gauge} (more than {MAX_MISSING_RAIN_FRACTION:.0%}); a "
                "missing storm could pass for a dry spell",
                **common,
            ))  # fmt: skip
            continue
        try:
            result = fit(pd.Series(heads, index=window), pd.Series(rain, index=window),
                         step_h=step_h, min_nse=min_nse)  # fmt: skip
        except ModelError as error:
            results.append(Calibration(model_id=None, usable=False, fit=None,
                                       reason=str(error), **common))  # fmt: skip
            continue
        model = result.model
        rows.append({
            "instrument_id": instrument, "gauge_id": gauge,
            "calibrated_utc": utc_text(calibrated_utc) if calibrated_utc else _text(at),
            "record_start_utc": _text(record_start), "record_end_utc": _text(at),
            "step_h": step_h, "base_head_m": model.base_head_m,
            "gain_m_per_mm": model.gain_m_per_mm, "recession_h": model.recession_h,
            "lag_steps": int(model.lag_steps), "nse": model.nse, "rmse_m": model.rmse_m,
            "min_nse": min_nse, "n_observations": result.n_observations,
            "missing_rain_steps": missing, "converged": int(result.converged),
            "usable": int(result.usable), "reason": result.reason,
        })  # fmt: skip
        results.append(Calibration(model_id=None, usable=result.usable, reason=result.reason,
                                   fit=result, **common))  # fmt: skip
    with store.atomic():
        ids = iter([store.insert_response_model(row) for row in rows])
    return [
        c if c.fit is None else Calibration(**{**c.__dict__, "model_id": next(ids)})
        for c in results
    ]


def _short_record(instrument: str, gauge: str, rain_start, readings: pd.DataFrame,
                  heads: np.ndarray, step_h: float, at: pd.Timestamp, days: float) -> str:
    """Why the record in the window is too short to calibrate on, and how much more it needs
    ("" when it is long enough to try)."""
    span = f"the {days:g} days before {_text(at)}"
    if rain_start is None:
        return f"gauge {gauge} has no report in {span}; no rain to calibrate on"
    if readings.empty:
        return f"{instrument} has no reading in {span}; no heads to calibrate on"
    observed = int(np.isfinite(heads).sum())
    if observed < MIN_OBSERVATIONS:
        more = (MIN_OBSERVATIONS - observed) * step_h
        return (f"{instrument} has {observed} good head(s) on the {step_h:g} h grid in {span} "
                f"(its record with gauge {gauge} starts {_text(max(rain_start, readings['time_utc'].min()))}); "
                f"calibration needs at least {MIN_OBSERVATIONS}: about {more:g} h more record "
                "at one good reading per step")
    return ""


def _model_of(row: dict) -> ResponseModel:
    return ResponseModel(
        base_head_m=row["base_head_m"],
        gain_m_per_mm=row["gain_m_per_mm"],
        recession_h=row["recession_h"],
        lag_steps=int(row["lag_steps"]),
        step_h=row["step_h"],
        nse=row["nse"],
        rmse_m=row["rmse_m"],
        min_nse=row["min_nse"],
    )


# --------------------------------------------------------------------------------------------
# State of a model at a time, and heads it estimates
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class ModelStart:
    """A stored model of one instrument, and its state at a time.

    Attributes
    ----------
    instrument_id : str
    model_id : int
    model : ResponseModel
    state : ResponseState
        At the requested time.
    basis : dict
        What the state rests on: model id and NSE, the last good reading (time, head, source
        file and line), the rain since it [mm] and its missing steps.
    """

    instrument_id: str
    model_id: int
    model: ResponseModel
    state: ResponseState
    basis: dict


def model_start(store: Store, instrument_id: str, at, max_hours: float = MAX_ESTIMATE_HOURS
                ) -> ModelStart:
    """The newest usable stored model of ``instrument_id`` (calibrated at or before ``at``)
    and its state at ``at``: the reservoir content from the last good reading at or before
    ``at`` (s = (h - h0) / G, floored at zero: :meth:`ResponseModel.state_at_head`) with the rain of the ``lag`` steps before it on its way, then the
    rain since that reading run through the model, step by step up to ``at``.

    Raises
    ------
    ModelError
        No stored model, a model that may not forecast, no good reading within ``max_hours``
        [h], or too many rain steps missing since it.
    """
    at = _utc(at)
    row = store.latest_response_model(instrument_id, _text(at))
    if row is None:
        raise ModelError(f"{instrument_id} has no calibrated rainfall-response model; run "
                         "`slipwatch calibrate-response`")
    model = _model_of(row)
    if not row["usable"]:
        raise ModelError(f"{instrument_id}: response model {row['id']} may not forecast: "
                         f"{row['reason']}")
    readings = load_readings(store, [instrument_id], at - pd.Timedelta(hours=max_hours), at)
    good = readings[(readings["quality"] == "ok") & readings["head_m"].notna()]
    if good.empty:
        raise ModelError(f"{instrument_id} has no good reading in the {max_hours:g} h before "
                         f"{_text(at)} for its model to start from")
    last = good.iloc[-1]
    t0 = last["time_utc"]
    step = pd.Timedelta(hours=model.step_h)
    n = int((at - t0) // step)
    lag = model.lag_steps
    # Steps ending at t0 - (lag - 1) step ... t0 hold the rain still on its way when the head
    # was read; the n steps after t0 carry the rain since, the last one widened to end at
    # ``at``. With n = 0 the rain of the part-step since the reading is left out.
    ends = [t0 + step * k for k in range(-lag + 1, n + 1)]
    if n:
        ends[-1] = at
    rain, missing = np.zeros(len(ends)), 0
    if ends:
        ends = pd.DatetimeIndex(ends)
        times, depths = _good_rain(store, row["gauge_id"], ends[0] - step, ends[-1])
        rain = _binned(times, depths, ends, step, "sum")
        reports = _binned(times, np.ones(len(depths)), ends, step, "count")
        missing = int(np.sum(reports[lag:] == 0))
        if missing > MAX_MISSING_RAIN_FRACTION * n:
            raise ModelError(
                f"{instrument_id}: {missing} of the {n} steps since its last good reading "
                f"({_text(t0)}) have no good report from gauge {row['gauge_id']}"
            )
    # Floored: a head below the model's base level empties the reservoir and lowers the base
    # to it (ResponseModel.state_at_head), so dry weather never makes the head rise.
    state = model.state_at_head(float(last["head_m"]), rain[:lag].tolist())
    if n:
        state = model.simulate(rain[lag:], state).state
    state = replace(state, time_utc=at)
    basis = {
        "model_id": int(row["id"]),
        "model_nse": row["nse"],
        "gauge_id": row["gauge_id"],
        "from_reading": {
            "time_utc": _text(t0),
            "head_m": float(last["head_m"]),
            "source_file_id": int(last["source_file_id"]),
            "source_line": int(last["source_line"]),
            "source_file": last["source_file"],
        },
        "rain_since_mm": float(np.sum(rain[lag:])),
        "rain_steps_missing": missing,
    }
    return ModelStart(instrument_id, int(row["id"]), model, state, basis)


def _good_rain(store: Store, gauge_id: str, start, end):
    rows = _rain_rows(store, gauge_id, start, end)
    good = rows[rows["on_grid"]]
    return good["time_utc"], good["rain_mm"].to_numpy()


def model_head_estimator(store: Store, config: SiteConfig):
    """A :data:`watch.waterlines.HeadEstimator` from the stored models: for each instrument,
    the head its newest usable model gives at the time (:func:`model_start`), or a note saying
    why there is none."""

    def estimate(instrument_ids: Sequence[str], at) -> ModelHeads:
        heads, basis, notes = {}, {}, []
        for instrument in instrument_ids:
            try:
                start = model_start(store, instrument, at)
            except ModelError as error:
                notes.append(str(error))
                continue
            heads[instrument] = start.model.head(start.state)
            basis[instrument] = start.basis
        return ModelHeads(heads, basis, tuple(notes))

    return estimate


# --------------------------------------------------------------------------------------------
# Storm forecast of a section
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class InstrumentForecast:
    """Heads of one piezometer after now with and without the storm.

    Attributes
    ----------
    instrument_id : str
    model_id : int
    head_now_m : float
        Head at the start [m] (the state's head).
    peak_head_m : float
        Highest head with the storm [m].
    peak_time_h : float
        Hours after the start of the storm when it comes [h].
    time_h, head_m, baseline_head_m : ndarray
        The hydrographs with and without the storm [h], [m], [m].
    basis : dict
        What the starting state rests on (:class:`ModelStart`).
    """

    instrument_id: str
    model_id: int
    head_now_m: float
    peak_head_m: float
    peak_time_h: float
    time_h: np.ndarray
    head_m: np.ndarray
    baseline_head_m: np.ndarray
    basis: dict


@dataclass(frozen=True)
class SectionForecast:
    """What a uniform storm starting at ``at`` would do to a section.

    Attributes
    ----------
    section_id : str
    section_version_id : int or None
    at : pandas.Timestamp
        Start of the storm (the state the forecast starts from).
    storm_depth_mm, duration_h, horizon_h : float
    fos_now : float
        FoS with the heads at the start [-].
    fos_peak : float
        Lowest FoS during the forecast [-].
    peak_time_h : float
        Hours after the start when it comes [h].
    method : str
    evaluation : str
        How ``fos_peak`` was computed: "warm re-evaluation" of the critical surfaces found at
        the start, or "full search" when the warm result advised one.
    reasons : tuple of str
        Why a full search was run.
    instruments : tuple of InstrumentForecast
    water_lines_now, water_lines_peak : dict of str to WaterLineEstimate
    fos_times_h, fos_values : ndarray
        The times evaluated [h] and the FoS there (warm re-evaluation) [-].
    critical : solver.search.RankedSurface
        The critical surface at the lowest FoS.
    """

    section_id: str
    section_version_id: int | None
    at: pd.Timestamp
    storm_depth_mm: float
    duration_h: float
    horizon_h: float
    fos_now: float
    fos_peak: float
    peak_time_h: float
    method: str
    evaluation: str
    reasons: tuple[str, ...]
    instruments: tuple[InstrumentForecast, ...]
    water_lines_now: dict[str, WaterLineEstimate]
    water_lines_peak: dict[str, WaterLineEstimate]
    fos_times_h: np.ndarray
    fos_values: np.ndarray
    critical: RankedSurface

    @property
    def peak_time_utc(self) -> pd.Timestamp:
        return self.at + pd.Timedelta(hours=self.peak_time_h)

    def to_dict(self) -> dict:
        return {
            "section_id": self.section_id,
            "section_version_id": self.section_version_id,
            "start_utc": _text(self.at),
            "storm_depth_mm": self.storm_depth_mm,
            "duration_h": self.duration_h,
            "horizon_h": self.horizon_h,
            "fos_now": self.fos_now,
            "fos_peak": self.fos_peak,
            "peak_time_h": self.peak_time_h,
            "peak_time_utc": _text(self.peak_time_utc),
            "method": self.method,
            "evaluation": self.evaluation,
            "reasons": list(self.reasons),
            "instruments": [
                {"instrument_id": i.instrument_id, "model_id": i.model_id,
                 "head_now_m": i.head_now_m, "peak_head_m": i.peak_head_m,
                 "peak_time_h": i.peak_time_h,
                 "peak_time_utc": _text(self.at + pd.Timedelta(hours=i.peak_time_h)),
                 "started_from": i.basis}  # fmt: skip
                for i in self.instruments
            ],
            "water_lines_peak": {
                name: {"points_m": np.asarray(line.points).tolist(), "source": line.source,
                       "fallback": line.fallback, "fallback_reason": line.fallback_reason}
                for name, line in self.water_lines_peak.items()
            },
            "critical_surface": self.critical.describe(),
            "fos_profile": [{"time_h": float(t), "fos": float(f)}
                            for t, f in zip(self.fos_times_h, self.fos_values)],  # fmt: skip
        }

    def describe(self) -> str:
        """What duty staff read."""
        lines = [
            f"{self.section_id}: a {self.storm_depth_mm:g} mm storm over {self.duration_h:g} h "
            f"from {self.at:%Y-%m-%d %H:%M} UTC",
            f"  FoS now {self.fos_now:.3f}, lowest {self.fos_peak:.3f} after "
            f"{self.peak_time_h:g} h ({self.peak_time_utc:%Y-%m-%d %H:%M} UTC; {self.method}, "
            f"{self.evaluation})",
        ]
        lines += [
            f"  {i.instrument_id}: head {i.head_now_m:.2f} m now, peak {i.peak_head_m:.2f} m "
            f"after {i.peak_time_h:g} h"
            for i in self.instruments
        ]
        lines += [f"  full search: {r}" for r in self.reasons]
        return "\n".join(lines)


@dataclass
class _Prepared:
    """A section ready to forecast: its models' states and the critical surfaces now."""

    section: Section
    version_id: int | None
    config: SiteConfig
    piezometers: list[Piezometer]
    starts: dict[str, ModelStart]
    readings: pd.DataFrame
    at: pd.Timestamp
    search: SearchResult
    fos_now: float
    lines_now: dict[str, WaterLineEstimate]
    method: str
    notes: list[str] = field(default_factory=list)

    def lines(self, heads: Mapping[str, float]) -> dict[str, WaterLineEstimate]:
        ref = self.config.section(self.section.id)
        return water_lines_through(
            self.section, self.piezometers, self.readings, self.at,
            default_max_age=pd.Timedelta(hours=self.config.ingest.stale_hours).to_pytimedelta(),
            settings=ref.water_lines, heads=heads,
        )  # fmt: skip

    def section_with(self, heads: Mapping[str, float]) -> tuple[Section, dict]:
        lines = self.lines(heads)
        return section_with_lines(self.section, lines), lines

    def warm_fos(self, heads: Mapping[str, float], search: SearchResult) -> float:
        current, _ = self.section_with(heads)
        try:
            return warm_reevaluate(current, search).fos
        except SearchError:
            return analyse(current, self.method).fos


def _prepare(workspace: Workspace, store: Store, config: SiteConfig, section_id: str, at,
             method: str | None) -> _Prepared:
    """The section in force, its models started at ``at`` and a full search with the heads at
    ``at``; ModelError (naming every instrument at fault) when it may not be forecast."""
    from watch.parameters import current_section  # the back-analysis issue's module

    at = _utc(at)
    section, version_id = current_section(workspace, store, section_id, at, config=config)
    on_lines = {line.name for line in section.water_lines}
    piezometers = [p for p in config.piezometers_of(section_id) if p.water_line in on_lines]
    if not piezometers:
        raise ModelError(f"section {section_id} has no piezometer on its water lines; there "
                         "are no heads to forecast")
    starts, problems = {}, []
    for p in piezometers:
        try:
            starts[p.id] = model_start(store, p.id, at)
        except ModelError as error:
            problems.append(str(error))
    if problems:
        raise ModelError(f"section {section_id} cannot be forecast: " + "; ".join(problems))
    readings = load_readings(store, [p.id for p in piezometers],
                             at - pd.Timedelta(hours=MAX_ESTIMATE_HOURS), at)  # fmt: skip
    prepared = _Prepared(section, version_id, config, piezometers, starts, readings, at,
                         search=None, fos_now=np.nan, lines_now={}, method="")  # fmt: skip
    heads_now = {i: s.model.head(s.state) for i, s in starts.items()}
    current, prepared.lines_now = prepared.section_with(heads_now)
    result = analyse(current, method)
    prepared.search, prepared.fos_now, prepared.method = result.search, result.fos, result.method
    return prepared


def _hydrographs(prepared: _Prepared, duration_h: float, horizon_h: float):
    """Per instrument: (time_h, baseline head, head per mm of storm) over the horizon. The
    model is linear in the rain, so the head of any depth d is baseline + d * unit."""
    out = {}
    for instrument, start in prepared.starts.items():
        unit = start.model.forecast(start.state, 1.0, duration_h, horizon_h)
        out[instrument] = (unit.time_h, unit.baseline_head_m, unit.head_m - unit.baseline_head_m)
    return out


def _default_horizon(prepared: _Prepared, duration_h: float) -> float:
    """The storm, plus the longest lag and one step: no head peaks later (after the storm's
    last rain reaches the reservoir, its content only recedes)."""
    return duration_h + max((s.model.lag_steps + 1) * s.model.step_h
                            for s in prepared.starts.values())  # fmt: skip


def _fos_over_time(prepared: _Prepared, hydro: dict, depth_mm: float, search: SearchResult):
    """FoS at the times that can hold the lowest one: now, and every step from the earliest
    to the latest head peak (between peaks the heads trade off). Returns (times [h], fos,
    heads at each time)."""
    instruments = list(hydro)
    heads = np.array([hydro[i][1] + depth_mm * hydro[i][2] for i in instruments])
    time_h = hydro[instruments[0]][0]
    if any(len(hydro[i][0]) != len(time_h) or np.any(hydro[i][0] != time_h) for i in instruments):
        raise ModelError("the piezometers of the section have response models on different "
                         "time steps; calibrate them with the same step")
    peaks = np.argmax(heads, axis=1)
    candidates = sorted({0, *range(int(peaks.min()), int(peaks.max()) + 1)})
    fos = np.array([
        prepared.warm_fos(dict(zip(instruments, heads[:, k])), search) for k in candidates
    ])
    return time_h[candidates], fos, [dict(zip(instruments, heads[:, k])) for k in candidates]


def forecast_storm(
    workspace: Workspace,
    store: Store,
    config: SiteConfig,
    section_id: str,
    depth_mm: float,
    duration_h: float,
    at,
    *,
    horizon_h: float | None = None,
    method: str | None = None,
) -> SectionForecast:
    """Heads, water lines and FoS of a section under a uniform storm starting at ``at``.

    Each piezometer of the section starts from its state at ``at`` (:func:`model_start`) and
    receives ``depth_mm`` spread evenly over ``duration_h``; the water lines are drawn through
    the forecast heads by the site file's rules. The FoS is found by warm re-evaluation of the
    critical surfaces of a full search at ``at``, at every time that can hold the lowest FoS
    (:func:`_fos_over_time`); at the lowest one a full search is run when the warm result
    advises it (the FoS moved beyond the tolerance or another surface became critical).

    Parameters
    ----------
    workspace, store, config
        The workspace, its store (read-only is enough) and site file.
    section_id : str
    depth_mm : float
        Storm depth [mm], >= 0.
    duration_h : float
        Storm duration [h], > 0.
    at : time
        Start of the storm (naive = UTC).
    horizon_h : float, optional
        Hours to forecast [h]; default the storm plus the longest lag plus a day of
        recession.
    method : str, optional
        Method of slices; default the section's.

    Raises
    ------
    ModelError
        A piezometer of the section has no usable response model (fit too poor, none
        calibrated) or no recent good reading to start from; the message names each.
    """
    if not (np.isfinite(depth_mm) and depth_mm >= 0):
        raise ConfigError(f"storm depth must be zero or more mm, got {depth_mm}")
    if not (np.isfinite(duration_h) and duration_h > 0):
        raise ConfigError(f"storm duration must be more than 0 h, got {duration_h}")
    prepared = _prepare(workspace, store, config, section_id, at, method)
    shortest = _default_horizon(prepared, duration_h)
    horizon = shortest + RECESSION_VIEW_H if horizon_h is None else float(horizon_h)
    if not horizon >= duration_h:
        raise ConfigError(f"forecast horizon ({horizon:g} h) must be at least the storm "
                          f"duration ({duration_h:g} h)")
    hydro = _hydrographs(prepared, duration_h, horizon)
    times, fos, heads = _fos_over_time(prepared, hydro, depth_mm, prepared.search)
    worst = int(np.argmin(fos))
    peak_section, peak_lines = prepared.section_with(heads[worst])
    evaluation, reasons, critical = "warm re-evaluation", (), None
    try:
        warm = warm_reevaluate(peak_section, prepared.search)
        reasons, critical = warm.reasons, warm.critical
    except SearchError as error:
        reasons = (f"warm re-evaluation impossible: {error}",)
    if reasons:
        critical, evaluation = analyse(peak_section, prepared.method).critical, "full search"
    instruments = []
    for instrument, (time_h, baseline, unit) in hydro.items():
        head = baseline + depth_mm * unit
        k = int(np.argmax(head))
        start = prepared.starts[instrument]
        instruments.append(InstrumentForecast(
            instrument, start.model_id, float(head[0]), float(head[k]), float(time_h[k]),
            time_h, head, baseline, start.basis,
        ))  # fmt: skip
    return SectionForecast(
        section_id=section_id,
        section_version_id=prepared.version_id,
        at=prepared.at,
        storm_depth_mm=float(depth_mm),
        duration_h=float(duration_h),
        horizon_h=horizon,
        fos_now=float(prepared.fos_now),
        fos_peak=float(critical.fos),
        peak_time_h=float(times[worst]),
        method=prepared.method,
        evaluation=evaluation,
        reasons=tuple(reasons),
        instruments=tuple(instruments),
        water_lines_now=prepared.lines_now,
        water_lines_peak=peak_lines,
        fos_times_h=times,
        fos_values=fos,
        critical=critical,
    )


# --------------------------------------------------------------------------------------------
# Rain to trigger level
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class TriggerRain:
    """The smallest storm of one duration that takes a section to one trigger level.

    Attributes
    ----------
    level : str
        Name of the trigger level.
    trigger_fos : float
    duration_h : float
    found : bool
    depth_mm : float or None
        Smallest storm depth [mm] (0 when the FoS is already at or below the level); None
        when no storm up to ``max_depth_mm`` does it.
    max_depth_mm : float
    fos_at_depth : float or None
        FoS (lowest over the forecast) at ``depth_mm`` [-].
    message : str
        What duty staff read, e.g. "38.2 mm in 24 h" or "none up to 250 mm".
    """

    level: str
    trigger_fos: float
    duration_h: float
    found: bool
    depth_mm: float | None
    max_depth_mm: float
    fos_at_depth: float | None
    message: str


@dataclass(frozen=True)
class SectionRainToTrigger:
    """Rain to every trigger level over every duration, for one section.

    Attributes
    ----------
    section_id : str
    at : pandas.Timestamp
    fos_now : float
    method : str
    results : tuple of TriggerRain
        One per (duration, level).
    full_searches : int
        Full searches run to check the warm re-evaluations.
    notes : tuple of str
    """

    section_id: str
    at: pd.Timestamp
    fos_now: float
    method: str
    results: tuple[TriggerRain, ...]
    full_searches: int
    notes: tuple[str, ...] = ()

    def to_dict(self) -> dict:
        return {
            "section_id": self.section_id,
            "start_utc": _text(self.at),
            "fos_now": self.fos_now,
            "method": self.method,
            "full_searches": self.full_searches,
            "notes": list(self.notes),
            "results": [r.__dict__ for r in self.results],
        }

    def describe(self) -> str:
        lines = [f"{self.section_id}: FoS now {self.fos_now:.3f} ({self.method})"]
        for r in self.results:
            lines.append(f"  {r.duration_h:g} h storm to {r.level} (FoS {r.trigger_fos:g}): "
                         f"{r.message}")
        lines += [f"  note: {n}" for n in self.notes]
        return "\n".join(lines)


def rain_to_trigger(
    workspace: Workspace,
    store: Store,
    config: SiteConfig,
    section_id: str,
    durations_h: Sequence[float],
    levels: Mapping[str, float],
    at,
    *,
    max_depth_mm: float = DEFAULT_MAX_STORM_MM,
    method: str | None = None,
) -> SectionRainToTrigger:
    """Smallest uniform storm depth over each duration that takes the FoS to each level.

    FoS(depth) is the lowest FoS of the forecast of that storm (:func:`forecast_storm`, by
    warm re-evaluation of the cached critical surfaces); the depth is found by
    :func:`watch.response.rain_to_thresholds` (a depth grid, then Brent's method). Each answer
    is then checked by a full search at the storm found (or at ``max_depth_mm`` for "none up
    to"): when the full search finds a surface lower than the cached ones by more than
    :data:`SEARCH_CHECK_TOLERANCE`, its surfaces replace the cache and the root finding is
    repeated (at most :data:`MAX_SEARCH_ROUNDS` times).

    Parameters
    ----------
    workspace, store, config
    section_id : str
    durations_h : sequence of float
        Storm durations [h], each > 0.
    levels : mapping of str to float
        Trigger name -> FoS level [-].
    at : time
        Start of the storms (naive = UTC).
    max_depth_mm : float
        Largest storm depth considered [mm].
    method : str, optional

    Raises
    ------
    ModelError
        As :func:`forecast_storm`.
    """
    if not levels:
        raise ConfigError("no trigger level given; pass at least one NAME=FOS level")
    durations = [float(d) for d in durations_h]
    if not durations or not all(np.isfinite(d) and d > 0 for d in durations):
        raise ConfigError(f"storm durations must be positive hours, got {list(durations_h)}")
    prepared = _prepare(workspace, store, config, section_id, at, method)
    names, values = list(levels), [float(levels[n]) for n in levels]
    results, notes, full = [], [], 0
    for duration in durations:
        hydro = _hydrographs(prepared, duration, _default_horizon(prepared, duration))
        search = prepared.search
        for _round in range(MAX_SEARCH_ROUNDS + 1):
            cache: dict[float, float] = {}

            def fos_of_depth(depth: float, search=search, cache=cache) -> float:
                if depth not in cache:
                    cache[depth] = float(np.min(_fos_over_time(prepared, hydro, depth, search)[1]))
                return cache[depth]

            answers = rain_to_thresholds(fos_of_depth, values, max_depth_mm)
            if _round == MAX_SEARCH_ROUNDS:
                notes.append(f"{duration:g} h: full searches still found lower surfaces after "
                             f"{MAX_SEARCH_ROUNDS} rounds; depths may be overestimated")
                break
            better = None
            for depth in sorted({a.depth_mm if a.found else max_depth_mm for a in answers
                                 if not (a.found and a.depth_mm == 0)}):  # fmt: skip
                times, fos, heads = _fos_over_time(prepared, hydro, depth, search)
                worst = int(np.argmin(fos))
                checked = analyse(prepared.section_with(heads[worst])[0], prepared.method)
                full += 1
                if checked.fos < fos[worst] - SEARCH_CHECK_TOLERANCE:
                    better = checked.search
                    notes.append(f"{duration:g} h: a full search at {depth:.1f} mm found FoS "
                                 f"{checked.fos:.3f} below the cached surfaces' "
                                 f"{fos[worst]:.3f}; depths found again with its surfaces")
                    break
            if better is None:
                break
            search = better
        for name, value, answer in zip(names, values, answers):
            message = (f"{answer.message} in {duration:g} h" if answer.found and answer.depth_mm
                       else answer.message)  # fmt: skip
            results.append(TriggerRain(
                level=name, trigger_fos=value, duration_h=duration, found=answer.found,
                depth_mm=answer.depth_mm, max_depth_mm=float(max_depth_mm),
                fos_at_depth=None if not answer.found else fos_of_depth(answer.depth_mm),
                message=message,
            ))  # fmt: skip
    return SectionRainToTrigger(section_id, prepared.at, float(prepared.fos_now),
                                prepared.method, tuple(results), full, tuple(notes))  # fmt: skip


# --------------------------------------------------------------------------------------------
# Whole site (what the command line and the demo call)
# --------------------------------------------------------------------------------------------


def fos_trigger_levels(config: SiteConfig, section_id: str) -> dict[str, float]:
    """The FoS trigger levels of a section from the site file's ``[[trigger]]`` rules
    (``quantity = "fos"``): level name -> FoS."""
    from watch.triggers import alert_settings  # the service issue's module

    rules = alert_settings(config).rules_for(config, section_id)
    return {r.rule.level: float(r.rule.trigger) for r in rules
            if r.kind == "level" and r.rule.quantity == "fos"}  # fmt: skip


def _section_ids(config: SiteConfig, sections: Sequence[str] | None) -> list[str]:
    known = [s.id for s in config.sections]
    if not sections:
        return known
    unknown = [s for s in sections if config.section_ref(s) is None]
    if unknown:
        raise ConfigError(f"{unknown} are not [[section]] ids of the site file "
                          f"(sections: {', '.join(known)})")
    return list(sections)


@dataclass(frozen=True)
class ForecastReport:
    """:func:`forecast_storm` for several sections; sections that may not be forecast are
    listed in ``refused`` with the reason."""

    at: pd.Timestamp
    storm_depth_mm: float
    duration_h: float
    forecasts: tuple[SectionForecast, ...]
    refused: dict[str, str]

    def to_dict(self) -> dict:
        return {
            "start_utc": _text(self.at),
            "storm_depth_mm": self.storm_depth_mm,
            "duration_h": self.duration_h,
            "sections": [f.to_dict() for f in self.forecasts],
            "refused": self.refused,
        }

    def describe(self) -> str:
        lines = [f.describe() for f in self.forecasts]
        lines += [f"{s}: no forecast: {why}" for s, why in self.refused.items()]
        return "\n".join(lines)


def forecast_site(
    workspace: Workspace,
    depth_mm: float,
    duration_h: float,
    at,
    *,
    sections: Sequence[str] | None = None,
    horizon_h: float | None = None,
) -> ForecastReport:
    """:func:`forecast_storm` of each section (default: every section of the site)."""
    config = workspace.config()
    forecasts, refused = [], {}
    with workspace.open_store(read_only=True) as store:
        for section_id in _section_ids(config, sections):
            try:
                forecasts.append(forecast_storm(workspace, store, config, section_id, depth_mm,
                                                duration_h, at, horizon_h=horizon_h))  # fmt: skip
            except ModelError as error:
                refused[section_id] = str(error)
    return ForecastReport(_utc(at), float(depth_mm), float(duration_h), tuple(forecasts), refused)


@dataclass(frozen=True)
class RainToTriggerReport:
    """:func:`rain_to_trigger` for several sections.

    ``levels_source`` says where the trigger levels came from (the command line, or the site
    file's ``[[trigger]]`` rules)."""

    at: pd.Timestamp
    durations_h: tuple[float, ...]
    levels_source: str
    sections: tuple[SectionRainToTrigger, ...]
    refused: dict[str, str]

    def to_dict(self) -> dict:
        return {
            "start_utc": _text(self.at),
            "durations_h": list(self.durations_h),
            "levels_source": self.levels_source,
            "sections": [s.to_dict() for s in self.sections],
            "refused": self.refused,
        }

    def describe(self) -> str:
        lines = [f"Rain to trigger level from {self.at:%Y-%m-%d %H:%M} UTC "
                 f"(levels from {self.levels_source}):"]
        lines += [s.describe() for s in self.sections]
        lines += [f"{s}: no answer: {why}" for s, why in self.refused.items()]
        return "\n".join(lines)


def rain_to_trigger_site(
    workspace: Workspace,
    durations_h: Sequence[float],
    at,
    *,
    levels: Mapping[str, float] | None = None,
    sections: Sequence[str] | None = None,
    max_depth_mm: float = DEFAULT_MAX_STORM_MM,
) -> RainToTriggerReport:
    """:func:`rain_to_trigger` of each section, with ``levels`` (name -> FoS) for every
    section, or else each section's FoS rules of the site file (:func:`fos_trigger_levels`).

    Raises ConfigError when neither gives a level for a section."""
    config = workspace.config()
    results, refused = [], {}
    with workspace.open_store(read_only=True) as store:
        for section_id in _section_ids(config, sections):
            chosen = dict(levels) if levels else fos_trigger_levels(config, section_id)
            if not chosen:
                raise ConfigError(
                    f"section {section_id} has no factor-of-safety trigger level: add "
                    "[[trigger]] rules with quantity = \"fos\" to site.toml or give the levels "
                    "(e.g. --levels amber=1.3)"
                )
            try:
                results.append(rain_to_trigger(workspace, store, config, section_id, durations_h,
                                               chosen, at, max_depth_mm=max_depth_mm))  # fmt: skip
            except ModelError as error:
                refused[section_id] = str(error)
    source = "the command line" if levels else "the site file's [[trigger]] rules"
    return RainToTriggerReport(_utc(at), tuple(float(d) for d in durations_h), source,
                               tuple(results), refused)  # fmt: skip


def calibrate_site(
    workspace: Workspace,
    at,
    *,
    instruments: Sequence[str] | None = None,
    days: float = DEFAULT_CALIBRATION_DAYS,
    step_h: float = DEFAULT_STEP_H,
    min_nse: float = DEFAULT_MIN_NSE,
    calibrated_utc: datetime | None = None,
) -> list[Calibration]:
    """:func:`calibrate_response_models` in the workspace's store."""
    config = workspace.config()
    with workspace.open_store() as store:
        return calibrate_response_models(
            store, config, at, instruments=instruments, days=days, step_h=step_h,
            min_nse=min_nse, calibrated_utc=calibrated_utc,
        )  # fmt: skip
