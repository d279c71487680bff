"""The status board: content from the store, worst first, escaping of hostile names, empty
and half-migrated stores, the board folder's safety rules, serving on localhost, commands."""

from __future__ import annotations

import html
import json
import re
import threading
import urllib.error
import urllib.request
from datetime import timedelta

import pytest
from click.testing import CliRunner

from tests.watch.board_fixtures import (
    DAYS,
    HOSTILE_MATERIAL,
    HOSTILE_SECTION,
    HOSTILE_SITE,
    NOW,
    RAIN_PER_HOUR_MM,
    make_workspace,
)
from watch.board import build_board, collect_status, section_page_name, serve_board
from watch.caution import CAUTION
from watch.cli import main
from watch.errors import WorkspaceError


@pytest.fixture(scope="module")
def filled(tmp_path_factory):
    root = tmp_path_factory.mktemp("board") / "ws"
    workspace = make_workspace(root)
    return workspace, build_board(workspace, NOW)


def _pages(result):
    return {p.name: p.read_text(encoding="utf-8") for p in result.pages}


def test_overview_lists_every_section_worst_first_with_its_level_in_words(filled):
    _, result = filled
    index = _pages(result)["index.html"]
    rows = re.findall(r'<tr class="row-[^"]+"><td><a href="([^"]+)">([^<]+)</a>', index)
    # S-1 has the firing "watch" alert; S-2 has no assessment: worst first.
    assert [name for _, name in rows] == ["S-1", "S-2"]
    # The level is written out after its severity cue (one triangle for the lowest level).
    assert re.search(r'class="badge lv-1"><span class="cue" aria-hidden="true">\u25b2</span>watch</span>', index)
    assert re.search(r'class="badge lv-none"><span class="cue" aria-hidden="true">\?</span>not assessed</span>',
                     index)
    for href, _ in rows:
        assert (result.out / href).is_file()


def test_every_page_carries_the_caution_and_the_generated_statement(filled):
    _, result = filled
    for name, text in _pages(result).items():
        assert html.escape(CAUTION) in text, name
        assert "Generated at 2026-01-20 06:00 UTC" in text, name
        assert "newest reading 2026-01-20 06:00 UTC" in text, name
        assert "<script" not in text, name
        assert "http://" not in text and "https://" not in text, name  # nothing fetched from elsewhere


def test_images_referenced_exist_and_are_png(filled):
    _, result = filled
    for name, text in _pages(result).items():
        for src in re.findall(r'<img src="([^"]+)"', text):
            path = result.out / src
            assert path.is_file(), (name, src)
            assert path.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n", src


def test_rain_totals_and_trend_come_from_the_store(filled):
    _, result = filled
    first = result.status.sections[0]
    # The fixture stores 1 mm in every hour: 24 readings in (now - 24 h, now], 168 in 7 days.
    assert first.rain_mm["24 h"] == pytest.approx(24 * RAIN_PER_HOUR_MM, rel=1e-12)
    assert first.rain_mm["7 days"] == pytest.approx(7 * 24 * RAIN_PER_HOUR_MM, rel=1e-12)
    history = first.history
    assert len(history) == DAYS + 1
    day_ago = [a for a in history if a.time >= NOW - timedelta(hours=24)]
    assert first.fos_change["24 h"] == pytest.approx(day_ago[-1].fos - day_ago[0].fos, rel=1e-12)
    # The water line rises through the record, so the factor of safety falls.
    assert first.fos_change["7 days"] < 0


def test_section_page_shows_drawing_history_parameters_and_alerts(filled):
    _, result = filled
    page = _pages(result)[section_page_name("S-1")]
    for expected in ("S-1-section.png", "S-1-fos.png", "S-1-heads.png", "Assessment history",
                     "Parameter version 1", "section file sections/first.toml", "fos-watch",
                     "walk the crest for cracks", "Weak clay"):
        assert expected in page, expected
    # One row per stored assessment (newest first).
    assert page.count("<td>spencer</td>") == DAYS + 1
    # Data quality: the fixture flags one reading as a spike in the last 7 days.
    assert "PZ-1: 1 readings flagged in the last 7 days (1 spike)" in page


