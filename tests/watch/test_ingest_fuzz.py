"""Property-based fuzzing of feed files: whatever the rows look like, ingest does not crash,
stores every good reading and reports every bad one with its file and line."""

import sqlite3
from datetime import datetime, timedelta, timezone

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from watch.ingest import ingest
from watch.workspace import init_workspace

SITE = """
[site]
id = "fuzz"
[[section]]
id = "S"
file = "sections/s.toml"
[[piezometer]]
id = "A"
section = "S"
offset = 0.0
tip_elevation = 10.0
collar_elevation = 20.0
water_line = "main"
reading = "pore_pressure_kpa"
[[piezometer]]
id = "B"
section = "S"
offset = 1.0
tip_elevation = 10.0
collar_elevation = 20.0
water_line = "main"
reading = "head_m"
[[feed]]
name = "fuzz"
pattern = "f_*.csv"
layout = "wide"
time_column = "T"
time_format = "%Y-%m-%d %H:%M"
time_zone = "UTC"
missing = ["", "NA"]
[feed.columns]
A = "A"
B = "B"
[ingest]
min_file_age_seconds = 0
"""

START = datetime(2025, 1, 1, tzinfo=timezone.utc)
NOW = datetime(2026, 1, 1, tzinfo=timezone.utc)

good_number = st.one_of(
    st.floats(min_value=-1e300, max_value=1e300, allow_nan=False, allow_infinity=False).map(repr),
    st.integers(min_value=-10**6, max_value=10**6).map(str),
)
garbage = st.sampled_from(["abc", "1.2.3", "--5", "1e999", "nan", "inf", "12;5", "0x1F", "5 5", "é", "\ufffd"])

# Each row kind: (bytes of the line, readings expected from it, whether a problem is expected).
row_kind = st.sampled_from(["good", "one_missing", "garbage_a", "garbage_both", "short", "long", "bad_time",
                            "blank", "latin1", "quoted", "nul"])  # fmt: skip


@st.composite
def feed_rows(draw):
    kinds = draw(st.lists(row_kind, max_size=25))
    truncated = draw(st.booleans())
    lines, expected = [], []  # expected: (line number, set of stored instruments, has problem)
    for i, kind in enumerate(kinds):
        number = i + 2  # after the header line
        t = (START + timedelta(minutes=i)).strftime("%Y-%m-%d %H:%M")
        a, b = draw(good_number), draw(good_number)
        if kind == "good":
            lines.append(f"{t},{a},{b}".encode()), expected.append((number, {"A", "B"}, False))
        elif kind == "one_missing":
            lines.append(f"{t},NA,{b}".encode()), expected.append((number, {"B"}, False))
        elif kind == "garbage_a":
            lines.append(f"{t},{draw(garbage)},{b}".encode()), expected.append((number, {"B"}, True))
        elif kind == "garbage_both":
            lines.append(f"{t},{draw(garbage)},{draw(garbage)}".encode()), expected.append((number, set(), True))
        elif kind == "short":
            lines.append(f"{t},{a}".encode()), expected.append((number, set(), True))
        elif kind == "long":
            lines.append(f"{t},{a},{b},{a}".encode()), expected.append((number, set(), True))
        elif kind == "bad_time":
            lines.append(f"{t[:10]}X,{a},{b}".encode()), expected.append((number, set(), True))
        elif kind == "blank":
            lines.append(b""), expected.append((number, set(), False))
        elif kind == "latin1":
            lines.append(f"{t},{a}\xb0,{b}".encode("latin-1")), expected.append((number, {"B"}, True))
        elif kind == "quoted":
            lines.append(f'"{t}","{a}",{b}'.encode()), expected.append((number, {"A", "B"}, False))
        elif kind == "nul":
            lines.append(f"{t},{a}\x00,{b}".encode()), expected.append((number, set(), True))
    data = b"T,A,B\n" + b"".join(line + b"\n" for line in lines)
    if truncated and lines and lines[-1]:
        data = data[:-1]  # the last line loses its line end: never trusted
        number, _, _ = expected[-1]
        expected[-1] = (number, set(), True)
    return data, expected


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(case=feed_rows())
def test_fuzzed_feed_files(tmp_path_factory, case):
    data, expected = case
    root = tmp_path_factory.mktemp("fuzz")
    (root / "site.toml").write_text(SITE)
    workspace = init_workspace(root / "ws", root / "site.toml")
    path = workspace.incoming / "f_1.csv"
    path.write_bytes(data)
    # Named, so a file whose last line lacks its line end is read at once (from the drop
    # folder alone it would wait for the rest of its last line).
    report = ingest(workspace, [path], now=NOW, progress=False)
    (summary,) = report.files
    with sqlite3.connect(workspace.database) as conn:
        stored = conn.execute("SELECT source_line, instrument_id FROM readings").fetchall()
        problems = conn.execute("SELECT line, reason FROM rejected_rows").fetchall()
        files = conn.execute("SELECT name, status FROM ingested_files").fetchall()
    want_stored = sorted((line, iid) for line, ids, _ in expected for iid in ids)
    assert sorted(stored) == want_stored
    want_problem_lines = sorted(line for line, _, bad in expected if bad)
    assert sorted({line for line, _ in problems}) == want_problem_lines
    assert all(reason for _, reason in problems)
    # The file is archived either way, and its record says where.
    assert files == [("f_1.csv", summary.status)]
    folder = workspace.processed if want_stored else workspace.rejected
    assert (folder / "f_1.csv").read_bytes() == data
