"""Commands of the status board and the reports: board, serve, report, plot."""

from __future__ import annotations

from datetime import datetime, timedelta
from pathlib import Path

import click

from watch.cli import echo_json, json_option, workspace_option
from watch.errors import UserError

#: Default port of `slipwatch serve`.
DEFAULT_PORT = 8640
#: Default period of a report or plot: the last this many days before --to.
DEFAULT_PERIOD_DAYS = 183


def register(group: click.Group) -> None:
    for command in (board, serve, report, plot):
        group.add_command(command)


def _at_option(function):
    return click.option(
        "--at", "at", default=None,
        help="Make the page as at this time, ISO 8601 (UTC unless it carries an offset) "
        "[default: now, from the system clock].",
    )(function)


def _moment(text: str | None, option: str) -> datetime | None:
    from watch.commands_store import utc_option
    from watch.store import parse_utc_text

    value = utc_option(text, option)
    return None if value is None else parse_utc_text(value)


def _now(at: str | None) -> datetime:
    from watch.clock import SystemClock

    return _moment(at, "--at") or SystemClock().now()


def _period(start: str | None, end: str | None, at: str | None) -> tuple[datetime, datetime, datetime]:
    now = _now(at)
    last = _moment(end, "--to") or now
    first = _moment(start, "--from") or last - timedelta(days=DEFAULT_PERIOD_DAYS)
    return first, last, now


@click.command()
@workspace_option
@click.option("--out", type=click.Path(file_okay=False, path_type=Path), default=None,
              help="Folder for the site [default: board/ in the workspace].")
@_at_option
@json_option
def board(workspace: Path, out: Path | None, at: str | None, as_json: bool) -> None:
    """Write the status board: a self-contained HTML site (overview worst first, a page per
    section, PNG figures) that works offline, e.g. from an intranet share.

    \b
    Example:
        slipwatch board --workspace /srv/slipwatch/quillmarsh --out /srv/share/board
    """
    from watch.board import build_board
    from watch.workspace import open_workspace

    result = build_board(open_workspace(workspace), _now(at), out)
    if as_json:
        echo_json(result.to_dict())
        return
    for s in result.status.sections:
        fos = "not assessed" if s.latest is None or s.latest.fos is None else f"FoS {s.latest.fos:.2f}"
        click.echo(f"  {s.id:<12} {s.level.word:<14} {fos}")
    click.echo(f"board written: {result.out / 'index.html'} ({len(result.pages)} pages, "
               f"{len(result.images)} figures)")


@click.command()
@workspace_option
@click.option("--dir", "folder", type=click.Path(file_okay=False, path_type=Path), default=None,
              help="Board folder to serve [default: board/ in the workspace].")
@click.option("--port", default=DEFAULT_PORT, show_default=True, type=click.IntRange(0, 65535),
              help="TCP port (0: any free port).")
@click.option("--host", default="127.0.0.1", show_default=True,
              help="Address to listen on; the default serves this computer only.")
@click.option("--build/--no-build", default=True, show_default=True,
              help="Write the board before serving it.")
def serve(workspace: Path, folder: Path | None, port: int, host: str, build: bool) -> None:
    """Serve the status board over HTTP (read-only, static files) until Ctrl-C.

    \b
    Example:
        slipwatch serve --workspace /srv/slipwatch/quillmarsh --port 8640
    """
    from watch.board import build_board, default_board_dir, serve_board
    from watch.workspace import open_workspace

    ws = open_workspace(workspace)
    folder = folder or default_board_dir(ws)
    if build:
        build_board(ws, _now(None), folder)
    if not (folder / "index.html").is_file():
        raise UserError(f"{folder} holds no board; write one with `slipwatch board`")
    server = serve_board(folder, host, port)
    if host not in ("127.0.0.1", "localhost", "::1"):
        click.echo(f"warning: serving on {host}: other computers can read the board", err=True)
    click.echo(f"serving {folder} at http://{host}:{server.server_address[1]}/ (Ctrl-C stops)")
    try:
        server.serve_forever()
    except KeyboardInterrupt:
        pass
    finally:
        server.server_close()


@click.command()
@click.argument("section")
@workspace_option
@click.option("--from", "start", help="Start of the period, ISO 8601 [default: 183 days before --to].")
@click.option("--to", "end", help="End of the period, ISO 8601 [default: now].")
@click.option("--pdf", "pdf", type=click.Path(dir_okay=False, path_type=Path), default=None,
              help="PDF file to write [default: reports/report_<section>_<from>_<to>.pdf].")
@_at_option
@json_option
def report(section: str, workspace: Path, start, end, pdf, at, as_json: bool) -> None:
    """Write the engineering report of SECTION for a period as a PDF: inputs, parameters and
    provenance, water lines, factor of safety by every method, slice table, plots, alerts.

    \b
    Example:
        slipwatch report WC-060 --from 2025-10-01 --to 2026-03-31 --pdf wc060_season.pdf
    """
    from watch.report import build_report
    from watch.workspace import open_workspace

    first, last, now = _period(start, end, at)
    result = build_report(open_workspace(workspace), section, first, last, now, pdf)
    if as_json:
        echo_json(result.to_dict())
        return
    click.echo(f"report written: {result.path} ({result.pages} pages)")


@click.group()
def plot() -> None:
    """Write single figures of a section as PNG files.

    \b
    Example:
        slipwatch plot fos WC-060 --from 2025-10-01 --out wc060_fos.png
    """


def _plot_options(function):
    for option in (
        click.argument("section"),
        workspace_option,
        click.option("--from", "start", help="Start of the period, ISO 8601 [default: 183 days before --to]."),
        click.option("--to", "end", help="End of the period, ISO 8601 [default: now]."),
        click.option("--out", type=click.Path(dir_okay=False, path_type=Path), default=None,
                     help="PNG file [default: reports/<figure>_<section>.png]."),
        _at_option,
        json_option,
    ):
        function = option(function)
    return function


def _plot(kind: str, section, workspace, start, end, out, at, as_json) -> None:
    from watch.board import plot_figure
    from watch.workspace import open_workspace

    first, last, now = _period(start, end, at)
    path = plot_figure(open_workspace(workspace), kind, section, first, last, now, out)
    if as_json:
        echo_json({"figure": kind, "section_id": section, "png": str(path)})
    else:
        click.echo(f"figure written: {path}")


@plot.command("section")
@_plot_options
def plot_section_command(section, workspace, start, end, out, at, as_json) -> None:
    """Draw SECTION with the water lines and critical surface of its lowest factor of safety
    in the period (and the water lines of the period's last assessment).

    \b
    Example:
        slipwatch plot section WC-060 --to 2026-01-20 --out wc060.png
    """
    _plot("section", section, workspace, start, end, out, at, as_json)


@plot.command("fos")
@_plot_options
def plot_fos_command(section, workspace, start, end, out, at, as_json) -> None:
    """Plot the factor of safety of SECTION through the period with its trigger levels and
    the daily rain at its gauge.

    \b
    Example:
        slipwatch plot fos WC-060 --from 2025-10-01 --to 2026-03-31
    """
    _plot("fos", section, workspace, start, end, out, at, as_json)


@plot.command("heads")
@_plot_options
def plot_heads_command(section, workspace, start, end, out, at, as_json) -> None:
    """Plot the piezometric heads of the piezometers of SECTION through the period.

    \b
    Example:
        slipwatch plot heads WC-040 --from 2026-01-01 --out wc040_heads.png
    """
    _plot("heads", section, workspace, start, end, out, at, as_json)
