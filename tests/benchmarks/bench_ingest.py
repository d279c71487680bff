"""Benchmark: ingest of one million readings (wide CSV, 20 piezometers) into a fresh store.

Prints readings per second of `watch.ingest.ingest` and the ratio of its time to a baseline run
in the same process on the same file: pandas reads it, the same rows are computed column-wise
and inserted with a bare sqlite3 ``executemany`` into the same schema (a fresh store). Targets
(issue 4): >= 200,000 readings/s and ratio <= 1.5.

Peak memory (resident set of a child process running the ingest) is printed for the 1-million
file and for a file five times larger: a streaming ingest keeps the two close. Set
SLIPWATCH_BENCH_GB=1 to also ingest a ~1 GB file and print its peak memory (target < 500 MB;
takes several minutes).

The data are invented (smooth heads with noise), for timing only.
"""

from __future__ import annotations

import os
import sqlite3
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from solver.constants import GAMMA_W  # noqa: E402
from watch.ingest import ingest  # noqa: E402
from watch.store import Store  # noqa: E402
from watch.workspace import init_workspace  # noqa: E402

N_INSTRUMENTS = 20
TIP = 40.0


def site_toml(n: int) -> str:
    parts = [
        '[site]\nid = "bench"\n\n[[section]]\nid = "S1"\nfile = "sections/s1.toml"\n',
    ]
    for i in range(n):
        parts.append(
            f'[[piezometer]]\nid = "P{i:02d}"\nsection = "S1"\noffset = {i}.0\ntip_elevation = {TIP}\n'
            f'collar_elevation = 60.0\nwater_line = "main"\nreading = "pore_pressure_kpa"\n'
            f"valid_range = [-20.0, 400.0]\nmax_rise_rate = 2.0\n"
        )
    columns = "\n".join(f'"P{i:02d} kPa" = "P{i:02d}"' for i in range(n))
    parts.append(
        '[[feed]]\nname = "bench"\npattern = "bench_*.csv"\nlayout = "wide"\ntime_column = "Time"\n'
        'time_format = "%Y-%m-%d %H:%M:%S"\ntime_zone = "UTC"\nmissing = ["", "-9999"]\n'
        f"[feed.columns]\n{columns}\n\n"
        '[ingest]\noldest_reading = "2000-01-01"\nflat_line_hours = 24\n'
    )
    return "\n".join(parts)


def write_feed(path: Path, n_rows: int, start: str = "2020-01-01") -> None:
    """A wide CSV: one row per minute, N_INSTRUMENTS columns of pore pressure [kPa]."""
    rng = np.random.default_rng(7)
    with path.open("w") as handle:
        handle.write("Time," + ",".join(f"P{i:02d} kPa" for i in range(N_INSTRUMENTS)) + "\n")
        block = 200_000
        t0 = np.datetime64(start, "s")
        for first in range(0, n_rows, block):
            n = min(block, n_rows - first)
            times = t0 + (np.arange(first, first + n) * 60).astype("timedelta64[s]")
            base = 80 + 10 * np.sin(np.arange(first, first + n)[:, None] / 5000.0 + np.arange(N_INSTRUMENTS))
            values = base + rng.normal(0, 0.05, (n, N_INSTRUMENTS))
            frame = pd.DataFrame(values.round(3), columns=range(N_INSTRUMENTS))
            frame.insert(0, "t", pd.Series(times).dt.strftime("%Y-%m-%d %H:%M:%S"))
            frame.to_csv(handle, header=False, index=False)


def baseline(csv_path: Path, db_path: Path) -> float:
    """pandas read + the same rows + bare executemany into the same schema; seconds."""
    Store(db_path).close()  # the same schema, fresh
    start = time.perf_counter()
    frame = pd.read_csv(csv_path)
    times = np.datetime_as_string(
        pd.to_datetime(frame["Time"], format="%Y-%m-%d %H:%M:%S").to_numpy().astype("datetime64[s]"),
        unit="s", timezone="UTC",
    )  # fmt: skip
    values = frame.iloc[:, 1:].to_numpy(dtype=float)
    n_rows, n_cols = values.shape
    ids = np.tile([f"P{i:02d}" for i in range(n_cols)], n_rows)
    raw = values.ravel()
    head = TIP + raw / GAMMA_W
    lines = np.repeat(np.arange(2, n_rows + 2), n_cols)
    conn = sqlite3.connect(db_path, isolation_level=None)
    conn.execute("PRAGMA synchronous = FULL")
    conn.execute("BEGIN IMMEDIATE")
    cursor = conn.execute(
        "INSERT INTO ingested_files (name, sha256, size_bytes, status, archived_as, ingested_utc) "
        "VALUES ('b', 'x', 0, 'ingested', '', '')"
    )
    file_id = cursor.lastrowid
    conn.executemany(
        "INSERT INTO readings (instrument_id, time_utc, raw_value, temperature_c, barometric_kpa, "
        "pore_pressure_kpa, head_m, quality, source_file_id, source_line) VALUES (?,?,?,?,?,?,?,?,?,?)",
        zip(ids.tolist(), np.repeat(times, n_cols).tolist(), raw.tolist(), [None] * len(raw), [None] * len(raw),
            raw.tolist(), head.tolist(), ["ok"] * len(raw), [file_id] * len(raw), lines.tolist()),
    )  # fmt: skip
    conn.execute("COMMIT")
    conn.close()
    return time.perf_counter() - start


