"""Generate the logger files of the invented demo site into demo_feeds/.

INVENTED DATA. The Quillmarsh Valley Line, the Brackenlow Rail Trust and every reading written
here are made up for the slipwatch demo. The numbers are physically plausible, not measured.

What it simulates, 2025-10-01T00:00Z to 2026-03-31T23:45Z every 15 minutes:

* Rain at two gauges: a stochastic wet-season series (events arrive at random at a monthly
  rate, last a few hours at a few mm/h, and are dry in between), a wet spell (more frequent,
  heavier events through December and early January) and one storm of ``storm.depth_mm`` over
  about a day, peaking at ``storm.peak_utc``. Both gauges see the same events, each with its
  own catch.
* Heads at five piezometers: base level + a smooth seasonal rise + effective rain convolved
  with an exponential (linear-reservoir) response, delayed by a lag:

      head(t) = base + seasonal(t) + gain * sum_{s >= lag} r(t - s) exp(-(s - lag) / T)

  where r is rain [mm per interval] times an infiltration efficiency (low in October while the
  soil-moisture deficit fills), ``gain`` the head rise per mm of rain [m/mm] and ``T`` the
  recession constant; shallow instruments respond faster and more. Heads are kept below the
  collar (water cannot stand above the ground) and get small white noise.
* Each piezometer's head is converted back to what its logger writes, with the tip, collar and
  calibration read from config/site.toml: pore pressure u = gamma_w (head - tip) [kPa]; depth to
  water = collar - head [m]; vibrating wire: digits from the inverse of the linear calibration
  p = G (R1 - R0) + K (T1 - T0), with the sensor temperature T1 written beside them.
* Rain gauges: RG-WC writes bucket tips per scan (0.2 mm bucket), RG-FE the running total since
  its last reset (logger reset 2026-01-01, maintenance visit 2026-02-18).

Files (formats in config/site.toml, feeds "cutting-logger" and "embankment-logger"):
  wendlecombe_YYYY-MM.csv   wide, one per calendar month of logger time, local UK time
                            "%d/%m/%Y %H:%M" (crosses the clock changes), 2 lines before the header
  fellhollow_YYYY-Www.csv   long, one per ISO week, UTC ISO-8601, ';' delimiter, ',' decimal

Deliberate faults, for the ingest to catch (listed in PARAMETERS["faults"], and in
demo_feeds/README.md): missing-value markers (-9999, NAN, empty cells), garbage numbers, one
truncated line, a spike, an out-of-range value, a 2-day logger outage, a flat-lined sensor, and
one weekly file delivered a second time under another name.

Deterministic: numpy default_rng(2025) and hand-formatted text, so two runs give byte-identical
files. Usage (from the repository root):

    .venv/bin/python scripts/make_demo_feeds.py             # writes demo_feeds/
    .venv/bin/python scripts/make_demo_feeds.py --out /tmp/feeds
"""

from __future__ import annotations

import argparse
import sys
import tomllib
from pathlib import Path

import numpy as np
import pandas as pd
from scipy.signal import lfilter

REPOSITORY = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPOSITORY))
from solver.constants import GAMMA_W  # noqa: E402  (after the path is set)

