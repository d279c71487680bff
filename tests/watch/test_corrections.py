"""Corrections and re-reads with an audit trail, rejected rows listed per period, and the ingest
summary's counts (behaviour checks on invented data)."""

import csv
import io
import json
from datetime import datetime, timedelta, timezone

import pytest
from click.testing import CliRunner
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from tests.watch.cycle_helpers import ROOT, make_workspace
from tests.watch.delivery_helpers import cut_into_files, delivery_orders
from watch.cli import main
from watch.clock import ManualClock
from watch.cycle import replay_season, run_cycle
from watch.errors import UserError
from watch.ingest import apply_corrections, ingest, reread
from watch.workspace import EXAMPLE_SITE_TOML, init_workspace

NOW = datetime(2026, 10, 2, 12, 0, tzinfo=timezone.utc)
FEED = ("Timestamp,PZ1_kPa,PZ2_digits,PZ2_degC,Rain_tips\n"
        "2026-10-01 00:00,50.0,9000,11.0,1\n"
        "2026-10-01 00:15,50.5,8990,11.0,0\n"
        "2026-10-01 00:30,50.7,8985,11.0,0\n")  # fmt: skip


def _workspace(tmp_path, site=EXAMPLE_SITE_TOML):
    template = tmp_path / "template.toml"
    template.write_text(site)
    return init_workspace(tmp_path / "ws", template)


def _file(tmp_path, name, text):
    path = tmp_path / name
    path.write_text(text)
    return path


def _raw(workspace, instrument, time_utc):
    with workspace.open_store(read_only=True) as store:
        return store.conn.execute("SELECT raw_value, source_file_id FROM readings WHERE instrument_id = ? "
                                  "AND time_utc = ?", (instrument, time_utc)).fetchone()  # fmt: skip


def test_a_corrected_file_replaces_values_and_keeps_the_old_ones_with_who_when_why(tmp_path):
    workspace = _workspace(tmp_path)
    ingest(workspace, [_file(tmp_path, "fh_1.csv", FEED)], now=NOW, progress=False)
    # Without a correction a different value is a conflict: reported, the stored value kept.
    fixed = FEED.replace("2026-10-01 00:15,50.5", "2026-10-01 00:15,48.5")
    (plain,) = ingest(workspace, [_file(tmp_path, "fh_1_resent.csv", fixed)], now=NOW, progress=False).files
    assert plain.rejected == 1 and "replace it with `slipwatch correct`" in plain.rejected_rows[0]["reason"]
    assert _raw(workspace, "PZ-1", "2026-09-30T23:15:00Z")[0] == 50.5

    clock = ManualClock(NOW + timedelta(hours=3))
    corrected = _file(tmp_path, "fh_1_fixed.csv", fixed + "2026-10-01 00:45,50.9,8980,11.0,0\n")
    summary = apply_corrections(workspace, corrected, "A. Duty", "transducer offset fixed on site", clock)
    # Line 3 differs (PZ-1): corrected; line 5 is new (3 instruments); the rest are duplicates.
    assert (summary.corrected, summary.accepted, summary.duplicates, summary.rejected) == (1, 3, 8, 0)
    assert "1 corrected (the values replaced are kept)" in summary.line()
    raw, file_id = _raw(workspace, "PZ-1", "2026-09-30T23:15:00Z")
    assert raw == 48.5
    with workspace.open_store(read_only=True) as store:
        record = store.conn.execute("SELECT name, purpose, applied_by, note, ingested_utc FROM ingested_files "
                                    "WHERE id = ?", (file_id,)).fetchone()  # fmt: skip
    assert record == ("fh_1_fixed.csv", "correction", "A. Duty", "transducer offset fixed on site",
                      "2026-10-02T15:00:00Z")  # the injected clock's time

    result = CliRunner().invoke(main, ["readings", "PZ-1", "-w", str(workspace.root), "--json"])
    assert result.exit_code == 0, result.output
    rows = {r["time_utc"]: r for r in json.loads(result.output)}
    (old,) = rows["2026-09-30T23:15:00Z"]["superseded"]
    assert (old["raw_value"], old["source_file"], old["source_line"]) == (50.5, "fh_1.csv", 3)
    assert (old["corrected_by"], old["reason"], old["corrected_utc"]) == (
        "A. Duty", "transducer offset fixed on site", "2026-10-02T15:00:00Z")
    assert rows["2026-09-30T23:00:00Z"]["superseded"] == []
    result = CliRunner().invoke(main, ["readings", "PZ-1", "-w", str(workspace.root), "--csv"])
    table = {r["time_utc"]: r for r in csv.DictReader(io.StringIO(result.output))}
    assert "raw 50.5 (ok) from fh_1.csv line 3, replaced 2026-10-02T15:00:00Z by A. Duty" in (
        table["2026-09-30T23:15:00Z"]["superseded"])


