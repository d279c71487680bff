"""`slipwatch demo`: build a fresh workspace from the bundled demo site and run the whole job."""

from __future__ import annotations

from pathlib import Path

import click


def register(group: click.Group) -> None:
    group.add_command(demo)


@click.command()
@click.option(
    "--workspace",
    "-w",
    type=click.Path(file_okay=False, path_type=Path),
    default=Path("demo_workspace"),
    show_default=True,
    help="Folder for the demo workspace; it is rebuilt from scratch.",
)
def demo(workspace: Path) -> None:
    """Build the demo workspace from config/ and demo_feeds/ and run the whole job on it.

    \b
    Example:
        slipwatch demo --workspace /tmp/slipwatch-demo
    """
    from watch.demo import run_demo

    run_demo(workspace, echo=click.echo)
