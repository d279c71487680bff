"""Hostile feeds (issue 14): one bad file never stops the watch, times never wrap, files in flight
wait, only regular files are read, rows and encodings are bounded and recognised, and names
with control characters keep summaries to one line. Ends with a property-based suite of
mutated real-looking files.

Every reading here is invented test data.
"""

import codecs
import functools
import os
import sqlite3
import threading
import urllib.error
import urllib.request
from datetime import datetime, timedelta, timezone

import pytest
from click.testing import CliRunner
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import watch.feeds
import watch.ingest
from watch.board import serve_board
from watch.cli import main
from watch.errors import ConfigError, UserError
from watch.feeds import MAX_ROW_BYTES, RAW_TEXT_CHARS
from watch.ingest import SIGHTINGS_FILE, ingest, record_first_look
from watch.workspace import init_workspace, open_workspace

NOW = datetime(2026, 11, 20, 12, 0, tzinfo=timezone.utc)

SITE = """
[site]
id = "hostile"
name = "Invented hostile-feed site"

[[section]]
id = "S1"
file = "sections/s1.toml"

[[piezometer]]
id = "PA"
section = "S1"
offset = 10.0
tip_elevation = 40.0
collar_elevation = 50.0
water_line = "main"
reading = "pore_pressure_kpa"

[[piezometer]]
id = "PB"
section = "S1"
offset = 20.0
tip_elevation = 38.0
collar_elevation = 50.0
water_line = "main"
reading = "head_m"

[[feed]]
name = "long"
pattern = "long_*.csv"
layout = "long"
time_column = "timestamp_utc"
time_format = "%Y-%m-%dT%H:%M:%SZ"
time_zone = "UTC"
delimiter = ";"
decimal = ","
missing = ["", "-9999"]
instrument_column = "channel"
value_column = "value"
instruments = ["PA", "PB"]

[[feed]]
name = "wide"
pattern = "wide_*.csv"
layout = "wide"
time_column = "Date"
time_format = "%d/%m/%Y %H:%M"
time_zone = "Europe/London"
[feed.columns]
"PA" = "PA"
"PB" = "PB"

[ingest]
min_file_age_seconds = 60
oldest_reading = "2020-01-01"
done_suffix = ".done"
"""

HEADER = "timestamp_utc;channel;value\n"


def row(minute: int, channel: str = "PA", value: str = "5,9") -> str:
    return f"2026-11-20T{minute // 60:02d}:{minute % 60:02d}:00Z;{channel};{value}\n"


@pytest.fixture
def workspace(tmp_path):
    site = tmp_path / "site.toml"
    site.write_text(SITE)
    return init_workspace(tmp_path / "ws", site)


def deliver(workspace, name, data, seen=NOW - timedelta(hours=1)):
    """A finished file in incoming/, first looked at ``seen``."""
    path = workspace.incoming / name
    path.write_bytes(data.encode() if isinstance(data, str) else data)
    record_first_look(workspace, name, seen)
    return path


def query(workspace, sql, params=()):
    with sqlite3.connect(workspace.database) as conn:
        return conn.execute(sql, params).fetchall()


def left_in_incoming(workspace):
    return sorted(p.name for p in workspace.incoming.iterdir() if p.name != ".claimed")


# --- 1. one bad file never stops the watch ---------------------------------------------------------


def test_identical_repeated_rows_count_as_duplicates(workspace):
    # The reproduction: the same instrument and time twice, identical rows.
    deliver(workspace, "long_dup.csv", HEADER + row(0) + row(0))
    (summary,) = ingest(workspace, now=NOW, progress=False).files
    assert (summary.status, summary.accepted, summary.duplicates, summary.rejected) == ("ingested", 1, 1, 0)
    assert query(workspace, "SELECT instrument_id, raw_value, source_line FROM readings") == [("PA", 5.9, 2)]
    assert left_in_incoming(workspace) == []