def test_a_correction_needs_who_and_why(tmp_path):
    workspace = _workspace(tmp_path)
    with pytest.raises(UserError, match=r"needs who applies it \(--by\) and why \(--reason\)"):
        apply_corrections(workspace, _file(tmp_path, "fh_1.csv", FEED), "A. Duty", " ", ManualClock(NOW))


def test_a_corrected_cumulative_total_changes_the_rain_after_it(tmp_path):
    site = EXAMPLE_SITE_TOML.replace('reporting = "tips"                   # interval_mm | cumulative_mm | tips\n'
                                     'bucket_mm = 0.2', 'reporting = "cumulative_mm"')  # fmt: skip
    workspace = _workspace(tmp_path, site)
    totals = FEED.replace(",1\n", ",10.0\n").replace("11.0,0\n2026-10-01 00:30", "11.0,10.4\n2026-10-01 00:30")
    totals = totals.replace("8985,11.0,0", "8985,11.0,10.6")
    ingest(workspace, [_file(tmp_path, "fh_1.csv", totals)], now=NOW, progress=False)
    apply_corrections(workspace, _file(tmp_path, "fh_2.csv", totals.replace(",10.4\n", ",10.2\n")), "A. Duty",
                      "logger total misread", ManualClock(NOW))  # fmt: skip
    with workspace.open_store(read_only=True) as store:
        rain = [r[0] for r in store.conn.execute("SELECT rain_mm FROM rainfall ORDER BY time_utc")]
    assert rain[1:] == [pytest.approx(0.2, abs=1e-9), pytest.approx(0.4, abs=1e-9)]  # 10.2 - 10.0, 10.6 - 10.2


def test_an_archived_file_is_read_again_after_a_configuration_fix(tmp_path):
    # PZ-2's column is left out of the mapping by mistake: its readings are not read.
    unmapped = EXAMPLE_SITE_TOML.replace('"PZ2_digits" = "PZ-2"\n', "").replace(
        '[feed.temperature_columns]\n"PZ2_degC" = "PZ-2"\n', "")
    unmapped = unmapped.replace('temperature_factor = 0.04            # K [kPa/degC]\n', "").replace(
        "zero_temperature = 11.0              # T0 [degC]\n", "")
    workspace = _workspace(tmp_path, unmapped)
    (first,) = ingest(workspace, [_file(tmp_path, "fh_1.csv", FEED)], now=NOW, progress=False).files
    assert first.accepted == 6 and any("PZ2_digits" in note for note in first.notes)
    fixed = unmapped.replace('"Rain_tips" = "RG-1"\n', '"Rain_tips" = "RG-1"\n"PZ2_digits" = "PZ-2"\n')
    workspace.site_file.write_text(fixed)
    (again,) = ingest(workspace, [_file(tmp_path, "fh_1.csv", FEED)], now=NOW, progress=False).files
    assert again.status == "already ingested"  # the exactly-once rule for deliveries

    result = CliRunner().invoke(main, ["reread", "processed/fh_1.csv", "-w", str(workspace.root), "--json"])
    assert result.exit_code == 0, result.output
    summary = json.loads(result.output)
    assert (summary["accepted"], summary["duplicates"], summary["rejected"]) == (3, 6, 0)
    with workspace.open_store(read_only=True) as store:
        counts = store.conn.execute("SELECT instrument_id, COUNT(*) FROM readings GROUP BY instrument_id").fetchall()
        purposes = [r[0] for r in store.conn.execute("SELECT purpose FROM ingested_files ORDER BY id")]
    assert counts == [("PZ-1", 3), ("PZ-2", 3)]
    assert purposes == ["delivery", "reread"]
    assert (workspace.processed / "fh_1.csv").exists()  # the file stays where it is
    # A second re-read stores nothing more.
    assert reread(workspace, "processed/fh_1.csv", ManualClock(NOW)).duplicates == 9
    result = CliRunner().invoke(main, ["reread", "site.toml", "-w", str(workspace.root)])
    assert result.exit_code == 1 and "is not a feed file archived in" in result.output


