"""Ingest end to end in a workspace: archiving, idempotence, conflicts, quality flags, claims and
reconciliation, status and export."""

import os
import sqlite3
import time
from datetime import datetime, timezone

import pytest

from watch.errors import UserError, WorkspaceError
from watch.ingest import _IngestLock, ingest, workspace_status
from watch.workspace import init_workspace

NOW = datetime(2026, 10, 2, 12, 0, tzinfo=timezone.utc)

SITE = """
[site]
id = "testsite"
name = "Invented test site"

[[section]]
id = "S1"
file = "sections/s1.toml"

[[piezometer]]
id = "P1"
section = "S1"
offset = 10.0
tip_elevation = 40.0
collar_elevation = 50.0
water_line = "main"
reading = "pore_pressure_kpa"
valid_range = [-10.0, 200.0]
max_rise_rate = 1.0

[[piezometer]]
id = "P2"
section = "S1"
offset = 20.0
tip_elevation = 38.0
collar_elevation = 50.0
water_line = "main"
reading = "vibrating_wire"
[piezometer.calibration]
type = "linear"
gauge_factor = -0.1
zero_reading = 9000.0
temperature_factor = 0.05
zero_temperature = 10.0

[[rain_gauge]]
id = "RC"
reporting = "cumulative_mm"

[[rain_gauge]]
id = "RT"
reporting = "tips"
bucket_mm = 0.2

[[feed]]
name = "north"
pattern = "north_*.csv"
layout = "wide"
time_column = "Time"
time_format = "%Y-%m-%d %H:%M"
time_zone = "UTC"
missing = ["", "-9999"]
[feed.columns]
"P1" = "P1"
"RC" = "RC"
"RT" = "RT"

[[feed]]
name = "vw"
pattern = "vw_*.csv"
layout = "long"
time_column = "Time"
time_format = "%Y-%m-%d %H:%M"
time_zone = "UTC"
instrument_column = "Id"
value_column = "Digits"
temperature_column = "Temp"
instruments = ["P2"]

[ingest]
min_file_age_seconds = 0
oldest_reading = "2020-01-01"
flat_line_hours = 2
stale_hours = 6
done_suffix = ".done"
"""


@pytest.fixture
def workspace(tmp_path):
    template = tmp_path / "template.toml"
    template.write_text(SITE)
    return init_workspace(tmp_path / "ws", template)


def drop(workspace, name, text, age_seconds=3600):
    path = workspace.incoming / name
    path.write_text(text)
    old = time.time() - age_seconds
    os.utime(path, (old, old))
    return path


def run(workspace, *files, now=NOW):
    return ingest(workspace, list(files) or None, now=now, progress=False)


def query(workspace, sql, params=()):
    with sqlite3.connect(workspace.database) as conn:
        return conn.execute(sql, params).fetchall()


def north(rows):
    return "Time,P1,RC,RT\n" + "".join(f"2026-10-01 {t},{p},{c},{n}\n" for t, p, c, n in rows)


ROWS = [("00:00", 50.0, 1.0, 0), ("00:15", 50.2, 1.4, 2), ("00:30", 50.4, 1.4, 0), ("00:45", 50.5, 2.0, 1)]


def snapshot(workspace):
    return (
        query(workspace, "SELECT * FROM readings ORDER BY instrument_id, time_utc"),
        query(workspace, "SELECT * FROM rainfall ORDER BY gauge_id, time_utc"),
    )


def test_good_file_is_stored_and_archived(workspace):
    drop(workspace, "north_1.csv", north(ROWS))
    report = run(workspace)
    (summary,) = report.files
    assert (summary.status, summary.accepted, summary.duplicates, summary.rejected) == ("ingested", 12, 0, 0)
    assert summary.archived_as == "processed/north_1.csv"
    assert (workspace.processed / "north_1.csv").exists()
    assert list(workspace.incoming.glob("*.csv")) == [] and list(workspace.claimed.iterdir()) == []
    # Head at the tip: 40 + 50.2 / 9.81 (hand calculation), with its source file and line.
    row = query(workspace, "SELECT head_m, source_line, f.name FROM readings r JOIN ingested_files f "
                           "ON f.id = r.source_file_id WHERE time_utc = '2026-10-01T00:15:00Z'")  # fmt: skip
    assert row[0][0] == pytest.approx(40 + 50.2 / 9.81, rel=1e-12)
    assert row[0][1:] == (3, "north_1.csv")
    rain = query(workspace, "SELECT gauge_id, rain_mm, quality FROM rainfall ORDER BY gauge_id, time_utc")
    # Cumulative: first value has no baseline (NULL, flagged), then 0.4, 0, 0.6; tips x 0.2 mm.
    assert rain[0] == ("RC", None, "no_baseline")
    assert [r[1] for r in rain[1:4]] == pytest.approx([0.4, 0.0, 0.6], rel=1e-9)
    assert [r[1] for r in rain[4:]] == pytest.approx([0.0, 0.4, 0.0, 0.2], rel=1e-9)


