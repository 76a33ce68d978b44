"""Simulated IQ samples: complex Gaussian noise with a sky model's power spectrum,
generated block by block in the frequency domain (8192-point blocks, the spectrum
re-evaluated every 32 blocks, ~0.11 s), optionally quantised to cu8 like an RTL2832U
(offset 127.5, clipping at the rails, a DC offset at the tuned centre). Carrier lines and
spurs are steady tones (spectral kurtosis below 1), impulses are pulses of their own
width, and S-burst storms send millisecond chirps. Not modelled: the RTL2832's
decimation roll-off at the window edges (the channelizer uses only the middle) and
direct-sampling aliases from 4.8-12.8 MHz.

``SimulatedReceiver`` is the ``simulated`` receiver kind: the receiver-source interface
over the generator.
"""

from __future__ import annotations

import functools
import math
import time

import numpy as np
import scipy.fft
from scipy.special import ndtri

from rxlog.errors import RxlogError
from rxlog.receiver import EndOfStream, SampleBlock, _segment_id, to_complex64
from rxlog.sim.cells import calibrate_injections, cell_layout, system_psd_per_kelvin
from rxlog.sim.interference import Impulses, Spur, check_rfi_category
from rxlog.sim.model import SkyModel
from rxlog.sim.render import Grid, render
from rxlog.sim.sources import JovianStorm
from rxlog.sim.spectra import SpectralRun

IQ_BLOCK = 8192             # samples per generated block (frequency-domain synthesis)
IQ_BATCH = 8                # blocks per FFT call
IQ_PSD_BLOCKS = 32          # blocks between evaluations of the sky's spectrum (~0.11 s at 2.4 MS/s)
S_BURST_SHARE = 0.7        # of an S-burst storm's mean power carried by the bursts themselves in IQ mode
DC_OFFSET = 0.006 + 0.004j  # full scale: the RTL2832U's residual DC at the tuned centre (common practice)


@functools.cache
def _gauss_table() -> np.ndarray:
    """Standard normal quantiles at the midpoints of 65536 equal-probability bins, times
    sqrt(1/2) (one component of a unit complex Gaussian). Drawing from it by random 16-bit
    index is inverse-transform sampling; the tails beyond 4.3 sigma it cannot reach are
    restored by the inverse FFT, which sums 8192 such values into each sample."""
    return (ndtri((np.arange(65536) + 0.5) / 65536) * math.sqrt(0.5)).astype(np.float32)


