"""The status board: a static, self-contained HTML site of what the store holds.

``build_board(workspace, now)`` writes ``index.html`` (every section, worst first: level, factor
of safety, trends, rain, data age, open alerts and inspections, data-quality problems), one page
per section (drawing, factor of safety through the season with trigger levels and rain,
piezometer heads, assessment history, parameter version and back-analyses) and the PNG figures
beside them in ``img/``. Pages carry their CSS inline and load nothing from elsewhere: the site
works from an intranet share or ``file://``. Every string from the configuration or the store is
escaped; every page carries the caution and says when and from which data it was made.

The board reads the store defensively: a table or column that a later stage of the service has
not created yet means "nothing to show", said on the page, never an error. :func:`collect_status`
gathers the data (also used by :mod:`watch.report`); the page writers only format it.
"""

from __future__ import annotations

import hashlib
import html
import json
import math
import os
import re
import sqlite3
from dataclasses import dataclass, field
from datetime import datetime, timedelta, timezone
from pathlib import Path

import numpy as np
import pandas as pd

from watch import assessment_status
from watch.alert_history import alert_history, alerts_as_at
from watch.caution import CAUTION
from watch.errors import UserError, WorkspaceError
from watch.formatting import number_text, short_time
from watch.inspections import open_at
from watch.lifecycle import service_state
from watch.store import parse_utc_text, utc_text
from watch.triggers import DATA_LEVEL

__all__ = [
    "AssessmentRecord",
    "Level",
    "SectionStatus",
    "SiteStatus",
    "BoardResult",
    "build_board",
    "collect_status",
    "site_levels",
    "default_board_dir",
    "section_page_name",
    "plot_figure",
    "serve_board",
    "draw_section_figure",
    "draw_fos_figure",
    "draw_heads_figure",
    "fos_series",
]

#: Folder of the board inside the workspace when no other is given.
BOARD_FOLDER = "board"
#: The "season" the section pages look back over, and in which "the season's worst" is sought:
#: half a year covers a wet season in temperate and monsoon climates alike (common practice).
SEASON = timedelta(days=183)
#: Windows of the overview's trend plots and rain totals.
SHORT_WINDOW = timedelta(hours=24)
LONG_WINDOW = timedelta(days=7)
#: Rows of the assessment history table on a section page (newest first).
HISTORY_ROWS = 200
#: Age after which a reading is stale when neither the instrument nor [ingest] says otherwise
#: [h] (the site file's documented default of stale_hours).
DEFAULT_STALE_HOURS = 6.0
#: Alert states that are still open (shown on the board as needing attention).
OPEN_ALERT_STATES = ("pending", "firing")
#: Written into the board folder; only a folder holding it (or an empty one) is written to, and
#: it lists the files of the last build so that stale pages of removed sections go away.
_MANIFEST = ".slipwatch-board"


# --------------------------------------------------------------------------------------------
# What the store holds


@dataclass(frozen=True)
class AssessmentRecord:
    """One stored assessment (a row of ``assessments``), JSON columns parsed."""

    id: int
    section_id: str
    time: datetime
    method: str
    fos: float | None
    converged: bool
    message: str
    section_version_id: int | None
    surface: dict | None
    inputs: dict
    extra: dict = field(default_factory=dict)  # columns added by later migrations

    @property
    def status(self) -> str:
        """The cycle's status (migration 3); a store older than that knew only converged."""
        stored = self.extra.get("status")
        if stored:
            return str(stored)
        return assessment_status.OK if self.converged else assessment_status.NOT_CONVERGED

    @property
    def usable(self) -> bool:
        """A factor of safety of the slope as the readings show it: the series, trends and
        changes use these alone."""
        return assessment_status.usable(self.status) and self.fos is not None

    @property
    def on_design_lines(self) -> bool:
        """Computed on the design water lines because no live reading was there."""
        return assessment_status.on_design_lines(self.status) and self.fos is not None


#: Severity cues written before every level's word, so that levels differ in a shape people
#: read in grey print and without colour vision, not in hue alone (our own set).
SEVERITY_CUES = {-1: "?", 0: "\u25cb", 1: "\u25b2", 2: "\u25b2\u25b2", 3: "\u25b2\u25b2\u25b2"}
OUT_OF_SERVICE_CUE = "\u2715"
#: What is expected of the duty engineer where the site file sets no expectation.
EXPECTATION_NO_ALERT = "No action beyond the routine watch."
EXPECTATION_DATA_ALERT = ("Safety not known: get the instruments reporting again and judge the "
                          "slope by other means meanwhile.")
EXPECTATION_NOT_ASSESSED = "Safety not known: no assessment yet; run an assessment cycle."
EXPECTATION_UNSET = "The site file sets no expectation for this level: follow the owner's procedure."


@dataclass(frozen=True)
class Level:
    """The alert level of a section as people read it: a word, its severity, and what is
    expected of whoever reads it."""

    word: str
    rank: int  # -1 safety unknown (not assessed, data alert), 0 no alert, higher is worse
    detail: str = ""
    expectation: str = ""
    #: 1..3: place of the level among the site's levels (3 for the highest); None: by rank.
    tier: int | None = None
    #: A section out of service (slipped, closed, under repair): a look of its own, never one
    #: of the owner's levels, so that a slipped section is not read as a red alert.
    out_of_service: bool = False

    @property
    def severity(self) -> int:
        """-1 unknown, 0 no alert, 1..3 the owner's levels, lowest to highest."""
        if self.rank <= 0:
            return max(self.rank, -1)
        return self.tier if self.tier is not None else min(self.rank, 3)

    @property
    def css(self) -> str:
        if self.out_of_service:
            return "lv-out"
        return "lv-none" if self.severity < 0 else f"lv-{self.severity}"

    @property
    def cue(self) -> str:
        return OUT_OF_SERVICE_CUE if self.out_of_service else SEVERITY_CUES[self.severity]


NOT_ASSESSED = Level("not assessed", -1, "no assessment stored yet", EXPECTATION_NOT_ASSESSED)
NO_ALERT = Level("no alert", 0, "", EXPECTATION_NO_ALERT)


@dataclass(frozen=True)
class SectionStatus:
    """Everything the board and the report show about one section."""

    id: str
    name: str
    gauge_id: str | None
    file: str | None
    level: Level
    history: list[AssessmentRecord]  # time order, within the season
    latest: AssessmentRecord | None
    worst: AssessmentRecord | None  # lowest factor of safety in the season
    fos_change: dict[str, float | None]  # window label -> change of FoS over it [-]
    rain_mm: dict[str, float | None]  # window label -> rain at the gauge [mm]; None: no data
    newest_reading: datetime | None
    open_alerts: list[dict]
    open_inspections: list[dict]
    data_problems: list[str]
    fos_levels: dict[str, float]  # trigger levels on the factor of safety, by label [-]
    head_levels: dict[str, float]  # trigger levels on piezometric heads, by label [m]
    instruments: list[dict]  # the section's instruments with newest reading and limits
    parameter_version: dict | None
    back_analyses: list[dict]
    calibrations: list[dict]
    notes: list[str]  # what the store does not hold yet, in words
    service_state: object = None  # watch.lifecycle.ServiceState set on the section, or None
    alert_timeline: list[dict] = field(default_factory=list)  # alert events of the season, oldest first


@dataclass(frozen=True)
class SiteStatus:
    site_id: str
    site_name: str
    owner: str
    time_zone: str
    now: datetime
    store_path: Path
    schema_version: int
    newest_reading: datetime | None
    newest_instrument: str | None
    sections: list[SectionStatus]  # worst first
    notes: list[str]
    levels: list[Level] = field(default_factory=list)  # the key: no alert, the site's, data alert


def collect_status(workspace, store, now: datetime) -> SiteStatus:
    """Gather the board's data from ``store`` (open, read-only is enough) as at ``now`` (UTC).

    Sections are those of site.toml, plus any the store knows that site.toml no longer lists.
    Worst first: highest alert level, then lowest current factor of safety; sections not yet
    assessed come after the assessed ones with an alert and before those without.
    """
    if now.tzinfo is None:
        raise ValueError(f"naive time {now!r}: give a time zone")
    now = now.astimezone(timezone.utc)
    reader = _Reader(store)
    notes: list[str] = []
    try:
        config = workspace.config()
    except UserError as error:
        config = None
        notes.append(f"site.toml could not be read ({error}); sections are listed from the store")
    # The site of site.toml: a store made by `init` also holds the example site it started
    # from, whose name and sections are not this site's.
    if config is not None:
        site = reader.one("SELECT id, name, owner, time_zone FROM sites WHERE id = ?", (config.id,)) or {}
        refs = {s.id: (s.file, s.gauge) for s in config.sections}
        known = reader.all("SELECT id, file, gauge_id FROM sections WHERE site_id = ? ORDER BY id",
                           (config.id,))
    else:
        site = reader.one("SELECT id, name, owner, time_zone FROM sites LIMIT 1") or {}
        refs, known = {}, reader.all("SELECT id, file, gauge_id FROM sections ORDER BY id")
    for row in known:
        refs.setdefault(row["id"], (row["file"], row["gauge_id"]))
    # Readings later than ``now`` exist when the board is made for a past moment (replays).
    newest = reader.one(
        "SELECT instrument_id, time_utc FROM (SELECT instrument_id, time_utc FROM readings "
        "WHERE time_utc <= ? UNION ALL SELECT gauge_id, time_utc FROM rainfall WHERE time_utc <= ?) "
        "ORDER BY time_utc DESC LIMIT 1",
        (utc_text(now), utc_text(now)),
    )
    sections = [
        _section_status(workspace, store, reader, config, section_id, file, gauge, now)
        for section_id, (file, gauge) in refs.items()
    ]
    sections.sort(key=_worst_first)
    return SiteStatus(
        site_id=site.get("id") or (config.id if config else ""),
        site_name=site.get("name") or (config.name if config else ""),
        owner=site.get("owner") or (config.owner if config else ""),
        time_zone=site.get("time_zone") or (config.time_zone if config else "UTC"),
        now=now,
        store_path=Path(store.path),
        schema_version=store.schema_version,
        newest_reading=_time(newest["time_utc"]) if newest else None,
        newest_instrument=newest["instrument_id"] if newest else None,
        sections=sections,
        notes=notes + reader.missing_notes(),
        levels=site_levels(config),
    )


