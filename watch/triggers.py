"""Trigger levels, trigger rules and cycle settings from the site file (docs/formats.md, section 2).

The owner names the levels (``[[level]]``: name, rank, what is expected of whoever is told,
the inspection checklist and due-by time) and sets the rules (``[[trigger]]``) on the factor of
safety, piezometric heads, rate of rise, rainfall totals and intensity-duration curves. A rule
without ``section`` is a site default; a rule with ``section = "ID"`` overrides the site rule of
the same name for that section, adds a rule there, or (``enabled = false``) switches it off.
Data-quality rules (stale feed, flat-lined or suspect instrument, failed or non-converged
assessment) are built for every section from ``[data_alerts]``: missing data are an alert of
their own, never a quiet "all clear".

The shipped values in config/site.toml are examples (common practice, no source): levels and
values are the owner's decision.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import timedelta
from functools import cached_property

from watch.alerts import Direction, TriggerRule
from watch.config import Piezometer, SiteConfig, TableReader
from watch.errors import ConfigError
from watch.rainfall import (
    CAINE_1980,
    DEFAULT_DRY_GAP_H,
    GUZZETTI_2008_GLOBAL,
    IntensityDurationThreshold,
    gauge_for_section,
)

__all__ = [
    "QUANTITIES",
    "RAIN_CURVES",
    "DATA_LEVEL",
    "SITE_ALERTS",
    "NEVER_REPORTED_AGE_H",
    "SECTION_FILE_RULE",
    "Level",
    "TriggerSpec",
    "SectionRule",
    "DataAlertSettings",
    "CycleSettings",
    "AlertSettings",
    "alert_settings",
    "section_gauge",
]

#: Watched quantities: canonical name -> (unsafe side, unit, needs).
QUANTITIES = {
    "fos": (Direction.BELOW, "-", "section"),  # factor of safety of the critical surface
    "head_m": (Direction.ABOVE, "m", "instrument"),  # piezometric head at the tip
    "rise_m_per_h": (Direction.ABOVE, "m/h", "instrument"),  # rate of rise of head over a window
    "rain_mm": (Direction.ABOVE, "mm", "gauge"),  # rain total over a window ending now
    "rain_id_ratio": (Direction.ABOVE, "-", "gauge"),  # I / I_curve(D) of the rain event under way
}

#: Published intensity-duration curves a rule may name (watch.rainfall).
RAIN_CURVES: dict[str, IntensityDurationThreshold] = {
    "caine_1980": CAINE_1980,
    "guzzetti_2008_global": GUZZETTI_2008_GLOBAL,
}

#: Level name and rank of the data-quality alerts. They form their own group: they neither
#: suppress nor are suppressed by the owner's levels, since a feed that stopped matters most
#: while a slope is at its worst.
DATA_LEVEL = "data"
#: Age given to an instrument that has never reported [h]: older than any stale limit. A mark
#: for the stale-feed rule, said in words wherever people read it (watch.alerting.value_text).
NEVER_REPORTED_AGE_H = 1.0e6

#: Section id under which the site's own data-quality alerts are stored (the watch itself
#: failing: an ingest that could not read its files); not a [[section]] id.
SITE_ALERTS = "(site)"

#: Name of the data alert a section raises while its section file cannot be used.
SECTION_FILE_RULE = "data-section-file"


@dataclass(frozen=True)
class Level:
    """A trigger level named by the owner.

    Attributes
    ----------
    name : str
    rank : int
        Severity, higher is worse (>= 1).
    expectation : str
        What is expected of whoever is told (put in every notification of the level).
    inspection_due_hours : float or None
        A firing at this level opens a site-inspection request due this many hours later;
        None: no inspection at this level.
    checklist : tuple of str
        What the inspector looks at.
    """

    name: str
    rank: int
    expectation: str = ""
    inspection_due_hours: float | None = None
    checklist: tuple[str, ...] = ()


@dataclass(frozen=True)
class TriggerSpec:
    """One ``[[trigger]]`` entry as written (a site default or a section's own)."""

    name: str
    section: str | None
    enabled: bool
    quantity: str | None = None
    level: str | None = None
    trigger: float | None = None
    clear: float | None = None
    on_delay: timedelta = timedelta(0)
    off_delay: timedelta = timedelta(0)
    instrument: str | None = None
    window_hours: float | None = None
    curve: str | None = None
    dry_gap_hours: float | None = None


@dataclass(frozen=True)
class SectionRule:
    """A rule as it applies to one section: the state-machine rule and what it watches."""

    rule: TriggerRule
    kind: str  # "level" (the owner's levels) or "data" (data quality)
    instrument: str | None = None  # piezometer or rain gauge watched
    window_hours: float | None = None
    curve: IntensityDurationThreshold | None = None
    description: str = ""
    dry_gap_hours: float = DEFAULT_DRY_GAP_H  # rain events end after this long without rain
    #: What the rule watches, in a few words ("rain at RG-1 over 24 h"), for message subjects.
    watched: str = ""


@dataclass(frozen=True)
class DataAlertSettings:
    """``[data_alerts]``: the data-quality rules built for every section.

    stale_hours: newest reading older than this [h] (default ``[ingest] stale_hours``) is a
    stale feed; it clears when the age is back to ``stale_clear_hours`` or less.
    """

    stale_hours: float
    stale_clear_hours: float
    flat_line: bool = True
    suspect: bool = True
    assessment: bool = True
    ingest: bool = True
    on_delay: timedelta = timedelta(0)
    off_delay: timedelta = timedelta(0)


@dataclass(frozen=True)
class CycleSettings:
    """``[cycle]``: how the assessment cycle calculates and what it calls chattering."""

    full_search_every_hours: float = 24.0
    full_search_tolerance: float = 0.05
    chatter_window_hours: float = 24.0
    chatter_max_changes: int = 6
    cluster: str | None = None  # Dask scheduler address (or local:N) the cycle computes on
    sections_per_task: int | None = None  # sections per Dask task (None: the executor's default)


@dataclass(frozen=True)
class AlertSettings:
    levels: dict[str, Level]
    triggers: tuple[TriggerSpec, ...]
    data: DataAlertSettings
    cycle: CycleSettings
    source: str = "site.toml"

    def level(self, name: str) -> Level:
        if name == DATA_LEVEL:
            return Level(DATA_LEVEL, 0, "Check the instruments and the logger: until data "
                         "arrive again the factor of safety is not being watched.")
        return self.levels[name]

    @cached_property
    def _triggers_by_section(self) -> dict[str | None, tuple[TriggerSpec, ...]]:
        # Site defaults under None; a cycle asks for every section's rules, and a network
        # with an override per section would otherwise be scanned whole for each one.
        by_section: dict[str | None, list[TriggerSpec]] = {}
        for spec in self.triggers:
            by_section.setdefault(spec.section, []).append(spec)
        return {section: tuple(specs) for section, specs in by_section.items()}

    def rules_for(self, config: SiteConfig, section_id: str) -> list[SectionRule]:
        """Every rule that applies to ``section_id``: site defaults with the section's
        overrides, then the data-quality rules of its instruments and its assessment."""
        chosen: dict[str, TriggerSpec] = {}
        for spec in self._triggers_by_section.get(None, ()):
            chosen[spec.name] = _merged(None, spec, self.source)
        for spec in self._triggers_by_section.get(section_id, ()):
            base = chosen.get(spec.name)
            chosen[spec.name] = _merged(base, spec, self.source)
        rules = []
        gauge = section_gauge(config, section_id)
        for spec in chosen.values():
            if not spec.enabled:
                continue
            need = QUANTITIES[spec.quantity][2]
            instrument = spec.instrument
            if need == "instrument":
                piezometer = config.instruments.get(instrument)
                if not isinstance(piezometer, Piezometer) or piezometer.section != section_id:
                    continue  # a head rule belongs to its instrument's section only
            elif need == "gauge":
                instrument = instrument or gauge
                if instrument is None:
                    continue
            rules.append(_section_rule(spec, self.levels[spec.level], instrument, self.source))
        rules.extend(self._data_rules(config, section_id, gauge))
        return rules

    def site_rules(self) -> list[SectionRule]:
        """The data-quality rules of the site as a whole (stored under :data:`SITE_ALERTS`):
        ``data-ingest``, the watch failing to ingest its feed files."""
        if not self.data.ingest:
            return []
        return [SectionRule(
            TriggerRule(name="data-ingest", quantity="failed", level=DATA_LEVEL, rank=0, direction=Direction.ABOVE,
                        trigger=1.0, clear=0.0, on_delay=self.data.on_delay, off_delay=self.data.off_delay),
            "data", description="the watch itself is failing: the ingest of the feed files failed (the "
                                "files and errors are listed in the log and by the cycle)",
            watched="ingest of the feed files",
        )]  # fmt: skip

    def _data_rules(self, config: SiteConfig, section_id: str, gauge: str | None) -> list[SectionRule]:
        data = self.data
        common = dict(level=DATA_LEVEL, rank=0, direction=Direction.ABOVE,
                      on_delay=data.on_delay, off_delay=data.off_delay)  # fmt: skip
        rules = []
        instruments = [p.id for p in config.piezometers_of(section_id)]
        watched = instruments + ([gauge] if gauge else [])
        if watched:
            # One stale-feed alert per section (its oldest instrument), not one per instrument:
            # a logger that stops silences all its instruments at once, and one message says so.
            rules.append(SectionRule(
                TriggerRule(name="data-stale", quantity="age_h", trigger=data.stale_hours,
                            clear=data.stale_clear_hours, **common),
                "data", description=f"no reading for more than {data.stale_hours:g} h from "
                                    f"{' or '.join(watched)} (stale feed)",
                watched="age of the newest reading",
            ))  # fmt: skip
        for iid in instruments:
            if data.flat_line:
                rules.append(SectionRule(
                    TriggerRule(name=f"data-flat-{iid}", quantity="flat", trigger=1.0, clear=0.0,
                                **common),
                    "data", iid, description=f"{iid} repeats one value (flat-lined sensor)",
                    watched=f"flat-lined {iid}",
                ))  # fmt: skip
            if data.suspect:
                rules.append(SectionRule(
                    TriggerRule(name=f"data-suspect-{iid}", quantity="suspect", trigger=1.0,
                                clear=0.0, **common),
                    "data", iid,
                    description=f"{iid} sent readings out of its valid range or jumping faster "
                                "than a head can rise (spikes)",
                    watched=f"suspect readings of {iid}",
                ))  # fmt: skip
        if data.assessment:
            file = config.section(section_id).file
            rules.append(SectionRule(
                TriggerRule(name=SECTION_FILE_RULE, quantity="section_file", trigger=1.0, clear=0.0,
                            **common),
                "data", description=f"section file {file} missing, unreadable or invalid (the last "
                                    "valid parameter version stays in force)",
            ))  # fmt: skip
            rules.append(SectionRule(
                TriggerRule(name="data-assessment", quantity="failed", trigger=1.0, clear=0.0,
                            **common),
                "data", description="the factor of safety could not be calculated or did not "
                                    "converge",
                watched="calculation of the factor of safety",
            ))  # fmt: skip
        return rules


def alert_settings(config: SiteConfig) -> AlertSettings:
    """Read ``[[level]]``, ``[[trigger]]``, ``[data_alerts]`` and ``[cycle]`` of the site file.

    Raises ConfigError naming the file, the table and the key.
    """
    source = str(config.path) if config.path else "site.toml"
    r = TableReader(source)
    raw = config.raw
    levels: dict[str, Level] = {}
    for i, t in enumerate(r.array(raw, "level")):
        level = _level(r, t, i)
        if level.name in levels or level.name == DATA_LEVEL:
            r.fail(f"[[level]] {level.name!r}", "name",
                   "is used more than once" if level.name in levels
                   else f"{DATA_LEVEL!r} is reserved for the data-quality alerts")  # fmt: skip
        levels[level.name] = level
    ranks = [lv.rank for lv in levels.values()]
    for level in levels.values():
        if ranks.count(level.rank) > 1:
            r.fail(f"[[level]] {level.name!r}", "rank", f"{level.rank} is shared with another level")
    sections = {s.id for s in config.sections}
    triggers = tuple(_trigger(r, t, i, levels, sections, config) for i, t in
                     enumerate(r.array(raw, "trigger")))  # fmt: skip
    keys = [(t.section, t.name) for t in triggers]
    for spec in triggers:
        if keys.count((spec.section, spec.name)) > 1:
            where = f"[[trigger]] {spec.name!r}" + (f" of section {spec.section!r}" if spec.section else "")
            r.fail(where, "name", "is used more than once")
    settings = AlertSettings(levels, triggers, _data(r, r.table(raw, "data_alerts", "[data_alerts]"), config),
                             _cycle(r, r.table(raw, "cycle", "[cycle]")), source)  # fmt: skip
    for section in config.sections:
        settings.rules_for(config, section.id)  # every rule complete, every deadband on the safe side
    return settings


# --- parsing ----------------------------------------------------------------------------------


def _level(r: TableReader, t: dict, i: int) -> Level:
    where = f"[[level]] {t['name']!r}" if isinstance(t.get("name"), str) else f"[[level]] #{i + 1}"
    r.keys(t, where, {"name", "rank", "expectation", "inspection_due_hours", "checklist"})
    rank = r.get(t, where, "rank", int)
    if rank < 1:
        r.fail(where, "rank", f"must be >= 1 (higher is worse), got {rank}")
    due = r.number(t, where, "inspection_due_hours", default=None)
    if due is not None and due <= 0:
        r.fail(where, "inspection_due_hours", f"must be > 0, got {due}")
    checklist = t.get("checklist", [])
    if not (isinstance(checklist, list) and all(isinstance(c, str) for c in checklist)):
        r.fail(where, "checklist", f"must be a list of strings, got {checklist!r}")
    if due is not None and not checklist:
        r.fail(where, "checklist", "is needed when inspection_due_hours is given (what to look at)")
    return Level(
        name=r.get(t, where, "name", str),
        rank=rank,
        expectation=r.get(t, where, "expectation", str, default=""),
        inspection_due_hours=due,
        checklist=tuple(checklist),
    )


def _trigger(r: TableReader, t: dict, i: int, levels: dict, sections: set, config: SiteConfig) -> TriggerSpec:
    name = t.get("name")
    where = f"[[trigger]] {name!r}" if isinstance(name, str) else f"[[trigger]] #{i + 1}"
    r.keys(t, where, {"name", "section", "enabled", "quantity", "level", "trigger", "clear",
                      "on_delay_hours", "off_delay_hours", "instrument", "window_hours", "curve",
                      "dry_gap_hours"})
    name = r.get(t, where, "name", str)
    section = r.get(t, where, "section", str, default=None)
    if section is not None:
        where += f" of section {section!r}"
        if section not in sections:
            r.fail(where, "section", f"{section!r} is not a [[section]] id")
    if name.startswith("data-"):
        r.fail(where, "name", "must not start with 'data-' (kept for the data-quality alerts)")
    quantity = r.get(t, where, "quantity", str, default=None)
    if quantity is not None and quantity not in QUANTITIES:
        r.fail(where, "quantity", f"must be one of {', '.join(QUANTITIES)}; got {quantity!r}")
    level = r.get(t, where, "level", str, default=None)
    if level is not None and level not in levels:
        r.fail(where, "level", f"{level!r} is not a [[level]] name (levels: "
                               f"{', '.join(levels) or 'none'})")  # fmt: skip
    instrument = r.get(t, where, "instrument", str, default=None)
    if instrument is not None and instrument not in config.instruments:
        r.fail(where, "instrument", f"{instrument!r} is not a piezometer or rain gauge id")
    window = r.number(t, where, "window_hours", default=None)
    if window is not None and window <= 0:
        r.fail(where, "window_hours", f"must be > 0, got {window}")
    curve = r.get(t, where, "curve", str, default=None)
    if curve is not None and curve not in RAIN_CURVES:
        r.fail(where, "curve", f"must be one of {', '.join(RAIN_CURVES)}; got {curve!r}")
    gap = r.number(t, where, "dry_gap_hours", default=None)
    if gap is not None and gap <= 0:
        r.fail(where, "dry_gap_hours", f"must be > 0, got {gap}")
    delays = {}
    for key in ("on_delay_hours", "off_delay_hours"):
        hours = r.number(t, where, key, default=None)
        if hours is not None and hours < 0:
            r.fail(where, key, f"must be >= 0, got {hours}")
        delays[key] = hours
    return TriggerSpec(
        name=name, section=section, enabled=r.get(t, where, "enabled", bool, default=True),
        quantity=quantity, level=level, trigger=r.number(t, where, "trigger", default=None),
        clear=r.number(t, where, "clear", default=None),
        on_delay=None if delays["on_delay_hours"] is None else timedelta(hours=delays["on_delay_hours"]),
        off_delay=None if delays["off_delay_hours"] is None else timedelta(hours=delays["off_delay_hours"]),
        instrument=instrument, window_hours=window, curve=curve, dry_gap_hours=gap,
    )  # fmt: skip


def _merged(base: TriggerSpec | None, spec: TriggerSpec, source: str) -> TriggerSpec:
    """The section's rule: its own values where given, the site rule's elsewhere; checked
    complete (the state-machine rule itself checks the deadband)."""
    values = {}
    for key in ("quantity", "level", "trigger", "clear", "on_delay", "off_delay", "instrument",
                "window_hours", "curve", "dry_gap_hours"):
        own = getattr(spec, key)
        values[key] = own if own is not None else (getattr(base, key) if base else None)
    merged = TriggerSpec(name=spec.name, section=spec.section, enabled=spec.enabled,
                         on_delay=values.pop("on_delay") or timedelta(0),
                         off_delay=values.pop("off_delay") or timedelta(0), **values)  # fmt: skip
    if merged.enabled:
        where = f"{source}: [[trigger]] {spec.name!r}" + (
            f" of section {spec.section!r}" if spec.section else "")
        for key in ("quantity", "level", "trigger", "clear"):
            if getattr(merged, key) is None:
                raise ConfigError(f"{where} key {key!r} is missing")
        need = QUANTITIES[merged.quantity][2]
        if need == "instrument" and merged.instrument is None:
            raise ConfigError(f"{where} key 'instrument' is missing (a {merged.quantity} rule "
                              "watches one piezometer)")
        if merged.quantity in ("rise_m_per_h", "rain_mm") and merged.window_hours is None:
            raise ConfigError(f"{where} key 'window_hours' is missing (the {merged.quantity} "
                              "rule needs the length of its window)")
        if merged.quantity == "rain_id_ratio" and merged.curve is None:
            raise ConfigError(f"{where} key 'curve' is missing (one of {', '.join(RAIN_CURVES)})")
    return merged


def _section_rule(spec: TriggerSpec, level: Level, instrument: str | None, source: str) -> SectionRule:
    direction, unit, _ = QUANTITIES[spec.quantity]
    try:
        rule = TriggerRule(name=spec.name, quantity=spec.quantity, level=level.name,
                           rank=level.rank, trigger=spec.trigger, clear=spec.clear,
                           direction=direction, on_delay=spec.on_delay, off_delay=spec.off_delay)  # fmt: skip
    except ConfigError as error:
        raise ConfigError(f"{source}: {error}") from None
    window = f"{spec.window_hours:g} h" if spec.window_hours else ""
    gap = DEFAULT_DRY_GAP_H if spec.dry_gap_hours is None else spec.dry_gap_hours
    what = {
        "fos": "factor of safety",
        "head_m": f"piezometric head at {instrument}",
        "rise_m_per_h": f"rise of head at {instrument} over {window}",
        "rain_mm": f"rain at {instrument} over {window}",
        "rain_id_ratio": f"rain event at {instrument} (ended by {gap:g} h dry) against the "
                         f"{spec.curve} intensity-duration curve",
    }[spec.quantity]
    side = "at or below" if direction is Direction.BELOW else "at or above"
    return SectionRule(
        rule, "level", instrument, spec.window_hours,
        RAIN_CURVES.get(spec.curve) if spec.curve else None,
        description=f"{what} {side} {spec.trigger:g} {unit}".rstrip(" -"),
        dry_gap_hours=gap,
        watched=what,
    )


def _data(r: TableReader, t: dict, config: SiteConfig) -> DataAlertSettings:
    where = "[data_alerts]"
    r.keys(t, where, {"stale_hours", "stale_clear_hours", "flat_line", "suspect", "assessment", "ingest",
                      "on_delay_hours", "off_delay_hours"})  # fmt: skip
    stale = r.number(t, where, "stale_hours", default=config.ingest.stale_hours)
    if stale <= 0:
        r.fail(where, "stale_hours", f"must be > 0, got {stale}")
    clear = r.number(t, where, "stale_clear_hours", default=stale / 2)
    if not 0 <= clear < stale:
        r.fail(where, "stale_clear_hours", f"must be >= 0 and below stale_hours ({stale:g}), got {clear}")
    delays = {}
    for key in ("on_delay_hours", "off_delay_hours"):
        hours = r.number(t, where, key, default=0.0)
        if hours < 0:
            r.fail(where, key, f"must be >= 0, got {hours}")
        delays[key] = timedelta(hours=hours)
    return DataAlertSettings(
        stale_hours=stale, stale_clear_hours=clear,
        flat_line=r.get(t, where, "flat_line", bool, default=True),
        suspect=r.get(t, where, "suspect", bool, default=True),
        assessment=r.get(t, where, "assessment", bool, default=True),
        ingest=r.get(t, where, "ingest", bool, default=True),
        on_delay=delays["on_delay_hours"], off_delay=delays["off_delay_hours"],
    )  # fmt: skip


def _cycle(r: TableReader, t: dict) -> CycleSettings:
    where = "[cycle]"
    r.keys(t, where, {"full_search_every_hours", "full_search_tolerance", "chatter_window_hours",
                      "chatter_max_changes", "cluster", "sections_per_task"})  # fmt: skip
    default = CycleSettings()
    every = r.number(t, where, "full_search_every_hours", default=default.full_search_every_hours)
    tolerance = r.number(t, where, "full_search_tolerance", default=default.full_search_tolerance)
    window = r.number(t, where, "chatter_window_hours", default=default.chatter_window_hours)
    changes = r.get(t, where, "chatter_max_changes", int, default=default.chatter_max_changes)
    for key, value in (("full_search_every_hours", every), ("chatter_window_hours", window)):
        if value <= 0:
            r.fail(where, key, f"must be > 0, got {value}")
    if not 0 <= tolerance < 1:
        r.fail(where, "full_search_tolerance", f"must be a fraction in [0, 1), got {tolerance}")
    if changes < 1:
        r.fail(where, "chatter_max_changes", f"must be >= 1, got {changes}")
    cluster = r.get(t, where, "cluster", str, default=None)
    if cluster is not None and not (cluster.startswith("local:") or "://" in cluster):
        r.fail(where, "cluster", f"must be a scheduler address such as tcp://10.0.0.5:8786 or local:N, "
                                 f"got {cluster!r}")  # fmt: skip
    per_task = r.get(t, where, "sections_per_task", int, default=None)
    if per_task is not None and per_task < 1:
        r.fail(where, "sections_per_task", f"must be >= 1, got {per_task}")
    return CycleSettings(every, tolerance, window, changes, cluster, per_task)


def section_gauge(config: SiteConfig, section_id: str) -> str | None:
    """The gauge the site file names for the section, else the nearest one, else None."""
    ref = config.section(section_id)
    if ref.gauge is not None:
        return ref.gauge  # checked against the [[rain_gauge]] ids when the site file was read
    located = {g.id: g.location for g in config.rain_gauges if g.location is not None}
    if ref.location is None or not located:
        return None
    return gauge_for_section(ref.location, located)
