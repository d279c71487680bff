"""The site file (``site.toml``, docs/formats.md section 2) loaded into frozen dataclasses.

Every check names the file and the key, so a technician can find the line to fix. Unknown
tables and keys are errors with a did-you-mean hint, because a misspelt ``valid_range`` or
``[[trigger]]`` that were silently ignored would switch off a quality check or an alarm. The
top-level tables that other parts of slipwatch read (alerts, notifications, the service) are
named here in ``SITE_TABLES``; their contents are checked by their owners, which
``watch.workspace.Workspace.config`` runs whenever the site file is loaded.
"""

from __future__ import annotations

import codecs
import difflib
import math
from dataclasses import dataclass, field
from datetime import datetime, timezone
from functools import cached_property
from pathlib import Path
from typing import Any
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

import pandas as pd

from watch.errors import ConfigError
from watch.groundwater import DEFAULT_SIDE_RULE, SideRule
from watch.tomlfiles import read_toml

__all__ = [
    "PIEZOMETER_READINGS",
    "RAIN_REPORTING",
    "FEED_LAYOUTS",
    "SITE_TABLES",
    "SiteConfig",
    "SectionRef",
    "WaterLineSettings",
    "VibratingWireCalibration",
    "Piezometer",
    "RainGauge",
    "FeedSpec",
    "IngestSettings",
    "load_site_config",
    "parse_site_config",
    "TableReader",
]

#: Reading types of a piezometer and the unit of its raw value.
PIEZOMETER_READINGS = {
    "pore_pressure_kpa": "kPa",
    "head_m": "m (elevation of the water level)",
    "depth_to_water_m": "m below the collar",
    "vibrating_wire": "digits",
}
#: Reporting types of a rain gauge.
RAIN_REPORTING = ("interval_mm", "cumulative_mm", "tips")
FEED_LAYOUTS = ("wide", "long")
#: Every top-level table of the site file and the module that reads it.
SITE_TABLES = {
    "site": "watch.config", "section": "watch.config", "piezometer": "watch.config",
    "rain_gauge": "watch.config", "feed": "watch.config", "ingest": "watch.config",
    "notify": "watch.notify", "daemon": "watch.daemon", "level": "watch.triggers",
    "trigger": "watch.triggers", "data_alerts": "watch.triggers", "cycle": "watch.triggers",
}  # fmt: skip


@dataclass(frozen=True)
class WaterLineSettings:
    """How the service draws one water line of a section from its piezometers
    (``[[section.water_line]]``).

    Attributes
    ----------
    name : str
        The section file's ``[[water_line]]`` it applies to.
    left, right : watch.groundwater.SideRule
        The rule beyond the outermost instrument towards smaller / larger x.
    max_age_hours : float or None
        Oldest usable reading [h] for this line's piezometers that have no ``max_age_hours``
        of their own (None: the site's ``[ingest] stale_hours``).
    """

    name: str
    left: SideRule
    right: SideRule
    max_age_hours: float | None = None


@dataclass(frozen=True)
class SectionRef:
    """A cross-section of the site: its file (solver format), serving rain gauge and how its
    water lines are drawn from the piezometers."""

    id: str
    file: str
    gauge: str | None = None
    location: tuple[float, float] | None = None
    water_lines: tuple[WaterLineSettings, ...] = ()

    def water_line_settings(self, name: str) -> WaterLineSettings | None:
        """The settings of the water line ``name``, or None when the site file gives none."""
        return next((w for w in self.water_lines if w.name == name), None)


@dataclass(frozen=True)
class VibratingWireCalibration:
    """Calibration of a vibrating-wire piezometer (manufacturer-neutral form).

    linear:      p = G (R1 - R0) + K (T1 - T0) - (B1 - B0)
    polynomial:  p = A R1^2 + B R1 + C + K (T1 - T0) - (B1 - B0)

    p [kPa], R [digits], T [degC], B [kPa]. The barometric term is applied only when
    ``zero_barometric`` is given.
    """

    type: str
    gauge_factor: float | None = None  # G [kPa/digit]
    zero_reading: float | None = None  # R0 [digits]
    polynomial: tuple[float, float, float] | None = None  # (A, B, C)
    temperature_factor: float = 0.0  # K [kPa/degC]
    zero_temperature: float | None = None  # T0 [degC]
    zero_barometric: float | None = None  # B0 [kPa]

    @property
    def needs_temperature(self) -> bool:
        return self.temperature_factor != 0.0

    @property
    def needs_barometric(self) -> bool:
        return self.zero_barometric is not None


