"""Stored alerts: the state machine of :mod:`watch.alerts` kept in the store, the notifications
and inspection requests its changes queue, acknowledgement and shelving.

Everything a cycle changes for a section (alert states, their history, outbox rows, inspection
requests) is written inside the caller's transaction, so a state change and the notification it
causes are stored together or not at all; the outbox's idempotency key
(``section/rule/episode/kind``) makes a repeated cycle queue nothing twice. A restart reloads the
records: it neither resets an alert nor re-sends it.
"""

from __future__ import annotations

import json
import math
import re
from dataclasses import dataclass, field
from datetime import datetime, timedelta

import pandas as pd

from watch.alert_history import alerts_as_at
from watch.alerts import (
    AlertRecord,
    AlertState,
    AlertView,
    Announcement,
    Direction,
    Transition,
    announcements,
    evaluate,
    is_chattering,
)
from watch.caution import CAUTION
from watch.clock import Clock
from watch.config import SiteConfig
from watch.errors import UserError
from watch.inspections import open_request
from watch.store import Store, parse_utc_text, utc_text
from watch.triggers import (NEVER_REPORTED_AGE_H, SITE_ALERTS, AlertSettings, SectionRule, alert_settings,
                            section_gauge)
from watch.workspace import Workspace

__all__ = [
    "MAX_SHELVE",
    "SectionContext",
    "site_context",
    "watch_failures",
    "AlertOutcome",
    "process_section_alerts",
    "release_shelved",
    "last_evaluations",
    "list_alerts",
    "acknowledge",
    "shelve",
    "record_of",
    "value_text",
    "happening",
    "record_json",
]

#: Longest a person may shelve an alert for. Shelving is for a known nuisance (an instrument
#: awaiting repair), not a way to switch an alarm off; common practice, no source.
MAX_SHELVE = timedelta(days=31)


@dataclass
class SectionContext:
    """What every message about a section repeats: the slope, its factor of safety and trend,
    the water and rain behind it and the age of its data."""

    site_id: str
    site_name: str
    section_id: str
    section_name: str
    at: datetime
    fos: float | None = None
    method: str | None = None
    fos_24h_ago: float | None = None
    status: str = "ok"
    message: str = ""
    live: bool = True
    water: dict = field(default_factory=dict)  # line -> {"source", "heads_m": {instrument: m}}
    gauge: str | None = None
    rain_24h_mm: float | None = None
    rain_7d_mm: float | None = None
    ages_h: dict = field(default_factory=dict)  # instrument -> age of newest reading [h] or None
    rain: pd.Series | None = None
    stale_hours: float = 6.0
    last_evaluated: dict = field(default_factory=dict)  # rule -> datetime
    assessment_id: int | None = None

    def trend(self) -> str:
        if self.fos is None:
            return "no factor of safety available"
        if self.fos_24h_ago is None:
            return "no value 24 h earlier to compare with"
        change = self.fos - self.fos_24h_ago
        word = "falling" if change < -0.005 else "rising" if change > 0.005 else "steady"
        return f"{word} ({change:+.2f} in 24 h, from {self.fos_24h_ago:.2f})"

    def facts(self) -> dict:
        return {
            "site_id": self.site_id, "site_name": self.site_name, "section_id": self.section_id,
            "section_name": self.section_name, "time_utc": utc_text(self.at),
            "fos": self.fos, "method": self.method, "fos_24h_ago": self.fos_24h_ago,
            "assessment_status": self.status, "fos_from_live_readings": self.live,
            "water_lines": self.water, "gauge_id": self.gauge, "rain_24h_mm": self.rain_24h_mm,
            "rain_7d_mm": self.rain_7d_mm,
            "reading_age_h": {k: None if v is None else round(v, 2) for k, v in self.ages_h.items()},
            "assessment_id": self.assessment_id,
        }  # fmt: skip


def site_context(config: SiteConfig, now: datetime, failures: list[str]) -> SectionContext:
    """The context of the site's own alerts (stored under :data:`SITE_ALERTS`): the watch
    itself, and what of it failed (``failures``, in words; none: it works)."""
    failed = "; ".join(failures)
    return SectionContext(
        site_id=config.id, site_name=config.name, section_id=SITE_ALERTS, section_name="the watch itself",
        at=now, status="failed" if failed else "ok", message=failed[:2000],
    )  # fmt: skip


