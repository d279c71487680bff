"""Commands of the watch: assess (one cycle now), alerts (list, ack, shelve), inspections (list,
CSV, close)."""

from __future__ import annotations

import sys
from datetime import datetime, timezone
from pathlib import Path

import click

from watch.cli import echo_json, json_option, workspace_option
from watch.errors import UserError


def register(group: click.Group) -> None:
    for command in (assess, alerts, inspections, section_state):
        group.add_command(command)


def parse_time_option(text: str | None, option: str) -> datetime | None:
    if text is None:
        return None
    try:
        moment = datetime.fromisoformat(text)
    except ValueError:
        raise UserError(f"{option} {text!r} is not an ISO 8601 time, e.g. 2026-01-16T06:00Z") from None
    return (moment if moment.tzinfo else moment.replace(tzinfo=timezone.utc)).astimezone(timezone.utc)


def clock_at(text: str | None, option: str = "--at"):
    """The clock of a command: the system clock, or with ``--at T`` a clock standing at T, so
    that every record the command writes carries T (T must not be later than now)."""
    from watch.clock import ManualClock, SystemClock

    moment = parse_time_option(text, option)
    if moment is None:
        return SystemClock()
    now = SystemClock().now()
    if moment > now:
        raise UserError(f"{option} {text!r} is later than now ({now:%Y-%m-%dT%H:%M:%SZ})")
    return ManualClock(moment)


def _at_option(function):
    return click.option("--at", "at", help="Do it as at this time, ISO 8601 (UTC unless it carries an "
                                           "offset): every record written carries it; default now.")(function)  # fmt: skip


@click.command()
@click.option("--section", "sections", multiple=True, help="Section id to assess (repeatable).")
@click.option("--all", "every", is_flag=True, help="Assess every section, with a progress bar.")
@click.option("--at", "at", help="Assess as at this time, ISO 8601 (UTC unless it carries an offset): the "
                                 "cycle runs on a clock set to it, so every record it writes (alerts, "
                                 "inspections, notifications, versions, ingest) carries it; default now.")
@click.option("--cluster", help="Calculate on Dask: a scheduler address (tcp://HOST:8786) or local:N for "
                                "a local cluster of N workers; default the site file's [cycle] cluster.")
@click.option("--workers", type=int, help="Calculate in a local pool of N processes.")
@workspace_option
@json_option
def assess(sections: tuple[str, ...], every: bool, at: str | None, cluster: str | None, workers: int | None,
           workspace: Path, as_json: bool) -> None:
    """Run one assessment cycle now: ingest the waiting files, rebuild the water lines,
    re-evaluate the factor of safety, store the assessment, evaluate the trigger levels and
    queue notifications and inspection requests. Exits with status 1 when the ingest failed
    or a section could not be assessed (failed or not converged).

    \b
    Example:
        slipwatch assess --all -w /srv/slipwatch/quillmarsh
        slipwatch assess --section WC-040 --json
        slipwatch assess --all --at 2026-01-16T06:00Z
        slipwatch assess --all --workers 2
        slipwatch assess --all --cluster tcp://10.0.0.5:8786
    """
    from watch.assessment_status import status_words
    from watch.cycle import cycle_executor, run_cycle
    from watch.caution import CAUTION
    from watch.workspace import open_workspace

    if not sections and not every:
        raise UserError("say what to assess: --section ID (repeatable) or --all")
    opened = open_workspace(workspace)
    report = run_cycle(opened, clock_at(at), sections=list(sections) or None,
                       progress=every and not as_json, executor=cycle_executor(opened, cluster, workers))  # fmt: skip
    if as_json:
        echo_json(report.to_dict() | {"ok": report.ok, "caution": CAUTION})
        if not report.ok:
            sys.exit(1)
        return
    for line in report.files:
        click.echo(f"ingested: {line}")
    for line in report.ingest_failures:
        click.echo(f"INGEST FAILED: {line}")
    if report.second_look_due is not None:
        click.echo(f"{report.second_looks} file(s) in incoming/ wait for their second look, due "
                   f"{report.second_look_due:%Y-%m-%dT%H:%M:%SZ}: a cycle from then on takes what is unchanged "
                   "(`slipwatch run` runs one then by itself)")  # fmt: skip
    for change in report.site_changes:
        click.echo(f"site alert {change}")
    for name in report.released:
        click.echo(f"un-shelved (expired): {name}")
    for s in report.sections:
        fos = "n/a" if s.fos is None else f"{s.fos:.2f} ({s.method}, {s.evaluation})"
        click.echo(f"{s.section_id}: {status_words(s.status)}; FoS {fos}" + (f"; {s.message}" if s.message else ""))
        for change in s.changes:
            click.echo(f"  alert {change}")
        for warning in s.warnings:
            click.echo(f"  warning: {warning}")
        if s.notifications or s.inspections:
            click.echo(f"  {s.notifications} notification(s) queued, {s.inspections} inspection request(s) opened")
    rate = len(report.sections) / report.seconds if report.seconds else 0.0
    click.echo(f"{len(report.sections)} section(s) in {report.seconds:.1f} s ({rate:.1f}/s) on "
               f"{report.executor}, {len(report.failed)} failed or not converged, "
               f"{report.retries} calculation(s) retried")  # fmt: skip
    click.echo(CAUTION)
    if not report.ok:
        click.echo("slipwatch: error: something failed in this cycle (see above); exit status 1", err=True)
        sys.exit(1)


