"""Archive commands: retention (prune). Ingest lives in rxlog/cli/ingest.py."""

from __future__ import annotations

import click

from rxlog.cli.base import station_command


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
    # imported on use: `rxlog --help` and the other commands start without this stage
    from rxlog.archive.prune import prune

    days = cfg["storage"]["retention_days"]
    deleted = prune(cfg.archive_dir, days)
    click.echo(f"deleted {len(deleted)} archive file(s) older than {days:g} days from {cfg.archive_dir}")
