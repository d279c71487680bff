"""`slipwatch analyse`: critical-surface search on one section file, every method on it."""

from __future__ import annotations

from pathlib import Path

import click

from solver.methods import METHOD_NAMES
from watch.cli import echo_json, json_option


def register(group: click.Group) -> None:
    group.add_command(analyse)


@click.command()
@click.argument("section_file", type=click.Path(dir_okay=False, path_type=Path))
@click.option(
    "--method",
    type=click.Choice(METHOD_NAMES),
    default=None,
    help="Governing method that ranks the trial surfaces "
    "[default: the section's [search] method, else bishop_simplified].",
)
@click.option("--non-circular", is_flag=True,
              help="Also optimise a non-circular (polyline) surface from the best circle.")
@click.option("--plot", "plot_file", type=click.Path(dir_okay=False, path_type=Path),
              default=None, help="Draw the section and the critical surface to this PNG file.")
@json_option
def analyse(section_file: Path, method, non_circular: bool, plot_file, as_json: bool) -> None:
    """Find the critical slip surface of SECTION_FILE and report its factor of safety by
    every method.

    \b
    Example:
        slipwatch analyse sections/wc_040.toml --method spencer --plot wc_040.png
    """
    from watch.analysis import analyse_section, format_report

    result = analyse_section(section_file, method, non_circular=non_circular, plot=plot_file)
    if as_json:
        echo_json(result.to_dict())
    else:
        click.echo(format_report(result))