def test_rejected_rows_are_listed_for_a_period_and_carried_by_ingest_json(tmp_path):
    workspace = _workspace(tmp_path)
    bad = FEED + "2026-10-01 00:45,abc,8980,11.0,0\n2026-10-01 01:00,50.1,8980,11.0\n"
    named = _file(tmp_path, "fh_2.csv", bad)
    result = CliRunner().invoke(main, ["ingest", str(named), "-w", str(workspace.root), "--no-progress", "--json"])
    assert result.exit_code == 0, result.output
    (summary,) = json.loads(result.output)["files"]
    assert [(r["line"], r["reason"][:20]) for r in summary["rejected_rows"]] == [
        (5, "value 'abc' in colum"), (6, "expected 5 fields as")]
    today = datetime.now(timezone.utc)
    result = CliRunner().invoke(main, ["rejected-rows", "-w", str(workspace.root), "--json",
                                       "--from", (today - timedelta(days=1)).isoformat()])  # fmt: skip
    rows = json.loads(result.output)
    assert [(r["file"], r["line"]) for r in rows] == [("fh_2.csv", 5), ("fh_2.csv", 6)]
    assert rows[1]["raw_text"] == "2026-10-01 01:00,50.1,8980,11.0"
    result = CliRunner().invoke(main, ["rejected-rows", "-w", str(workspace.root), "--to", "2020-01-01"])
    assert result.exit_code == 0 and result.output.strip() == "0 rejected row(s)"
    result = CliRunner().invoke(main, ["rejected-rows", "-w", str(workspace.root)])
    assert "fh_2.csv line 6: expected 5 fields as in the header, found 4" in result.output


def test_the_summary_counts_empty_cells_and_clock_back_times_placed_by_row_order(tmp_path):
    workspace = _workspace(tmp_path)
    # Europe/London, 2026-10-25: 01:00-01:59 occurs twice; the rows show one step back.
    text = "Timestamp,PZ1_kPa,PZ2_digits,PZ2_degC,Rain_tips\n" + "".join(
        f"2026-10-25 {t},50.0,,11.0,0\n" for t in ("00:30", "01:00", "01:30", "01:00", "01:30", "02:00"))
    (summary,) = ingest(workspace, [_file(tmp_path, "fh_3.csv", text)], now=datetime(2026, 10, 26, tzinfo=timezone.utc),
                        progress=False).files  # fmt: skip
    assert (summary.missing, summary.repeated_times_resolved) == (6, 4)
    assert "6 empty, 4 at local times that occur twice (clocks went back) placed by row order" in summary.line()


