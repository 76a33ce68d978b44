"""Receiver sources: where complex samples come from, and when they were taken.

Every source has the same small interface, so the channelizer, the sweeper and the
logger never care which one they read:

- ``open()``, ``close()``;
- ``tune(center_hz)``: retune (the sky frequency of the window centre); starts a new
  segment;
- ``read(n_samples) -> SampleBlock``: synchronous; raises ``EndOfStream`` when a
  recording (or a finite simulation) has no more samples and ``ReceiverLost`` when a
  live receiver stops delivering (the logger closes it and reopens it later);
- properties ``rate_hz``, ``center_hz``, ``gain_db`` and ``segment``.

Kinds (``[receiver] kind``): ``simulated`` (``rxlog.simulator.SimulatedReceiver``),
``rtlsdr`` (a USB dongle through pyrtlsdr), ``rtltcp`` (a dongle served by rtl_tcp on
another computer) and ``recording`` (a SigMF or raw file replayed at full speed).
``open_source(cfg)`` builds the configured one.

Time. An RTL2832U sends neither timestamps nor sequence numbers and its crystal is off
by 1-50 ppm (up to ~4 s a day). Live sources therefore count samples and discipline the
count against the host with ``ClockDiscipline``: the count's rate is tracked against
CLOCK_MONOTONIC (a count falling behind the clock means samples were lost: a gap, given
as ``SampleBlock.dropped_before``, never glued over), and sample times are anchored to
CLOCK_REALTIME (NTP) for UTC.
"""

from __future__ import annotations

import collections
import datetime as dt
import json
import logging
import math
import os
import socket
import struct
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from rxlog.errors import RxlogError
from rxlog.timeutil import iso, parse_iso

log = logging.getLogger("rxlog.receiver")


# ---------------------------------------------------------------------------- the contract

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


def _segment_id(prefix: str, t: float, n: int) -> str:
    """A segment id unique across restarts: kind, UTC of its start, running number."""
    return f"{prefix}-{time.strftime('%Y%m%dT%H%M%S', time.gmtime(t))}-{n}"


# ---------------------------------------------------------------------------- clock discipline

