"""The invented demo site (config/) and its generated feeds (demo_feeds/).

These are consistency checks of invented data, not checks against published references: the
generator reproduces the committed files, the instruments sit where the sections say, the
heads respond to the storm as the generator's linear-reservoir model must (a lagged rise, then
a recession), and the only readings that break the site's quality limits are the documented
deliberate faults.
"""

from __future__ import annotations

import csv
import subprocess
import sys
import tomllib
from functools import lru_cache
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

REPOSITORY = Path(__file__).resolve().parents[2]
CONFIG = REPOSITORY / "config"
FEEDS = REPOSITORY / "demo_feeds"
GENERATOR = REPOSITORY / "scripts" / "make_demo_feeds.py"
GAMMA_W = 9.81  # [kN/m3], as solver.constants.GAMMA_W, which the generator uses
FEED_PATTERNS = ("wendlecombe_*.csv", "fellhollow_*.csv")
DUPLICATE = "fellhollow_2025-W50_resent.csv"
STORM_PEAK = pd.Timestamp("2026-01-15T12:00Z")
# the scans of the deliberate spike and out-of-range reading (scripts/make_demo_feeds.py)
FAULT_TIMES = [pd.Timestamp("2025-11-08T14:30Z"), pd.Timestamp("2026-02-03T04:15Z")]


def _toml(path: Path) -> dict:
    with path.open("rb") as handle:
        return tomllib.load(handle)


@lru_cache
def _site() -> dict:
    return _toml(CONFIG / "site.toml")


@lru_cache
def _section(section_id: str) -> dict:
    (ref,) = [s for s in _site()["section"] if s["id"] == section_id]
    return _toml(CONFIG / ref["file"])


def _piezometers() -> list[dict]:
    return _site()["piezometer"]


def _feed_files() -> list[Path]:
    return sorted(path for pattern in FEED_PATTERNS for path in FEEDS.glob(pattern))


def _ground(section: dict, x: float) -> float:
    points = np.asarray(section["ground"]["points"], dtype=float)
    return float(np.interp(x, points[:, 0], points[:, 1]))


def _stratum_at(section: dict, x: float, y: float) -> dict | None:
    """The stratum containing (x, y): strata lie between the bottom of the one above (the
    ground for the first) and their own bottom; a bottom above that pinches the stratum out."""
    top = _ground(section, x)
    for stratum in section["stratum"]:
        if "bottom" in stratum:
            bottom_points = np.asarray(stratum["bottom"], dtype=float)
            bottom = min(top, float(np.interp(x, bottom_points[:, 0], bottom_points[:, 1])))
        else:
            bottom = -np.inf
        if bottom < y < top:
            return stratum
        top = bottom
    return None


def _material(section: dict, name: str) -> dict:
    (material,) = [m for m in section["material"] if m["name"] == name]
    return material


# --- reading the committed feeds back (a reader of our own, independent of watch.feeds) ------


@lru_cache
def _cutting_readings() -> pd.DataFrame:
    """All rows of the cutting logger that have the full number of fields, UTC-indexed, values
    numeric (garbage and missing markers become NaN)."""
    rows, header = [], None
    for path in sorted(FEEDS.glob("wendlecombe_*.csv")):
        with path.open(newline="") as handle:
            lines = list(csv.reader(handle))[2:]
        header = lines[0]
        rows += [row for row in lines[1:] if len(row) == len(header)]
    frame = pd.DataFrame(rows, columns=header)
    local = pd.to_datetime(frame.pop("Logger time"), format="%d/%m/%Y %H:%M")
    frame.index = local.dt.tz_localize("Europe/London", ambiguous="infer").dt.tz_convert("UTC")
    return frame.apply(pd.to_numeric, errors="coerce").replace(-9999.0, np.nan)


@lru_cache
def _embankment_readings() -> pd.DataFrame:
    frames = [
        pd.read_csv(path, sep=";", dtype=str)
        for path in sorted(FEEDS.glob("fellhollow_*.csv"))
        if path.name != DUPLICATE
    ]
    long = pd.concat(frames)
    long["value"] = pd.to_numeric(long["value"].str.replace(",", "."), errors="coerce")
    long["time"] = pd.to_datetime(long["timestamp_utc"], format="%Y-%m-%dT%H:%M:%SZ", utc=True)
    wide = long.pivot(index="time", columns="channel", values="value")
    return wide.replace(-9999.0, np.nan)