def test_later_assessments_use_corrected_values_and_past_ones_keep_theirs(tmp_path):
    workspace = make_workspace(tmp_path / "ws")
    start = datetime(2026, 1, 14, 6, tzinfo=timezone.utc)
    clock = ManualClock(start)
    replay_season(workspace, start, start, timedelta(hours=6), clock,
                  feeds=[ROOT / "demo_feeds" / "wendlecombe_2026-01.csv"], sections=["WC-040"])  # fmt: skip

    def used(row):
        lines = json.loads(row["inputs_json"])["water_lines"]
        return next(r for line in lines.values() for r in line["readings"] if r["instrument_id"] == "WC040-PA")

    with workspace.open_store(read_only=True) as store:
        first = store.last_assessment("WC-040")
        reading = used(first)
        source = store.conn.execute("SELECT name, archived_as FROM ingested_files WHERE id = ?",
                                    (reading["source_file_id"],)).fetchone()  # fmt: skip
    lines = (workspace.root / source[1]).read_text().splitlines(keepends=True)
    fields = lines[reading["source_line"] - 1].split(",")
    header = lines[2].strip().split(",")
    column = header.index("WC040-PA u (kPa)")
    fields[column] = f"{float(fields[column]) + 0.981:.3f}"  # 0.1 m more head (below the spike rate)
    lines[reading["source_line"] - 1] = ",".join(fields)
    fixed = tmp_path / "wendlecombe_2026-01_fixed.csv"
    fixed.write_text("".join(lines))
    clock.advance(timedelta(minutes=30))
    assert apply_corrections(workspace, fixed, "A. Duty", "logger scaling fixed", clock).corrected == 1
    run_cycle(workspace, clock, sections=["WC-040"], at=start)
    with workspace.open_store(read_only=True) as store:
        rows = list(store.db.query("SELECT * FROM assessments WHERE section_id = 'WC-040' ORDER BY id"))
        (correction_id,) = store.conn.execute("SELECT id FROM ingested_files WHERE purpose = 'correction'").fetchone()
    assert len(rows) == 2
    assert rows[0]["inputs_json"] == first["inputs_json"]  # the past record keeps what it used
    now_used = used(rows[1])
    assert (now_used["time_utc"], now_used["source_file_id"]) == (reading["time_utc"], correction_id)
    assert now_used["head_m"] == pytest.approx(reading["head_m"] + 0.1, abs=1e-3)  # 0.981 kPa / 9.81 kN/m3


def test_a_correction_checks_the_readings_after_it_again(tmp_path):
    workspace = _workspace(tmp_path)
    ingest(workspace, [_file(tmp_path, "fh_1.csv", FEED)], now=NOW, progress=False)
    # PZ-1 corrected from 50.5 to 45.0 kPa at 00:15: the reading at 00:30 (50.7 kPa, not in the
    # corrected file) now rises (50.7 - 45.0) / 9.81 = 0.58 m in 0.25 h = 2.3 m/h, above the
    # example's max_rise_rate of 1 m/h, so it is flagged as a spike.
    one_row = FEED.splitlines(keepends=True)[0] + "2026-10-01 00:15,45.0,8990,11.0,0\n"
    apply_corrections(workspace, _file(tmp_path, "fh_1_fixed.csv", one_row), "A. Duty", "misread", ManualClock(NOW))
    with workspace.open_store(read_only=True) as store:
        quality = [r["quality"] for r in store.readings("PZ-1")]
    assert quality == ["ok", "ok", "spike"]


# --- piezometer flags whatever the delivery order -------------------------------------------------

# The example site with flat lines flagged after 1 hour (24 h in the example), so that short
# invented records hold both flat runs and spikes.
_FLAT_SITE = EXAMPLE_SITE_TOML.replace("flat_line_hours = 24", "flat_line_hours = 1")


def _piezometer_file(rows) -> str:
    """rows: (minutes after 2026-10-05 00:00 local time, PZ-1 [kPa], PZ-2 [digits])."""
    start = datetime(2026, 10, 5)
    return "Timestamp,PZ1_kPa,PZ2_digits,PZ2_degC,Rain_tips\n" + "".join(
        f"{(start + timedelta(minutes=m)):%Y-%m-%d %H:%M},{p!r},{d!r},11.0,0\n" for m, p, d in rows)


