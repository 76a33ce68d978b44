"""Commands about the sky: ephemeris tags (`rxlog ephem`) and observing forecasts (`rxlog forecast`)."""

from __future__ import annotations

import csv
import io
import json
import math
import sys

import click

from rxlog.cli.base import TIME_HELP, parse_time_option, station_command
from rxlog.timeutil import iso

COLUMNS = ("time_utc", "cml3_deg", "io_phase_deg", "jupiter_alt_deg", "jupiter_az_deg",
           "sun_alt_deg", "sun_az_deg", "source_region")


def _rows(table) -> list[dict]:
    out = []
    for i, t in enumerate(table["time_unix"]):
        row = {"time_utc": iso(t)}
        for key in COLUMNS[1:-1]:
            row[key] = round(float(table[key][i]), 3)
        row["source_region"] = str(table["source_region"][i])
        out.append(row)
    return out


def _format_rows(rows: list[dict], fmt: str) -> str:
    if fmt == "json":
        return json.dumps(rows, indent=1)
    if fmt == "csv":
        buf = io.StringIO()
        w = csv.DictWriter(buf, fieldnames=COLUMNS, lineterminator="\n")
        w.writeheader()
        w.writerows(rows)
        return buf.getvalue().rstrip("\n")
    head = (f"{'time_utc':<24} {'cml3_deg':>8} {'io_phase_deg':>12} {'jupiter_alt_deg':>15} "
            f"{'jupiter_az_deg':>14} {'sun_alt_deg':>11} {'sun_az_deg':>10}  source_region")
    lines = [head] + [
        f"{r['time_utc']:<24} {r['cml3_deg']:>8.2f} {r['io_phase_deg']:>12.2f} {r['jupiter_alt_deg']:>15.2f} "
        f"{r['jupiter_az_deg']:>14.2f} {r['sun_alt_deg']:>11.2f} {r['sun_az_deg']:>10.2f}  {r['source_region']}"
        for r in rows]
    return "\n".join(lines)


@station_command("ephem")
@click.option("--start", required=True, metavar="TIME", help=f"First time: {TIME_HELP}.")
@click.option("--end", metavar="TIME", help="Last time (inclusive), read like --start. Default: only --start.")
@click.option("--step", type=click.FloatRange(min=0.001), default=600.0, show_default=True, metavar="SECONDS",
              help="Seconds between rows.")
@click.option("--format", "fmt", type=click.Choice(["table", "csv", "json"]), default="table", show_default=True)
@click.option("--refraction", is_flag=True, help="Add optical refraction to the altitudes (default: airless).")
def ephem(cfg, start, end, step, fmt, refraction):
    """Print CML III, Io phase, Jupiter and Sun positions and the source region for the station.

    Altitudes are geometric (airless) unless --refraction; azimuths from north through
    east; the source region comes from the config's [regions] boxes ('none' outside).

    \b
    Example:
      rxlog ephem --config station.toml --start now
      rxlog ephem --config station.toml --start 2026-12-01T20:00Z
      rxlog ephem --config station.toml --start 2026-12-01T18:00Z --end 2026-12-02T06:00Z --step 900 --format csv
    """
    # imported on use: `rxlog --help` and the other commands start without this stage
    from rxlog.sky.tags import tag_table

    t0 = parse_time_option(start, "--start", cfg)
    t1 = parse_time_option(end, "--end", cfg)
    table = tag_table(cfg, t0, t1, step, refraction=refraction)
    click.echo(_format_rows(_rows(table), fmt))


@station_command("forecast")
@click.option("--start", metavar="TIME", help=f"First time: {TIME_HELP}. Default: now.")
@click.option("--days", type=click.FloatRange(min=0.01, max=400), required=True, metavar="N",
              help="How many days to forecast (up to 400).")
@click.option("--min-window", "min_window", type=click.FloatRange(0, 1440), metavar="MINUTES",
              help="Leave out watches shorter than this. Default: [forecast] min_window_min (20).")
@click.option("--ics", "ics_path", type=click.Path(dir_okay=False, writable=True), metavar="FILE",
              help="Also write the watches as an iCalendar file (.ics) for calendar programs.")
@click.option("--plot", "plot_path", type=click.Path(dir_okay=False, writable=True), metavar="FILE",
              help="Also draw them (PNG): up to 7 days the CML III / Io-phase plane with each night's track, "
                   "longer a calendar of nights by local hour, coloured by source region.")
@click.option("--min-jupiter-alt", type=click.FloatRange(-5, 89), default=10.0, show_default=True, metavar="DEG",
              help="Lowest altitude of Jupiter that counts.")
@click.option("--max-sun-alt", type=click.FloatRange(-90, 90), default=-6.0, show_default=True, metavar="DEG",
              help="Highest altitude of the Sun that counts (-6: after civil twilight).")
def forecast(cfg, start, days, min_window, ics_path, plot_path, min_jupiter_alt, max_sun_alt):
    """List the watches: Jupiter up, the Sun low and CML / Io phase in a source region.

    Windows that follow one another without a break (the source region changes while
    Jupiter stays observable) are one watch; the calendar entry of a watch lists its
    regions with their times. Each line shows a watch's start and end in the station's
    local time and in UTC, its regions, Jupiter's highest altitude, and CML III and Io
    phase at its ends.

    \b
    Example:
      rxlog forecast --config station.toml --days 7
      rxlog forecast --config station.toml --start 2026-12-01 --days 30 --ics jupiter.ics --plot nights.png
    """
    # imported on use: `rxlog --help` and the other commands start without this stage
    from rxlog.sky.forecast import make_forecast

    t0 = parse_time_option(start or "now", "--start", cfg)
    args = dict(ics_path=ics_path, plot_path=plot_path, min_window_min=min_window)
    if days > 31:
        with click.progressbar(length=int(math.ceil(days * 86400 / 60.0)) + 1, label="forecasting",
                               file=sys.stderr) as bar:
            done = make_forecast(cfg, t0, days, min_jupiter_alt, max_sun_alt, progress=bar.update, **args)
    else:
        done = make_forecast(cfg, t0, days, min_jupiter_alt, max_sun_alt, **args)
    click.echo(done["text"])
    if done["ics_path"]:
        click.echo(f"calendar: {done['ics_path']} ({len(done['watches'])} events)")
    elif ics_path:
        click.echo(f"calendar: {ics_path} not written (no watches)")
    if done["plot_path"]:
        click.echo(f"plot: {done['plot_path']}")
