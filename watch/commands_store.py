"""Commands of the workspace and its store: init, ingest, readings, backup, status."""

from __future__ import annotations

import csv
import sys
from datetime import datetime, timezone
from pathlib import Path

import click

from watch.cli import echo_json, json_option, workspace_option
from watch.errors import UserError


def register(group: click.Group) -> None:
    for command in (init, ingest, readings, backup, status):
        group.add_command(command)


@click.command()
@click.argument("directory", type=click.Path(file_okay=False, path_type=Path))
@click.option("--site", "site_template", type=click.Path(dir_okay=False, exists=True, path_type=Path),
              help="A site.toml to start from (default: a commented invented example).")  # fmt: skip
def init(directory: Path, site_template: Path | None) -> None:
    """Create a workspace: site.toml, sections/, incoming/, processed/, rejected/, reports/
    and the store slipwatch.db.

    \b
    Example:
        slipwatch init /srv/slipwatch/quillmarsh --site my_site.toml
    """
    from watch.workspace import init_workspace

    workspace = init_workspace(directory, site_template)
    click.echo(f"workspace created in {workspace.root}; edit {workspace.site_file.name}, put section "
               f"files in sections/ and feed files in incoming/")  # fmt: skip


@click.command()
@click.argument("files", nargs=-1, type=click.Path(dir_okay=False, path_type=Path))
@workspace_option
@click.option("--progress/--no-progress", default=True, show_default=True, help="Progress bar for long files.")
@json_option
def ingest(files: tuple[Path, ...], workspace: Path, progress: bool, as_json: bool) -> None:
    """Ingest feed files: the FILES named (copied in; originals stay), or every file ready in
    incoming/. Prints one line per file: accepted, duplicates, rejected, flagged. Exits with
    status 1 when a file could not be ingested (an unforeseen error, or the store or disk).

    \b
    Example:
        slipwatch ingest --workspace /srv/slipwatch/quillmarsh
        slipwatch ingest north_2026-10-25.csv -w /srv/slipwatch/quillmarsh
    """
    from watch.clock import SystemClock
    from watch.ingest import ingest as run_ingest
    from watch.store import utc_text
    from watch.text import printable
    from watch.workspace import open_workspace

    now = SystemClock().now()
    report = run_ingest(open_workspace(workspace), list(files), now=now, progress=progress,
                        echo=None if as_json else click.echo)  # fmt: skip
    due = report.second_look_due
    if as_json:
        echo_json({"files": [f.__dict__ for f in report.files], "waiting": report.waiting,
                   "reconciled": report.reconciled, "failed": [f.name for f in report.failures],
                   "second_looks": {printable(name): utc_text(at) for name, at in report.second_looks.items()},
                   "second_look_due_utc": None if due is None else utc_text(due)})  # fmt: skip
        if report.failures:
            sys.exit(1)
        return
    for line in report.reconciled:
        click.echo(f"reconciled: {line}")
    for line in report.waiting:
        click.echo(f"waiting: {line}")
    if due is not None:
        click.echo(f"{len(report.second_looks)} file(s) wait for their second look: run `slipwatch ingest` "
                   f"again in {max(0.0, (due - now).total_seconds()):.0f} s (at {utc_text(due)}) and what is "
                   "unchanged by then is taken; or leave it to `slipwatch run`, which looks again then by itself")  # fmt: skip
    if not report.files and not report.waiting:
        click.echo("nothing to ingest")
    if report.failures:
        click.echo(f"slipwatch: error: {len(report.failures)} file(s) could not be ingested (see above)", err=True)
        sys.exit(1)


@click.command()
@click.argument("instrument")
@workspace_option
@click.option("--from", "start", help="First time, ISO 8601 (UTC unless it carries an offset).")
@click.option("--to", "end", help="Last time, ISO 8601 (UTC unless it carries an offset).")
@click.option("--csv", "as_csv", is_flag=True, help="Write CSV to standard output.")
@json_option
def readings(instrument: str, workspace: Path, start: str | None, end: str | None, as_csv: bool, as_json: bool) -> None:
    """Export the stored readings of one piezometer or rain gauge, in time order. A corrected
    reading lists the values it replaced (who, when, why) in its ``superseded`` column.

    \b
    Example:
        slipwatch readings P1 --from 2026-10-01 --to 2026-10-31T23:59 --csv > p1.csv
    """
    from watch.formatting import plain_number
    from watch.workspace import open_workspace

    ws = open_workspace(workspace)
    ws.config().instrument(instrument)  # unknown id: the error lists the known ones
    with ws.open_store(read_only=True) as store:
        rows = store.readings_with_corrections(instrument, utc_option(start, "--from"), utc_option(end, "--to"))
    if as_json:
        echo_json(rows)
    elif as_csv or rows:
        columns = list(rows[0]) if rows else ["instrument_id", "time_utc"]
        writer = csv.DictWriter(sys.stdout, fieldnames=columns, lineterminator="\n")
        writer.writeheader()
        writer.writerows({**{k: plain_number(v) for k, v in row.items()},
                          "superseded": _superseded_text(row["superseded"])} for row in rows)
    else:
        click.echo(f"no readings of {instrument} stored in that period")