@dataclass
class AlertOutcome:
    changes: list[str] = field(default_factory=list)
    notifications: int = 0
    inspections: int = 0
    warnings: list[str] = field(default_factory=list)
    #: The chattering alerts' warnings (also in ``warnings``), kept apart so that the cycle
    #: report lists them without searching the text of the warnings.
    chattering: list[str] = field(default_factory=list)


# --- records in the store -----------------------------------------------------------------------


def record_of(row: dict) -> AlertRecord:
    """The state-machine record of a stored alert row."""
    data = json.loads(row["state_json"] or "{}")
    when = lambda text: None if text is None else parse_utc_text(text)  # noqa: E731
    return AlertRecord(
        section_id=row["section_id"], rule_name=row["rule"], state=AlertState(row["state"]),
        since=when(data.get("since")), condition_since=when(data.get("condition_since")),
        episode=row["episode"], last_value=row["last_value"],
        last_evaluated=when(data.get("last_evaluated")),
        changes=tuple(parse_utc_text(t) for t in data.get("changes", [])),
    )  # fmt: skip


def record_json(record: AlertRecord) -> str:
    """The ``state_json`` of a stored alert (the inverse of :func:`record_of`'s reading)."""
    text = lambda moment: None if moment is None else utc_text(moment)  # noqa: E731
    return json.dumps({
        "since": text(record.since), "condition_since": text(record.condition_since),
        "last_evaluated": text(record.last_evaluated), "changes": [utc_text(t) for t in record.changes],
    })  # fmt: skip


def last_evaluations(store: Store, section_id: str) -> dict[str, datetime]:
    """When each stored alert of a section was last evaluated."""
    return {row["rule"]: record_of(row).last_evaluated for row in store.alert_rows(section_id)
            if record_of(row).last_evaluated is not None}  # fmt: skip


def _shelved(row: dict | None, now: datetime) -> bool:
    return bool(row and row["shelved_until_utc"] and parse_utc_text(row["shelved_until_utc"]) > now)


# --- one section's cycle ------------------------------------------------------------------------


def process_section_alerts(
    store: Store,
    config: SiteConfig,
    settings: AlertSettings,
    section_id: str,
    rules: list[SectionRule],
    values: dict[str, float | None],
    at: datetime,
    now: datetime,
    context: SectionContext,
) -> AlertOutcome:
    """Evaluate every rule of a section at ``at`` and store the results (inside atomic()):
    alert records and their history, the notifications due and the inspection requests."""
    outcome = AlertOutcome()
    rows = {row["rule"]: row for row in store.alert_rows(section_id)}
    evaluated: dict[str, tuple[SectionRule, AlertRecord, list[Transition]]] = {}
    for rule in rules:
        name = rule.rule.name
        row = rows.get(name)
        record = record_of(row) if row else AlertRecord(section_id, name)
        if record.last_evaluated is not None and at < record.last_evaluated:
            outcome.warnings.append(
                f"{section_id}/{name}: evaluated up to {utc_text(record.last_evaluated)}, later "
                f"than {utc_text(at)}; left as it is (alerts do not go back in time)"
            )
            evaluated[name] = (rule, record, [])
            continue
        new, transitions = evaluate(rule.rule, record, values.get(name), at)
        evaluated[name] = (rule, new, transitions)

    ids = {}
    for name, (rule, record, transitions) in evaluated.items():
        row = rows.get(name)
        state = {"state": record.state.value, "state_json": record_json(record),
                 "episode": record.episode, "last_value": record.last_value,
                 "level": rule.rule.level, "rank": rule.rule.rank, "kind": rule.kind,
                 "quantity": rule.rule.quantity, "message": rule.description,
                 "updated_utc": utc_text(now)}  # fmt: skip
        if row is None:
            ids[name] = store.add_alert({"section_id": section_id, "instrument_id": rule.instrument,
                                         "rule": name, "raised_utc": utc_text(now), **state})  # fmt: skip
        else:
            ids[name] = row["id"]
            store.update_alert(row["id"], state)
        for t in transitions:
            store.add_alert_event({
                "alert_id": ids[name], "time_utc": utc_text(t.at), "event": "state change",
                "old_state": t.old.value, "new_state": t.new.value, "episode": t.episode,
                "value": t.value, "assessment_id": context.assessment_id, "created_utc": utc_text(now),
            })  # fmt: skip
            # A yes/no rule's value adds nothing to its state change; a number is said in words
            # where it is a mark (never "1e+06" for an instrument that never reported).
            outcome.changes.append(f"{name}: {t.old.value} -> {t.new.value}"
                                   + (f" at {value_text(t.value, rule.rule.quantity)}"
                                      if t.value is not None and rule.rule.quantity not in _YES_NO
                                      else ""))  # fmt: skip
        window = timedelta(hours=settings.cycle.chatter_window_hours)
        if is_chattering(record, window, settings.cycle.chatter_max_changes, now=at):
            count = sum(at - t <= window for t in record.changes)
            warning = (f"chattering: {section_id}/{name} changed state {count} times in "
                       f"{settings.cycle.chatter_window_hours:g} h; "
                       "widen its deadband or add delays")
            outcome.warnings.append(warning)
            outcome.chattering.append(warning)

    views = {
        name: AlertView(name, rule.kind, rule.rule.rank, record.state, record.episode,
                        rows[name]["notified_episode"] if name in rows else 0,
                        _shelved(rows.get(name), now))  # fmt: skip
        for name, (rule, record, _) in evaluated.items()
    }
    transitions = [t for _, _, ts in evaluated.values() for t in ts]
    rule_of = {name: rule for name, (rule, _, _) in evaluated.items()}
    for announcement in announcements(transitions, views):
        _announce(store, settings, announcement, rule_of, views, ids, context, now, outcome)
    return outcome


