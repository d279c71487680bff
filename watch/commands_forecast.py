"""`slipwatch forecast` (a storm's effect, rain to trigger level), `slipwatch calibrate-response`
(the piezometers' rainfall-response models) and `slipwatch rain` (a gauge's rain now)."""

from __future__ import annotations

from datetime import datetime, timezone
from pathlib import Path

import click

from watch.cli import echo_json, json_option, workspace_option
from watch.errors import ConfigError


def register(group: click.Group) -> None:
    for command in (forecast, calibrate_response, rain):
        group.add_command(command)


def _at_option(function):
    return click.option(
        "--at", "at", default=None, metavar="TIME",
        help="Time to start from, ISO 8601 (e.g. 2026-01-14T06:00Z; no zone means UTC) "
        "[default: now].",
    )(function)  # fmt: skip


def _time(text: str | None) -> datetime:
    if text is None:
        from watch.clock import SystemClock

        return SystemClock().now()
    try:
        moment = datetime.fromisoformat(text.replace("Z", "+00:00").replace("z", "+00:00"))
    except ValueError:
        raise ConfigError(f"--at {text!r} is not an ISO 8601 time such as 2026-01-14T06:00Z") from None
    return moment.replace(tzinfo=timezone.utc) if moment.tzinfo is None else moment


def _levels(values: tuple[str, ...]) -> dict[str, float]:
    levels = {}
    for item in (part for value in values for part in value.split(",") if part.strip()):
        name, _, number = item.partition("=")
        try:
            levels[name.strip()] = float(number)
        except ValueError:
            raise ConfigError(f"--levels {item!r} must be NAME=FOS, e.g. amber=1.3") from None
        if not name.strip():
            raise ConfigError(f"--levels {item!r} must be NAME=FOS, e.g. amber=1.3")
    return levels


@click.command()
@click.option("--rain", "depth_mm", type=float, default=None, metavar="DEPTH",
              help="Storm depth [mm], spread evenly over --over hours.")
@click.option("--over", "durations_h", type=float, multiple=True, metavar="HOURS",
              help="Storm duration [h]; with --to-threshold give it once per duration "
              "[default there: 24 and 48].")
@click.option("--to-threshold", is_flag=True,
              help="Find the smallest storm over each --over duration that takes each section "
              "to each FoS trigger level.")
@click.option("--levels", "levels", multiple=True, metavar="NAME=FOS",
              help="FoS trigger levels for --to-threshold, e.g. --levels amber=1.3,red=1.15 "
              "[default: the site file's [[trigger]] rules with quantity = \"fos\"].")
@click.option("--max-depth", type=float, default=None, metavar="MM",
              help="Largest storm depth --to-threshold considers [mm] [default: 250].")
@click.option("--section", "sections", multiple=True, metavar="ID",
              help="Section to forecast (repeatable) [default: every section].")
@_at_option
@workspace_option
@json_option
def forecast(depth_mm, durations_h, to_threshold, levels, max_depth, sections, at, workspace: Path,
             as_json: bool) -> None:
    """Forecast what a storm would do: the heads, water lines and factor of safety a uniform
    storm brings to each section from its state now (or --at), with the lowest FoS and when it
    comes. Sections whose piezometers have no usable rainfall-response model are refused, with
    the reason (run `slipwatch calibrate-response` first).

    With --to-threshold: the smallest storm depth over each duration that takes the FoS to
    each trigger level, or "none up to" the largest depth considered.

    \b
    Example:
        slipwatch forecast --rain 60 --over 24 --section WC-040 --at 2026-01-14T06:00Z
        slipwatch forecast --to-threshold --over 24 --over 48 --levels amber=1.3,red=1.15
    """
    from watch.forecast import DEFAULT_MAX_STORM_MM, forecast_site, rain_to_trigger_site
    from watch.workspace import open_workspace

    ws, moment = open_workspace(workspace), _time(at)
    if to_threshold:
        if depth_mm is not None:
            raise ConfigError("give either --rain (a storm to forecast) or --to-threshold, not both")
        report = rain_to_trigger_site(
            ws, durations_h or (24.0, 48.0), moment, levels=_levels(levels) or None,
            sections=sections, max_depth_mm=max_depth or DEFAULT_MAX_STORM_MM,
        )  # fmt: skip
    else:
        if depth_mm is None or len(durations_h) != 1:
            raise ConfigError("give a storm: --rain DEPTH --over HOURS (one duration), or "
                              "--to-threshold")
        if levels or max_depth is not None:
            raise ConfigError("--levels and --max-depth go with --to-threshold")
        report = forecast_site(ws, depth_mm, durations_h[0], moment, sections=sections)
    if as_json:
        echo_json(report.to_dict())
    else:
        click.echo(report.describe())


@click.command("calibrate-response")
@click.option("--days", type=float, default=None, metavar="DAYS",
              help="Longest history to calibrate on [days] [default: 90]; a shorter record "
                   "is used from its start.")
@click.option("--instrument", "instruments", multiple=True, metavar="ID",
              help="Piezometer to calibrate (repeatable) [default: every piezometer].")
@_at_option
@workspace_option
@json_option
def calibrate_response(days, instruments, at, workspace: Path, as_json: bool) -> None:
    """Calibrate each piezometer's rainfall-to-head model on its stored history up to now (or
    --at) and store it with its fit (Nash-Sutcliffe efficiency, RMSE). A model whose fit is
    too poor is stored but may not forecast.

    \b
    Example:
        slipwatch calibrate-response --at 2026-01-14T06:00Z --days 60
    """
    from watch.forecast import DEFAULT_CALIBRATION_DAYS, calibrate_site
    from watch.workspace import open_workspace

    moment = _time(at)
    results = calibrate_site(open_workspace(workspace), moment, instruments=instruments or None,
                             days=days or DEFAULT_CALIBRATION_DAYS,
                             calibrated_utc=_time(None))  # fmt: skip
    if as_json:
        echo_json([c.to_dict() for c in results])
        return
    for c in results:
        model = c.fit.model if c.fit else None
        fitted = (f"NSE {model.nse:.3f}, RMSE {model.rmse_m:.3f} m, gain {model.gain_m_per_mm:.4f} "
                  f"m/mm, recession {model.recession_h:.0f} h, lag {model.lag_steps} step(s)"
                  if model else "no fit")  # fmt: skip
        verdict = "usable" if c.usable else "NOT usable"
        click.echo(f"{c.instrument_id} (gauge {c.gauge_id}): {verdict}; {fitted}; {c.reason}")


@click.command()
@click.argument("gauge")
@_at_option
@workspace_option
@json_option
def rain(gauge: str, at, workspace: Path, as_json: bool) -> None:
    """Rain at GAUGE up to now (or --at): totals over 1 h, 24 h, 3, 7 and 30 days, intensity,
    and the rain event under way (ended by 48 h without rain) against the Caine (1980) and
    Guzzetti et al. (2008) intensity-duration curves.

    \b
    Example:
        slipwatch rain RG-WC --at 2026-01-16T06:00Z
    """
    from watch.forecast import rainfall_state_of
    from watch.workspace import open_workspace

    state = rainfall_state_of(open_workspace(workspace), gauge, _time(at))
    if as_json:
        echo_json(state.to_dict())
    else:
        click.echo(state.describe())