def _worst_first(status: SectionStatus):
    usable = [a for a in status.history if a.usable]
    fos = usable[-1].fos if usable else math.inf
    # Unknown safety (not assessed, data alert) sits between "alert" and "no alert": nobody
    # knows the slope is safe.
    rank = 0.5 if status.level.rank < 0 else status.level.rank
    return (-rank, fos, status.id)


def _section_status(workspace, store, reader, config, section_id, file, gauge, now) -> SectionStatus:
    notes: list[str] = []
    season_start = now - SEASON
    history = reader.assessments(section_id, season_start, now)
    latest = history[-1] if history else None
    # Trends, changes and "the season's worst" rest on readings alone: a factor of safety on
    # the design water lines is not a value of the slope's state.
    assessed = [a for a in history if a.usable]
    worst = min(assessed, key=lambda a: a.fos) if assessed else None
    if not history:
        notes.append("no assessment stored in the season"
                     if reader.has("assessments") else "the store has no assessments table yet")
    windows = {"24 h": SHORT_WINDOW, "7 days": LONG_WINDOW}
    fos_change = {label: _change(assessed, now - span) for label, span in windows.items()}
    rain = {label: reader.rain_total(gauge, now - span, now) for label, span in windows.items()}
    instruments = reader.section_instruments(section_id, gauge, config, now)
    newest = max((i["newest"] for i in instruments if i["newest"] is not None), default=None)
    rules, levels = _trigger_levels(config, section_id, notes)
    open_alerts = reader.open_alerts(section_id, {name: rank for name, (rank, _) in levels.items()}, now)
    state = service_state(store, section_id, now) if reader.has("service_states") else None
    level = _level(open_alerts, latest, levels) if state is None or state.in_service else _out_of_service(state)
    problems = _data_problems(reader, instruments, latest, now)
    name = ""
    version = None
    if latest is not None and latest.section_version_id is not None:
        version = reader.section_version(latest.section_version_id)
    if version is None:
        version = reader.latest_section_version(section_id)
    if version is not None:
        name = version.get("parameters", {}).get("section", {}).get("name", "")
    if not name and config is not None and file:
        name = _section_name_from_file(workspace.root / file)
    return SectionStatus(
        id=section_id,
        name=name,
        gauge_id=gauge,
        file=file,
        level=level,
        history=history,
        latest=latest,
        worst=worst,
        fos_change=fos_change,
        rain_mm=rain,
        newest_reading=newest,
        open_alerts=open_alerts,
        open_inspections=reader.open_inspections(section_id, now),
        data_problems=problems,
        fos_levels=rules.get("fos", {}),
        head_levels=rules.get("head_m", {}),
        instruments=instruments,
        parameter_version=version,
        back_analyses=reader.back_analyses(section_id),
        calibrations=reader.calibrations(section_id),
        notes=notes,
        service_state=state,
        alert_timeline=alert_history(store, season_start, now, section_id) if reader.has("alert_events") else [],
    )


def _change(assessed: list[AssessmentRecord], start: datetime) -> float | None:
    """Change of the factor of safety from the first to the last assessment since ``start``
    on the parameter version of the last: a new version (a calibration, an edited section)
    changes the model, not the slope, so its step is no change of the slope's state."""
    inside = [a for a in assessed if a.time >= start]
    inside = [a for a in inside if a.section_version_id == inside[-1].section_version_id] if inside else []
    if len(inside) < 2:
        return None
    return inside[-1].fos - inside[0].fos


#: Rank of a slipped section: above every owner's level, so it heads the board.
SLIPPED_RANK = 100


def _out_of_service(state) -> Level:
    """A section not in service shows its state instead of a level: slipped above every
    level; closed and under repair as "safety unknown" (it is not being assessed)."""
    return Level(state.words, SLIPPED_RANK if state.state == "slipped" else -1, state.describe(),
                 "not assessed while out of service; its open alerts stay open until closed with a note",
                 out_of_service=True)


def _level(open_alerts: list[dict], latest: AssessmentRecord | None,
           levels: dict[str, tuple[int, str]] | None = None) -> Level:
    """The highest owner's level firing; else "data alert" when a data-quality alert fires
    (the slope is not being watched properly), "not assessed", or "no alert". ``levels``: the
    site's levels, {name: (rank, expectation)}."""
    levels = levels or {}
    firing = [a for a in open_alerts if a.get("state") == "firing"]
    owners = [a for a in firing if a.get("level") != DATA_LEVEL]
    if owners:
        top = max(owners, key=lambda a: a.get("rank") or 1)
        rank = max(1, top.get("rank") or 1)
        rules = ", ".join(dict.fromkeys(str(a.get("rule")) for a in owners if a.get("rank") == top.get("rank")))
        name = str(top.get("level") or "alert")
        expectation = levels.get(name, (rank, ""))[1] or EXPECTATION_UNSET
        return Level(name, rank, f"rule {rules}", expectation, tier=_tier(rank, levels))
    data = [a for a in firing if a.get("level") == DATA_LEVEL]
    if data:
        return Level("data alert", -1, ", ".join(str(a.get("rule")) for a in data),
                     EXPECTATION_DATA_ALERT)
    if latest is None:
        return NOT_ASSESSED
    pending = [a for a in open_alerts if a.get("state") == "pending"]
    if pending:
        return Level("no alert", 0, f"{len(pending)} condition(s) pending", EXPECTATION_NO_ALERT)
    return NO_ALERT


def _tier(rank: int, levels: dict[str, tuple[int, str]]) -> int | None:
    """Place of an owner's level among the site's levels: 3 for the highest (it always looks
    the gravest), 1 for the lowest below it, 2 for any between."""
    if not levels:
        return None
    ranks = {r for r, _ in levels.values()}
    if rank >= max(ranks):
        return 3
    return min(2, 1 + len({r for r in ranks if r < rank}))


def site_levels(config) -> list[Level]:
    """The board's key: "no alert", the site's levels lowest first, and "data alert", each
    with its expectation."""
    levels = _levels_of(config)
    owners = [Level(name, rank, "", expectation or EXPECTATION_UNSET, _tier(rank, levels))
              for name, (rank, expectation) in sorted(levels.items(), key=lambda kv: kv[1][0])]
    return [NO_ALERT, *owners, Level("data alert", -1, "", EXPECTATION_DATA_ALERT)]


def _levels_of(config) -> dict[str, tuple[int, str]]:
    """{level name: (rank, expectation)} of the site's levels (none when unreadable)."""
    if config is None:
        return {}
    from watch.triggers import alert_settings

    try:
        settings = alert_settings(config)
    except UserError:
        return {}
    return {name: (level.rank, level.expectation) for name, level in settings.levels.items()
            if name != DATA_LEVEL}


def _data_problems(reader, instruments, latest, now) -> list[str]:
    problems = []
    for item in instruments:
        if item["newest"] is None:
            problems.append(f"{item['id']}: no readings stored")
            continue
        age = now - item["newest"]
        if age > timedelta(hours=item["max_age_hours"]):
            problems.append(f"{item['id']}: newest reading {_age(age)} old "
                            f"(older than {item['max_age_hours']:g} h)")
        flagged = reader.flagged(item, now - LONG_WINDOW, now)
        if flagged:
            counts = ", ".join(f"{n} {quality}" for quality, n in flagged.items())
            problems.append(f"{item['id']}: {sum(flagged.values())} readings flagged in the last "
                            f"7 days ({counts})")
    if latest is not None:
        if latest.on_design_lines:
            problems.append(f"latest factor of safety ({latest.fos:.2f}) is on the design water "
                            "lines: no live readings")
        elif not latest.usable:
            problems.append(f"latest calculation {assessment_status.status_words(latest.status)}"
                            + (f": {latest.message}" if latest.message else ""))
        # A line no piezometer feeds is always its design line: that is the model, not a
        # problem of the data (the report still lists every line's source).
        fed = {i["water_line"] for i in instruments if i["kind"] == "piezometer"}
        for line in reader.water_lines(latest.id):
            if _fell_back(line) and line["line_name"] in fed:
                reason = line.get("fallback_reason") or "no reason stored"
                problems.append(f"water line '{line['line_name']}' from the {line['fallback']}: "
                                f"{reason}")
    return problems


def _fell_back(line: dict) -> bool:
    """A stored water line that did not come from all its instruments (watch.groundwater
    records the fallback used, "none" when there was none)."""
    return str(line.get("fallback") or "none").lower() not in ("none", "0", "false")


def _trigger_levels(config, section_id: str, notes: list[str]):
    """({quantity: {label: trigger value}}, {level name: (rank, expectation)}) of the owner's
    rules that apply to the section (the data-quality rules have no value worth drawing)."""
    if config is None:
        return {}, {}
    from watch.triggers import alert_settings

    try:
        settings = alert_settings(config)
        rules = settings.rules_for(config, section_id)
    except UserError as error:
        notes.append(f"trigger levels could not be read: {error}")
        return {}, {}
    values: dict[str, dict[str, float]] = {}
    for item in rules:
        if item.kind != "level":
            continue
        rule = item.rule
        label = rule.level + (f" {item.instrument}" if rule.quantity == "head_m" else "")
        values.setdefault(rule.quantity, {})[label] = float(rule.trigger)
    return values, _levels_of(config)


