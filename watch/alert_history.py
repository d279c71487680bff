"""Alerts as they stood at any time, and their history, rebuilt from the stored events.

``alert_events`` records every state change (with the value and the assessed time), every
acknowledgement, shelving (with its expiry), un-shelving and closing of an alert, each at the
time of the clock that caused it. :func:`alerts_as_at` replays them up to a time, so that
``status --at``, ``alerts --at`` and ``board --at`` show the alert states of that time beside
the factors of safety of that time; :func:`alert_history` lists them for a period
(``slipwatch alerts history``, the board's timelines, the report).
"""

from __future__ import annotations

import json
from datetime import datetime

from watch.store import Store, utc_text

__all__ = ["alerts_as_at", "alert_history", "EVENT_WORDS"]

#: How each stored event reads in a timeline.
EVENT_WORDS = {
    "state change": "state change",
    "acknowledged": "acknowledged",
    "shelved": "shelved",
    "unshelved": "un-shelved",
    "closed": "closed by an engineer",
}


def alerts_as_at(store: Store, at: datetime, section_id: str | None = None) -> list[dict]:
    """The stored alerts (of a section) as they stood at ``at``: rows of ``alerts`` whose
    ``state``, ``episode``, ``last_value`` (the value at the newest change), acknowledgement,
    shelving and ``state_json`` (since, changes) are rebuilt from the events up to ``at``.
    Alerts created after ``at`` are left out."""
    at_text = utc_text(at)
    events: dict[int, list[dict]] = {}
    for event in store.alert_event_rows(end_utc=at_text, section_id=section_id):
        events.setdefault(event["alert_id"], []).append(event)
    result = []
    for row in store.alert_rows(section_id):
        own = events.get(row["id"], [])
        if not own and row["raised_utc"] > at_text:
            continue
        result.append(_replayed(row, own, at_text))
    return result


def _replayed(row: dict, events: list[dict], at_text: str) -> dict:
    state, episode, value, since, changes = "inactive", 0, None, None, []
    acknowledged = shelved = None
    for event in events:
        if event["new_state"]:
            state, since = event["new_state"], event["time_utc"]
            episode = event["episode"] if event["episode"] is not None else episode
            value = event["value"] if event["event"] == "state change" else value
            changes.append(event["time_utc"])
        elif event["event"] == "acknowledged":
            acknowledged = event
        elif event["event"] == "shelved":
            shelved = event
        elif event["event"] == "unshelved":
            shelved = None
    if shelved is not None and (shelved["until_utc"] is None or shelved["until_utc"] <= at_text):
        shelved = None
    stored = json.loads(row["state_json"] or "{}")
    return {
        **row, "state": state, "episode": episode, "last_value": value, "updated_utc": at_text,
        "state_json": json.dumps({"since": since, "condition_since": None,
                                  "last_evaluated": min(stored.get("last_evaluated") or at_text, at_text),
                                  "changes": changes}),
        "acknowledged_episode": acknowledged["episode"] if acknowledged else None,
        "acknowledged_by": acknowledged["by_name"] if acknowledged else None,
        "acknowledged_utc": acknowledged["time_utc"] if acknowledged else None,
        "acknowledged_note": acknowledged["note"] if acknowledged else None,
        "shelved_until_utc": shelved["until_utc"] if shelved else None,
        "shelved_by": shelved["by_name"] if shelved else None,
        "shelved_reason": shelved["note"] if shelved else None,
        "shelved_utc": shelved["time_utc"] if shelved else None,
    }  # fmt: skip


def alert_history(store: Store, start: datetime | None = None, end: datetime | None = None,
                  section_id: str | None = None) -> list[dict]:  # fmt: skip
    """Every event of the alerts (of a section) in [start, end], oldest first: ``time_utc``,
    ``section_id``, ``rule``, ``kind``, ``level``, ``event`` (as stored) and ``what`` (in
    words), ``old_state``, ``new_state``, ``episode``, ``value``, ``by`` and ``note``."""
    rows = store.alert_event_rows(None if start is None else utc_text(start),
                                  None if end is None else utc_text(end), section_id)  # fmt: skip
    return [{
        "time_utc": r["time_utc"], "alert_id": r["alert_id"], "section_id": r["section_id"],
        "rule": r["rule"], "kind": r["kind"], "level": r["level"], "event": r["event"],
        "what": (f"{r['old_state']} -> {r['new_state']}" if r["event"] == "state change"
                 else EVENT_WORDS.get(r["event"], r["event"])),
        "old_state": r["old_state"], "new_state": r["new_state"], "episode": r["episode"],
        "value": r["value"], "by": r["by_name"], "note": r["note"],
    } for r in rows]  # fmt: skip