@dataclass(frozen=True)
class Piezometer:
    id: str
    section: str
    offset: float  # [m] along the section
    tip_elevation: float  # [m]
    collar_elevation: float  # [m]
    water_line: str
    reading: str  # one of PIEZOMETER_READINGS
    valid_range: tuple[float, float] | None = None  # in the reading's own unit
    max_rise_rate: float | None = None  # [m of head per hour]
    max_age_hours: float | None = None
    calibration: VibratingWireCalibration | None = None

    kind = "piezometer"


@dataclass(frozen=True)
class RainGauge:
    id: str
    location: tuple[float, float] | None
    reporting: str  # one of RAIN_REPORTING
    bucket_mm: float | None = None  # tips only
    valid_range: tuple[float, float] | None = None  # in the reported unit (mm or tips)

    kind = "rain_gauge"


@dataclass(frozen=True)
class FeedSpec:
    """How one logger writes its files."""

    name: str
    pattern: str
    layout: str
    time_column: str
    time_format: str
    time_zone: str
    skip_rows: int = 0
    delimiter: str = ","
    decimal: str = "."
    missing: tuple[str, ...] = ("",)
    encoding: str = "utf-8"
    # wide layout: raw column -> instrument id
    columns: dict[str, str] = field(default_factory=dict)
    temperature_columns: dict[str, str] = field(default_factory=dict)
    # long layout
    instrument_column: str | None = None
    value_column: str | None = None
    temperature_column: str | None = None
    # both layouts: one barometer column shared by the logger's instruments
    barometric_column: str | None = None
    # long layout: the instruments this logger may deliver (a wide feed names them in columns)
    instruments: tuple[str, ...] = ()

    @property
    def delivers(self) -> frozenset[str]:
        """Ids of the instruments this feed may deliver; rows of any other are rejected."""
        return frozenset(self.columns.values()) if self.layout == "wide" else frozenset(self.instruments)


@dataclass(frozen=True)
class IngestSettings:
    min_file_age_seconds: float = 30.0
    future_tolerance_minutes: float = 10.0
    oldest_reading: datetime = datetime(2000, 1, 1, tzinfo=timezone.utc)
    flat_line_hours: float = 24.0
    stale_hours: float = 6.0
    done_suffix: str | None = None  # e.g. ".done": a marker file the logger writes when finished


@dataclass(frozen=True)
class SiteConfig:
    id: str
    name: str
    owner: str
    time_zone: str
    sections: tuple[SectionRef, ...]
    piezometers: tuple[Piezometer, ...]
    rain_gauges: tuple[RainGauge, ...]
    feeds: tuple[FeedSpec, ...]
    ingest: IngestSettings
    path: Path | None = None
    raw: dict[str, Any] = field(default_factory=dict, repr=False, compare=False)

    # Lookups by id, built once per loaded configuration: a cycle asks them for every section,
    # and scanning the lists each time made a cycle quadratic in the size of the network.
    @cached_property
    def instruments(self) -> dict[str, Piezometer | RainGauge]:
        return {i.id: i for i in (*self.piezometers, *self.rain_gauges)}

    @cached_property
    def _sections_by_id(self) -> dict[str, SectionRef]:
        return {s.id: s for s in self.sections}

    @cached_property
    def _piezometers_by_section(self) -> dict[str, tuple[Piezometer, ...]]:
        by_section: dict[str, list[Piezometer]] = {}
        for piezometer in self.piezometers:
            by_section.setdefault(piezometer.section, []).append(piezometer)
        return {section_id: tuple(found) for section_id, found in by_section.items()}

    def section_ref(self, section_id: str) -> SectionRef | None:
        """The ``[[section]]`` entry of ``section_id``, or None when the file has none."""
        return self._sections_by_id.get(section_id)

    def section(self, section_id: str) -> SectionRef:
        """The ``[[section]]`` entry of ``section_id``; ConfigError naming the known ones when
        the file has none."""
        ref = self._sections_by_id.get(section_id)
        if ref is None:
            known = ", ".join(self._sections_by_id) or "none"
            raise ConfigError(f"section {section_id!r} is not listed in {self._file_name()} (known: {known})")
        return ref

    def piezometers_of(self, section_id: str) -> tuple[Piezometer, ...]:
        """The piezometers of ``section_id``, in the order of the file."""
        return self._piezometers_by_section.get(section_id, ())

    def instrument(self, instrument_id: str) -> Piezometer | RainGauge:
        try:
            return self.instruments[instrument_id]
        except KeyError:
            known = ", ".join(sorted(self.instruments)) or "none"
            raise ConfigError(
                f"instrument {instrument_id!r} is not in {self._file_name()} (known: {known})"
            ) from None

    def feed_for(self, file_name: str) -> FeedSpec | None:
        """The first feed whose pattern matches ``file_name`` (a bare name), or None."""
        from fnmatch import fnmatchcase

        return next((f for f in self.feeds if fnmatchcase(file_name, f.pattern)), None)

    def _file_name(self) -> str:
        return str(self.path) if self.path else "site.toml"