def test_repeated_rows_with_different_values_are_all_rejected_with_line_and_reason(workspace):
    deliver(workspace, "long_conflict.csv", HEADER + row(0) + row(0, value="6,1") + row(15))
    (summary,) = ingest(workspace, now=NOW, progress=False).files
    assert (summary.accepted, summary.duplicates, summary.rejected) == (1, 0, 2)
    assert query(workspace, "SELECT source_line FROM readings") == [(4,)]
    rejected = query(workspace, "SELECT f.name, r.line, r.reason, r.raw_text FROM rejected_rows r "
                                "JOIN ingested_files f ON f.id = r.file_id ORDER BY r.line")  # fmt: skip
    reason = ("PA at 2026-11-20T00:00:00Z is given 2 times in this file with different values (5.9, 6.1; "
              "lines 2, 3): none of them is stored")  # fmt: skip
    assert rejected == [("long_conflict.csv", 2, reason, row(0).rstrip()),
                        ("long_conflict.csv", 3, reason, row(0, value="6,1").rstrip())]  # fmt: skip


def test_repeated_rows_in_different_blocks_of_a_file_are_all_rejected(workspace, monkeypatch):
    # Blocks of 64 bytes: the two rows of PA at 00:00 are read in different blocks.
    monkeypatch.setattr(watch.ingest, "FeedReader", functools.partial(watch.feeds.FeedReader, block_bytes=64))
    text = HEADER + row(0) + row(15) + row(30) + row(45) + row(0, value="7,0") + row(60) + row(0) + row(75)
    deliver(workspace, "long_far.csv", text)
    (summary,) = ingest(workspace, now=NOW, progress=False).files
    assert (summary.accepted, summary.duplicates, summary.rejected) == (5, 0, 3)
    assert query(workspace, "SELECT source_line FROM readings ORDER BY source_line") == [(3,), (4,), (5,), (7,), (9,)]
    # The third row of the key agrees with the first, but the file gave two values for it.
    assert query(workspace, "SELECT line FROM rejected_rows ORDER BY line") == [(2,), (6,), (8,)]


def test_an_unforeseen_error_rejects_that_file_only_and_the_ingest_exits_non_zero(workspace, monkeypatch):
    original = watch.feeds.FeedReader._long

    def breaks_on_boom(self, *args):
        if "boom" in self.path.name:
            raise ZeroDivisionError("stand-in for a reader bug")
        return original(self, *args)

    monkeypatch.setattr(watch.feeds.FeedReader, "_long", breaks_on_boom)
    deliver(workspace, "long_boom.csv", HEADER + row(0))
    deliver(workspace, "long_good.csv", HEADER + row(15))
    result = CliRunner().invoke(main, ["ingest", "-w", str(workspace.root), "--no-progress"])
    assert result.exit_code == 1
    assert ("long_boom.csv: REJECTED: unexpected error while reading the file (ZeroDivisionError: stand-in for "
            "a reader bug); nothing of it is stored") in result.output  # fmt: skip
    assert "long_good.csv: 1 accepted" in result.output
    assert "1 file(s) could not be ingested" in result.output
    assert left_in_incoming(workspace) == []
    assert (workspace.rejected / "long_boom.csv.reason.txt").exists()
    assert query(workspace, "SELECT name, status FROM ingested_files ORDER BY name") == [
        ("long_boom.csv", "rejected"), ("long_good.csv", "ingested")]  # fmt: skip
    # Nothing stays behind to fail every later pass.
    again = CliRunner().invoke(main, ["ingest", "-w", str(workspace.root), "--no-progress"])
    assert again.exit_code == 0 and "nothing to ingest" in again.output


def test_a_store_failure_leaves_the_file_in_incoming_and_is_a_failure(workspace, monkeypatch):
    def full_disk(*args, **kwargs):
        raise sqlite3.OperationalError("database or disk is full")

    monkeypatch.setattr(watch.ingest.Store, "add_rejected_rows", full_disk)
    deliver(workspace, "long_bad.csv", HEADER + row(0, channel="P9"))
    report = ingest(workspace, now=NOW, progress=False)
    (summary,) = report.failures
    assert summary.status == "failed" and "database or disk is full" in summary.reason
    assert left_in_incoming(workspace) == ["long_bad.csv"]
    assert query(workspace, "SELECT COUNT(*) FROM ingested_files") == [(0,)]