def timed_ingest(csv_path: Path, root: Path) -> tuple[float, int]:
    workspace = init_workspace(root, site_template=_template(root.parent))
    start = time.perf_counter()
    report = ingest(workspace, [csv_path], progress=False)
    elapsed = time.perf_counter() - start
    return elapsed, report.files[0].accepted


def _template(folder: Path) -> Path:
    path = folder / "bench_site.toml"
    if not path.exists():
        path.write_text(site_toml(N_INSTRUMENTS))
    return path


def peak_memory_mb(csv_path: Path, root: Path) -> float:
    """Peak resident memory [MB] of a child process that ingests the file (VmHWM: unlike
    ru_maxrss it does not inherit the parent's peak across exec)."""
    code = (
        "import sys; sys.path.insert(0, sys.argv[1]);"
        "from pathlib import Path; from watch.ingest import ingest; from watch.workspace import init_workspace;"
        "ws = init_workspace(Path(sys.argv[2]), Path(sys.argv[3]));"
        "r = ingest(ws, [Path(sys.argv[4])], progress=False);"
        "hwm = [l for l in open('/proc/self/status') if l.startswith('VmHWM')][0].split()[1];"
        "print(r.files[0].accepted, hwm)"
    )
    out = subprocess.run(
        [sys.executable, "-c", code, str(ROOT), str(root), str(_template(root.parent)), str(csv_path)],
        check=True, capture_output=True, text=True,
    ).stdout.split()  # fmt: skip
    accepted, hwm_kb = int(out[0]), int(out[1])
    expected = _readings_in(csv_path)
    if accepted != expected:
        print(f"  warning: the child accepted {accepted} of {expected} readings", flush=True)
    return hwm_kb / 1024.0  # VmHWM is in kB


def _readings_in(csv_path: Path) -> int:
    """Readings in a generated feed: data lines x instruments (one streaming pass)."""
    with csv_path.open("rb") as handle:
        lines = sum(1 for _ in handle) - 1
    return lines * N_INSTRUMENTS


def main() -> None:
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        n_rows = 1_000_000 // N_INSTRUMENTS
        feed = tmp / "bench_1m.csv"
        write_feed(feed, n_rows)
        size_mb = feed.stat().st_size / 1e6
        readings = n_rows * N_INSTRUMENTS
        print(f"file: {readings:,} readings ({n_rows:,} rows x {N_INSTRUMENTS} instruments), {size_mb:.1f} MB")

        base = baseline(feed, tmp / "baseline.db")
        elapsed, accepted = timed_ingest(feed, tmp / "ws")
        if accepted != readings:
            raise SystemExit(f"ingest stored {accepted} readings, expected {readings}")
        rate = readings / elapsed
        print(f"baseline (pandas + executemany): {base:.2f} s, {readings / base:,.0f} readings/s")
        print(f"slipwatch ingest:                {elapsed:.2f} s, {rate:,.0f} readings/s")
        print(f"ratio ingest / baseline: {elapsed / base:.2f}  (target <= 1.5)")
        print(f"readings per second: {rate:,.0f}  (target >= 200,000)")

        print(f"peak memory, 1 M readings: {peak_memory_mb(feed, tmp / 'ws_m1'):.0f} MB")
        big = tmp / "bench_5m.csv"
        write_feed(big, 5 * n_rows)
        print(f"peak memory, 5 M readings ({big.stat().st_size / 1e6:.0f} MB file): "
              f"{peak_memory_mb(big, tmp / 'ws_m5'):.0f} MB  (streaming: close to the line above)")  # fmt: skip
        big.unlink()
        if os.environ.get("SLIPWATCH_BENCH_GB"):
            huge = tmp / "bench_1gb.csv"
            # One row a minute for ~12 years: start early enough that no reading lies in the
            # future (future readings would be rejected, and this is a test of accepted ones).
            write_feed(huge, int(1e9 / (size_mb * 1e6 / n_rows)), start="2005-01-01")
            print(f"peak memory, {huge.stat().st_size / 1e9:.2f} GB file: "
                  f"{peak_memory_mb(huge, tmp / 'ws_gb'):.0f} MB  (target < 500 MB)")  # fmt: skip


if __name__ == "__main__":
    main()