def load_site_config(path: Path | str) -> SiteConfig:
    """Read and check ``site.toml``; raise ConfigError naming the file and key on any fault."""
    path = Path(path)
    data, _ = read_toml(path, "site file", "; create one with `slipwatch init`")
    return parse_site_config(data, source=str(path), path=path)


def parse_site_config(data: dict, source: str = "site.toml", path: Path | None = None) -> SiteConfig:
    """Check the parsed TOML ``data`` of a site file and build a SiteConfig."""
    r = TableReader(source)
    r.keys(data, "the top level", set(SITE_TABLES), what="table")
    site = r.table(data, "site", "[site]", required=True)
    r.keys(site, "[site]", {"id", "name", "owner", "time_zone"})
    time_zone = r.get(site, "[site]", "time_zone", str, default="UTC")
    r.zone(time_zone, "[site] time_zone")

    sections = tuple(_section(r, t, i) for i, t in enumerate(r.array(data, "section")))
    piezometers = tuple(_piezometer(r, t, i) for i, t in enumerate(r.array(data, "piezometer")))
    gauges = tuple(_rain_gauge(r, t, i) for i, t in enumerate(r.array(data, "rain_gauge")))
    feeds = tuple(_feed(r, t, i) for i, t in enumerate(r.array(data, "feed")))
    ingest = _ingest(r, r.table(data, "ingest", "[ingest]"))

    config = SiteConfig(
        id=r.get(site, "[site]", "id", str),
        name=r.get(site, "[site]", "name", str, default=""),
        owner=r.get(site, "[site]", "owner", str, default=""),
        time_zone=time_zone,
        sections=sections,
        piezometers=piezometers,
        rain_gauges=gauges,
        feeds=feeds,
        ingest=ingest,
        path=path,
        raw=data,
    )
    _cross_check(r, config)
    return config


# --- tables -----------------------------------------------------------------------------------


def _section(r: TableReader, t: dict, i: int) -> SectionRef:
    where = _where("section", t, i)
    r.keys(t, where, {"id", "file", "gauge", "location", "water_line"})
    sid = r.get(t, where, "id", str)
    lines = tuple(
        _water_line_settings(r, line, f"{where} water_line #{k + 1}")
        for k, line in enumerate(r.array(t, "water_line"))
    )
    names = [line.name for line in lines]
    for name in names:
        if names.count(name) > 1:
            r.fail(f"{where} water_line {name!r}", "name", "is used more than once")
    return SectionRef(
        id=sid,
        file=r.get(t, where, "file", str),
        gauge=r.get(t, where, "gauge", str, default=None),
        location=r.pair(t, where, "location", default=None),
        water_lines=lines,
    )


#: Keys of a side rule ``{rule = ..., ...}`` besides ``rule``, by rule.
_SIDE_RULE_KEYS = {
    "hold level": set(),
    "below ground": {"depth"},
    "fixed level": {"level", "from"},
    "design line": set(),
    "parallel to design line": set(),
}