# --- 2. times in range --------------------------------------------------------------------------------


def test_far_dated_times_are_rejected_with_the_right_reason_and_never_wrap(workspace):
    text = ("Date,PA,PB\n15/06/2610 10:00,5.0,41.0\n01/01/3000 00:00,5.0,41.0\n01/01/1677 00:00,5.0,41.0\n"
            "20/11/2026 10:00,5.0,41.0\n")  # fmt: skip
    deliver(workspace, "wide_far.csv", text)
    (summary,) = ingest(workspace, now=NOW, progress=False).files
    assert summary.accepted == 2  # PA and PB of the last row
    assert query(workspace, "SELECT DISTINCT time_utc FROM readings") == [("2026-11-20T10:00:00Z",)]
    reasons = dict(query(workspace, "SELECT line, reason FROM rejected_rows WHERE instrument_id = 'PA'"))
    assert reasons[2].startswith("time is in the future") and reasons[3].startswith("time is in the future")
    assert reasons[4] == "time is before oldest_reading 2020-01-01T00:00:00Z"


# --- 4. files in flight ----------------------------------------------------------------------------


def test_a_file_is_taken_after_two_looks_min_file_age_seconds_apart(workspace):
    path = workspace.incoming / "long_new.csv"
    path.write_text(HEADER + row(0))
    first = ingest(workspace, now=NOW, progress=False)
    assert first.files == [] and first.waiting == ["long_new.csv (unchanged for 0 s of the 60 s of "
                                                   "min_file_age_seconds)"]  # fmt: skip
    with path.open("a") as handle:  # the logger writes on: the look starts again
        handle.write(row(15))
    later = ingest(workspace, now=NOW + timedelta(seconds=59), progress=False)
    assert later.files == [] and "unchanged for 0 s" in later.waiting[0]
    assert ingest(workspace, now=NOW + timedelta(seconds=100), progress=False).files == []
    (summary,) = ingest(workspace, now=NOW + timedelta(seconds=119), progress=False).files
    assert summary.accepted == 2
    assert (workspace.root / SIGHTINGS_FILE).read_text() == "{}"


def test_a_half_written_last_line_waits_and_is_never_a_rejected_row(workspace):
    path = deliver(workspace, "long_growing.csv", HEADER + row(0) + "2026-11-20T00:15:00Z;PA;6")
    report = ingest(workspace, now=NOW, progress=False)
    assert report.files == [] and "its last line has no line end yet" in report.waiting[0]
    assert query(workspace, "SELECT COUNT(*) FROM rejected_rows") == [(0,)]
    with path.open("a") as handle:
        handle.write(",2\n")
    record_first_look(workspace, path.name, NOW)
    (summary,) = ingest(workspace, now=NOW + timedelta(minutes=1), progress=False).files
    assert (summary.accepted, summary.rejected) == (2, 0)
    assert query(workspace, "SELECT raw_value FROM readings ORDER BY time_utc") == [(5.9,), (6.2,)]


def test_a_done_marker_makes_a_file_ready_at_once_with_its_last_line(workspace):
    (workspace.incoming / "long_marked.csv").write_text(HEADER + row(0) + row(15).rstrip("\n"))
    (workspace.incoming / "long_marked.csv.done").write_text("")
    (summary,) = ingest(workspace, now=NOW, progress=False).files
    assert (summary.accepted, summary.rejected) == (2, 0)
    assert left_in_incoming(workspace) == []
    assert (workspace.processed / "long_marked.csv.done").exists()


# --- 5. only regular files -------------------------------------------------------------------------


