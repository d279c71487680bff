"""Crash safety: an ingest killed (SIGKILL) half-way through a large file loses nothing and,
run again, stores every reading exactly once."""

import os
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

from watch.ingest import ingest
from watch.workspace import init_workspace

SITE = """
[site]
id = "crash"
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
reading = "pore_pressure_kpa"
[[feed]]
name = "big"
pattern = "big_*.csv"
layout = "wide"
time_column = "T"
time_format = "%Y-%m-%d %H:%M:%S"
time_zone = "UTC"
[feed.columns]
A = "A"
B = "B"
[ingest]
min_file_age_seconds = 0
"""

ROWS = 300_000
ROOT = Path(__file__).resolve().parents[2]


def _big_feed(path: Path) -> None:
    import numpy as np
    import pandas as pd

    times = pd.Series(np.datetime64("2024-01-01T00:00:00") + np.arange(ROWS).astype("timedelta64[m]"))
    frame = pd.DataFrame({"T": times.dt.strftime("%Y-%m-%d %H:%M:%S"), "A": np.arange(ROWS) % 97 / 10.0,
                          "B": np.arange(ROWS) % 89 / 10.0})  # fmt: skip
    frame.to_csv(path, index=False)


def test_killed_ingest_then_ingest_again_stores_everything_once(tmp_path):
    (tmp_path / "site.toml").write_text(SITE)
    workspace = init_workspace(tmp_path / "ws", tmp_path / "site.toml")
    feed = workspace.incoming / "big_1.csv"
    _big_feed(feed)
    original = feed.read_bytes()

    child = subprocess.Popen(
        [sys.executable, "-c",
         "import sys; sys.path.insert(0, sys.argv[1]); from watch.ingest import ingest; "
         "from watch.workspace import open_workspace; ingest(open_workspace(sys.argv[2]), progress=False)",
         str(ROOT), str(workspace.root)],
    )  # fmt: skip
    wal = Path(str(workspace.database) + "-wal")
    deadline = time.monotonic() + 120
    # Kill once the child is writing readings: its file is claimed and the WAL is growing.
    while time.monotonic() < deadline:
        if child.poll() is not None:
            break
        if (workspace.claimed / "big_1.csv").exists() and wal.exists() and wal.stat().st_size > 4 << 20:
            break
        time.sleep(0.005)
    assert child.poll() is None, "the ingest finished before it could be killed; make the file larger"
    os.kill(child.pid, signal.SIGKILL)
    child.wait()
    assert child.returncode == -signal.SIGKILL

    # Half-way: the file is still claimed, and nothing of it is committed.
    assert (workspace.claimed / "big_1.csv").read_bytes() == original
    with sqlite3.connect(workspace.database) as conn:
        assert conn.execute("SELECT COUNT(*) FROM readings").fetchone() == (0,)

    report = ingest(workspace, progress=False)
    assert report.reconciled == ["big_1.csv: not committed before the stop; put back as incoming/big_1.csv"]
    (summary,) = report.files
    assert (summary.accepted, summary.duplicates, summary.rejected) == (2 * ROWS, 0, 0)

    with sqlite3.connect(workspace.database) as conn:
        assert conn.execute("PRAGMA integrity_check").fetchone() == ("ok",)
        assert conn.execute("SELECT COUNT(*) FROM readings").fetchone() == (2 * ROWS,)
        assert conn.execute("SELECT COUNT(DISTINCT source_line) FROM readings").fetchone() == (ROWS,)
        assert conn.execute("SELECT COUNT(*) FROM ingested_files").fetchone() == (1,)
    assert (workspace.processed / "big_1.csv").read_bytes() == original
    assert list(workspace.claimed.iterdir()) == [] and list(workspace.incoming.glob("*.csv")) == []

    # Delivered once more: recognised by its checksum, nothing changes.
    (workspace.incoming / "big_again.csv").write_bytes(original)
    assert [f.status for f in ingest(workspace, progress=False).files] == ["already ingested"]
    with sqlite3.connect(workspace.database) as conn:
        assert conn.execute("SELECT COUNT(*) FROM readings").fetchone() == (2 * ROWS,)
