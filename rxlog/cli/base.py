"""The click group and what every command shares: --config, and clean errors.

Commands stay thin: parse options, call one library function, print. Known failures
(``ConfigError``, ``RxlogError``) become a message and exit status 2, never a traceback.
"""

from __future__ import annotations

import functools

import click

from rxlog import __version__
from rxlog.config import ConfigError, load_config
from rxlog.errors import RxlogError


class UserError(click.ClickException):
    exit_code = 2

    def show(self, file=None):
        click.echo(f"rxlog: {self.format_message()}", err=True)


@click.group(context_settings={"help_option_names": ["-h", "--help"], "max_content_width": 100})
@click.version_option(__version__, prog_name="rxlog")
def main():
    """rxlog: unattended logger and burst detector for decametric Jupiter and solar
    radio monitoring (16-24 MHz).

    \b
    First run, no hardware needed:
      rxlog demo --out rxlog-demo
    Station commands take --config FILE (default: $RXLOG_CONFIG).
    """


def friendly_errors(func):
    """Turn known failures into a short message and exit status 2."""

    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        try:
            return func(*args, **kwargs)
        except ConfigError as e:
            raise UserError("invalid config:\n" + "\n".join("  " + p for p in e.problems)) from None
        except RxlogError as e:
            raise UserError(str(e)) from None

    return wrapper


def config_option(func):
    """Add --config FILE (or $RXLOG_CONFIG) and pass the loaded Config as ``cfg``."""

    @click.option("--config", "config_path", envvar="RXLOG_CONFIG", metavar="FILE",
                  type=click.Path(dir_okay=False), help="Station config (TOML). Default: $RXLOG_CONFIG.")
    @functools.wraps(func)
    def wrapper(*args, config_path=None, **kwargs):
        try:
            cfg = load_config(config_path)
        except ConfigError as e:
            raise UserError("invalid config:\n" + "\n".join("  " + p for p in e.problems)) from None
        return func(*args, cfg=cfg, **kwargs)

    return wrapper


def station_command(*args, **kwargs):
    """``@station_command(name)``: a command of ``main`` with --config and clean errors."""

    def decorate(func):
        return main.command(*args, **kwargs)(config_option(friendly_errors(func)))

    return decorate


def parse_time_option(value: str | None, option: str) -> float | None:
    """ISO 8601 option text -> POSIX seconds, or a clean error naming the option."""
    from rxlog.timeutil import parse_iso

    if value is None:
        return None
    try:
        return parse_iso(value)
    except ValueError as e:
        raise UserError(f"{option}: {e}") from None