def _announce(store: Store, settings: AlertSettings, announcement: Announcement, rule_of: dict,
              views: dict, ids: dict, context: SectionContext, now: datetime,
              outcome: AlertOutcome) -> None:  # fmt: skip
    """Queue one notification for the announcement (every rule of its level that changed
    alike in this cycle), mark what people now know, and open one inspection request."""
    t = announcement.transition
    rule = rule_of[t.rule_name]
    level = settings.level(rule.rule.level)
    standing = [rule_of[name] for name in announcement.also_told]
    subject, body = _message(announcement, rule_of, level, standing, context)
    payload = {
        "kind": announcement.kind, "rule": t.rule_name, "rule_description": rule.description,
        "level": level.name, "rank": level.rank, "old_state": t.old.value, "new_state": t.new.value,
        "value": t.value, "episode": t.episode, "standing_levels": [r.rule.level for r in standing],
        "standing": [{"rule": name, "episode": views[name].episode} for name in announcement.also_told],
        "rules": [{"rule": x.rule_name, "alert_id": ids[x.rule_name],
                   "description": rule_of[x.rule_name].description,
                   "value": x.value, "value_text": value_text(x.value, rule_of[x.rule_name].rule.quantity),
                   "old_state": x.old.value, "new_state": x.new.value, "episode": x.episode}
                  for x in announcement.transitions],
        "still_firing": list(announcement.still_firing),
        "expectation": _expectation(announcement.kind, level, standing, settings,
                                    bool(announcement.still_firing)),
        **context.facts(),
    }  # fmt: skip
    queued = store.queue_notification({
        "idempotency_key": f"{context.section_id}/{t.rule_name}/{t.episode}/{announcement.kind}",
        "site_id": context.site_id, "section_id": context.section_id, "alert_id": ids[t.rule_name],
        "kind": announcement.kind, "level": level.name, "subject": subject, "body": body,
        "payload_json": json.dumps(payload, default=_plain), "created_utc": utc_text(now),
    })  # fmt: skip
    outcome.notifications += queued is not None
    for x in announcement.transitions:
        if x.new is AlertState.FIRING:
            store.update_alert(ids[x.rule_name], {"notified_episode": x.episode})
    for name in announcement.also_told:
        store.update_alert(ids[name], {"notified_episode": views[name].episode})
    if t.new is AlertState.FIRING and level.inspection_due_hours is not None:
        reasons = "; ".join(f"{rule_of[x.rule_name].description}: "
                            f"{value_text(x.value, rule_of[x.rule_name].rule.quantity)}"
                            for x in announcement.transitions)
        opened = open_request(store, context.section_id, ids[t.rule_name], t.rule_name, level,
                              t.episode, now, reasons)  # fmt: skip
        if opened is not None:
            outcome.inspections += 1
            due = now + timedelta(hours=level.inspection_due_hours)
            lines = [f"Inspection request #{opened} for {context.section_id} "
                     f"({context.section_name}), level {level.name}: due by {_when(due)}.",
                     f"Reason: {reasons}.",
                     "Look at:"] + [f"  - {item}" for item in level.checklist] + [
                     f"Close it with `slipwatch inspections close {opened} --note ... --by ...`.",
                     CAUTION]  # fmt: skip
            outcome.notifications += store.queue_notification({
                "idempotency_key": f"{context.section_id}/{t.rule_name}/{t.episode}/inspection",
                "site_id": context.site_id, "section_id": context.section_id,
                "alert_id": ids[t.rule_name], "kind": "inspection", "level": level.name,
                "subject": f"[slipwatch] {context.site_name or context.site_id}: inspect "
                           f"{context.section_id} by {_when(due)} ({level.name})",
                "body": "\n".join(lines),
                "payload_json": json.dumps({"inspection_id": opened, "due_utc": utc_text(due),
                                            "checklist": list(level.checklist), **payload},
                                           default=_plain),
                "created_utc": utc_text(now),
            }) is not None  # fmt: skip


