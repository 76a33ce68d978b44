"""Commands about the station itself: config check."""

from __future__ import annotations

import click

from rxlog.cli.base import UserError, friendly_errors, main


@main.group("config")
def config_group():
    """Station config (TOML) tools."""


@config_group.command("check")
@click.option("--config", "config_path", envvar="RXLOG_CONFIG", metavar="FILE",
              type=click.Path(dir_okay=False), help="Station config (TOML). Default: $RXLOG_CONFIG.")
def config_check(config_path):
    """Validate a station config and print a one-line summary.

    \b
    Example:
      rxlog config check --config config/station.example.toml
    """
    # imported on use: `rxlog --help` and the other commands start without this stage
    from rxlog.station.config import ConfigError, load_config

    try:
        cfg = load_config(config_path)
    except ConfigError as e:
        raise UserError("invalid config:\n" + "\n".join("  " + p for p in e.problems)) from None
    st, sp = cfg["station"], cfg["spectra"]
    click.echo(f"{cfg.path}: ok — station {st['name']} at {st['latitude_deg']:.4f}°, "
               f"{st['longitude_deg']:.4f}°; {sp['fmin_mhz']}-{sp['fmax_mhz']} MHz in "
               f"{sp['channels']} channels every {sp['cadence_s']} s; receiver {cfg['receiver']['kind']}; "
               f"storage {cfg.storage_root}")


@main.command("demo")
@click.option("--out", "out", default="rxlog-demo", show_default=True, type=click.Path(file_okay=False),
              help="Folder for everything the demo writes (config, storage root, report).")
def demo(out):
    """Simulate a night at a fictional club station and run it through every stage.

    No hardware needed. Writes a working station config, the archive, the event store,
    the morning report, a forecast and exchange files under --out, and prints where.

    \b
    Example:
      rxlog demo --out rxlog-demo
      rxlog review --config rxlog-demo/birchwater/station.toml --serve
    """
    # imported on use: `rxlog --help` and the other commands start without this stage
    from rxlog.demo import run_demo

    friendly_errors(run_demo)(out)