def _section_name_from_file(path: Path) -> str:
    from watch.sections import load_section

    try:
        return load_section(path).name
    except UserError:
        return ""


class _Reader:
    """Read-only queries that tolerate tables and columns a later migration adds."""

    def __init__(self, store):
        self.store = store
        self.conn = store.conn
        self._columns: dict[str, set[str]] = {}
        self._missing: list[str] = []

    def columns(self, table: str) -> set[str]:
        if table not in self._columns:
            rows = self.conn.execute("SELECT name FROM pragma_table_info(?)", (table,)).fetchall()
            self._columns[table] = {r[0] for r in rows}
        return self._columns[table]

    def has(self, table: str, *columns: str) -> bool:
        present = self.columns(table)
        ok = bool(present) and all(c in present for c in columns)
        if not ok:
            what = f"table {table}" if not present else f"columns {', '.join(columns)} of {table}"
            note = f"the store has no {what} yet"
            if note not in self._missing:
                self._missing.append(note)
        return ok

    def missing_notes(self) -> list[str]:
        return list(self._missing)

    def all(self, sql: str, params=()) -> list[dict]:
        try:
            cursor = self.conn.execute(sql, params)
        except sqlite3.OperationalError as error:
            if "no such" in str(error):
                note = f"the store lacks what this page needs ({error})"
                if note not in self._missing:
                    self._missing.append(note)
                return []
            raise
        names = [d[0] for d in cursor.description]
        return [dict(zip(names, row)) for row in cursor.fetchall()]

    def one(self, sql: str, params=()) -> dict | None:
        rows = self.all(sql, params)
        return rows[0] if rows else None

    # --- assessments ------------------------------------------------------------------------

    def assessments(self, section_id: str, start: datetime | None, end: datetime | None):
        if not self.has("assessments"):
            return []
        sql, params = "SELECT * FROM assessments WHERE section_id = ?", [section_id]
        if start is not None:
            sql += " AND time_utc >= ?"
            params.append(utc_text(start))
        if end is not None:
            sql += " AND time_utc <= ?"
            params.append(utc_text(end))
        rows = self.all(sql + " ORDER BY time_utc, id", params)
        return [_assessment(row) for row in rows]

    def assessment(self, assessment_id: int) -> AssessmentRecord | None:
        row = self.one("SELECT * FROM assessments WHERE id = ?", (assessment_id,))
        return _assessment(row) if row else None

    def water_lines(self, assessment_id: int) -> list[dict]:
        if not self.has("water_lines", "assessment_id", "line_name", "points_json"):
            return []
        rows = self.all("SELECT * FROM water_lines WHERE assessment_id = ? ORDER BY line_name",
                        (assessment_id,))
        for row in rows:
            row["points"] = _json(row.get("points_json"), [])
            row["readings"] = _json(row.get("readings_json"), [])
        return rows

    # --- sections and parameters ------------------------------------------------------------

    def section_version(self, version_id: int) -> dict | None:
        return _version(self.one("SELECT * FROM section_versions WHERE id = ?", (version_id,)))

    def latest_section_version(self, section_id: str) -> dict | None:
        return _version(self.one(
            "SELECT * FROM section_versions WHERE section_id = ? ORDER BY version DESC LIMIT 1",
            (section_id,),
        ))

    def back_analyses(self, section_id: str) -> list[dict]:
        """Back-analyses of the section's slips (migration 5), oldest first."""
        if not self.has("back_analyses", "section_id"):
            return []
        rows = self.all("SELECT * FROM back_analyses WHERE section_id = ? ORDER BY ran_utc, id",
                        (section_id,))
        for row in rows:
            row["best"] = _json(row.get("best_json"), None)
        return rows

    def calibrations(self, section_id: str) -> list[dict]:
        """Parameter versions a back-analysis calibrated (migration 5), oldest first."""
        if not self.has("calibrations", "section_version_id"):
            return []
        rows = self.all("SELECT * FROM calibrations WHERE section_id = ? ORDER BY created_utc, id",
                        (section_id,))
        for row in rows:
            row["strength"] = _json(row.get("strength_json"), {})
        return rows

    def cached_alternatives(self, section_id: str, version_id: int | None) -> list[dict]:
        """Surfaces kept by the section's last full search (migration 3 ``search_cache``), when
        it used the same parameter version."""
        if not self.has("search_cache", "search_json"):
            return []
        row = self.one("SELECT * FROM search_cache WHERE section_id = ?", (section_id,))
        if row is None or (version_id is not None and row.get("section_version_id") != version_id):
            return []
        data = _json(row["search_json"], {})
        return [dict(s, searched_utc=row.get("time_utc")) for s in (data.get("surfaces") or [])]

    # --- instruments and readings -----------------------------------------------------------

    def section_instruments(self, section_id: str, gauge: str | None, config, now: datetime) -> list[dict]:
        stale = config.ingest.stale_hours if config is not None else DEFAULT_STALE_HOURS
        rows = self.all("SELECT id, kind, config_json FROM instruments WHERE section_id = ? OR id = ? "
                        "ORDER BY kind, id", (section_id, gauge or ""))
        items = []
        for row in rows:
            settings = _json(row["config_json"], {})
            table, column, value, unit = (("rainfall", "gauge_id", "rain_mm", "mm")
                                          if row["kind"] == "rain_gauge"
                                          else ("readings", "instrument_id", "head_m", "m"))
            newest = self.one(f"SELECT time_utc AS t, {value} AS value, quality FROM {table} "
                              f"WHERE {column} = ? AND time_utc <= ? ORDER BY time_utc DESC LIMIT 1",
                              (row["id"], utc_text(now)))
            items.append({
                "id": row["id"], "kind": row["kind"], "table": table, "column": column,
                "newest": _time(newest["t"]) if newest and newest["t"] else None,
                "newest_value": newest["value"] if newest else None,
                "newest_quality": newest["quality"] if newest else None,
                "quantity": "rain in the interval" if row["kind"] == "rain_gauge" else "head",
                "unit": unit,
                "max_age_hours": float(settings.get("max_age_hours") or stale),
                "offset": settings.get("offset"),
                "tip_elevation": settings.get("tip_elevation"),
                "collar_elevation": settings.get("collar_elevation"),
                "water_line": settings.get("water_line"),
            })
        return items

    def flagged(self, item: dict, start: datetime, end: datetime) -> dict[str, int]:
        rows = self.all(
            f"SELECT quality, COUNT(*) AS n FROM {item['table']} WHERE {item['column']} = ? "
            "AND time_utc > ? AND time_utc <= ? AND quality != 'ok' GROUP BY quality ORDER BY quality",
            (item["id"], utc_text(start), utc_text(end)),
        )
        return {r["quality"]: r["n"] for r in rows}

    def rain_total(self, gauge: str | None, start: datetime, end: datetime) -> float | None:
        """Rain [mm] at ``gauge`` in (start, end]; None when the gauge reported nothing usable."""
        if not gauge:
            return None
        row = self.one(
            "SELECT COUNT(rain_mm) AS n, SUM(rain_mm) AS total FROM rainfall WHERE gauge_id = ? "
            "AND time_utc > ? AND time_utc <= ? AND quality = 'ok'",
            (gauge, utc_text(start), utc_text(end)),
        )
        return float(row["total"]) if row and row["n"] else None

    def daily_rain(self, gauge: str | None, start: datetime, end: datetime) -> pd.Series:
        if not gauge:
            return pd.Series(dtype=float)
        rows = self.all(
            "SELECT time_utc, rain_mm FROM rainfall WHERE gauge_id = ? AND time_utc > ? "
            "AND time_utc <= ? AND quality = 'ok' AND rain_mm IS NOT NULL ORDER BY time_utc",
            (gauge, utc_text(start), utc_text(end)),
        )
        if not rows:
            return pd.Series(dtype=float)
        frame = pd.DataFrame(rows)
        index = pd.to_datetime(frame["time_utc"], utc=True)
        return pd.Series(frame["rain_mm"].astype(float).values, index=index).resample("1D").sum()

    def heads(self, instrument_id: str, start: datetime, end: datetime) -> tuple[list, np.ndarray]:
        rows = self.all(
            "SELECT time_utc, head_m FROM readings WHERE instrument_id = ? AND time_utc >= ? "
            "AND time_utc <= ? AND quality = 'ok' AND head_m IS NOT NULL ORDER BY time_utc",
            (instrument_id, utc_text(start), utc_text(end)),
        )
        times = pd.to_datetime([r["time_utc"] for r in rows], utc=True)
        return times, np.array([r["head_m"] for r in rows], dtype=float)

    # --- alerts and inspections -------------------------------------------------------------

    def open_alerts(self, section_id: str, ranks: dict[str, int] | None, at: datetime) -> list[dict]:
        """The section's alerts that were open at ``at`` (rebuilt from their events)."""
        if not self.has("alerts", "state"):
            return []
        rows = [r for r in alerts_as_at(self.store, at, section_id) if r["state"] in OPEN_ALERT_STATES]
        rows.sort(key=lambda r: (r["raised_utc"], r["id"]), reverse=True)
        for row in rows:
            state = _json(row.get("state_json"), {})
            if row.get("rank") is None and isinstance(state, dict):
                row["rank"] = state.get("rank")
            if row.get("rank") is None:
                row["rank"] = (ranks or {}).get(row.get("level"))
        return rows

    def open_inspections(self, section_id: str, at: datetime) -> list[dict]:
        """The section's inspection requests that were open at ``at``, newest first."""
        if not self.has("inspections", "status"):
            return []
        return open_at(self.store.inspection_rows(section_id=section_id), at)[::-1]

    def inspections_between(self, section_id: str, start: datetime, end: datetime) -> list[dict]:
        if not self.has("inspections", "requested_utc"):
            return []
        return self.all(
            "SELECT * FROM inspections WHERE section_id = ? AND requested_utc <= ? "
            "AND (completed_utc IS NULL OR completed_utc >= ?) ORDER BY requested_utc, id",
            (section_id, utc_text(end), utc_text(start)),
        )


