"""The bundled demo: the invented Quillmarsh Valley Line watched through an invented wet season.

``run_demo`` builds a fresh workspace from ``config/`` and ``demo_feeds/`` and runs the whole
job the way the service would, with a manual clock instead of the wall clock:

1. the season is replayed cycle by cycle: logger files arrive as the clock passes their
   readings, each cycle ingests them, rebuilds the water lines, re-evaluates the factors of
   safety, evaluates the trigger levels, queues notifications and opens inspection requests,
   and the notifications are delivered (to the log channel: the demo sends nothing out);
2. a forecast on the eve of the January storm: rain to each trigger level and a 60 mm storm;
   on 16 January an engineer marks WC-060 slipped: from then on it is not assessed on its
   pre-slip geometry and its alerts stay open;
3. the back-analysis of the WC-060 slip, and the calibration of its neighbours with it;
4. one more cycle, now on the calibrated parameters;
5. the status board, a PDF report for the engineering file and one of the slipped section.
"""

from __future__ import annotations

import shutil
from dataclasses import dataclass
from datetime import datetime, timedelta, timezone
from pathlib import Path
from typing import Callable

from watch.caution import CAUTION
from watch.clock import ManualClock
from watch.errors import WorkspaceError
from watch.workspace import init_workspace

__all__ = ["run_demo", "DEMO_ROOT", "DemoSettings"]

#: The repository folder that holds config/ and demo_feeds/.
DEMO_ROOT = Path(__file__).resolve().parents[1]

#: Marker file of a demo workspace: only a folder holding it is ever deleted by the demo.
_MARKER = ".slipwatch-demo"

_UTC = timezone.utc


@dataclass(frozen=True)
class DemoSettings:
    """What the demo replays and which optional stages it runs."""

    start: datetime = datetime(2025, 10, 1, 6, 0, tzinfo=_UTC)
    end: datetime = datetime(2026, 3, 31, 6, 0, tzinfo=_UTC)
    step: timedelta = timedelta(days=1)
    #: The eve of the January storm: when duty staff would ask "how much rain until...".
    forecast_at: datetime = datetime(2026, 1, 14, 6, 0, tzinfo=_UTC)
    forecast_storm_mm: float = 60.0
    forecast_storm_hours: float = 24.0
    slip_case: str = "slips/wc_060_2026-01.toml"
    calibrate_sections: tuple[str, ...] = ("WC-040", "WC-080")
    report_section: str = "WC-040"
    #: The slip of the season: the section an engineer marks slipped, when, and the note.
    slipped_section: str = "WC-060"
    slipped_at: datetime = datetime(2026, 1, 16, 6, 0, tzinfo=_UTC)
    slipped_note: str = ("composite slide of the upper face after the storm of 15 January; line "
                         "closed, section out of the watch until rebuilt")
    forecast: bool = True
    back_analysis: bool = True
    board: bool = True
    report: bool = True