def _water_line_settings(r: TableReader, t: dict, where: str) -> WaterLineSettings:
    r.keys(t, where, {"name", "left", "right", "max_age_hours"})
    name = r.get(t, where, "name", str)
    where = where.rsplit(" water_line", 1)[0] + f" water_line {name!r}"
    age = r.number(t, where, "max_age_hours", default=None)
    if age is not None and age <= 0:
        r.fail(where, "max_age_hours", f"must be > 0, got {age}")
    left, right = (_side_rule(r, r.table(t, side, f"{where} {side}"), where, side)
                   for side in ("left", "right"))  # fmt: skip
    return WaterLineSettings(name=name, left=left, right=right, max_age_hours=age)


def _side_rule(r: TableReader, t: dict, where: str, side: str) -> SideRule:
    """``{rule = "...", depth/level/from = ...}``; an absent side keeps the default rule."""
    if not t:
        return DEFAULT_SIDE_RULE
    rule = r.choice(t, f"{where} {side}", "rule", tuple(_SIDE_RULE_KEYS))
    allowed = _SIDE_RULE_KEYS[rule]
    for key in sorted(set(t) - {"rule"}):
        if key not in allowed:
            hint = f"valid with rule {rule!r}: {', '.join(sorted(allowed))}" if allowed else (
                f"rule {rule!r} takes no other key")
            r.fail(f"{where} {side}", key, f"is unknown ({hint})")
    if rule == "below ground":
        depth = r.number(t, f"{where} {side}", "depth")
        if depth < 0:
            r.fail(f"{where} {side}", "depth", f"must be >= 0 m below the ground, got {depth}")
        return SideRule.below_ground(depth)
    if rule == "fixed level":
        return SideRule.fixed_level(
            r.number(t, f"{where} {side}", "level"),
            r.number(t, f"{where} {side}", "from", default=None),
        )
    return SideRule(rule)


def _piezometer(r: TableReader, t: dict, i: int) -> Piezometer:
    where = _where("piezometer", t, i)
    keys = {
        "id", "section", "offset", "tip_elevation", "collar_elevation", "water_line", "reading",
        "valid_range", "max_rise_rate", "max_age_hours", "calibration",
    }  # fmt: skip
    r.keys(t, where, keys)
    pid = r.get(t, where, "id", str)
    reading = r.choice(t, where, "reading", tuple(PIEZOMETER_READINGS))
    tip = r.number(t, where, "tip_elevation")
    collar = r.number(t, where, "collar_elevation")
    if tip > collar:
        r.fail(where, "tip_elevation", f"{tip} is above collar_elevation {collar}")
    calibration = None
    # Required for vibrating wire; beside another reading type it is checked but unused (the
    # site file may keep an instrument's calibration sheet while it is read another way).
    if reading == "vibrating_wire" or "calibration" in t:
        calibration = _calibration(r, r.table(t, "calibration", f"{where}.calibration", True), where)
    rise = r.number(t, where, "max_rise_rate", default=None)
    if rise is not None and rise <= 0:
        r.fail(where, "max_rise_rate", f"must be > 0 [m/h], got {rise}")
    age = r.number(t, where, "max_age_hours", default=None)
    if age is not None and age <= 0:
        r.fail(where, "max_age_hours", f"must be > 0, got {age}")
    return Piezometer(
        id=pid,
        section=r.get(t, where, "section", str),
        offset=r.number(t, where, "offset"),
        tip_elevation=tip,
        collar_elevation=collar,
        water_line=r.get(t, where, "water_line", str),
        reading=reading,
        valid_range=r.range(t, where, "valid_range"),
        max_rise_rate=rise,
        max_age_hours=age,
        calibration=calibration,
    )


