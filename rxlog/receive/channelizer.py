"""Complex samples -> dynamic spectra on the station's channel grid, with spectral kurtosis.

The path a block takes:

1. cut into FFT frames of ``fft_size`` samples (hop ``fft_size * (1 - overlap)``),
   each multiplied by the window; 8- and 16-bit samples are windowed straight from the
   integers (one pass, no separate conversion), and the ADC's zero offset (127.5 for
   cu8) is taken out exactly in the frequency domain, where it only touches the few
   bins of the window's own transform;
2. FFT (``scipy.fft``, single precision) and power |X|^2;
3. power summed per FFT bin over the frames of one row (``cadence_s``; rows sit on a
   UTC grid of multiples of the cadence), and the bins summed into the station's
   channels: each bin goes to the channel holding its centre frequency; bins near the
   window edges (outside ``usable_fraction`` of the band, where the RTL2832's
   decimation filter rolls off) and within ``dc_cut_hz`` of the centre (the DC spike
   every RTL-SDR has) are not used; channels no bin reaches are NaN, flagged
   FLAG_UNCOVERED;
4. dB: ``10 log10`` of the mean power per bin (arbitrary reference: full-scale
   sinusoid in one bin of a rectangular window = 0 dB).

Default: a Hann window of 1024 samples, no overlap. At 2.4 MS/s a bin is 2.34 kHz, so a
7.8-kHz station channel (1024 channels over 16-24 MHz) averages about 3.3 bins; Hann's
first sidelobe is -31 dB and falls 18 dB/octave, so a strong broadcast carrier stays
within a few bins instead of smearing across the band as a rectangular window's -13 dB
sidelobes would. A frame lasts 0.43 ms, so four frames give the < 2 ms spectra S-bursts
need. Without overlap the Hann window wastes about half the statistical weight of the
samples near frame edges (see ``samples_per_cell``: noise scatter 1.39x that of 50 %
overlap) but costs half the FFTs; the sky background near 20 MHz is bright, so the
scatter is small either way (~0.1 dB per 1-s cell).

Spectral kurtosis (Nita & Gary 2010, PASP 122, 595): from the M frames of a row, per FFT
bin, S1 = sum P and S2 = sum P^2; SK = (M+1)/(M-1) (M S2 / S1^2 - 1), expectation 1 for
Gaussian noise, 0 for a steady carrier, above 1 for intermittent signals. With overlapping
frames only every (1/(1 - overlap))-th frame is used, so the M frames are independent.
Each channel reports the mean SK of its bins (the estimator: ``rxlog.receive.kurtosis``).

A short ring of high-time-resolution spectra (``ring_s``, rows of at most
``ring_resolution_s``; ``rxlog.receive.ring``) lets the detector cut out an event at full
resolution.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import scipy.fft
import scipy.signal

from rxlog.errors import RxlogError
from rxlog.receive.blocks import FORMATS, SampleBlock
from rxlog.receive.kurtosis import spectral_kurtosis
from rxlog.receive.ring import Ring
from rxlog.spectrum import FLAG_GAP, FLAG_UNCOVERED, DynamicSpectrum, channel_grid

WINDOWS = ("hann", "hamming", "blackman", "blackmanharris", "boxcar")
BATCH_FRAMES = 32          # frames per FFT batch: ~256 KiB of complex64 at 1024 points, stays in L2 cache
MAX_GAP_FILL_ROWS = 600    # a gap up to this many rows is filled with flagged rows; longer ones split the output
RUN_BREAK_S = 1e-4         # a block this far from where the count says is not contiguous: a new run
REANCHOR_S = 1e-5          # a block this far off the count re-anchors frame times (clock steering)
MIN_ROW_FILL = 0.5         # a row with less than this fraction of its frames is a gap (NaN, FLAG_GAP)

_DTYPE_FORMAT = {np.dtype(np.uint8): "cu8", np.dtype(np.int8): "ci8", np.dtype("<i2"): "ci16_le",
                 np.dtype("<f4"): "cf32_le"}


def header_safe(meta: dict) -> dict:
    """Drop values a FITS header cannot hold (NaN, None): an unknown gain is simply absent."""
    return {k: v for k, v in meta.items()
            if v is not None and not (isinstance(v, float) and not math.isfinite(v))}


def get_window(name: str, n: int) -> np.ndarray:
    if name not in WINDOWS:
        raise RxlogError(f"[sweep] window: {name!r} not supported; expected one of {', '.join(WINDOWS)}")
    return scipy.signal.get_window(name, n, fftbins=True).astype(np.float64)   # periodic, for spectra


def independent_frames(window: np.ndarray, hop: int, m: float) -> float:
    """Equivalent number of independent power estimates in a mean of ``m`` frames at ``hop``.

    Welch (1967, IEEE Trans. Audio Electroacoust. AU-15, 70): the variance of the mean of
    M overlapped periodograms is (1/M)[1 + 2 sum_j (1 - j/M) c_j^2] of one periodogram,
    with c_j = sum w[n] w[n + j hop] / sum w^2 (white noise).
    """
    n = window.size
    if m <= 0:
        return 0.0
    den = float(np.sum(window * window))
    r = 1.0
    j = 1
    while j * hop < n and j < m:
        c = float(np.sum(window[: n - j * hop] * window[j * hop:])) / den
        r += 2 * (1 - j / m) * c * c
        j += 1
    return m / r


def bin_correlation(window: np.ndarray) -> np.ndarray:
    """|gamma(l)|^2: correlation of white-noise power between FFT bins l apart (index l mod N).

    gamma(l) = sum w^2[n] exp(-2 pi i l n / N) / sum w^2 (Harris 1978, Proc. IEEE 66, 51,
    section on overlap correlation, applied across frequency). Hann: 4/9 at l = 1, 1/36 at 2.
    """
    w2 = window * window
    g = np.fft.fft(w2) / w2.sum()
    return np.abs(g) ** 2


def independent_bins(rho: np.ndarray, bins: np.ndarray) -> float:
    """Equivalent number of independent values in a mean over FFT ``bins`` with correlation ``rho``."""
    if bins.size == 0:
        return 0.0
    diff = np.subtract.outer(bins, bins) % rho.size
    return float(bins.size ** 2 / rho[diff].sum())


@dataclass
class ChannelMap:
    """Which FFT bins (index into the unshifted FFT output) feed which station channels."""

    order: np.ndarray      # bin indices sorted by channel
    starts: np.ndarray     # first position in ``order`` of each covered channel
    counts: np.ndarray     # bins per covered channel
    chans: np.ndarray      # covered channel indices (ascending)
    n_chan: int

    def to_channels(self, per_bin: np.ndarray) -> np.ndarray:
        """Mean over each covered channel's bins; (..., N) -> (..., len(chans))."""
        x = np.take(per_bin, self.order, axis=-1)
        return np.add.reduceat(x, self.starts, axis=-1) / self.counts

    def full(self, per_chan: np.ndarray, fill=np.nan) -> np.ndarray:
        """Covered-channel values onto the whole grid, ``fill`` elsewhere."""
        out = np.full(per_chan.shape[:-1] + (self.n_chan,), fill, dtype=np.float64)
        out[..., self.chans] = per_chan
        return out