class IQGenerator:
    """Complex samples of a SkyModel's sky at one tuning, as the receiver's ADC sees them.

    Block by block (``IQ_BLOCK`` samples): the sky's power spectrum at the block's time
    (re-evaluated every ``IQ_PSD_BLOCKS`` blocks on the fine frequency grid of the block)
    gives each frequency bin a complex Gaussian amplitude; the inverse FFT makes the
    samples. Impulsive interference is added in the time domain (pulses of its own
    width). ``cu8``: quantised like an RTL2832U: 127.5 for zero, clipped at 0 and 255.
    """

    def __init__(self, model: SkyModel, t0: float, center_hz: float, rate_hz: float, psd_per_k: float,
                 seed: int = 0, cu8: bool = True):
        self.model, self.t0, self.rate, self.psd_per_k = model, float(t0), float(rate_hz), float(psd_per_k)
        self.seed, self.cu8 = int(seed), bool(cu8)
        self.n = IQ_BLOCK
        self._zeros = np.zeros(self.n)
        self.count = 0                    # samples handed out since t0
        self.count_made = 0               # samples generated since t0 (a retune drops the rest of a batch)
        self._block = 0                   # blocks generated (the spectrum is re-evaluated every IQ_PSD_BLOCKS)
        self._buf = None
        self._events = [e for e in model.events if not isinstance(e, Impulses)]
        self._impulses = [e for e in model.events if isinstance(e, Impulses)]
        self._sstorms = [e for e in self._events if isinstance(e, JovianStorm) and e.params["s_bursts"]]
        self._bursts: list = []           # S-bursts in flight: (start, f0, drift, length, amplitude, phase)
        self._s_power = 0.0
        self.tune(center_hz)

    def tune(self, center_hz: float) -> None:
        self.center = float(center_hz)
        self.freq = self.center + (np.arange(self.n) - self.n // 2) * (self.rate / self.n)
        self._amp = None
        self._amp_block = -1
        self._buf = None                  # a retune drops the rest of the batch in progress
        self.count_made = self.count

    def _amplitudes(self, t_mid: float) -> np.ndarray:
        """Per-bin amplitudes (FFT order) for the sky at ``t_mid``; also finds the carrier
        lines (drawn as steady tones, not noise) and the S-burst power budget."""
        frame = IQ_PSD_BLOCKS * self.n / self.rate
        g = Grid(np.array([t_mid]), self.freq, self._zeros, frame, self.rate / self.n)
        plain = [e for e in self._events if e not in self._sstorms]
        total, background = render(self.model, g, events=plain)
        total = total[0].astype(np.float64)
        self._s_power = 0.0
        for e in self._sstorms:
            if e.r_t0 <= t_mid <= e.r_t1:
                with_s, bg = render(self.model, g, events=[e])
                storm = (with_s - bg)[0].astype(np.float64)
                total += (1 - S_BURST_SHARE) * storm
                # the rest arrives as S-bursts: mean power over the window (variance units)
                self._s_power += S_BURST_SHARE * float(storm.mean()) * self.psd_per_k * self.rate
                self._s_storm = e
        p = total * self.psd_per_k * self.rate      # variance per bin
        a = np.sqrt(self.n * p) * (127.5 if self.cu8 else 1.0)
        bins, phases = [], []
        df = self.rate / self.n
        for e in plain:
            fc = e.params.get("fc")
            if fc is None or not (isinstance(e, Spur) or e.params.get("line_share", 0) > 0):
                continue
            if not (e.t_start <= t_mid < e.t_end) or abs(fc - self.center) >= self.rate / 2 - df:
                continue
            j = int(round((fc - self.freq[0]) / df))
            bins.append((j + self.n // 2) % self.n)
            phases.append(2 * np.pi * ((fc * 0.618034e-3) % 1.0))
        self._line_bins = np.asarray(bins, dtype=np.int64)
        self._line_phasors = np.exp(1j * np.asarray(phases)).astype(np.complex64)
        return np.fft.ifftshift(a).astype(np.float32)

    def _next_block(self) -> np.ndarray:
        """The next IQ_BATCH blocks of samples (one FFT call; noise seeded per batch)."""
        t_start = self.t0 + self.count_made / self.rate
        if self._amp is None or self._block - self._amp_block >= IQ_PSD_BLOCKS:
            self._amp = self._amplitudes(t_start + 0.5 * IQ_PSD_BLOCKS * self.n / self.rate)
            self._amp_block = self._block
        first = int(round(t_start * self.rate))       # absolute sample index: a restart never repeats noise
        rng = np.random.default_rng([self.seed, self.model.sid, 9, first])
        idx = rng.integers(0, 65536, size=(IQ_BATCH, 2 * self.n), dtype=np.uint16)
        x = np.take(_gauss_table(), idx).view(np.complex64)
        if self._line_bins.size:
            x[:, self._line_bins] = self._line_phasors      # bin-centred tones: phase-continuous blocks
        x *= self._amp
        dc = DC_OFFSET * (127.5 if self.cu8 else 1.0) + (128.0 + 128.0j if self.cu8 else 0.0)
        x[:, 0] += np.complex64(self.n * dc)
        y = scipy.fft.ifft(x, axis=-1, overwrite_x=True, workers=1).reshape(-1)
        self._add_impulses(y, t_start, rng)
        self._add_sbursts(y, t_start, rng)
        self._block += IQ_BATCH
        self.count_made += y.size
        if not self.cu8:
            return y
        v = y.view(np.float32)
        np.clip(v, 0.0, 255.999, out=v)
        return v.astype(np.uint8)

    def _mean_time_in(self, drift_mhz_s: float) -> float:
        """Mean time an S-burst (as drawn below) spends inside the window (Monte Carlo, fixed draws)."""
        r = np.random.default_rng(0)
        f0 = r.uniform(-0.5, 1.0, 4000) * self.rate
        ext = r.uniform(1e6, 4e6, 4000)
        inside = np.clip(np.minimum(f0, self.rate / 2) - np.maximum(f0 - ext, -self.rate / 2), 0, None)
        return float(np.mean(inside / (abs(drift_mhz_s) * 1e6 * r.uniform(0.8, 1.2, 4000))))

    def _add_sbursts(self, y, t_start, rng):
        """Jovian S-bursts: narrowband chirps drifting at the storm's -10..-25 MHz/s,
        a few milliseconds at any one frequency (Zarka's reviews; from memory), arriving
        at the storm's rate and carrying S_BURST_SHARE of its mean power."""
        dur = y.size / self.rate
        if self._s_power > 0:
            e = self._s_storm
            p = e.params
            n_new = rng.poisson(p["s_rate"] * dur)
            for ts in t_start + np.sort(rng.uniform(0, dur, n_new)):
                fdot = p["s_drift"] * 1e6 * rng.uniform(0.8, 1.2)
                extent = rng.uniform(1e6, 4e6)
                f0 = self.center + rng.uniform(-0.5, 1.0) * self.rate
                # time the chirp spends inside the window, for the power budget
                lo, hi = max(f0 - extent, self.center - self.rate / 2), min(f0, self.center + self.rate / 2)
                amp2 = 2.0 * self._s_power / (p["s_rate"] * self._mean_time_in(p["s_drift"])) * \
                    rng.lognormal(0, 0.5) ** 2 / math.e ** 0.5
                if hi > lo:
                    self._bursts.append((ts, f0, fdot, extent / abs(fdot), math.sqrt(amp2), rng.uniform(0, 2 * np.pi)))
        keep = []
        scale = 127.5 if self.cu8 else 1.0
        t_end = t_start + dur
        for b in self._bursts:
            ts, f0, fdot, length, amp, ph = b
            # inside the window while f0 + fdot (t - ts) is within centre +- rate/2
            t_a = max(ts, t_start, ts + (f0 - (self.center + self.rate / 2)) / -fdot)
            t_b = min(ts + length, t_end, ts + (f0 - (self.center - self.rate / 2)) / -fdot)
            if t_b > t_a:
                i0, i1 = int((t_a - t_start) * self.rate), int(math.ceil((t_b - t_start) * self.rate))
                tt = t_start + np.arange(i0, i1) / self.rate - ts
                phase = 2 * np.pi * ((f0 - self.center) * tt + 0.5 * fdot * tt * tt) + ph
                env = np.sin(np.pi * np.clip(tt / length, 0, 1))
                y[i0:i1] += (amp * scale * env * np.exp(1j * phase)).astype(np.complex64)
            if ts + length > t_end:
                keep.append(b)
        self._bursts = keep

    def _add_impulses(self, y, t_start, rng):
        t_end = t_start + y.size / self.rate
        h = float(np.mean(self.model.bandpass(self.freq)))
        for e in self._impulses:
            if e.r_t1 < t_start or e.r_t0 > t_end:
                continue
            times = e.params["times"]
            a, b = np.searchsorted(times, [t_start, t_end])
            if a == b:
                continue
            w = max(1, int(round(e.params["width"] * self.rate)))
            sigma = math.sqrt(h * e.scale * e.params["t_imp"] * self.psd_per_k * self.rate * 0.5) * \
                (127.5 if self.cu8 else 1.0)
            weights = e.params.get("weights")
            for k in range(a, b):                  # a few pulses per block at most
                i = int((times[k] - t_start) * self.rate)
                seg = y[i:i + w]
                amp = sigma if weights is None else sigma * math.sqrt(weights[k])
                seg += (rng.standard_normal(seg.size) + 1j * rng.standard_normal(seg.size)).astype(np.complex64) * amp

    def read(self, n: int) -> np.ndarray:
        """The next ``n`` samples: uint8 interleaved I/Q (cu8) or complex64 (full scale 1)."""
        parts, have = [], 0
        width = 2 if self.cu8 else 1
        while have < n:
            if self._buf is None or self._buf.size == 0:
                self._buf = self._next_block()
            take = min(n - have, self._buf.size // width)
            parts.append(self._buf[:take * width])
            self._buf = self._buf[take * width:]
            have += take
        self.count += n
        return np.concatenate(parts) if len(parts) > 1 else parts[0].copy()


def simulate_iq(cfg, start_unix: float, seconds: float, center_hz: float, rate_hz: float, seed: int | None = None,
                cu8: bool = True, rfi: str | None = None, include=None, inject=None, jupiter_schedule=None,
                event_rate: float = 1.0) -> np.ndarray:
    """``seconds`` of samples at one tuning: uint8 interleaved I/Q (``cu8``) or complex64."""
    seed = int(cfg["receiver"]["sim_seed"] if seed is None else seed)
    rfi = cfg["receiver"]["sim_rfi"] if rfi is None else rfi
    n = int(round(seconds * rate_hz))
    if n <= 0:
        raise RxlogError(f"seconds: expected a positive duration, got {seconds!r}")
    model = SkyModel(cfg, start_unix, start_unix + n / rate_hz + 1.0, seed=seed, rfi=rfi,
                     jupiter_schedule=jupiter_schedule, include=include, inject=inject, event_rate=event_rate)
    cadence = float(cfg["spectra"]["cadence_s"])
    calibrate_injections(model, cell_layout(cfg), start_unix, cadence, max(1, math.ceil(n / rate_hz / cadence)))
    gen = IQGenerator(model, start_unix, center_hz, rate_hz, system_psd_per_kelvin(cfg), seed=seed, cu8=cu8)
    return gen.read(n)


class SimulatedReceiver:
    """The ``simulated`` receiver kind: the receiver-source interface over IQGenerator.

    ``start_unix`` (default: the time of ``open()``) is the sky time of the first sample.
    ``realtime``: reads wait for the wall clock like a dongle (``paced``); otherwise they
    return as fast as samples can be made. ``hours``: a finite simulation (then ``EndOfStream``).
    The sky model is planned a day at a time, so a receiver can run for weeks.
    ``truth_rows()`` lists what the sky held so far, measured on the archive grid.
    ``seed`` and ``rfi`` default to ``[receiver] sim_seed`` and ``sim_rfi``.
    """

    kind = "simulated"
    paced = True

    def __init__(self, cfg, start_unix: float | None = None, seed: int | None = None, realtime: bool = True,
                 cu8: bool = True, rfi: str | None = None, hours: float | None = None, include=None, inject=None,
                 jupiter_schedule=None, event_rate: float = 1.0, clock=time.time, sleep=time.sleep):
        self.cfg = cfg
        self.start_unix = None if start_unix is None else float(start_unix)
        rx = cfg["receiver"]
        self.seed = int(rx["sim_seed"] if seed is None else seed)
        self.paced, self.cu8 = bool(realtime), bool(cu8)
        self.rfi = check_rfi_category(rx["sim_rfi"] if rfi is None else rfi)
        self.hours = hours
        self.options = dict(include=include, inject=inject, jupiter_schedule=jupiter_schedule, event_rate=event_rate)
        self.clock, self.sleep = clock, sleep
        self.realtime = clock             # the wall clock, under the name live sources give it
        self.rate_hz = float(cfg["receiver"]["sample_rate_hz"])
        self.gain_db = float(cfg["receiver"]["gain_db"])
        sp = cfg["spectra"]
        self.center_hz = 0.5 * (sp["fmin_mhz"] + sp["fmax_mhz"]) * 1e6
        self.samples_received = 0
        self.samples_dropped = 0
        self._gen = None
        self._n_segments = 0
        self.segment = ""

    # -- the source contract
    def open(self) -> None:
        if self.start_unix is None:
            self.start_unix = float(self.clock())
        self._wall0 = float(self.clock())
        self._count = 0
        self._model_for(self.start_unix)
        self._new_segment()

    def close(self) -> None:
        self._gen = None

    def __enter__(self):
        self.open()
        return self

    def __exit__(self, *exc):
        self.close()

    def tune(self, center_hz: float) -> None:
        self.center_hz = float(center_hz)
        if self._gen is not None:
            self._gen.tune(self.center_hz)
            self._new_segment()

    def read(self, n_samples: int):
        if self._gen is None:
            raise RxlogError("simulated receiver: read() before open()")
        n = int(n_samples)
        if self.hours is not None:
            left = int(round(self.hours * 3600 * self.rate_hz)) - self._count
            if left <= 0:
                raise EndOfStream("simulation finished")
            n = min(n, left)
        t0 = self.start_unix + self._count / self.rate_hz
        if t0 + n / self.rate_hz > self._gen.model.end - 60.0:
            self._model_for(t0)
        if self.paced:
            due = self._wall0 + (self._count + n) / self.rate_hz
            wait = due - float(self.clock())
            if wait > 0:
                self.sleep(wait)
        raw = self._gen.read(n)
        x = to_complex64(raw, "cu8") if self.cu8 else raw
        self._count += n
        self.samples_received += n
        return SampleBlock(x, t0, self.center_hz, self.rate_hz, self.gain_db, self.segment, 0)

    # -- truth and internals
    def truth_rows(self) -> list[dict]:
        """Truth rows for the sky simulated so far (archive grid, noise-free)."""
        if not self._count:
            return []
        run = SpectralRun(self.cfg, self.start_unix, self._count / self.rate_hz / 3600.0, seed=self.seed,
                          rfi=self.rfi, noise=False, **self.options)
        return run.truth_rows()

    def _new_segment(self) -> None:
        self._n_segments += 1
        t = self.start_unix + self._count / self.rate_hz
        self.segment = _segment_id("sim", t, self._n_segments)

    def _model_for(self, t: float) -> None:
        """A sky model for the day ahead from ``t`` (events are planned per UTC day, so
        consecutive models agree where they meet)."""
        span = 86400.0 if self.hours is None else self.hours * 3600.0 + 60.0
        model = SkyModel(self.cfg, t, t + span + 120.0, seed=self.seed, rfi=self.rfi, **self.options)
        cad = float(self.cfg["spectra"]["cadence_s"])
        calibrate_injections(model, cell_layout(self.cfg), self.start_unix, cad,
                             int((t + span - self.start_unix) / cad) + 1)
        psd = system_psd_per_kelvin(self.cfg)
        gen = IQGenerator(model, self.start_unix, self.center_hz, self.rate_hz, psd, seed=self.seed, cu8=self.cu8)
        if self._gen is not None:
            gen.count = gen.count_made = self._gen.count
            gen._block = self._gen._block
        self._gen = gen