# --- messages -------------------------------------------------------------------------------------


#: Headlines say where the section stands, in words that hold whichever way the watched
#: quantity moves (a factor of safety clears upwards, a head or rain total downwards).
_HEADLINES = {
    "firing": "has reached level {level}",
    "escalated": "has escalated to level {level}",
    "resolved": "is no longer at level {level} (resolved)",
    "data resolved": "has data again (data problem resolved)",
    "de-escalated": "has come down from level {level} to {standing}",
    "level stands": "is still at level {level} (one rule resolved, another still fires)",
    "data": "has a data problem",
}


def _message(announcement: Announcement, rule_of: dict, level, standing: list[SectionRule],
             context: SectionContext) -> tuple[str, str]:  # fmt: skip
    kind, t = announcement.kind, announcement.transition
    rule = rule_of[t.rule_name]
    name = context.section_id + (f" ({context.section_name})" if context.section_name else "")
    standing_words = ", ".join(dict.fromkeys(r.rule.level for r in standing)) or "none"
    key = "data resolved" if kind == "resolved" and rule.kind == "data" else kind
    if kind == "resolved" and announcement.still_firing:
        key = "level stands"  # this rule cleared, another of its level still fires
    headline = _HEADLINES[key].format(level=level.name.upper(), standing=standing_words.upper())
    happened = [happening(rule_of[x.rule_name], x) for x in announcement.transitions]
    # The subject names what fired (or cleared), whatever the factor of safety did.
    subject = (f"[slipwatch] {context.site_name or context.site_id}: {context.section_id} "
               + re.sub(r" \((resolved|data problem resolved|one rule resolved, another still fires)\)$", "",
                        headline)
               + ": " + "; ".join(happened))  # fmt: skip
    lines = [f"{name} on {context.site_name or context.site_id} {headline} at {_when(t.at)}."]
    for x, words in zip(announcement.transitions, happened):
        what = "cleared" if x.new is AlertState.RESOLVED else "triggered"
        lines.append(f"Rule {x.rule_name} {what}: {words}.")
    if key == "level stands":
        lines.append(f"Still firing at level {level.name}: " + ", ".join(announcement.still_firing) + ".")
    if context.section_id == SITE_ALERTS:
        lines.append(f"What failed: {context.message or 'nothing any more'}.")
    elif context.fos is not None:
        lines.append(f"Factor of safety: {context.fos:.2f} ({context.method}), {context.trend()}.")
    else:
        lines.append(f"Factor of safety: not available ({context.message or context.status}).")
    for line_name, water in context.water.items():
        heads = ", ".join(f"{i} {h:.2f} m" for i, h in water["heads_m"].items()) or "no instrument"
        lines.append(f"Water line {line_name}: from {water['source']} ({heads}).")
    if context.gauge:
        rain = [f"{v:.1f} mm in {label}" for v, label in ((context.rain_24h_mm, "24 h"),
                                                          (context.rain_7d_mm, "7 days"))
                if v is not None]  # fmt: skip
        lines.append(f"Rain at {context.gauge}: {', '.join(rain) or 'no usable record'}.")
    ages = [(a, i) for i, a in context.ages_h.items() if a is not None]
    missing = [i for i, a in context.ages_h.items() if a is None]
    if ages:
        oldest, which = max(ages)
        lines.append(f"Data age: newest readings {min(ages)[0]:.1f} h old; oldest {oldest:.1f} h ({which}).")
    if missing:
        lines.append(f"No reading at all from {', '.join(missing)}.")
    lines.append("What is expected of you: "
                 + _expectation(kind, level, standing, None, bool(announcement.still_firing)))
    lines.append(CAUTION)
    return subject, "\n".join(lines)