def run_demo(
    workspace: Path,
    echo: Callable[[str], None] = print,
    settings: DemoSettings = DemoSettings(),
    root: Path = DEMO_ROOT,
) -> dict:
    """Build ``workspace`` from the bundled demo and run the whole job on it.

    Returns a summary dict of what was made (also told through ``echo``).
    """
    from watch.cycle import replay_season, run_cycle, season_summary
    from watch.lifecycle import set_service_state
    from watch.notify import deliver_pending

    config_dir, feeds_dir = root / "config", root / "demo_feeds"
    if not (config_dir / "site.toml").is_file() or not feeds_dir.is_dir():
        raise WorkspaceError(
            f"the demo data is not beside the program ({config_dir}, {feeds_dir}); run the "
            "demo from a clone of the slipwatch repository (`make demo`)"
        )
    ws = _fresh_workspace(Path(workspace), config_dir)
    config = ws.config()
    clock = ManualClock(settings.start)
    summary: dict = {"workspace": str(ws.root)}
    echo(f"Demo site: {config.name} ({config.owner}); every name and reading is invented")
    echo(f"Workspace: {ws.root}")

    # 1. The season, cycle by cycle.
    echo("")
    echo(f"1. Replaying the season {settings.start:%Y-%m-%d} to {settings.end:%Y-%m-%d}, one "
         f"cycle every {_span(settings.step)}: logger files arrive, are ingested, water lines "
         "are rebuilt, factors of safety re-evaluated, trigger levels checked ...")

    marked = []

    def deliver(_report) -> None:
        with ws.open_store() as store:
            deliver_pending(ws, store, clock)
        # The engineer marks the slipped section as soon as the replay reaches the slip: from
        # then on it is not assessed on its pre-slip geometry and its alerts stay open.
        if settings.slipped_section and not marked and clock.now() >= settings.slipped_at:
            marked.append(set_service_state(ws, clock, settings.slipped_section, "slipped",
                                            "demo engineer", settings.slipped_note,
                                            at=settings.slipped_at))  # fmt: skip

    replay = replay_season(
        ws, settings.start, settings.end, settings.step, clock,
        feeds=sorted(feeds_dir.glob("*.csv")), on_cycle=deliver,
    )
    summary["cycles"] = getattr(replay, "cycles", None)
    lines = season_summary(ws)
    summary["season"] = lines
    echo("   Alerts raised during the season (time UTC, section, level, rule; when resolved):")
    for line in lines:
        echo(f"   {line}")
    for state in marked:
        echo(f"   {state.section_id} marked {state.describe()}: not assessed since, its alerts "
             "held open")
    echo(f"   Messages delivered to {ws.root / 'notifications.log'} (log channel; e-mail and "
         "webhooks are configured in site.toml [notify])")

    # 2. Forecast on the eve of the storm.
    if settings.forecast:
        from watch.forecast import calibrate_site, forecast_site, rain_to_trigger_site

        at = settings.forecast_at
        echo("")
        echo(f"2. Forecast as at {at:%Y-%m-%d %H:%M} UTC, the eve of the January storm "
             "(rainfall-response models calibrated on the previous 60 days):")
        calibrate_site(ws, at, days=60)
        storm = forecast_site(ws, settings.forecast_storm_mm, settings.forecast_storm_hours, at)
        thresholds = rain_to_trigger_site(ws, [24, 48], at)
        for text in (thresholds.describe(), storm.describe()):
            for line in text.splitlines():
                echo(f"   {line}")

    # 3. Back-analysis of the slip and calibration of the neighbours.
    if settings.back_analysis:
        from watch.backcalc import plot_back_analysis, run_case
        from watch.parameters import calibrate

        echo("")
        echo("3. Back-analysis of the WC-060 slip of 16 January 2026 (observed surface, water "
             "lines rebuilt from the readings at the failure time):")
        outcome = run_case(ws, ws.root / settings.slip_case, clock)
        best = outcome.result.best
        plot = plot_back_analysis(outcome, ws.reports / "backcalc_WC-060.png")
        echo(f"   method {outcome.result.method}; best fit c' = {best.cohesion:.1f} kPa, "
             f"phi' = {best.friction_angle:.1f} deg (its critical surface lies closest to the "
             "observed one at FoS = 1)")
        history = outcome.result.history
        if history is not None:
            echo("   range consistent with the record (FoS >= 1 on every surface searched at "
                 f"each stood date): {_range_text(history)}")
        before = _latest_fos(ws, settings.calibrate_sections)
        with ws.open_store() as store:
            done = calibrate(ws, store, outcome, list(settings.calibrate_sections),
                             "demo engineer", clock.now())
        echo("   the best fit passes its consistency checks: "
             + "; ".join(c.detail for c in outcome.result.consistency))
        for item in done:
            echo(f"   calibrated {item.section_id} ({item.material}): {_strength(item.before)} "
                 f"-> {_strength(item.after)}, parameter version {item.version}")
            record = [c for c in item.checks if c["name"].startswith("record")]
            if record:
                lowest = min(record, key=lambda c: c["fos"])
                echo(f"      it stands with the new strength at the {len(record)} worst times of "
                     f"its record (lowest FoS {lowest['fos']:.3f}, {lowest['time_utc']})")
        summary["back_analysis"] = {"cohesion": best.cohesion,
                                    "friction_angle": best.friction_angle, "plot": str(plot)}

        # 4. The next cycle uses the calibrated parameters.
        clock.advance(timedelta(minutes=15))
        run_cycle(ws, clock)
        after = _latest_fos(ws, settings.calibrate_sections)
        echo("")
        echo(f"4. Cycle at {clock.now():%Y-%m-%d %H:%M} UTC on the calibrated parameters:")
        versions = {item.section_id: item.version for item in done}
        for section_id in settings.calibrate_sections:
            (fos0, _), (fos1, version_id) = before[section_id], after[section_id]
            used = ("the calibrated parameters, version "
                    f"{versions[section_id]}" if section_id in versions else
                    f"parameter version id {version_id}")
            echo(f"   {section_id}: FoS {_fos(fos0)} before calibration -> {_fos(fos1)} with "
                 f"{used}")
        summary["after_calibration"] = after

    # 5. Board and report.
    if settings.board:
        from watch.board import build_board

        board = build_board(ws, clock.now())
        summary["board"] = str(getattr(board, "index", ws.root / "board"))
    if settings.report:
        from watch.report import build_report

        report = build_report(ws, settings.report_section, settings.start, settings.end,
                              clock.now())
        summary["report"] = str(getattr(report, "path", report))
        if marked:
            slip_report = build_report(ws, settings.slipped_section, settings.start, settings.end,
                                       clock.now())
            summary["slip_report"] = str(slip_report.path)

    echo("")
    echo("Outputs:")
    if settings.board:
        echo(f"   status board: {summary['board']}  (open in a browser, or "
             f"`slipwatch serve --workspace {ws.root}`)")
    if settings.report:
        echo(f"   PDF report for the engineering file: {summary['report']}")
        if "slip_report" in summary:
            echo(f"   PDF report of the slipped section: {summary['slip_report']}")
    echo(f"   figures: {ws.reports}")
    echo(f"   try: slipwatch status --workspace {ws.root}; slipwatch alerts --workspace "
         f"{ws.root}; slipwatch inspections --workspace {ws.root}")
    echo(f"   (the demo season ended on {settings.end:%Y-%m-%d}: run today, `status` rightly "
         "reports every instrument as stale)")
    echo("")
    echo(CAUTION)
    return summary