# Everything that shapes the data, in one place. To tune the storm response of a section,
# change `storm` and the `piezometers` entry of its instrument, re-run, and commit the output.
PARAMETERS = {
    "seed": 2025,
    "start_utc": "2025-10-01T00:00Z",
    "end_utc": "2026-03-31T23:45Z",
    "interval_minutes": 15,
    "rain": {
        # mean number of rain events starting per day, by calendar month
        "events_per_day": {10: 0.55, 11: 0.65, 12: 0.65, 1: 0.65, 2: 0.55, 3: 0.5},
        "event_hours_mean": 5.0,          # exponential event durations [h]
        "event_hours_min": 0.5,
        "event_hours_max": 18.0,
        "event_depth_max_mm": 30.0,       # larger random events are scaled down to this
        "intensity_mm_per_hour_mean": 0.9,  # exponential mean event intensities [mm/h]
        "gamma_shape_within_event": 2.0,  # scatter of 15-minute depths inside an event
        "gauge_scatter": 0.2,             # log-normal sigma of each gauge's catch per event
        "gauge_catch": {"RG-WC": 1.0, "RG-FE": 0.9},
        # effective fraction of rain reaching the water table, interpolated between dates
        "infiltration_efficiency": [
            ["2025-10-01T00:00Z", 0.5],
            ["2025-11-15T00:00Z", 1.0],
            ["2026-03-01T00:00Z", 1.0],
            ["2026-03-31T23:45Z", 0.8],
        ],
    },
    "wet_spell": {
        "start_utc": "2025-12-01T00:00Z",
        "end_utc": "2026-01-10T00:00Z",
        "event_rate_factor": 2.0,
        "intensity_factor": 1.3,
    },
    "storm": {
        "peak_utc": "2026-01-15T12:00Z",
        "depth_mm": 90.0,                 # at RG-WC; other gauges scaled by gauge_catch
        "duration_hours": 24.0,           # the hyetograph is a Gaussian of sd = duration / 4,
                                          # cut to +- duration / 2
        "scatter_gamma_shape": 6.0,       # 15-minute scatter about that shape
        # no other rain starts this long before and after the peak: the storm front arrives
        # after a dry day and clears, so the response to the storm stands out
        "clear_hours_before": 30.0,
        "clear_hours_after": 48.0,
    },
    # Head model per piezometer (see the module docstring). base_head_m: head with no recent
    # rain [m]; seasonal_rise_m: amplitude of the smooth seasonal rise peaking at
    # seasonal_peak_utc; gain_m_per_mm: head rise per mm of effective rain; lag_hours; the
    # recession constant recession_days; noise_m: sd of white noise on the head.
    "seasonal_peak_utc": "2026-01-29T00:00Z",
    "seasonal_half_period_days": 120.0,
    "head_cap_below_collar_m": 0.3,       # smooth cap: heads stay below the collar by about this
    "piezometers": {
        # weak clay under the upper face of WC-040: the piezometer the storm trigger hangs on
        "WC040-PA": {"gauge": "RG-WC", "base_head_m": 66.2, "seasonal_rise_m": 0.35,
                     "gain_m_per_mm": 0.022, "lag_hours": 8.0, "recession_days": 6.0,
                     "noise_m": 0.012},
        # shallow, in the till: fastest and largest response
        "WC040-PB": {"gauge": "RG-WC", "base_head_m": 70.6, "seasonal_rise_m": 0.45,
                     "gain_m_per_mm": 0.028, "lag_hours": 3.0, "recession_days": 3.0,
                     "noise_m": 0.008},
        "WC060-PA": {"gauge": "RG-WC", "base_head_m": 66.1, "seasonal_rise_m": 0.35,
                     "gain_m_per_mm": 0.022, "lag_hours": 8.0, "recession_days": 6.0,
                     "noise_m": 0.012},
        # thinner clay, further from the face: slower and smaller
        "WC080-PA": {"gauge": "RG-WC", "base_head_m": 66.5, "seasonal_rise_m": 0.30,
                     "gain_m_per_mm": 0.018, "lag_hours": 12.0, "recession_days": 8.0,
                     "noise_m": 0.012},
        # alluvium under 6.4 m of clay fill: slowest
        "FE210-PA": {"gauge": "RG-FE", "base_head_m": 30.4, "seasonal_rise_m": 0.40,
                     "gain_m_per_mm": 0.010, "lag_hours": 6.0, "recession_days": 14.0,
                     "noise_m": 0.006},
    },
    # sensor temperature of the vibrating-wire piezometer (at 4 m depth it barely follows the
    # seasons: coldest in early spring)
    "vibrating_wire_temperature": {"mean_c": 10.4, "amplitude_c": 0.8,
                                   "coldest_utc": "2026-03-15T00:00Z", "noise_c": 0.03},
    "rain_gauge_resets": {"RG-FE": ["2026-01-01T00:00Z", "2026-02-18T11:00Z"]},
    "faults": {
        # cutting logger off (flat battery): no rows, and the tips in between are lost
        "cutting_outage_utc": ["2025-11-12T10:00Z", "2025-11-14T10:00Z"],
        # embankment logger switched off during the maintenance visit (bucket cleaned)
        "embankment_maintenance_utc": ["2026-02-18T10:30Z", "2026-02-18T11:00Z"],
        # a one-scan jump of the transducer (electrical interference) [kPa]
        "spike": {"instrument": "WC040-PA", "time_utc": "2025-11-08T14:30Z", "jump": 27.5},
        # the sensor sticks at its last value for three and a half days
        "flat_line": {"instrument": "WC080-PA", "from_utc": "2026-02-20T06:00Z",
                      "to_utc": "2026-02-23T18:00Z"},
        # an error code where a depth should be (outside valid_range [0, 7.4] m)
        "out_of_range": {"instrument": "FE210-PA", "time_utc": "2026-02-03T04:15Z",
                         "text": "99,99"},
        # written cell text replacing the reading: missing markers and garbage numbers
        "cells": [
            ["WC040-PB", "2025-10-09T07:15Z", "-9999"],
            ["WC080-PA", "2025-10-21T19:30Z", "NAN"],
            ["WC060-PA", "2025-11-03T02:45Z", ""],
            ["WC040-PA", "2025-11-19T11:00Z", "1O.52"],
            ["WC080-PA", "2025-11-27T16:15Z", "-9999"],
            ["WC040-PB", "2025-12-04T08:30Z", "2..315"],
            ["RG-WC", "2025-12-09T21:00Z", "NAN"],
            ["WC060-PA", "2026-02-11T13:45Z", "ERR:7"],
            ["WC040-PA", "2026-02-26T05:00Z", ""],
            ["WC080-PA", "2026-03-12T22:15Z", "4.7e"],
            ["WC060-PA", "2026-03-20T09:30Z", "-9999"],
            ["FE210-PA", "2025-10-17T12:00Z", "NAN"],
            ["FE210-PA", "2025-11-06T03:30Z", "5,1,3"],
            ["RG-FE", "2025-12-22T15:45Z", "-9999"],
            ["FE210-PA", "2026-01-28T20:00Z", "-9999"],
            ["FE210-PA", "2026-03-05T06:15Z", "x4,87"],
            ["RG-FE", "2026-03-24T00:30Z", "NAN"],
        ],
        # the cutting logger lost power while writing this row: only its first characters
        "truncated_row_utc": "2025-12-17T14:30Z",
        "truncated_row_keep_chars": 24,
        # the embankment modem re-sent this week's file under another name
        "duplicate_file": ["fellhollow_2025-W50.csv", "fellhollow_2025-W50_resent.csv"],
    },
}

