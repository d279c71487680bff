"""The alert state machine on replayed invented series (invented data: behaviour checks only,
no published reference applies). Trigger values are examples (common practice, no source)."""

from datetime import datetime, timedelta, timezone

import pytest

from watch.alerts import (
    AlertRecord,
    AlertState,
    Direction,
    TriggerRule,
    evaluate,
    is_chattering,
    notifiable,
)
from watch.errors import ConfigError

T0 = datetime(2026, 1, 14, 0, 0, tzinfo=timezone.utc)
STEP = timedelta(minutes=15)


def replay(rule, values, record=None):
    record = record or AlertRecord("WC-040", rule.name)
    states, transitions = [], []
    for i, value in enumerate(values):
        record, changes = evaluate(rule, record, value, T0 + i * STEP)
        states.append(record.state)
        transitions.extend(changes)
    return record, states, transitions


def amber(**overrides):
    options = dict(name="fos-amber", quantity="fos", level="amber", rank=1, trigger=1.25,
                   clear=1.30)
    options.update(overrides)
    return TriggerRule(**options)


def test_crossing_fires_once_and_resolves_once():
    record, states, transitions = replay(amber(), [1.40, 1.30, 1.24, 1.20, 1.22, 1.31, 1.40])
    assert [t.new for t in transitions] == [
        AlertState.PENDING, AlertState.FIRING, AlertState.RESOLVED
    ]
    assert sum(t.notify for t in transitions) == 2
    assert record.episode == 1
    assert states[-1] is AlertState.RESOLVED


def test_deadband_holds_the_alert_until_the_clear_value():
    # 1.27 is back above the trigger (1.25) but inside the deadband (clear 1.30): still firing.
    _, states, _ = replay(amber(), [1.20, 1.27, 1.28, 1.29])
    assert states == [AlertState.FIRING] * 4


def test_noise_around_the_trigger_value_does_not_flap():
    values = [1.24, 1.26, 1.24, 1.26, 1.245, 1.255] * 5
    record, _, transitions = replay(amber(), values)
    assert [t.new for t in transitions] == [AlertState.PENDING, AlertState.FIRING]
    assert record.episode == 1


def test_on_delay_needs_the_condition_to_hold():
    rule = amber(on_delay=timedelta(minutes=30))
    # True for 15 min only, then lapses: never fires.
    _, states, transitions = replay(rule, [1.20, 1.20, 1.40, 1.40])
    assert AlertState.FIRING not in states
    assert [t.new for t in transitions] == [AlertState.PENDING, AlertState.INACTIVE]
    # True for 30 min: fires at the third observation.
    _, states, _ = replay(rule, [1.20, 1.20, 1.20, 1.20])
    assert states == [AlertState.PENDING, AlertState.PENDING, AlertState.FIRING,
                      AlertState.FIRING]


def test_off_delay_restarts_when_the_value_dips_back_into_the_deadband():
    rule = amber(off_delay=timedelta(minutes=30))
    _, states, _ = replay(rule, [1.20, 1.35, 1.35, 1.28, 1.35, 1.35, 1.35])
    assert states[:6] == [AlertState.FIRING] * 6
    assert states[6] is AlertState.RESOLVED


def test_missing_values_never_resolve_an_alert():
    _, states, transitions = replay(amber(), [1.20, None, float("nan"), None])
    assert states == [AlertState.FIRING] * 4
    assert [t.new for t in transitions] == [AlertState.PENDING, AlertState.FIRING]


def test_restart_from_the_stored_record_neither_resets_nor_resends():
    rule = amber(on_delay=timedelta(minutes=30))
    record, _, _ = replay(rule, [1.20, 1.20])  # pending, 15 minutes in
    assert record.state is AlertState.PENDING
    # A "restarted" service continues from the stored record.
    record, changes = evaluate(rule, record, 1.20, T0 + 2 * STEP)
    assert [t.new for t in changes] == [AlertState.FIRING]
    record, changes = evaluate(rule, record, 1.20, T0 + 3 * STEP)
    assert changes == []  # still firing: nothing re-sent


def test_above_rules_for_heads():
    rule = TriggerRule(name="head-p1", quantity="head_m", level="amber", rank=1, trigger=55.0,
                       clear=54.5, direction=Direction.ABOVE)
    _, states, _ = replay(rule, [54.0, 55.2, 54.8, 54.4])
    assert states == [AlertState.INACTIVE, AlertState.FIRING, AlertState.FIRING,
                      AlertState.RESOLVED]


@pytest.mark.parametrize(
    "direction, trigger, clear",
    [(Direction.BELOW, 1.25, 1.20), (Direction.BELOW, 1.25, 1.25), (Direction.ABOVE, 55.0, 56.0)],
)
def test_clear_value_on_the_unsafe_side_is_refused(direction, trigger, clear):
    with pytest.raises(ConfigError, match="must lie on the safe side"):
        TriggerRule(name="bad", quantity="fos", level="amber", rank=1, trigger=trigger,
                    clear=clear, direction=direction)


def test_observations_must_not_go_back_in_time():
    record, _ = evaluate(amber(), AlertRecord("WC-040", "fos-amber"), 1.4, T0)
    with pytest.raises(ValueError, match="earlier than the last one"):
        evaluate(amber(), record, 1.4, T0 - STEP)


