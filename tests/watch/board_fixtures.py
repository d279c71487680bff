"""Workspaces for the status board and report tests: an invented two-section site whose store
holds ten days of readings, rain, assessments (with water lines, surfaces and every method's
factor of safety), an alert, an inspection request and a back-analysis.

INVENTED DATA for the tests only (no real site). The factors of safety stored are computed by
the solver on the stored surface and water line, so a report that re-runs the methods must
find the same values.
"""

from __future__ import annotations

import json
import re
from datetime import datetime, timedelta, timezone
from pathlib import Path

import numpy as np

from solver.search import SearchSettings, every_method
from solver.section import section_to_dict
from solver.slicing import slice_surface
from solver.surfaces import CircularSurface
from watch.sections import load_section
from watch.store import utc_text
from watch.workspace import init_workspace

REPO = Path(__file__).resolve().parents[2]
NOW = datetime(2026, 1, 20, 6, 0, tzinfo=timezone.utc)
DAYS = 10
#: A circle through the face of the WC-060 cutting (section frame) [m].
CIRCLE = CircularSurface(31.0, 84.0, 20.5)
#: Rain at the gauge: 1 mm in every hour of the record [mm].
RAIN_PER_HOUR_MM = 1.0

HOSTILE_SECTION = "<script>alert(1)</script>"
HOSTILE_MATERIAL = 'Clay "><img src=x onerror=alert(2)> $\\frac{1}{$'
HOSTILE_SITE = "Site </title><script>alert(3)</script>"


def _toml(text: str) -> str:
    # JSON string escapes are valid in TOML basic strings.
    return json.dumps(text)


def site_toml(first: str, second: str, site_name: str) -> str:
    return f"""
[site]
id = "testsite"
name = {_toml(site_name)}
owner = "Invented Test Owner"
time_zone = "Europe/London"

[[section]]
id = {_toml(first)}
file = "sections/first.toml"
gauge = "RG-1"

[[section]]
id = {_toml(second)}
file = "sections/second.toml"
gauge = "RG-1"

[[piezometer]]
id = "PZ-1"
section = {_toml(first)}
offset = 24.0
tip_elevation = 64.95
collar_elevation = 69.0
water_line = "clay"
reading = "head_m"

[[rain_gauge]]
id = "RG-1"
reporting = "interval_mm"

[[level]]
name = "watch"
rank = 1

[[level]]
name = "act"
rank = 2

[[trigger]]
name = "fos-watch"
quantity = "fos"
level = "watch"
trigger = 1.30
clear = 1.35
on_delay_hours = 0.0
off_delay_hours = 0.0

[[trigger]]
name = "fos-act"
quantity = "fos"
level = "act"
trigger = 1.10
clear = 1.15
on_delay_hours = 0.0
off_delay_hours = 0.0

[[trigger]]
name = "head-watch"
quantity = "head_m"
level = "watch"
instrument = "PZ-1"
trigger = 67.5
clear = 67.0
on_delay_hours = 0.0
off_delay_hours = 0.0
"""


def _section_text(section_id: str, material: str) -> str:
    text = (REPO / "config" / "sections" / "wc_060.toml").read_text(encoding="utf-8")
    text = text.replace('id = "WC-060"', f"id = {_toml(section_id)}")
    return text.replace('"Weak clay"', _toml(material))


def make_workspace(root: Path, *, hostile: bool = False, empty: bool = False):
    """A workspace at ``root``; ``empty``: configuration only, nothing in the store;
    ``hostile``: names that try to break out of HTML, attributes and matplotlib text."""
    first, second = (HOSTILE_SECTION, "Quiet \"section\" & <b>bold</b>") if hostile else ("S-1", "S-2")
    material = HOSTILE_MATERIAL if hostile else "Weak clay"
    template = root.parent / f"{root.name}-site.toml"
    template.write_text(site_toml(first, second, HOSTILE_SITE if hostile else "Test Cutting"),
                        encoding="utf-8")
    (root / "sections").mkdir(parents=True)
    (root / "sections" / "first.toml").write_text(_section_text(first, material), encoding="utf-8")
    (root / "sections" / "second.toml").write_text(_section_text(second, material), encoding="utf-8")
    workspace = init_workspace(root, template)
    if not empty:
        with workspace.open_store() as store, store.atomic():
            fill_store(workspace, store, first, second)
    return workspace


def clay_line(section, rise: float) -> np.ndarray:
    """The design clay line raised by ``rise`` [m] inside the slope, never above the ground."""
    line = next(w for w in section.water_lines if w.name == "clay").points.copy()
    line[:, 1] = np.minimum(line[:, 1] + rise * (line[:, 0] < 34.0), section.ground_elevation(line[:, 0]) - 0.05)
    return line


def stored_fos(section, rise: float) -> dict:
    """Every method's factor of safety of CIRCLE with the clay line raised by ``rise``."""
    current = section.with_water_lines({"clay": clay_line(section, rise)})
    slices = slice_surface(current, CIRCLE, 30)
    results = every_method(slices, SearchSettings(method="spencer", n_slices=30))
    return {name: r for name, r in results.items()}


