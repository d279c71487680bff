"""`slipwatch demo` end to end on a coarse replay of the invented season (behaviour checks: the
demo data are invented and serve the demo only, so no value here is a reference). The full
daily season is checked in tests/watch/test_season_replay.py; back-analysis and forecasts have
their own tests."""

from datetime import timedelta
from pathlib import Path

from click.testing import CliRunner

from watch.cli import main
from watch.demo import DemoSettings, run_demo


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


def test_demo_refuses_to_delete_a_folder_it_did_not_make(tmp_path):
    precious = tmp_path / "precious"
    precious.mkdir()
    (precious / "notes.txt").write_text("keep me")
    result = CliRunner().invoke(main, ["demo", "--workspace", str(precious)])
    assert result.exit_code == 1
    assert "not a demo workspace" in result.output
    assert (precious / "notes.txt").read_text() == "keep me"