@click.group(invoke_without_command=True)
@click.option("--open", "open_only", is_flag=True, help="Only alerts that are pending or firing.")
@click.option("--at", "at", help="The alerts as they stood at this time, ISO 8601, rebuilt from their "
                                 "stored events [default: now, as stored].")
@workspace_option
@json_option
@click.pass_context
def alerts(ctx: click.Context, open_only: bool, at: str | None, workspace: Path, as_json: bool) -> None:
    """List the alerts, worst first: state, level, value, acknowledgement, shelving and
    chattering; an open alert of the watch itself (section "(site)") comes first, with a
    warning. Subcommands acknowledge, shelve, close and list the history.

    \b
    Example:
        slipwatch alerts --open
        slipwatch alerts --at 2026-01-16T06:00Z
        slipwatch alerts ack 12 --by "J. Ferrand" --note "inspection booked"
    """
    if ctx.invoked_subcommand is not None:
        return
    from watch.alerting import list_alerts, watch_failures
    from watch.clock import SystemClock
    from watch.workspace import open_workspace

    ws = open_workspace(workspace)
    rows = list_alerts(ws, SystemClock(), open_only=open_only, at=parse_time_option(at, "--at"))
    if as_json:
        echo_json(rows)  # an open alert of the watch itself comes first, with watch_failing true
        return
    for failure in (watch_failures(ws) if at is None else []):
        click.echo(f"WARNING: {failure['headline']}")
    if not rows:
        click.echo("no open alerts" if open_only else "no alerts stored yet")
    for a in rows:
        value = "" if a["last_value"] is None else f" value {a['value_text']}"
        marks = "".join([
            f" ack by {a['acknowledged_by']}" if a["acknowledged"] else "",
            f" SHELVED until {a['shelved_until_utc']} by {a['shelved_by']}" if a["shelved"] else "",
            f" CHATTERING ({a['changes_in_window']} changes)" if a["chattering"] else "",
        ])  # fmt: skip
        click.echo(f"#{a['id']:<4} {a['section_id']:<8} {a['rule']:<24} {a['level']:<6} {a['state']:<9} "
                   f"since {a['since_utc'] or '-'}{value}{marks}")  # fmt: skip


@alerts.command("ack")
@click.argument("alert_id", type=int)
@click.option("--by", required=True, help="Who acknowledges.")
@click.option("--note", default="", help="What is being done about it.")
@_at_option
@workspace_option
@json_option
def ack(alert_id: int, by: str, note: str, at: str | None, workspace: Path, as_json: bool) -> None:
    """Acknowledge a pending or firing alert (who, when, note). It keeps being evaluated.

    \b
    Example:
        slipwatch alerts ack 12 --by "J. Ferrand" --note "inspection booked for 14:00"
    """
    from watch.alerting import acknowledge
    from watch.workspace import open_workspace

    row = acknowledge(open_workspace(workspace), clock_at(at), alert_id, by, note)
    if as_json:
        echo_json(row)
    else:
        click.echo(f"alert {alert_id} ({row['section_id']}/{row['rule']}) acknowledged by {by}")


