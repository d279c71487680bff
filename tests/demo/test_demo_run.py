"""`slipwatch demo` end to end on a coarse replay of the invented season (behaviour checks: the
demo data are invented and serve the demo only, so no value here is a reference)."""

from click.testing import CliRunner

from watch.cli import main
from watch.demo import DemoSettings, run_demo


def test_demo_builds_the_workspace_ingests_and_assesses_every_section(tmp_path):
    lines = []
    summary = run_demo(tmp_path / "demo", echo=lines.append,
                       settings=DemoSettings(step="14D"))
    text = "\n".join(lines)
    assert summary["ingest"]["accepted"] > 100_000
    assert summary["ingest"]["rejected"] >= 5  # the generator plants faulty rows
    assert set(summary["sections"]) == {"WC-040", "WC-060", "WC-080", "FE-210"}
    for result in summary["sections"].values():
        assert 0.5 < result["lowest"] <= result["start"]
        for plot in result["plots"]:
            assert (tmp_path / "demo" / "reports").joinpath(plot.rsplit("/", 1)[-1]).stat().st_size
    assert "already ingested" in text  # the re-delivered file is recognised
    assert "Caution" in text


def test_demo_refuses_to_delete_a_folder_it_did_not_make(tmp_path):
    precious = tmp_path / "precious"
    precious.mkdir()
    (precious / "notes.txt").write_text("keep me")
    result = CliRunner().invoke(main, ["demo", "--workspace", str(precious)])
    assert result.exit_code == 1
    assert "not a demo workspace" in result.output
    assert (precious / "notes.txt").read_text() == "keep me"
