"""`slipwatch demo` end to end on a coarse replay of the invented season (behaviour checks: the
demo data are invented and serve the demo only, so no value here is a reference). The full
daily season is checked in tests/watch/test_season_replay.py; back-analysis and forecasts have
their own tests."""

import re
import shutil
import subprocess
from datetime import timedelta
from pathlib import Path

from click.testing import CliRunner

from watch.cli import main
from watch.demo import DemoSettings, run_demo
from watch.section_status import sections_status
from watch.workspace import open_workspace


def test_demo_replays_the_season_and_writes_the_board_and_report(tmp_path):
    lines = []
    settings = DemoSettings(step=timedelta(days=7), forecast=False, back_analysis=False)
    summary = run_demo(tmp_path / "demo", echo=lines.append, settings=settings)
    text = "\n".join(lines)
    assert "Alerts raised during the season" in text
    assert any("fos-" in line for line in summary["season"])  # the storm crosses a level
    assert Path(summary["board"]).exists()
    assert Path(summary["report"]).stat().st_size > 0
    assert (tmp_path / "demo" / "notifications.log").exists()
    assert "Caution" in text
    # WC-060 slipped on 16 January: marked so, it shows that state instead of a level at the
    # end of the season, in the status, on the board and in its report.
    assert "WC-060 marked slipped since 2026-01-16T06:00:00Z" in text
    rows = {r["section_id"]: r for r in sections_status(open_workspace(tmp_path / "demo"), settings.end)}
    assert rows["WC-060"]["service_state"] == "slipped" and rows["WC-060"]["level"] is None
    index = (Path(summary["board"]) / "index.html").read_text(encoding="utf-8")
    # Its own look (hatched, with a cross), never the red level's.
    assert re.search(r'WC-060</a>.*?<span class="badge lv-out"><span class="cue"[^>]*>\u2715</span>slipped</span>',
                     index, re.S)
    assert Path(summary["slip_report"]).stat().st_size > 0
    if shutil.which("pdftotext"):
        report = subprocess.run(["pdftotext", "-layout", summary["slip_report"], "-"], capture_output=True,
                                text=True, check=True).stdout
        assert "SLIPPED" in report and "set by demo engineer" in report


def test_demo_refuses_to_delete_a_folder_it_did_not_make(tmp_path):
    precious = tmp_path / "precious"
    precious.mkdir()
    (precious / "notes.txt").write_text("keep me")
    result = CliRunner().invoke(main, ["demo", "--workspace", str(precious)])
    assert result.exit_code == 1
    assert "not a demo workspace" in result.output
    assert (precious / "notes.txt").read_text() == "keep me"
