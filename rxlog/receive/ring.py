"""The cutout ring: the last seconds of high-time-resolution spectra, for event cutouts."""

from __future__ import annotations

import math

import numpy as np

from rxlog.spectrum import FLAG_GAP, FLAG_UNCOVERED, DynamicSpectrum


class Ring:
    """The last ``seconds`` of high-time-resolution spectra (float16 dB), for event cutouts."""

    def __init__(self, seconds: float, row_s: float, freq_hz: np.ndarray, chans: np.ndarray, segment: str,
                 meta: dict | None = None):
        self.row_s = float(row_s)
        self.freq_hz = np.asarray(freq_hz)
        self.chans = np.asarray(chans)
        self.segment = segment
        self.meta = dict(meta or {})
        self.capacity = max(1, int(math.ceil(seconds / row_s)))
        self._t = np.full(self.capacity, np.nan)
        self._db = np.full((self.capacity, self.chans.size), np.nan, dtype=np.float16)
        self._next = 0
        self.rows = 0

    def push(self, t: np.ndarray, db: np.ndarray) -> None:
        t = np.asarray(t, dtype=np.float64)
        if t.size == 0:
            return
        if t.size > self.capacity:
            t, db = t[-self.capacity:], db[-self.capacity:]
        idx = (self._next + np.arange(t.size)) % self.capacity
        self._t[idx] = t
        self._db[idx] = db
        self._next = int((self._next + t.size) % self.capacity)
        self.rows = min(self.capacity, self.rows + t.size)

    @property
    def span(self) -> tuple[float, float] | None:
        """(first, end) time held, or None when empty."""
        if not self.rows:
            return None
        return float(np.nanmin(self._t)), float(np.nanmax(self._t)) + self.row_s

    def cutout(self, t_start: float, t_end: float) -> DynamicSpectrum | None:
        """Rows starting in [t_start, t_end) on a regular grid (missing rows NaN, FLAG_GAP)."""
        sel = np.flatnonzero((self._t >= t_start) & (self._t < t_end))
        if sel.size == 0:
            return None
        sel = sel[np.argsort(self._t[sel])]
        t = self._t[sel]
        pos = np.round((t - t[0]) / self.row_s).astype(np.int64)
        n = int(pos[-1]) + 1
        power = np.full((n, self.freq_hz.size), np.nan, dtype=np.float32)
        flags = np.full((n, self.freq_hz.size), FLAG_UNCOVERED, dtype=np.uint8)
        flags[:, self.chans] = FLAG_GAP
        power[np.ix_(pos, self.chans)] = self._db[sel].astype(np.float32)
        flags[np.ix_(pos, self.chans)] = 0
        return DynamicSpectrum(power, float(t[0]), self.row_s, self.freq_hz, flags, segment=self.segment,
                               meta=dict(self.meta, resolution="ring"))
