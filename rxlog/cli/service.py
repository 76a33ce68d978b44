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
    # imported on use: `rxlog --help` and the other commands start without this stage
    from rxlog.station import journal, supervise

    journal.setup_logging(cfg["service"]["log_level"])
    summary = supervise.run(cfg, duration_s=duration)
    click.echo(f"stopped ({summary['stop_reason']}): {summary['spectra_archived']} spectra archived, "
               f"{summary['events']} events, {summary['receiver_gaps']} receiver gaps, "
               f"{summary['clock_steps']} clock steps")


@station_command("status")
def status_command(cfg):
    """Say whether the logger is running and how the station has been doing.

    Shows the logger's uptime and starts in the last 24 h, its latest health row, the
    last archived spectrum and the file holding it, the last event, what was dropped in
    the last 24 h, and how many days of disk are left at the archive's growth rate
    ("unknown" with less than 6 h of archive in the last day). Reads the event store and
    the archive without changing them, and the channel groups (0.25 MHz) the RFI mask took
    out most in the last 24 h. Exit status 0 whether or not it runs (2 only for a bad
    config).

    \b
    Example:
      rxlog status --config station.toml
    """
    # imported on use: `rxlog --help` and the other commands start without this stage
    from rxlog.station.status import (
        describe_disk,
        describe_worst,
        format_duration,
        station_status,
    )

    st = station_status(cfg)
    starts = f"{st['starts_24h']} start{'s' if st['starts_24h'] != 1 else ''} in the last 24 h"
    if st["pid"]:
        up = format_duration(st["uptime_s"]) if st["uptime_s"] is not None else "unknown"
        click.echo(f"logger: running (pid {st['pid']}), up {up}; {starts}")
    else:
        click.echo(f"logger: not running; {starts}")
    h = st["health"]
    if h is None:
        click.echo(f"health: no health rows yet in {st['store']}")
    else:
        click.echo(f"latest health: {h['time_utc']} ({st['age_s']:.0f} s ago)")
        for key in ("receiver_state", "clock_sync", "disk_free_mb", "cpu_percent", "queue_depth",
                    "samples_received", "samples_dropped", "raw_archiving", "spectra_archived",
                    "spectra_buffered", "events", "note"):
            if h.get(key) not in (None, ""):
                click.echo(f"  {key}: {h[key]}")
    a = st["last_archived"]
    if st["archive_error"]:
        click.echo(f"last archived spectrum: unknown ({st['archive_error']})")
    else:
        click.echo(f"last archived spectrum: {a['time_utc']} in {a['path']}" if a
                   else f"last archived spectrum: none in {cfg.archive_dir}")
    ev = st["last_event"]
    click.echo(f"last event: {ev['event_id']} ({ev['class']}) at {ev['peak_utc']}" if ev else "last event: none")
    d = st["dropped_24h"]
    if d is not None:
        rx, lost = d["samples_received"], d["samples_dropped"]
        share = f" ({100.0 * lost / (rx + lost):.3g} %)" if rx + lost else ""
        click.echo(f"dropped in the last 24 h: {lost} samples{share}, {d['spectra_dropped']} spectra; "
                   f"{d['spectra_not_archived']} spectra not archived")
    click.echo(describe_worst(st["worst_channels"]))
    click.echo(describe_disk(st["disk"], cfg["storage"]["retention_days"], cfg["service"]["disk_min_free_mb"]))


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
    # imported on use: `rxlog --help` and the other commands start without this stage
    from rxlog.station.units import units_for_config, write_units

    units = units_for_config(cfg)
    if out_dir:
        for p in write_units(units, out_dir):
            click.echo(str(p))
        return
    for name, text in units.items():
        click.echo(f"# ---- {name}")
        click.echo(text)
