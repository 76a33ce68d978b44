"""RTL-SDR source: only pyrtlsdr's device object (``rtlsdr.RtlSdr``) is replaced.

The stand-in speaks pyrtlsdr's method names and raises its errors the way pyrtlsdr does
(an IOError subclass carrying the libusb error number); it records every setting and
returns cu8 samples of a tone at a given RF frequency relative to where it is tuned.
Everything after it -- settings, errors, clock discipline, channelizer -- is rxlog's.
"""

import ctypes
import sys

import numpy as np
import pytest

from rxlog.errors import RxlogError
from rxlog.receive.blocks import ReceiverLost
from rxlog.receive.channelizer import Channelizer
from rxlog.receive.devices import RtlSdrSource
from rxlog.spectrum import channel_grid
from rxlog.station.config import config_from_text
from rxlog.station.sources import open_source

R820T_GAINS = [0, 9, 14, 27, 37, 77, 87, 125, 144, 157, 166, 197, 207, 229, 254, 280, 297, 328, 338, 364, 372,
               386, 402, 421, 434, 439, 445, 480, 496]     # tenths of dB (librtlsdr's r82xx table, from memory)


class LibUSBError(IOError):
    """Like pyrtlsdr's: errno is the libusb error code."""

    def __init__(self, errno, msg=""):
        super().__init__(msg)
        self.errno = errno


class HostClock:
    """Injected CLOCK_MONOTONIC / CLOCK_REALTIME; the fake device moves them on as samples arrive."""

    def __init__(self):
        self.t = 0.0

    def monotonic(self):
        return 5000.0 + self.t

    def realtime(self):
        return 1_796_000_000.0 + self.t


def fake_device(serials=("00000001",), open_errno=None, refuse_rates=(), rf_tone_hz=20.31e6, fail_reads_after=None,
                clock=None):
    class FakeRtlSdr:
        instances = []

        @staticmethod
        def get_device_serial_addresses():
            return list(serials)

        def __init__(self, device_index=0, test_mode_enabled=False, serial_number=None, dithering_enabled=True):
            if open_errno is not None:
                raise LibUSBError(open_errno, f"Could not open SDR (device index = {device_index})")
            self.opened_with = {"device_index": device_index, "serial_number": serial_number}
            self.calls = []
            self.center = 100e6
            self.rate = 2.048e6
            self.gain = 0.0
            self.reads = 0
            self.n = 0
            self.rng = np.random.default_rng(0)
            FakeRtlSdr.instances.append(self)

        def _rec(self, name, *args):
            self.calls.append((name,) + args)

        def set_sample_rate(self, rate):
            self._rec("set_sample_rate", rate)
            if rate in refuse_rates:
                raise LibUSBError(-22, f"Could not set sample rate to {rate} Hz")
            self.rate = rate

        def set_center_freq(self, f):
            self._rec("set_center_freq", f)
            self.center = f

        def set_direct_sampling(self, d):
            self._rec("set_direct_sampling", d)

        def set_freq_correction(self, ppm):
            self._rec("set_freq_correction", ppm)

        def set_agc_mode(self, on):
            self._rec("set_agc_mode", on)

        def set_manual_gain_enabled(self, on):
            self._rec("set_manual_gain_enabled", on)

        def set_gain(self, g):
            self._rec("set_gain", g)
            self.gain = min(R820T_GAINS, key=lambda v: abs(v - 10 * g)) / 10

        def get_gain(self):
            return self.gain

        def set_bias_tee(self, on):
            self._rec("set_bias_tee", on)

        def read_bytes(self, num_bytes):
            self.reads += 1
            if fail_reads_after is not None and self.reads > fail_reads_after:
                raise LibUSBError(-4, f"Could not read {num_bytes} bytes")
            n = num_bytes // 2
            t = (self.n + np.arange(n)) / self.rate
            self.n += n
            if clock is not None:
                clock.t += n / self.rate            # a read returns when its samples have arrived
            # the tuner's filters pass only what lies within the sampled band
            inside = abs(rf_tone_hz - self.center) < 0.45 * self.rate
            x = 0.3 * inside * np.exp(2j * np.pi * (rf_tone_hz - self.center) * t)
            x += 0.02 * (self.rng.normal(size=n) + 1j * self.rng.normal(size=n))
            iq = np.empty(2 * n)
            iq[0::2], iq[1::2] = x.real, x.imag
            raw = np.clip(np.round(iq * 127.5 + 127.5), 0, 255).astype(np.uint8)
            return (ctypes.c_ubyte * num_bytes).from_buffer_copy(raw.tobytes())

        def close(self):
            self._rec("close")

    return FakeRtlSdr


