"""``rxlog detect``: re-run burst detection over the archive into the event store."""

from __future__ import annotations

import sys

import click

from rxlog.cli.base import TIME_HELP, parse_time_option, station_command
from rxlog.timeutil import iso


@station_command("detect")
@click.option("--start", metavar="TIME", help=f"First time to re-detect: {TIME_HELP}. Default: start of the archive.")
@click.option("--end", metavar="TIME", help="End, exclusive, read like --start. Default: end of the archive.")
def detect_command(cfg, start, end):
    """Detect and classify bursts in the archived spectra and store them.

    Events peaking between --start and --end replace the station's earlier
    detections there (running it twice gives the same store). Labels stay on events
    that keep their id; a label whose event was replaced moves to the new event that
    matches its time-frequency box best, and is listed; one that finds none is kept
    and named, and tried again at the next run. Hourly masked fraction and gaps go to
    the store's quality table. A date is a night: --start 2026-12-01 --end 2026-12-08
    covers the seven nights from local noon on the 1st to noon on the 8th.

    \b
    Examples:
      rxlog detect --config station.toml
      rxlog detect --config station.toml --start 2026-12-01T18:00Z --end 2026-12-02T06:00Z
      rxlog detect --config station.toml --start 2026-12-01 --end 2026-12-08
    """
    # imported on use: `rxlog --help` and the other commands start without this stage
    from rxlog.detect.rerun import detect_range

    t0 = parse_time_option(start, "--start", cfg)
    t1 = parse_time_option(end, "--end", cfg)
    with click.progressbar(length=1000, label="detecting", file=sys.stderr) as bar:
        def progress(done_s, total_s):
            bar.update(int(1000 * done_s / max(total_s, 1e-9)) - bar.pos)

        summary = detect_range(cfg, t0, t1, progress=progress)
    classes = ", ".join(f"{n} {c}" for c, n in summary["by_class"].items()) or "none"
    click.echo(f"{iso(summary['t0'])} to {iso(summary['t1'])}: {summary['events']} events ({classes}), "
               f"{summary['episodes']} episodes, {summary['hours']} hourly quality rows, "
               f"{summary['segments']} segment(s); stored in {cfg.store_path}")
    for label_id, old, new in summary["labels_moved"]:
        click.echo(f"label {label_id} moved from {old} to {new} (re-detected)")
    for lab in summary["labels_orphaned"]:
        click.echo(f"label {lab['label_id']} ({lab['label']}, given to {lab['given_event_id']}) found no "
                   "matching event; kept for the next re-detection", err=True)