def test_links_folders_and_pipes_in_incoming_are_refused_and_never_followed(workspace, tmp_path):
    outside = tmp_path / "long_secret.csv"
    outside.write_text(HEADER + row(0))
    (workspace.incoming / "long_link.csv").symlink_to(outside)
    (workspace.incoming / "long_folder.csv").mkdir()
    os.mkfifo(workspace.incoming / "long_pipe.csv")
    report = ingest(workspace, now=NOW, progress=False)
    lines = sorted(f.line() for f in report.files)
    assert lines == [
        "long_folder.csv: REFUSED: a folder, not a regular file: feeds are read only from regular files "
        "delivered into incoming/; moved to rejected/long_folder.csv",
        "long_link.csv: REFUSED: a symbolic link, not a regular file: feeds are read only from regular files "
        "delivered into incoming/; moved to rejected/long_link.csv",
        "long_pipe.csv: REFUSED: a named pipe, not a regular file: feeds are read only from regular files "
        "delivered into incoming/; moved to rejected/long_pipe.csv",
    ]
    assert left_in_incoming(workspace) == []
    assert (workspace.rejected / "long_link.csv").is_symlink() and outside.read_text() == HEADER + row(0)
    assert query(workspace, "SELECT COUNT(*) FROM readings") == [(0,)]
    assert query(workspace, "SELECT COUNT(*) FROM rejected_rows") == [(0,)]


def test_a_named_link_in_incoming_is_refused(workspace, tmp_path):
    outside = tmp_path / "long_secret.csv"
    outside.write_text(HEADER + row(0))
    link = workspace.incoming / "long_link.csv"
    link.symlink_to(outside)
    with pytest.raises(UserError, match="long_link.csv is a symbolic link, not a regular file"):
        ingest(workspace, [link], now=NOW, progress=False)


def test_serve_sends_only_regular_files_inside_the_board_folder(tmp_path):
    board = tmp_path / "board"
    board.mkdir()
    (board / "index.html").write_text("<p>board</p>")
    (board / ".hidden.html").write_text("hidden")
    (tmp_path / "secret.txt").write_text("secret")
    (board / "out.txt").symlink_to(tmp_path / "secret.txt")
    (board / "inside.html").symlink_to(board / "index.html")
    server = serve_board(board, "127.0.0.1", 0)
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    try:
        base = f"http://127.0.0.1:{server.server_address[1]}"
        for page in ("/", "/index.html", "/inside.html"):
            with urllib.request.urlopen(base + page) as response:
                assert response.read() == b"<p>board</p>"
        for page in ("/out.txt", "/.hidden.html", "/../secret.txt", "/%2e%2e/secret.txt"):
            with pytest.raises(urllib.error.HTTPError, match="404"):
                urllib.request.urlopen(base + page)
    finally:
        server.shutdown()
        server.server_close()


# --- 6. bounded resources and encodings ----------------------------------------------------------------


def test_a_row_over_the_limit_is_rejected_and_its_stored_text_is_cut(workspace, monkeypatch):
    # Blocks of 1 kB: the long row spans many blocks and is never held whole.
    monkeypatch.setattr(watch.ingest, "FeedReader", functools.partial(watch.feeds.FeedReader, block_bytes=1024))
    long_row = "2026-11-20T00:15:00Z;PA;" + "9" * (MAX_ROW_BYTES + 10) + "\n"
    deliver(workspace, "long_huge.csv", HEADER + row(0) + long_row + row(30))
    (summary,) = ingest(workspace, now=NOW, progress=False).files
    assert (summary.accepted, summary.rejected) == (2, 1)
    ((line, reason, text),) = query(workspace, "SELECT line, reason, raw_text FROM rejected_rows")
    assert line == 3 and reason == f"row is {len(long_row) - 1} bytes long, over the limit of {MAX_ROW_BYTES} bytes"
    assert text.startswith("2026-11-20T00:15:00Z;PA;999") and len(text) < RAW_TEXT_CHARS + 50
    assert text.endswith(f"[cut: {MAX_ROW_BYTES} characters in all]")


def test_a_single_line_file_larger_than_a_block_is_one_rejected_row(workspace):
    path = workspace.incoming / "long_blob.csv"
    path.write_bytes(HEADER.encode() + b"x" * (watch.feeds.BLOCK_BYTES + 5))
    (workspace.incoming / "long_blob.csv.done").write_text("")
    (summary,) = ingest(workspace, now=NOW, progress=False).files
    assert (summary.status, summary.rejected) == ("rejected", 1)
    ((reason, text),) = query(workspace, "SELECT reason, raw_text FROM rejected_rows")
    assert reason == f"row is {watch.feeds.BLOCK_BYTES + 5} bytes long, over the limit of {MAX_ROW_BYTES} bytes"
    assert len(text) < RAW_TEXT_CHARS + 50


