"""The `slipwatch` command line: a thin layer over the `watch` and `solver` APIs.

Every command opens the workspace, calls one library function and prints its result. Library
errors (``watch.errors.UserError`` and ``solver.errors.SolverError``) become one clear line on
stderr and exit status 1; ``--debug`` shows the traceback instead.

Commands are registered from small modules (``watch/commands_*.py``) listed in
``_COMMAND_MODULES`` so that each topic keeps its commands beside its code.
"""

from __future__ import annotations

import importlib
import json
import os
import sys
from pathlib import Path

import click

from solver.errors import SolverError
from watch.errors import UserError

WORKSPACE_ENV = "SLIPWATCH_WORKSPACE"

# Each module defines `register(group)`, which adds its commands to the top-level group.
_COMMAND_MODULES = [
    "watch.commands_demo",
    "watch.commands_store",
    "watch.commands_corrections",
    "watch.commands_analyse",
    "watch.commands_forecast",
    "watch.commands_daemon",
    "watch.commands_board",
    "watch.commands_backcalc",
    "watch.commands_watch",
]


class _Group(click.Group):
    """Turns library errors into one line and a non-zero exit (traceback with --debug)."""

    def invoke(self, ctx: click.Context):
        try:
            return super().invoke(ctx)
        except (UserError, SolverError, OSError) as error:
            if isinstance(error, BrokenPipeError):
                raise  # the reader went away (`slipwatch status | head`): click ends quietly
            if ctx.obj and ctx.obj.get("debug"):
                raise
            message = str(error) or error.__class__.__name__
            click.echo(f"slipwatch: error: {message}", err=True)
            ctx.exit(1)


    def main(self, *args, **kwargs):
        try:
            return super().main(*args, **kwargs)
        finally:
            _flush_quietly()


def _flush_quietly() -> None:
    """Flush standard output; when its reader has gone (a closed pipe), send what is left to
    the null device so that neither we nor the interpreter's exit print a broken-pipe error."""
    try:
        sys.stdout.flush()
    except BrokenPipeError:
        null = os.open(os.devnull, os.O_WRONLY)
        try:
            os.dup2(null, sys.stdout.fileno())
        except (OSError, ValueError, AttributeError):
            pass  # not a real file (an in-process runner): nothing is flushed at exit either
        finally:
            os.close(null)


@click.group(cls=_Group, context_settings={"help_option_names": ["-h", "--help"]})
@click.option("--debug", is_flag=True, help="Show the full traceback when something fails.")
@click.version_option(package_name="slipwatch")
@click.pass_context
def main(ctx: click.Context, debug: bool) -> None:
    """slipwatch: wet-season watch of existing earth slopes.

    Ingests piezometer and rain-gauge feeds, rebuilds the piezometric lines of each
    cross-section, recomputes factors of safety by limit-equilibrium methods of slices,
    raises alerts and inspection requests, and back-analyses slips.

    Results are decision support only: they depend on the model and its inputs and do not
    replace a qualified engineer's judgement or local codes.

    \b
    Example:
        slipwatch demo --workspace /tmp/slipwatch-demo
    """
    ctx.ensure_object(dict)
    ctx.obj["debug"] = debug


def workspace_option(function):
    """The common ``--workspace DIR`` option: default $SLIPWATCH_WORKSPACE, else the current
    folder."""
    return click.option(
        "--workspace",
        "-w",
        type=click.Path(file_okay=False, path_type=Path),
        default=lambda: os.environ.get(WORKSPACE_ENV, "."),
        show_default="$SLIPWATCH_WORKSPACE or the current folder",
        help="Workspace folder (made by `slipwatch init`).",
    )(function)


def json_option(function):
    """The common ``--json`` flag: print machine-readable results instead of text."""
    return click.option("--json", "as_json", is_flag=True, help="Print the result as JSON.")(
        function
    )


def echo_json(value) -> None:
    """Print ``value`` as indented JSON (dates and numpy numbers made plain)."""
    click.echo(json.dumps(value, indent=2, default=_json_default))


def _json_default(value):
    if hasattr(value, "isoformat"):
        return value.isoformat()
    if hasattr(value, "item"):
        return value.item()
    if hasattr(value, "tolist"):
        return value.tolist()
    if isinstance(value, Path):
        return str(value)
    raise TypeError(f"cannot write {type(value).__name__} as JSON")


def _register_commands() -> None:
    for module_name in _COMMAND_MODULES:
        importlib.import_module(module_name).register(main)


_register_commands()

if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
