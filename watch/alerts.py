"""Trigger levels and the alert state machine, as pure functions.

Each alert is keyed by (section, rule) and follows the states

    inactive -> pending -> firing -> resolved -> (pending -> firing ...)

* pending: the trigger condition holds but not yet for the rule's on-delay;
* firing: it has held for the on-delay (one notification is due);
* resolved: the clear condition (the other side of the deadband) has held for the off-delay
  (one "resolved" notification is due). A resolved alert behaves like an inactive one.

A missing value (no data, failed or non-converged calculation) never moves an alert towards
"resolved": the alert keeps its state and the data-quality rules report the gap. That is what
stops a silent "all clear" when data stop arriving.

The record is plain data so the store can keep it between cycles; restarting the service reloads
it, so a restart neither resets an alert nor re-sends its notification.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from datetime import datetime, timedelta
from enum import Enum

from watch.errors import ConfigError

__all__ = [
    "AlertState",
    "Direction",
    "TriggerRule",
    "AlertRecord",
    "Transition",
    "evaluate",
    "notifiable",
    "is_chattering",
    "AlertView",
    "Announcement",
    "announcements",
]


class AlertState(str, Enum):
    INACTIVE = "inactive"
    PENDING = "pending"
    FIRING = "firing"
    RESOLVED = "resolved"


class Direction(str, Enum):
    """Which side of the trigger value is unsafe."""

    BELOW = "below"  # e.g. factor of safety: unsafe when it falls below the trigger value
    ABOVE = "above"  # e.g. piezometric head, rate of rise, rainfall: unsafe above it


@dataclass(frozen=True)
class TriggerRule:
    """One trigger level on one quantity.

    Parameters
    ----------
    name : str
        Unique name of the rule within a section, e.g. ``"fos-amber"``.
    quantity : str
        Canonical name of the watched quantity (``fos``, ``head_m``, ``rise_m_per_h``, ...).
    level : str
        The owner's name of the level, e.g. ``"amber"``; shown to people.
    rank : int
        Severity order of the level; higher is worse. Drives escalation and suppression.
    trigger, clear : float
        Value at which the condition starts, and the value it must get back past to clear
        (the deadband). For ``BELOW`` rules ``clear > trigger``; for ``ABOVE`` rules
        ``clear < trigger``: the clear value must lie on the safe side.
    direction : Direction
    on_delay, off_delay : timedelta
        How long the condition (or the clear condition) must hold before firing (or resolving).
    """

    name: str
    quantity: str
    level: str
    rank: int
    trigger: float
    clear: float
    direction: Direction = Direction.BELOW
    on_delay: timedelta = timedelta(0)
    off_delay: timedelta = timedelta(0)

    def __post_init__(self) -> None:
        direction = Direction(self.direction)
        object.__setattr__(self, "direction", direction)
        if not (math.isfinite(self.trigger) and math.isfinite(self.clear)):
            raise ConfigError(
                f"trigger rule '{self.name}': trigger and clear values must be numbers, "
                f"got trigger={self.trigger!r}, clear={self.clear!r}"
            )
        safe_side = self.clear > self.trigger if direction is Direction.BELOW else (
            self.clear < self.trigger
        )
        if not safe_side:
            side = "above" if direction is Direction.BELOW else "below"
            raise ConfigError(
                f"trigger rule '{self.name}': clear value {self.clear} must lie on the safe side "
                f"of the trigger value {self.trigger} (strictly {side} it for a "
                f"'{direction.value}' rule)"
            )
        for label, delay in (("on_delay", self.on_delay), ("off_delay", self.off_delay)):
            if delay < timedelta(0):
                raise ConfigError(f"trigger rule '{self.name}': {label} must not be negative, "
                                  f"got {delay}")

    def triggered(self, value: float) -> bool:
        """True when ``value`` is on the unsafe side of the trigger value (inclusive)."""
        if self.direction is Direction.BELOW:
            return value <= self.trigger
        return value >= self.trigger

    def cleared(self, value: float) -> bool:
        """True when ``value`` is back past the clear value (inclusive)."""
        if self.direction is Direction.BELOW:
            return value >= self.clear
        return value <= self.clear


@dataclass(frozen=True)
class AlertRecord:
    """Stored state of one alert (one section, one rule)."""

    section_id: str
    rule_name: str
    state: AlertState = AlertState.INACTIVE
    since: datetime | None = None  # when the alert entered its current state
    condition_since: datetime | None = None  # pending: trigger held since; firing: clear held since
    episode: int = 0  # counts firing episodes; notifications and inspections key on it
    last_value: float | None = None
    last_evaluated: datetime | None = None
    changes: tuple[datetime, ...] = field(default_factory=tuple)  # recent state changes


@dataclass(frozen=True)
class Transition:
    """A state change, with what caused it. Firing and resolved transitions are notified."""

    section_id: str
    rule_name: str
    level: str
    rank: int
    old: AlertState
    new: AlertState
    at: datetime
    value: float | None
    episode: int

    @property
    def notify(self) -> bool:
        return self.new in (AlertState.FIRING, AlertState.RESOLVED)


#: State changes kept per alert for the chattering count.
_CHANGE_HISTORY = 50


def evaluate(
    rule: TriggerRule, record: AlertRecord, value: float | None, at: datetime
) -> tuple[AlertRecord, list[Transition]]:
    """Advance one alert by one observation.

    Parameters
    ----------
    rule : TriggerRule
    record : AlertRecord
        The stored state (a new ``AlertRecord(section_id, rule.name)`` for a new alert).
    value : float or None
        The observed quantity at ``at``; None or NaN when there is no value (missing data, failed
        calculation). A missing value leaves the state as it is.
    at : datetime
        Time of the observation (UTC, timezone-aware). Observations must not go back in time.

    Returns
    -------
    (AlertRecord, list of Transition)
        The new record and the state changes made (empty when nothing changed).
    """
    if record.last_evaluated is not None and at < record.last_evaluated:
        raise ValueError(
            f"alert {record.section_id}/{record.rule_name}: observation at {at.isoformat()} is "
            f"earlier than the last one at {record.last_evaluated.isoformat()}"
        )
    if value is None or not math.isfinite(value):
        return replace(record, last_evaluated=at), []

    state = record.state
    condition_since = record.condition_since
    transitions: list[Transition] = []

    def move(new_state: AlertState, new_since: datetime | None) -> None:
        nonlocal state, condition_since
        transitions.append(
            Transition(record.section_id, rule.name, rule.level, rule.rank, state, new_state, at,
                       value, record.episode + (1 if new_state is AlertState.FIRING else 0))
        )
        state = new_state
        condition_since = new_since

    if state in (AlertState.INACTIVE, AlertState.RESOLVED):
        if rule.triggered(value):
            move(AlertState.PENDING, at)
    if state is AlertState.PENDING:
        if not rule.triggered(value):
            # The condition lapsed before the on-delay ran out: back to quiet, nothing notified.
            move(AlertState.INACTIVE, None)
        elif at - condition_since >= rule.on_delay:
            move(AlertState.FIRING, None)
    elif state is AlertState.FIRING:
        if rule.cleared(value):
            if condition_since is None:
                condition_since = at
            if at - condition_since >= rule.off_delay:
                move(AlertState.RESOLVED, None)
        else:
            # Inside the deadband or still triggered: the off-delay starts again.
            condition_since = None

    episode = record.episode + sum(t.new is AlertState.FIRING for t in transitions)
    changes = (record.changes + tuple(t.at for t in transitions))[-_CHANGE_HISTORY:]
    since = transitions[-1].at if transitions else record.since
    new_record = replace(
        record,
        state=state,
        since=since,
        condition_since=condition_since,
        episode=episode,
        last_value=value,
        last_evaluated=at,
        changes=changes,
    )
    return new_record, transitions


def notifiable(transitions: list[Transition], firing_rank: dict[str, int]) -> list[Transition]:
    """The transitions that people should hear about, after suppression.

    A lower-level alert of a section is suppressed while a higher level of the same section fires:
    its firing is not notified when the section already fires at a higher rank. Resolution of a
    level is always notified when that level's firing was notified, so every notified alarm gets
    its "resolved" message; the caller tracks that with ``Transition.episode``.

    Parameters
    ----------
    transitions : list of Transition
        State changes from one cycle.
    firing_rank : dict
        Highest rank firing per section *after* the cycle (section id -> rank); sections with
        nothing firing may be absent.
    """
    kept = []
    for transition in transitions:
        if not transition.notify:
            continue
        top = firing_rank.get(transition.section_id, -math.inf)
        if transition.new is AlertState.FIRING and transition.rank < top:
            continue
        kept.append(transition)
    return kept


def is_chattering(record: AlertRecord, window: timedelta, max_changes: int, now: datetime) -> bool:
    """True when the alert changed state more than ``max_changes`` times within ``window``
    before ``now`` (a flapping signal, or a deadband too narrow for the noise)."""
    recent = [t for t in record.changes if now - t <= window]
    return len(recent) > max_changes


@dataclass(frozen=True)
class AlertView:
    """What the announcement rules need to know of one alert of a section, after a cycle.

    ``kind`` is "level" for the owner's trigger levels (which escalate, de-escalate and
    suppress one another by ``rank``) and "data" for data-quality alerts (which stand apart).
    ``notified_episode`` is the firing episode people were last told about.
    """

    rule_name: str
    kind: str
    rank: int
    state: AlertState
    episode: int
    notified_episode: int = 0
    shelved: bool = False

    @property
    def told(self) -> bool:
        """People were told that the current episode fires."""
        return self.episode > 0 and self.notified_episode == self.episode


@dataclass(frozen=True)
class Announcement:
    """A notification due for a transition: kind is one of firing, escalated, resolved,
    de-escalated, data (a data-quality alert firing); ``also_told`` lists alerts that the
    message reports as standing (a de-escalation names the level that still fires), which
    count as notified from then on; ``still_firing`` names the rules by which a resolved rule's
    level still stands (the section's highest level); ``together`` holds the other transitions of the same kind
    and level in the same cycle, announced in this one message (and one inspection request)."""

    transition: Transition
    kind: str
    also_told: tuple[str, ...] = ()
    together: tuple[Transition, ...] = ()
    still_firing: tuple[str, ...] = ()  # a resolution's level still stands by these rules

    @property
    def transitions(self) -> tuple[Transition, ...]:
        """Every transition this message announces, the leading one first."""
        return (self.transition, *self.together)


def announcements(transitions: list[Transition], alerts: dict[str, AlertView]) -> list[Announcement]:
    """The notifications due for one section's transitions of one cycle.

    Rules (issue 6): one notification per state change that people must hear about, and one
    for all the rules of one level that change alike in one cycle (issue 15: two amber rules
    firing together are one message and one inspection request; one rule of the section's
    highest level resolving while another rule of that level still fires is announced with the
    rules that stand, so that nobody reads the level as over); a firing
    of the owner's levels is suppressed while a higher level of the section fires (it is
    reported as "escalated" when a lower level had been announced); a shelved alert's firing
    is held until it is un-shelved; every firing that was announced gets its resolution
    ("de-escalated" while a lower level still fires, else "resolved"), shelved or not, so no
    one is left believing an alarm stands. Missing data never resolve anything (see
    :func:`evaluate`).

    Parameters
    ----------
    transitions : list of Transition
        The section's state changes of this cycle.
    alerts : dict of str to AlertView
        Every alert of the section by rule name, *after* the cycle's evaluation, with
        ``notified_episode`` as it was *before* the cycle.
    """
    levels = [a for a in alerts.values() if a.kind == "level"]
    top = max((a.rank for a in levels if a.state is AlertState.FIRING), default=-1)
    told = {a.rule_name for a in alerts.values() if a.told}
    result = []
    for transition in sorted(transitions, key=lambda t: (t.new is AlertState.FIRING, t.rank)):
        view = alerts[transition.rule_name]
        if transition.new is AlertState.FIRING:
            if view.shelved or (view.kind == "level" and transition.rank < top):
                continue
            if view.kind == "data":
                result.append(Announcement(transition, "data"))
            else:
                lower_told = any(a.rule_name in told and a.state is AlertState.FIRING
                                 and a.rank < transition.rank for a in levels)  # fmt: skip
                result.append(Announcement(transition, "escalated" if lower_told else "firing"))
            told.add(transition.rule_name)
        elif transition.new is AlertState.RESOLVED and view.notified_episode == transition.episode:
            told.discard(transition.rule_name)
            same = [a.rule_name for a in levels if a.state is AlertState.FIRING
                    and a.rank == transition.rank and a.rule_name != transition.rule_name]
            if view.kind == "level" and same and top == transition.rank:
                # This rule's alarm is over, but the section's level still stands by another
                # rule: the message names those (``still_firing``) instead of saying the level
                # cleared.
                result.append(Announcement(transition, "resolved", still_firing=tuple(same)))
                continue
            standing = sorted(
                (a for a in levels if a.state is AlertState.FIRING and a.rank < transition.rank
                 and a.rule_name != transition.rule_name),
                key=lambda a: -a.rank,
            ) if view.kind == "level" else []  # fmt: skip
            if standing and top < transition.rank:
                result.append(Announcement(transition, "de-escalated",
                                           tuple(a.rule_name for a in standing)))
                told.update(a.rule_name for a in standing)
            else:
                result.append(Announcement(transition, "resolved"))
    return _together(result, alerts)


def _together(result: list[Announcement], alerts: dict[str, AlertView]) -> list[Announcement]:
    """One announcement per kind and level: the transitions of the later ones of the same kind,
    level rank and alert kind ride along with the first (its ``also_told`` merged)."""
    merged: dict[tuple, Announcement] = {}
    for item in result:
        key = (item.kind, item.transition.rank, alerts[item.transition.rule_name].kind)
        first = merged.get(key)
        if first is None:
            merged[key] = item
            continue
        also = tuple(dict.fromkeys(n for n in (*first.also_told, *item.also_told)
                                   if n not in {t.rule_name for t in (*first.transitions, item.transition)}))
        gone = {t.rule_name for t in (*first.transitions, item.transition)}
        still = tuple(n for n in dict.fromkeys((*first.still_firing, *item.still_firing)) if n not in gone)
        merged[key] = replace(first, also_told=also, together=(*first.together, item.transition),
                              still_firing=still)
    return list(merged.values())
