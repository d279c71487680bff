"""Commands for bad data after the fact: rejected-rows (what was refused and why), correct (apply
corrected values from a re-delivered file, with an audit trail) and reread (read an archived file
again after a configuration fix)."""

from __future__ import annotations

from pathlib import Path

import click

from watch.cli import echo_json, json_option, workspace_option


def register(group: click.Group) -> None:
    for command in (rejected_rows, correct, reread):
        group.add_command(command)


@click.command("rejected-rows")
@workspace_option
@click.option("--from", "start", help="Files ingested from this time, ISO 8601 (UTC unless it carries an offset).")
@click.option("--to", "end", help="Files ingested up to this time, ISO 8601 (UTC unless it carries an offset).")
@json_option
def rejected_rows(workspace: Path, start: str | None, end: str | None, as_json: bool) -> None:
    """List the rows that were not stored, with file, line and reason, for the files ingested in
    a period (all files without --from/--to).

    \b
    Example:
        slipwatch rejected-rows --from 2026-01-01 --to 2026-01-31T23:59 --json
    """
    from watch.commands_store import utc_option
    from watch.workspace import open_workspace

    with open_workspace(workspace).open_store(read_only=True) as store:
        rows = store.rejected_rows(utc_option(start, "--from"), utc_option(end, "--to"))
    if as_json:
        echo_json(rows)
        return
    for row in rows:
        line = "-" if row["line"] is None else row["line"]
        click.echo(f"{row['file']} line {line}: {row['reason']}")
    click.echo(f"{len(rows)} rejected row(s)")


@click.command()
@click.argument("file", type=click.Path(dir_okay=False, exists=True, path_type=Path))
@click.option("--by", required=True, help="Who applies the correction.")
@click.option("--reason", required=True, help="Why the values are corrected (kept with each replaced value).")
@workspace_option
@json_option
def correct(file: Path, by: str, reason: str, workspace: Path, as_json: bool) -> None:
    """Apply a corrected, re-delivered feed FILE: its values replace the stored ones at the same
    instrument and time; each replaced value is kept with who, when and why, and shown by
    `slipwatch readings`. Readings not stored yet are stored. Assessments made from now on use
    the corrected values; earlier assessment records keep what they used.

    \b
    Example:
        slipwatch correct fellhollow_2025-W47_fixed.csv --by "A. Duty" --reason "logger offset fixed"
    """
    from watch.clock import SystemClock
    from watch.ingest import apply_corrections
    from watch.workspace import open_workspace

    summary = apply_corrections(open_workspace(workspace), file, by, reason, SystemClock(), progress=False)
    if as_json:
        echo_json(summary.__dict__)
    else:
        click.echo(summary.line())


@click.command()
@click.argument("archived", type=click.Path(dir_okay=False, path_type=Path))
@workspace_option
@json_option
def reread(archived: Path, workspace: Path, as_json: bool) -> None:
    """Read a file archived in processed/ or rejected/ again, as site.toml reads it now (e.g.
    after mapping a column that was left out). Only readings not stored yet are stored; the
    file stays where it is.

    \b
    Example:
        slipwatch reread processed/wendlecombe_2025-11.csv
    """
    from watch.clock import SystemClock
    from watch.ingest import reread as read_again
    from watch.workspace import open_workspace

    summary = read_again(open_workspace(workspace), archived, SystemClock())
    if as_json:
        echo_json(summary.__dict__)
    else:
        click.echo(summary.line())
