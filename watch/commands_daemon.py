"""Commands of the service: `run` (the daemon) and `deliveries` (the notification messages)."""

from __future__ import annotations

import sys
from pathlib import Path

import click

from watch.cli import echo_json, json_option, workspace_option


def register(group: click.Group) -> None:
    for command in (run, deliveries):
        group.add_command(command)


@click.command()
@workspace_option
@click.option("--interval", type=float, metavar="MINUTES",
              help="Minutes between assessment cycles (default: [daemon] interval_minutes, 15).")  # fmt: skip
@click.option("--once", is_flag=True, help="Run one cycle and deliver what is due, then exit.")
@click.option("--at", "at", help="Run on a clock set to this time, ISO 8601 (UTC unless it carries an offset), "
                                 "as `assess --at` does: one cycle and delivery at it, every record "
                                 "carrying it, then exit (or step on with --until).")
@click.option("--until", "until", help="With --at: step the clock on by the interval and run a cycle at each "
                                       "step up to this time, ISO 8601.")
def run(workspace: Path, interval: float | None, once: bool, at: str | None, until: str | None) -> None:
    """Watch the workspace: every interval ingest the feeds, assess every section, raise
    alerts and send the notifications due; in between, send grouped and retried messages.
    Logs to slipwatch.log in the workspace and to standard error. Stop with SIGTERM or
    Ctrl-C: the running cycle is finished first (at most [daemon] stop_timeout_seconds, 60).
    With --once, exits with status 1 when the cycle, the ingest or a section failed.

    \b
    Example:
        slipwatch run --workspace /srv/slipwatch/quillmarsh --interval 10
        slipwatch run --once -w /srv/slipwatch/quillmarsh
        slipwatch run --at 2026-01-14T00:00Z --until 2026-01-20T00:00Z --interval 360
    """
    from watch.commands_watch import parse_time_option, clock_at
    from watch.daemon import run_daemon
    from watch.workspace import open_workspace

    first = None if at is None else clock_at(at).now()  # refuses a time later than now
    last = parse_time_option(until, "--until")
    sys.exit(run_daemon(open_workspace(workspace), interval_minutes=interval, once=once, echo=True,
                        at=first, until=last))  # fmt: skip


@click.command()
@workspace_option
@click.option("--failed", "only_failed", is_flag=True, help="Only messages given up after their last attempt.")
@click.option("--pending", "only_pending", is_flag=True, help="Only messages still waiting to go out.")
@click.option("--retry", metavar="KEY|all", help="Queue a failed message (or all failed ones) again.")
@click.option("--limit", type=click.IntRange(min=1), default=50, show_default=True, help="Newest N messages.")
@json_option
def deliveries(workspace: Path, only_failed: bool, only_pending: bool, retry: str | None, limit: int,
               as_json: bool) -> None:  # fmt: skip
    """List the notification messages sent or waiting per receiver (log, e-mail, webhook):
    status, attempts, last error; or queue failed ones again with --retry.

    \b
    Example:
        slipwatch deliveries --failed -w /srv/slipwatch/quillmarsh
        slipwatch deliveries --retry all -w /srv/slipwatch/quillmarsh
    """
    from watch.clock import SystemClock
    from watch.errors import UserError
    from watch.notify import retry_failed
    from watch.workspace import open_workspace

    ws = open_workspace(workspace)
    if retry is not None:
        with ws.open_store() as store:
            count = retry_failed(store, SystemClock(), None if retry == "all" else retry)
        if count == 0:
            raise UserError(f"no failed message {'at all' if retry == 'all' else repr(retry)} to retry; "
                            "see `slipwatch deliveries --failed`")  # fmt: skip
        click.echo(f"{count} deliveries queued again; `slipwatch run` sends them on its next turn")
        return
    if only_failed and only_pending:
        raise click.UsageError("give --failed or --pending, not both")
    status = "failed" if only_failed else "pending" if only_pending else None
    with ws.open_store(read_only=True) as store:
        rows = store.delivery_messages(status, limit)
    if as_json:
        echo_json(rows)
        return
    if not rows:
        click.echo("no messages" + (f" {status}" if status else ""))
    for r in rows:
        when = r["sent_utc"] or f"next try {r['next_attempt_utc']}"
        line = (f"{r['message_key']}  {r['status']:<7} {r['channel']:<7} {r['recipient']}  "
                f"{r['notifications']} notification(s), {r['attempts']} attempt(s), {when}")  # fmt: skip
        if r["last_error"] and r["status"] != "sent":
            line += f"; last error: {r['last_error']}"
        click.echo(line)
