"""Notifications that read right (issue 15, item 7): one message and one inspection request for
the rules of one level that fire together; a subject that names what fired; direction words
that follow the quantity; the "never reported" mark said in words.

INVENTED DATA (tests/watch/board_fixtures.py): an invented two-section site whose "watch"
level has two rules, fos-watch (factor of safety at or below 1.30, clear 1.35) and head-watch
(head at PZ-1 at or above 67.5 m, clear 67.0 m).
"""

from __future__ import annotations

import json
from datetime import datetime, timedelta, timezone

import pytest

from tests.watch.board_fixtures import make_workspace
from watch.alerting import SectionContext, process_section_alerts, value_text
from watch.alerts import (
    AlertRecord,
    AlertState,
    AlertView,
    Direction,
    TriggerRule,
    announcements,
    evaluate,
)
from watch.triggers import NEVER_REPORTED_AGE_H, alert_settings

AT = datetime(2026, 1, 16, 6, 0, tzinfo=timezone.utc)


@pytest.fixture()
def site(tmp_path):
    workspace = make_workspace(tmp_path / "ws", empty=True)
    text = workspace.site_file.read_text(encoding="utf-8")
    # The "watch" level asks for an inspection within 24 h.
    text = text.replace('name = "watch"\nrank = 1\n',
                        'name = "watch"\nrank = 1\ninspection_due_hours = 24\n'
                        'checklist = ["cracks at the crest"]\n')
    workspace.site_file.write_text(text, encoding="utf-8")
    return workspace


def _watch(workspace, fos: float, head: float, hours: float = 0.0):
    """One cycle at AT + ``hours`` with the factor of safety ``fos`` and PZ-1 at ``head`` [m]."""
    return _cycle(workspace, {"fos-watch": fos, "head-watch": head, "fos-act": fos},
                  AT + timedelta(hours=hours), fos=fos)


def _cycle(workspace, values: dict, at: datetime, fos: float | None = None):
    config = workspace.config()
    settings = alert_settings(config)
    rules = [r for r in settings.rules_for(config, "S-1") if r.kind == "level"]
    context = SectionContext(site_id=config.id, site_name=config.name, section_id="S-1",
                             section_name="", at=at, fos=fos, method="spencer" if fos else None)
    with workspace.open_store() as store, store.atomic():
        outcome = process_section_alerts(store, config, settings, "S-1", rules, values, at, at, context)
    with workspace.open_store(read_only=True) as store:
        return outcome, store.outbox(), store.inspection_rows()


def test_two_rules_of_one_level_firing_together_are_one_message_and_one_request(site):
    outcome, outbox, inspections = _watch(site, 1.28, 67.8)
    firing = [r for r in outbox if r["kind"] == "firing"]
    assert len(firing) == 1
    assert len([r for r in outbox if r["kind"] == "inspection"]) == 1
    assert len(inspections) == 1 and outcome.inspections == 1
    # The one message names both rules and both values.
    subject, body = firing[0]["subject"], firing[0]["body"]
    assert "factor of safety 1.28, at or below the trigger 1.30" in subject
    assert "piezometric head at PZ-1 67.80 m, at or above the trigger 67.50 m" in subject
    assert "Rule fos-watch triggered" in body and "Rule head-watch triggered" in body
    rules = [r["rule"] for r in json.loads(firing[0]["payload_json"])["rules"]]
    assert rules == ["fos-watch", "head-watch"]
    assert "fos-watch" in inspections[0]["reason"] and "PZ-1" in inspections[0]["reason"]
    # Both alerts count as told: a later cycle repeats nothing.
    _, again, _ = _watch(site, 1.27, 67.9, hours=1)
    assert len(again) == len(outbox)


def test_a_rain_or_head_rule_subject_names_it_not_the_factor_of_safety(site):
    _, outbox, _ = _watch(site, 1.40, 67.8)
    (row,) = [r for r in outbox if r["kind"] == "firing"]
    assert "piezometric head at PZ-1 67.80 m" in row["subject"]
    assert "FoS" not in row["subject"] and "1.40" not in row["subject"]


def test_direction_words_follow_the_quantity(site):
    _watch(site, 1.28, 67.8)
    # The factor of safety rises back past its clear value while the head still stands: the
    # level stands; then the head falls back and the level resolves.
    _, outbox, _ = _watch(site, 1.36, 67.8, hours=1)
    stands = outbox[-1]
    assert stands["kind"] == "resolved"
    assert "is still at level WATCH" in stands["subject"]
    assert "factor of safety 1.36, back above its clear value 1.35" in stands["subject"]
    assert "back below" not in stands["subject"]
    assert "Still firing at level watch: head-watch." in stands["body"]
    _, outbox, _ = _watch(site, 1.36, 66.9, hours=2)
    resolved = outbox[-1]
    assert resolved["kind"] == "resolved"
    assert "is no longer at level WATCH" in resolved["subject"]
    assert "piezometric head at PZ-1 66.90 m, back below its clear value 67.00 m" in resolved["subject"]


def test_grouping_is_per_level_and_kind():
    """Pure rules: two firings of one rank in one cycle become one announcement."""
    amber = [TriggerRule(f"amber-{i}", "fos", "amber", 2, 1.3, 1.35, Direction.BELOW) for i in range(2)]
    red = TriggerRule("red", "fos", "red", 3, 1.1, 1.15, Direction.BELOW)
    transitions, views = [], {}
    for rule, value in ((amber[0], 1.2), (amber[1], 1.2), (red, 1.2)):
        record, changes = evaluate(rule, AlertRecord("S", rule.name), value, AT)
        transitions += changes
        views[rule.name] = AlertView(rule.name, "level", rule.rank, record.state, record.episode)
    found = announcements(transitions, views)
    assert [(a.kind, [t.rule_name for t in a.transitions]) for a in found] == [
        ("firing", ["amber-0", "amber-1"])]
    assert all(t.new is AlertState.FIRING for t in found[0].transitions)


def test_the_never_reported_mark_is_said_in_words():
    assert value_text(NEVER_REPORTED_AGE_H, "age_h") == "never reported"
    assert value_text(7.25, "age_h") == "7.2 h since the newest reading"
    assert value_text(1.0, "flat") == "yes"
    assert value_text(1.2345, "fos") == "1.23"
    assert value_text(85.26, "rain_mm") == "85.3 mm"