def test_same_file_again_changes_nothing(workspace):
    drop(workspace, "north_1.csv", north(ROWS))
    run(workspace)
    before = snapshot(workspace)
    drop(workspace, "north_1b.csv", north(ROWS))  # re-delivered under another name
    drop(workspace, "north_1.csv", north(ROWS))  # and under the same name
    report = run(workspace)
    assert [f.status for f in report.files] == ["already ingested", "already ingested"]
    assert "same content as north_1.csv" in report.files[0].reason
    assert snapshot(workspace) == before
    assert sorted(p.name for p in workspace.processed.iterdir()) == ["north_1.1.csv", "north_1.csv", "north_1b.csv"]
    assert query(workspace, "SELECT COUNT(*) FROM ingested_files") == [(1,)]


def test_overlapping_files_store_each_reading_once(workspace):
    drop(workspace, "north_1.csv", north(ROWS[:3]))
    run(workspace)
    # Overlaps the first file by two rows, written differently ("50.20" for 50.2).
    text = north([("00:15", "50.20", "1.40", 2), *ROWS[2:]])
    drop(workspace, "north_2.csv", text)
    (summary,) = run(workspace).files
    assert (summary.accepted, summary.duplicates, summary.rejected) == (3, 6, 0)
    assert query(workspace, "SELECT COUNT(*) FROM readings") == [(4,)]
    before = snapshot(workspace)
    drop(workspace, "north_3.csv", text + "\n")  # same rows, other bytes: all duplicates
    (summary,) = run(workspace).files
    assert (summary.accepted, summary.duplicates) == (0, 9)
    assert snapshot(workspace) == before


def test_conflicting_value_is_reported_not_overwritten(workspace):
    drop(workspace, "north_1.csv", north(ROWS))
    run(workspace)
    drop(workspace, "north_2.csv", north([("00:15", 61.0, 1.4, 2)]))
    (summary,) = run(workspace).files
    assert (summary.accepted, summary.duplicates, summary.rejected) == (0, 2, 1)
    assert query(workspace, "SELECT raw_value FROM readings WHERE time_utc = '2026-10-01T00:15:00Z'") == [(50.2,)]
    (reason,) = query(workspace, "SELECT reason FROM rejected_rows")[0]
    assert "conflicts with the stored reading of P1 at 2026-10-01T00:15:00Z" in reason
    assert "stored raw value 50.2 (file north_1.csv, line 3), this row 61" in reason


def test_unreadable_file_goes_to_rejected_with_a_reason(workspace):
    drop(workspace, "north_bad.csv", "Time,P1,RC,RT\nyesterday,x,y,z\n")
    drop(workspace, "mystery.csv", "a,b\n1,2\n")
    report = run(workspace)
    assert [f.status for f in report.files] == ["rejected", "rejected"]
    assert "no [[feed]] pattern matches the name 'mystery.csv'" in report.files[0].reason
    assert report.files[1].reason == "no reading could be read (1 rows rejected)"
    reason_file = workspace.rejected / "north_bad.csv.reason.txt"
    assert "line 2: time 'yesterday' does not match the format" in reason_file.read_text()
    assert (workspace.rejected / "mystery.csv").exists() and (workspace.rejected / "mystery.csv.reason.txt").exists()
    assert query(workspace, "SELECT line, raw_text FROM rejected_rows") == [(2, "yesterday,x,y,z")]
    # A rejected file may be fixed and delivered again under its name: it is ingested then.
    drop(workspace, "north_bad.csv", north(ROWS[:1]))
    assert run(workspace).files[0].status == "ingested"


def test_quality_flags_and_rejections(workspace):
    rows = [("00:00", 50.0, 1.0, 0), ("01:00", 50.1, 1.0, 0), ("02:00", 90.0, 1.0, 0),  # spike: +4 m/h
            ("03:00", -50.0, 1.0, 0), ("04:00", 50.5, 1.0, 0)]  # fmt: skip  # -50 < valid -10
    text = north(rows) + "2026-10-03 00:00,50,1,0\n" + "2019-12-31 00:00,50,1,0\n"
    drop(workspace, "north_1.csv", text)
    (summary,) = run(workspace).files
    quality = dict(query(workspace, "SELECT substr(time_utc, 12, 5), quality FROM readings"))
    # 04:00 rises fast from the wild 03:00 value, but the rate counts from 02:00, the last
    # in-range reading: no spike.
    assert quality == {"00:00": "ok", "01:00": "ok", "02:00": "spike", "03:00": "out_of_range", "04:00": "ok"}
    reasons = [r[0] for r in query(workspace, "SELECT reason FROM rejected_rows WHERE instrument_id = 'P1' ORDER BY line")]
    assert reasons[0].startswith("time is in the future (after 2026-10-02T12:10:00Z")
    assert reasons[1] == "time is before oldest_reading 2020-01-01T00:00:00Z"
    # RC stays at 1.0 for 4 h (flat_line_hours = 2) but rain gauges are not flat-line checked.
    assert summary.flagged == 2 + 1  # spike, out_of_range, and RC's no_baseline