class ClockDiscipline:
    """Times and gaps for a stream of counted samples from a free-running crystal.

    Call ``push(n, item)`` right after each read of ``n`` samples returns; it reads both
    host clocks. ``pop_ready()`` then hands back ``(item, t0_utc, dropped_before)`` for
    each read whose fate is decided, in order. ``stamp(n)`` does both for a source without
    look-ahead.

    Model. The read of the sample with running index e returns on CLOCK_MONOTONIC at
    ``m = a + e / r + latency`` with latency >= 0 and r the true sample rate (nominal
    ± the crystal error). Every ``fit_interval_s`` of samples the read with the smallest
    ``m - e / r_nominal`` (the least-delayed one) becomes an envelope point; a straight
    line through the envelope points of the last ``fit_span_s`` gives ``a`` and ``r``.
    With 40 ppm and a fit over 10 minutes the rate is known to better than 1 ppm after a
    few minutes, so extrapolation errors stay far below a millisecond.

    Drops. The residual ``d = m - (a + e / r)`` of a read is its latency plus whatever the
    count is missing. A read that returns late but brings contiguous samples (a busy host,
    a stalled network) is followed by reads that catch up, so ``d`` falls back; samples
    that were lost keep every later read late. The decision for a read is therefore made
    on the smallest ``d`` among it and the ``lookahead`` reads after it: above
    ``tolerance_s`` means that many seconds of samples (rounded to whole samples) were
    lost just before it. USB synchronous reads need no look-ahead (a late read there *is*
    a lost read: the dongle does not queue); rtl_tcp does (the server queues).

    Steering. The time track (the time of the next sample) follows the fitted line with
    a bounded slew of ``max_slew`` (1000 ppm: a 10 ms correction takes 10 s) so block
    times stay continuous; errors over ``step_s`` are stepped at once.

    UTC. A sample's CLOCK_MONOTONIC time is moved to UTC with the CLOCK_REALTIME minus
    CLOCK_MONOTONIC difference read at the same moment, so NTP's slewing and steps of
    the host clock pass straight through. The constant part of the transport latency
    (USB ~1 ms) is not removed.
    """

    def __init__(self, rate_hz: float, *, monotonic=time.monotonic, realtime=time.time,
                 lookahead: int = 0, tolerance_s: float = 0.003, fit_interval_s: float = 5.0,
                 fit_span_s: float = 600.0, max_slew: float = 1e-3, step_s: float = 0.25):
        self.rate_nominal = float(rate_hz)
        self.monotonic, self.realtime = monotonic, realtime
        self.lookahead = int(lookahead)
        self.tolerance_s = float(tolerance_s)
        self.fit_interval = int(fit_interval_s * rate_hz)
        self.fit_points = max(2, int(round(fit_span_s / fit_interval_s)))
        self.max_slew, self.step_s = float(max_slew), float(step_s)
        self.count = 0                  # running index of the next sample (lost ones included)
        self.dropped_total = 0
        self.received_total = 0
        self.a: float | None = None     # fitted line: mono(e) = a + e * s
        self.s = 1.0 / self.rate_nominal
        self.track: float | None = None  # monotonic time of sample ``count`` as handed out
        self._queue: collections.deque = collections.deque()
        self._points: collections.deque = collections.deque(maxlen=self.fit_points)
        self._bin_end = self.fit_interval
        self._bin_best: tuple[float, int, float] | None = None

    @property
    def rate_hz(self) -> float:
        """Current estimate of the true sample rate (samples per CLOCK_MONOTONIC second)."""
        return 1.0 / self.s

    def push(self, n_samples: int, item=None) -> None:
        """Record that a read of ``n_samples`` has just returned (reads both clocks now)."""
        m = self.monotonic()
        off = self.realtime() - m
        self._queue.append((int(n_samples), m, off, item))
        self.received_total += int(n_samples)

    def pop_ready(self, flush: bool = False) -> list[tuple[object, float, int]]:
        """Decided reads, oldest first: (item, UTC of its first sample, samples lost before it)."""
        out = []
        while len(self._queue) > self.lookahead or (flush and self._queue):
            out.append(self._decide())
        return out

    def stamp(self, n_samples: int) -> tuple[float, int]:
        """``push`` then decide at once (look-ahead 0): (UTC of the first sample, samples lost before)."""
        self.push(n_samples)
        _, t0, dropped = self.pop_ready(flush=True)[-1]
        return t0, dropped

    def _decide(self):
        n, m, off, item = self._queue[0]
        if self.a is None:                         # first read: the line passes through it
            self.a = m - (self.count + n) * self.s
            self.track = self.a + self.count * self.s
        # residuals of this read and the look-ahead reads, assuming nothing lost after it
        excess, e = math.inf, self.count
        for k, (nk, mk, _, _) in enumerate(self._queue):
            if k > self.lookahead:
                break
            e += nk
            excess = min(excess, mk - (self.a + e * self.s))
        dropped = 0
        if excess > self.tolerance_s:
            dropped = int(round(excess / self.s))
            self.count += dropped
            self.dropped_total += dropped
            self.track += dropped * self.s
        # steer the track toward the fitted line, slew-limited
        target = self.a + self.count * self.s
        err = target - self.track
        if abs(err) > self.step_s:
            self.track = target
        else:
            self.track += max(-self.max_slew * n * self.s, min(self.max_slew * n * self.s, err))
        t0_mono = self.track
        self.track += n * self.s
        self.count += n
        self._queue.popleft()
        self._envelope(self.count, m)
        return item, t0_mono + off, dropped

    def _envelope(self, e_end: int, m: float) -> None:
        """Keep the least-delayed read of each fit interval; refit the line when one closes."""
        key = m - e_end / self.rate_nominal
        if self._bin_best is None or key < self._bin_best[0]:
            self._bin_best = (key, e_end, m)
        if len(self._points) < 2:           # no line yet: keep it under every read so far
            self.a = min(self.a, m - e_end * self.s)
        if e_end < self._bin_end:
            return
        self._points.append(self._bin_best[1:])
        self._bin_best = None
        self._bin_end = e_end + self.fit_interval
        if len(self._points) >= 2:
            e = np.array([p[0] for p in self._points], dtype=np.float64)
            mm = np.array([p[1] for p in self._points], dtype=np.float64)
            e0, m0 = e.mean(), mm.mean()
            de = e - e0
            s = float(np.dot(de, mm - m0) / np.dot(de, de))
            # a rate more than 1000 ppm from nominal is not a crystal error: keep the old one
            if abs(s * self.rate_nominal - 1.0) < 1e-3:
                self.s = s
            self.a = float(m0 - e0 * self.s)


# ---------------------------------------------------------------------------- factory

def open_source(cfg, **kwargs):
    """The source ``cfg['receiver']['kind']`` names, not yet opened.

    ``simulated`` builds ``rxlog.simulator.SimulatedReceiver(cfg, **kwargs)`` (imported
    only then); the others take their settings from ``[receiver]`` (kwargs go to their
    constructors: tests pass clocks and device factories this way).
    """
    rx = cfg["receiver"]
    kind = rx["kind"]
    if kind == "simulated":
        from rxlog import simulator

        return simulator.SimulatedReceiver(cfg, **kwargs)
    if kind == "rtlsdr":
        return RtlSdrSource.from_config(cfg, **kwargs)
    if kind == "rtltcp":
        return RtlTcpSource.from_config(cfg, **kwargs)
    if kind == "recording":
        return open_recording(rx["recording_path"] and _config_relative(cfg, rx["recording_path"]),
                              fmt=rx["recording_format"], rate_hz=rx["sample_rate_hz"],
                              center_hz=rx["recording_center_hz"],
                              start=rx["recording_start_utc"] or None, **kwargs)
    raise RxlogError(f"[receiver] kind: unknown receiver kind {kind!r}")


def _config_relative(cfg, p: str) -> Path:
    path = Path(os.path.expanduser(p))
    base = getattr(cfg, "path", None)
    return path if path.is_absolute() or base is None else Path(base).parent / path
