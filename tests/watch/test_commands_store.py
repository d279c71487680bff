"""The store commands in-process (click's runner): init, ingest, readings, status, backup."""

import json
from datetime import datetime, timedelta, timezone

from click.testing import CliRunner

from watch.cli import main
from watch.ingest import record_first_look
from watch.workspace import Workspace

FEED = "Timestamp,PZ1_kPa,PZ2_digits,PZ2_degC,Rain_tips\n2026-10-01 00:00,50.0,9000,11.0,1\n2026-10-01 00:15,50.5,8990,11.0,0\n"


def _workspace(tmp_path):
    root = tmp_path / "ws"
    result = CliRunner().invoke(main, ["init", str(root)])
    assert result.exit_code == 0, result.output
    assert "workspace created" in result.output
    return root


def _drop(root, name, text):
    path = root / "incoming" / name
    path.write_text(text)
    # Seen unchanged for an hour already (the ingest takes a file after two looks).
    record_first_look(Workspace(root), name, datetime.now(timezone.utc) - timedelta(hours=1))


def test_init_ingest_readings_status_backup(tmp_path):
    root = _workspace(tmp_path)
    runner = CliRunner()
    _drop(root, "fh_1.csv", FEED)
    result = runner.invoke(main, ["ingest", "--workspace", str(root), "--no-progress"])
    assert result.exit_code == 0, result.output
    assert "fh_1.csv: 6 accepted, 0 duplicates, 0 rejected, 0 flagged" in result.output

    result = runner.invoke(main, ["readings", "PZ-1", "-w", str(root), "--csv"])
    assert result.exit_code == 0, result.output
    lines = result.output.strip().splitlines()
    assert lines[0].startswith("instrument_id,time_utc,raw_value")
    # The example logger keeps Europe/London time: 00:00 BST is 23:00 UTC.
    assert lines[1].startswith("PZ-1,2026-09-30T23:00:00Z,50.0")
    assert len(lines) == 3

    result = runner.invoke(main, ["readings", "PZ-1", "-w", str(root), "--from", "2026-09-30T23:10", "--json"])
    assert [r["time_utc"] for r in json.loads(result.output)] == ["2026-09-30T23:15:00Z"]

    result = runner.invoke(main, ["status", "-w", str(root), "--json"])
    assert result.exit_code == 0, result.output
    status = json.loads(result.output)
    assert {r["instrument_id"] for r in status["instruments"]} == {"PZ-1", "PZ-2", "RG-1"}
    assert all(r["stale"] for r in status["instruments"])  # 2026-10-01 is long ago

    result = runner.invoke(main, ["backup", str(tmp_path / "copy.db"), "-w", str(root)])
    assert result.exit_code == 0, result.output
    assert "integrity check ok" in result.output


def test_user_errors_are_one_line_and_non_zero(tmp_path):
    runner = CliRunner()
    result = runner.invoke(main, ["status", "-w", str(tmp_path)])
    assert result.exit_code == 1
    assert result.output.strip().startswith("slipwatch: error:") and "is not a slipwatch workspace" in result.output
    root = _workspace(tmp_path)
    result = runner.invoke(main, ["readings", "NOPE", "-w", str(root)])
    assert result.exit_code == 1
    assert "instrument 'NOPE' is not in" in result.output and "known: PZ-1, PZ-2, RG-1" in result.output
    result = runner.invoke(main, ["readings", "PZ-1", "-w", str(root), "--from", "last week"])
    assert result.exit_code == 1 and "--from 'last week' is not an ISO 8601 date" in result.output
    result = runner.invoke(main, ["init", str(root)])
    assert result.exit_code == 1 and "already holds a workspace" in result.output
