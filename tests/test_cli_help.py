"""Every command's --help shows a worked example and exits 0."""

import click
import pytest
from click.testing import CliRunner

from rxlog.cli import main


def all_commands(group, prefix=()):
    for name, cmd in group.commands.items():
        path = prefix + (name,)
        if isinstance(cmd, click.Group):
            yield from all_commands(cmd, path)
        else:
            yield path


@pytest.mark.parametrize("path", sorted(all_commands(main)), ids=" ".join)
def test_help_has_example(path):
    r = CliRunner().invoke(main, list(path) + ["--help"])
    assert r.exit_code == 0, r.output
    assert "Example" in r.output and f"rxlog {' '.join(path)}" in r.output, r.output