def fill_store(workspace, store, first: str, second: str) -> dict:
    conn = store.conn
    section = load_section(workspace.root / "sections" / "first.toml")
    store.record_section_version(first, section_to_dict(section), "section file sections/first.toml",
                                 utc_text(NOW - timedelta(days=DAYS + 1)))
    version_id = store.latest_section_version(first)["id"]
    file_id = store.add_file("test_feed.csv", None, "0" * 64, 100, "processed/test_feed.csv",
                             utc_text(NOW - timedelta(days=DAYS)))
    start = NOW - timedelta(days=DAYS)
    hours = DAYS * 24
    readings, rain = [], []
    for h in range(hours + 1):
        t = utc_text(start + timedelta(hours=h))
        head = 66.0 + 1.5 * h / hours
        quality = "spike" if h == hours - 5 else "ok"
        readings.append(("PZ-1", t, head, None, None, None, head, quality, file_id, h + 2))
        rain.append(("RG-1", t, RAIN_PER_HOUR_MM, RAIN_PER_HOUR_MM, "ok", None, file_id, h + 2))
    store.insert_readings(readings)
    store.insert_rainfall(rain)
    columns = {r[1] for r in conn.execute("PRAGMA table_info(assessments)")}
    facts = {}
    for day in range(DAYS + 1):
        at = start + timedelta(days=day)
        # The water rises to day 7 and falls after: the lowest factor of safety is not the
        # latest one.
        rise = 2.0 * (1.0 - abs(day - 7) / 7)
        results = stored_fos(section, rise)
        spencer = results["spencer"]
        fos = float(spencer.fos[0])
        surface = {"kind": "circle", "centre_x_m": CIRCLE.centre_x, "centre_y_m": CIRCLE.centre_y,
                   "radius_m": CIRCLE.radius, "fos": fos}
        row = {
            "section_id": first, "section_version_id": version_id, "time_utc": utc_text(at),
            "method": "spencer", "fos": fos, "converged": 1, "iterations": int(spencer.iterations[0]),
            "message": "", "surface_json": json.dumps(surface),
            "inputs_json": json.dumps({"note": "test"}), "created_utc": utc_text(at),
        }
        if "fos_by_method_json" in columns:
            row["fos_by_method_json"] = json.dumps([
                {"method": name, "fos": float(r.fos[0]), "converged": bool(r.converged[0])}
                for name, r in results.items()
            ])
        if "evaluation" in columns:
            row["evaluation"] = "full search" if day == 0 else "warm re-evaluation"
        names = ", ".join(row)
        cursor = conn.execute(f"INSERT INTO assessments ({names}) VALUES ({', '.join('?' * len(row))})",
                              list(row.values()))
        facts[cursor.lastrowid] = {name: float(r.fos[0]) for name, r in results.items()}
        line = clay_line(section, rise)
        conn.execute(
            "INSERT INTO water_lines (assessment_id, section_id, line_name, time_utc, points_json, "
            "source, fallback, fallback_reason, readings_json, created_utc) VALUES (?, ?, ?, ?, ?, ?, "
            "?, ?, ?, ?)",
            (cursor.lastrowid, first, "clay", utc_text(at), json.dumps(line.tolist()), "instruments",
             "none", "", json.dumps([{"instrument_id": "PZ-1", "time_utc": utc_text(at),
                                      "head_m": 66.0 + 0.15 * day, "source_file_id": file_id,
                                      "source_line": 24 * day + 2}]), utc_text(at)),
        )
    alert_columns = {r[1] for r in conn.execute("PRAGMA table_info(alerts)")}
    alert = {"section_id": first, "rule": "fos-watch", "level": "watch", "state": "firing",
             "message": "factor of safety at or below 1.30", "raised_utc": utc_text(NOW - timedelta(days=2)),
             "updated_utc": utc_text(NOW)}
    if "rank" in alert_columns:
        alert["rank"] = 1
    cursor = conn.execute(f"INSERT INTO alerts ({', '.join(alert)}) VALUES ({', '.join('?' * len(alert))})",
                          list(alert.values()))
    if "alert_events" in store.db.table_names():  # the board rebuilds alert states from events
        conn.execute("INSERT INTO alert_events (alert_id, time_utc, event, old_state, new_state, episode, "
                     "value, created_utc) VALUES (?, ?, 'state change', 'inactive', 'firing', 1, 1.25, ?)",
                     (cursor.lastrowid, alert["raised_utc"], alert["raised_utc"]))
    conn.execute("INSERT INTO inspections (section_id, alert_id, reason, status, requested_utc) "
                 "VALUES (?, ?, ?, ?, ?)",
                 (first, cursor.lastrowid, "walk the crest for cracks", "open",
                  utc_text(NOW - timedelta(days=2))))
    return facts


def slug(section_id: str) -> str:
    return re.sub(r"[^A-Za-z0-9_.-]", "_", section_id)
