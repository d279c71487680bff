"""Service states of sections, set by an engineer: in service, slipped, closed, under repair.

A section without a recorded state is in service. While a section is not in service the
cycle neither calculates it nor evaluates its alerts: a slope that has slipped is not watched
on its pre-slip geometry, and its open alerts stay open (they do not "resolve" because the
model says so) until an engineer closes each with a note (:func:`close_alert`). A slipped
section returns to service only on a newer parameter version than the one in force when it
slipped (the post-slip or repaired geometry, loaded by editing its section file) and with no
level alert left open. Every change records when (the time it applies from), who and why.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass
from datetime import datetime

from watch.alerting import record_json, record_of
from watch.alerts import AlertState
from watch.clock import Clock
from watch.errors import UserError
from watch.parameters import follow_section_file
from watch.store import Store, utc_text
from watch.workspace import Workspace

__all__ = [
    "STATES",
    "IN_SERVICE",
    "OUT_OF_SERVICE",
    "ServiceState",
    "service_state",
    "service_states",
    "state_history",
    "set_service_state",
    "close_alert",
]

IN_SERVICE = "in-service"
#: States in which the cycle leaves a section alone.
OUT_OF_SERVICE = ("slipped", "closed", "under-repair")
STATES = (IN_SERVICE, *OUT_OF_SERVICE)

_OPEN = (AlertState.FIRING.value, AlertState.PENDING.value)


@dataclass(frozen=True)
class ServiceState:
    """A section's service state from ``time_utc`` on, set by ``by`` with ``note``."""

    section_id: str
    state: str
    time_utc: str
    by: str
    note: str
    section_version_id: int | None = None

    @property
    def in_service(self) -> bool:
        return self.state == IN_SERVICE

    @property
    def words(self) -> str:
        """The state as people read it ("under repair")."""
        return self.state.replace("-", " ")

    def describe(self) -> str:
        return f"{self.words} since {self.time_utc} (set by {self.by}: {self.note})"

    @classmethod
    def from_row(cls, row: dict) -> ServiceState:
        return cls(row["section_id"], row["state"], row["time_utc"], row["by_name"], row["note"],
                   row["section_version_id"])  # fmt: skip


def state_history(store: Store, section_id: str | None = None, at: datetime | None = None) -> list[ServiceState]:
    """Every service-state change (of a section; up to ``at``), oldest first."""
    rows = store.service_state_rows(section_id, None if at is None else utc_text(at))
    return [ServiceState.from_row(r) for r in rows]


def service_state(store: Store, section_id: str, at: datetime) -> ServiceState | None:
    """The section's state at ``at``; None when it was never set (in service)."""
    history = state_history(store, section_id, at)
    return history[-1] if history else None


def service_states(store: Store, at: datetime) -> dict[str, ServiceState]:
    """The newest state of every section that has one, at ``at``."""
    return {s.section_id: s for s in state_history(store, at=at)}


def set_service_state(workspace: Workspace, clock: Clock, section_id: str, state: str, by: str, note: str,
                      at: datetime | None = None) -> ServiceState:  # fmt: skip
    """Record that ``section_id`` is in ``state`` from ``at`` (default the clock's now).

    Raises UserError for an unknown state or section, a missing name or note, a time later
    than now or earlier than the section's newest state, the state it already has, or a
    return to service that the section is not ready for (see the module text)."""
    state = state.strip().lower().replace(" ", "-")
    if state not in STATES:
        raise UserError(f"unknown section state {state!r}; choose one of {', '.join(STATES)}")
    now, at = _who_why_when(clock, by, note, at, "a section state")
    config = workspace.config()
    config.section(section_id)  # unknown id: the error lists the known ones
    with workspace.open_store() as store, store.atomic():
        history = state_history(store, section_id)
        current = history[-1] if history else None
        if current is not None and utc_text(at) < current.time_utc:
            raise UserError(f"section {section_id} has a newer state ({current.describe()}); a state "
                            f"cannot be set before it ({utc_text(at)})")  # fmt: skip
        if (current.state if current else IN_SERVICE) == state:
            raise UserError(f"section {section_id} is already {state.replace('-', ' ')}")
        version = follow_section_file(workspace, store, section_id, now, config=config)
        if state == IN_SERVICE:
            _check_return(store, section_id, history, version.version_id)
        store.add_service_state({
            "section_id": section_id, "state": state, "time_utc": utc_text(at), "by_name": by.strip(),
            "note": note.strip(), "section_version_id": version.version_id, "created_utc": utc_text(now),
        })  # fmt: skip
        return ServiceState(section_id, state, utc_text(at), by.strip(), note.strip(), version.version_id)