def _calibration(r: TableReader, t: dict, owner: str) -> VibratingWireCalibration:
    where = f"{owner}.calibration"
    r.keys(
        t,
        where,
        {"type", "gauge_factor", "zero_reading", "polynomial", "temperature_factor",
         "zero_temperature", "zero_barometric"},
    )  # fmt: skip
    kind = r.choice(t, where, "type", ("linear", "polynomial"))
    factor = r.number(t, where, "temperature_factor", default=0.0)
    zero_t = r.number(t, where, "zero_temperature", default=None)
    if factor != 0.0 and zero_t is None:
        r.fail(where, "zero_temperature", "is required when temperature_factor is not 0")
    if kind == "linear":
        gauge_factor = r.number(t, where, "gauge_factor")
        zero_reading = r.number(t, where, "zero_reading")
        if gauge_factor == 0.0:
            r.fail(where, "gauge_factor", "must not be 0")
        polynomial = None
    else:
        gauge_factor = zero_reading = None
        values = t.get("polynomial")
        if not (isinstance(values, list) and len(values) == 3 and all(_is_number(v) for v in values)):
            r.fail(where, "polynomial", f"must be [A, B, C] (three numbers), got {values!r}")
        polynomial = tuple(float(v) for v in values)
    return VibratingWireCalibration(
        type=kind,
        gauge_factor=gauge_factor,
        zero_reading=zero_reading,
        polynomial=polynomial,
        temperature_factor=factor,
        zero_temperature=zero_t,
        zero_barometric=r.number(t, where, "zero_barometric", default=None),
    )


def _rain_gauge(r: TableReader, t: dict, i: int) -> RainGauge:
    where = _where("rain_gauge", t, i)
    r.keys(t, where, {"id", "location", "reporting", "bucket_mm", "valid_range"})
    gid = r.get(t, where, "id", str)
    reporting = r.choice(t, where, "reporting", RAIN_REPORTING)
    bucket = r.number(t, where, "bucket_mm", default=None)
    if reporting == "tips" and (bucket is None or bucket <= 0):
        r.fail(where, "bucket_mm", f"must be > 0 for reporting = 'tips', got {bucket}")
    return RainGauge(
        id=gid,
        location=r.pair(t, where, "location", default=None),
        reporting=reporting,
        bucket_mm=bucket,
        valid_range=r.range(t, where, "valid_range"),
    )


