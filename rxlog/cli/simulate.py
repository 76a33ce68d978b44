"""``rxlog simulate``: a night (or a few seconds of samples) from the built-in sky and station."""

from __future__ import annotations

import sys

import click

from rxlog.cli.base import TIME_HELP, UserError, parse_time_option, station_command


@station_command("simulate")
@click.option("--start", required=True, metavar="TIME", help=f"Start: {TIME_HELP}.")
@click.option("--hours", type=click.FloatRange(min=0, min_open=True), metavar="H",
              help="How long to simulate (fractions allowed: --iq writes 4.8 MB per second at 2.4 MS/s).")
@click.option("--days", type=click.IntRange(min=1), metavar="N",
              help="Instead of --hours: a season of N whole days of spectra into an archive folder, solar "
                   "activity varying day to day, Jovian storms planned over the whole span.")
@click.option("--out", "out", required=True, type=click.Path(), metavar="PATH",
              help="Spectra: a folder (archive layout) or a .fits file; --iq: the SigMF base name.")
@click.option("--iq", is_flag=True, help="Write IQ samples (SigMF, cu8) at one tuning instead of spectra.")
@click.option("--seed", type=click.IntRange(min=0), help="Same seed, same sky and noise (default: [receiver] sim_seed).")
@click.option("--rfi", type=click.Choice(["quiet-rural", "rural", "residential", "city", "site"]),
              help="Interference: a man-made noise category (ITU-R P.372) and the local interference that goes "
                   "with it, or site: a quiet club site with every kind at once (sferics, switched appliance "
                   "noise, voice and data bursts, broadcasters, sounders, spurs) (default: [receiver] sim_rfi).")
@click.option("--center-mhz", type=float, metavar="MHZ", help="--iq: the tuning (default: middle of the band).")
def simulate_command(cfg, start, hours, days, out, iq, seed, rfi, center_mhz):
    """Simulate what the station would record, and write down what was put in the sky.

    Writes FITS dynamic spectra in the archive's layout (or one .fits file), or with
    --iq a SigMF recording, plus a truth CSV (class, start_utc, end_utc, peak_utc,
    fmin_mhz, fmax_mhz, peak_excess_db, drift_mhz_s, rfi_kind, episode, ...) beside it.

    \b
    Examples:
      rxlog simulate --config station.toml --start 2026-12-01T18:00:00Z --hours 12 --out night
      rxlog simulate --config station.toml --start 2027-01-20 --hours 24 --rfi site --out day
      rxlog simulate --config station.toml --start 2026-12-01T22:00:00Z --hours 0.005 --iq \\
          --center-mhz 20.1 --out iq/test
      rxlog simulate --config station.toml --start 2026-12-01T00:00Z --days 30 --out december
    """
    # imported on use: `rxlog --help` and the other commands start without this stage
    from rxlog.sim.season import write_season
    from rxlog.sim.write import write_simulation

    t0 = parse_time_option(start, "--start", cfg)
    if (hours is None) == (days is None):
        raise UserError("--hours or --days: give one of them (how long to simulate)")
    if days is not None and iq:
        raise UserError("--days: spectra only; use --hours with --iq")
    if center_mhz is not None and not iq:
        raise UserError("--center-mhz: only used with --iq (spectra cover the whole band)")
    with click.progressbar(length=1000, label="simulating", file=sys.stderr) as bar:
        state = {"shown": 0}

        def progress(done, total):
            k = int(1000 * done / max(total, 1))
            bar.update(k - state["shown"])
            state["shown"] = k

        if days is not None:
            res = write_season(cfg, t0, days, out, seed=seed, rfi=rfi, progress=progress)
        else:
            res = write_simulation(cfg, t0, hours, out, iq=iq, seed=seed, rfi=rfi,
                                   center_hz=None if center_mhz is None else center_mhz * 1e6, progress=progress)
    what = f"{res['samples']} samples" if iq else f"{res['rows']} spectra"
    click.echo(f"wrote {what} to {res['path']}; {res['truth_rows']} truth rows in {res['truth_path']}")