def _who_why_when(clock: Clock, by: str, note: str, at: datetime | None, what: str) -> tuple[datetime, datetime]:
    """(now, when it happened) of a person's record; UserError without a name or note, or for a
    time later than now."""
    if not by.strip() or not note.strip():
        raise UserError(f"{what} needs who (--by NAME) and why (--note TEXT)")
    now = clock.now()
    at = now if at is None else at
    if at > now:
        raise UserError(f"--at {utc_text(at)} is later than now ({utc_text(now)})")
    return now, at


def _check_return(store: Store, section_id: str, history: list[ServiceState], version_id: int | None) -> None:
    since_service = []
    for item in history:
        since_service = [] if item.in_service else since_service + [item]
    slipped = [s for s in since_service if s.state == "slipped"]
    if slipped and version_id == slipped[-1].section_version_id:
        raise UserError(
            f"section {section_id} slipped ({slipped[-1].describe()}) and its parameter version is "
            "still the one in force then: put the post-slip or repaired geometry in its section file "
            "first (a new version), then return it to service"
        )
    open_levels = [a for a in store.alert_rows(section_id) if a["kind"] == "level" and a["state"] in _OPEN]
    if open_levels:
        listed = ", ".join(f"#{a['id']} {a['rule']} ({a['state']})" for a in open_levels)
        raise UserError(f"section {section_id} still has open alerts ({listed}); close each with "
                        "`slipwatch alerts close ID --by NAME --note TEXT` before returning it to service")  # fmt: skip


def close_alert(workspace: Workspace, clock: Clock, alert_id: int, by: str, note: str,
                at: datetime | None = None) -> dict:  # fmt: skip
    """Close an open alert of a section that is not in service, with who and why (its state
    becomes resolved; the event says it was closed by a person). Alerts of a section in
    service clear by themselves when their condition clears."""
    now, at = _who_why_when(clock, by, note, at, "closing an alert")
    with workspace.open_store() as store, store.atomic():
        row = store.alert_row(alert_id)
        if row is None:
            raise UserError(f"no alert {alert_id}; list them with `slipwatch alerts`")
        if row["state"] not in _OPEN:
            raise UserError(f"alert {alert_id} ({row['section_id']}/{row['rule']}) is {row['state']}: "
                            "nothing to close")  # fmt: skip
        state = service_state(store, row["section_id"], at)
        if state is None or state.in_service:
            raise UserError(f"section {row['section_id']} is in service: its alerts clear by themselves "
                            "when their condition clears (mark it slipped, closed or under repair first)")  # fmt: skip
        record = record_of(row)
        closed = dataclasses.replace(record, state=AlertState.RESOLVED, since=at, condition_since=None,
                                     changes=(*record.changes, at))  # fmt: skip
        store.update_alert(alert_id, {"state": AlertState.RESOLVED.value, "state_json": record_json(closed),
                                      "updated_utc": utc_text(now)})  # fmt: skip
        store.add_alert_event({
            "alert_id": alert_id, "time_utc": utc_text(at), "event": "closed", "old_state": row["state"],
            "new_state": AlertState.RESOLVED.value, "episode": row["episode"], "value": row["last_value"],
            "by_name": by.strip(), "note": note.strip(), "created_utc": utc_text(now),
        })  # fmt: skip
        return store.alert_row(alert_id)