@pytest.mark.parametrize("encoding, name", [("utf-16", "UTF-16 (little-endian)"), ("utf-16-be", None),
                                            ("utf-32", "UTF-32 (little-endian)")])  # fmt: skip
def test_utf16_and_utf32_files_are_refused_with_the_encoding_named(workspace, encoding, name):
    data = (HEADER + row(0)).encode(encoding)
    if name is None:  # big-endian with its mark
        data, name = codecs.BOM_UTF16_BE + data, "UTF-16 (big-endian)"
    deliver(workspace, "long_wide_chars.csv", data)
    (summary,) = ingest(workspace, now=NOW, progress=False).files
    assert summary.status == "rejected"
    assert summary.reason.startswith(f"long_wide_chars.csv: the file is encoded as {name} (byte-order mark")
    assert "save it as UTF-8" in summary.reason


def test_carriage_return_line_ends_are_read(workspace):
    deliver(workspace, "long_mac.csv", (HEADER + row(0) + row(15) + row(30, value="bad")).replace("\n", "\r"))
    (summary,) = ingest(workspace, now=NOW, progress=False).files
    assert (summary.accepted, summary.rejected) == (2, 1)
    assert query(workspace, "SELECT line, raw_text FROM rejected_rows") == [(4, "2026-11-20T00:30:00Z;PA;bad")]


@pytest.mark.parametrize("encoding", ["utf-16", "utf-32-le", "cp500"])
def test_an_encoding_that_is_not_ascii_compatible_is_a_configuration_error(workspace, encoding):
    workspace.site_file.write_text(SITE.replace('delimiter = ";"', f'delimiter = ";"\nencoding = "{encoding}"'))
    with pytest.raises(ConfigError, match=f"encoding.*'{encoding}' does not write line ends, delimiters"):
        workspace.config()


def test_an_unknown_encoding_is_a_configuration_error(workspace):
    workspace.site_file.write_text(SITE.replace('delimiter = ";"', 'delimiter = ";"\nencoding = "utf-9"'))
    with pytest.raises(ConfigError, match="unknown encoding 'utf-9'"):
        workspace.config()


# --- 11. control characters ------------------------------------------------------------------------


def test_control_characters_in_names_are_escaped_in_summary_lines(workspace):
    deliver(workspace, "long_a\nb\x1b.csv", HEADER + row(0, channel="P\x07"))
    report = ingest(workspace, now=NOW, progress=False)
    (summary,) = report.files
    line = summary.line()
    assert "\n" not in line and "\x1b" not in line
    assert line.startswith("long_a\\nb\\x1b.csv: REJECTED: no reading could be read (1 rows rejected)")
    reason_file = next(workspace.rejected.glob("*.reason.txt")).read_text()
    assert reason_file.count("\n") == 2 and "long_a\\nb\\x1b.csv" in reason_file
    assert "instrument 'P\\x07' is not in site.toml" in reason_file


# --- the hostile-feed suite -------------------------------------------------------------------------------


def _base_rows(draw) -> list[str]:
    n = draw(st.integers(min_value=1, max_value=30))
    values = st.one_of(st.integers(-50, 500).map(str), st.just("-9999"), st.just(""),
                       st.floats(-50, 500, allow_nan=False).map(lambda v: f"{v:.2f}".replace(".", ",")))  # fmt: skip
    return [f"2026-11-{1 + i // 96:02d}T{(i % 96) // 4:02d}:{15 * (i % 4):02d}:00Z;"
            f"{draw(st.sampled_from(['PA', 'PB']))};{draw(values)}" for i in range(n)]


MUTATIONS = ("duplicate", "conflict", "shuffle", "truncate", "binary", "huge", "far_dated", "latin1",
             "utf16", "cr_only", "unknown_instrument", "blank")  # fmt: skip


