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

Kinds (``[receiver] kind``): ``rtlsdr`` (a USB dongle through pyrtlsdr), ``rtltcp`` (a
dongle served by rtl_tcp on another computer) and ``recording`` (a SigMF or raw file
replayed at full speed); ``simulated`` is ``rxlog.sim.iq.SimulatedReceiver``.
``rxlog.station.sources.open_source(cfg)`` builds the configured one.

Time. An RTL2832U sends neither timestamps nor sequence numbers and its crystal is off
by 1-50 ppm (up to ~4 s a day). Live sources therefore count samples and discipline the
count against the host with ``ClockDiscipline``: the count's rate is tracked against
CLOCK_MONOTONIC (a count falling behind the clock means samples were lost: a gap, given
as ``SampleBlock.dropped_before``, never glued over), and sample times are anchored to
CLOCK_REALTIME (NTP) for UTC.
"""

from __future__ import annotations

import collections
import json
import logging
import math
import socket
import struct
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from rxlog import validate
from rxlog.errors import RxlogError
from rxlog.retry import DoublingWait
from rxlog.timeutil import parse_iso

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
    lost just before it. USB synchronous reads need little look-ahead (the dongle queues
    only a few ms, so a host that falls behind loses samples at the next read); rtl_tcp
    needs more (the server and TCP queue, and the network stalls). A read only a few ms
    late whose successors are later still is taken as late, and the loss put before the
    next read. ``pop_ready(flush=True)`` decides what is pending on the reads there are
    (before a retune, say).

    Steering. The time track (the time of the next sample) follows the fitted line with
    a bounded slew of ``max_slew`` (1000 ppm: a 10 ms correction takes 10 s) so block
    times stay continuous; errors over ``step_s`` are stepped at once.

    UTC. A sample's CLOCK_MONOTONIC time is moved to UTC with the CLOCK_REALTIME minus
    CLOCK_MONOTONIC difference read at the same moment, so NTP's slewing and steps of
    the host clock pass straight through. The constant part of the transport latency
    (USB ~1 ms) is not removed.
    """

    def __init__(self, rate_hz: float, *, monotonic=time.monotonic, realtime=time.time,
                 lookahead: int = 0, tolerance_s: float = 0.004, fit_interval_s: float = 5.0,
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

    @property
    def pending_samples(self) -> int:
        """Samples read but not yet handed out (waiting for their look-ahead)."""
        return sum(q[0] for q in self._queue)

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
        d, e = [], self.count
        for k, (nk, mk, _, _) in enumerate(self._queue):
            if k > self.lookahead:
                break
            e += nk
            d.append(mk - (self.a + e * self.s))
        excess = min(d)
        # A read a few ms late followed by a loss (later reads later still) is a late read:
        # a host that falls behind loses samples at its *next* read, so the loss goes there.
        if len(d) > 1 and excess == d[0] and excess < 3 * self.tolerance_s and min(d[1:]) - d[0] > self.tolerance_s:
            excess = 0.0
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


# ---------------------------------------------------------------------------- live sources

# librtlsdr's resampler accepts these rates (rtlsdr_set_sample_rate in librtlsdr.c rejects
# <= 225 kS/s, 300-900 kS/s and > 3.2 MS/s with -EINVAL).
RTL_RATE_RANGES = ((225_001, 300_000), (900_001, 3_200_000))

# rtl_tcp commands: 1-byte id, big-endian u32 argument (rtl_tcp.c in the osmocom rtl-sdr
# sources; the set is also mirrored by other servers of the protocol).
TCP_SET_FREQ, TCP_SET_SAMPLE_RATE, TCP_SET_GAIN_MODE, TCP_SET_GAIN = 0x01, 0x02, 0x03, 0x04
TCP_SET_FREQ_CORRECTION, TCP_SET_AGC_MODE, TCP_SET_DIRECT_SAMPLING = 0x05, 0x08, 0x09
TCP_SET_BIAS_TEE = 0x0E
DIRECT_SAMPLING = {"off": 0, "i": 1, "q": 2}


RTL_RATE_TEXT = ("librtlsdr accepts 225001-300000 or 900001-3200000 samples/s "
                 "(2400000 is the highest that runs without drops on most hosts)")


def rtl_rate_problems(rate_hz: float) -> list[str]:
    """Why librtlsdr would refuse ``rate_hz`` (empty when it accepts it)."""
    if any(lo <= rate_hz <= hi for lo, hi in RTL_RATE_RANGES):
        return []
    return [f"{RTL_RATE_TEXT}, got {rate_hz:g}"]


class _LiveSource:
    """Shared by live receivers: settings, segments, and counted samples disciplined to UTC.

    Subclasses provide ``_connect()``, ``_disconnect()``, ``_set_center(hz)`` (sky hz) and
    ``_read_raw(n) -> complex64``.
    """

    kind = "live"
    lookahead = 0

    def __init__(self, *, rate_hz: float = 2_400_000, gain_db: float = 30.0, ppm: int = 0,
                 direct_sampling: str = "off", upconverter_lo_hz: float = 0.0,
                 bias_tee: bool = False, agc: bool = False, center_hz: float | None = None,
                 monotonic=time.monotonic, realtime=time.time, tolerance_s: float | None = None):
        if agc:
            raise RxlogError("[receiver] agc: automatic gain control refused: it changes the gain "
                             "while the logger runs, so background and burst levels stop being "
                             "comparable; set agc = false and a fixed gain_db")
        if direct_sampling not in DIRECT_SAMPLING:
            raise RxlogError(f"[receiver] direct_sampling: expected 'off', 'i' or 'q', got {direct_sampling!r}")
        self.rate_hz = float(rate_hz)
        self.requested_gain_db = float(gain_db)
        self.gain_db = float(gain_db)
        self.ppm = int(ppm)
        self.direct_sampling = direct_sampling
        self.upconverter_lo_hz = float(upconverter_lo_hz)
        self.bias_tee = bool(bias_tee)
        self.center_hz = float(center_hz) if center_hz else 20e6
        self.monotonic, self.realtime = monotonic, realtime
        self.tolerance_s = tolerance_s
        self.segment = ""
        self._n_segments = 0
        self._clock: ClockDiscipline | None = None
        self._ready: collections.deque = collections.deque()
        self.is_open = False

    @classmethod
    def _settings(cls, rx: dict) -> dict:
        return dict(rate_hz=rx["sample_rate_hz"], gain_db=rx["gain_db"], ppm=rx["ppm"],
                    direct_sampling=rx["direct_sampling"], upconverter_lo_hz=rx["upconverter_lo_hz"],
                    bias_tee=rx["bias_tee"], agc=rx["agc"])

    # -- the interface
    def open(self) -> None:
        self._connect()
        self.is_open = True
        self._clock = ClockDiscipline(self.rate_hz, monotonic=self.monotonic, realtime=self.realtime,
                                      lookahead=self.lookahead,
                                      **({} if self.tolerance_s is None else {"tolerance_s": self.tolerance_s}))
        self._ready.clear()
        self._new_segment()

    def close(self) -> None:
        if self.is_open:
            self.is_open = False
            self._disconnect()

    def tune(self, center_hz: float) -> None:
        """Retune to the sky frequency ``center_hz``; starts a new segment.

        Reads still pending in the clock's look-ahead come out first, with the old
        segment. The first buffers after a retune hold stale samples (queued in the
        dongle, the USB stack or the rtl_tcp server): the sweeper throws them away.
        """
        self._set_center(float(center_hz))
        self.center_hz = float(center_hz)
        self._new_segment()

    def read(self, n_samples: int) -> SampleBlock:
        if not self.is_open:
            raise RxlogError("receiver: read() before open()")
        while not self._ready:
            x = self._read_raw(int(n_samples))
            self._clock.push(x.size, (x, self.segment, self.center_hz, self.gain_db))
            self._ready.extend(self._clock.pop_ready())
        return self._block(self._ready.popleft())

    def drain(self) -> list[SampleBlock]:
        """Hand out every read still waiting for its look-ahead (decided on the reads there are).

        The sweeper calls it at the end of a dwell, before retuning, so no samples of the
        dwell stay behind.
        """
        if self._clock is not None:
            self._ready.extend(self._clock.pop_ready(flush=True))
        out = [self._block(r) for r in self._ready]
        self._ready.clear()
        return out

    @property
    def pending_samples(self) -> int:
        """Samples read from the receiver but not handed out yet."""
        if self._clock is None:
            return 0
        return self._clock.pending_samples + sum(r[0][0].size for r in self._ready)

    def _block(self, ready) -> SampleBlock:
        (x, seg, center, gain), t0, dropped = ready
        return SampleBlock(x, t0, center, self.rate_hz, gain, seg, dropped)

    @property
    def samples_received(self) -> int:
        return 0 if self._clock is None else self._clock.received_total

    @property
    def samples_dropped(self) -> int:
        return 0 if self._clock is None else self._clock.dropped_total

    def meta(self) -> dict:
        """Receiver settings for spectrum headers (header-safe scalars)."""
        return {"receiver": self.kind, "rate_hz": self.rate_hz, "gain_db": self.gain_db, "ppm": self.ppm,
                "direct_sampling": self.direct_sampling, "upconverter_lo_hz": self.upconverter_lo_hz,
                "bias_tee": self.bias_tee}

    def _new_segment(self) -> None:
        self._n_segments += 1
        self.segment = _segment_id(self.kind, self.realtime(), self._n_segments)

    def _tuned_hz(self, sky_hz: float) -> float:
        """Frequency the receiver is set to for a sky frequency (an upconverter adds its LO)."""
        return sky_hz + self.upconverter_lo_hz

    def __enter__(self):
        self.open()
        return self

    def __exit__(self, *exc):
        self.close()


def _load_pyrtlsdr():
    """Import pyrtlsdr only when a dongle is wanted, so rxlog runs without librtlsdr."""
    try:
        import rtlsdr
    except ImportError as e:
        raise RxlogError(f"receiver: cannot load pyrtlsdr/librtlsdr ({e}); install the C library with "
                         "`pip install 'pyrtlsdr[lib]'` or Debian's `apt install librtlsdr0`") from None
    if getattr(rtlsdr, "RtlSdr", None) is None:      # pyrtlsdr in client-only mode
        raise RxlogError("receiver: pyrtlsdr has no USB support here ($RTLSDR_CLIENT_MODE is set, or "
                         "librtlsdr is missing); unset it, or use kind = \"rtltcp\"")
    return rtlsdr


# libusb error numbers that pyrtlsdr passes on in LibUSBError.errno (libusb.h)
_LIBUSB_ACCESS, _LIBUSB_NO_DEVICE, _LIBUSB_BUSY = -3, -4, -6


class RtlSdrSource(_LiveSource):
    """An RTL2832U dongle on USB through pyrtlsdr, read synchronously in small buffers.

    Manual gain only (tuner AGC and the RTL2832 digital AGC off). ``direct_sampling``
    'q' (or 'i') feeds HF straight into the ADC, or ``upconverter_lo_hz`` is added to
    every tuning. ``device_class`` stands in for ``rtlsdr.RtlSdr`` (tests pass a fake
    device; everything after it is this code).
    """

    kind = "rtlsdr"
    lookahead = 2      # host jitter is ms; a host that falls further behind loses samples at the next read

    def __init__(self, *, device_index: int = 0, serial: str = "", device_class=None, **settings):
        super().__init__(**settings)
        problems = rtl_rate_problems(self.rate_hz)
        if problems:
            raise RxlogError(f"[receiver] sample_rate_hz: {problems[0]}")
        self.device_index = int(device_index)
        self.serial = str(serial or "")
        self.device_class = device_class
        self.dev = None

    @classmethod
    def from_config(cls, cfg, **kwargs):
        rx = cfg["receiver"]
        return cls(device_index=rx["device_index"], serial=rx["serial"], **cls._settings(rx), **kwargs)

    def _name(self) -> str:
        return f"RTL-SDR serial {self.serial!r}" if self.serial else f"RTL-SDR #{self.device_index}"

    def _connect(self) -> None:
        cls = self.device_class or _load_pyrtlsdr().RtlSdr
        try:
            serials = list(cls.get_device_serial_addresses())
        except OSError as e:
            raise RxlogError(f"receiver: cannot list RTL-SDR devices ({e})") from None
        if not serials:
            raise RxlogError("receiver: no RTL-SDR found on USB; check the cable and `lsusb` "
                             "(a Realtek 0bda:2838 or similar device should be listed)")
        if self.serial and self.serial not in serials:
            raise RxlogError(f"receiver: no RTL-SDR with serial {self.serial!r} "
                             f"(found: {', '.join(map(repr, serials))}); fix [receiver] serial")
        if not self.serial and self.device_index >= len(serials):
            raise RxlogError(f"receiver: [receiver] device_index = {self.device_index} but only "
                             f"{len(serials)} RTL-SDR found (indices 0-{len(serials) - 1})")
        try:
            if self.serial:
                self.dev = cls(serial_number=self.serial)
            else:
                self.dev = cls(device_index=self.device_index)
        except OSError as e:
            code = getattr(e, "errno", None)
            if code == _LIBUSB_BUSY:
                raise RxlogError(f"receiver: {self._name()} is busy: another program has it open, or "
                                 "the kernel's DVB driver (dvb_usb_rtl28xxu) claimed it; stop that "
                                 "program or blacklist the driver") from None
            if code == _LIBUSB_ACCESS:
                raise RxlogError(f"receiver: no permission to open {self._name()}; install rxlog's udev "
                                 "rule (rxlog units) or add this user to the device's group") from None
            if code == _LIBUSB_NO_DEVICE:
                raise RxlogError(f"receiver: {self._name()} disappeared while opening it (USB reset?)") from None
            raise RxlogError(f"receiver: cannot open {self._name()} ({e})") from None
        try:
            self._configure()
        except RxlogError:
            self._disconnect()
            raise
        except OSError as e:
            self._disconnect()
            raise RxlogError(f"receiver: {self._name()} refused a setting ({e})") from None

    def _configure(self) -> None:
        dev = self.dev
        try:
            dev.set_sample_rate(int(self.rate_hz))
        except OSError:
            raise RxlogError(f"receiver: {self._name()} refused sample rate {self.rate_hz:g} "
                             f"samples/s; {RTL_RATE_TEXT}") from None
        dev.set_direct_sampling(DIRECT_SAMPLING[self.direct_sampling])
        if self.ppm:        # librtlsdr reports an error when the correction is unchanged, so skip 0
            dev.set_freq_correction(self.ppm)
        dev.set_agc_mode(False)                 # RTL2832 digital AGC off
        dev.set_manual_gain_enabled(True)       # tuner AGC off
        dev.set_gain(self.requested_gain_db)    # librtlsdr picks the nearest gain the tuner has
        self.gain_db = float(dev.get_gain())
        if self.bias_tee:
            try:
                dev.set_bias_tee(True)
            except AttributeError:
                raise RxlogError("receiver: this librtlsdr has no bias-tee support; "
                                 "set bias_tee = false or update librtlsdr") from None
        self._set_center(self.center_hz)

    def _disconnect(self) -> None:
        if self.dev is not None:
            try:
                self.dev.close()
            finally:
                self.dev = None

    def _set_center(self, sky_hz: float) -> None:
        try:
            self.dev.set_center_freq(int(round(self._tuned_hz(sky_hz))))
        except OSError as e:
            raise RxlogError(f"receiver: {self._name()} cannot tune to {self._tuned_hz(sky_hz) / 1e6:.4f} MHz "
                             f"({e}); below ~24 MHz use direct_sampling or an upconverter") from None

    def _read_raw(self, n: int) -> np.ndarray:
        try:
            buf = self.dev.read_bytes(2 * n)
        except (OSError, AttributeError) as e:       # AttributeError: pyrtlsdr closed the device itself
            raise ReceiverLost(f"receiver: {self._name()} stopped delivering samples ({e}); "
                               "unplugged or reset") from None
        return to_complex64(np.frombuffer(buf, dtype=np.uint8), "cu8")


class RtlTcpSource(_LiveSource):
    """A dongle served by rtl_tcp over TCP, on our own implementation of its wire protocol.

    The server opens with a 12-byte header (b"RTL0", tuner type and gain count as
    big-endian u32) and then streams cu8 samples; the client sends 5-byte commands
    (1-byte id, big-endian u32). A lost connection is retried with a doubling wait for
    up to ``reconnect_max_s``; the settings are sent again and the clock discipline sees
    the missing time as a gap in the count.
    """

    kind = "rtltcp"
    lookahead = 64     # the server and TCP queue samples: a late read is usually a stall (up to ~0.4 s), not a loss

    def __init__(self, *, host: str = "127.0.0.1", port: int = 1234, reconnect_max_s: float = 60.0,
                 timeout_s: float = 5.0, sleep=time.sleep, **settings):
        super().__init__(**settings)
        self.host, self.port = host, int(port)
        self.reconnect_max_s = float(reconnect_max_s)
        self.timeout_s = float(timeout_s)
        self.sleep = sleep
        self.sock: socket.socket | None = None
        self.tuner_type = None
        self.gain_count = None
        self.reconnects = 0

    @classmethod
    def from_config(cls, cfg, **kwargs):
        rx = cfg["receiver"]
        return cls(host=rx["host"], port=rx["port"], reconnect_max_s=rx["reconnect_max_s"],
                   **cls._settings(rx), **kwargs)

    def _connect(self) -> None:
        where = f"rtl_tcp at {self.host}:{self.port}"
        try:
            sock = socket.create_connection((self.host, self.port), timeout=self.timeout_s)
        except OSError as e:
            raise RxlogError(f"receiver: cannot connect to {where} ({e.strerror or e}); is rtl_tcp "
                             "running there and listening on that address (rtl_tcp -a ADDRESS)?") from None
        try:
            header = self._recv_exact(sock, 12)
        except OSError as e:
            sock.close()
            raise RxlogError(f"receiver: {where} sent no header ({e})") from None
        if header[:4] != b"RTL0":
            sock.close()
            raise RxlogError(f"receiver: {where} is not an rtl_tcp server (header {header[:4]!r}, expected b'RTL0')")
        self.tuner_type, self.gain_count = struct.unpack(">II", header[4:12])
        self.sock = sock
        self._send(TCP_SET_SAMPLE_RATE, int(self.rate_hz))
        self._send(TCP_SET_DIRECT_SAMPLING, DIRECT_SAMPLING[self.direct_sampling])
        self._send(TCP_SET_FREQ_CORRECTION, self.ppm)
        self._send(TCP_SET_AGC_MODE, 0)
        self._send(TCP_SET_GAIN_MODE, 1)                       # manual
        self._send(TCP_SET_GAIN, int(round(self.requested_gain_db * 10)))   # tenths of dB
        if self.bias_tee:
            self._send(TCP_SET_BIAS_TEE, 1)
        self._send(TCP_SET_FREQ, int(round(self._tuned_hz(self.center_hz))))

    def _disconnect(self) -> None:
        if self.sock is not None:
            try:
                self.sock.close()
            finally:
                self.sock = None

    def _send(self, cmd: int, value: int) -> None:
        self.sock.sendall(struct.pack(">BI", cmd, int(value) & 0xFFFFFFFF))

    def _set_center(self, sky_hz: float) -> None:
        try:
            self._send(TCP_SET_FREQ, int(round(self._tuned_hz(sky_hz))))
        except OSError:
            self._reconnect()      # settings (with the new centre) go out again on reconnect

    @staticmethod
    def _recv_exact(sock: socket.socket, nbytes: int) -> bytearray:
        buf = bytearray(nbytes)
        view = memoryview(buf)
        got = 0
        while got < nbytes:
            k = sock.recv_into(view[got:])
            if k == 0:
                raise ConnectionError("connection closed by the server")
            got += k
        return buf

    def _read_raw(self, n: int) -> np.ndarray:
        while True:
            try:
                if self.sock is None:
                    raise ConnectionError("not connected")
                buf = self._recv_exact(self.sock, 2 * n)
                return to_complex64(np.frombuffer(buf, dtype=np.uint8), "cu8")
            except OSError as e:
                log.warning("rtl_tcp %s:%d: connection lost (%s)", self.host, self.port, e)
                self._reconnect()

    def _reconnect(self) -> None:
        """Reconnect with a doubling wait; the missing time becomes a gap in the count.

        After ``reconnect_max_s`` of failed attempts it gives up with ``ReceiverLost``
        (the logger then closes the source and reopens it on its own schedule).
        """
        self._disconnect()
        lost_at = self.monotonic()
        wait = DoublingWait(0.5)
        while True:
            self.sleep(wait.s)
            try:
                self._connect()
            except RxlogError as e:
                after = wait.double()
                if self.monotonic() - lost_at + after > self.reconnect_max_s:
                    raise ReceiverLost(f"{e} (gave up reconnecting after "
                                       f"{self.monotonic() - lost_at:.0f} s)") from None
                log.warning("rtl_tcp: %s; next try in %.1f s", e, after)
                continue
            self.reconnects += 1
            log.warning("rtl_tcp %s:%d: reconnected after %.1f s; the samples in between are a gap",
                        self.host, self.port, self.monotonic() - lost_at)
            return


# ---------------------------------------------------------------------------- recordings

@dataclass
class Capture:
    """One stretch of a recording with unchanged tuning (a SigMF capture)."""

    sample_start: int        # first sample (index in the file's samples)
    n_samples: int
    byte_offset: int         # where sample_start begins in the data file
    center_hz: float
    t0: float                # POSIX seconds UTC of sample_start
    segment: str
    dropped_before: int = 0  # samples missing before this capture (from its start time)
    label: str = "--center"  # what gave its frequency, for messages ("captures[2] core:frequency")


@dataclass
class RawChunk:
    """Samples as stored in the file (interleaved I/Q components), with their time."""

    data: np.ndarray         # (2n,) components in the file's dtype (a mapped view: use, then drop)
    fmt: str
    t0: float
    center_hz: float
    rate_hz: float
    segment: str
    dropped_before: int

    @property
    def n(self) -> int:
        return self.data.size // 2


class RecordingSource:
    """A recording replayed as a source: SigMF or raw interleaved I/Q, read in bounded chunks.

    The data file is mapped (numpy memmap) one chunk at a time and unmapped after it,
    so memory stays flat however large the file. Samples come as fast as they can be
    read; times come from the recording (``core:datetime`` or the given start).
    """

    kind = "recording"

    def __init__(self, data_path, fmt: str, rate_hz: float, captures: list[Capture], gain_db: float = math.nan,
                 source=None):
        if fmt not in FORMATS:
            raise RxlogError(f"{data_path}: sample format {fmt!r} not supported; expected one of "
                             f"{', '.join(FORMATS)}")
        self.data_path = Path(data_path)
        self.source = Path(source or data_path)      # the file that describes it (SigMF metadata)
        self.fmt = fmt
        self.rate_hz = float(rate_hz)
        self.captures = captures
        self.gain_db = float(gain_db)
        self._dtype = FORMATS[fmt][0]
        self._k = 0          # capture being read
        self._pos = 0        # samples read within it
        self.is_open = False

    @property
    def bytes_per_sample(self) -> int:
        return 2 * self._dtype.itemsize

    @property
    def n_samples(self) -> int:
        return sum(c.n_samples for c in self.captures)

    @property
    def center_hz(self) -> float:
        return self.captures[min(self._k, len(self.captures) - 1)].center_hz

    @property
    def segment(self) -> str:
        return self.captures[min(self._k, len(self.captures) - 1)].segment

    @property
    def t0(self) -> float:
        return self.captures[0].t0

    @property
    def duration_s(self) -> float:
        return self.n_samples / self.rate_hz

    def open(self) -> None:
        try:
            with open(self.data_path, "rb"):
                pass
        except OSError as e:
            raise RxlogError(f"{self.data_path}: cannot read the recording ({e.strerror or e})") from None
        self._k, self._pos = 0, 0
        self.is_open = True

    def close(self) -> None:
        self.is_open = False

    def tune(self, center_hz: float) -> None:
        raise RxlogError(f"{self.data_path}: a recording cannot be retuned; use [sweep] mode = \"single\"")

    def read_raw(self, n_samples: int) -> RawChunk:
        """Up to ``n_samples`` samples as stored, never across a capture boundary."""
        while self._k < len(self.captures) and self._pos >= self.captures[self._k].n_samples:
            self._k += 1
            self._pos = 0
        if self._k >= len(self.captures):
            raise EndOfStream(str(self.data_path))
        cap = self.captures[self._k]
        n = int(min(n_samples, cap.n_samples - self._pos))
        offset = cap.byte_offset + self._pos * self.bytes_per_sample
        try:
            data = np.memmap(self.data_path, dtype=self._dtype, mode="r", offset=offset, shape=(2 * n,))
        except (OSError, ValueError) as e:      # shortened or removed while being read
            raise RxlogError(f"{self.data_path}: cannot read samples at byte {offset} ({e}); "
                             "was the file changed while it was read?") from None
        chunk = RawChunk(data, self.fmt, cap.t0 + self._pos / self.rate_hz, cap.center_hz, self.rate_hz,
                         cap.segment, cap.dropped_before if self._pos == 0 else 0)
        self._pos += n
        return chunk

    def read(self, n_samples: int) -> SampleBlock:
        c = self.read_raw(n_samples)
        x = to_complex64(c.data, c.fmt)
        return SampleBlock(x, c.t0, c.center_hz, c.rate_hz, self.gain_db, c.segment, c.dropped_before)

    def meta(self) -> dict:
        return {"receiver": "recording", "recording": self.data_path.name, "rate_hz": self.rate_hz,
                "sample_format": self.fmt}

    def __enter__(self):
        self.open()
        return self

    def __exit__(self, *exc):
        self.close()


def _sigmf_paths(path: Path) -> tuple[Path, Path] | None:
    name = path.name
    for suffix in (".sigmf-meta", ".sigmf-data", ".sigmf"):
        if name.endswith(suffix):
            base = path.with_name(name[: -len(suffix)])
            return base.with_name(base.name + ".sigmf-meta"), base.with_name(base.name + ".sigmf-data")
    meta = path.with_name(name + ".sigmf-meta")
    if meta.is_file():
        return meta, path.with_name(name + ".sigmf-data")
    return None


# A .sigmf-meta larger than this is refused unread: a whole day retuned every second is
# ~10 MB of JSON, so anything bigger is not metadata.
MAX_SIGMF_META_BYTES = 64 * 1024 * 1024

# A capture may start up to this long before the previous one ends by its sample count:
# recorders stamp core:datetime from the host clock when the retune is asked for, while
# librtlsdr still holds ~0.8 s of queued buffers (15 x 256 KiB at 2.4 MS/s). More overlap
# than this is not a clock quirk but captures out of order.
CAPTURE_OVERLAP_S = 1.0


def open_recording(path, fmt: str | None = None, rate_hz: float | None = None,
                   center_hz: float | None = None, start=None) -> RecordingSource:
    """A SigMF recording (``x.sigmf-meta`` / ``x.sigmf-data``) or a raw I/Q file.

    Raw files need ``fmt`` (cu8, ci8, ci16_le, cf32_le), ``rate_hz``, ``center_hz`` and
    ``start`` (ISO 8601 UTC text or POSIX seconds). For SigMF, ``start`` (if given)
    overrides the first capture's ``core:datetime``. Everything the description says is
    checked here, before a sample is read: types, finite values, rates and frequencies in
    range (``rxlog.validate``), times within the receiver era, and the data file's length
    against the metadata. RxlogError names the file and the key or option.
    """
    path = Path(path)
    if fmt in (None, "", "sigmf"):
        paths = _sigmf_paths(path)
        if paths is not None:
            return _open_sigmf(*paths, start=start)
        if fmt == "sigmf":
            raise RxlogError(f"{path}: no SigMF metadata ({path.name}.sigmf-meta) found")
    missing = [opt for opt, v in (("--format", fmt), ("--rate", rate_hz), ("--center", center_hz),
                                  ("--start", start)) if v is None or (isinstance(v, str) and not v)]
    if missing:
        raise RxlogError(f"{path}: a raw recording (not SigMF) needs {', '.join(missing)} "
                         "(sample format, sample rate in Hz, centre frequency in Hz, start time in UTC)")
    if not isinstance(fmt, str) or fmt not in FORMATS:
        raise RxlogError(f"{path}: --format {fmt!r} not supported; expected one of {', '.join(FORMATS)}")
    if not path.is_file():
        raise RxlogError(f"{path}: recording not found")
    t0 = _start_time(start, f"{path}: --start")
    rate = validate.number(rate_hz, f"{path}: --rate", validate.MIN_RATE_HZ, validate.MAX_RATE_HZ,
                           "a sample rate in Hz")
    center = validate.number(center_hz, f"{path}: --center", 1.0, validate.MAX_TUNING_HZ,
                             "a centre frequency in Hz")
    bps = 2 * FORMATS[fmt][0].itemsize
    size = path.stat().st_size
    if size % bps:
        raise RxlogError(f"{path}: {size} bytes is not a whole number of {fmt} samples ({bps} bytes each); "
                         "is --format right, or is the file cut short?")
    n = size // bps
    if n == 0:
        raise RxlogError(f"{path}: no complete {fmt} sample in the file")
    validate.check_era(t0, t0 + n / rate, f"{path}: --start")
    cap = Capture(0, n, 0, center, t0, f"rec-{path.stem}-0")
    return RecordingSource(path, fmt, rate, [cap])


def _start_time(start, what: str) -> float:
    if validate.is_number(start):
        t = float(start)
    else:
        try:
            t = parse_iso(start)
        except (TypeError, ValueError, OverflowError) as e:
            raise RxlogError(f"{what}: {e}") from None
    validate.check_era(t, None, what)
    return t


def _read_sigmf_json(meta_path: Path):
    where = str(meta_path)
    try:
        size = meta_path.stat().st_size
        if size > MAX_SIGMF_META_BYTES:
            raise RxlogError(f"{where}: {size / 2**20:.0f} MB is too large for SigMF metadata "
                             f"(limit {MAX_SIGMF_META_BYTES // 2**20} MB)")
        return json.loads(meta_path.read_bytes().decode("utf-8"))
    except FileNotFoundError:
        raise RxlogError(f"{where}: SigMF metadata file not found") from None
    except (OSError, UnicodeDecodeError, RecursionError, ValueError) as e:   # JSONDecodeError is a ValueError
        raise RxlogError(f"{where}: unreadable SigMF metadata ({str(e)[:120]}); expected JSON text") from None


def _optional_whole(c: dict, key: str, where: str) -> int:
    """A SigMF byte count that may be absent (or null): 0 then."""
    v = c.get(key)
    return 0 if v is None else validate.whole(v, f"{where} {key}")


def _open_sigmf(meta_path: Path, data_path: Path, start=None) -> RecordingSource:
    """Read SigMF metadata (core namespace) into captures. The sigmf package is not needed.

    The whole description is checked before anything is read from the data file: see
    ``open_recording``.
    """
    where = str(meta_path)
    meta = _read_sigmf_json(meta_path)
    g = meta.get("global") if isinstance(meta, dict) else None
    if not isinstance(g, dict):
        raise RxlogError(f"{where}: no 'global' object; expected SigMF metadata "
                         "{\"global\": {...}, \"captures\": [...]}")
    dtype = g.get("core:datatype")
    if not isinstance(dtype, str) or dtype not in FORMATS:
        raise RxlogError(f"{where}: global core:datatype {dtype!r} not supported; expected one of "
                         f"{', '.join(FORMATS)} (complex samples)")
    rate = validate.number(g.get("core:sample_rate"), f"{where}: global core:sample_rate",
                           validate.MIN_RATE_HZ, validate.MAX_RATE_HZ, "a sample rate in Hz")
    n_chan = g.get("core:num_channels", 1)
    if validate.whole(n_chan, f"{where}: global core:num_channels", 1) != 1:
        raise RxlogError(f"{where}: global core:num_channels = {n_chan}; rxlog reads one channel")
    trailing = _optional_whole(g, "core:trailing_bytes", f"{where}: global")
    caps = meta.get("captures")
    if not isinstance(caps, list) or not caps:
        raise RxlogError(f"{where}: no captures; expected at least one with core:frequency")
    if not data_path.is_file():
        raise RxlogError(f"{data_path}: SigMF data file not found beside {meta_path.name}")
    bps = 2 * FORMATS[dtype][0].itemsize
    size = data_path.stat().st_size
    starts, freqs, byte_offsets, headers = [], [], [], 0
    for i, c in enumerate(caps):
        at = f"{where}: captures[{i}]"
        if not isinstance(c, dict):
            raise RxlogError(f"{at}: expected an object with core:sample_start and core:frequency, got {c!r:.40}")
        s = validate.whole(c.get("core:sample_start", 0 if i == 0 else None), f"{at} core:sample_start")
        if starts and s < starts[-1]:
            raise RxlogError(f"{at} core:sample_start {s} goes backwards (captures[{i - 1}] starts at {starts[-1]})")
        freqs.append(validate.number(c.get("core:frequency"), f"{at} core:frequency", 1.0,
                                     validate.MAX_TUNING_HZ, "a centre frequency in Hz"))
        headers += _optional_whole(c, "core:header_bytes", at)
        starts.append(s)
        byte_offsets.append(headers + s * bps)
    payload = size - trailing - headers
    if payload < 0:
        raise RxlogError(f"{data_path}: {size} bytes, fewer than the {headers + trailing} header and trailing "
                         f"bytes {meta_path.name} declares")
    if payload % bps:
        raise RxlogError(f"{data_path}: {payload} bytes of samples is not a whole number of {dtype} samples "
                         f"({bps} bytes each); is core:datatype right, or is the file cut short?")
    total = payload // bps
    for i, s in enumerate(starts):
        if s > total:
            raise RxlogError(f"{where}: captures[{i}] core:sample_start {s} lies past the end of the data: "
                             f"{data_path.name} holds {total} {dtype} samples")
    captures: list[Capture] = []
    stem = data_path.name[: -len(".sigmf-data")] if data_path.name.endswith(".sigmf-data") else data_path.stem
    for i, c in enumerate(caps):
        end = starts[i + 1] if i + 1 < len(caps) else total
        n = end - starts[i]
        if n <= 0:
            continue
        t0, said = _capture_time(c, i, start, captures, starts[i], rate, where)
        validate.check_era(t0, t0 + n / rate, said)
        freq = freqs[i]
        dropped, segment = 0, f"rec-{stem}-{len(captures)}"
        if captures:
            prev = captures[-1]
            expected = prev.t0 + prev.n_samples / rate
            if t0 < expected - CAPTURE_OVERLAP_S:
                raise RxlogError(f"{said}: starts at {validate.when(t0)}, {expected - t0:.3g} s before the end "
                                 f"of the capture before it; expected captures in time order")
            gap = int(round((t0 - expected) * rate))
            dropped = max(0, gap)
            if freq == prev.center_hz and gap >= 0:
                segment = prev.segment          # same tuning: one segment, with a gap if any
        captures.append(Capture(starts[i], n, byte_offsets[i], freq, t0, segment, dropped,
                                label=f"captures[{i}] core:frequency"))
    if not captures:
        raise RxlogError(f"{data_path}: no samples in the data file")
    return RecordingSource(data_path, dtype, rate, captures, source=meta_path)


def _capture_time(c: dict, i: int, start, captures: list[Capture], sample_start: int, rate: float,
                  where: str) -> tuple[float, str]:
    """UTC of a capture's first sample, and what gave it (for messages)."""
    if i == 0 and start is not None and not (isinstance(start, str) and not start):
        return _start_time(start, f"{where}: --start"), f"{where}: --start"
    said = f"{where}: captures[{i}] core:datetime"
    text = c.get("core:datetime")
    if text is not None:
        try:
            return parse_iso(text), said
        except (TypeError, ValueError, OverflowError):
            raise RxlogError(f"{said} {text!r:.60} is not ISO 8601 UTC "
                             "(expected e.g. \"2026-12-01T22:00:00Z\")") from None
    if captures:
        prev = captures[-1]
        return prev.t0 + (sample_start - prev.sample_start) / rate, said
    raise RxlogError(f"{where}: captures[0] has no core:datetime; give the start time (--start)")


# ---------------------------------------------------------------------------- config checks

def config_problems(cfg: dict, at) -> list[str]:
    """Cross-key checks of ``[receiver]`` (one line per problem, naming the key)."""
    rx, sp = cfg.get("receiver", {}), cfg.get("spectra", {})
    problems = []
    if rx.get("agc"):
        problems.append(f"{at('receiver', 'agc')}: automatic gain control is refused: it changes the gain "
                        "during the night, so background and burst levels stop being comparable; "
                        "expected agc = false and a fixed gain_db")
    kind = rx.get("kind")
    if kind in ("rtlsdr", "rtltcp") and "sample_rate_hz" in rx:
        problems += [f"{at('receiver', 'sample_rate_hz')}: {p}" for p in rtl_rate_problems(rx["sample_rate_hz"])]
    if kind in ("rtlsdr", "rtltcp") and {"direct_sampling", "upconverter_lo_hz"} <= rx.keys():
        if rx["direct_sampling"] != "off" and rx["upconverter_lo_hz"]:
            problems.append(f"{at('receiver', 'upconverter_lo_hz')}: direct sampling and an upconverter "
                            "exclude each other; expected direct_sampling = \"off\" or upconverter_lo_hz = 0")
        elif rx["direct_sampling"] == "off" and not rx["upconverter_lo_hz"] and sp.get("fmin_mhz", 99) < 24:
            problems.append(f"{at('receiver', 'direct_sampling')}: R820T/R828D tuners start near 24 MHz, below "
                            "the band; expected direct_sampling = \"q\" (or \"i\") or an upconverter_lo_hz")
    if kind == "recording" and {"recording_path", "recording_format"} <= rx.keys():
        if not rx["recording_path"]:
            problems.append(f"{at('receiver', 'recording_path')}: kind = \"recording\" needs the file to replay")
        if rx["recording_format"] != "sigmf":
            if not rx.get("recording_center_hz"):
                problems.append(f"{at('receiver', 'recording_center_hz')}: a raw recording needs its centre "
                                "frequency in Hz")
            try:
                parse_iso(rx.get("recording_start_utc", ""))
            except ValueError:
                problems.append(f"{at('receiver', 'recording_start_utc')}: a raw recording needs the UTC time "
                                "of its first sample, e.g. \"2026-12-01T22:00:00Z\"")
    return problems
