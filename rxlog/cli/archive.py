"""Archive commands: retention (prune) and ingest of FITS dynamic spectra from elsewhere."""

from __future__ import annotations

import sys

import click

from rxlog.cli.base import UserError, station_command


@station_command("prune")
def prune_command(cfg):
    """Delete archived spectra older than [storage] retention_days.

    Only the archive's own hour and chunk files under <storage root>/archive are
    deleted, whole UTC hours at a time; the event store, labels and reports are
    never touched.

    \b
    Example:
      rxlog prune --config station.toml
    """
    from rxlog.archive import prune

    days = cfg["storage"]["retention_days"]
    deleted = prune(cfg.archive_dir, days)
    click.echo(f"deleted {len(deleted)} archive file(s) older than {days:g} days from {cfg.archive_dir}")


def _is_fits(path: str) -> bool:
    """A FITS file starts with the card 'SIMPLE  =' (FITS Standard 4.0 §4.4.1.1)."""
    with open(path, "rb") as fh:
        return fh.read(9) == b"SIMPLE  ="


@station_command("ingest")
@click.argument("paths", nargs=-1, required=True, type=click.Path(exists=True, dir_okay=False))
def ingest_command(cfg, paths):
    """Store FITS dynamic spectra from elsewhere in the station archive.

    Each file becomes a segment of its own with its own channel grid and cadence
    (never resampled); channels it does not cover stay masked. Files written by
    rxlog at a partner station keep their flags and segments. Other files need a
    2-D image with standard WCS: one axis CTYPE 'FREQ' (CUNIT Hz, kHz or MHz), the
    other 'TIME' or 'UTC' (CUNIT s) with its origin in MJDREF, MJDREFI + MJDREFF,
    JDREF or DATEREF (DATE-OBS is the fallback); BUNIT 'dB' for log power, anything
    else is linear. Ingesting the same file again stores it once.

    \b
    Example:
      rxlog ingest --config station.toml partner-2026-12-01.fits
    """
    from rxlog.archive import ingest_fits
    from rxlog.timeutil import iso

    not_fits = [p for p in paths if not _is_fits(p)]
    if not_fits:
        raise UserError(f"{not_fits[0]}: not a FITS file (it does not start with 'SIMPLE  ='); "
                        "expected a FITS dynamic spectrum")
    done = []
    with click.progressbar(paths, label="ingesting", file=sys.stderr) as bar:
        for p in bar:
            done += ingest_fits(cfg, p)
    for s in done:
        click.echo(f"{s.path}: segment {s.segment}, {iso(s.t0)} to {iso(s.t_end)}, {s.n_time} spectra "
                   f"every {s.cadence_s:g} s, {s.n_chan} channels {s.fmin_hz / 1e6:.3f}-{s.fmax_hz / 1e6:.3f} MHz")
