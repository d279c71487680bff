"""`slipwatch backcalc` (back-analysis of a slip) and `slipwatch calibrate` (new parameter
versions from its result)."""

from __future__ import annotations

import getpass
from pathlib import Path

import click

from watch.cli import echo_json, json_option, workspace_option


def register(group: click.Group) -> None:
    group.add_command(backcalc)
    group.add_command(calibrate)


@click.command()
@click.argument("case_file", type=click.Path(dir_okay=False, path_type=Path))
@workspace_option
@click.option("--plot", "plot_file", type=click.Path(dir_okay=False, path_type=Path),
              default=None, help="Draw the locus with the history band and the section with the "
              "observed and back-calculated surfaces to this PNG file.")
@click.option("--save", "save_file", type=click.Path(dir_okay=False, path_type=Path),
              default=None, help="Write the result as JSON to this file (for `slipwatch calibrate`).")
@click.option("--no-progress", is_flag=True, help="Do not show the progress bar.")
@json_option
def backcalc(case_file: Path, workspace: Path, plot_file, save_file, no_progress: bool,
             as_json: bool) -> None:
    """Back-analyse the slip described by CASE_FILE: the FoS = 1 locus of the material's
    strength, the best fit to the observed surface, the range consistent with the times the
    slope stood, and the sensitivity to water level and unit weight.

    \b
    Example:
        slipwatch backcalc slips/wc_060_2026-01.toml --plot wc060_back.png --save wc060.json
    """
    from dataclasses import replace

    from watch.backcalc import format_report, plot_back_analysis, result_to_dict, run_case, save_result
    from watch.clock import SystemClock
    from watch.workspace import open_workspace

    ws = open_workspace(workspace)
    outcome = run_case(ws, case_file, SystemClock(), progress=not no_progress and not as_json)
    if plot_file is not None:
        outcome = replace(outcome, plot=str(plot_back_analysis(outcome, plot_file)))
    if save_file is not None:
        save_result(outcome, save_file)
    if as_json:
        echo_json(result_to_dict(outcome))
    else:
        click.echo(format_report(outcome))
        if save_file is not None:
            click.echo(f"Result written to {save_file}")


@click.command()
@click.argument("result_file", type=click.Path(dir_okay=False, path_type=Path))
@click.option("--sections", "-s", "section_ids", required=True, multiple=True,
              help="Section id to calibrate; repeat the option or separate ids by spaces or commas.")
@click.option("--by", "who", default=None,
              help="Who decides the calibration [default: the login name].")
@click.option("--override", "override", default=None, metavar="REASON",
              help="Store the calibration although a check failed, for this reason (recorded "
              "with the calibration and shown wherever calibrations are listed).")
@workspace_option
@json_option
def calibrate(result_file: Path, section_ids, who, override, workspace: Path,
              as_json: bool) -> None:
    """Store the best-fit strength of a back-analysis result (RESULT_FILE, written by
    `slipwatch backcalc --save`) as a new parameter version of each section named, with the
    case, the date and who decided it. Later assessments use the new version; earlier ones keep
    the version they used.

    Refused (nothing stored, exit status 1) when the result fails its own consistency checks,
    or when a section named, not itself a section of the slip, would have failed with the new
    strength at one of the worst times of its stored record; --override REASON stores it
    anyway and records the reason.

    \b
    Example:
        slipwatch calibrate wc060.json --sections "WC-040 WC-080" --by "A. Engineer"
    """
    from watch.backcalc import load_result
    from watch.clock import SystemClock
    from watch.parameters import calibrate as calibrate_sections
    from watch.workspace import open_workspace

    ids = [part for text in section_ids for part in text.replace(",", " ").split()]
    ws = open_workspace(workspace)
    data = load_result(result_file)
    with ws.open_store() as store:
        done = calibrate_sections(ws, store, data, ids, who or getpass.getuser(),
                                  SystemClock().now(), override=override)
    if as_json:
        echo_json([{
            "section_id": c.section_id, "material": c.material, "version": c.version,
            "section_version_id": c.version_id, "previous_version_id": c.previous_version_id,
            "before": c.before, "after": c.after, "provenance": c.provenance,
            "checks": list(c.checks), "override_reason": c.override_reason,
        } for c in done])  # fmt: skip
        return
    for c in done:
        click.echo(f"{c.section_id}: {c.material!r} {_strength(c.before)} -> {_strength(c.after)}"
                   f" (parameter version {c.version}, id {c.version_id})")
        for check in c.checks:
            click.echo(f"  [{'pass' if check['passed'] else 'FAIL'}] {check['detail']}")
    if done:
        click.echo(f"Provenance: {done[0].provenance}")
        if done[0].override_reason:
            click.echo(f"Override recorded: {done[0].override_reason}")


def _strength(values: dict) -> str:
    if values["model"] == "undrained":
        return f"Su {values['undrained_strength_kpa']:.2f} kPa"
    return f"c' {values['cohesion_kpa']:.2f} kPa, phi' {values['friction_angle_deg']:.2f} deg"