@alerts.command("shelve")
@click.argument("alert_id", type=int)
@click.option("--until", "until", required=True, help="Expiry, ISO 8601 (UTC unless offset given).")
@click.option("--reason", required=True, help="Why it is shelved.")
@click.option("--by", required=True, help="Who shelves it.")
@workspace_option
@json_option
def shelve_command(alert_id: int, until: str, reason: str, by: str, workspace: Path, as_json: bool) -> None:
    """Shelve an alert until a time: its firing notifications and inspection requests are held
    until then (released if it still fires); it un-shelves itself at expiry.

    \b
    Example:
        slipwatch alerts shelve 7 --until 2026-01-20T18:00Z --reason "PA logger awaiting repair" --by "J. Ferrand"
    """
    from watch.alerting import shelve
    from watch.clock import SystemClock
    from watch.workspace import open_workspace

    row = shelve(open_workspace(workspace), SystemClock(), alert_id, parse_time_option(until, "--until"), reason, by)
    if as_json:
        echo_json(row)
    else:
        click.echo(f"alert {alert_id} ({row['section_id']}/{row['rule']}) shelved until "
                   f"{row['shelved_until_utc']} by {by}")  # fmt: skip


@click.group(invoke_without_command=True)
@click.option("--open", "open_only", is_flag=True, help="Only requests not closed yet.")
@click.option("--csv", "csv_path", type=click.Path(dir_okay=False, path_type=Path), help="Write them to a CSV file.")
@workspace_option
@json_option
@click.pass_context
def inspections(ctx: click.Context, open_only: bool, csv_path: Path | None, workspace: Path, as_json: bool) -> None:
    """List the site-inspection requests (section, level, due by, checklist); `close` records
    the outcome.

    \b
    Example:
        slipwatch inspections --open --csv open_inspections.csv
        slipwatch inspections close 3 --note "no new cracks; toe drain cleared" --by "A. Marsh"
    """
    if ctx.invoked_subcommand is not None:
        return
    from watch.clock import SystemClock
    from watch.inspections import list_inspections, write_csv
    from watch.workspace import open_workspace

    rows = list_inspections(open_workspace(workspace), SystemClock(), open_only=open_only)
    if csv_path is not None:
        write_csv(rows, csv_path)
        if not as_json:
            click.echo(f"{len(rows)} inspection request(s) written to {csv_path}")
    if as_json:
        echo_json(rows)
        return
    if not rows:
        click.echo("no open inspection requests" if open_only else "no inspection requests yet")
    for r in rows:
        overdue = " OVERDUE" if r["overdue"] else ""
        click.echo(f"#{r['id']:<4} {r['section_id']:<8} {r['level']:<6} {r['status']:<6} requested "
                   f"{r['requested_utc']} due {r['due_utc']}{overdue}: {r['reason']}")  # fmt: skip
        if r["status"] == "open":
            click.echo("      look at: " + "; ".join(r["checklist"]))
        else:
            click.echo(f"      closed {r['completed_utc']} by {r['closed_by']}: {r['notes']}")


@inspections.command("close")
@click.argument("inspection_id", type=int)
@click.option("--note", required=True, help="What was found and done.")
@click.option("--by", required=True, help="Who inspected.")
@_at_option
@workspace_option
@json_option
def close(inspection_id: int, note: str, by: str, at: str | None, workspace: Path, as_json: bool) -> None:
    """Close an inspection request with what was found.

    \b
    Example:
        slipwatch inspections close 3 --note "no new cracks; toe drain cleared" --by "A. Marsh"
    """
    from watch.inspections import close_inspection
    from watch.workspace import open_workspace

    row = close_inspection(open_workspace(workspace), clock_at(at), inspection_id, note, by)
    if as_json:
        echo_json(row)
    else:
        click.echo(f"inspection request {inspection_id} ({row['section_id']}) closed by {by}")



@alerts.command("close")
@click.argument("alert_id", type=int)
@click.option("--by", required=True, help="Who closes it.")
@click.option("--note", required=True, help="Why: what was found and done.")
@click.option("--at", "at", help="When it was closed, ISO 8601 [default: now]; the time it is recorded is kept too.")
@workspace_option
@json_option
def close_alert_command(alert_id: int, by: str, note: str, at: str | None, workspace: Path, as_json: bool) -> None:
    """Close an open alert of a section that is not in service (slipped, closed, under
    repair), with who and why. Alerts of a section in service clear by themselves.

    \b
    Example:
        slipwatch alerts close 12 --by "J. Ferrand" --note "slip confirmed; section closed to traffic"
    """
    from watch.clock import SystemClock
    from watch.lifecycle import close_alert
    from watch.workspace import open_workspace

    row = close_alert(open_workspace(workspace), SystemClock(), alert_id, by, note, at=parse_time_option(at, "--at"))
    if as_json:
        echo_json(row)
    else:
        click.echo(f"alert {alert_id} ({row['section_id']}/{row['rule']}) closed by {by}")