CUTTING_HEADER = [
    "Wendlecombe Cutting logger WCL-1 - Brackenlow Rail Trust - INVENTED DEMO DATA",
    "Scan interval 15 min - logger clock on UK civil time (GMT/BST)",
]
# the long feed names no instruments in site.toml: these are the channels its logger writes
EMBANKMENT_INSTRUMENTS = ["FE210-PA", "RG-FE"]


def _utc(text: str) -> pd.Timestamp:
    """A time written with its zone ("...Z") as a UTC timestamp."""
    return pd.Timestamp(text).tz_convert("UTC")


def _index_of(times: pd.DatetimeIndex, text: str) -> int:
    position = times.get_indexer([_utc(text)])[0]
    if position < 0:
        raise ValueError(f"{text} is not a scan time of the season")
    return int(position)


def simulate_rain(rng: np.random.Generator, times: pd.DatetimeIndex, parameters: dict) -> dict:
    """Rain [mm per interval, ending at the time stamp] at each gauge."""
    rain_p, wet, storm = parameters["rain"], parameters["wet_spell"], parameters["storm"]
    steps_per_hour = 60 / parameters["interval_minutes"]
    count = len(times)
    in_wet_spell = (times >= _utc(wet["start_utc"])) & (times < _utc(wet["end_utc"]))

    rate_per_day = np.array([rain_p["events_per_day"][month] for month in times.month])
    rate_per_day = rate_per_day * np.where(in_wet_spell, wet["event_rate_factor"], 1.0)
    hours_from_peak = (times - _utc(storm["peak_utc"])).total_seconds().to_numpy() / 3600.0
    clear = (hours_from_peak > -storm["clear_hours_before"]) & (
        hours_from_peak < storm["clear_hours_after"])
    rate_per_day = np.where(clear, 0.0, rate_per_day)
    starts = np.flatnonzero(rng.random(count) < rate_per_day / (24 * steps_per_hour))

    gauges = list(rain_p["gauge_catch"])
    rain = {gauge: np.zeros(count) for gauge in gauges}
    for start in starts:
        hours = np.clip(rng.exponential(rain_p["event_hours_mean"]), rain_p["event_hours_min"],
                        rain_p["event_hours_max"])
        length = int(np.ceil(hours * steps_per_hour))
        intensity = rng.exponential(rain_p["intensity_mm_per_hour_mean"])
        if in_wet_spell[start]:
            intensity *= wet["intensity_factor"]
        shape = rain_p["gamma_shape_within_event"]
        depths = intensity / steps_per_hour * rng.gamma(shape, 1.0 / shape, length)
        depths *= min(1.0, rain_p["event_depth_max_mm"] / depths.sum())
        stop = min(start + length, count)
        for gauge in gauges:
            catch = rain_p["gauge_catch"][gauge] * rng.lognormal(0.0, rain_p["gauge_scatter"])
            rain[gauge][start:stop] += catch * depths[: stop - start]

    inside = np.abs(hours_from_peak) <= storm["duration_hours"] / 2
    shape = np.exp(-0.5 * (hours_from_peak / (storm["duration_hours"] / 4)) ** 2) * inside
    shape = shape * rng.gamma(storm["scatter_gamma_shape"], 1.0 / storm["scatter_gamma_shape"],
                              count)
    shape /= shape.sum()
    for gauge in gauges:
        rain[gauge] += storm["depth_mm"] * rain_p["gauge_catch"][gauge] * shape
    return rain


