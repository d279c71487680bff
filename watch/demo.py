"""The bundled demo: the invented Quillmarsh Valley Line watched through an invented wet season.

``run_demo`` builds a fresh workspace from ``config/`` and ``demo_feeds/`` and runs every stage
of the job that exists: ingest of the logger files, water lines rebuilt from the readings, and
the factor of safety of every section through the season (a full critical-surface search at
the start, warm re-evaluation after, full searches when the warm result advises one).
"""

from __future__ import annotations

import shutil
from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path
from typing import Callable

import pandas as pd

from watch.analysis import surface_of
from watch.assessment import assess_through_time, readings_frame
from watch.caution import CAUTION
from watch.errors import WorkspaceError
from watch.ingest import ingest
from watch.plots import plot_fos_history, plot_section
from watch.sections import load_section
from watch.workspace import init_workspace

__all__ = ["run_demo", "DEMO_ROOT", "DemoSettings"]

#: The repository folder that holds config/ and demo_feeds/.
DEMO_ROOT = Path(__file__).resolve().parents[1]

#: Marker file of a demo workspace: only a folder holding it is ever deleted by the demo.
_MARKER = ".slipwatch-demo"


@dataclass(frozen=True)
class DemoSettings:
    """What the demo replays: the season, and how often it assesses every section."""

    start: str = "2025-10-01T06:00Z"
    end: str = "2026-03-31T06:00Z"
    step: str = "1D"
    #: The time the demo pretends it is when it ingests (just after the season).
    now: datetime = datetime(2026, 4, 1, 6, 0, tzinfo=timezone.utc)


