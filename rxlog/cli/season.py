"""``rxlog reprocess`` (a date range re-detected in parallel on Dask) and ``rxlog season``
(the season's statistics, normalised by exposure)."""

from __future__ import annotations

import click

from rxlog.cli.base import TIME_HELP, UserError, parse_time_option, station_command
from rxlog.timeutil import iso


@station_command("reprocess")
@click.option("--start", required=True, metavar="TIME", help=f"First day to re-detect: {TIME_HELP}.")
@click.option("--end", required=True, metavar="TIME", help="End, exclusive, read like --start.")
@click.option("--workers", type=click.IntRange(min=1), metavar="N",
              help="Worker processes of the local Dask cluster (default: one per core).")
@click.option("--scheduler", metavar="ADDRESS",
              help="A running Dask scheduler (tcp://host:8786) to hand the days to instead; its workers "
                   "must see the same archive path and have rxlog installed.")
def reprocess_command(cfg, start, end, workers, scheduler):
    """Re-detect a date range day by day, in parallel, into the event store.

    Each day (24 h from --start) is one task on Dask: workers read the archive and
    detect; this process writes each day into the event store in order, so the store
    ends up as running `rxlog detect` over each day in turn would leave it (labels kept
    the same way). A killed run restarts where it stopped (days written are kept in
    reprocess-state.json under the storage root); a day whose archive files are
    damaged is reported and skipped, and tried again next time.

    \b
    Examples:
      rxlog reprocess --config station.toml --start 2026-10-01 --end 2027-04-01
      rxlog reprocess --config station.toml --start 2026-12-01 --end 2026-12-31 --workers 2
      rxlog reprocess --config station.toml --start 2026-12-01 --end 2026-12-31 \\
          --scheduler tcp://192.0.2.10:8786
    """
    # imported on use: `rxlog --help` and the other commands start without Dask
    from rxlog.season.reprocess import reprocess

    if workers is not None and scheduler:
        raise UserError("--workers: the cluster at --scheduler has its own workers; give one or the other")
    t0 = parse_time_option(start, "--start", cfg)
    t1 = parse_time_option(end, "--end", cfg)

    def on_day(rep, progress):
        day = f"{iso(rep.t0)[:16]}Z"
        if rep.error:
            click.echo(f"rxlog: day {day} skipped: {rep.error}", err=True)
        elif rep.resumed:
            click.echo(f"day {day}: written by an earlier run, kept", err=True)
        else:
            s = rep.summary
            click.echo(f"day {day}: {s['events']} events, {s['episodes']} episodes, {s['hours']} hours", err=True)
        click.echo(f"  {progress.line()}", err=True)

    reports = reprocess(cfg, t0, t1, workers=workers, scheduler=scheduler, on_day=on_day)
    written = [r for r in reports if r.summary]
    skipped = [r for r in reports if r.error]
    kept = [r for r in reports if r.resumed]
    events = sum(r.summary["events"] for r in written)
    click.echo(f"{iso(t0)} to {iso(t1)}: {len(written)} days re-detected ({events} events), "
               f"{len(kept)} kept from an earlier run, {len(skipped)} skipped; stored in {cfg.store_path}")
    for r in written:
        for label_id, old, new in r.summary["labels_moved"]:
            click.echo(f"label {label_id} moved from {old} to {new} (re-detected)")
    if skipped:
        raise UserError(f"{len(skipped)} day(s) skipped for damaged archive files (listed above); "
                        "repair or remove them and run the same command again")


@station_command("season")
@click.option("--start", required=True, metavar="TIME", help=f"Start of the season: {TIME_HELP}.")
@click.option("--end", required=True, metavar="TIME", help="End, exclusive, read like --start.")
@click.option("--out", required=True, type=click.Path(file_okay=False), metavar="DIR",
              help="Folder for the season page (index.html), its PNG plots and CSV tables.")
@click.option("--partners", multiple=True, type=click.Path(exists=True, dir_okay=False), metavar="FILE",
              help="A partner station's event list (CSV, JSON or VOTable, from rxlog export); repeat for more. "
                   "Adds the network's occurrence map of emission confirmed at two or more stations.")
def season_command(cfg, start, end, out, partners):
    """Season statistics normalised by how long the station really listened.

    Exposure is the time the logger ran with the band unmasked (the store's hourly
    quality rows) and Jupiter (or the Sun) above [detector] jupiter_up_deg
    (sun_up_deg). Writes the Jovian occurrence probability over CML III x Io phase
    (10-degree bins, Wilson intervals, the source-region boxes drawn), rates per
    region, solar bursts per type per day and against the Sun's altitude, fadeouts
    per month, an uptime calendar with the health log's causes, and the masked
    fraction by hour of day: PNG plots, CSV tables and index.html in --out.

    \b
    Examples:
      rxlog season --config station.toml --start 2026-10-01 --end 2027-04-01 --out season
      rxlog season --config station.toml --start 2026-12-01 --end 2027-01-01 --out dec \\
          --partners partner-a.csv --partners partner-b.json
    """
    # imported on use: `rxlog --help` and the other commands start without this stage
    from rxlog.season.report import season_report

    t0 = parse_time_option(start, "--start", cfg)
    t1 = parse_time_option(end, "--end", cfg)
    res = season_report(cfg, t0, t1, out, partners=list(partners))
    click.echo(f"{iso(t0)} to {iso(t1)}: {res['events']} events, {res['exposure_h']:.1f} h listened with Jupiter up, "
               f"{res['emission_h']:.2f} h with Jovian emission; season page {res['paths']['index_html']}")