def make_channel_map(freq_hz: np.ndarray, center_hz: float, rate_hz: float, fft_size: int,
                     usable_fraction: float, dc_cut_hz: float, allowed: np.ndarray | None = None) -> ChannelMap:
    """Assign each usable FFT bin to the station channel holding its centre frequency."""
    freq_hz = np.asarray(freq_hz, dtype=np.float64)
    df = float(freq_hz[1] - freq_hz[0]) if freq_hz.size > 1 else rate_hz
    lo = freq_hz[0] - df / 2
    k = np.arange(fft_size)
    off = np.fft.fftfreq(fft_size, d=1.0 / rate_hz)            # bin offset from the centre, Hz
    use = (np.abs(off) <= usable_fraction * rate_hz / 2) & (np.abs(off) > dc_cut_hz)
    ch = np.floor((center_hz + off - lo) / df).astype(np.int64)
    use &= (ch >= 0) & (ch < freq_hz.size)
    if allowed is not None:
        use[use] &= allowed[ch[use]]
    k, ch = k[use], ch[use]
    sort = np.argsort(ch, kind="stable")
    k, ch = k[sort], ch[sort]
    chans, starts, counts = np.unique(ch, return_index=True, return_counts=True)
    return ChannelMap(k, starts, counts.astype(np.float64), chans, freq_hz.size)