def _expectation(kind: str, level, standing: list, settings, stands: bool = False) -> str:
    if kind == "resolved" and stands:  # one rule resolved, its level still stands
        return "the level still stands: " + (level.expectation or "review the slope's readings and trend.")
    if kind == "resolved":
        return ("nothing more for this alert; close any inspection request still open once the "
                "slope has been looked at.")
    if kind == "de-escalated":
        return ("follow the instructions of the level that still stands ("
                + ", ".join(dict.fromkeys(r.rule.level for r in standing)) + ").")
    return level.expectation or "review the slope's readings and trend."


def happening(rule: SectionRule, transition: Transition) -> str:
    """What a rule's transition means, in words whose direction matches the quantity: a
    factor of safety is "at or below" its trigger and "back above" its clear value; a head,
    rise or rain total "at or above" and "back below"."""
    quantity = rule.rule.quantity
    if rule.kind == "data":
        if transition.new is AlertState.RESOLVED:
            return f"{rule.watched or rule.rule.name} back to normal"
        # A yes/no data rule's description says it all; an age is worth its number.
        return rule.description + (f" ({value_text(transition.value, quantity)})"
                                   if quantity == "age_h" else "")
    what = rule.watched or rule.description or rule.rule.name
    value = value_text(transition.value, quantity)
    below = rule.rule.direction is Direction.BELOW
    if transition.new is AlertState.RESOLVED:
        side = "back above" if below else "back below"
        return f"{what} {value}, {side} its clear value {value_text(rule.rule.clear, quantity)}"
    side = "at or below" if below else "at or above"
    return f"{what} {value}, {side} the trigger {value_text(rule.rule.trigger, quantity)}"


#: Units and decimals of the watched quantities in messages (see watch.formatting).
_UNITS = {"fos": "", "head_m": " m", "rise_m_per_h": " m/h", "rain_mm": " mm", "rain_id_ratio": ""}
_DECIMALS = {"fos": 2, "head_m": 2, "rise_m_per_h": 3, "rain_mm": 1, "rain_id_ratio": 2}


#: Quantities that are a yes (1) or a no (0).
_YES_NO = ("flat", "suspect", "failed", "section_file")


def value_text(value, quantity: str) -> str:
    """A watched value as people read it, with its unit; the cycle's "never reported" age is
    said in words, never as its sentinel number."""
    if value is None or not math.isfinite(value):
        return "no value"
    if quantity == "age_h":
        return "never reported" if value >= NEVER_REPORTED_AGE_H else f"{value:.1f} h since the newest reading"
    if quantity in _YES_NO:
        return "yes" if value >= 1 else "no"
    return f"{value:.{_DECIMALS.get(quantity, 2)}f}{_UNITS.get(quantity, '')}"


def _when(moment: datetime) -> str:
    return moment.strftime("%Y-%m-%d %H:%M UTC")


def _plain(value):
    if hasattr(value, "item"):
        return value.item()
    if hasattr(value, "isoformat"):
        return value.isoformat()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    raise TypeError(f"cannot write {type(value).__name__} as JSON")


# --- shelving and acknowledgement -----------------------------------------------------------------