def run_demo(
    workspace: Path,
    echo: Callable[[str], None] = print,
    settings: DemoSettings = DemoSettings(),
    root: Path = DEMO_ROOT,
) -> dict:
    """Build ``workspace`` from the bundled demo and run every stage that exists so far.

    Returns a summary dict (also printed through ``echo``).
    """
    config_dir, feeds_dir = root / "config", root / "demo_feeds"
    if not (config_dir / "site.toml").is_file() or not feeds_dir.is_dir():
        raise WorkspaceError(
            f"the demo data is not beside the program ({config_dir}, {feeds_dir}); run the "
            "demo from a clone of the slipwatch repository (`make demo`)"
        )
    workspace = Path(workspace)
    _clear_previous_demo(workspace)
    ws = init_workspace(workspace, config_dir / "site.toml")
    (ws.root / _MARKER).write_text("made by `slipwatch demo`; safe to delete\n", encoding="utf-8")
    for section_file in sorted((config_dir / "sections").glob("*.toml")):
        shutil.copy2(section_file, ws.sections / section_file.name)
    if (config_dir / "slips").is_dir():
        shutil.copytree(config_dir / "slips", ws.root / "slips")
    config = ws.config()
    echo(f"Demo site: {config.name} ({config.owner}), invented for the demo")
    echo(f"Workspace: {ws.root}")

    # 1. Ingest the season's logger files.
    feeds = sorted(feeds_dir.glob("*.csv"))
    report = ingest(ws, feeds, now=settings.now, progress=False)
    totals = {k: sum(getattr(f, k) for f in report.files)
              for k in ("accepted", "duplicates", "rejected", "flagged")}
    skipped = [f for f in report.files if f.status != "ingested"]
    echo("")
    echo(f"1. Ingest: {len(feeds)} feed files, {totals['accepted']} readings stored, "
         f"{totals['rejected']} bad rows rejected with reasons, {totals['flagged']} readings "
         f"flagged, {len(skipped)} file(s) not ingested again")
    for summary in report.files:
        if summary.rejected or summary.status != "ingested":
            echo(f"   {summary.line()}")
    with ws.open_store(read_only=True) as store:
        problems = list(store.db.query(
            "SELECT f.name AS file, r.line, r.reason FROM rejected_rows r "
            "JOIN ingested_files f ON f.id = r.file_id ORDER BY f.name, r.line LIMIT 6"
        ))
        readings = readings_frame(store.db.query(
            "SELECT instrument_id, time_utc, head_m, quality FROM readings"
        ))
        rain = pd.DataFrame(list(store.db.query(
            "SELECT gauge_id, time_utc, rain_mm FROM rainfall WHERE quality = 'ok'"
        )))
    for problem in problems:
        echo(f"   rejected: {problem['file']} line {problem['line']}: {problem['reason']}")
    echo(f"   (first {len(problems)} shown; every rejected row is kept with its file, line, raw "
         "text and reason in the store's rejected_rows table)")

    # 2-3. Water lines from the readings and the factor of safety through the season.
    times = pd.date_range(settings.start, settings.end, freq=settings.step)
    rain["time_utc"] = pd.to_datetime(rain["time_utc"], utc=True)
    echo("")
    echo(f"2. Water lines rebuilt from the piezometers and factors of safety at {len(times)} "
         f"times from {times[0]:%Y-%m-%d} to {times[-1]:%Y-%m-%d}:")
    summary = {"workspace": str(ws.root), "ingest": totals, "sections": {}}
    for ref in config.sections:
        section = load_section(ws.root / ref.file)
        history = assess_through_time(section, config, readings, times)
        fos = pd.Series([a.fos for a in history], index=times)
        worst = history[int(fos.values.argmin())]
        full = sum(a.evaluation == "full search" for a in history)
        csv_path = ws.reports / f"fos_{section.id}.csv"
        pd.DataFrame({
            "time_utc": times.strftime("%Y-%m-%dT%H:%M:%SZ"),
            "fos": fos.values.round(4),
            "method": [a.method for a in history],
            "evaluation": [a.evaluation for a in history],
        }).to_csv(csv_path, index=False)
        daily_rain = _daily_rain(rain, ref.gauge)
        history_png = plot_fos_history(
            section.id, times, fos.values, ws.reports / f"fos_{section.id}.png",
            method=worst.method, rain_times=daily_rain.index, rain_mm=daily_rain.values,
            rain_label=f"Rain {ref.gauge}\n[mm/day]" if ref.gauge else "Rain\n[mm/day]",
        )
        worst_section = section.with_water_lines(
            {name: line.points for name, line in worst.water_lines.items()}
        )
        critical = worst.search.critical
        section_png = plot_section(
            worst_section, ws.reports / f"section_{section.id}_worst.png",
            surface=surface_of(critical), fos=worst.fos, method=worst.method,
        )
        echo(f"   {section.id:8s} start {fos.iloc[0]:.2f}, lowest {fos.min():.2f} on "
             f"{worst.at:%Y-%m-%d %H:%M} UTC, end {fos.iloc[-1]:.2f} ({worst.method}; "
             f"{full} full searches, {len(history) - full} warm re-evaluations)")
        summary["sections"][section.id] = {
            "start": float(fos.iloc[0]), "lowest": float(fos.min()),
            "lowest_at": worst.at.isoformat(), "end": float(fos.iloc[-1]),
            "full_searches": full, "csv": str(csv_path), "plots": [str(history_png),
                                                                   str(section_png)],
        }

    echo("")
    echo(f"Outputs in {ws.reports}: fos_<section>.csv (the season's factors of safety), "
         "fos_<section>.png (with rainfall), section_<section>_worst.png (water lines and "
         "critical surface at the season's lowest factor of safety).")
    echo("Next stages of the job (alerts and inspection requests, status board, back-analysis "
         "of the WC-060 slip) are being built; see the README.")
    echo("")
    echo(CAUTION)
    return summary


def _clear_previous_demo(workspace: Path) -> None:
    if not workspace.exists():
        return
    if (workspace / _MARKER).is_file():
        shutil.rmtree(workspace)
        return
    if workspace.is_dir() and not any(workspace.iterdir()):
        return
    raise WorkspaceError(
        f"{workspace} exists and is not a demo workspace made by `slipwatch demo`; choose "
        "another folder with --workspace (the demo never deletes a folder it did not make)"
    )


def _daily_rain(rain: pd.DataFrame, gauge: str | None) -> pd.Series:
    if rain.empty or gauge is None:
        return pd.Series(dtype=float)
    ours = rain[rain["gauge_id"] == gauge]
    return ours.set_index("time_utc")["rain_mm"].astype(float).resample("1D").sum()