@alerts.command("history")
@click.option("--from", "start", help="Start of the period, ISO 8601 [default: the first event].")
@click.option("--to", "end", help="End of the period, ISO 8601 [default: now].")
@click.option("--section", help="Only this section.")
@workspace_option
@json_option
def alert_history_command(start: str | None, end: str | None, section: str | None, workspace: Path,
                          as_json: bool) -> None:  # fmt: skip
    """List the state changes of the alerts in a period, oldest first: time, section, rule,
    level, change, value, and who acknowledged, shelved or closed them.

    \b
    Example:
        slipwatch alerts history --from 2026-01-14 --to 2026-01-20 --section WC-060
    """
    from watch.alert_history import alert_history
    from watch.workspace import open_workspace

    with open_workspace(workspace).open_store(read_only=True) as store:
        rows = alert_history(store, parse_time_option(start, "--from"), parse_time_option(end, "--to"), section)
    if as_json:
        echo_json(rows)
        return
    if not rows:
        click.echo("no alert events in that period")
    for r in rows:
        value = "" if r["value"] is None else f" value {r['value']:.3g}"
        who = f" by {r['by']}" if r["by"] else ""
        note = f": {r['note']}" if r["note"] else ""
        click.echo(f"{r['time_utc']}  {r['section_id'] or '-':<8} {r['rule']:<24} {r['level'] or '-':<6} "
                   f"{r['what']}{value}{who}{note}")  # fmt: skip


@click.group("section-state", invoke_without_command=True)
@click.option("--section", help="Only this section.")
@workspace_option
@json_option
@click.pass_context
def section_state(ctx: click.Context, section: str | None, workspace: Path, as_json: bool) -> None:
    """List the service states set on the sections (in service, slipped, closed, under
    repair), oldest first; `set` records a new one.

    \b
    Example:
        slipwatch section-state
        slipwatch section-state set WC-060 slipped --at 2026-01-16T04:00Z --by "J. Ferrand" --note "rotational slip, 30 m of verge"
    """
    if ctx.invoked_subcommand is not None:
        return
    from dataclasses import asdict

    from watch.lifecycle import state_history
    from watch.workspace import open_workspace

    with open_workspace(workspace).open_store(read_only=True) as store:
        rows = state_history(store, section)
    if as_json:
        echo_json([asdict(r) for r in rows])
        return
    if not rows:
        click.echo("no section state set: every section is in service")
    for r in rows:
        click.echo(f"{r.time_utc}  {r.section_id:<8} {r.words:<13} by {r.by}: {r.note}")


@section_state.command("set")
@click.argument("section")
@click.argument("state", type=click.Choice(["in-service", "slipped", "closed", "under-repair"]))
@click.option("--by", required=True, help="Who sets it.")
@click.option("--note", required=True, help="Why: what happened or was done.")
@click.option("--at", "at", help="When the state began, ISO 8601 [default: now]; the time it is recorded is kept too.")
@workspace_option
@json_option
def set_state(section: str, state: str, by: str, note: str, at: str | None, workspace: Path, as_json: bool) -> None:
    """Set the service state of SECTION from now (or --at). A section that is not in service
    is not assessed and its open alerts stay open until closed with `alerts close`; a slipped
    section returns to service on a new version of its section file.

    \b
    Example:
        slipwatch section-state set WC-060 slipped --by "J. Ferrand" --note "rotational slip at the verge"
        slipwatch section-state set WC-060 in-service --by "J. Ferrand" --note "rebuilt; new geometry"
    """
    from dataclasses import asdict

    from watch.lifecycle import set_service_state
    from watch.workspace import open_workspace

    from watch.clock import SystemClock

    result = set_service_state(open_workspace(workspace), SystemClock(), section, state, by, note,
                               at=parse_time_option(at, "--at"))  # fmt: skip
    if as_json:
        echo_json(asdict(result))
    else:
        click.echo(f"{section}: {result.describe()}")