@st.composite
def hostile_file(draw):
    """(bytes of a long-layout feed file, whether it ends with its done-marker)."""
    rows = _base_rows(draw)
    encode_as = "utf-8"
    line_end = "\n"
    truncate_at = None
    for mutation in draw(st.lists(st.sampled_from(MUTATIONS), min_size=1, max_size=4)):
        if mutation == "duplicate":
            rows.insert(draw(st.integers(0, len(rows))), draw(st.sampled_from(rows)))
        elif mutation == "conflict":
            victim = draw(st.sampled_from(rows))
            rows.append(victim.rsplit(";", 1)[0] + ";123,4")
        elif mutation == "shuffle":
            rows = draw(st.permutations(rows))
        elif mutation == "truncate":
            truncate_at = draw(st.floats(0.0, 1.0))
        elif mutation == "binary":
            rows.insert(draw(st.integers(0, len(rows))), draw(st.binary(max_size=40)).decode("latin-1"))
        elif mutation == "huge":
            rows.insert(draw(st.integers(0, len(rows))), "2026-11-01T00:00:00Z;PA;" + "7" * (MAX_ROW_BYTES + 1))
        elif mutation == "far_dated":
            year = draw(st.sampled_from(["1677", "1900", "2262", "2610", "3000", "9999"]))
            rows.append(f"{year}-06-15T10:00:00Z;PA;5,0")
        elif mutation == "latin1":
            rows.append("2026-11-01T03:00:00Z;PA;5\xb0")
            encode_as = "latin-1"
        elif mutation == "utf16":
            encode_as = "utf-16"
        elif mutation == "cr_only":
            line_end = "\r"
        elif mutation == "unknown_instrument":
            rows.append("2026-11-01T04:00:00Z;PZ-99;5,0")
        elif mutation == "blank":
            rows.insert(draw(st.integers(0, len(rows))), "")
    text = line_end.join([HEADER.rstrip("\n"), *rows]) + line_end
    data = text.encode(encode_as, errors="replace")
    if truncate_at is not None:
        data = data[: int(len(data) * truncate_at)]
    return data, draw(st.booleans())


def _data_rows(data: bytes) -> int:
    """Non-blank lines after the header, as the reader cuts them (CR-only files by CR)."""
    if b"\r" in data[: watch.feeds.BLOCK_BYTES] and b"\n" not in data[: watch.feeds.BLOCK_BYTES]:
        data = data.replace(b"\r", b"\n")
    lines = data.split(b"\n")
    if data.endswith(b"\n"):
        lines = lines[:-1]
    return sum(1 for line in lines[1:] if line.strip(b"\r"))


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture,
                                                                 HealthCheck.too_slow])  # fmt: skip
@given(case=hostile_file())
def test_hostile_feed_files_never_stop_the_watch(tmp_path_factory, case):
    data, marked = case
    root = tmp_path_factory.mktemp("hostile")
    (root / "site.toml").write_text(SITE)
    workspace = init_workspace(root / "ws", root / "site.toml")
    (workspace.incoming / "long_1.csv").write_bytes(data)
    ends_with_line_end = data.endswith((b"\n", b"\r"))
    if marked or not ends_with_line_end:  # a finished file without a line end needs its marker
        (workspace.incoming / "long_1.csv.done").write_text("")
    else:
        record_first_look(workspace, "long_1.csv", NOW - timedelta(hours=1))
    report = ingest(open_workspace(workspace.root), now=NOW, progress=False)
    assert left_in_incoming(workspace) == []
    (summary,) = report.files
    assert not summary.failed, summary.line()
    assert "\n" not in summary.line()
    stored = query(workspace, "SELECT COUNT(*) FROM readings")[0][0]
    rejected = query(workspace, "SELECT COUNT(*) FROM rejected_rows")[0][0]
    assert (stored, rejected) == (summary.accepted, summary.rejected)
    if summary.status == "rejected" and summary.accepted + summary.rejected + summary.missing == 0:
        assert summary.reason  # refused whole (no header, UTF-16, ...): said why
    else:
        assert _data_rows(data) == summary.accepted + summary.duplicates + summary.rejected + summary.missing
    assert all(len(text) < RAW_TEXT_CHARS + 50 for (text,) in query(
        workspace, "SELECT raw_text FROM rejected_rows WHERE raw_text IS NOT NULL"))  # fmt: skip
