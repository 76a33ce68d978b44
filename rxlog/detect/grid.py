"""The grid of one segment as the detector sees it: channels and the moment each is
sampled, sweep sub-bands, coarse channels, always-masked channels, rows per block.

Fixed for the life of a segment; every stage reads it, none changes it. A sweeping
receiver samples each sub-band (the channels of one tuning's dwell) at its own moment of
the step (``chan_offset_s``): a millisecond impulse lands in one sub-band, and a drift
fit must use each channel's true sampling time.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True, eq=False)
class Grid:
    t0: float                  # POSIX seconds of the segment's first row
    cadence: float             # seconds per row
    freq: np.ndarray           # (C,) channel centres, Hz
    f_mhz: np.ndarray          # (C,) the same in MHz
    offsets: np.ndarray        # (C,) seconds into the row at which each channel is sampled
    chan_mhz: float            # channel spacing
    rows_per_block: int
    block_s: float             # rows_per_block x cadence
    always: np.ndarray         # (C,) channels a static range covers at every hour
    sb_start: np.ndarray       # sweep sub-bands (runs of channels sampled at one moment; one
    sb_stop: np.ndarray        # run when the receiver does not sweep): first and end channel
    sb_id: np.ndarray          # (C,) sub-band of each channel
    slot: float                # seconds from one dwell to the next (the whole step without a sweep)
    q_start: np.ndarray        # each sub-band in eighths (sub-bands of 16 channels or more):
    q_owner: np.ndarray        # first channel of each piece, and its sub-band
    sb_beside: list            # per sub-band: runs of channels just past its edges (see _beside)
    groups: np.ndarray         # (C,) coarse channel of each channel (slow path)
    n_groups: int
    g_start: np.ndarray        # first channel of each coarse channel
    g_always: np.ndarray       # (n_groups,) coarse channels wholly inside ``always``

    @property
    def n_chan(self) -> int:
        return len(self.freq)

    @property
    def n_sub(self) -> int:
        return len(self.sb_start)


def segment_grid(spec, block_s: float, always: np.ndarray, groups: np.ndarray) -> Grid:
    """The grid of the segment that starts with ``spec``: blocks of ``block_s`` (whole
    rows), ``always`` the channels always masked, ``groups`` the coarse channel of each."""
    cad = float(spec.cadence_s)
    freq = np.asarray(spec.freq_hz, dtype=np.float64)
    f_mhz = freq / 1e6
    offsets = np.asarray(spec.chan_offset_s, dtype=np.float64)
    n_chan = len(freq)
    chan_mhz = float(np.median(np.abs(np.diff(f_mhz)))) if n_chan > 1 else 1.0
    R = max(1, int(round(block_s / cad)))
    change = np.flatnonzero(np.diff(offsets) != 0) + 1
    sb_start = np.concatenate([[0], change]).astype(np.int64)
    sb_stop = np.concatenate([change, [n_chan]]).astype(np.int64)
    starts = np.unique(offsets)
    q_start, q_owner = _eighths(sb_start, sb_stop)
    n_groups = int(groups.max()) + 1
    gchange = np.flatnonzero(np.diff(groups) != 0) + 1
    g_always = np.bincount(groups, weights=always.astype(float), minlength=n_groups) \
        >= np.bincount(groups, minlength=n_groups)
    return Grid(t0=float(spec.t0), cadence=cad, freq=freq, f_mhz=f_mhz, offsets=offsets, chan_mhz=chan_mhz,
                rows_per_block=R, block_s=R * cad, always=always, sb_start=sb_start, sb_stop=sb_stop,
                sb_id=np.repeat(np.arange(len(sb_start)), sb_stop - sb_start),
                slot=float(np.median(np.diff(starts))) if len(starts) > 1 else cad,
                q_start=q_start, q_owner=q_owner,
                sb_beside=_beside(sb_start, sb_stop, always, chan_mhz),
                groups=groups, n_groups=n_groups,
                g_start=np.concatenate([[0], gchange]).astype(np.int64), g_always=g_always)


def _eighths(sb_start: np.ndarray, sb_stop: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Each sub-band in eighths (sub-bands of 16 channels or more, else whole), to tell a
    dwell lit evenly from edge to edge (a pulse) from a lane crossing part of it: the
    first channel of each piece and the sub-band it belongs to."""
    parts, owner = [], []
    for b, (a, z) in enumerate(zip(sb_start, sb_stop)):
        cuts = np.unique(np.linspace(a, z, 9).astype(np.int64)[:-1]) if z - a >= 16 else np.array([a])
        parts.append(cuts)
        owner.append(np.full(len(cuts), b))
    return np.concatenate(parts).astype(np.int64), np.concatenate(owner).astype(np.int64)


def _beside(sb_start: np.ndarray, sb_stop: np.ndarray, always: np.ndarray, chan_mhz: float) -> list:
    """Beside each sub-band: the first 0.15 MHz of channels outside the static mask,
    starting 0.1 MHz past each edge (clear of channels that straddle two dwells) and at
    most 0.6 MHz away; none at the band's edges. One list of channel runs per sub-band."""
    n_chan = len(always)
    k1, k2 = max(1, int(round(0.1 / chan_mhz))), max(1, int(round(0.6 / chan_mhz)))
    m = max(4, int(round(0.15 / chan_mhz)))
    out = []
    for a, z in zip(sb_start, sb_stop):
        sides = []
        for cand in (np.arange(a - k1 - 1, a - k2 - 1, -1), np.arange(z + k1, z + k2)):
            cand = cand[(cand >= 0) & (cand < n_chan)]
            cand = cand[~always[cand]][:m]
            if len(cand) >= 4:
                sides.append(cand)
        out.append(sides)
    return out
