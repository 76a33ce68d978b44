"""A recording through the channelizer: its dynamic spectra on the station's grid and cadence."""

from __future__ import annotations

from rxlog.errors import RxlogError
from rxlog.receive.blocks import EndOfStream
from rxlog.receive.channelizer import Channelizer
from rxlog.receive.recordings import open_recording


def spectra_from_recording(cfg, path, progress=None, *, fmt=None, rate_hz=None, center_hz=None, start=None,
                           chunk_samples: int = 1 << 20):
    """Dynamic spectra of a recording on the station's channel grid and cadence (an iterator).

    ``path``: SigMF (``.sigmf-meta``/``.sigmf-data``) or a raw file with ``fmt``,
    ``rate_hz``, ``center_hz`` and ``start``. Each SigMF capture with its own tuning is a
    segment. ``progress(done, total)`` is called with samples read so far. The file is
    mapped one chunk (``chunk_samples``) at a time, so memory stays flat.
    """
    rec = open_recording(path, fmt=fmt, rate_hz=rate_hz, center_hz=center_hz, start=start)
    ch = Channelizer(cfg, ring_s=0)
    _check_reaches_band(rec, ch, cfg)
    meta = rec.meta()
    total, done = rec.n_samples, 0
    with rec:
        while True:
            try:
                c = rec.read_raw(chunk_samples)
            except EndOfStream:
                break
            pieces = ch.feed_samples(c.data, c.t0, c.center_hz, c.rate_hz, rec.gain_db, c.segment,
                                     c.dropped_before, fmt=c.fmt, meta=meta)
            done += c.n
            del c                        # unmaps the chunk
            yield from pieces
            if progress is not None:
                progress(done, total)
        yield from ch.flush()


def _check_reaches_band(rec, ch: Channelizer, cfg) -> None:
    """Every tuning of a recording must feed some channel of the station grid: one that
    feeds none would give nothing at all, which is an error in its description (or the
    wrong recording), not a short file."""
    sp = cfg["spectra"]
    for cap in rec.captures:
        if ch.channel_map(cap.center_hz, rec.rate_hz).chans.size == 0:
            half = ch.usable_fraction * rec.rate_hz / 2
            lo, hi = cap.center_hz - half, cap.center_hz + half
            covers = (f"{rec.source}: {cap.label} {cap.center_hz / 1e6:.6g} MHz at {rec.rate_hz:g} samples/s "
                      f"covers {lo / 1e6:.6g} to {hi / 1e6:.6g} MHz")
            if lo < sp["fmax_mhz"] * 1e6 and hi > sp["fmin_mhz"] * 1e6:
                raise RxlogError(f"{covers}, too narrow to leave a usable FFT bin beyond [sweep] dc_cut_hz "
                                 f"({ch.dc_cut_hz:g} Hz either side of the centre, the DC spike)")
            raise RxlogError(f"{covers}, outside the station band {sp['fmin_mhz']:g}-{sp['fmax_mhz']:g} MHz "
                             "([spectra] fmin_mhz, fmax_mhz)")
