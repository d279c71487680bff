"""The assessment cycle on a few days of the invented demo season (behaviour checks: the demo
data are invented, so no value here is a published reference; trigger values are examples,
common practice, no source)."""

import json
import shutil
import subprocess
import sys
from datetime import datetime, timedelta, timezone
from pathlib import Path

import pytest

from solver.search import SearchSettings
from watch.analysis import analyse
from watch.clock import ManualClock
from watch.cycle import SectionResult, replay_season, run_cycle, search_from_json, search_to_json
from watch.errors import UserError
from watch.sections import load_section
from tests.watch.cycle_helpers import announced_alarms, make_workspace

ROOT = Path(__file__).resolve().parents[2]
JANUARY = ROOT / "demo_feeds" / "wendlecombe_2026-01.csv"
START = datetime(2026, 1, 14, 6, tzinfo=timezone.utc)
STEP = timedelta(hours=6)

# WC-040's amber level waits 12 h before firing here, so that a pending state can be caught.
_PENDING_AMBER = """
[[trigger]]
section = "WC-040"
name = "fos-amber"
on_delay_hours = 12
"""


def _history(workspace):
    with workspace.open_store(read_only=True) as store:
        events = [(e["time_utc"], store.alert_row(e["alert_id"])["rule"], e["new_state"])
                  for e in store.alert_events() if e["event"] == "state change"]  # fmt: skip
        outbox = [(r["idempotency_key"], r["created_utc"]) for r in store.outbox()]
        inspections = [(r["section_id"], r["level"], r["episode"]) for r in store.inspection_rows()]
    return events, outbox, inspections


def _replay(workspace, start, end, feeds=(JANUARY,)):
    clock = ManualClock(start)
    return replay_season(workspace, start, end, STEP, clock, feeds=list(feeds), sections=["WC-040"])


@pytest.fixture(scope="module")
def storm(tmp_path_factory):
    """WC-040 through the January storm, 6-hourly, in one process."""
    workspace = make_workspace(tmp_path_factory.mktemp("storm") / "ws", _PENDING_AMBER)
    _replay(workspace, START, START + timedelta(days=5))
    return workspace


def test_the_storm_raises_and_clears_wc040_once(storm):
    events, outbox, inspections = _history(storm)
    fired = [rule for _, rule, state in events if state == "firing"]
    assert fired.count("fos-red") == 1 and fired.count("fos-amber") == 1
    by_alarm, still_open = announced_alarms(storm)
    assert still_open == set()
    kinds = {rule: k for (_, rule, _), k in by_alarm.items()}
    # Heavy rain raised "watch" first, so red escalated; amber fired under red (suppressed),
    # was named when red came down, and got its own resolution.
    assert kinds["fos-red"] == ["escalated", "inspection", "de-escalated"]
    assert kinds["fos-amber"] == ["resolved"]
    assert kinds["rain-24h"] == ["firing", "resolved"]
    assert inspections == [("WC-040", "red", 1)]


def test_the_amber_level_waits_for_its_on_delay(storm):
    events, _, _ = _history(storm)
    amber = [(t, s) for t, rule, s in events if rule == "fos-amber"]
    assert [s for _, s in amber[:2]] == ["pending", "firing"]
    pending, firing = (datetime.fromisoformat(t.replace("Z", "+00:00")) for t, _ in amber[:2])
    assert firing - pending >= timedelta(hours=12)


def test_restart_mid_pending_and_mid_firing_neither_resets_nor_resends(storm, tmp_path):
    """Three processes share one store: the first stops with amber pending, the second with
    red firing; the history equals the uninterrupted run's, event for event."""
    workspace = make_workspace(tmp_path / "ws", _PENDING_AMBER)
    stops = [START + timedelta(hours=42), START + timedelta(hours=54)]  # 15 Jan 24:00, 16 Jan 12:00
    script = (
        "import sys; from datetime import datetime, timedelta; from pathlib import Path\n"
        "from watch.clock import ManualClock; from watch.cycle import replay_season\n"
        "from watch.workspace import open_workspace\n"
        "start, end = (datetime.fromisoformat(a) for a in sys.argv[2:4])\n"
        "replay_season(open_workspace(sys.argv[1]), start, end, timedelta(hours=6), ManualClock(start),\n"
        "              feeds=[Path(sys.argv[4])], sections=['WC-040'])\n"
    )
    segments = [(START, stops[0]), (stops[0] + STEP, stops[1])]
    for begin, end in segments:
        subprocess.run([sys.executable, "-c", script, str(workspace.root), begin.isoformat(), end.isoformat(),
                        str(JANUARY)], check=True, cwd=ROOT)  # fmt: skip
        with workspace.open_store(read_only=True) as store:
            states = {r["rule"]: r["state"] for r in store.alert_rows("WC-040")}
        if end == stops[0]:
            assert states["fos-amber"] == "pending"
        else:
            assert states["fos-red"] == "firing"
    _replay(workspace, stops[1] + STEP, START + timedelta(days=5))
    uninterrupted, restarted = _history(storm), _history(workspace)
    assert [e for e in restarted[0]] == [e for e in uninterrupted[0]]
    assert [k for k, _ in restarted[1]] == [k for k, _ in uninterrupted[1]]
    assert restarted[2] == uninterrupted[2]