def test_hostile_names_are_shown_as_text(tmp_path):
    workspace = make_workspace(tmp_path / "ws", hostile=True)
    result = build_board(workspace, NOW)
    pages = _pages(result)
    assert section_page_name(HOSTILE_SECTION) in pages
    for name, text in pages.items():
        assert "<script" not in text, name
        assert "onerror=" not in text.replace("onerror=alert(2)&gt;", ""), name
        assert "<img src=x" not in text, name
    index = pages["index.html"]
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in index
    assert "Site &lt;/title&gt;&lt;script&gt;alert(3)&lt;/script&gt;" in index
    assert HOSTILE_SITE not in index
    section_page = pages[section_page_name(HOSTILE_SECTION)]
    assert "Clay &quot;&gt;&lt;img src=x onerror=alert(2)&gt;" in section_page
    assert HOSTILE_MATERIAL not in section_page
    # The section file name on disk is safe and distinct.
    assert re.fullmatch(r"section-[A-Za-z0-9_.-]+\.html", section_page_name(HOSTILE_SECTION))


def test_pages_from_an_empty_store_say_so(tmp_path):
    workspace = make_workspace(tmp_path / "ws", empty=True)
    result = build_board(workspace, NOW)
    pages = _pages(result)
    index = pages["index.html"]
    assert "The store holds no readings yet" in index
    assert "The store holds no assessments in the season yet" in index
    assert "the store holds no readings yet." in index  # the generated statement
    assert index.count("not assessed") >= 2
    page = pages[section_page_name("S-1")]
    assert "No assessment of this section is stored in the season yet" in page
    assert "No factor of safety stored in the period yet" in page
    assert "No piezometer readings of the section in the period" in page


def test_tables_a_later_stage_has_not_created_mean_nothing_to_show(tmp_path):
    workspace = make_workspace(tmp_path / "ws")
    with workspace.open_store() as store:
        # As in a store made before those stages existed (no rows refer to them then).
        store.conn.execute("PRAGMA foreign_keys = OFF")
        for table in ("water_lines", "inspections", "alert_events", "alerts", "calibrations",
                      "back_analyses"):
            store.conn.execute(f"DROP TABLE IF EXISTS {table}")
        status = collect_status(workspace, store, NOW)
        result = build_board(workspace, NOW, tmp_path / "board", store=store)
    assert any("no table water_lines" in n for n in status.notes)
    assert any("no table alerts" in n for n in status.notes)
    first = next(s for s in status.sections if s.id == "S-1")
    assert first.open_alerts == [] and first.level.word == "no alert"
    # Unknown safety (never assessed) now ranks above a section without alerts.
    assert [s.id for s in status.sections] == ["S-2", "S-1"]
    index = (result.out / "index.html").read_text(encoding="utf-8")
    assert "the store has no table alerts yet" in index


def test_board_never_writes_into_a_folder_it_did_not_make(tmp_path, filled):
    workspace, _ = filled
    other = tmp_path / "documents"
    other.mkdir()
    (other / "index.html").write_text("mine", encoding="utf-8")
    with pytest.raises(WorkspaceError, match="holds other files and no board made by slipwatch"):
        build_board(workspace, NOW, other)
    assert (other / "index.html").read_text(encoding="utf-8") == "mine"


def test_rebuilding_removes_pages_of_sections_no_longer_listed(tmp_path, filled):
    workspace, _ = filled
    out = tmp_path / "board"
    build_board(workspace, NOW, out)
    stale = out / "section-OLD.html"
    stale.write_text("old", encoding="utf-8")
    manifest = out / ".slipwatch-board"
    manifest.write_text(manifest.read_text(encoding="utf-8") + "section-OLD.html\n", encoding="utf-8")
    build_board(workspace, NOW, out)
    assert not stale.exists()
    assert (out / "index.html").is_file()