def release_shelved(store: Store, config: SiteConfig, settings: AlertSettings, now: datetime) -> list[str]:
    """Un-shelve every alert whose shelving expired; an alert that fires and was held while
    shelved is announced now (with its inspection request). One transaction per alert."""
    released = []
    for row in store.alert_rows():
        if not row["shelved_until_utc"] or parse_utc_text(row["shelved_until_utc"]) > now:
            continue
        section_id = row["section_id"]
        if section_id == SITE_ALERTS:
            rules = {r.rule.name: r for r in settings.site_rules()}
        elif config.section_ref(section_id) is not None:
            rules = {r.rule.name: r for r in settings.rules_for(config, section_id)}
        else:
            rules = {}  # a section no longer in the site file
        with store.atomic():
            store.update_alert(row["id"], {"shelved_until_utc": None, "shelved_by": None,
                                           "shelved_reason": None, "shelved_utc": None})  # fmt: skip
            store.add_alert_event({"alert_id": row["id"], "time_utc": utc_text(now), "event": "unshelved",
                                   "note": "shelving expired", "created_utc": utc_text(now)})  # fmt: skip
            released.append(f"{section_id}/{row['rule']}")
            rule = rules.get(row["rule"])
            if rule is None or row["state"] != AlertState.FIRING.value or row["notified_episode"] == row["episode"]:
                continue
            section_rows = {r["rule"]: r for r in store.alert_rows(section_id)}
            views = {name: AlertView(name, r["kind"], r["rank"], AlertState(r["state"]), r["episode"],
                                     r["notified_episode"], _shelved(r, now))
                     for name, r in section_rows.items() if name in rules}  # fmt: skip
            held = Transition(section_id, row["rule"], rule.rule.level, rule.rule.rank, AlertState.FIRING,
                              AlertState.FIRING, now, row["last_value"], row["episode"])  # fmt: skip
            if section_id == SITE_ALERTS:
                last = store.last_ingest_failures()
                context = site_context(config, now, last[1] if last else [])
            else:
                context = _stored_context(store, config, section_id, now)
            outcome = AlertOutcome()
            for announcement in announcements([held], views):
                _announce(store, settings, announcement, rules, views,
                          {n: r["id"] for n, r in section_rows.items()}, context, now, outcome)  # fmt: skip
    return released


def _stored_context(store: Store, config: SiteConfig, section_id: str, now: datetime) -> SectionContext:
    last = store.last_assessment(section_id, with_fos=True)
    earlier = None
    if last is not None:
        earlier = store.last_assessment(
            section_id, utc_text(parse_utc_text(last["time_utc"]) - timedelta(hours=24)), with_fos=True)
    ref = config.section_ref(section_id)
    return SectionContext(
        site_id=config.id, site_name=config.name, section_id=section_id, section_name="",
        at=now, fos=last["fos"] if last else None, method=last["method"] if last else None,
        fos_24h_ago=earlier["fos"] if earlier else None,
        gauge=section_gauge(config, section_id) if ref else None,
        assessment_id=last["id"] if last else None,
    )  # fmt: skip


def list_alerts(workspace: Workspace, clock: Clock, open_only: bool = False, at: datetime | None = None) -> list[dict]:
    """Every stored alert (open ones: pending or firing), worst first, with acknowledgement,
    shelving and the number of state changes in the chattering window; with ``at``, as they
    stood then (rebuilt from their events: ``last_value`` is the value at the newest change)."""
    config = workspace.config()
    settings = alert_settings(config)
    now = clock.now() if at is None else at
    window = timedelta(hours=settings.cycle.chatter_window_hours)
    states = [AlertState.PENDING.value, AlertState.FIRING.value] if open_only else None
    with workspace.open_store(read_only=True) as store:
        rows = store.alert_rows(states=states) if at is None else [
            r for r in alerts_as_at(store, at) if states is None or r["state"] in states]
    result = []
    for row in rows:
        record = record_of(row)
        result.append({
            "id": row["id"], "section_id": row["section_id"], "rule": row["rule"],
            "kind": row["kind"], "level": row["level"], "rank": row["rank"], "state": row["state"],
            "since_utc": utc_text(record.since) if record.since else None,
            "episode": row["episode"], "last_value": row["last_value"],
            "value_text": value_text(row["last_value"], row["quantity"] or ""),
            "description": row["message"],
            "acknowledged": bool(row["acknowledged_episode"] and row["acknowledged_episode"] == row["episode"]),
            "acknowledged_by": row["acknowledged_by"], "acknowledged_utc": row["acknowledged_utc"],
            "acknowledged_note": row["acknowledged_note"],
            "shelved": _shelved(row, now), "shelved_until_utc": row["shelved_until_utc"],
            "shelved_by": row["shelved_by"], "shelved_reason": row["shelved_reason"],
            "changes_in_window": sum(now - t <= window for t in record.changes),
            "chattering": is_chattering(record, window, settings.cycle.chatter_max_changes, now),
            "watch_failing": _watch_failing(row),
        })  # fmt: skip
    order = {AlertState.FIRING.value: 0, AlertState.PENDING.value: 1}
    # An open alert of the watch itself comes first: while it is open no section's factor of
    # safety can be trusted to be current.
    result.sort(key=lambda a: (not a["watch_failing"], order.get(a["state"], 2),
                               -a["rank"] if a["kind"] != "data" else 0, a["section_id"] or "", a["rule"]))  # fmt: skip
    return result