def _readings(instrument: str) -> pd.Series:
    """The readings of one instrument as written (numbers), cutting or embankment logger."""
    if instrument in ("FE210-PA", "RG-FE"):
        return _embankment_readings()[instrument]
    (column,) = [raw for raw, iid in _site()["feed"][0]["columns"].items() if iid == instrument]
    return _cutting_readings()[column]


def _head(piezometer: dict) -> pd.Series:
    """Head [m] from the readings, by the conversions of docs/formats.md section 2."""
    reading = _readings(piezometer["id"])
    kind = piezometer["reading"]
    if kind == "pore_pressure_kpa":
        return piezometer["tip_elevation"] + reading / GAMMA_W
    if kind == "depth_to_water_m":
        return piezometer["collar_elevation"] - reading
    assert kind == "vibrating_wire"
    c = piezometer["calibration"]
    (temperature_column,) = [
        raw
        for raw, iid in _site()["feed"][0]["temperature_columns"].items()
        if iid == piezometer["id"]
    ]
    temperature = _cutting_readings()[temperature_column]
    # linear calibration: p = G (R1 - R0) + K (T1 - T0), no barometric term configured
    pressure = c["gauge_factor"] * (reading - c["zero_reading"]) + c["temperature_factor"] * (
        temperature - c["zero_temperature"]
    )
    return piezometer["tip_elevation"] + pressure / GAMMA_W


def _rain_mm(gauge_id: str) -> pd.Series:
    """Rain [mm per interval] from tips, or from a cumulative total (a drop marks a reset,
    after which the new total is the interval's rain)."""
    (gauge,) = [g for g in _site()["rain_gauge"] if g["id"] == gauge_id]
    reading = _readings(gauge_id).dropna()
    if gauge["reporting"] == "tips":
        return reading * gauge["bucket_mm"]
    step = reading.diff()
    return step.where(step >= 0, reading).fillna(0.0)


# --- the generator ---------------------------------------------------------------------------


def test_generator_reproduces_the_committed_feeds_byte_for_byte(tmp_path):
    # Fixed seed and hand-formatted text: a fresh run must give exactly the committed files
    # (this also fails when the committed feeds are stale after a change of the generator).
    subprocess.run(
        [sys.executable, str(GENERATOR), "--out", str(tmp_path)],
        check=True,
        capture_output=True,
    )
    fresh = {path.name: path.read_bytes() for path in tmp_path.iterdir()}
    committed = {path.name: path.read_bytes() for path in _feed_files()}
    assert sorted(fresh) == sorted(committed)
    different = [name for name in fresh if fresh[name] != committed[name]]
    assert different == []


def test_committed_feeds_are_under_20_mb():
    total = sum(path.stat().st_size for path in FEEDS.iterdir())
    assert 0 < total < 20e6


# --- the site and section files ----------------------------------------------------------------


def test_site_file_references_resolve():
    site = _site()
    section_ids = {s["id"] for s in site["section"]}
    gauge_ids = {g["id"] for g in site["rain_gauge"]}
    for ref in site["section"]:
        assert (CONFIG / ref["file"]).is_file(), ref["file"]
        assert _section(ref["id"])["section"]["id"] == ref["id"]
        assert ref["gauge"] in gauge_ids
    for piezometer in _piezometers():
        assert piezometer["section"] in section_ids
        lines = {w["name"] for w in _section(piezometer["section"])["water_line"]}
        assert piezometer["water_line"] in lines, piezometer["id"]
    assert len(_piezometers()) == 5
    assert len({p["reading"] for p in _piezometers()}) >= 3


def test_site_and_section_files_say_the_data_are_invented():
    for path in [CONFIG / "site.toml", *sorted((CONFIG / "sections").glob("*.toml"))]:
        assert "INVENTED DEMO DATA" in path.read_text(), path.name


@pytest.mark.parametrize("piezometer", _piezometers(), ids=lambda p: p["id"])
def test_collar_on_the_ground_line_and_tip_below_it(piezometer):
    section = _section(piezometer["section"])
    assert piezometer["tip_elevation"] < piezometer["collar_elevation"]
    ground = _ground(section, piezometer["offset"])
    assert piezometer["collar_elevation"] == pytest.approx(ground, abs=0.05)


@pytest.mark.parametrize("piezometer", _piezometers(), ids=lambda p: p["id"])
def test_tip_lies_in_a_stratum_whose_pore_pressure_its_water_line_gives(piezometer):
    section = _section(piezometer["section"])
    stratum = _stratum_at(section, piezometer["offset"], piezometer["tip_elevation"])
    assert stratum is not None
    assert _material(section, stratum["material"])["water"] == piezometer["water_line"]