def test_flat_line_spans_files(workspace):
    drop(workspace, "north_1.csv", north([("00:00", 50.0, 1, 0), ("01:00", 50.0, 1, 0)]))
    run(workspace)
    drop(workspace, "north_2.csv", north([("02:00", 50.0, 1, 0), ("03:00", 50.0, 1, 0), ("04:00", 51.0, 1, 0)]))
    run(workspace)
    quality = [q for (q,) in query(workspace, "SELECT quality FROM readings ORDER BY time_utc")]
    # Identical since 00:00; flagged from 02:00 (2 h) on; a new value ends the run.
    assert quality == ["ok", "ok", "flat", "flat", "ok"]


def test_cumulative_rain_carries_its_baseline_across_files(workspace):
    drop(workspace, "north_1.csv", north([("00:00", 50, 5.0, 0)]))
    run(workspace)
    drop(workspace, "north_2.csv", north([("00:15", 50.1, 5.6, 0), ("00:30", 50.2, 0.2, 0)]))
    run(workspace)
    rain = query(workspace, "SELECT rain_mm FROM rainfall WHERE gauge_id = 'RC' ORDER BY time_utc")
    # 5.0 stored; then +0.6; then a reset: 0.2 fell since (hand calculation).
    assert rain[0] == (None,)
    assert [r[0] for r in rain[1:]] == pytest.approx([0.6, 0.2], rel=1e-9)


def test_long_feed_unknown_instrument_and_missing_temperature(workspace):
    drop(workspace, "vw_1.csv", "Id,Time,Digits,Temp\nP2,2026-10-01 00:00,8000,12\nP9,2026-10-01 00:00,1,1\n"
                                "P2,2026-10-01 00:15,8001,\n")  # fmt: skip
    (summary,) = run(workspace).files
    assert (summary.accepted, summary.rejected) == (1, 2)
    # p = -0.1 (8000 - 9000) + 0.05 (12 - 10) = 100.1 kPa (hand calculation of the linear form).
    assert query(workspace, "SELECT pore_pressure_kpa FROM readings")[0][0] == pytest.approx(100.1, rel=1e-12)
    reasons = query(workspace, "SELECT line, reason, raw_text FROM rejected_rows ORDER BY line")
    assert reasons[0] == (3, "instrument 'P9' is not in site.toml", "P9,2026-10-01 00:00,1,1")
    assert reasons[1][:2] == (4, "vibrating-wire reading of P2 has no a temperature (temperature_factor is set)")


def test_files_still_being_written_wait(workspace, tmp_path):
    drop(workspace, "north_young.csv", north(ROWS), age_seconds=0)
    drop(workspace, "north_2.csv.part", north(ROWS))
    drop(workspace, "north_marked.csv", north(ROWS[:1]), age_seconds=0)
    drop(workspace, "north_marked.csv.done", "")
    config_text = workspace.site_file.read_text().replace("min_file_age_seconds = 0", "min_file_age_seconds = 60")
    workspace.site_file.write_text(config_text)
    report = ingest(workspace, now=datetime.now(timezone.utc), progress=False)
    assert [f.name for f in report.files] == ["north_marked.csv"]  # its done-marker makes it ready
    assert sorted(w.split(" ")[0] for w in report.waiting) == ["north_2.csv.part", "north_young.csv"]
    assert (workspace.processed / "north_marked.csv.done").exists()
    assert (workspace.incoming / "north_young.csv").exists()


def test_uncommitted_claim_is_put_back_and_ingested(workspace):
    claimed = workspace.claimed / "north_1.csv"
    claimed.write_text(north(ROWS))  # as left by an ingest killed before its commit
    os.utime(claimed, (0, 0))
    report = run(workspace)
    assert report.reconciled == ["north_1.csv: not committed before the stop; put back as incoming/north_1.csv"]
    assert [f.accepted for f in report.files] == [12]
    assert list(workspace.claimed.iterdir()) == []


