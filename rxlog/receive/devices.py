"""Live receivers: the shared base of every live source, and RTL-SDR dongles on USB.

``LiveSource`` holds the settings (rate, gain, frequency correction, direct sampling or
upconverter, bias tee), starts a segment at every opening and retune, and times the
counted samples with ``rxlog.receive.clock.ClockDiscipline``. ``RtlSdrSource`` reads a
dongle through pyrtlsdr; ``rxlog.receive.rtltcp.RtlTcpSource`` one served over TCP.
``config_problems`` are the cross-key checks of ``[receiver]``.
"""

from __future__ import annotations

import collections
import time

import numpy as np

from rxlog.errors import RxlogError
from rxlog.receive.blocks import ReceiverLost, SampleBlock, segment_id, to_complex64
from rxlog.receive.clock import ClockDiscipline
from rxlog.timeutil import parse_iso

# librtlsdr's resampler accepts these rates (rtlsdr_set_sample_rate in librtlsdr.c rejects
# <= 225 kS/s, 300-900 kS/s and > 3.2 MS/s with -EINVAL).
RTL_RATE_RANGES = ((225_001, 300_000), (900_001, 3_200_000))
RTL_RATE_TEXT = ("librtlsdr accepts 225001-300000 or 900001-3200000 samples/s "
                 "(2400000 is the highest that runs without drops on most hosts)")
# librtlsdr's rtlsdr_set_direct_sampling: 0 off, 1 the I branch, 2 the Q branch
DIRECT_SAMPLING = {"off": 0, "i": 1, "q": 2}


def rtl_rate_problems(rate_hz: float) -> list[str]:
    """Why librtlsdr would refuse ``rate_hz`` (empty when it accepts it)."""
    if any(lo <= rate_hz <= hi for lo, hi in RTL_RATE_RANGES):
        return []
    return [f"{RTL_RATE_TEXT}, got {rate_hz:g}"]


class LiveSource:
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
        self.segment = segment_id(self.kind, self.realtime(), self._n_segments)

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


class RtlSdrSource(LiveSource):
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