@pytest.mark.parametrize("section_id", ["WC-040", "WC-060", "WC-080", "FE-210"])
def test_design_water_lines_stay_below_the_ground(section_id):
    section = _section(section_id)
    for line in section["water_line"]:
        points = np.asarray(line["points"], dtype=float)
        x = np.linspace(points[0, 0], points[-1, 0], 500)
        ground = np.array([_ground(section, xi) for xi in x])
        assert np.all(np.interp(x, points[:, 0], points[:, 1]) <= ground + 1e-9), line["name"]


# --- the feeds ---------------------------------------------------------------------------------


def test_cutting_files_cross_both_clock_changes_in_local_time():
    october = (FEEDS / "wendlecombe_2025-10.csv").read_text().splitlines()
    march = (FEEDS / "wendlecombe_2026-03.csv").read_text().splitlines()
    # 2025-10-26: clocks go back at 02:00 BST, so 01:00-01:45 are written twice
    assert sum(line.startswith("26/10/2025 01:30,") for line in october) == 2
    # 2026-03-29: clocks go forward at 01:00 GMT, so no 01:xx exists
    assert not any(line.startswith("29/03/2026 01:") for line in march)
    assert sum(line.startswith("29/03/2026 02:") for line in march) == 4


def test_storm_depth_and_timing_at_the_cutting_gauge():
    rain = _rain_mm("RG-WC")
    day = rain.loc[STORM_PEAK - pd.Timedelta("12h") : STORM_PEAK + pd.Timedelta("12h")]
    assert 80.0 <= day.sum() <= 100.0
    three_hourly = rain.rolling("3h").sum()
    peak = three_hourly.loc["2026-01-14":"2026-01-16"].idxmax()
    assert abs(peak - STORM_PEAK) <= pd.Timedelta("4h")


def test_cumulative_gauge_resets_only_at_the_logger_reset_and_the_maintenance_visit():
    total = _readings("RG-FE").dropna()
    drops = total.index[total.diff() < 0]
    assert list(drops) == [
        pd.Timestamp("2026-01-01T00:00Z"),
        pd.Timestamp("2026-02-18T11:00Z"),
    ]


@pytest.mark.parametrize("piezometer", _piezometers(), ids=lambda p: p["id"])
def test_head_peaks_after_the_storm_rain_and_then_recedes(piezometer):
    (ref,) = [s for s in _site()["section"] if s["id"] == piezometer["section"]]
    rain_peak = _rain_mm(ref["gauge"]).rolling("3h").sum().loc["2026-01-14":"2026-01-16"].idxmax()
    head = _head(piezometer).dropna().rolling("2h").median()
    storm_window = head.loc["2026-01-14":"2026-01-25"]
    head_peak = storm_window.idxmax()
    assert head_peak > rain_peak
    before = head.loc[rain_peak - pd.Timedelta("1D")]
    assert storm_window.max() - before > 0.25
    ten_days_later = head.loc[head_peak + pd.Timedelta("10D") :].iloc[0]
    assert ten_days_later < storm_window.max() - 0.1


@pytest.mark.parametrize("piezometer", _piezometers(), ids=lambda p: p["id"])
def test_heads_stay_below_the_collar(piezometer):
    head = _head(piezometer).drop(FAULT_TIMES, errors="ignore")
    assert head.max() < piezometer["collar_elevation"]


def test_only_the_deliberate_faults_break_the_configured_quality_limits():
    out_of_range, spikes, flat = [], [], []
    flat_line = pd.Timedelta(hours=_site()["ingest"]["flat_line_hours"])
    for piezometer in _piezometers():
        reading = _readings(piezometer["id"]).dropna()
        low, high = piezometer["valid_range"]
        outside = reading.index[(reading < low) | (reading > high)]
        out_of_range += [(piezometer["id"], t) for t in outside]
        head = _head(piezometer).dropna()
        head = head[(reading >= low) & (reading <= high)]
        hours = head.index.to_series().diff().dt.total_seconds() / 3600
        rate = head.diff() / hours
        spikes += [(piezometer["id"], t) for t in rate.index[rate > piezometer["max_rise_rate"]]]
        runs = (reading != reading.shift()).cumsum()
        for _, run in reading.groupby(runs):
            if run.index[-1] - run.index[0] >= flat_line:
                flat.append((piezometer["id"], run.index[0]))
    assert out_of_range == [("FE210-PA", FAULT_TIMES[1])]
    assert spikes == [("WC040-PA", FAULT_TIMES[0])]
    assert flat == [("WC080-PA", pd.Timestamp("2026-02-20T06:00Z"))]


