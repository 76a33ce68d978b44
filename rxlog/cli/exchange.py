"""Sharing with partner stations: export event lists and notices, compare lists from several stations."""

from __future__ import annotations

from pathlib import Path

import click

from rxlog.cli.base import (
    TIME_HELP,
    UserError,
    friendly_errors,
    main,
    parse_time_option,
    renamed,
    station_command,
)


@station_command("export")
@renamed("-o", "--output", to="--out", dest="out")
@click.option("--format", "fmt", type=click.Choice(["csv", "json", "votable"]), default="csv",
              show_default=True, help="Open format of the event list.")
@click.option("--level", type=click.Choice(["bursts", "episodes"]), default="bursts", show_default=True,
              help="One row per detected burst, or one per episode (a storm, a Type III group, a Type IV) "
                   "with its class, confidence, number of bursts and context.")
@click.option("--out", type=click.Path(dir_okay=False), metavar="FILE",
              help="Where to write the list. Default: STATION-events.csv|.json|.vot here "
                   "(STATION-episodes.* with --level episodes).")
@click.option("--start", metavar="TIME", help=f"First peak time (episodes: start time) to include: {TIME_HELP}.")
@click.option("--end", metavar="TIME", help="Peak times (episodes: start times) before this, read like --start.")
@click.option("--include-rfi", is_flag=True, help="Also list events classed as interference.")
@click.option("--labelled-only", is_flag=True, help="Only events a reviewer has labelled.")
@click.option("--voevent", "voevent_dir", type=click.Path(file_okay=False), metavar="DIR",
              help="Instead of a list, write one IVOA VOEvent 2.0 notice per EVENT_ID (per episode id "
                   "with --level episodes) into DIR.")
@click.argument("event_ids", nargs=-1, metavar="[EVENT_ID]...")
def export_cmd(cfg, fmt, level, out, start, end, include_rfi, labelled_only, voevent_dir, event_ids):
    """Export this station's events for partner stations (CSV, JSON or VOTable), with the
    station's metadata in the header, or VOEvent 2.0 notices for single events; with
    --level episodes, one row (or notice) per episode instead of per burst.

    \b
    Examples:
      rxlog export --config station.toml --start 2027-02-01 --end 2027-02-08 --out week.csv
      rxlog export --config station.toml --format votable --labelled-only --out labelled.vot
      rxlog export --config station.toml --level episodes --start 2027-02-01 --out episodes.csv
      rxlog export --config station.toml --voevent notices/ birchwater-20270203T141502.0-20.000
      rxlog export --config station.toml --level episodes --voevent notices/ ep-birchwater-20270203T141502.0-20.000
    """
    # imported on use: `rxlog --help` and the other commands start without this stage
    from rxlog.exchange.columns import SUFFIX
    from rxlog.exchange.export import export_events
    from rxlog.exchange.voevent import write_voevents

    if voevent_dir is not None:
        if not event_ids:
            raise UserError("--voevent DIR needs one or more EVENT_IDs (see `rxlog events`"
                            + (" --episodes)" if level == "episodes" else ")"))
        paths = write_voevents(cfg, voevent_dir, list(event_ids), level=level)
        for p in paths:
            click.echo(f"wrote {p}")
        return
    if event_ids:
        raise UserError("EVENT_IDs are only for --voevent DIR; an event list takes --start/--end")
    t0 = parse_time_option(start, "--start", cfg)
    t1 = parse_time_option(end, "--end", cfg)
    if t0 is not None and t1 is not None and t1 <= t0:
        raise UserError("--end must be after --start")
    noun = "episodes" if level == "episodes" else "events"
    out = Path(out) if out else Path(f"{cfg['station']['name']}-{noun}{SUFFIX[fmt]}")
    n = export_events(cfg, out, fmt, t0=t0, t1=t1, include_rfi=include_rfi, labelled_only=labelled_only,
                      level=level)
    click.echo(f"wrote {n} {noun} to {out} ({fmt})")


def _spectra_option(values: tuple[str, ...]) -> dict[str, list[str]]:
    out: dict[str, list[str]] = {}
    for v in values:
        name, sep, path = v.partition("=")
        if not sep or not name or not path:
            raise UserError(f"--spectra {v!r}: expected STATION=PATH (a FITS file or a folder of them)")
        if not Path(path).exists():
            raise UserError(f"--spectra {v!r}: {path} does not exist")
        out.setdefault(name, []).append(path)
    return out


@main.command("compare")
@click.argument("files", nargs=-1, required=True, type=click.Path(dir_okay=False), metavar="FILE FILE...")
@click.option("--window", "window_s", type=float, default=10.0, show_default=True, metavar="SECONDS",
              help="How far apart (beyond their overlap) two stations' events may be and still match.")
@click.option("--out", "outdir", type=click.Path(file_okay=False), metavar="DIR",
              help="Write matched_events.csv, matched_episodes.csv (with episode lists), stations.csv, "
                   "summary.txt and timeline.png here.")
@click.option("--spectra", multiple=True, metavar="STATION=PATH",
              help="A station's FITS dynamic spectra (file or folder), to refine clock offsets from "
                   "Type III light curves. Repeat per station.")
@friendly_errors
def compare_cmd(files, window_s, outdir, spectra):
    """Compare event lists from several stations: which events others saw too, and each
    station's clock offset. Reads CSV, JSON or VOTable lists written by `rxlog export`;
    episode lists (`rxlog export --level episodes`) given beside them are confirmed across
    stations (seen at two or more) on the clocks the events give.

    \b
    Examples:
      rxlog compare birchwater.csv kestrel-ridge.json saltmarsh-point.vot --out compare/
      rxlog compare a.csv b.csv a-episodes.csv b-episodes.csv --out compare/
      rxlog compare a.csv b.csv --window 5 --spectra a=a-fits/ --spectra b=b-fits/
    """
    # imported on use: `rxlog --help` and the other commands start without this stage
    from rxlog.exchange.compare import compare_stations

    def progress(stage: str):
        click.echo(f"  {stage}", err=True)

    result = compare_stations(list(files), window_s=window_s, outdir=outdir,
                              spectra=_spectra_option(spectra) or None, progress=progress)
    for line in result.notices:
        click.echo(line, err=True)
    for line in result.summary_lines():
        click.echo(line)
    for p in result.files.values():
        click.echo(f"wrote {p}")
