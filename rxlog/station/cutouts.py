"""Event cutouts: the channelizer ring's full-resolution spectra around each new event,
kept as a FITS file in the archive's layout under ``<storage root>/cutouts/YYYY/MM/DD/``
(S-bursts are only visible there), and their daily retention."""

from __future__ import annotations

import datetime as dt
import time
from pathlib import Path

from rxlog.archive.write import write_spectrum_fits
from rxlog.detect.cutout import refine_with_cutout
from rxlog.timeutil import parse_iso

CUTOUT_MARGIN_S = 2.0       # kept either side of an event in its cutout


def cutout_ring_needed_s(cfg) -> float:
    """Seconds of ring a cutout needs: a burst comes out of the detector half a fast
    window plus three blocks after it ends (rxlog.detect), and a minute-long burst must
    still be in the ring then."""
    d = cfg.get("detector", {})
    return float(d.get("fast_window_s", 240.0)) / 2 + 3 * float(d.get("block_s", 30.0)) + 60.0 + 2 * CUTOUT_MARGIN_S


def cutout_relpath(ev: dict) -> Path:
    """``cutouts/YYYY/MM/DD/<event_id>.fits`` (by the event's UTC start), relative to the storage root."""
    d = ev["start_utc"][:10].split("-")
    return Path("cutouts", *d, f"{ev['event_id']}.fits")


def save_cutout(cfg, ev: dict, ring) -> dict:
    """Write the ring's rows around ``ev`` as a FITS file in the archive's layout and return
    the event as ``rxlog.detect.cutout.refine_with_cutout`` sees it then (with ``cutout_path``,
    relative to the storage root). Without rows in the ring the event comes back as it was."""
    t0 = parse_iso(ev["start_utc"]) - CUTOUT_MARGIN_S
    t1 = parse_iso(ev["end_utc"]) + CUTOUT_MARGIN_S
    cut = ring.cutout(t0, t1)
    if cut is None or cut.n_time == 0:
        return ev
    rel = cutout_relpath(ev)
    write_spectrum_fits(cut, Path(cfg.storage_root) / rel, cfg["station"], lossless=cfg["storage"]["lossless"])
    return refine_with_cutout(cfg, ev, cut, path=str(rel))


def prune_cutouts(cfg, retention_days: float, now: float | None = None) -> list[Path]:
    """Delete cutout files of UTC days that ended more than ``retention_days`` ago, and
    their emptied folders; only ``cutouts/YYYY/MM/DD/*.fits`` is touched."""
    root = Path(cfg.storage_root) / "cutouts"
    if not root.is_dir():
        return []
    cutoff = (time.time() if now is None else float(now)) - float(retention_days) * 86400.0
    deleted = []
    for day in sorted(root.glob("[0-9][0-9][0-9][0-9]/[0-9][0-9]/[0-9][0-9]")):
        try:
            y, m, d = (int(x) for x in day.relative_to(root).parts)
            end = dt.datetime(y, m, d, tzinfo=dt.timezone.utc).timestamp() + 86400.0
        except ValueError:
            continue
        if end > cutoff:
            continue
        for f in day.glob("*.fits"):
            f.unlink()
            deleted.append(f)
        for folder in (day, day.parent, day.parent.parent):
            try:
                folder.rmdir()
            except OSError:
                break
    return deleted