_ASSESSMENT_CORE = {"id", "section_id", "time_utc", "method", "fos", "converged", "message",
                    "section_version_id", "surface_json", "inputs_json"}


def _assessment(row: dict) -> AssessmentRecord:
    fos = row.get("fos")
    return AssessmentRecord(
        id=int(row["id"]),
        section_id=row["section_id"],
        time=_time(row["time_utc"]),
        method=row.get("method") or "",
        fos=None if fos is None or not math.isfinite(fos) else float(fos),
        converged=bool(row.get("converged")),
        message=row.get("message") or "",
        section_version_id=row.get("section_version_id"),
        surface=_json(row.get("surface_json"), None),
        inputs=_json(row.get("inputs_json"), {}) or {},
        extra={k: v for k, v in row.items() if k not in _ASSESSMENT_CORE},
    )


def _version(row: dict | None) -> dict | None:
    if row is None:
        return None
    return dict(row, parameters=_json(row.get("parameters_json"), {}) or {})


def _json(text, default):
    if text is None or text == "":
        return default
    try:
        return json.loads(text)
    except (TypeError, json.JSONDecodeError):
        return default


def _time(text: str) -> datetime:
    try:
        return parse_utc_text(text)
    except ValueError:
        return pd.Timestamp(text).tz_convert("UTC").to_pydatetime()


