"""The whole invented demo season through the assessment cycle with a manual clock: daily
cycles, the feed files delivered as a logger would, warm re-evaluation between full searches.

Behaviour checks on invented data (no published reference applies). The expected alerts follow
from the example trigger levels of config/site.toml (common practice, no source) and the
season described in demo_feeds/README.md.
"""

from datetime import datetime, timedelta, timezone
from pathlib import Path

import pytest

from tests.watch.cycle_helpers import announced_alarms, make_workspace
from watch.clock import ManualClock
from watch.cycle import replay_season

ROOT = Path(__file__).resolve().parents[2]
START = datetime(2025, 10, 1, 6, tzinfo=timezone.utc)
END = datetime(2026, 3, 31, 6, tzinfo=timezone.utc)

EXPECTED_LEVEL_ALERTS = {
    # the January storm: rain at both gauges, WC-040 to red and back
    ("WC-040", "fos-amber"), ("WC-040", "fos-red"), ("WC-040", "rain-24h"), ("WC-040", "rain-caine"),
    ("WC-040", "rise-WC040-PB"),
    # WC-060 on its owner's lower levels, red on the morning of its slip
    ("WC-060", "fos-amber"), ("WC-060", "fos-red"), ("WC-060", "rain-24h"), ("WC-060", "rain-caine"),
    # WC-080 only sees the rain
    ("WC-080", "rain-24h"), ("WC-080", "rain-caine"),
    # FE-210 amber from mid-January, red in the storm, slow to recover
    ("FE-210", "fos-amber"), ("FE-210", "fos-red"), ("FE-210", "rain-24h"), ("FE-210", "rain-caine"),
    ("FE-210", "head-FE210-PA"),
}  # fmt: skip
EXPECTED_DATA_ALERTS = {
    ("WC-040", "data-suspect-WC040-PA"),  # the spike of 8 November
    ("WC-040", "data-stale"), ("WC-060", "data-stale"), ("WC-080", "data-stale"),  # 12-14 Nov gap
    ("FE-210", "data-suspect-FE210-PA"),  # the out-of-range depth of 3 February
    ("WC-080", "data-flat-WC080-PA"),  # stuck sensor 20-23 February
}  # fmt: skip


@pytest.fixture(scope="module")
def season(tmp_path_factory):
    folder = tmp_path_factory.mktemp("season") / "ws"
    workspace = make_workspace(folder)
    # Only the searches the warm results advise (plus the first): keeps the replay quick.
    site = workspace.site_file.read_text(encoding="utf-8")
    workspace.site_file.write_text(site.replace("full_search_every_hours = 168", "full_search_every_hours = 10000"),
                                   encoding="utf-8")  # fmt: skip
    clock = ManualClock(START)
    files = []
    result = replay_season(workspace, START, END, timedelta(days=1), clock,
                           feeds=sorted((ROOT / "demo_feeds").glob("*.csv")),
                           on_cycle=lambda report: files.extend(report.files))  # fmt: skip
    with workspace.open_store(read_only=True) as store:
        events = [(store.alert_row(e["alert_id"]), e) for e in store.alert_events() if e["event"] == "state change"]
        inspections = store.inspection_rows()
        assessments = store.conn.execute(
            "SELECT evaluation, status, COUNT(*) FROM assessments GROUP BY 1, 2").fetchall()
    return workspace, result, files, events, inspections, assessments


def test_every_expected_alert_fires_exactly_once(season):
    _, result, _, events, _, _ = season
    assert result.cycles == 182
    fired = [(alert["section_id"], alert["rule"]) for alert, e in events if e["new_state"] == "firing"]
    assert len(fired) == len(set(fired))
    assert set(fired) == EXPECTED_LEVEL_ALERTS | EXPECTED_DATA_ALERTS


def test_every_announced_alarm_gets_its_resolution_and_none_is_left_open(season):
    workspace = season[0]
    by_alarm, still_open = announced_alarms(workspace)
    assert still_open == set()
    with workspace.open_store(read_only=True) as store:
        assert all(a["state"] != "firing" for a in store.alert_rows())
    # the data problems were all told and cleared
    data = {(s, r) for (s, r, _), kinds in by_alarm.items() if kinds[:1] == ["data"]}
    assert data == EXPECTED_DATA_ALERTS
    assert all(by_alarm[(s, r, 1)] == ["data", "resolved"] for s, r in data)


def test_inspection_requests_open_once_at_the_owner_levels(season):
    inspections = season[4]
    opened = sorted((i["section_id"], i["level"], i["episode"]) for i in inspections)
    assert opened == [("FE-210", "amber", 1), ("FE-210", "red", 1), ("WC-040", "red", 1), ("WC-060", "red", 1)]
    assert all(i["due_utc"] > i["requested_utc"] and i["status"] == "open" for i in inspections)


def test_the_storm_escalates_fe210_from_amber_to_red(season):
    workspace = season[0]
    by_alarm, _ = announced_alarms(workspace)
    assert by_alarm[("FE-210", "fos-amber", 1)][:2] == ["firing", "inspection"]
    assert by_alarm[("FE-210", "fos-red", 1)] == ["escalated", "inspection", "de-escalated"]
    assert by_alarm[("FE-210", "fos-amber", 1)][-1] == "resolved"


def test_levels_do_not_move_while_the_data_stop(season):
    # The cutting logger was off 12-14 November: no level alert of a cutting section changes
    # then, whatever the design water lines would give.
    events = season[3]
    gap = [(a["rule"], e["time_utc"]) for a, e in events
           if a["section_id"].startswith("WC") and a["kind"] == "level"
           and "2025-11-12" <= e["time_utc"] <= "2025-11-15"]  # fmt: skip
    assert gap == []


def test_the_resent_file_is_recognised_and_the_replay_stays_warm(season):
    files, assessments = season[2], season[5]
    assert any("fellhollow_2025-W50_resent" in line and "already ingested" in line for line in files)
    counts = {(evaluation, status): n for evaluation, status, n in assessments}
    warm = counts.get(("warm re-evaluation", "ok"), 0)
    full = counts.get(("full search", "ok"), 0)
    assert warm > 10 * full > 0
    assert not any(status in ("failed", "not converged") for _, status in counts)
