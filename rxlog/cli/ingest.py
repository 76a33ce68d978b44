"""``rxlog ingest``: recordings and FITS dynamic spectra from elsewhere into the station archive."""

from __future__ import annotations

import sys
from pathlib import Path

import click

from rxlog import validate
from rxlog.cli.base import (
    TIME_HELP,
    UserError,
    parse_time_option,
    renamed,
    station_command,
)
from rxlog.timeutil import iso

FITS_SUFFIXES = (".fits", ".fit", ".fits.gz", ".fit.gz")


def _kind(path: Path, raw_format: str | None) -> str:
    """'fits', 'sigmf', 'raw', or a UserError saying what the file should have been."""
    # imported on use: `rxlog --help` and the other commands start without this stage
    from rxlog.receive.recordings import sigmf_paths

    if not path.is_file():
        raise UserError(f"{path}: no such file")
    if path.name.lower().endswith(FITS_SUFFIXES):
        return "fits"
    with open(path, "rb") as fh:
        if fh.read(9) == b"SIMPLE  =":        # FITS Standard 4.0, 4.4.1.1: the first card
            return "fits"
    if sigmf_paths(path) is not None:
        return "sigmf"
    if raw_format:
        return "raw"
    raise UserError(f"{path}: not a FITS file (it does not start with 'SIMPLE  =') nor a SigMF recording "
                    f"(.sigmf-meta); for a raw I/Q recording give {RAW_OPTIONS}")


RAW_OPTIONS = "--format, --rate-msps, --center-mhz and --start"


def _mega(value: float) -> float:
    """An older option's value in Hz (or samples/s) -> MHz (MS/s)."""
    return value / 1e6


def _units(value: float | None) -> float | None:
    """MHz (MS/s) -> Hz (samples/s) for the library, rounded to 1 mHz so 2.4 gives 2400000 exactly."""
    return None if value is None else round(value * 1e6, 3)


@station_command("ingest")
@renamed("--rate", to="--rate-msps", dest="rate_msps", convert=_mega, value_type=float, hint=" (samples/s)")
@renamed("--center", to="--center-mhz", dest="center_mhz", convert=_mega, value_type=float, hint=" (Hz)")
@click.argument("paths", nargs=-1, required=True, type=click.Path(dir_okay=False, path_type=Path))
@click.option("--format", "fmt", type=click.Choice(["cu8", "ci8", "ci16_le", "cf32_le"]),
              help="Sample format of a raw recording (SigMF says its own).")
@click.option("--rate-msps", type=click.FloatRange(min=0, min_open=True), metavar="MSPS",
              help="Raw recording: sample rate, millions of samples per second (MS/s).")
@click.option("--center-mhz", type=float, metavar="MHZ", help="Raw recording: centre frequency, MHz.")
@click.option("--start", metavar="TIME",
              help=f"Raw recording: time of the first sample (overrides SigMF's): {TIME_HELP}.")
def ingest(cfg, paths, fmt, rate_msps, center_mhz, start):
    """Put recordings and FITS dynamic spectra from elsewhere into the station archive.

    Recordings -- SigMF (.sigmf-meta beside .sigmf-data) or raw I/Q with --format,
    --rate-msps, --center-mhz and --start -- go through the logger's own channelizer onto the
    station's channel grid and cadence; each tuning is a segment. FITS files (.fits,
    .fit, .fits.gz) keep their own channel grid and cadence as a segment of their own;
    channels they do not cover stay masked. They need a 2-D image with standard WCS:
    one axis CTYPE 'FREQ' (CUNIT Hz, kHz or MHz), the other 'TIME' or 'UTC' (CUNIT s)
    with its origin in MJDREF, MJDREFI + MJDREFF, JDREF or DATEREF (DATE-OBS is the
    fallback); BUNIT 'dB' for log power, anything else is linear.

    \b
    Examples:
      rxlog ingest --config station.toml night.sigmf-meta
      rxlog ingest --config station.toml dongle.cu8 --format cu8 --rate-msps 2.4 \\
          --center-mhz 20 --start 2026-12-01T22:00:00Z
      rxlog ingest --config station.toml partner-2026-12-01.fits
    """
    t_start = parse_time_option(start, "--start", cfg)
    kinds = [(p, _kind(p, fmt)) for p in paths]          # every file checked before anything is stored
    missing = [opt for opt, v in (("--rate-msps", rate_msps), ("--center-mhz", center_mhz), ("--start", start))
               if v is None]
    raw = [p for p, kind in kinds if kind == "raw"]
    if raw and missing:
        raise UserError(f"{raw[0]}: a raw recording (not SigMF) needs {RAW_OPTIONS}; "
                        f"not given: {', '.join(missing)}")
    if raw:
        # In the options' own units, so the message names what the user typed.
        validate.number(rate_msps, f"{raw[0]}: --rate-msps", validate.MIN_RATE_HZ / 1e6, validate.MAX_RATE_HZ / 1e6,
                        "a sample rate in MS/s")
        validate.number(center_mhz, f"{raw[0]}: --center-mhz", 1e-6, validate.MAX_TUNING_HZ / 1e6,
                        "a centre frequency in MHz")
    for path, kind in kinds:
        if kind == "fits":
            # imported on use: `rxlog --help` and the other commands start without this stage
            from rxlog.archive.ingest import ingest_fits

            for s in ingest_fits(cfg, path):
                click.echo(f"{s.path}: segment {s.segment}, {iso(s.t0)} to {iso(s.t_end)}, {s.n_time} spectra "
                           f"every {s.cadence_s:g} s, {s.n_chan} channels {s.fmin_hz / 1e6:.3f}-"
                           f"{s.fmax_hz / 1e6:.3f} MHz")
            continue
        # imported on use: `rxlog --help` and the other commands start without this stage
        from rxlog.archive.ingest import ingest_recording

        with click.progressbar(length=1, label=path.name, file=sys.stderr) as bar:
            def progress(done, total):
                bar.length = total
                bar.update(done - bar.pos)

            s = ingest_recording(cfg, path, progress, fmt=fmt if kind == "raw" else None,
                                 rate_hz=_units(rate_msps), center_hz=_units(center_mhz), start=t_start)
        click.echo(f"{path}: {s.rows} spectra every {cfg['spectra']['cadence_s']:g} s, {iso(s.t0)} to "
                   f"{iso(s.t_end)}, {len(s.segments)} segment{'s' if len(s.segments) != 1 else ''} "
                   f"({', '.join(s.segments)})")