def _fresh_workspace(workspace: Path, config_dir: Path):
    _clear_previous_demo(workspace)
    ws = init_workspace(workspace, config_dir / "site.toml")
    (ws.root / _MARKER).write_text("made by `slipwatch demo`; safe to delete\n", encoding="utf-8")
    for section_file in sorted((config_dir / "sections").glob("*.toml")):
        shutil.copy2(section_file, ws.sections / section_file.name)
    if (config_dir / "slips").is_dir():
        shutil.copytree(config_dir / "slips", ws.root / "slips")
    return ws


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


def _span(step: timedelta) -> str:
    hours = step.total_seconds() / 3600
    return f"{hours / 24:g} day(s)" if hours >= 24 else f"{hours:g} h"


def _range_text(history) -> str:
    parts = []
    for label, value, unit in (("phi'", getattr(history, "friction_range", None), "deg"),
                               ("c'", getattr(history, "cohesion_range", None), "kPa")):
        if value:
            low, high = value
            parts.append(f"{label} {low:.1f} to {high:.1f} {unit}")
    return ", ".join(parts) or "no pair survives"


def _latest_fos(ws, sections) -> dict:
    with ws.open_store(read_only=True) as store:
        rows = {sid: store.last_assessment(sid, with_fos=True) for sid in sections}
    return {sid: (row["fos"], row["section_version_id"]) if row else (None, None)
            for sid, row in rows.items()}


def _fos(value) -> str:
    return "n/a" if value is None else f"{value:.2f}"


def _strength(values: dict) -> str:
    return ", ".join(f"{key} {value:.1f}" if isinstance(value, float) else f"{key} {value}"
                     for key, value in values.items())