def _age(span: timedelta) -> str:
    """A duration in words people read at a glance: '3 d 4 h', '5 h 10 min', '12 min'."""
    minutes = int(span.total_seconds() // 60)
    if minutes < 0:
        return f"{-minutes} min in the future"
    days, rest = divmod(minutes, 24 * 60)
    hours, minutes = divmod(rest, 60)
    if days:
        return f"{days} d {hours} h"
    if hours:
        return f"{hours} h {minutes} min"
    return f"{minutes} min"


# --------------------------------------------------------------------------------------------
# Sections, surfaces and water lines of an assessment (for drawings, here and in the report)


def section_of(workspace, store, status: SectionStatus, assessment: AssessmentRecord | None):
    """(Section, where it came from) for drawing ``assessment``: the parameter version it
    recorded, else the newest stored version, else the section file; (None, reason) when none
    reads."""
    from solver.errors import SectionError
    from solver.section import section_from_dict
    from watch.parameters import current_section

    version = status.parameter_version
    if assessment is not None and assessment.section_version_id is not None:
        version = _Reader(store).section_version(assessment.section_version_id) or version
    if version is not None:
        try:
            section = section_from_dict(version["parameters"])
            return section, f"parameter version {version.get('version')} ({version.get('provenance')})"
        except (SectionError, KeyError, TypeError) as error:
            return None, f"stored parameter version does not read as a section: {error}"
    try:
        section, _ = current_section(workspace, store, status.id)
    except UserError as error:
        return None, str(error)
    return section, f"section file {status.file} (no parameter version stored)"


def surface_from_json(data) -> tuple[object, float | None] | None:
    """(surface, fos) from a stored surface: a circle (centre and radius) or a polyline
    (points), with keys as ``watch.analysis.AnalysisResult.to_dict`` writes them (``_m``
    suffixes) or bare; None when ``data`` holds neither."""
    from solver.surfaces import CircularSurface, PolylineSurface

    if not isinstance(data, dict):
        return None

    def get(*keys):
        return next((data[k] for k in keys if data.get(k) is not None), None)

    fos = get("fos")
    centre_x, centre_y = get("centre_x_m", "centre_x"), get("centre_y_m", "centre_y")
    radius, points = get("radius_m", "radius"), get("points_m", "points")
    try:
        if None not in (centre_x, centre_y, radius) and all(
            math.isfinite(float(v)) for v in (centre_x, centre_y, radius)
        ):
            return CircularSurface(float(centre_x), float(centre_y), float(radius)), fos
        if points is not None:
            return PolylineSurface(np.asarray(points, dtype=float)), fos
    except (TypeError, ValueError):
        return None
    return None


def critical_and_alternatives(assessment: AssessmentRecord | None, store=None):
    """(critical surface or None, [(surface, fos), ...] next-best) of an assessment.

    The next-best surfaces are those the assessment stored itself (``alternatives``), else the
    other surfaces kept by the section's last full search with the same parameter version
    (their factors of safety are from that search)."""
    if assessment is None or assessment.surface is None:
        return None, []
    data = assessment.surface
    parsed = surface_from_json(data.get("critical", data) if isinstance(data, dict) else data)
    critical = parsed[0] if parsed else None
    candidates = data.get("alternatives") if isinstance(data, dict) else None
    if not candidates and store is not None:
        candidates = _Reader(store).cached_alternatives(assessment.section_id,
                                                        assessment.section_version_id)
    others = []
    for item in candidates or []:
        found = surface_from_json(item)
        if found is None or found[1] is None or _same_surface(found[0], critical):
            continue
        others.append(found)
    return critical, others


def _same_surface(a, b, tolerance: float = 0.01) -> bool:
    """True when two surfaces coincide within ``tolerance`` [m]."""
    if a is None or b is None or type(a) is not type(b):
        return False
    if hasattr(a, "radius"):
        return all(abs(x - y) <= tolerance for x, y in ((a.centre_x, b.centre_x),
                                                         (a.centre_y, b.centre_y), (a.radius, b.radius)))
    pa, pb = np.asarray(a.points), np.asarray(b.points)
    return pa.shape == pb.shape and bool(np.all(np.abs(pa - pb) <= tolerance))


def water_lines_of(store, section, assessment: AssessmentRecord | None) -> tuple[dict, str]:
    """Water lines {name: points (k, 2)} of an assessment that belong to ``section``, and where
    they came from: the stored ``water_lines`` rows, else the assessment's inputs, else none."""
    if assessment is None or section is None:
        return {}, "no assessment"
    known = {line.name for line in section.water_lines}
    rows = _Reader(store).water_lines(assessment.id)
    lines = {r["line_name"]: np.asarray(r["points"], dtype=float) for r in rows
             if r["line_name"] in known and len(r["points"]) >= 2}
    if lines:
        return lines, "stored water lines of the assessment"
    stored = assessment.inputs.get("water_lines") if isinstance(assessment.inputs, dict) else None
    if isinstance(stored, dict):
        for name, value in stored.items():
            points = (value.get("points_m", value.get("points")) if isinstance(value, dict)
                      else value)
            if name in known and points is not None and len(points) >= 2:
                lines[name] = np.asarray(points, dtype=float)
        if lines:
            return lines, "water lines in the assessment's inputs"
    return {}, "no water lines stored with the assessment"


# --------------------------------------------------------------------------------------------
# The site


@dataclass(frozen=True)
class BoardResult:
    out: Path
    pages: list[Path]
    images: list[Path]
    status: SiteStatus

    def to_dict(self) -> dict:
        return {
            "out": str(self.out),
            "index": str(self.out / "index.html"),
            "generated_utc": utc_text(self.status.now),
            "pages": [str(p) for p in self.pages],
            "images": [str(p) for p in self.images],
            "sections": [
                {"section_id": s.id, "level": s.level.word, "level_rank": s.level.rank,
                 "service_state": s.service_state.state if s.service_state else "in-service",
                 "fos": s.latest.fos if s.latest else None,
                 "assessment_status": s.latest.status if s.latest else None,
                 "fos_basis": assessment_status.fos_basis(s.latest.status) if s.latest else None,
                 "method": s.latest.method if s.latest else None,
                 "assessed_utc": utc_text(s.latest.time) if s.latest else None,
                 "page": section_page_name(s.id)}
                for s in self.status.sections
            ],
            "caution": CAUTION,
        }


def default_board_dir(workspace) -> Path:
    return Path(workspace.root) / BOARD_FOLDER


def section_page_name(section_id: str) -> str:
    """File name of a section's page: the id when it is a safe file name, else a cleaned id
    with a short hash (two ids never share a page)."""
    clean = re.sub(r"[^A-Za-z0-9_.-]", "_", section_id).strip(".") or "section"
    if clean != section_id:
        clean = f"{clean[:40]}-{hashlib.sha256(section_id.encode()).hexdigest()[:8]}"
    return f"section-{clean}.html"


def build_board(workspace, now: datetime, out: Path | None = None, *, store=None) -> BoardResult:
    """Write the status board of ``workspace`` as at ``now`` into ``out`` (default
    ``<workspace>/board``) and return what was written.

    ``store`` may be an open store (the daemon's, after a cycle); otherwise the workspace's
    store is opened read-only. ``out`` must be empty, missing, or a board folder made before.
    """
    out = Path(out) if out is not None else default_board_dir(workspace)
    _check_out(out)
    if store is None:
        with workspace.open_store(read_only=True) as opened:
            return build_board(workspace, now, out, store=opened)
    status = collect_status(workspace, store, now)
    pages, images = _write_site(workspace, store, status, out)
    _finish_manifest(out, [*pages, *images])
    return BoardResult(out, pages, images, status)


def _check_out(out: Path) -> None:
    if out.exists() and not out.is_dir():
        raise WorkspaceError(f"board folder {out} is a file; choose a folder with --out")
    if out.is_dir() and not (out / _MANIFEST).exists() and any(out.iterdir()):
        raise WorkspaceError(
            f"folder {out} holds other files and no board made by slipwatch; choose an empty or "
            "new folder with --out (the board never overwrites files it did not make)"
        )
    (out / "img").mkdir(parents=True, exist_ok=True)
    (out / _MANIFEST).touch()


def _finish_manifest(out: Path, written: list[Path]) -> None:
    """Remove the files of the previous build that this build did not write again (pages of
    sections no longer configured), then record this build's files."""
    manifest = out / _MANIFEST
    keep = {p.resolve() for p in written}
    for line in manifest.read_text(encoding="utf-8").splitlines():
        old = (out / line).resolve()
        if old not in keep and old.is_file() and out.resolve() in old.parents:
            old.unlink()
    names = sorted(str(p.resolve().relative_to(out.resolve())) for p in written)
    _write_text(manifest, "\n".join(names) + "\n")


def _write_text(path: Path, text: str) -> None:
    """Write through a temporary file and rename, so that a served page is never half written."""
    temporary = path.with_name(f".{path.name}.tmp")
    temporary.write_text(text, encoding="utf-8")
    os.replace(temporary, path)


def escape(value) -> str:
    """Any value as HTML text (quotes escaped too, so it is safe inside attributes)."""
    return html.escape("" if value is None else str(value), quote=True)


# --------------------------------------------------------------------------------------------
# Pages

#: The board's own look: plain and high-contrast. Each level differs from the others in three
#: ways, so that it reads at a glance in colour, in grey print and without colour vision: the
#: lightness of its badge (white, pale yellow, orange, deep crimson with white text, from no
#: alert to the highest level: every step a different grey), its severity cue (triangles
#: counting the level up) and its word; the row's left bar grows with the level too.
_CSS = """
body { font-family: system-ui, -apple-system, "Segoe UI", sans-serif; margin: 0; color: #1a1a1a;
       background: #fafaf7; line-height: 1.4; }
header { background: #23303b; color: #ffffff; padding: 0.8em 1.5em; }
header a, header .small { color: #e8edf2; }
header h1 { margin: 0.1em 0; font-size: 1.5em; }
main { padding: 0.5em 1em 2em; max-width: 1500px; box-sizing: border-box; }
.caution { border: 2px solid #23303b; background: #ffffff; padding: 0.5em 0.8em; margin: 0.8em 0;
           font-weight: 600; }
.generated { font-size: 0.9em; color: #333333; }
.notes { background: #fff8e0; border-left: 6px solid #E69F00; padding: 0.4em 0.9em; }
.empty { font-size: 1.1em; background: #ffffff; border: 1px dashed #777777; padding: 1em; }
table { border-collapse: collapse; background: #ffffff; margin: 0.5em 0 1.2em; }
th, td { border: 1px solid #c8c8c8; padding: 0.3em 0.45em; vertical-align: top; text-align: left; }
th { background: #e9ecef; }
td.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
/* A wide table scrolls inside its own frame: no column is ever cut off or hidden. */
.frame { overflow-x: auto; max-width: 100%; }
.badge { display: inline-block; padding: 0.15em 0.5em; border-radius: 0.2em; font-weight: 700;
         text-transform: uppercase; letter-spacing: 0.04em; border: 2px solid #1a1a1a;
         white-space: nowrap; -webkit-print-color-adjust: exact; print-color-adjust: exact; }
.badge .cue { letter-spacing: 0; margin-right: 0.35em; }
.lv-none { background: #d9d9d9; border-style: dashed; }
.lv-0 { background: #ffffff; border-color: #5a5a5a; font-weight: 600; }
.lv-1 { background: #fde68a; }
.lv-2 { background: #e08600; }
.lv-3 { background: #7f0a1f; color: #ffffff; border: 4px double #000000; }
.lv-out { background: repeating-linear-gradient(45deg, #2f2f2f 0 6px, #555555 6px 12px);
          color: #ffffff; border: 3px solid #000000; }
.expect { font-size: 0.85em; color: #1a1a1a; margin-top: 0.3em; max-width: 14em; }
.expect-wide { max-width: 60em; }
tr.row-lv-1 td:first-child { border-left: 4px solid #1a1a1a; }
tr.row-lv-2 td:first-child { border-left: 8px solid #1a1a1a; }
tr.row-lv-3 td:first-child { border-left: 12px solid #7f0a1f; }
tr.row-lv-out td:first-child { border-left: 12px solid #2f2f2f; }
.small { font-size: 0.85em; color: #333333; }
.design { font-style: italic; }
figure { margin: 1em 0; }
figure img { max-width: 100%; height: auto; border: 1px solid #c8c8c8; background: #ffffff; }
figcaption { font-size: 0.9em; color: #333333; max-width: 70em; }
ul.problems { margin: 0; padding-left: 1.1em; }
/* The alert and data-quality columns carry sentences: give them room to read. */
table.overview td:nth-last-child(-n+2) { min-width: 12em; max-width: 22em; }
table.overview img { width: 150px; height: auto; }
@media print { .frame { overflow: visible; } }
"""

_CSP = "default-src 'none'; img-src 'self' data:; style-src 'unsafe-inline'"


def _write_site(workspace, store, status: SiteStatus, out: Path) -> tuple[list[Path], list[Path]]:
    import matplotlib

    images: list[Path] = []
    pages: list[Path] = []
    # Names come from users: never let matplotlib read "$...$" in them as mathematics.
    with matplotlib.rc_context({"text.parse_math": False}):
        trends = {s.id: _trend_images(s, out, status.now, images) for s in status.sections}
        for section in status.sections:
            figures = _section_images(workspace, store, status, section, out, images)
            path = out / section_page_name(section.id)
            _write_text(path, _section_page(status, section, figures))
            pages.append(path)
    index = out / "index.html"
    _write_text(index, _overview_page(status, trends))
    return [index, *pages], images


def _image_stem(section_id: str) -> str:
    return section_page_name(section_id)[len("section-"):-len(".html")]


def _trend_images(section: SectionStatus, out: Path, now: datetime, images: list) -> dict:
    from watch.plots import plot_fos_trend

    found = {}
    for label, span, tag in (("24 h", SHORT_WINDOW, "24h"), ("7 days", LONG_WINDOW, "7d")):
        inside, _, breaks = fos_series([a for a in section.history if a.time >= now - span])
        if len(inside) < 2:
            continue
        path = out / "img" / f"{_image_stem(section.id)}-trend-{tag}.png"
        plot_fos_trend([a.time for a in inside], np.array([a.fos for a in inside]), path,
                       window_label=f"last {label}", levels=section.fos_levels, breaks=breaks)
        images.append(path)
        found[label] = path
    return found


def _section_images(workspace, store, status: SiteStatus, section: SectionStatus, out: Path,
                    images: list) -> dict[str, tuple[Path | None, str]]:
    """Figures of a section page: {key: (PNG or None, caption or the reason there is none)}."""
    stem = _image_stem(section.id)
    figures = {
        "section": draw_section_figure(workspace, store, section, section.latest,
                                       out / "img" / f"{stem}-section.png", other=section.worst),
        "fos": draw_fos_figure(store, section, section.history, status.now - SEASON, status.now,
                               out / "img" / f"{stem}-fos.png"),
        "heads": draw_heads_figure(store, section, status.now - SEASON, status.now,
                                   out / "img" / f"{stem}-heads.png"),
    }
    images += [path for path, _ in figures.values() if path is not None]
    return figures


def draw_section_figure(workspace, store, section: SectionStatus, assessment, path: Path, *,
                        other=None, line_word: str = "now") -> tuple[Path | None, str]:
    """Draw the section with the water lines and slip surfaces of ``assessment`` (and the
    water lines of ``other``, e.g. the season's lowest factor of safety) to ``path``.

    Returns (path, caption), or (None, why there is no drawing)."""
    from solver.errors import SolverError
    from watch.plots import plot_section

    drawing, source = section_of(workspace, store, section, assessment)
    if drawing is None:
        return None, f"No drawing: {source}."
    lines, lines_source = water_lines_of(store, drawing, assessment)
    other_lines = {}
    if other is not None and assessment is not None and other.id != assessment.id:
        # Only the lines that moved: an unchanged (e.g. design) line would be drawn twice.
        other_lines = {name: points for name, points in water_lines_of(store, drawing, other)[0].items()
                       if not _same_line(points, lines.get(name))}
    critical, alternatives = critical_and_alternatives(assessment, store)
    title = f"Section {section.id}"
    if assessment is not None and assessment.fos is not None:
        title += (f": factor of safety {assessment.fos:.2f} ({assessment.method}) at "
                  f"{_when(assessment.time)}")
        if assessment.on_design_lines:
            title += "\non the DESIGN water lines: no live readings"
    piezometers = _piezometers_drawn(store, section, assessment)
    try:
        plot_section(
            drawing.with_water_lines(lines) if lines else drawing, path, surface=critical,
            title=title, alternatives=alternatives[:3], piezometers=piezometers,
            line_label=f"Water line '{{name}}' {line_word}" if lines else "Design water line '{name}'",
            other_lines=other_lines,
            other_label=(f"Water line '{{name}}' at FoS {other.fos:.2f} "
                         f"({other.time:%Y-%m-%d})" if other_lines else ""),
        )
    except (SolverError, UserError, ValueError) as error:
        return None, f"No drawing: {error}."
    caption = [f"Section drawn from {source}."]
    if assessment is None:
        caption.append("No assessment yet: the design water lines of the section are drawn.")
    else:
        caption.append(f"Water lines: {lines_source}.")
        if critical is None:
            caption.append("The assessment stored no slip surface.")
        else:
            caption.append("Thick black line: critical slip surface"
                           + ("; thin grey: the next-best surfaces." if alternatives else "."))
    if other_lines:
        caption.append(f"Light blue with triangles: water lines at the lowest factor of safety "
                       f"({other.fos:.2f} at {_when(other.time)}).")
    if piezometers:
        caption.append("Piezometers: black line from collar to tip (filled square); open blue "
                       "triangle: head of the reading the water lines were drawn through.")
    if drawing.surcharges:
        caption.append("Brown arrows: surcharges, with their pressure.")
    return path, " ".join(caption)


def _piezometers_drawn(store, section: SectionStatus, assessment) -> list[dict]:
    """The section's piezometers with the head of the reading each water line of
    ``assessment`` was drawn through (None when it used none of that instrument)."""
    heads = {}
    if assessment is not None:
        for line in _Reader(store).water_lines(assessment.id):
            for reading in line.get("readings") or []:
                instrument = reading.get("instrument_id", reading.get("instrument"))
                if instrument is not None and reading.get("head_m") is not None:
                    heads[instrument] = float(reading["head_m"])
    return [dict(item, head_m=heads.get(item["id"])) for item in section.instruments
            if item["kind"] == "piezometer"]


def _same_line(a: np.ndarray, b: np.ndarray | None, tolerance: float = 0.01) -> bool:
    """True when two water lines lie within ``tolerance`` [m] of each other everywhere."""
    if b is None:
        return False
    x = np.union1d(a[:, 0], b[:, 0])
    return bool(np.all(np.abs(np.interp(x, *a.T) - np.interp(x, *b.T)) <= tolerance))


def fos_series(history: list[AssessmentRecord]):
    """(results on live readings, results on the design water lines, breaks) of assessments
    in time order: ``breaks[i]`` is True when an assessment that is not on live readings lies
    between the i-th and the next result on live readings, or when the two rest on different
    parameter versions: there the series must stop."""
    usable, design, breaks = [], [], []
    between = False
    for a in history:
        if a.usable:
            if usable:
                breaks.append(between or a.section_version_id != usable[-1].section_version_id)
            usable.append(a)
            between = False
        else:
            between = True
            if a.on_design_lines:
                design.append(a)
    return usable, design, breaks


def draw_fos_figure(store, section: SectionStatus, history, start: datetime, end: datetime,
                    path: Path, *, events: dict | None = None) -> tuple[Path | None, str]:
    """Factor of safety of ``history`` with the trigger levels and daily rain, to ``path``."""
    from watch.plots import plot_fos_history

    assessed, design, breaks = fos_series(history)
    if not assessed and not design:
        return None, "No factor of safety stored in the period yet."
    first = min(a.time for a in assessed + design)
    # Rain over the span of the assessments (and the day before the first), not the window.
    rain = _Reader(store).daily_rain(section.gauge_id, max(start, first - timedelta(days=1)), end)
    plot_fos_history(
        section.id, [a.time for a in assessed], np.array([a.fos for a in assessed]), path,
        method=(assessed or design)[-1].method, rain_times=rain.index, rain_mm=rain.values,
        rain_label=f"Rain {section.gauge_id}\n[mm/day]" if section.gauge_id else "Rain\n[mm/day]",
        levels=section.fos_levels, events=events, breaks=breaks,
        design_times=[a.time for a in design], design_fos=[a.fos for a in design],
    )
    return path, (f"Factor of safety of {len(assessed)} assessments on live readings (black line; "
                  "it stops where readings stopped)"
                  + (f"; {len(design)} on the design water lines because no live reading was "
                     "there (hollow grey squares: not a result of the readings)" if design else "")
                  + ("; trigger levels as dashed lines in orange-red" if section.fos_levels else
                     " (no trigger levels on the factor of safety configured)")
                  + (f"; daily rain at gauge {section.gauge_id}." if len(rain) else
                     "; no rain stored for the section's gauge."))


def draw_heads_figure(store, section: SectionStatus, start: datetime, end: datetime,
                      path: Path) -> tuple[Path | None, str]:
    """Piezometric heads of the section's piezometers with the head trigger levels, to ``path``."""
    from watch.plots import plot_heads

    reader = _Reader(store)
    series = {}
    for item in section.instruments:
        if item["kind"] == "piezometer":
            times, heads = reader.heads(item["id"], start, end)
            if len(heads):
                series[item["id"]] = (times, heads)
    if not series:
        return None, "No piezometer readings of the section in the period."
    plot_heads(f"Section {section.id}: piezometric heads (readings of quality 'ok')", series,
               path, levels=section.head_levels)
    return path, ("Piezometric head of each piezometer of the section (solid lines; a line stops "
                  "where the readings stopped)"
                  + ("; trigger levels on head as dashed lines in orange-red." if section.head_levels
                     else " (no trigger levels on head configured)."))


def plot_figure(workspace, kind: str, section_id: str, start: datetime, end: datetime,
                now: datetime, out: Path | None = None) -> Path:
    """Write one figure of a section for the period [start, end] as at ``now``: ``kind`` is
    "section" (drawing at the period's lowest factor of safety, with the water lines of its
    last assessment), "fos" or "heads". Returns the PNG written."""
    import matplotlib

    kinds = ("section", "fos", "heads")
    if kind not in kinds:
        raise UserError(f"unknown figure {kind!r} (known: {', '.join(kinds)})")
    if end <= start:
        raise UserError(f"period ends ({utc_text(end)}) before it starts ({utc_text(start)})")
    out = Path(out) if out is not None else (
        Path(workspace.root) / "reports" / f"{kind}_{_image_stem(section_id)}.png")
    if not out.parent.is_dir():
        raise UserError(f"folder {out.parent} does not exist; create it or choose another --out")
    with workspace.open_store(read_only=True) as store, matplotlib.rc_context(
        {"text.parse_math": False}
    ):
        status = collect_status(workspace, store, now)
        section = next((s for s in status.sections if s.id == section_id), None)
        if section is None:
            known = ", ".join(s.id for s in status.sections) or "none"
            raise UserError(f"section {section_id!r} is not in site.toml or the store (known: {known})")
        history = _Reader(store).assessments(section_id, start, end)
        if kind == "section":
            assessed = [a for a in history if a.usable]
            worst = min(assessed, key=lambda a: a.fos) if assessed else None
            latest = history[-1] if history else None
            path, why = draw_section_figure(workspace, store, section, worst or latest, out,
                                            other=latest, line_word="at the lowest FoS")
        elif kind == "fos":
            path, why = draw_fos_figure(store, section, history, start, end, out)
        else:
            path, why = draw_heads_figure(store, section, start, end, out)
    if path is None:
        raise UserError(f"section {section_id}: {why}")
    return path


def _servable(folder: Path, path: Path) -> Path | None:
    """The file the board server may send for ``path`` (a request translated into the folder):
    a regular file really inside ``folder`` (no link leads out of it) whose name and folders
    below ``folder`` start with no dot; a folder means its index.html. None otherwise."""
    root = Path(os.path.realpath(folder))
    lexical = Path(os.path.abspath(path))
    try:
        parts = lexical.relative_to(os.path.abspath(folder)).parts
    except ValueError:
        return None
    if any(part.startswith(".") for part in parts):
        return None
    if lexical.is_dir():
        lexical = lexical / "index.html"
    real = Path(os.path.realpath(lexical))
    if root not in real.parents or not real.is_file():
        return None
    return real


def serve_board(folder: Path, host: str = "127.0.0.1", port: int = 0):
    """An HTTP server of the board folder (static files, GET and HEAD only), not yet started:
    call ``serve_forever()``. Listens on ``host`` (this computer only by default). It sends
    only regular files inside the folder: no dot-files, nothing reached through a link that
    leads out of the folder (see :func:`_servable`)."""
    import functools
    from http.server import SimpleHTTPRequestHandler, ThreadingHTTPServer

    class Handler(SimpleHTTPRequestHandler):
        def send_head(self):
            if _servable(Path(self.directory), Path(self.translate_path(self.path))) is None:
                self.send_error(404, "File not found")
                return None
            return super().send_head()

        def end_headers(self):
            # Pages change after every cycle: a browser must not show yesterday's board.
            self.send_header("Cache-Control", "no-store")
            self.send_header("X-Content-Type-Options", "nosniff")
            super().end_headers()

        def list_directory(self, path):
            self.send_error(404, "No listing")
            return None

    handler = functools.partial(Handler, directory=str(folder))
    try:
        return ThreadingHTTPServer((host, port), handler)
    except OSError as error:
        raise UserError(f"cannot listen on {host}:{port}: {error}") from None


def _page(title: str, heading: str, body: str, status: SiteStatus, back: bool) -> str:
    nav = '<p><a href="index.html">&larr; All sections</a></p>' if back else ""
    site = escape(status.site_name or status.site_id or "slipwatch")
    return (
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
        "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n"
        f"<meta http-equiv=\"Content-Security-Policy\" content=\"{_CSP}\">\n"
        # An empty icon: browsers would otherwise ask the server for /favicon.ico.
        "<link rel=\"icon\" href=\"data:,\">\n"
        f"<title>{escape(title)}</title>\n<style>{_CSS}</style>\n</head>\n<body>\n"
        f"<header><div class=\"small\">slipwatch status board &middot; {site}</div>"
        f"<h1>{heading}</h1></header>\n<main>\n{nav}"
        f"<p class=\"caution\">{escape(CAUTION)}</p>\n"
        f"<p class=\"generated\">{_generated(status)}</p>\n{body}\n"
        f"<p class=\"caution\">{escape(CAUTION)}</p>\n</main>\n</body>\n</html>\n"
    )


def _generated(status: SiteStatus) -> str:
    text = (f"Generated at {_when(status.now, status.time_zone)} from store "
            f"{status.store_path.resolve()} (schema version {status.schema_version}); ")
    if status.newest_reading is None:
        text += "the store holds no readings yet."
    else:
        text += (f"newest reading {_when(status.newest_reading)} ({status.newest_instrument}), "
                 f"{_age(status.now - status.newest_reading)} before generation.")
    return escape(text)


def _when(moment: datetime | None, zone: str | None = None) -> str:
    if moment is None:
        return "never"
    text = moment.astimezone(timezone.utc).strftime("%Y-%m-%d %H:%M UTC")
    if zone and zone != "UTC":
        try:
            from zoneinfo import ZoneInfo

            text += moment.astimezone(ZoneInfo(zone)).strftime(f" (%H:%M {zone})")
        except (KeyError, ValueError):
            pass
    return text


def _badge(level: Level) -> str:
    return (f'<span class="badge {level.css}"><span class="cue" aria-hidden="true">{escape(level.cue)}'
            f'</span>{escape(level.word)}</span>')


def _expectation(level: Level, wide: bool = False) -> str:
    """What is expected of the reader at this level, beside its badge."""
    if not level.expectation:
        return ""
    return (f'<div class="expect{" expect-wide" if wide else ""}"><strong>Expected:</strong> '
            f"{escape(level.expectation)}</div>")


def _fos_text(value: float | None) -> str:
    return "&ndash;" if value is None or not math.isfinite(value) else f"{value:.2f}"


def _signed(value: float | None) -> str:
    return ("no trend: fewer than 2 assessments in the window" if value is None
            else f"change {round(value, 2) + 0.0:+.2f}")  # never "-0.00"


def _overview_page(status: SiteStatus, trends: dict) -> str:
    parts = []
    heading = "Status of the sections" + (f" &ndash; {escape(status.site_name)}"
                                          if status.site_name else "")
    sections = status.sections
    if status.owner:
        parts.append(f"<p>Owner: {escape(status.owner)}</p>")
    if status.notes:
        parts.append("<div class=\"notes\"><p>Not shown because the store does not hold it "
                     "yet:</p><ul>" + "".join(f"<li>{escape(n)}</li>" for n in status.notes)
                     + "</ul></div>")
    if not sections:
        parts.append("<p class=\"empty\">No sections: site.toml lists none and the store knows "
                     "none. Add <code>[[section]]</code> entries to site.toml (docs/formats.md, "
                     "section 2).</p>")
        return _page("Status board", heading, "\n".join(parts), status, False)
    if status.newest_reading is None:
        parts.append("<p class=\"empty\">The store holds no readings yet: put feed files in "
                     "incoming/ and run <code>slipwatch ingest</code>.</p>")
    if not any(s.history for s in sections):
        parts.append("<p class=\"empty\">The store holds no assessments in the season yet: "
                     "factors of safety appear here after the first assessment cycle.</p>")
    counts = {}
    for s in sections:
        counts[s.level.word] = counts.get(s.level.word, 0) + 1
    parts.append("<p>" + escape(f"{len(sections)} section(s), worst first: " + ", ".join(
        f"{n} {word}" for word, n in counts.items())) + ".</p>")
    rows = []
    for s in sections:
        fos_cell = _fos_cell(s)
        trend_cells = []
        for label in ("24 h", "7 days"):
            image = trends.get(s.id, {}).get(label)
            cell = (f"<img src=\"img/{escape(image.name)}\" width=\"308\" height=\"126\" "
                    f"alt=\"{escape(f'Factor of safety of section {s.id} over the last {label}')}\">"
                    "<br>" if image else "")
            trend_cells.append(cell + f"<span class=\"small\">{escape(label)}: "
                               f"{escape(_signed(s.fos_change[label]))}</span>")
        rain = " / ".join("no data" if s.rain_mm[k] is None else f"{s.rain_mm[k]:.1f}"
                          for k in ("24 h", "7 days"))
        gauge = f"<br><span class=\"small\">gauge {escape(s.gauge_id)}</span>" if s.gauge_id else ""
        age = ("no readings" if s.newest_reading is None else
               f"{_age(status.now - s.newest_reading)}<br><span class=\"small\">"
               f"{escape(_when(s.newest_reading))}</span>")
        attention = [f"alert {escape(a.get('level') or '')} ({escape(a.get('rule'))}): "
                     f"{escape(a.get('state'))}" + (f" &ndash; {escape(a['message'])}"
                                                    if a.get("message") else "")
                     + (f" (shelved until {escape(a['shelved_until_utc'])})"
                        if a.get("shelved_until_utc") else "")
                     for a in s.open_alerts]
        attention += [f"inspection {escape(i.get('status'))}: {escape(i.get('reason'))}"
                      + (f" &ndash; due {escape(_when(_time(i['due_utc'])))}" if i.get("due_utc") else "")
                      + (" <strong>OVERDUE</strong>" if _overdue(i, status.now) else "")
                      for i in s.open_inspections]
        rows.append(
            f"<tr class=\"row-{s.level.css}\">"
            f"<td><a href=\"{escape(section_page_name(s.id))}\">{escape(s.id)}</a>"
            f"<br><span class=\"small\">{escape(s.name)}</span></td>"
            f"<td>{_badge(s.level)}"
            + (f"<br><span class=\"small\">{escape(s.level.detail)}</span>" if s.level.detail else "")
            + _expectation(s.level) + _overdue_note(s, status.now) + f"</td><td>{fos_cell}</td><td>{'<br>'.join(trend_cells)}</td>"
            f"<td class=\"num\">{escape(rain)}{gauge}</td><td>{age}</td>"
            f"<td>{_list(attention, 'none')}</td>"
            f"<td>{_list([escape(p) for p in s.data_problems], 'none')}</td></tr>"
        )
    parts.append(
        "<div class=\"frame\"><table class=\"overview\"><thead><tr><th>Section</th><th>Level</th><th>Factor of safety [-]</th>"
        "<th>Trend of the factor of safety, last 24 h and 7 days</th><th>Rain 24 h / 7 days [mm]</th>"
        "<th>Newest reading (age)</th><th>Open alerts and inspections</th>"
        "<th>Data-quality problems</th></tr></thead><tbody>" + "\n".join(rows)
        + "</tbody></table></div>"
    )
    parts.append(_levels_key(status.levels))
    return _page("Status board", heading, "\n".join(parts), status, False)


def _levels_key(levels: list[Level]) -> str:
    """The levels, lowest first, each with its badge and what it expects of the reader."""
    if not levels:
        return ""
    rows = "".join(f"<tr class=\"row-{level.css}\"><td>{_badge(level)}</td><td>{escape(level.expectation)}</td></tr>"
                   for level in levels)
    return ("<h2>The levels and what each expects</h2>"
            f"<table class=\"levels\"><thead><tr><th>Level</th><th>Expected of the duty engineer</th>"
            f"</tr></thead><tbody>{rows}</tbody></table>")


def _fos_cell(s: SectionStatus) -> str:
    """The overview's factor of safety: the latest one on live readings; a newer one on the
    design water lines is said to be so, and a failed calculation is said to have failed."""
    latest = s.latest
    if latest is None:
        return "not assessed"
    usable = [a for a in s.history if a.usable]
    shown = usable[-1] if usable else None
    parts = []
    if shown is not None:
        parts.append(f"<strong>{_fos_text(shown.fos)}</strong> {escape(shown.method)}"
                     f"<br><span class=\"small\">{escape(_when(shown.time))}</span>")
    if latest is not shown:
        words = ("on the design water lines: no live readings" if latest.on_design_lines
                 else assessment_status.status_words(latest.status))
        value = f"{_fos_text(latest.fos)} " if latest.on_design_lines else ""
        parts.append(f"<span class=\"small design\">latest, {escape(f'{latest.time:%Y-%m-%d %H:%M}')}:"
                     f" {value}{escape(words)}</span>")
    return "<br>".join(parts)


def _overdue_note(s: SectionStatus, now: datetime) -> str:
    """Beside the level: inspection requests past their due time, whatever the level now."""
    late = sum(_overdue(i, now) for i in s.open_inspections)
    return (f'<div class="expect"><strong>Also:</strong> {late} inspection request(s) overdue: '
            "carry them out or close them with a note.</div>" if late else "")


def _overdue(inspection: dict, now: datetime) -> bool:
    due = inspection.get("due_utc")
    return bool(due) and _time(due) < now


def _list(items: list[str], empty: str) -> str:
    """A list of already-escaped HTML items."""
    if not items:
        return f"<span class=\"small\">{escape(empty)}</span>"
    return "<ul class=\"problems\">" + "".join(f"<li>{i}</li>" for i in items) + "</ul>"


def _table(headers: list[str], rows: list[list], numeric: set[int] = frozenset()) -> str:
    """An HTML table; every cell is escaped, stored UTC times shown as "YYYY-MM-DD HH:MM"
    (the headings say UTC)."""
    head = "".join(f"<th>{escape(h)}</th>" for h in headers)
    body = "".join(
        "<tr>" + "".join(
            f"<td class=\"num\">{escape(c)}</td>" if i in numeric else f"<td>{escape(short_time(c))}</td>"
            for i, c in enumerate(row)
        ) + "</tr>"
        for row in rows
    )
    return f"<table><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>"


def _figure(figure: tuple[Path | None, str], alt: str) -> str:
    path, caption = figure
    if path is None:
        return f"<p class=\"empty\">{escape(caption)}</p>"
    return (f"<figure><img src=\"img/{escape(path.name)}\" alt=\"{escape(alt)}\">"
            f"<figcaption>{escape(caption)}</figcaption></figure>")


def _section_page(status: SiteStatus, s: SectionStatus, figures: dict) -> str:
    parts = [f"<p>{_badge(s.level)} "
             + (escape(s.level.detail) if s.level.detail else "") + "</p>"
             + _expectation(s.level, wide=True) + _overdue_note(s, status.now)]
    if s.latest is None:
        parts.append("<p class=\"empty\">No assessment of this section is stored in the season "
                     "yet.</p>")
    else:
        a = s.latest
        if a.on_design_lines:
            text = (f"Factor of safety {_fos_text(a.fos)} by {a.method} at {_when(a.time)}, on the "
                    "DESIGN water lines: no live readings, so it is not a result of the readings "
                    "(left out of trends and changes).")
        else:
            text = (f"Factor of safety {_fos_text(a.fos)} by {a.method} at {_when(a.time)}, "
                    + assessment_status.status_words(a.status)
                    + ("." if a.usable or not a.message else f": {a.message}."))
        parts.append(f"<p><strong>{escape(text)}</strong></p>")
        if s.worst is not None:
            parts.append(f"<p>{escape(f'Lowest in the season: {s.worst.fos:.2f} ({s.worst.method}) at {_when(s.worst.time)}.')}</p>")
    if s.notes:
        parts.append("<div class=\"notes\"><ul>" + "".join(f"<li>{escape(n)}</li>" for n in s.notes)
                     + "</ul></div>")
    parts.append("<h2>Open alerts and inspection requests</h2>")
    alert_rows = [[a.get("level"), a.get("rule"), a.get("state"), a.get("message"),
                   a.get("raised_utc"), a.get("updated_utc")] for a in s.open_alerts]
    parts.append(_table(["Level", "Rule", "State", "Message", "Raised (UTC)", "Updated (UTC)"],
                        alert_rows) if alert_rows else "<p>No open alerts.</p>")
    inspection_rows = [[i.get("status") + (" (OVERDUE)" if _overdue(i, status.now) else ""),
                        i.get("reason"), i.get("requested_utc"), i.get("due_utc") or "",
                        compact(_json(i.get("checklist_json"), [])), i.get("notes")]
                       for i in s.open_inspections]
    parts.append(_table(["Status", "Reason", "Requested (UTC)", "Due (UTC)", "Checklist", "Notes"],
                        inspection_rows)
                 if inspection_rows else "<p>No open inspection requests.</p>")
    parts.append("<h2>Alert timeline</h2>")
    if s.alert_timeline:
        shown = s.alert_timeline[-HISTORY_ROWS:]
        if len(s.alert_timeline) > HISTORY_ROWS:
            parts.append(f"<p>The newest {HISTORY_ROWS} of {len(s.alert_timeline)} alert events in the season.</p>")
        parts.append(_table(
            ["Time (UTC)", "Rule", "Level", "Change", "Value", "By", "Note"],
            [[e["time_utc"], e["rule"], e["level"] or "", e["what"],
              "" if e["value"] is None else f"{e['value']:.3g}", e["by"] or "", e["note"] or ""]
             for e in shown],
        ))
    else:
        parts.append("<p>No alert changed state in the season.</p>")
    parts.append("<h2>Section, water lines and slip surfaces</h2>")
    parts.append(_figure(figures["section"], f"Drawing of section {s.id}"))
    parts.append("<h2>Factor of safety through the season</h2>")
    parts.append(_figure(figures["fos"], f"Factor of safety of section {s.id} through the season"))
    parts.append("<h2>Piezometric heads</h2>")
    parts.append(_figure(figures["heads"], f"Piezometric heads of section {s.id}"))
    parts.append("<h2>Instruments and data quality</h2>")
    parts.append(_table(
        ["Instrument", "Kind", "Latest value", "Quality", "Time of latest reading", "Age",
         "Stale after [h]"],
        [[i["id"], i["kind"].replace("_", " "), _latest_value(i), i["newest_quality"] or "",
          _when(i["newest"]), "no readings" if i["newest"] is None else _age(status.now - i["newest"]),
          f"{i['max_age_hours']:g}"]
         for i in s.instruments], numeric={2, 6},
    ) if s.instruments else "<p>No instruments configured for this section.</p>")
    parts.append(_list([escape(p) for p in s.data_problems], "No data-quality problems."))
    parts.append(_parameters_html(s))
    parts.append(_back_analyses_html(s))
    parts.append("<h2>Assessment history</h2>")
    if s.history:
        shown = s.history[::-1][:HISTORY_ROWS]
        if len(s.history) > HISTORY_ROWS:
            parts.append(f"<p>The newest {HISTORY_ROWS} of {len(s.history)} assessments in the "
                         "season.</p>")
        parts.append(_table(
            ["Time (UTC)", "Factor of safety [-]", "Method", "Result", "Evaluation / message",
             "Parameter version id"],
            [[a.time.strftime("%Y-%m-%d %H:%M"), _fos_text(a.fos).replace("&ndash;", "-"), a.method,
              assessment_status.status_words(a.status),
              "; ".join(str(x) for x in (a.extra.get("evaluation"), a.message) if x),
              "" if a.section_version_id is None else a.section_version_id] for a in shown],
            numeric={1},
        ))
    else:
        parts.append("<p>No assessments stored in the season.</p>")
    heading = escape(f"Section {s.id}") + (f" &ndash; {escape(s.name)}" if s.name else "")
    return _page(f"Section {s.id}", heading, "\n".join(parts), status, True)


def _latest_value(item: dict) -> str:
    """The newest reading of an instrument with its unit: a head [m] to the centimetre, rain
    [mm] to the tenth."""
    value = item.get("newest_value")
    if value is None:
        return "none" if item.get("newest") is None else "no value (see quality)"
    digits = 1 if item.get("unit") == "mm" else 2
    return f"{item['quantity']} {float(value):.{digits}f} {item['unit']}"


def _parameters_html(s: SectionStatus) -> str:
    version = s.parameter_version
    if version is None:
        return ("<h2>Parameters</h2><p>No parameter version stored yet: the section file "
                f"{escape(s.file or '')} is used until the first assessment records it.</p>")
    params = version["parameters"]
    head = escape(f"Parameter version {version.get('version')} (id {version.get('id')}), recorded "
                  f"{version.get('created_utc')}: {version.get('provenance')}")
    rows = []
    for m in params.get("material", []) if isinstance(params, dict) else []:
        drained = m.get("model", "drained") == "drained"
        rows.append([
            m.get("name"), m.get("model", "drained"), _num(m.get("unit_weight"), "unit_weight"),
            _num(m.get("unit_weight_saturated", m.get("unit_weight")), "unit_weight"),
            _num(m.get("cohesion"), "cohesion") if drained else "",
            _num(m.get("friction_angle"), "friction_angle") if drained else "",
            "" if drained else _num(m.get("undrained_strength"), "undrained_strength"),
            m.get("water", "") if m.get("ru") is None else f"ru = {m.get('ru')}",
        ])
    table = _table(["Material", "Model", "Unit weight [kN/m3]", "Saturated [kN/m3]", "c' [kPa]",
                    "phi' [deg]", "Su [kPa]", "Water"], rows, numeric={2, 3, 4, 5, 6})
    return f"<h2>Parameters in use</h2><p>{head}</p>{table}"


def _num(value, quantity: str) -> str:
    return "" if value is None else number_text(float(value), quantity)


def _back_analyses_html(s: SectionStatus) -> str:
    parts = ["<h2>Back-analyses and calibrations</h2>"]
    in_use = (s.parameter_version or {}).get("id")
    if s.calibrations:
        parts.append(_table(
            ["Parameter version id", "In use", "Material", "Calibrated strength", "Slip case",
             "Failed (UTC)", "Calibrated by", "Recorded (UTC)", "Checks overridden"],
            [[c.get("section_version_id"), "yes" if c.get("section_version_id") == in_use else "",
              c.get("material"), compact(c.get("strength")), c.get("case_id"), c.get("failed_utc"),
              c.get("calibrated_by"), c.get("created_utc"), c.get("override_reason") or "no"]
             for c in s.calibrations],
        ))
    else:
        parts.append("<p>No back-analysis has calibrated the parameters of this section.</p>")
    if s.back_analyses:
        parts.append(_table(
            ["Slip case", "Failed (UTC)", "Material", "Form", "Method", "Best fit", "Run (UTC)"],
            [[b.get("case_id"), b.get("failed_utc"), b.get("material"), b.get("form"),
              b.get("method"), compact(b.get("best")) or "no strength found", b.get("ran_utc")]
             for b in s.back_analyses],
        ))
    else:
        parts.append("<p>No back-analysis of a slip of this section is stored.</p>")
    return "".join(parts)


def compact(value) -> str:
    """A stored JSON value in one line people can read: numbers with the digits of their
    quantity (:mod:`watch.formatting`), else to 4 significant figures."""
    if value is None:
        return ""
    if isinstance(value, float):
        return number_text(value)
    if isinstance(value, dict):
        return ", ".join(f"{k} = {number_text(v, k) if isinstance(v, float) else compact(v)}"
                         for k, v in value.items() if v is not None and not isinstance(v, (dict, list)))
    if isinstance(value, list):
        return ", ".join(compact(v) for v in value[:8]) + (" ..." if len(value) > 8 else "")
    return str(value)