@click.command()
@click.argument("destination", type=click.Path(dir_okay=False, path_type=Path))
@workspace_option
def backup(destination: Path, workspace: Path) -> None:
    """Copy the live store to DESTINATION (a new file) consistently, while the service may be
    writing, and check the copy with SQLite's integrity check.

    \b
    Example:
        slipwatch backup /mnt/backups/quillmarsh-2026-10-25.db
    """
    from watch.workspace import open_workspace

    with open_workspace(workspace).open_store(read_only=True) as store:
        path = store.backup(destination)
    click.echo(f"store copied to {path}; integrity check ok")


@click.command()
@workspace_option
@click.option("--at", "at", help="The state as it was at this time, ISO 8601 (UTC unless it carries an "
                                 "offset), from the stored assessments and alert events [default: now].")
@json_option
def status(workspace: Path, at: str | None, as_json: bool) -> None:
    """Show every section, worst first (service state, factor of safety, level, trend, age of
    the newest reading, open alerts and inspections, data problems), then each instrument's
    newest reading, its age and whether it is stale, and the files waiting in incoming/. An open
    alert of the watch itself (its ingest failing) comes first, as a warning.

    \b
    Example:
        slipwatch status --workspace /srv/slipwatch/quillmarsh --json
        slipwatch status --at 2026-01-16T06:00Z
    """
    from watch.alerting import watch_failures
    from watch.caution import CAUTION
    from watch.clock import SystemClock
    from watch.ingest import workspace_status
    from watch.section_status import format_sections, sections_status
    from watch.store import parse_utc_text
    from watch.workspace import open_workspace

    moment = utc_option(at, "--at")
    ws = open_workspace(workspace)
    now = SystemClock().now() if moment is None else parse_utc_text(moment)
    result = workspace_status(ws, now)
    result["sections"] = sections_status(ws, now)
    # The failing watch is told as it stands now; a past --at shows it in the alerts instead.
    result["watch_failing"] = watch_failures(ws) if moment is None else []
    if as_json:
        echo_json(result | {"caution": CAUTION})
        return
    for failure in result["watch_failing"]:
        click.echo(f"WARNING: {failure['headline']}")
    for line in format_sections(result["sections"])[:-1]:
        click.echo(line)
    click.echo(f"site {result['site']} at {result['now_utc']} (stale after {result['stale_hours']:g} h)")
    for row in result["instruments"]:
        age = "never" if row["age_hours"] is None else f"{row['age_hours']:.1f} h ago"
        flag = "  STALE" if row["stale"] else ""
        click.echo(f"  {row['instrument_id']:<12} {row['kind']:<10} newest {row['newest_utc'] or '-':<20} "
                   f"{age:<12} {row['readings']} readings, {row['flagged']} flagged{flag}")  # fmt: skip
    click.echo(f"incoming: {len(result['incoming'])} file(s) waiting; claimed: {len(result['claimed'])}")
    click.echo(CAUTION)


def _superseded_text(replaced: list[dict]) -> str:
    """The values a reading replaced, in one CSV cell (oldest first, '; ' between them)."""
    return "; ".join(
        f"raw {old['raw_value']:g} ({old['quality']}) from {old['source_file']} line {old['source_line']}, "
        f"replaced {old['corrected_utc']} by {old['corrected_by']} from {old['replaced_by_file']} line "
        f"{old['replaced_by_line']}: {old['reason']}"
        for old in replaced
    )


def utc_option(text: str | None, option: str) -> str | None:
    """The store's UTC text of an ISO 8601 option value (UTC unless it carries an offset)."""
    if text is None:
        return None
    try:
        moment = datetime.fromisoformat(text)
    except ValueError:
        raise UserError(f"{option} {text!r} is not an ISO 8601 date or time, e.g. 2026-10-25T06:00") from None
    if moment.tzinfo is None:
        moment = moment.replace(tzinfo=timezone.utc)
    return moment.astimezone(timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")
