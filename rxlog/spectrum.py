"""The in-memory dynamic spectrum that flows between rxlog's stages.

A dynamic spectrum is power on a regular grid: rows are time steps of ``cadence_s``
starting at ``t0`` (POSIX seconds, UTC), columns are channels at ``freq_hz``.
Arrays are (n_time, n_chan). A segment is a stretch recorded with unchanged tuning,
gain, rate and channel grid; stages never mix data across segments.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

# Flag bits in ``flags`` (uint8), shared by the archive, RFI mask and detector.
FLAG_RFI = 1        # masked as interference
FLAG_GAP = 2        # no data (dropped samples, receiver away); power is NaN
FLAG_RETUNE = 4     # samples discarded after a retune
FLAG_UNCOVERED = 8  # channel outside what the receiver covered; power is NaN


@dataclass
class DynamicSpectrum:
    power_db: np.ndarray          # float32 (n_time, n_chan), dB (arbitrary reference)
    t0: float                     # POSIX seconds UTC of row 0 (channel offset 0)
    cadence_s: float              # seconds between rows
    freq_hz: np.ndarray           # float64 (n_chan,), channel centres
    flags: np.ndarray = None      # uint8 (n_time, n_chan), FLAG_* bits
    chan_offset_s: np.ndarray = None  # float32 (n_chan,): channel c of row i was sampled at times[i] + chan_offset_s[c]
    segment: str = "0"
    meta: dict = field(default_factory=dict)   # receiver settings and provenance (header-safe scalars)
    kurtosis: np.ndarray | None = None          # float32 (n_time, n_chan) spectral kurtosis, when computed

    def __post_init__(self):
        self.power_db = np.asarray(self.power_db, dtype=np.float32)
        self.freq_hz = np.asarray(self.freq_hz, dtype=np.float64)
        n_time, n_chan = self.power_db.shape
        if self.freq_hz.shape != (n_chan,):
            raise ValueError(f"freq_hz has shape {self.freq_hz.shape}, expected ({n_chan},)")
        if self.flags is None:
            self.flags = np.zeros((n_time, n_chan), dtype=np.uint8)
        self.flags = np.asarray(self.flags, dtype=np.uint8)
        if self.chan_offset_s is None:
            self.chan_offset_s = np.zeros(n_chan, dtype=np.float32)
        self.chan_offset_s = np.asarray(self.chan_offset_s, dtype=np.float32)

    @property
    def n_time(self) -> int:
        return self.power_db.shape[0]

    @property
    def n_chan(self) -> int:
        return self.power_db.shape[1]

    @property
    def times(self) -> np.ndarray:
        """POSIX seconds of each row (float64)."""
        return self.t0 + self.cadence_s * np.arange(self.n_time, dtype=np.float64)

    @property
    def t_end(self) -> float:
        """End of the last row (exclusive)."""
        return self.t0 + self.cadence_s * self.n_time

    def slice_rows(self, i0: int, i1: int) -> "DynamicSpectrum":
        """Rows i0..i1-1 as a new spectrum sharing channel metadata."""
        return DynamicSpectrum(
            power_db=self.power_db[i0:i1],
            t0=self.t0 + i0 * self.cadence_s,
            cadence_s=self.cadence_s,
            freq_hz=self.freq_hz,
            flags=self.flags[i0:i1],
            chan_offset_s=self.chan_offset_s,
            segment=self.segment,
            meta=dict(self.meta),
            kurtosis=None if self.kurtosis is None else self.kurtosis[i0:i1],
        )


def channel_grid(fmin_mhz: float, fmax_mhz: float, channels: int) -> np.ndarray:
    """Channel centres in Hz of the station's archive grid: ``channels`` equal channels over the band."""
    df = (fmax_mhz - fmin_mhz) * 1e6 / channels
    return fmin_mhz * 1e6 + df * (np.arange(channels, dtype=np.float64) + 0.5)