def test_no_silent_all_clear_when_the_data_stop(tmp_path):
    # The feed stops at 16 Jan 12:00 with WC-040 at red. Its design line alone would give a
    # factor of safety near 1.33, above every clear value: it must not clear anything.
    cut = tmp_path / "wendlecombe_2026-01.csv"
    lines = JANUARY.read_text(encoding="utf-8").splitlines(keepends=True)
    kept = [line for line in lines if not line[:2].isdigit() or _logger_time(line) <= datetime(2026, 1, 16, 12)]
    cut.write_text("".join(kept), encoding="utf-8")
    workspace = make_workspace(tmp_path / "ws")
    _replay(workspace, START, START + timedelta(days=4), feeds=[cut])
    events, outbox, _ = _history(workspace)
    with workspace.open_store(read_only=True) as store:
        states = {r["rule"]: r["state"] for r in store.alert_rows("WC-040")}
        last = store.last_assessment("WC-040")
    assert states["fos-red"] == "firing"
    assert states["data-stale"] == "firing"
    assert not any(rule.startswith("fos") and state == "resolved" for _, rule, state in events)
    assert [k for k, _ in outbox if "/data-stale/" in k] == ["WC-040/data-stale/1/data"]
    assert "design line" in last["warnings_json"]


def _logger_time(line: str) -> datetime:
    return datetime.strptime(line.split(",")[0], "%d/%m/%Y %H:%M")


def test_unchanged_inputs_are_not_calculated_again(tmp_path):
    workspace = make_workspace(tmp_path / "ws")
    clock = ManualClock(START)
    replay_season(workspace, START, START, STEP, clock, feeds=[JANUARY], sections=["WC-040"])
    again = run_cycle(workspace, clock, sections=["WC-040"])
    assert again.sections[0].status == "unchanged"
    with workspace.open_store(read_only=True) as store:
        assert store.conn.execute("SELECT COUNT(*) FROM assessments").fetchone()[0] == 1


def test_a_duplicate_delivery_changes_nothing(tmp_path):
    workspace = make_workspace(tmp_path / "ws")
    clock = ManualClock(START)
    replay_season(workspace, START, START, STEP, clock, feeds=[JANUARY], sections=["WC-040"])
    before = _history(workspace)
    shutil.copy(workspace.processed / "wendlecombe_2026-01_d001.csv", tmp_path / "again.csv")
    resent = workspace.incoming / "wendlecombe_2026-01_resent.csv"
    shutil.copy(tmp_path / "again.csv", resent)
    clock.advance(timedelta(minutes=5))
    first = run_cycle(workspace, clock, sections=["WC-040"])  # first look: it waits
    assert first.files == [] and resent.exists()
    clock.advance(timedelta(minutes=5))
    report = run_cycle(workspace, clock, sections=["WC-040"])
    assert any("already ingested" in line for line in report.files)
    assert report.sections[0].status == "unchanged"
    assert _history(workspace) == before


def test_the_cycle_refuses_a_time_in_the_future(tmp_path):
    workspace = make_workspace(tmp_path / "ws")
    with pytest.raises(UserError, match="later than now"):
        run_cycle(workspace, ManualClock(START), at=START + timedelta(hours=1))


def test_unknown_section_is_refused_with_the_known_ones(tmp_path):
    workspace = make_workspace(tmp_path / "ws")
    with pytest.raises(UserError, match=r"XX-1 not in the site file \(sections: WC-040"):
        run_cycle(workspace, ManualClock(START), sections=["XX-1"])


