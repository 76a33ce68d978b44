"""Sample blocks: what every receiver source hands out, and the sample formats it reads.

Every source has the same small interface, so the channelizer, the sweeper and the
logger never care which one they read:

- ``open()``, ``close()``;
- ``tune(center_hz)``: retune (the sky frequency of the window centre); starts a new
  segment;
- ``read(n_samples) -> SampleBlock``: synchronous; raises ``EndOfStream`` when a
  recording (or a finite simulation) has no more samples and ``ReceiverLost`` when a
  live receiver stops delivering (the logger closes it and reopens it later);
- properties ``rate_hz``, ``center_hz``, ``gain_db`` and ``segment``.

Kinds (``[receiver] kind``): ``rtlsdr`` (``rxlog.receive.devices``: a USB dongle through
pyrtlsdr), ``rtltcp`` (``rxlog.receive.rtltcp``: a dongle served by rtl_tcp on another
computer) and ``recording`` (``rxlog.receive.recordings``: a SigMF or raw file replayed
at full speed); ``simulated`` is ``rxlog.sim.iq.SimulatedReceiver``.
``rxlog.station.sources.open_source(cfg)`` builds the configured one.
"""

from __future__ import annotations

import time
from dataclasses import dataclass

import numpy as np

from rxlog.errors import RxlogError


@dataclass
class SampleBlock:
    """Consecutive complex samples from one source, with their time and receiver state."""

    samples: np.ndarray        # complex64 (n,), full scale about 1
    t0: float                  # POSIX seconds UTC of samples[0] (disciplined for live sources)
    center_hz: float           # sky frequency at the window centre (upconverter LO already removed)
    rate_hz: float             # complex samples per second
    gain_db: float             # receiver gain in force (NaN when not known)
    segment: str               # changes whenever tuning, gain or rate changes
    dropped_before: int = 0    # samples known lost just before samples[0]: a gap, never glued over

    @property
    def n(self) -> int:
        return int(self.samples.shape[0])

    @property
    def t_end(self) -> float:
        """POSIX seconds just after the last sample."""
        return self.t0 + self.n / self.rate_hz


class EndOfStream(EOFError):
    """The source has no more samples (end of a recording or of a finite simulation)."""


class ReceiverLost(RxlogError):
    """A live receiver stopped delivering samples (unplugged, USB reset, server gone)."""


# Sample formats (SigMF datatype names): numpy dtype of one real component, and the
# (offset, scale) that maps a component to full scale about 1. cu8 follows librtlsdr's
# convention of 127.5 for zero (pyrtlsdr's packed_bytes_to_iq does the same).
FORMATS: dict[str, tuple[np.dtype, float, float]] = {
    "cu8": (np.dtype(np.uint8), 127.5, 1 / 127.5),
    "ci8": (np.dtype(np.int8), 0.0, 1 / 128.0),
    "ci16_le": (np.dtype("<i2"), 0.0, 1 / 32768.0),
    "cf32_le": (np.dtype("<f4"), 0.0, 1.0),
}

_CU8_LUT: np.ndarray | None = None


def to_complex64(raw: np.ndarray, fmt: str) -> np.ndarray:
    """Interleaved I/Q components of format ``fmt`` (see FORMATS) -> complex64 samples."""
    global _CU8_LUT
    if fmt == "cu8":
        if _CU8_LUT is None:
            # one table lookup per sample: byte pair (I low, Q high) -> complex64
            v = np.arange(65536)
            lut = np.empty(65536, np.complex64)
            lut.real = ((v & 0xFF) - 127.5) / 127.5
            lut.imag = ((v >> 8) - 127.5) / 127.5
            _CU8_LUT = lut
        raw = np.ascontiguousarray(raw, dtype=np.uint8)
        return _CU8_LUT[raw[: raw.size & ~1].view("<u2")]
    if fmt == "cf32_le":
        return np.ascontiguousarray(raw, dtype="<f4")[: raw.size & ~1].view(np.complex64).astype(np.complex64)
    dtype, offset, scale = FORMATS[fmt]
    x = np.asarray(raw)[: raw.size & ~1].astype(np.float32)
    if offset:
        x -= offset
    x *= scale
    return x.view(np.complex64)



def segment_id(prefix: str, t: float, n: int) -> str:
    """A segment id unique across restarts: kind, UTC of its start, running number."""
    return f"{prefix}-{time.strftime('%Y%m%dT%H%M%S', time.gmtime(t))}-{n}"