def _watch_failing(row: dict) -> bool:
    """Whether a stored alert says that the watch itself is failing: an open site alert."""
    return row["section_id"] == SITE_ALERTS and row["state"] in (AlertState.PENDING.value, AlertState.FIRING.value)


def watch_failures(workspace: Workspace) -> list[dict]:
    """The open alerts of the watch itself (the site's own alerts, pending or firing), each
    with a ``headline`` in words for the top of ``status`` and ``alerts``: while one is open,
    no section's factor of safety can be trusted to be current. Opens the store read-only."""
    with workspace.open_store(read_only=True) as store:
        rows = [row for row in store.alert_rows(SITE_ALERTS) if _watch_failing(row)]
        last = store.last_ingest_failures() if rows else None
    result = []
    for row in rows:
        since = record_of(row).since
        what = "; ".join(last[1]) if last else row["message"]
        when = f" (last at {last[0]})" if last else ""
        result.append({
            "alert_id": row["id"], "rule": row["rule"], "state": row["state"],
            "since_utc": utc_text(since) if since else None, "what_failed": last[1] if last else [],
            "headline": (f"the watch itself is failing: {what}{when}; alert #{row['id']} {row['rule']} "
                         f"{row['state']} since {utc_text(since) if since else '-'}. No section's factor of "
                         "safety can be trusted to be current until this is put right."),
        })  # fmt: skip
    return result


def acknowledge(workspace: Workspace, clock: Clock, alert_id: int, by: str, note: str = "") -> dict:
    """Record that ``by`` has seen a firing alert (this episode; a new firing needs a new
    acknowledgement). Acknowledging stops nothing: the alert keeps being evaluated."""
    if not by.strip():
        raise UserError("say who acknowledges: --by NAME")
    now = clock.now()
    with workspace.open_store() as store, store.atomic():
        row = _alert(store, alert_id)
        if row["state"] not in (AlertState.FIRING.value, AlertState.PENDING.value):
            raise UserError(f"alert {alert_id} ({row['section_id']}/{row['rule']}) is {row['state']}, "
                            "not firing or pending: nothing to acknowledge")  # fmt: skip
        store.update_alert(alert_id, {"acknowledged_utc": utc_text(now), "acknowledged_by": by,
                                      "acknowledged_note": note, "acknowledged_episode": row["episode"]})  # fmt: skip
        store.add_alert_event({"alert_id": alert_id, "time_utc": utc_text(now), "event": "acknowledged",
                               "episode": row["episode"], "by_name": by, "note": note,
                               "created_utc": utc_text(now)})  # fmt: skip
        return store.alert_row(alert_id)


def shelve(workspace: Workspace, clock: Clock, alert_id: int, until: datetime, reason: str, by: str) -> dict:
    """Shelve an alert until ``until`` (mandatory, at most :data:`MAX_SHELVE` ahead): its
    firing notifications and inspection requests are held until then and released if it
    still fires; its resolution is always notified. It un-shelves itself at the first cycle
    after ``until``."""
    if not by.strip() or not reason.strip():
        raise UserError("shelving needs who (--by NAME) and why (--reason TEXT)")
    if until.tzinfo is None:
        raise UserError(f"--until {until.isoformat()} has no time zone; give UTC, e.g. 2026-01-20T18:00Z")
    now = clock.now()
    if until <= now:
        raise UserError(f"--until {utc_text(until)} is not in the future (now {utc_text(now)})")
    if until - now > MAX_SHELVE:
        raise UserError(f"--until {utc_text(until)} is more than {MAX_SHELVE.days} days ahead; "
                        "shelve for a shorter time (shelving is not a way to switch an alert off)")  # fmt: skip
    with workspace.open_store() as store, store.atomic():
        row = _alert(store, alert_id)
        store.update_alert(alert_id, {"shelved_until_utc": utc_text(until), "shelved_by": by,
                                      "shelved_reason": reason, "shelved_utc": utc_text(now)})  # fmt: skip
        store.add_alert_event({"alert_id": alert_id, "time_utc": utc_text(now), "event": "shelved",
                               "episode": row["episode"], "by_name": by,
                               "note": f"until {utc_text(until)}: {reason}", "until_utc": utc_text(until),
                               "created_utc": utc_text(now)})  # fmt: skip
        return store.alert_row(alert_id)


def _alert(store: Store, alert_id: int) -> dict:
    row = store.alert_row(alert_id)
    if row is None:
        raise UserError(f"no alert {alert_id}; list them with `slipwatch alerts`")
    return row