def _feed(r: TableReader, t: dict, i: int) -> FeedSpec:
    where = _where("feed", t, i, "name")
    keys = {
        "name", "pattern", "layout", "skip_rows", "time_column", "time_format", "time_zone",
        "delimiter", "decimal", "missing", "encoding", "columns", "temperature_columns",
        "instrument_column", "value_column", "temperature_column", "barometric_column", "instruments",
    }  # fmt: skip
    r.keys(t, where, keys)
    name = r.get(t, where, "name", str)
    layout = r.choice(t, where, "layout", FEED_LAYOUTS)
    time_zone = r.get(t, where, "time_zone", str)
    r.zone(time_zone, f"{where} time_zone")
    delimiter = r.get(t, where, "delimiter", str, default=",")
    decimal = r.get(t, where, "decimal", str, default=".")
    if len(delimiter) != 1 or delimiter in "\"\r\n":
        r.fail(where, "delimiter", f"must be one character (not a quote or line end), got {delimiter!r}")
    if decimal not in (".", ","):
        r.fail(where, "decimal", f"must be '.' or ',', got {decimal!r}")
    if decimal == delimiter:
        r.fail(where, "decimal", f"is the same as the delimiter {delimiter!r}")
    skip = r.get(t, where, "skip_rows", int, default=0)
    if skip < 0:
        r.fail(where, "skip_rows", f"must be >= 0, got {skip}")
    missing = t.get("missing", [""])
    if not (isinstance(missing, list) and all(isinstance(m, str) for m in missing)):
        r.fail(where, "missing", f"must be a list of strings, got {missing!r}")
    encoding = r.get(t, where, "encoding", str, default="utf-8")
    try:
        codecs.lookup(encoding)
    except LookupError:
        r.fail(where, "encoding", f"unknown encoding {encoding!r} (e.g. 'utf-8', 'latin-1', 'cp1252')")
    if not _ascii_compatible(encoding):
        r.fail(where, "encoding", f"{encoding!r} does not write line ends, delimiters and digits as single "
                                  "ASCII bytes; feeds are read in an ASCII-compatible encoding such as 'utf-8', "
                                  "'latin-1' or 'cp1252' (UTF-16 and UTF-32 files are recognised by their "
                                  "byte-order mark and refused with a message)")  # fmt: skip
    columns = _string_map(r, t, where, "columns")
    temperature_columns = _string_map(r, t, where, "temperature_columns")
    time_format = r.get(t, where, "time_format", str)
    _check_time_format(r, where, time_format)
    instruments = t.get("instruments", [])
    if not (isinstance(instruments, list) and all(isinstance(i, str) for i in instruments)):
        r.fail(where, "instruments", f"must be a list of instrument ids, got {instruments!r}")
    spec = FeedSpec(
        name=name,
        pattern=r.get(t, where, "pattern", str),
        layout=layout,
        time_column=r.get(t, where, "time_column", str),
        time_format=time_format,
        time_zone=time_zone,
        skip_rows=skip,
        delimiter=delimiter,
        decimal=decimal,
        missing=tuple(missing),
        encoding=encoding,
        columns=columns,
        temperature_columns=temperature_columns,
        instrument_column=r.get(t, where, "instrument_column", str, default=None),
        value_column=r.get(t, where, "value_column", str, default=None),
        temperature_column=r.get(t, where, "temperature_column", str, default=None),
        barometric_column=r.get(t, where, "barometric_column", str, default=None),
        instruments=tuple(instruments),
    )
    if layout == "wide":
        if not columns:
            r.fail(where, "columns", "a wide feed needs [feed.columns] (raw column -> instrument id)")
        for key in ("instrument_column", "value_column", "temperature_column", "instruments"):
            if key in t:
                r.fail(where, key, "is for layout = 'long'; a wide feed uses [feed.columns]")
    else:
        for key in ("instrument_column", "value_column"):
            if key not in t:
                r.fail(where, key, "is required for layout = 'long'")
        if not instruments:
            r.fail(where, "instruments", "is required for layout = 'long': the ids of the instruments "
                                         "this logger delivers (rows of any other are rejected)")
        for key in ("columns", "temperature_columns"):
            if key in t:
                r.fail(where, key, "is for layout = 'wide'; a long feed names its instrument column")
    return spec


#: A moment whose every field differs from the others, to check a time format by a round trip.
_FORMAT_PROBE = datetime(2031, 7, 19, 13, 47, 29)


def _check_time_format(r: TableReader, where: str, time_format: str) -> None:
    """A feed's ``time_format`` must be a valid strftime pattern that reads back what it writes,
    with the year, month and day (a format without them would date every reading wrongly)."""
    aware = "%z" in time_format or "%Z" in time_format
    probe = _FORMAT_PROBE.replace(tzinfo=timezone.utc) if aware else _FORMAT_PROBE
    try:
        text = probe.strftime(time_format)
        # pandas is the reader's own parser: the check is the one the rows will meet.
        parsed = pd.to_datetime(text, format=time_format, utc=aware)
    except (ValueError, TypeError) as error:
        r.fail(where, "time_format", f"{time_format!r} is not a valid time format ({error}); "
                                     "e.g. '%Y-%m-%d %H:%M' (Python strftime codes)")  # fmt: skip
    if (parsed.year, parsed.month, parsed.day) != (_FORMAT_PROBE.year, _FORMAT_PROBE.month, _FORMAT_PROBE.day):
        r.fail(where, "time_format", f"{time_format!r} does not give the full date (year, month and day), "
                                     "e.g. '%d/%m/%Y %H:%M'")  # fmt: skip


def _ascii_compatible(encoding: str) -> bool:
    """Whether the encoding writes the characters a feed's structure is made of as the same
    single bytes as ASCII (the reader cuts lines and fields on bytes)."""
    sample = "\r\n\t ,;|\"'.-+:/0123456789TZeE"
    try:
        if codecs.lookup(encoding).name == "utf-8-sig":  # UTF-8 that may begin with a byte-order mark
            return True
        return sample.encode(encoding) == sample.encode("ascii") and codecs.lookup(encoding).name != "utf-7"
    except (LookupError, UnicodeError):
        return False


