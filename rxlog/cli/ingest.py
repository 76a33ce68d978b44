"""``rxlog ingest``: recordings and FITS dynamic spectra from elsewhere into the station archive."""

from __future__ import annotations

import sys
from pathlib import Path

import click

from rxlog.cli.base import UserError, parse_time_option, station_command
from rxlog.timeutil import iso

FITS_SUFFIXES = (".fits", ".fit", ".fits.gz", ".fit.gz")


def _kind(path: Path, raw_format: str | None) -> str:
    """'fits', 'recording', or a UserError saying what the file should have been."""
    from rxlog.receiver import _sigmf_paths

    if not path.is_file():
        raise UserError(f"{path}: no such file")
    if path.name.lower().endswith(FITS_SUFFIXES):
        return "fits"
    with open(path, "rb") as fh:
        if fh.read(9) == b"SIMPLE  =":        # FITS Standard 4.0, 4.4.1.1: the first card
            return "fits"
    if _sigmf_paths(path) is not None or raw_format:
        return "recording"
    raise UserError(f"{path}: not a FITS file (it does not start with 'SIMPLE  =') nor a SigMF recording "
                    "(.sigmf-meta); for a raw I/Q recording give --format, --rate, --center and --start")


@station_command("ingest")
@click.argument("paths", nargs=-1, required=True, type=click.Path(dir_okay=False, path_type=Path))
@click.option("--format", "fmt", type=click.Choice(["cu8", "ci8", "ci16_le", "cf32_le"]),
              help="Sample format of a raw recording (SigMF says its own).")
@click.option("--rate", type=float, metavar="HZ", help="Raw recording: sample rate, Hz.")
@click.option("--center", type=float, metavar="HZ", help="Raw recording: centre frequency, Hz.")
@click.option("--start", metavar="ISO", help="Raw recording: UTC of the first sample (overrides SigMF's).")
def ingest(cfg, paths, fmt, rate, center, start):
    """Put recordings and FITS dynamic spectra from elsewhere into the station archive.

    Recordings -- SigMF (.sigmf-meta beside .sigmf-data) or raw I/Q with --format,
    --rate, --center and --start -- go through the logger's own channelizer onto the
    station's channel grid and cadence; each tuning is a segment. FITS files (.fits,
    .fit, .fits.gz) keep their own channel grid and cadence as a segment of their own;
    channels they do not cover stay masked. They need a 2-D image with standard WCS:
    one axis CTYPE 'FREQ' (CUNIT Hz, kHz or MHz), the other 'TIME' or 'UTC' (CUNIT s)
    with its origin in MJDREF, MJDREFI + MJDREFF, JDREF or DATEREF (DATE-OBS is the
    fallback); BUNIT 'dB' for log power, anything else is linear.

    \b
    Examples:
      rxlog ingest --config station.toml night.sigmf-meta
      rxlog ingest --config station.toml dongle.cu8 --format cu8 --rate 2400000 \\
          --center 20000000 --start 2026-12-01T22:00:00Z
      rxlog ingest --config station.toml partner-2026-12-01.fits
    """
    t_start = parse_time_option(start, "--start")
    kinds = [(p, _kind(p, fmt)) for p in paths]          # every file checked before anything is stored
    for path, kind in kinds:
        if kind == "fits":
            from rxlog.archive import ingest_fits

            for s in ingest_fits(cfg, path):
                click.echo(f"{s.path}: segment {s.segment}, {iso(s.t0)} to {iso(s.t_end)}, {s.n_time} spectra "
                           f"every {s.cadence_s:g} s, {s.n_chan} channels {s.fmin_hz / 1e6:.3f}-"
                           f"{s.fmax_hz / 1e6:.3f} MHz")
            continue
        from rxlog.channelizer import ingest_recording

        with click.progressbar(length=1, label=path.name, file=sys.stderr) as bar:
            def progress(done, total):
                bar.length = total
                bar.update(done - bar.pos)

            s = ingest_recording(cfg, path, progress, fmt=fmt, rate_hz=rate, center_hz=center, start=t_start)
        click.echo(f"{path}: {s.rows} spectra every {cfg['spectra']['cadence_s']:g} s, {iso(s.t0)} to "
                   f"{iso(s.t_end)}, {len(s.segments)} segment{'s' if len(s.segments) != 1 else ''} "
                   f"({', '.join(s.segments)})")
