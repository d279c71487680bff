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