def config(tmp_path, **rx):
    lines = "\n".join(f"{k} = {v!r}".replace("'", '"') if isinstance(v, str) else
                      f"{k} = {str(v).lower() if isinstance(v, bool) else v}" for k, v in rx.items())
    return config_from_text("[station]\nname='t'\nlatitude_deg=47\nlongitude_deg=8\n"
                            f"[receiver]\nkind = \"rtlsdr\"\n{lines}\n[sweep]\nmode='single'\n", tmp_path / "s.toml")


def test_direct_sampling_settings_and_a_tone_in_its_sky_channel(tmp_path):
    cfg = config(tmp_path, direct_sampling="q", gain_db=30.0, ppm=-2, bias_tee=True)
    clock = HostClock()
    dev = fake_device(rf_tone_hz=20.31e6, clock=clock)
    src = open_source(cfg, device_class=dev, monotonic=clock.monotonic, realtime=clock.realtime)
    src.open()
    d = dev.instances[0]
    calls = dict((c[0], c[1:]) for c in d.calls)
    assert calls["set_sample_rate"] == (2_400_000,)
    assert calls["set_direct_sampling"] == (2,)          # Q branch
    assert calls["set_freq_correction"] == (-2,)
    assert calls["set_agc_mode"] == (False,)             # RTL2832 digital AGC off
    assert calls["set_manual_gain_enabled"] == (True,)   # tuner AGC off
    assert calls["set_bias_tee"] == (True,)
    assert src.gain_db == 29.7                           # the tuner's nearest step is what is reported
    src.tune(20e6)
    assert d.center == 20e6                              # direct sampling: tuned = sky
    ch = Channelizer(freq_hz=channel_grid(16, 24, 1024))
    out = []
    for _ in range(160):
        out += ch.feed(src.read(16384))
    src.close()
    assert ("close",) in d.calls
    row = out[0].power_db[0]
    assert abs(out[0].freq_hz[int(np.nanargmax(row))] - 20.31e6) < 8e3


def test_upconverter_offset_is_added_to_every_tuning(tmp_path):
    lo = 125e6
    cfg = config(tmp_path, upconverter_lo_hz=lo)
    clock = HostClock()
    dev = fake_device(rf_tone_hz=lo + 19.5e6, clock=clock)    # a 19.5-MHz signal after a 125-MHz upconverter
    src = open_source(cfg, device_class=dev, monotonic=clock.monotonic, realtime=clock.realtime)
    src.open()
    src.tune(19.2e6)
    d = dev.instances[0]
    assert d.center == lo + 19.2e6
    assert ("set_freq_correction", 0) not in d.calls     # ppm 0 is left alone (librtlsdr would complain)
    blk = src.read(16384)
    assert blk.center_hz == 19.2e6                        # blocks speak sky frequencies
    ch = Channelizer(freq_hz=channel_grid(16, 24, 1024))
    out = []
    for _ in range(160):
        out += ch.feed(src.read(16384))
    row = out[0].power_db[0]
    assert abs(out[0].freq_hz[int(np.nanargmax(row))] - 19.5e6) < 8e3