def test_the_other_deliberate_faults_are_in_the_files():
    resent = FEEDS / DUPLICATE
    assert resent.read_bytes() == (FEEDS / "fellhollow_2025-W50.csv").read_bytes()
    december = (FEEDS / "wendlecombe_2025-12.csv").read_text().splitlines()
    (truncated,) = [line for line in december if line.startswith("17/12/2025 14:30")]
    assert len(truncated) == 24 and truncated.count(",") < december[2].count(",")
    # the 2-day logger outage, and the truncated row (which our reader drops)
    times = _cutting_readings().index
    gaps = times[1:][np.diff(times) > pd.Timedelta("15min")]
    assert list(gaps) == [pd.Timestamp("2025-11-14T10:00Z"), pd.Timestamp("2025-12-17T14:45Z")]
    text = "".join(path.read_text() for path in _feed_files())
    for marker in (",-9999,", ",NAN,", ",,", "1O.52", "2..315", ";-9999\n", ";NAN\n", "5,1,3"):
        assert marker in text, marker


# --- the past slip -----------------------------------------------------------------------------


@lru_cache
def _slip() -> dict:
    return _toml(CONFIG / "slips" / "wc_060_2026-01.toml")


def test_slip_surface_ends_on_the_ground_and_runs_below_it():
    slip = _slip()
    section = _section(slip["slip"]["section"])
    points = np.asarray(slip["surface"]["points"], dtype=float)
    assert np.all(np.diff(points[:, 0]) > 0)
    for x, y in (points[0], points[-1]):
        assert y == pytest.approx(_ground(section, x), abs=0.05)
    for x, y in points[1:-1]:
        assert y < _ground(section, x)


def test_slip_surface_runs_along_the_weak_clay_through_the_observations():
    slip = _slip()
    section = _section(slip["slip"]["section"])
    points = np.asarray(slip["surface"]["points"], dtype=float)
    material = slip["back_analysis"]["material"]
    assert _material(section, material)["model"] == "drained"
    x = np.linspace(points[0, 0], points[-1, 0], 401)[1:-1]
    y = np.interp(x, points[:, 0], points[:, 1])
    in_clay = [
        (stratum := _stratum_at(section, xi, yi)) is not None and stratum["material"] == material
        for xi, yi in zip(x, y)
    ]
    # composite surface: a steep back scarp, then a long run in the weak clay out to the face
    assert np.mean(in_clay) > 0.4
    assert all(in_clay[-len(in_clay) // 3 :])
    kinds = {o["kind"] for o in slip["observation"]}
    assert {"back_scarp", "toe_bulge", "inclinometer"} <= kinds
    for observation in slip["observation"]:
        on_surface = np.interp(observation["offset"], points[:, 0], points[:, 1])
        assert observation["elevation"] == pytest.approx(on_surface, abs=0.05)


def test_slip_times_are_utc_in_the_season_and_the_slope_stood_before():
    slip = _slip()
    failed = pd.Timestamp(slip["slip"]["failed_at"])
    assert failed.tzinfo is not None and failed.utcoffset() == pd.Timedelta(0)
    assert pd.Timestamp("2025-10-01T00:00Z") < failed < pd.Timestamp("2026-04-01T00:00Z")
    for stood in slip["back_analysis"]["stood"]:
        assert pd.Timestamp(stood) < failed
    # the failure comes with the storm: the weak-clay head is higher than on the stood date
    (piezometer,) = [p for p in _piezometers() if p["section"] == slip["slip"]["section"]]
    head = _head(piezometer).dropna()
    at_failure = head.loc[:failed].iloc[-1]
    for stood in slip["back_analysis"]["stood"]:
        assert head.loc[: pd.Timestamp(stood)].iloc[-1] < at_failure - 0.2


# --- through the service's own loader, once it exists -----------------------------------------


def test_site_file_loads_through_watch_config():
    config = pytest.importorskip("watch.config")
    site = config.load_site_config(CONFIG / "site.toml")
    assert {p.id for p in site.piezometers} == {p["id"] for p in _piezometers()}
    for path in sorted(FEEDS.glob("*.csv")):
        assert site.feed_for(path.name) is not None, path.name