def test_cached_search_round_trips_through_json():
    section = load_section(ROOT / "config" / "sections" / "wc_040.toml")
    search = analyse(section).search
    back = search_from_json(search_to_json(search))
    assert back.method == search.method
    assert isinstance(back.settings, SearchSettings) and back.settings == search.settings
    assert [s.fos for s in back.surfaces] == pytest.approx([s.fos for s in search.surfaces], rel=1e-12)
    assert back.critical.radius == pytest.approx(search.critical.radius, rel=1e-12)
    assert json.loads(search_to_json(back)) == json.loads(search_to_json(search))


def test_the_cached_search_of_an_embankment_keeps_both_faces():
    # Issue 16, item 1: the warm state must hold the surfaces of every face, so that a water
    # rise on the face that is not critical now is seen by the warm re-evaluation.
    section = load_section(ROOT / "config" / "sections" / "fe_210.toml")
    search = analyse(section).search
    back = search_from_json(search_to_json(search))
    assert set(back.faces) == {1, -1}
    assert {s.direction for s in back.surfaces} == {1, -1}
    assert {d: s.fos for d, s in back.by_face.items()} == pytest.approx(
        {d: s.fos for d, s in search.by_face.items()}, rel=1e-12)


def test_a_search_cached_before_faces_were_recorded_is_searched_again():
    import watch.cycle as cycle

    section = load_section(ROOT / "config" / "sections" / "wc_040.toml")
    current = json.loads(search_to_json(analyse(section).search))

    class Store:
        def __init__(self, data):
            self.row = {"section_version_id": 7, "time_utc": "2026-01-14T06:00:00Z",
                        "search_json": json.dumps(data)}

        def cached_search(self, section_id):
            return self.row

    assert cycle._cached_search_json(Store(current), "WC-040", 7, START, 24) is not None
    earlier = {k: v for k, v in current.items()
               if k not in ("faces", "lattice_edge", "lowest_tangent")}
    assert cycle._cached_search_json(Store(earlier), "WC-040", 7, START, 24) is None


def test_a_failure_while_writing_leaves_no_section_half_written(tmp_path, monkeypatch):
    """Sections are written in groups, one transaction each: a fault while writing the third
    section rolls back the whole group (no assessment without its alerts, none twice), and the
    next cycle writes every section exactly once."""
    import watch.cycle as cycle

    workspace = make_workspace(tmp_path / "ws")
    clock = ManualClock(START)
    record = cycle._record_section
    seen = []

    def faulty(store, config, settings, section_id, *args):
        seen.append(section_id)
        if len(seen) == 3:
            raise RuntimeError("disk pulled")
        return record(store, config, settings, section_id, *args)

    monkeypatch.setattr(cycle, "_record_section", faulty)
    with pytest.raises(RuntimeError, match="disk pulled"):
        run_cycle(workspace, clock, at=START)
    with workspace.open_store(read_only=True) as store:
        assert store.conn.execute("SELECT COUNT(*) FROM assessments").fetchone()[0] == 0
        assert store.conn.execute("SELECT COUNT(*) FROM water_lines").fetchone()[0] == 0
        assert store.conn.execute("SELECT COUNT(*) FROM alert_events").fetchone()[0] == 0
    monkeypatch.setattr(cycle, "_record_section", record)
    report = run_cycle(workspace, clock, at=START)
    assert len(report.sections) == 4 and all(s.status != "unchanged" for s in report.sections)
    with workspace.open_store(read_only=True) as store:
        rows = store.conn.execute("SELECT section_id FROM assessments").fetchall()
    assert sorted(r for (r,) in rows) == sorted(s.section_id for s in report.sections)


def test_a_cycle_reads_the_site_file_once_however_many_sections_are_new(tmp_path, monkeypatch):
    """The first cycle of a network records version 1 of every section; reading site.toml
    again for each of them made that cycle quadratic in the number of sections."""
    import watch.workspace

    workspace = make_workspace(tmp_path / "ws")
    load = watch.workspace.load_site_config
    reads = []

    def counted(path):
        reads.append(path)
        return load(path)

    monkeypatch.setattr(watch.workspace, "load_site_config", counted)
    report = run_cycle(workspace, ManualClock(START), at=START, ingest_waiting=False)
    assert len(report.sections) == 4 and all(s.status != "failed" for s in report.sections)
    with workspace.open_store(read_only=True) as store:
        assert store.conn.execute("SELECT COUNT(*) FROM section_versions").fetchone()[0] == 4
    assert len(reads) == 1