def test_lower_level_is_suppressed_while_a_higher_one_fires():
    red = TriggerRule(name="fos-red", quantity="fos", level="red", rank=2, trigger=1.10,
                      clear=1.15)
    amber_rule = amber()
    amber_record = AlertRecord("WC-040", amber_rule.name)
    red_record = AlertRecord("WC-040", red.name)
    amber_record, amber_changes = evaluate(amber_rule, amber_record, 1.05, T0)
    red_record, red_changes = evaluate(red, red_record, 1.05, T0)
    kept = notifiable(amber_changes + red_changes, {"WC-040": 2})
    assert [(t.level, t.new) for t in kept] == [("red", AlertState.FIRING)]


def test_chattering_is_counted():
    rule = amber(clear=1.26)
    values = [1.20, 1.30] * 6
    record, _, _ = replay(rule, values)
    now = T0 + len(values) * STEP
    assert is_chattering(record, timedelta(hours=6), max_changes=8, now=now)
    assert not is_chattering(record, timedelta(hours=6), max_changes=100, now=now)


# --- announcements: escalation, de-escalation, suppression, shelving -------------------------

from watch.alerts import AlertView, announcements  # noqa: E402

RED = TriggerRule(name="fos-red", quantity="fos", level="red", rank=2, trigger=1.15, clear=1.20)


def _section_replay(values, shelved=()):
    """Amber and red on one FoS series; notified episodes kept as the store would keep them.
    Returns the announcements as (rule, kind) per observation."""
    rules = {"fos-amber": amber(), "fos-red": RED}
    records = {name: AlertRecord("WC-040", name) for name in rules}
    notified = {name: 0 for name in rules}
    said = []
    for i, value in enumerate(values):
        at = T0 + i * STEP
        transitions = []
        for name, rule in rules.items():
            records[name], changes = evaluate(rule, records[name], value, at)
            transitions += changes
        views = {name: AlertView(name, "level", rules[name].rank, records[name].state,
                                 records[name].episode, notified[name], name in shelved)
                 for name in rules}
        step = []
        for a in announcements(transitions, views):
            step.append((a.transition.rule_name, a.kind))
            if a.transition.new is AlertState.FIRING:
                notified[a.transition.rule_name] = a.transition.episode
            for name in a.also_told:
                notified[name] = records[name].episode
        said.append(step)
    return said


def test_escalation_then_de_escalation_then_resolution():
    said = _section_replay([1.40, 1.22, 1.12, 1.18, 1.22, 1.35])
    assert said == [
        [],
        [("fos-amber", "firing")],
        [("fos-red", "escalated")],
        [],  # 1.18: red in its deadband
        [("fos-red", "de-escalated")],  # 1.22 >= red's clear value; amber still fires
        [("fos-amber", "resolved")],
    ]


def test_straight_to_red_suppresses_amber_and_de_escalation_makes_amber_known():
    said = _section_replay([1.40, 1.10, 1.22, 1.35])
    # amber fires with red in the same cycle: suppressed, only red is announced
    assert said[1] == [("fos-red", "firing")]
    # red clears, amber still fires: "de-escalated" tells people that amber stands ...
    assert said[2] == [("fos-red", "de-escalated")]
    # ... so amber's clearing is announced too
    assert said[3] == [("fos-amber", "resolved")]


def test_both_clear_at_once_each_announced_firing_gets_its_resolution():
    said = _section_replay([1.40, 1.22, 1.10, 1.40])
    assert said[3] == [("fos-amber", "resolved"), ("fos-red", "resolved")]


def test_a_shelved_alert_firing_is_held_but_its_resolution_of_an_announced_episode_is_not():
    said = _section_replay([1.40, 1.22, 1.40], shelved=("fos-amber",))
    assert said == [[], [], []]  # never announced, so its clearing is not announced either


def test_data_alerts_stand_apart_from_the_levels():
    stale = TriggerRule(name="data-stale", quantity="age_h", level="data", rank=0, trigger=6.0,
                        clear=3.0, direction=Direction.ABOVE)
    record, changes = evaluate(stale, AlertRecord("WC-040", "data-stale"), 20.0, T0)
    red_view = AlertView("fos-red", "level", 2, AlertState.FIRING, 1, 1)
    views = {"data-stale": AlertView("data-stale", "data", 0, record.state, record.episode),
             "fos-red": red_view}
    # A red level firing does not suppress the news that the data stopped.
    assert [(a.transition.rule_name, a.kind) for a in announcements(changes, views)] == [
        ("data-stale", "data")]


def test_time_zone_of_the_observation_times_is_irrelevant():
    # The same instants written in another zone (UTC+01:00) give the same states and changes.
    from datetime import timezone as tz

    plus_one = tz(timedelta(hours=1))
    rule = amber(on_delay=timedelta(minutes=30), off_delay=timedelta(minutes=15))
    values = [1.40, 1.20, 1.20, 1.20, 1.35, 1.35, 1.40]
    a = AlertRecord("WC-040", rule.name)
    b = AlertRecord("WC-040", rule.name)
    for i, value in enumerate(values):
        a, changes_a = evaluate(rule, a, value, T0 + i * STEP)
        b, changes_b = evaluate(rule, b, value, (T0 + i * STEP).astimezone(plus_one))
        assert [(t.new, t.at) for t in changes_a] == [(t.new, t.at) for t in changes_b]
        assert a.state is b.state


def test_a_repeated_observation_changes_nothing():
    # A file delivered twice gives the same reading twice at the same time: no second change.
    record, first = evaluate(amber(), AlertRecord("WC-040", "fos-amber"), 1.20, T0)
    again, second = evaluate(amber(), record, 1.20, T0)
    assert [t.new for t in first] == [AlertState.PENDING, AlertState.FIRING]
    assert second == []
    assert again.episode == record.episode == 1