class Channelizer:
    """Windowed FFT frames -> power rows at ``cadence_s`` on a channel grid, chunk-invariant.

    ``Channelizer(cfg)`` takes the grid and cadence from ``[spectra]`` and the FFT
    settings from ``[sweep]``; keyword arguments override them (or give everything
    without a config: ``freq_hz=``, ``fft_size=``, ...).

    ``feed(block)`` returns the rows completed so far as DynamicSpectrum pieces (rows on
    a regular grid; a gap in the samples becomes NaN rows flagged FLAG_GAP, a change of
    segment, centre or rate ends the pieces of the old one); ``flush()`` returns the row
    in progress. Feeding the same samples in blocks of any size gives the same rows.
    """

    def __init__(self, cfg=None, *, freq_hz=None, fft_size=None, window=None, overlap=None,
                 cadence_s=None, usable_fraction=None, dc_cut_hz=None, kurtosis=None,
                 ring_s=None, ring_resolution_s=None):
        p = dict(fft_size=1024, window="hann", overlap=0.0, cadence_s=1.0, usable_fraction=0.8,
                 dc_cut_hz=3000.0, kurtosis=True, ring_s=0.0, ring_resolution_s=0.002, freq_hz=None)
        if cfg is not None:
            sp, sw = cfg["spectra"], cfg["sweep"]
            p.update(freq_hz=channel_grid(sp["fmin_mhz"], sp["fmax_mhz"], sp["channels"]),
                     cadence_s=sp["cadence_s"],
                     **{k: sw[k] for k in ("fft_size", "window", "overlap", "usable_fraction", "dc_cut_hz",
                                           "kurtosis", "ring_s", "ring_resolution_s")})
        given = dict(freq_hz=freq_hz, fft_size=fft_size, window=window, overlap=overlap, cadence_s=cadence_s,
                     usable_fraction=usable_fraction, dc_cut_hz=dc_cut_hz, kurtosis=kurtosis, ring_s=ring_s,
                     ring_resolution_s=ring_resolution_s)
        p.update({k: v for k, v in given.items() if v is not None})
        if p["freq_hz"] is None:
            raise ValueError("Channelizer needs a config or freq_hz")
        self.freq_hz = np.asarray(p["freq_hz"], dtype=np.float64)
        self.fft_size = int(p["fft_size"])
        self.window_name = p["window"]
        self.overlap = float(p["overlap"])
        self.cadence_s = float(p["cadence_s"])
        self.usable_fraction = float(p["usable_fraction"])
        self.dc_cut_hz = float(p["dc_cut_hz"])
        self.kurtosis = bool(p["kurtosis"])
        self.ring_s = float(p["ring_s"])
        self.ring_resolution_s = float(p["ring_resolution_s"])
        n = self.fft_size
        self.hop = int(round(n * (1 - self.overlap)))
        if not 0 < self.hop <= n:
            raise RxlogError(f"[sweep] overlap: {self.overlap} leaves no hop between frames")
        self.sk_every = max(1, int(round(n / self.hop)))    # frames that tile without overlap
        self.window = get_window(self.window_name, n)
        self._win2 = np.repeat(self.window, 2).astype(np.float32)
        wt = np.fft.fft(self.window)
        self._wt_bins = np.flatnonzero(np.abs(wt) > 1e-6 * np.abs(wt).max())
        self._wt = wt[self._wt_bins].astype(np.complex64)
        self._rho = bin_correlation(self.window)
        self._maps: dict = {}
        self._fbuf = np.empty((BATCH_FRAMES, 2 * n), dtype=np.float32)
        self._pbuf = np.empty((BATCH_FRAMES, n), dtype=np.float32)
        self.ring: Ring | None = None
        self._reset_run()
        self._row = None                 # absolute row index in progress (t = row * cadence)
        self._acc = None
        self._done: list = []            # finished rows: (row, power_db, flags, sk, key)
        self._key = None                 # (segment, center, rate) of the rows in progress
        self._last_emitted = None        # (key, row) of the last row handed out

    # -- bookkeeping of a contiguous run of samples
    def _reset_run(self):
        self._res = None                 # leftover components (< one frame past the last frame start)
        self._run_n = 0                  # samples of the run so far
        self._anchor = None              # (POSIX time, run sample index) that frame times count from
        self._frame_no = 0               # frames since the run began (frame j starts at sample j * hop)
        self._ring_carry = None

    def channel_map(self, center_hz: float, rate_hz: float, allowed: np.ndarray | None = None) -> ChannelMap:
        key = (float(center_hz), float(rate_hz), None if allowed is None else allowed.tobytes())
        m = self._maps.get(key)
        if m is None:
            m = make_channel_map(self.freq_hz, center_hz, rate_hz, self.fft_size, self.usable_fraction,
                                 self.dc_cut_hz, allowed)
            if len(self._maps) > 64:
                self._maps.clear()
            self._maps[key] = m
        return m

    def frames_per_row(self, rate_hz: float) -> float:
        return self.cadence_s * rate_hz / self.hop

    def samples_per_cell(self, center_hz: float, rate_hz: float, frames: float | None = None,
                         allowed: np.ndarray | None = None) -> np.ndarray:
        """Independent power samples averaged in each channel's cell (0 where not covered).

        ``frames`` frames (default: a full row) times the independent bins of the channel;
        the cell's linear power then follows a gamma distribution of that shape (a mean
        of K independent exponential powers) for Gaussian noise.
        """
        m = self.channel_map(center_hz, rate_hz, allowed)
        f = self.frames_per_row(rate_hz) if frames is None else frames
        kt = independent_frames(self.window, self.hop, f)
        out = np.zeros(self.freq_hz.size)
        for c, s, k in zip(m.chans, m.starts, m.counts.astype(int)):
            out[c] = kt * independent_bins(self._rho, m.order[s:s + k])
        return out

    # -- the frame engine
    def _batches(self, comps: np.ndarray, fmt: str, n_frames: int):
        """Yield (first frame, power (b, N) float32) for ``n_frames`` frames of interleaved ``comps``.

        The power array is a reused buffer: use it before asking for the next batch.
        """
        n, hop = self.fft_size, self.hop
        _, offset, scale = FORMATS[fmt]
        win = self._win2 * np.float32(scale) if scale != 1 else self._win2
        corr = (self._wt * np.complex64(offset * scale * (1 + 1j))) if offset else None
        isz = comps.itemsize
        for k0 in range(0, n_frames, BATCH_FRAMES):
            b = min(BATCH_FRAMES, n_frames - k0)
            if hop == n:
                frames = comps[2 * k0 * n: 2 * (k0 + b) * n].reshape(b, 2 * n)
            else:
                frames = np.lib.stride_tricks.as_strided(comps[2 * k0 * hop:], shape=(b, 2 * n),
                                                         strides=(2 * hop * isz, isz), writeable=False)
            fb = self._fbuf[:b]
            np.multiply(frames, win, out=fb)
            x = scipy.fft.fft(fb.view(np.complex64), axis=-1, overwrite_x=True, workers=1)
            if corr is not None:
                x[:, self._wt_bins] -= corr
            v = x.view(np.float32)
            np.multiply(v, v, out=v)
            p = self._pbuf[:b]
            np.add(v[:, 0::2], v[:, 1::2], out=p)
            yield k0, p

    @staticmethod
    def _components(x: np.ndarray, fmt: str | None) -> tuple[np.ndarray, str]:
        if x.dtype == np.complex64:
            return x.view(np.float32), "cf32_le"
        if fmt is None:
            fmt = _DTYPE_FORMAT.get(x.dtype)
            if fmt is None:
                raise ValueError(f"samples of dtype {x.dtype}: expected complex64 or interleaved cu8/ci8/ci16/cf32")
        return x, fmt

    # -- rows at the cadence
    def feed(self, block: SampleBlock) -> list[DynamicSpectrum]:
        return self.feed_samples(block.samples, block.t0, block.center_hz, block.rate_hz, block.gain_db,
                                 block.segment, block.dropped_before)

    def feed_samples(self, x: np.ndarray, t0: float, center_hz: float, rate_hz: float, gain_db: float = math.nan,
                     segment: str = "0", dropped_before: int = 0, fmt: str | None = None,
                     meta: dict | None = None) -> list[DynamicSpectrum]:
        """Like ``feed`` for bare arrays: complex64 samples, or interleaved I/Q components as
        stored (uint8 cu8, int8, int16 ci16_le, float32 cf32_le) — 8-bit samples straight from a
        dongle or a file skip a conversion pass.
        """
        comps, fmt = self._components(np.asarray(x), fmt)
        key = (segment, float(center_hz), float(rate_hz))
        if key != self._key:
            self._finish_row()
            self._key = key
            self._gain = float(gain_db)
            self._meta = dict(meta or {})
            self._reset_run()
            self._start_ring(center_hz, rate_hz, segment)
        elif dropped_before or (self._res is not None and self._res.dtype != comps.dtype) or (
                self._anchor is not None and abs(t0 - self._time_of(self._run_n, rate_hz)) > RUN_BREAK_S):
            self._reset_run()            # not contiguous: frames start afresh at t0
        # Frame times count whole samples from an anchor block, so block times' float rounding
        # (float64 POSIX seconds resolve ~0.24 us, half a sample at 2.4 MS/s) cannot move a
        # frame across a row boundary; a block more than REANCHOR_S off that count (the clock
        # discipline steering) becomes the new anchor.
        if self._anchor is None or abs(t0 - self._time_of(self._run_n, rate_hz)) > REANCHOR_S:
            self._anchor = (float(t0), self._run_n)
        if self._res is not None and self._res.size:
            comps = np.concatenate([self._res, comps])
        n_samp = comps.size // 2
        self._run_n += n_samp - (0 if self._res is None else self._res.size // 2)
        n, hop = self.fft_size, self.hop
        n_frames = 0 if n_samp < n else (n_samp - n) // hop + 1
        if n_frames:
            self._process(comps, fmt, n_frames, rate_hz)
        self._res = np.array(comps[2 * n_frames * hop:], copy=True)    # a copy: never keep a mapped file alive
        return self._emit()

    def _time_of(self, run_index, rate_hz):
        t, i = self._anchor
        return t + (run_index - i) / rate_hz

    def flush(self) -> list[DynamicSpectrum]:
        """Finish the row in progress (however few frames it has) and return what is left."""
        self._finish_row()
        self._reset_run()
        return self._emit()

    def _row_of(self, frames: np.ndarray, rate_hz: float) -> np.ndarray:
        """Row of each run frame: the row its first sample (plus half a sample) falls in."""
        t, i = self._anchor
        ref = math.floor(t / self.cadence_s)
        rel = (t - ref * self.cadence_s) + (frames * self.hop - i + 0.5) / rate_hz
        return ref + np.floor(rel / self.cadence_s).astype(np.int64)

    def _process(self, comps, fmt, n_frames, rate_hz):
        m = self.channel_map(self._key[1], rate_hz)
        rows = self._row_of(self._frame_no + np.arange(n_frames), rate_hz)
        sk_phase = (self._frame_no + np.arange(n_frames)) % self.sk_every == 0
        for k0, p in self._batches(comps, fmt, n_frames):
            b = p.shape[0]
            r = rows[k0:k0 + b]
            if r[0] == r[-1]:
                spans = ((0, b),)
            else:
                cuts = (np.flatnonzero(np.diff(r)) + 1).tolist()
                spans = tuple(zip([0] + cuts, cuts + [b]))
            for i0, i1 in spans:
                row = int(r[i0])
                if row != self._row:
                    self._finish_row()
                    self._start_row(row)
                acc = self._acc
                part = p[i0:i1]
                # float32 sums over one batch (<= 32 frames), float64 across batches
                acc["s1"] += part.sum(axis=0)
                acc["m"] += i1 - i0
                if self.kurtosis:
                    q = part if self.sk_every == 1 else part[sk_phase[k0 + i0:k0 + i1]]
                    if self.sk_every != 1:
                        acc["k1"] += q.sum(axis=0)
                    acc["k2"] += np.einsum("ij,ij->j", q, q)
                    acc["km"] += q.shape[0]
            if self.ring is not None:
                self._ring_push(p, k0, rate_hz, m)
        self._frame_no += n_frames

    def _start_row(self, row: int):
        n = self.fft_size
        self._row = row
        self._acc = {"s1": np.zeros(n), "m": 0, "k1": np.zeros(n), "k2": np.zeros(n), "km": 0}

    def _finish_row(self):
        if self._row is None:
            return
        acc, row = self._acc, self._row
        self._row, self._acc = None, None
        seg, center, rate = self._key
        m = self.channel_map(center, rate)
        n_chan = self.freq_hz.size
        flags = np.full(n_chan, FLAG_UNCOVERED, dtype=np.uint8)
        power = np.full(n_chan, np.nan, dtype=np.float32)
        sk = np.full(n_chan, np.nan, dtype=np.float32) if self.kurtosis else None
        if acc["m"] < MIN_ROW_FILL * self.frames_per_row(rate) or not m.chans.size:
            return          # too few frames: the row is a gap (filled as such between rows)
        last = self._done[-1] if self._done else (
            None if self._last_emitted is None else (self._last_emitted[1], None, None, None, self._last_emitted[0]))
        if last is not None and last[4] == self._key and row <= last[0]:
            return          # times went back (a host clock step): never hand out a row twice
        with np.errstate(divide="ignore"):
            power[m.chans] = 10 * np.log10(m.to_channels(acc["s1"] / acc["m"]))
        flags[m.chans] = 0
        if self.kurtosis and acc["km"] >= 2:
            s1 = acc["s1"] if self.sk_every == 1 else acc["k1"]
            sk[m.chans] = m.to_channels(spectral_kurtosis(s1, acc["k2"], acc["km"]))
        self._done.append((row, power, flags, sk, self._key))

    def _emit(self) -> list[DynamicSpectrum]:
        """Completed rows as regular-grid pieces; short gaps between rows filled, long ones split."""
        out, run, r0 = [], [], 0
        last = self._last_emitted        # (key, row) of the last row handed out
        for item in self._done:
            row, key = item[0], item[4]
            if run and (key != run[-1][4] or row - run[-1][0] > MAX_GAP_FILL_ROWS):
                out.append(self._piece(run, r0))
                run = []
            if not run:
                joined = last is not None and last[0] == key and 1 < row - last[1] <= MAX_GAP_FILL_ROWS
                r0 = last[1] + 1 if joined else row
            run.append(item)
            last = (key, row)
        if run:
            out.append(self._piece(run, r0))
        self._last_emitted = last
        self._done = []
        return out

    def _piece(self, run, r0: int) -> DynamicSpectrum:
        key = run[0][4]
        n_rows = run[-1][0] - r0 + 1
        n_chan = self.freq_hz.size
        seg, center, rate = key
        m = self.channel_map(center, rate)
        power = np.full((n_rows, n_chan), np.nan, dtype=np.float32)
        flags = np.full((n_rows, n_chan), FLAG_UNCOVERED, dtype=np.uint8)
        flags[:, m.chans] = FLAG_GAP
        sk = np.full((n_rows, n_chan), np.nan, dtype=np.float32) if self.kurtosis else None
        for row, p, f, k, _ in run:
            power[row - r0], flags[row - r0] = p, f
            if sk is not None:
                sk[row - r0] = k
        meta = header_safe(dict(self._meta, center_hz=center, rate_hz=rate, gain_db=self._gain,
                                fft_size=self.fft_size, window=self.window_name, overlap=self.overlap,
                                mode="single"))
        return DynamicSpectrum(power, r0 * self.cadence_s, self.cadence_s, self.freq_hz, flags,
                               segment=seg, meta=meta, kurtosis=sk)

    # -- high-time-resolution ring
    def ring_frames(self, rate_hz: float) -> int:
        return max(1, int(self.ring_resolution_s * rate_hz / self.hop))

    def _start_ring(self, center_hz, rate_hz, segment):
        if self.ring_s <= 0:
            self.ring = None
            return
        m = self.channel_map(center_hz, rate_hz)
        self.ring = Ring(self.ring_s, self.ring_frames(rate_hz) * self.hop / rate_hz, self.freq_hz, m.chans,
                         segment, {"center_hz": center_hz, "rate_hz": rate_hz})

    def _ring_push(self, p, k0, rate_hz, m: ChannelMap):
        g_len = self.ring_frames(rate_hz)
        fno = self._frame_no + k0 + np.arange(p.shape[0])
        gid = fno // g_len
        cuts = np.flatnonzero(np.diff(gid)) + 1
        starts = np.r_[0, cuts]
        sums = np.add.reduceat(p, starts, axis=0, dtype=np.float64)
        counts = np.diff(np.r_[starts, p.shape[0]])
        times = self._time_of((self._frame_no + k0 + starts) * self.hop, rate_hz)
        carry = self._ring_carry
        if carry is not None and carry[0] == gid[0]:
            sums[0] += carry[1]
            counts[0] += carry[2]
            times[0] = carry[3]
        self._ring_carry = None
        if counts[-1] < g_len:                       # unfinished group: carry into the next batch
            self._ring_carry = (int(gid[-1]), sums[-1].copy(), int(counts[-1]), float(times[-1]))
            sums, counts, times = sums[:-1], counts[:-1], times[:-1]
        full = counts == g_len
        if full.any():
            with np.errstate(divide="ignore"):
                db = 10 * np.log10(m.to_channels(sums[full] / g_len))
            self.ring.push(times[full], db)



class Dwell:
    """Power and SK integrated over one dwell at a fixed tuning (the sweeper's unit of work).

    ``add(block)`` any number of times (contiguous unless ``dropped_before`` says
    otherwise); ``result()`` gives per-channel mean power (linear), SK and the number of
    frames, on the whole grid with NaN where the dwell does not reach.
    """

    def __init__(self, ch: Channelizer, center_hz: float, rate_hz: float, allowed: np.ndarray | None = None):
        self.ch, self.center_hz, self.rate_hz = ch, float(center_hz), float(rate_hz)
        self.map = ch.channel_map(center_hz, rate_hz, allowed)
        n = ch.fft_size
        self.s1, self.k1, self.k2 = np.zeros(n), np.zeros(n), np.zeros(n)
        self.m = self.km = 0
        self._res = None
        self._frame_no = 0
        self.t_first = None

    def add(self, block: SampleBlock) -> None:
        self.add_samples(block.samples, block.t0, block.dropped_before)

    def add_samples(self, x: np.ndarray, t0: float, dropped_before: int = 0, fmt: str | None = None) -> None:
        ch = self.ch
        comps, fmt = ch._components(np.asarray(x), fmt)
        if self.t_first is None:
            self.t_first = float(t0)
        if self._res is not None and (dropped_before or self._res.dtype != comps.dtype):
            self._res = None             # not contiguous: frames start afresh
        if self._res is not None and self._res.size:
            comps = np.concatenate([self._res, comps])
        n_samp = comps.size // 2
        n_frames = 0 if n_samp < ch.fft_size else (n_samp - ch.fft_size) // ch.hop + 1
        for k0, p in ch._batches(comps, fmt, n_frames):
            self.s1 += p.sum(axis=0)
            self.m += p.shape[0]
            if ch.kurtosis:
                if ch.sk_every == 1:
                    q = p
                else:
                    q = p[(self._frame_no + k0 + np.arange(p.shape[0])) % ch.sk_every == 0]
                    self.k1 += q.sum(axis=0)
                self.k2 += np.einsum("ij,ij->j", q, q)
                self.km += q.shape[0]
        self._frame_no += n_frames
        self._res = np.array(comps[2 * n_frames * ch.hop:], copy=True)

    def result(self) -> tuple[np.ndarray, np.ndarray | None, int]:
        m = self.map
        power = np.full(m.n_chan, np.nan)
        sk = np.full(m.n_chan, np.nan) if self.ch.kurtosis else None
        if self.m and m.chans.size:
            power[m.chans] = m.to_channels(self.s1 / self.m)
            if sk is not None and self.km >= 2:
                s1 = self.s1 if self.ch.sk_every == 1 else self.k1
                sk[m.chans] = m.to_channels(spectral_kurtosis(s1, self.k2, self.km))
        return power, sk, self.m