def test_rise_rule_watches_the_least_squares_slope_of_the_window(tmp_path):
    # The rate of rise a rise_m_per_h rule sees is the least-squares slope of the good heads
    # in its window (reference: numpy.polyfit, degree 1), not the difference of its ends.
    import numpy as np
    import pandas as pd

    from watch.alerts import Direction, TriggerRule
    from watch.cycle import _head_value
    from watch.triggers import SectionRule
    from tests.watch.groundwater_site import hour, make_site

    site = make_site(tmp_path)
    at = hour(300)
    rule = SectionRule(TriggerRule("rise", "rise_m_per_h", "amber", 1, 0.05, 0.02,
                                   Direction.ABOVE), "level", "P1", window_hours=12.0)
    window = (site.times >= at - pd.Timedelta(hours=12)) & (site.times <= at)  # [at - w, at]
    hours = (site.times[window] - at) / pd.Timedelta(hours=1)
    expected = np.polyfit(np.asarray(hours, float), site.head_m[window], 1)[0]
    with site.workspace.open_store(read_only=True) as store:
        observed = _head_value(store, rule, at.to_pydatetime(), stale_hours=6.0)
    # Heads are stored to 1e-6 m (the feed's six decimals).
    np.testing.assert_allclose(observed, expected, rtol=1e-4, atol=1e-6)


# --- the watch keeps going when something fails (issue 14) ---------------------------------------


def _stand_in(task):
    """A calculation that always fails, in place of the real one (the test is about what the
    cycle does with a failure, not about the factor of safety)."""
    return SectionResult(task.section_id, "failed", message="stand-in failure")


def test_a_failed_ingest_raises_the_site_alert_notified_like_any_other_and_the_cycle_goes_on(tmp_path,
                                                                                              monkeypatch):  # fmt: skip
    import watch.cycle

    workspace = make_workspace(tmp_path / "ws")
    clock = ManualClock(START)

    def broken_ingest(*args, **kwargs):
        raise RuntimeError("stand-in for an ingest bug")

    monkeypatch.setattr(watch.cycle, "ingest", broken_ingest)
    report = run_cycle(workspace, clock, sections=["WC-040"], compute=_stand_in)
    assert report.ingest_failures == ["the ingest failed: RuntimeError: stand-in for an ingest bug"]
    assert [s.status for s in report.sections] == ["failed"] and not report.ok
    # A yes/no rule's changes carry no value (issue 15: values said in words, no bare marks).
    assert report.site_changes == ["data-ingest: inactive -> pending", "data-ingest: pending -> firing"]
    with workspace.open_store(read_only=True) as store:
        (row,) = [r for r in store.outbox() if r["section_id"] == "(site)"]
    assert (row["kind"], row["level"], row["idempotency_key"]) == ("data", "data", "(site)/data-ingest/1/data")
    assert "What failed: the ingest failed: RuntimeError: stand-in for an ingest bug." in row["body"]
    assert "the watch itself is failing" in row["body"]
    monkeypatch.undo()
    clock.advance(STEP)
    again = run_cycle(workspace, clock, sections=["WC-040"], compute=_stand_in)
    assert again.ingest_failures == [] and again.site_changes == ["data-ingest: firing -> resolved"]


def _broken_ingest(*args, **kwargs):
    raise RuntimeError("stand-in for an ingest bug")


def test_a_shelved_site_alert_that_expires_while_still_firing_is_announced_again(tmp_path, monkeypatch):
    import watch.cycle
    from watch.alerting import list_alerts, shelve

    workspace = make_workspace(tmp_path / "ws")
    clock = ManualClock(START)
    real_ingest = watch.cycle.ingest

    def cycle(ingest):
        monkeypatch.setattr(watch.cycle, "ingest", ingest)
        return run_cycle(workspace, clock, sections=["WC-040"], compute=_stand_in)

    cycle(_broken_ingest)  # fires (episode 1) and is told
    (site,) = [a for a in list_alerts(workspace, clock) if a["section_id"] == "(site)"]
    shelve(workspace, clock, site["id"], START + timedelta(hours=20), "ingest fix under way", "duty engineer")
    clock.advance(STEP)
    cycle(real_ingest)  # resolved
    clock.advance(STEP)
    cycle(_broken_ingest)  # fires again (episode 2) while shelved: held

    def site_keys():
        with workspace.open_store(read_only=True) as store:
            return {r["idempotency_key"]: r for r in store.outbox() if r["section_id"] == "(site)"}

    assert "(site)/data-ingest/2/data" not in site_keys()
    clock.advance(timedelta(hours=12))  # past the shelving's end, still failing
    report = cycle(_broken_ingest)
    assert report.released == ["(site)/data-ingest"]
    held = site_keys()["(site)/data-ingest/2/data"]
    assert "What failed: the ingest failed: RuntimeError: stand-in for an ingest bug." in held["body"]