def _interpolate_in_time(times: pd.DatetimeIndex, points: list) -> np.ndarray:
    seconds = times.asi8 / 1e9
    knots = np.array([_utc(when).value / 1e9 for when, _ in points])
    return np.interp(seconds, knots, [value for _, value in points])


def simulate_head(rng, times, effective_rain, piezometer: dict, model: dict,
                  parameters: dict) -> np.ndarray:
    """Head [m] at one piezometer (see the module docstring for the model)."""
    step_hours = parameters["interval_minutes"] / 60
    days_from_peak = (times - _utc(parameters["seasonal_peak_utc"])).total_seconds() / 86400
    half_period = parameters["seasonal_half_period_days"]
    seasonal = np.cos(0.5 * np.pi * np.clip(days_from_peak.to_numpy() / half_period, -1, 1)) ** 2

    # linear reservoir: y[n] = r[n] + a y[n-1], a = exp(-dt / T), then delayed by the lag
    decay = np.exp(-step_hours / (24 * model["recession_days"]))
    response = lfilter([1.0], [1.0, -decay], effective_rain)
    lag = int(round(model["lag_hours"] / step_hours))
    response = np.concatenate([np.zeros(lag), response[: len(response) - lag]])

    head = (model["base_head_m"] + model["seasonal_rise_m"] * seasonal
            + model["gain_m_per_mm"] * response)
    # smooth cap: water does not rise to the ground surface in these slopes
    cap = piezometer["collar_elevation"] - parameters["head_cap_below_collar_m"]
    scale = 0.25
    head = cap - scale * np.logaddexp(0.0, (cap - head) / scale)
    return head + rng.normal(0.0, model["noise_m"], len(times))


def piezometer_readings(rng, times, head, piezometer: dict, parameters: dict) -> dict:
    """What the logger writes for one piezometer: {"reading": text[], "temperature": text[]}."""
    kind = piezometer["reading"]
    if kind == "pore_pressure_kpa":
        return {"reading": [f"{u:.2f}" for u in GAMMA_W * (head - piezometer["tip_elevation"])]}
    if kind == "depth_to_water_m":
        return {"reading": [f"{d:.3f}" for d in piezometer["collar_elevation"] - head]}
    if kind == "vibrating_wire":
        calibration = piezometer["calibration"]
        temp_p = parameters["vibrating_wire_temperature"]
        days = (times - _utc(temp_p["coldest_utc"])).total_seconds().to_numpy() / 86400
        temperature = (temp_p["mean_c"] - temp_p["amplitude_c"] * np.cos(2 * np.pi * days / 365.25)
                       + rng.normal(0.0, temp_p["noise_c"], len(times)))
        temperature = np.round(temperature, 1)  # what is written is what converts back
        pressure = GAMMA_W * (head - piezometer["tip_elevation"])
        digits = calibration["zero_reading"] + (
            pressure - calibration["temperature_factor"]
            * (temperature - calibration["zero_temperature"])) / calibration["gauge_factor"]
        return {"reading": [f"{r:.1f}" for r in digits],
                "temperature": [f"{t:.1f}" for t in temperature]}
    raise ValueError(f"the generator cannot write reading type {kind!r}")