def _stored_flags(workspace):
    with workspace.open_store(read_only=True) as store:
        return store.conn.execute("SELECT instrument_id, time_utc, head_m, quality FROM readings "
                                  "ORDER BY instrument_id, time_utc").fetchall()  # fmt: skip


@st.composite
def _piezometer_record(draw):
    """15-minute readings whose pressures rise fast (a spike: 10 kPa is about 1 m of head in
    15 minutes, 4 m/h against max_rise_rate 1 m/h), fall, or stay flat, cut into 3 or 4 files."""
    n = draw(st.integers(8, 30))
    pressures = draw(st.lists(st.sampled_from([50.0, 50.0, 50.0, 52.0, 60.0, 45.0]), min_size=n, max_size=n))
    digits = draw(st.lists(st.sampled_from([9000.0, 9000.0, 8990.0]), min_size=n, max_size=n))
    return cut_into_files(draw, [(15 * i, pressures[i], digits[i]) for i in range(n)], _piezometer_file)


@settings(max_examples=10, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(files=_piezometer_record(), data=st.data())
def test_every_delivery_order_of_piezometer_files_stores_the_flags_of_in_order_delivery(tmp_path_factory, files,
                                                                                       data):  # fmt: skip
    chosen = delivery_orders(data, len(files))
    results = []
    for order in chosen:
        folder = tmp_path_factory.mktemp("order")
        workspace = _workspace(folder, _FLAT_SITE)
        for k in order:
            ingest(workspace, [_file(folder, f"fh_{k}.csv", files[k])], now=NOW + timedelta(days=5), progress=False)
        results.append(_stored_flags(workspace))
    assert all(result == results[0] for result in results[1:]), chosen


def test_a_back_filled_file_makes_a_stored_reading_a_spike_and_another_not(tmp_path):
    # Head = tip elevation + p / gamma_w, 1 kPa = 0.102 m (gamma_w 9.81 kN/m3); max_rise_rate
    # 1 m/h. Delivered first: 50, 60, 52, 57 kPa an hour apart: 50 -> 60 is 1.02 m/h, a spike;
    # 52 -> 57 is 0.51 m/h, not one.
    first = [(0, 50.0, 9000.0), (60, 60.0, 8990.0), (120, 52.0, 9000.0), (180, 57.0, 8990.0)]
    # Back-filled: 58 kPa 15 min before the 60 (58 -> 60 is 0.82 m/h: the 60 is no spike any
    # more) and 52 kPa 15 min before the 57 (52 -> 57 is 2.04 m/h: the 57 becomes a spike).
    late = [(45, 58.0, 9000.0), (165, 52.0, 9000.0)]
    workspace = _workspace(tmp_path, _FLAT_SITE)
    now = NOW + timedelta(days=5)
    ingest(workspace, [_file(tmp_path, "fh_a.csv", _piezometer_file(first))], now=now, progress=False)
    assert [q for i, _, _, q in _stored_flags(workspace) if i == "PZ-1"] == ["ok", "spike", "ok", "ok"]
    ingest(workspace, [_file(tmp_path, "fh_b.csv", _piezometer_file(late))], now=now, progress=False)
    # 0, 45 (50 -> 58 in 45 min: 1.09 m/h), 60, 120, 165, 180.
    assert [q for i, _, _, q in _stored_flags(workspace) if i == "PZ-1"] == ["ok", "spike", "ok", "ok", "ok", "spike"]
    (tmp_path / "in_order").mkdir()
    in_order = _workspace(tmp_path / "in_order", _FLAT_SITE)
    ingest(in_order, [_file(tmp_path, "fh_c.csv", _piezometer_file(sorted(first + late)))], now=now, progress=False)
    assert _stored_flags(workspace) == _stored_flags(in_order)