def _ingest(r: TableReader, t: dict) -> IngestSettings:
    where = "[ingest]"
    r.keys(
        t,
        where,
        {"min_file_age_seconds", "future_tolerance_minutes", "oldest_reading", "flat_line_hours",
         "stale_hours", "done_suffix"},
    )  # fmt: skip
    default = IngestSettings()
    values = {}
    for key in ("min_file_age_seconds", "future_tolerance_minutes", "flat_line_hours", "stale_hours"):
        value = r.number(t, where, key, default=getattr(default, key))
        if value < 0 or (value == 0 and key in ("flat_line_hours", "stale_hours")):
            r.fail(where, key, f"must be > 0, got {value}")
        values[key] = value
    oldest = t.get("oldest_reading", default.oldest_reading)
    if isinstance(oldest, str):
        try:
            oldest = datetime.fromisoformat(oldest)
        except ValueError:
            r.fail(where, "oldest_reading", f"is not an ISO date, got {oldest!r}")
    elif type(oldest).__name__ == "date":  # a bare TOML date
        oldest = datetime(oldest.year, oldest.month, oldest.day)
    if not isinstance(oldest, datetime):
        r.fail(where, "oldest_reading", f"is not a date, got {oldest!r}")
    if oldest.tzinfo is None:
        oldest = oldest.replace(tzinfo=timezone.utc)
    done = r.get(t, where, "done_suffix", str, default=None)
    if done is not None and not done.startswith("."):
        r.fail(where, "done_suffix", f"must start with '.', e.g. '.done', got {done!r}")
    return IngestSettings(oldest_reading=oldest, done_suffix=done, **values)


def _cross_check(r: TableReader, config: SiteConfig) -> None:
    seen: dict[str, str] = {}
    for kind, items in (("section", config.sections), ("piezometer", config.piezometers),
                        ("rain_gauge", config.rain_gauges), ("feed", config.feeds)):  # fmt: skip
        ids = [getattr(i, "name", None) or i.id for i in items]
        for item_id in ids:
            if ids.count(item_id) > 1:
                r.fail(f"[[{kind}]] {item_id!r}", "id", "is used more than once")
    for item in (*config.piezometers, *config.rain_gauges):
        if item.id in seen:
            r.fail(f"[[{item.kind}]] {item.id!r}", "id", f"is also the id of a {seen[item.id]}")
        seen[item.id] = item.kind
    section_ids = {s.id for s in config.sections}
    gauge_ids = {g.id for g in config.rain_gauges}
    for s in config.sections:
        if s.gauge is not None and s.gauge not in gauge_ids:
            r.fail(f"[[section]] {s.id!r}", "gauge", f"{s.gauge!r} is not a [[rain_gauge]] id")
    for p in config.piezometers:
        if p.section not in section_ids:
            r.fail(f"[[piezometer]] {p.id!r}", "section", f"{p.section!r} is not a [[section]] id")
    instruments = config.instruments
    for feed in config.feeds:
        where = f"[[feed]] {feed.name!r}"
        for table in ("columns", "temperature_columns"):
            for raw, iid in getattr(feed, table).items():
                if iid not in instruments:
                    r.fail(where, table, f"entry {raw!r} = {iid!r}: {iid!r} is not a piezometer or rain gauge id")
        for iid in feed.instruments:
            if iid not in instruments:
                r.fail(where, "instruments", f"{iid!r} is not a piezometer or rain gauge id")
        mapped = feed.delivers
        for p in config.piezometers:
            if p.reading != "vibrating_wire" or p.id not in mapped:
                continue
            # A long feed's correction columns may be empty on some rows: caught per row instead.
            if feed.layout == "wide":
                if p.calibration.needs_temperature and p.id not in feed.temperature_columns.values():
                    r.fail(where, "temperature_columns",
                           f"has no column for vibrating-wire piezometer {p.id!r}, whose "
                           "calibration has a temperature_factor")  # fmt: skip
                if p.calibration.needs_barometric and feed.barometric_column is None:
                    r.fail(where, "barometric_column",
                           f"is needed: piezometer {p.id!r} has a zero_barometric")  # fmt: skip


# --- helpers ----------------------------------------------------------------------------------