def tip_counts(rain_mm: np.ndarray, bucket_mm: float, counted: np.ndarray) -> np.ndarray:
    """Bucket tips per interval; rain in intervals not counted (logger off) is lost."""
    hundredths = np.round(np.cumsum(rain_mm) * 100).astype(np.int64)
    tips = np.diff(hundredths // int(round(bucket_mm * 100)), prepend=0)
    return np.where(counted, tips, 0)


def cumulative_since_reset(tips: np.ndarray, bucket_mm: float, resets: np.ndarray) -> np.ndarray:
    """Running total [mm] that restarts from zero at each reset index (the reading at a reset
    holds the rain of that interval only)."""
    totals = np.cumsum(tips)
    offsets = np.zeros_like(totals)
    for at in np.flatnonzero(resets):
        offsets[at:] = totals[at - 1] if at > 0 else 0
    return (totals - offsets) * bucket_mm


def simulate_season(parameters: dict, site: dict,
                    rng: np.random.Generator | None = None) -> tuple[pd.DataFrame, pd.DataFrame]:
    """The clean simulated season, before any logger writes it: rain [mm per interval] per
    gauge and head [m] per piezometer, indexed by UTC scan time. Pass ``rng`` to continue
    drawing from it afterwards (as ``build`` does); by default a fresh seeded one."""
    if rng is None:
        rng = np.random.default_rng(parameters["seed"])
    times = pd.date_range(_utc(parameters["start_utc"]), _utc(parameters["end_utc"]),
                          freq=f"{parameters['interval_minutes']}min", name="time_utc")
    piezometers = {p["id"]: p for p in site["piezometer"]}
    rain = simulate_rain(rng, times, parameters)
    efficiency = _interpolate_in_time(times, parameters["rain"]["infiltration_efficiency"])
    heads = {pid: simulate_head(rng, times, efficiency * rain[model["gauge"]], piezometers[pid],
                                model, parameters)
             for pid, model in parameters["piezometers"].items()}
    return pd.DataFrame(rain, index=times), pd.DataFrame(heads, index=times)


def build(parameters: dict, site: dict) -> dict[str, str]:
    """All feed files of the season: {file name: text}."""
    rng = np.random.default_rng(parameters["seed"])
    rain, heads = simulate_season(parameters, site, rng)
    times = heads.index
    piezometers = {p["id"]: p for p in site["piezometer"]}
    gauges = {g["id"]: g for g in site["rain_gauge"]}
    faults = parameters["faults"]

    text: dict[tuple[str, str], list[str]] = {}
    for pid in heads.columns:
        for what, cells in piezometer_readings(rng, times, heads[pid].to_numpy(),
                                               piezometers[pid], parameters).items():
            text[(pid, what)] = cells

    outage = (times >= _utc(faults["cutting_outage_utc"][0])) & (
        times < _utc(faults["cutting_outage_utc"][1]))
    maintenance = (times >= _utc(faults["embankment_maintenance_utc"][0])) & (
        times < _utc(faults["embankment_maintenance_utc"][1]))
    text[("RG-WC", "reading")] = [
        str(n) for n in tip_counts(rain["RG-WC"].to_numpy(), gauges["RG-WC"]["bucket_mm"], ~outage)]
    resets = np.zeros(len(times), dtype=bool)
    resets[[_index_of(times, when) for when in parameters["rain_gauge_resets"]["RG-FE"]]] = True
    # RG-FE logs its total to the bucket's 0.2 mm resolution
    fe_tips = tip_counts(rain["RG-FE"].to_numpy(), 0.2, ~maintenance)
    text[("RG-FE", "reading")] = [
        f"{mm:.1f}" for mm in cumulative_since_reset(fe_tips, 0.2, resets)]

    _apply_value_faults(text, times, faults)
    feeds = {feed["name"]: feed for feed in site["feed"]}
    files = _cutting_files(text, times, ~outage, faults, feeds["cutting-logger"])
    files.update(_embankment_files(text, times, ~maintenance, feeds["embankment-logger"]))
    original, copy = faults["duplicate_file"]
    files[copy] = files[original]
    return dict(sorted(files.items()))


def _apply_value_faults(text: dict, times: pd.DatetimeIndex, faults: dict) -> None:
    spike = faults["spike"]
    cells = text[(spike["instrument"], "reading")]
    at = _index_of(times, spike["time_utc"])
    cells[at] = f"{float(cells[at]) + spike['jump']:.2f}"

    flat = faults["flat_line"]
    cells = text[(flat["instrument"], "reading")]
    first, last = _index_of(times, flat["from_utc"]), _index_of(times, flat["to_utc"])
    cells[first:last + 1] = [cells[first]] * (last + 1 - first)

    wrong = faults["out_of_range"]
    text[(wrong["instrument"], "reading")][_index_of(times, wrong["time_utc"])] = wrong["text"]
    for instrument, when, written in faults["cells"]:
        text[(instrument, "reading")][_index_of(times, when)] = written


def _cutting_files(text: dict, times: pd.DatetimeIndex, logged: np.ndarray, faults: dict,
                   feed: dict) -> dict[str, str]:
    """Wide files, one per calendar month of the logger's local clock, laid out as ``feed``
    says (column names, time column, format and zone, delimiter, lines before the header)."""
    local = times.tz_convert(feed["time_zone"])
    stamps = local.strftime(feed["time_format"])
    months = local.strftime("%Y-%m")
    layout = [(raw, iid, "reading") for raw, iid in feed["columns"].items()]
    layout += [(raw, iid, "temperature") for raw, iid in feed["temperature_columns"].items()]
    columns = [text[(instrument, what)] for _, instrument, what in layout]
    header = feed["delimiter"].join([feed["time_column"], *(raw for raw, _, _ in layout)])
    assert len(CUTTING_HEADER) == feed["skip_rows"]
    truncated = _index_of(times, faults["truncated_row_utc"])
    files: dict[str, list[str]] = {}
    for i in np.flatnonzero(logged):
        rows = files.setdefault(months[i], [*CUTTING_HEADER, header])
        row = feed["delimiter"].join([stamps[i], *(column[i] for column in columns)])
        if i == truncated:
            row = row[: faults["truncated_row_keep_chars"]]
        rows.append(row)
    return {f"wendlecombe_{month}.csv": "\n".join(rows) + "\n" for month, rows in files.items()}


def _embankment_files(text: dict, times: pd.DatetimeIndex, logged: np.ndarray,
                      feed: dict) -> dict[str, str]:
    """Long files, one per ISO week (UTC), laid out as ``feed`` says."""
    stamps = times.tz_convert(feed["time_zone"]).strftime(feed["time_format"])
    iso = times.isocalendar()
    weeks = [f"{year}-W{week:02d}" for year, week in zip(iso["year"], iso["week"])]
    sep = feed["delimiter"]
    header = sep.join([feed["time_column"], feed["instrument_column"], feed["value_column"]])
    files: dict[str, list[str]] = {}
    for i in np.flatnonzero(logged):
        rows = files.setdefault(weeks[i], [header])
        for instrument in EMBANKMENT_INSTRUMENTS:
            # the logger writes its decimal mark; fault texts are written as given
            value = text[(instrument, "reading")][i].replace(".", feed["decimal"])
            rows.append(sep.join([stamps[i], instrument, value]))
    return {f"fellhollow_{week}.csv": "\n".join(rows) + "\n" for week, rows in files.items()}


def write(files: dict[str, str], out: Path) -> int:
    """Replace the generated files in ``out`` by ``files``; return the total size [bytes]."""
    out.mkdir(parents=True, exist_ok=True)
    for stale in [*out.glob("wendlecombe_*.csv"), *out.glob("fellhollow_*.csv")]:
        stale.unlink()
    for name, content in files.items():
        (out / name).write_bytes(content.encode("ascii"))
    return sum(len(content) for content in files.values())


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--out", type=Path, default=REPOSITORY / "demo_feeds",
                        help="folder for the feed files (default: demo_feeds/)")
    parser.add_argument("--site", type=Path, default=REPOSITORY / "config" / "site.toml",
                        help="site file giving tips, collars and calibrations")
    args = parser.parse_args(argv)
    with args.site.open("rb") as handle:
        site = tomllib.load(handle)
    files = build(PARAMETERS, site)
    total = write(files, args.out)
    print(f"wrote {len(files)} files to {args.out}, total {total / 1e6:.2f} MB")
    return 0


if __name__ == "__main__":
    sys.exit(main())