def test_device_by_serial(tmp_path):
    dev = fake_device(serials=("00000001", "JUPITER2"))
    src = open_source(config(tmp_path, direct_sampling="q", serial="JUPITER2"), device_class=dev)
    src.open()
    assert dev.instances[0].opened_with["serial_number"] == "JUPITER2"


@pytest.mark.parametrize("make,rx,words", [
    (lambda: fake_device(serials=()), {}, ["no RTL-SDR found"]),
    (lambda: fake_device(open_errno=-6), {}, ["busy", "dvb_usb_rtl28xxu"]),
    (lambda: fake_device(open_errno=-3), {}, ["permission", "udev"]),
    (lambda: fake_device(serials=("A",)), {"serial": "B"}, ["serial 'B'", "'A'"]),
    (lambda: fake_device(serials=("A",)), {"device_index": 3}, ["device_index = 3", "only 1"]),
    (lambda: fake_device(refuse_rates=(3_200_000,)), {"sample_rate_hz": 3_200_000}, ["refused sample rate", "librtlsdr accepts"]),
])
def test_clear_errors(tmp_path, make, rx, words):
    src = open_source(config(tmp_path, direct_sampling="q", **rx), device_class=make())
    with pytest.raises(RxlogError) as e:
        src.open()
    for w in words:
        assert w in str(e.value)
    assert "\n" not in str(e.value)


def test_library_missing_says_how_to_install(tmp_path, monkeypatch):
    monkeypatch.setitem(sys.modules, "rtlsdr", None)      # import rtlsdr -> ImportError
    src = open_source(config(tmp_path, direct_sampling="q"))
    with pytest.raises(RxlogError) as e:
        src.open()
    assert "pyrtlsdr[lib]" in str(e.value) and "librtlsdr0" in str(e.value)


def test_unsupported_rate_and_agc_are_refused_before_any_device_is_touched():
    with pytest.raises(RxlogError, match="librtlsdr accepts"):
        RtlSdrSource(rate_hz=600_000, direct_sampling="q", device_class=fake_device())
    with pytest.raises(RxlogError, match="radiometry|comparable"):
        RtlSdrSource(agc=True, direct_sampling="q", device_class=fake_device())


def test_a_dongle_that_stops_delivering_is_reported_lost(tmp_path):
    src = open_source(config(tmp_path, direct_sampling="q"), device_class=fake_device(fail_reads_after=5))
    src.open()
    with pytest.raises(ReceiverLost, match="stopped delivering"):
        for _ in range(20):
            src.read(16384)


def test_sweep_over_the_device_retunes_it_and_stitches_the_tone(tmp_path):
    from rxlog.receive.sweep import Sweeper, SweepPlan

    cfg = config_from_text("[station]\nname='t'\nlatitude_deg=47\nlongitude_deg=8\n"
                           "[receiver]\nkind='rtlsdr'\ndirect_sampling='q'\n[sweep]\nring_s=0\n", tmp_path / "w.toml")
    clock = HostClock()
    dev = fake_device(rf_tone_hz=22.7e6, clock=clock)
    src = open_source(cfg, device_class=dev, monotonic=clock.monotonic, realtime=clock.realtime)
    plan = SweepPlan.from_config(cfg)
    sw = Sweeper(src, plan, Channelizer(cfg))
    sw.open()
    out = []
    while sum(d.n_time for d in out) < 2:
        out += sw.step()
    sw.close()
    tuned = [c[1] for c in dev.instances[0].calls if c[0] == "set_center_freq"]
    assert set(int(round(f)) for f in plan.tunings_hz) <= set(tuned)
    for d in out:
        assert d.meta["mode"] == "sweep" and d.meta["gain_db"] == 29.7
        row = d.power_db[-1]
        assert abs(d.freq_hz[int(np.nanargmax(row))] - 22.7e6) < 8e3
        assert np.isfinite(row).all()                       # the whole band, stitched