def test_serve_answers_on_localhost_with_the_board_and_no_listing(filled):
    _, result = filled
    server = serve_board(result.out, "127.0.0.1", 0)
    assert server.server_address[0] == "127.0.0.1"
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    try:
        base = f"http://127.0.0.1:{server.server_address[1]}"
        with urllib.request.urlopen(f"{base}/index.html") as response:
            assert response.status == 200
            assert response.headers["Cache-Control"] == "no-store"
            assert b"Status of the sections" in response.read()
        with pytest.raises(urllib.error.HTTPError, match="404"):
            urllib.request.urlopen(f"{base}/img/")
    finally:
        server.shutdown()
        server.server_close()


def test_board_command_json(filled):
    workspace, _ = filled
    out = workspace.root / "board-cli"
    result = CliRunner().invoke(main, ["board", "-w", str(workspace.root), "--out", str(out),
                                       "--at", "2026-01-20T06:00", "--json"])
    assert result.exit_code == 0, result.output
    data = json.loads(result.output)
    assert [s["section_id"] for s in data["sections"]] == ["S-1", "S-2"]
    assert data["sections"][0]["level"] == "watch"
    assert data["caution"] == CAUTION


def test_plot_commands_write_png(filled):
    workspace, _ = filled
    for kind in ("section", "fos", "heads"):
        out = workspace.root / "reports" / f"cli_{kind}.png"
        result = CliRunner().invoke(main, ["plot", kind, "S-1", "-w", str(workspace.root),
                                           "--from", "2026-01-01", "--to", "2026-01-20T06:00",
                                           "--out", str(out)])
        assert result.exit_code == 0, result.output
        assert out.read_bytes()[:4] == b"\x89PNG"


def test_plot_command_for_an_unknown_section_fails_in_one_line(filled):
    workspace, _ = filled
    result = CliRunner().invoke(main, ["plot", "fos", "NOPE", "-w", str(workspace.root)])
    assert result.exit_code == 1
    assert "section 'NOPE' is not in site.toml or the store (known: S-1, S-2)" in result.output


def test_the_board_is_the_site_of_site_toml_not_another_site_the_store_holds(tmp_path):
    # A store made by `slipwatch init` also holds the example site it started from; the board
    # must show the site that site.toml describes, with none of the other site's sections.
    workspace = make_workspace(tmp_path / "ws")
    config = workspace.config()
    with workspace.open_store() as store:
        with store.atomic():
            store.conn.execute("PRAGMA defer_foreign_keys = ON")  # the site row is put back below
            row = store.conn.execute("SELECT * FROM sites WHERE id = ?", (config.id,)).fetchone()
            columns = [d[0] for d in store.conn.execute("SELECT * FROM sites").description]
            # The other site first, as `init` leaves it: a board reading "the first site" fails.
            store.conn.execute("DELETE FROM sites WHERE id = ?", (config.id,))
            store.conn.execute("INSERT INTO sites (id, name, owner, time_zone, updated_utc) VALUES "
                               "('ghost', 'Ghost Example Site', 'Ghost Owner', 'UTC', '2026-01-01T00:00:00Z')")
            store.conn.execute(f"INSERT INTO sites ({', '.join(columns)}) VALUES "
                               f"({', '.join('?' * len(columns))})", tuple(row))
            store.conn.execute("INSERT INTO sections (id, site_id, file, gauge_id, updated_utc) VALUES "
                               "('GH-1', 'ghost', 'sections/gh_1.toml', NULL, '2026-01-01T00:00:00Z')")
    with workspace.open_store(read_only=True) as store:
        status = collect_status(workspace, store, NOW)
    assert status.site_name == config.name
    assert "GH-1" not in {s.id for s in status.sections}
    assert {s.id for s in config.sections} <= {s.id for s in status.sections}