def test_committed_claim_is_archived_without_reading_it_again(workspace):
    drop(workspace, "north_1.csv", north(ROWS))
    run(workspace)
    before = snapshot(workspace)
    # As left by an ingest killed after its commit, before the move.
    os.rename(workspace.processed / "north_1.csv", workspace.claimed / "north_1.csv")
    report = run(workspace)
    assert report.reconciled == ["north_1.csv: committed before the stop; archived as processed/north_1.csv"]
    assert report.files == []
    assert snapshot(workspace) == before


def test_named_files_are_copied_and_left_in_place(workspace, tmp_path):
    original = tmp_path / "north_9.csv"
    original.write_text(north(ROWS))
    (summary,) = run(workspace, original).files
    assert summary.accepted == 12
    assert original.exists() and (workspace.processed / "north_9.csv").exists()
    with pytest.raises(UserError, match="feed file .*nope.csv not found"):
        run(workspace, tmp_path / "nope.csv")


def test_one_ingest_at_a_time(workspace):
    with _IngestLock(workspace):
        with pytest.raises(WorkspaceError, match="another ingest is running"):
            run(workspace)


def test_status_reports_stale_instruments(workspace):
    drop(workspace, "north_1.csv", north(ROWS))
    run(workspace)
    status = workspace_status(workspace, now=datetime(2026, 10, 1, 4, 0, tzinfo=timezone.utc))
    rows = {r["instrument_id"]: r for r in status["instruments"]}
    assert rows["P1"]["newest_utc"] == "2026-10-01T00:45:00Z"
    assert rows["P1"]["age_hours"] == pytest.approx(3.25, rel=1e-9)
    assert not rows["P1"]["stale"]
    assert rows["P2"]["stale"] and rows["P2"]["newest_utc"] is None
    later = workspace_status(workspace, now=datetime(2026, 10, 1, 7, 0, tzinfo=timezone.utc))
    assert all(r["stale"] for r in later["instruments"])
    assert later["totals"]["readings"] == 4


def test_spike_rate_counts_from_the_last_in_range_reading_across_files(workspace):
    drop(workspace, "north_1.csv", north([("00:00", 50.0, 1, 0), ("01:00", -50.0, 1, 0)]))
    run(workspace)
    drop(workspace, "north_2.csv", north([("02:00", 50.2, 1, 0), ("03:00", 75.0, 1, 0)]))
    run(workspace)
    quality = [q for (q,) in query(workspace, "SELECT quality FROM readings ORDER BY time_utc")]
    # 02:00 vs 00:00: +0.02 m in 2 h; 03:00 vs 02:00: +2.5 m/h > 1.0 (hand calculation).
    assert quality == ["ok", "out_of_range", "ok", "spike"]


def test_a_file_of_bad_rows_is_rejected_with_every_row_stored_and_a_short_reason_file(workspace):
    # Rejected rows are written to the store block by block, not held in memory; the reason
    # file beside the rejected file lists the first 20 and counts the rest.
    rows = "".join(f"P9,2026-10-01 {h:02d}:{m:02d},1,1\n" for h in range(5) for m in (0, 15, 30, 45))
    drop(workspace, "vw_bad.csv", "Id,Time,Digits,Temp\n" + rows + "P9,2026-10-01 06:00,1,1\n")
    (summary,) = run(workspace).files
    assert (summary.status, summary.accepted, summary.rejected) == ("rejected", 0, 21)
    stored = query(workspace, "SELECT line, raw_text FROM rejected_rows ORDER BY line")
    assert [line for line, _ in stored] == list(range(2, 23))
    assert stored[-1][1] == "P9,2026-10-01 06:00,1,1"
    reason = (workspace.rejected / "vw_bad.csv.reason.txt").read_text()
    assert reason.count("is not in site.toml") == 20
    assert "... and 1 more (list them with `slipwatch rejected-rows`)" in reason


def test_a_feed_delivers_only_the_instruments_its_configuration_names(workspace):
    # The vw logger names P2 only; P1 belongs to the north logger (and RC is a rain gauge).
    drop(workspace, "vw_other.csv", "Time,Id,Digits,Temp\n2026-10-01 00:00,P2,8000,10\n"
                                    "2026-10-01 00:00,P1,51.0,10\n2026-10-01 00:15,RC,3.0,10\n")  # fmt: skip
    (summary,) = run(workspace).files
    assert (summary.accepted, summary.rejected) == (1, 2)
    rejected = query(workspace, "SELECT line, instrument_id, reason FROM rejected_rows ORDER BY line")
    assert [(line, iid) for line, iid, _ in rejected] == [(3, "P1"), (4, "RC")]
    assert all("is not delivered by feed 'vw' (its instruments: P2)" in reason for _, _, reason in rejected)
    assert query(workspace, "SELECT instrument_id FROM readings") == [("P2",)]
