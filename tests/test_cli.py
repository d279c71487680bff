"""The command line in-process (click's runner): every command has help with an example, and
user errors end in one line and a non-zero exit."""

import click
from click.testing import CliRunner

from watch.cli import main


def all_commands(group: click.Group, prefix=()):
    for name, command in group.commands.items():
        yield prefix + (name,), command
        if isinstance(command, click.Group):
            yield from all_commands(command, prefix + (name,))


def test_every_command_has_help_with_an_example():
    runner = CliRunner()
    for path, command in all_commands(main):
        result = runner.invoke(main, [*path, "--help"])
        assert result.exit_code == 0, (path, result.output)
        assert command.help, f"command {' '.join(path)} has no help text"
        assert "Example" in command.help, f"command {' '.join(path)} has no example in its help"


def test_unknown_command_fails_with_non_zero_exit():
    result = CliRunner().invoke(main, ["no-such-command"])
    assert result.exit_code != 0
    assert "No such command" in result.output