def test_status_and_alerts_put_the_watch_failing_at_the_top(tmp_path, monkeypatch):
    import watch.cycle
    from click.testing import CliRunner

    from watch.cli import main

    workspace = make_workspace(tmp_path / "ws")
    monkeypatch.setattr(watch.cycle, "ingest", _broken_ingest)
    run_cycle(workspace, ManualClock(START), sections=["WC-040"], compute=_stand_in)
    with workspace.open_store() as store, store.atomic():  # a red level firing elsewhere, worse by rank
        store.add_alert({"section_id": "WC-060", "rule": "fos-red", "level": "red", "rank": 3, "kind": "level",
                         "state": "firing", "episode": 1, "state_json": "{}", "message": "FoS below red",
                         "raised_utc": "2026-01-14T06:00:00Z", "updated_utc": "2026-01-14T06:00:00Z"})  # fmt: skip
    runner, where = CliRunner(), ["-w", str(workspace.root)]
    headline = ("the watch itself is failing: the ingest failed: RuntimeError: stand-in for an ingest bug "
                "(last at 2026-01-14T06:00:00Z); alert #")  # fmt: skip
    for command in (["status"], ["alerts"], ["alerts", "--open"]):
        result = runner.invoke(main, command + where)
        assert result.exit_code == 0, result.output
        first = result.output.splitlines()[0]
        assert first.startswith("WARNING: " + headline), first
        assert "No section's factor of safety can be trusted to be current" in first
    status = json.loads(runner.invoke(main, ["status", "--json"] + where).output)
    (failing,) = status["watch_failing"]
    assert failing["headline"].startswith(headline) and failing["state"] == "firing"
    assert failing["what_failed"] == ["the ingest failed: RuntimeError: stand-in for an ingest bug"]
    rows = json.loads(runner.invoke(main, ["alerts", "--json"] + where).output)
    assert (rows[0]["section_id"], rows[0]["watch_failing"]) == ("(site)", True)
    assert rows[1]["rule"] == "fos-red" and not any(r["watch_failing"] for r in rows[1:])


def test_an_unforeseen_error_preparing_one_section_fails_that_section_only(tmp_path, monkeypatch):
    import watch.cycle

    workspace = make_workspace(tmp_path / "ws")
    real = watch.cycle.water_lines_from_store

    def breaks_for_wc040(store, section, config, at):
        if section.id == "WC-040":
            raise KeyError("stand-in for a bug")
        return real(store, section, config, at)

    monkeypatch.setattr(watch.cycle, "water_lines_from_store", breaks_for_wc040)
    report = run_cycle(workspace, ManualClock(START), sections=["WC-040", "WC-060"], compute=_stand_in)
    first, second = report.sections
    assert first.status == "failed" and "unexpected error KeyError" in first.message
    assert second.message == "stand-in failure"  # it was prepared and calculated
    assert "data-assessment: pending -> firing" in first.changes


def test_assess_exits_non_zero_when_a_section_failed(tmp_path, monkeypatch):
    import watch.cycle
    from click.testing import CliRunner

    from watch.cli import main

    workspace = make_workspace(tmp_path / "ws")
    monkeypatch.setattr(watch.cycle, "compute_section", _stand_in)
    result = CliRunner().invoke(main, ["assess", "--section", "WC-040", "-w", str(workspace.root)])
    assert result.exit_code == 1
    assert "WC-040: failed" in result.output and "something failed in this cycle" in result.output


def test_an_ingest_busy_elsewhere_is_no_failure(tmp_path, monkeypatch):
    import watch.cycle
    from watch.errors import BusyError

    def busy(*args, **kwargs):
        raise BusyError("another ingest is running in ws (lock .ingest.lock); wait for it to finish")

    monkeypatch.setattr(watch.cycle, "ingest", busy)
    report = run_cycle(make_workspace(tmp_path / "ws"), ManualClock(START), sections=["WC-040"], compute=_stand_in)
    assert report.ingest_failures == [] and report.site_changes == []
    assert report.files == ["ingest left to the one running: another ingest is running in ws (lock .ingest.lock); "
                            "wait for it to finish"]  # fmt: skip