def _where(kind: str, t: dict, i: int, key: str = "id") -> str:
    """How an error names an entry of an array of tables: by its id, else by its position."""
    name = t.get(key)
    return f"[[{kind}]] {name!r}" if isinstance(name, str) else f"[[{kind}]] #{i + 1}"


def _is_number(value) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool)


def _string_map(r: TableReader, t: dict, where: str, key: str) -> dict[str, str]:
    value = t.get(key, {})
    if not isinstance(value, dict) or not all(isinstance(v, str) for v in value.values()):
        r.fail(where, key, f"must be a table of raw column = \"instrument id\", got {value!r}")
    return dict(value)


class TableReader:
    """Typed access to TOML tables with errors that name the file, table and key."""

    def __init__(self, source: str):
        self.source = source

    def fail(self, where: str, key: str, problem: str):
        raise ConfigError(f"{self.source}: {where} key {key!r} {problem}")

    def keys(self, t: dict, where: str, allowed: set[str], what: str = "key") -> None:
        """Fail on the first key of ``t`` not in ``allowed``, suggesting the nearest valid one."""
        unknown = sorted(set(t) - allowed)
        if not unknown:
            return
        close = difflib.get_close_matches(unknown[0], sorted(allowed), n=1, cutoff=0.6)
        hint = f"did you mean {close[0]!r}? " if close else ""
        if what == "key":
            self.fail(where, unknown[0], f"is unknown ({hint}valid keys: {', '.join(sorted(allowed))})")
        raise ConfigError(
            f"{self.source}: {where} {what} {unknown[0]!r} is unknown ({hint}valid {what}s: "
            f"{', '.join(sorted(allowed))})"
        )

    def table(self, data: dict, key: str, where: str, required: bool = False) -> dict:
        if key not in data:
            if required:
                raise ConfigError(f"{self.source}: table {where} is missing")
            return {}
        if not isinstance(data[key], dict):
            raise ConfigError(f"{self.source}: {where} must be a table, got {data[key]!r}")
        return data[key]

    def array(self, data: dict, key: str) -> list[dict]:
        value = data.get(key, [])
        if not isinstance(value, list) or not all(isinstance(v, dict) for v in value):
            raise ConfigError(f"{self.source}: [[{key}]] must be an array of tables")
        return value

    def get(self, t: dict, where: str, key: str, kind: type, default: Any = ...):
        if key not in t:
            if default is ...:
                self.fail(where, key, "is missing")
            return default
        value = t[key]
        if not isinstance(value, kind) or isinstance(value, bool) != (kind is bool):
            self.fail(where, key, f"must be a {kind.__name__}, got {value!r}")
        return value

    def number(self, t: dict, where: str, key: str, default: Any = ...) -> float:
        if key not in t:
            if default is ...:
                self.fail(where, key, "is missing")
            return default
        value = t[key]
        if not _is_number(value) or not math.isfinite(value):
            self.fail(where, key, f"must be a finite number, got {value!r}")
        return float(value)

    def choice(self, t: dict, where: str, key: str, options: tuple[str, ...]) -> str:
        value = self.get(t, where, key, str)
        if value not in options:
            self.fail(where, key, f"must be one of {', '.join(options)}; got {value!r}")
        return value

    def pair(self, t: dict, where: str, key: str, default: Any = ...):
        if key not in t:
            if default is ...:
                self.fail(where, key, "is missing")
            return default
        value = t[key]
        if not (isinstance(value, list) and len(value) == 2 and all(_is_number(v) for v in value)):
            self.fail(where, key, f"must be two numbers [a, b], got {value!r}")
        return (float(value[0]), float(value[1]))

    def range(self, t: dict, where: str, key: str):
        value = self.pair(t, where, key, default=None)
        if value is not None and not value[0] < value[1]:
            self.fail(where, key, f"must be [low, high] with low < high, got {list(value)}")
        return value

    def zone(self, name: str, where: str) -> None:
        try:
            ZoneInfo(name)
        except (ZoneInfoNotFoundError, ValueError):
            raise ConfigError(
                f"{self.source}: {where} {name!r} is not an IANA time zone (e.g. 'Europe/London')"
            ) from None
