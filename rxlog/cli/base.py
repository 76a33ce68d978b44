"""The click group and what every command shares: --config, clean errors, one reading of
times, and the older spellings of renamed options.

Commands stay thin: parse options, call one library function, print. Known failures
(``ConfigError``, ``RxlogError``) and mistakes on the command line (a missing option, a
value of the wrong kind) become a one-line message and exit status 2, never a traceback
or click's usage block.
"""

from __future__ import annotations

import datetime as dt
import functools
import math
import time
import zoneinfo

import click

from rxlog import __version__
from rxlog.errors import RxlogError
from rxlog.station.config import ConfigError, load_config


class UserError(click.ClickException):
    exit_code = 2

    def show(self, file=None):
        click.echo(f"rxlog: {self.format_message()}", err=True)


def notice(text: str) -> None:
    """One line on stderr that is not an error (an older spelling, a reading of a value)."""
    click.echo(f"rxlog: {text}", err=True)


def _usage_error(e: click.UsageError) -> UserError:
    """click's usage error -> rxlog's one line: command, what was wrong, where to look."""
    names, c = [], e.ctx
    while c is not None and c.parent is not None:
        names.append(c.info_name)
        c = c.parent
    names.reverse()
    param = getattr(e, "param", None)
    if isinstance(e, click.MissingParameter) and param is not None and e.ctx is not None:
        if isinstance(param, click.Option):
            what = f"{max(param.opts, key=len)} {param.make_metavar(e.ctx)}"
        else:
            what = param.make_metavar(e.ctx)
        message = f"missing {what}"
    else:
        message = e.format_message().rstrip(".")                 # click's sentence, as a clause
        message = message[:1].lower() + message[1:]
    where = f"{' '.join(names)}: " if names else ""
    return UserError(f"{where}{message} (see `{' '.join(['rxlog', *names])} --help`)")


class _ShortUsageErrors:
    def make_context(self, info_name, args, parent=None, **extra):
        try:
            return super().make_context(info_name, args, parent=parent, **extra)
        except click.exceptions.NoArgsIsHelpError:
            raise
        except click.UsageError as e:
            raise _usage_error(e) from None


class RxlogCommand(_ShortUsageErrors, click.Command):
    """A command whose usage mistakes are one line and exit status 2."""


class RxlogGroup(_ShortUsageErrors, click.Group):
    """A group of such commands (its subgroups too); an unknown command is one line as well."""

    command_class = RxlogCommand
    group_class = type

    def resolve_command(self, ctx, args):
        try:
            return super().resolve_command(ctx, args)
        except click.UsageError as e:
            raise _usage_error(e) from None


@click.group(cls=RxlogGroup, context_settings={"help_option_names": ["-h", "--help"], "max_content_width": 100})
@click.version_option(__version__, prog_name="rxlog")
def main():
    """rxlog: unattended logger and burst detector for decametric Jupiter and solar
    radio monitoring (16-24 MHz).

    \b
    First run, no hardware needed:
      rxlog demo --out rxlog-demo
    Station commands take --config FILE (default: $RXLOG_CONFIG).
    Options: --out PATH for what a command writes, frequencies in MHz (--center-mhz),
    times ISO 8601 with Z or an offset, 'now', or a date (the station's night of that date).
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


# --- older spellings -------------------------------------------------------------------

def renamed(*old: str, to: str, dest: str, convert=None, value_type=None, hint: str = ""):
    """Accept an option's older spelling (``old``, e.g. "-o", "--output") for a while.

    The old spelling is hidden from --help; when it is used, one line on stderr gives the
    new spelling (``to``) and the value goes to parameter ``dest``, through ``convert``
    when the unit changed (``hint`` names the old unit). Giving both spellings is an error.
    """
    key = f"old_{dest}"
    spelled = "/".join(old)

    def decorate(func):
        @click.option(*old, key, type=value_type, hidden=True)
        @functools.wraps(func)
        def wrapper(*args, **kwargs):
            value = kwargs.pop(key)
            if value is not None:
                if kwargs.get(dest) is not None:
                    raise UserError(f"{spelled} is the older spelling of {to}; give only {to}")
                kwargs[dest] = convert(value) if convert else value
                shown = f"{to} {kwargs[dest]:g}" if isinstance(kwargs[dest], float) else to
                notice(f"{spelled}{hint} is now spelled {shown}; the old spelling will go away")
            return func(*args, **kwargs)

        return wrapper

    return decorate


# --- times -----------------------------------------------------------------------------

TIME_HELP = "ISO 8601 with Z or an offset, 'now', or a date (local noon, when that night begins)"


def parse_time_option(value: str | None, option: str, cfg=None) -> float | None:
    """A time option -> POSIX seconds, or a clean error naming the option.

    One reading for every command: ISO 8601 with 'Z' or an offset
    (2026-12-01T18:00Z); 'now'; or a plain date (2026-12-01), meaning local noon of
    that date at the station (``cfg``'s [station] timezone), when the night named by
    that date begins. A time without a zone is the older spelling: it is read as UTC
    with a notice on stderr.
    """
    if value is None:
        return None
    text = str(value).strip()
    if text.lower() == "now":
        return float(math.floor(time.time()))
    if "T" not in text.upper() and ":" not in text and " " not in text:
        try:
            day = dt.date.fromisoformat(text)
        except ValueError:
            pass
        else:
            name = (cfg or {}).get("station", {}).get("timezone", "UTC")
            return dt.datetime(day.year, day.month, day.day, 12, 0, tzinfo=zoneinfo.ZoneInfo(name)).timestamp()
    iso = text[:-1] + "+00:00" if text.endswith(("Z", "z")) else text
    try:
        when = dt.datetime.fromisoformat(iso)
    except ValueError:
        raise UserError(f"{option}: not an ISO 8601 time, 'now' or a date: {text!r} "
                        "(e.g. 2026-12-01T22:00Z, 2026-12-01T23:00+01:00, now, 2026-12-01)") from None
    if when.tzinfo is None:
        notice(f"{option} {text}: no zone given, read as UTC; write {text}Z (or an offset such as +01:00)")
        when = when.replace(tzinfo=dt.timezone.utc)
    return when.timestamp()
