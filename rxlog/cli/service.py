"""Commands for the unattended logger: run it, ask how it is, install it under systemd."""

from __future__ import annotations

import click

from rxlog.cli.base import station_command


@station_command("run")
@click.option("--duration", type=click.FloatRange(min=0, min_open=True), metavar="SECONDS",
              help="Stop after this many seconds (default: run until SIGTERM or Ctrl-C).")
def run_command(cfg, duration):
    """Run the logger: receiver -> spectra -> archive -> detector -> event store.

    Logs go to stderr, one line per message, level first (the journal keeps them under
    systemd). A health row goes into the event store every [service] health_interval_s.
    SIGTERM or Ctrl-C stops it cleanly (exit status 0).

    \b
    Example (a simulated receiver, for two minutes):
      rxlog run --config station.toml --duration 120
    """
    from rxlog import service

    service.setup_logging(cfg["service"]["log_level"])
    summary = service.run(cfg, duration_s=duration)
    click.echo(f"stopped ({summary['stop_reason']}): {summary['spectra_archived']} spectra archived, "
               f"{summary['events']} events, {summary['receiver_gaps']} receiver gaps, "
               f"{summary['clock_steps']} clock steps")


@station_command("status")
def status_command(cfg):
    """Say whether the logger is running and show its latest health row.

    Exit status 0 whether or not it runs (2 only for a bad config).

    \b
    Example:
      rxlog status --config station.toml
    """
    from rxlog.health import station_status

    st = station_status(cfg)
    click.echo(f"logger: running (pid {st['pid']})" if st["pid"] else "logger: not running")
    h = st["health"]
    if h is None:
        click.echo(f"health: no health rows yet in {st['store']}")
        return
    click.echo(f"latest health: {h['time_utc']} ({st['age_s']:.0f} s ago)")
    for key in ("receiver_state", "clock_sync", "disk_free_mb", "cpu_percent", "queue_depth",
                "samples_received", "samples_dropped", "raw_archiving", "events", "note"):
        if h.get(key) not in (None, ""):
            click.echo(f"  {key}: {h[key]}")


@station_command("service")
@click.option("--out", "out_dir", type=click.Path(file_okay=False), metavar="DIR",
              help="Write the unit files into DIR instead of printing them.")
def service_command(cfg, out_dir):
    """Print (or write) the systemd units and udev rule for this station.

    rxlog.service runs `rxlog run` with a watchdog; rxlog-review.timer builds the
    morning report at [service] review_time; 60-rxlog-rtlsdr.rules lets the service
    user open RTL-SDR dongles.

    \b
    Example:
      rxlog service --config /etc/rxlog/station.toml --out /tmp/units
      sudo cp /tmp/units/rxlog* /etc/systemd/system/
      sudo cp /tmp/units/60-rxlog-rtlsdr.rules /etc/udev/rules.d/
    """
    from rxlog.units import units_for_config, write_units

    units = units_for_config(cfg)
    if out_dir:
        for p in write_units(units, out_dir):
            click.echo(str(p))
        return
    for name, text in units.items():
        click.echo(f"# ---- {name}")
        click.echo(text)
