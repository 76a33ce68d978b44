"""The simulated station: dynamic spectra and IQ samples from one sky model, with truth.

Two outputs of ``rxlog.sim.model.SkyModel``:

- **spectral domain** (``iter_spectra``, ``simulate_spectra``): the mean power of each
  archive cell, times noise drawn from the exact distribution of a mean of K independent
  exponential powers, Gamma(K)/K, where K comes from the channelizer and the sweep plan
  (window bin correlation, frame overlap, the duty cycle of the channel's tuning). Each
  channel is drawn at its sweep time offset within the row. Fast: nights and weeks.
- **IQ domain** (``simulate_iq``, ``SimulatedReceiver``): complex Gaussian noise with the
  model's power spectrum, generated block by block in the frequency domain (8192-point
  blocks, the spectrum re-evaluated every 32 blocks, ~0.11 s), optionally quantised to
  cu8 like an RTL2832U (offset 127.5, clipping at the rails, a DC offset at the tuned
  centre). Carrier lines and spurs are steady tones (spectral kurtosis below 1),
  impulses are pulses of their own width, and S-burst storms send millisecond chirps.
  Not modelled: the RTL2832's decimation roll-off at the window edges (the channelizer
  uses only the middle) and direct-sampling aliases from 4.8-12.8 MHz.

Levels: both outputs are in the channelizer's units. The receiver chain gives
k_B T x 10^((gain_db + SYSTEM_GAIN_DB) / 10) full-scale^2 per hertz; the channelizer's
power per bin of a white-noise PSD D is D x rate x sum(window^2), and the spectral mode
writes the same number.

Truth rows use the event store's column names and are measured on the archive grid
(noise-free): ``peak_excess_db`` is 10 log10((background + event) / background) at the
event's strongest cell (negative for a fadeout), the background being the sky, the
man-made noise and the receiver without any event. Events that stay below 0.01 dB
(a carrier whose path is closed, a burst with its source near the horizon) have no row.
"""

from __future__ import annotations

import csv
import math
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from rxlog.constants import K_B
from rxlog.sim import model as sky
from rxlog.errors import RxlogError
from rxlog.spectrum import FLAG_UNCOVERED, DynamicSpectrum
from rxlog.timeutil import iso

SYSTEM_GAIN_DB = 57.0       # antenna to ADC at gain_db 0: a rural band at ~8 counts rms with the default 30 dB
NOISE_BLOCK_ROWS = 64       # noise is seeded per block of rows counted from the epoch
TRUTH_FIELDS = ("station", "event_id", "class", "start_utc", "end_utc", "peak_utc", "fmin_mhz", "fmax_mhz",
                "peak_excess_db", "drift_mhz_s", "source_region", "reason")
MIN_TRUTH_DB = 0.01
IQ_BLOCK = 8192             # samples per generated block (frequency-domain synthesis)
IQ_BATCH = 8                # blocks per FFT call
IQ_PSD_BLOCKS = 32          # blocks between evaluations of the sky's spectrum (~0.11 s at 2.4 MS/s)
S_BURST_SHARE = 0.7        # of an S-burst storm's mean power carried by the bursts themselves in IQ mode
DC_OFFSET = 0.006 + 0.004j  # full scale: the RTL2832U's residual DC at the tuned centre (common practice)


# --- the archive grid --------------------------------------------------------------------

@dataclass
class CellLayout:
    samples: np.ndarray       # independent power samples per channel (gamma shape; 0 = not covered)
    start_s: np.ndarray       # start of each channel's dwell within its row (DynamicSpectrum.chan_offset_s)
    mid_s: np.ndarray         # middle of that dwell: where the sky is sampled
    dwell_s: float            # integration window of a cell
    db_offset: float          # 10 log10(rate x sum(window^2) x PSD per kelvin): the channelizer's units
    covered: np.ndarray       # channels some tuning covers


def cell_layout(cfg) -> CellLayout:
    """Noise statistics, sweep timing and level of the station's archived cells, from the
    channelizer and the sweep plan the real station would run."""
    from rxlog import channelizer, sweep

    rate = float(cfg["receiver"]["sample_rate_hz"])
    ch = channelizer.Channelizer(cfg, ring_s=0)
    plan = sweep.SweepPlan.from_config(cfg, rate)
    n = np.asarray(plan.samples_per_cell(ch), dtype=np.float64)
    if plan.mode == "single":
        dwell = float(cfg["spectra"]["cadence_s"])
        start = np.zeros(n.size)
    else:
        dwell = plan.dwell_s
        start = np.asarray(plan.chan_offset_s, dtype=np.float64)
    sum_w2 = float(np.sum(ch.window ** 2))
    db = 10 * math.log10(rate * sum_w2 * system_psd_per_kelvin(cfg))
    return CellLayout(n, start, start + dwell / 2, dwell, db, n > 0)


def system_psd_per_kelvin(cfg) -> float:
    """Full-scale^2 per hertz per kelvin at the ADC."""
    gain = float(cfg["receiver"].get("gain_db", 30.0))
    return K_B * 10 ** ((gain + SYSTEM_GAIN_DB) / 10)


# --- spectral domain ---------------------------------------------------------------------

class SpectralRun:
    """A simulated stretch of dynamic spectra, iterated in chunks of ``chunk_s``.

    Iterating yields DynamicSpectrum chunks (identical whatever ``chunk_s``); after a
    full pass ``truth_rows()`` lists what was injected. ``noise=False`` gives the
    noise-free mean power.
    """

    def __init__(self, cfg, start_unix: float, hours: float, seed: int | None = None, rfi: str | None = None,
                 jupiter_schedule=None, include=None, inject=None, event_rate: float = 1.0,
                 noise: bool = True, chunk_s: float = 600.0):
        seed = int(cfg["receiver"]["sim_seed"] if seed is None else seed)
        rfi = cfg["receiver"]["sim_rfi"] if rfi is None else rfi
        if not hours > 0:
            raise RxlogError(f"hours: expected a positive number, got {hours!r}")
        self.cfg = cfg
        self.cadence = float(cfg["spectra"]["cadence_s"])
        self.n_rows = max(1, int(round(hours * 3600.0 / self.cadence)))
        self.start = float(start_unix)
        self.end = self.start + self.n_rows * self.cadence
        self.seed, self.noise, self.rfi = int(seed), bool(noise), rfi
        self.model = sky.SkyModel(cfg, self.start, self.end, seed=seed, rfi=rfi,
                                  jupiter_schedule=jupiter_schedule, include=include, inject=inject,
                                  event_rate=event_rate)
        self.layout = cell_layout(cfg)
        self.freq = self.model.freq_hz
        self.df = float(self.freq[1] - self.freq[0])
        self.chunk_rows = max(1, int(round(chunk_s / self.cadence)))
        self.peaks: dict = {}
        self._covered = 0
        self._calibrate_injections()

    def grid(self, i0: int, i1: int) -> sky.Grid:
        return _grid(self.model, self.layout, self.start, self.cadence, i0, i1)

    def _calibrate_injections(self):
        calibrate_injections(self.model, self.layout, self.start, self.cadence, self.n_rows)

    def __iter__(self):
        for i0 in range(0, self.n_rows, self.chunk_rows):
            yield self.rows(i0, min(self.n_rows, i0 + self.chunk_rows))

    def rows(self, i0: int, i1: int) -> DynamicSpectrum:
        g = self.grid(i0, i1)
        total, _ = sky.render(self.model, g, self.peaks)
        if i0 <= self._covered:
            self._covered = max(self._covered, i1)
        lin = (total * 10 ** (self.layout.db_offset / 10)).astype(np.float32)
        if self.noise:
            lin *= self._noise(i0, i1)
        power = 10 * np.log10(lin)
        flags = np.zeros(power.shape, dtype=np.uint8)
        if not self.layout.covered.all():
            power[:, ~self.layout.covered] = np.nan
            flags[:, ~self.layout.covered] = FLAG_UNCOVERED
        meta = {"simulated": True, "sim_seed": self.seed, "sim_rfi": self.rfi,
                "gain_db": float(self.cfg["receiver"].get("gain_db", 30.0))}
        return DynamicSpectrum(power_db=power, t0=float(g.times[0]), cadence_s=self.cadence, freq_hz=self.freq,
                               flags=flags, chan_offset_s=self.layout.start_s.astype(np.float32),
                               segment=f"sim-{time.strftime('%Y%m%dT%H%M%S', time.gmtime(self.start))}-{self.seed}",
                               meta=meta)

    def _noise(self, i0: int, i1: int) -> np.ndarray:
        """Gamma(K)/K per cell, seeded per block of rows so any chunking draws the same values."""
        k = np.where(self.layout.covered, self.layout.samples, 1.0)
        shapes, inv = np.unique(k, return_inverse=True)    # a few distinct values: scalar draws are faster
        base = int(math.floor(self.start / self.cadence + 0.5))    # rows counted from the epoch:
        i0, i1 = i0 + base, i1 + base                                # consecutive runs never share noise
        b0, b1 = i0 // NOISE_BLOCK_ROWS, (i1 - 1) // NOISE_BLOCK_ROWS
        g = np.empty(((b1 - b0 + 1) * NOISE_BLOCK_ROWS, k.size), dtype=np.float32)
        for b in range(b0, b1 + 1):
            rng = np.random.default_rng([self.seed, self.model.sid, 7, b])
            rows = g[(b - b0) * NOISE_BLOCK_ROWS:(b - b0 + 1) * NOISE_BLOCK_ROWS]
            for j, a in enumerate(shapes):
                cols = np.flatnonzero(inv == j)
                rows[:, cols] = rng.standard_gamma(a, size=(NOISE_BLOCK_ROWS, cols.size), dtype=np.float32) / np.float32(a)
        a = i0 - b0 * NOISE_BLOCK_ROWS
        return g[a:a + (i1 - i0)]

    def truth_rows(self) -> list[dict]:
        """Truth rows for the whole span (drawn noise-free first where not yet iterated)."""
        if self._covered < self.n_rows:
            for i0 in range(self._covered, self.n_rows, self.chunk_rows):
                i1 = min(self.n_rows, i0 + self.chunk_rows)
                sky.render(self.model, self.grid(i0, i1), self.peaks)
                self._covered = i1
        return truth_rows(self.model, self.peaks, self.start, self.end)


def _grid(model, layout: CellLayout, start: float, cadence: float, i0: int, i1: int) -> sky.Grid:
    t = start + cadence * np.arange(i0, i1, dtype=np.float64)
    f = model.freq_hz
    return sky.Grid(t, f, layout.mid_s, layout.dwell_s, float(f[1] - f[0]))


def calibrate_injections(model, layout: CellLayout, start: float, cadence: float, n_rows: int) -> None:
    """Scale each injected event so its peak excess on the archive grid is what was asked."""
    def peak(e, i0, i1, scale, others):
        e.scale = scale
        peaks: dict = {}
        for a in range(i0, i1, 2048):
            sky.render(model, _grid(model, layout, start, cadence, a, min(i1, a + 2048)), peaks, events=[e] + others)
        return 10 * math.log10(peaks[id(e)][0]) if id(e) in peaks else -math.inf

    for e in model.events:
        target = e.params.get("target_db")
        if target is None:
            continue
        i0 = max(0, int(math.floor((e.r_t0 - start) / cadence)) - 2)
        i1 = min(n_rows, int(math.ceil((e.r_t1 - start) / cadence)) + 2)
        if e.cls == "fadeout":
            ip = int(round((e.params["t0"] + e.params["rise"] - start) / cadence))
            i0, i1 = max(0, ip - 3), min(n_rows, ip + 4)
        if i0 >= i1:
            raise RxlogError(f"inject {e.cls} at {iso(e.t_start)}: outside the simulated span")
        others = [x for x in model.events if x.cls == "fadeout" and x is not e]
        if e.cls == "fadeout":
            lo, hi = 0.0, 1.0
            while peak(e, i0, i1, hi, others) > target:
                lo, hi = hi, hi * 2
                if hi > 1e4:     # absorption only dims the sky: man-made and receiver noise remain
                    raise RxlogError(f"inject fadeout at {iso(e.t_start)}: a dip of {target} dB is deeper than "
                                     "the sky's share of this background allows; try a quieter rfi category")
            for _ in range(50):
                mid = 0.5 * (lo + hi)
                lo, hi = (mid, hi) if peak(e, i0, i1, mid, others) > target else (lo, mid)
            e.scale = 0.5 * (lo + hi)
        else:
            r = 10 ** (peak(e, i0, i1, 1.0, others) / 10) - 1
            if r <= 0:
                where = {"sun": ": is the Sun up there then?", "jupiter": ": is Jupiter up there then?",
                         "skywave": ": is the path open then (the MUF is low at night)?"}
                raise RxlogError(f"inject {e.cls} at {iso(e.t_start)}: not received on the archive grid"
                                 f"{where.get(e.source, '')}")
            e.scale = (10 ** (target / 10) - 1) / r


def truth_rows(model: sky.SkyModel, peaks: dict, start: float, end: float) -> list[dict]:
    rows = []
    for e in model.events:
        pk = peaks.get(id(e))
        if pk is None:
            continue
        db = 10 * math.log10(pk[0])
        if abs(db) < MIN_TRUTH_DB:
            continue
        if e.t_end <= start or e.t_start >= end:
            continue              # only a faint tail (below a tenth of its peak) falls in the span
        t0, t1 = max(e.t_start, start), min(e.t_end, end)
        if e.source == "skywave" and e.cls == "rfi":
            t0, t1 = _open_path(model, e, t0, t1)
        rows.append({"station": model.name, "class": e.cls, "start_utc": iso(t0), "end_utc": iso(max(t0, t1)),
                     "peak_utc": iso(pk[1]),
                     "fmin_mhz": round(float(max(e.f_lo, model.fmin)) / 1e6, 6),
                     "fmax_mhz": round(float(min(e.f_hi, model.fmax)) / 1e6, 6),
                     "peak_excess_db": round(db, 3),
                     "drift_mhz_s": None if math.isnan(e.drift_mhz_s) else round(float(e.drift_mhz_s), 4),
                     "source_region": e.region, "reason": e.reason})
    rows.sort(key=lambda r: (r["start_utc"], r["fmin_mhz"]))
    for k, r in enumerate(rows):
        r["event_id"] = f"sim-{model.name}-{k + 1:05d}"
    return rows


def _open_path(model, e, t0, t1):
    """A distant transmitter is received only while its path is open: clip to that."""
    t = np.arange(t0, t1 + sky.NODE_S, sky.NODE_S / 4)
    t = t[t <= t1]
    ok = model.source_propagation("skywave", t, 0.5 * (e.f_lo + e.f_hi)) > 0.1
    if not ok.any():
        return t0, t1
    return float(t[ok][0]), float(min(t1, t[ok][-1] + sky.NODE_S / 4))


def iter_spectra(cfg, start_unix: float, hours: float, seed: int | None = None, rfi: str | None = None,
                 jupiter_schedule=None, include=None, inject=None, event_rate: float = 1.0,
                 noise: bool = True, chunk_s: float = 600.0) -> SpectralRun:
    """Simulated dynamic spectra in chunks (bounded memory); see ``SpectralRun``.

    ``rfi``: quiet-rural | rural | residential | city (ITU-R P.372 categories); ``seed``
    and ``rfi`` default to ``[receiver] sim_seed`` and ``sim_rfi``.
    ``include``: event classes to generate naturally (default all; ``()`` for background
    only). ``event_rate`` scales natural solar rates and Jovian storm chances.
    ``inject``: list of dicts like ``dict(class='solar_iii', t='2026-12-02T10:00:00Z',
    peak_excess_db=3.0)`` placed as asked with exactly that peak excess (see
    ``SkyModel.inject_event`` for optional keys). ``jupiter_schedule``: explicit Jovian
    storms ``dict(start=..., end=..., region='Io-B', s20=flux in sfu)`` instead of those
    the ephemeris predicts.
    """
    return SpectralRun(cfg, start_unix, hours, seed=seed, rfi=rfi, jupiter_schedule=jupiter_schedule,
                       include=include, inject=inject, event_rate=event_rate, noise=noise, chunk_s=chunk_s)


def simulate_spectra(cfg, start_unix: float, hours: float, seed: int | None = None, rfi: str | None = None,
                     jupiter_schedule=None, include=None, inject=None, event_rate: float = 1.0,
                     noise: bool = True) -> tuple[DynamicSpectrum, list[dict]]:
    """The whole span as one DynamicSpectrum, and its truth rows (see ``iter_spectra``)."""
    run = iter_spectra(cfg, start_unix, hours, seed=seed, rfi=rfi, jupiter_schedule=jupiter_schedule,
                       include=include, inject=inject, event_rate=event_rate, noise=noise)
    parts = list(run)
    spec = parts[0]
    if len(parts) > 1:
        spec = DynamicSpectrum(power_db=np.concatenate([p.power_db for p in parts]), t0=parts[0].t0,
                               cadence_s=spec.cadence_s, freq_hz=spec.freq_hz,
                               flags=np.concatenate([p.flags for p in parts]), chan_offset_s=spec.chan_offset_s,
                               segment=spec.segment, meta=spec.meta)
    return spec, run.truth_rows()


def write_truth_csv(rows: list[dict], path) -> Path:
    """Truth rows as CSV (ISO 8601 UTC times; empty cells for undefined values)."""
    p = Path(path)
    p.parent.mkdir(parents=True, exist_ok=True)
    tmp = p.with_name(p.name + ".tmp")
    with open(tmp, "w", newline="", encoding="utf-8") as fh:
        w = csv.DictWriter(fh, fieldnames=TRUTH_FIELDS, extrasaction="ignore")
        w.writeheader()
        for r in rows:
            w.writerow({k: ("" if r.get(k) is None else r.get(k)) for k in TRUTH_FIELDS})
    tmp.replace(p)
    return p


# --- IQ domain ---------------------------------------------------------------------------

_GAUSS_TABLE: np.ndarray | None = None


def _gauss_table() -> np.ndarray:
    """Standard normal quantiles at the midpoints of 65536 equal-probability bins, times
    sqrt(1/2) (one component of a unit complex Gaussian). Drawing from it by random 16-bit
    index is inverse-transform sampling; the tails beyond 4.3 sigma it cannot reach are
    restored by the inverse FFT, which sums 8192 such values into each sample."""
    global _GAUSS_TABLE
    if _GAUSS_TABLE is None:
        from scipy.special import ndtri
        _GAUSS_TABLE = (ndtri((np.arange(65536) + 0.5) / 65536) * math.sqrt(0.5)).astype(np.float32)
    return _GAUSS_TABLE


class IQGenerator:
    """Complex samples of a SkyModel's sky at one tuning, as the receiver's ADC sees them.

    Block by block (``IQ_BLOCK`` samples): the sky's power spectrum at the block's time
    (re-evaluated every ``IQ_PSD_BLOCKS`` blocks on the fine frequency grid of the block)
    gives each frequency bin a complex Gaussian amplitude; the inverse FFT makes the
    samples. Impulsive interference is added in the time domain (pulses of its own
    width). ``cu8``: quantised like an RTL2832U: 127.5 for zero, clipped at 0 and 255.
    """

    def __init__(self, model: sky.SkyModel, t0: float, center_hz: float, rate_hz: float, psd_per_k: float,
                 seed: int = 0, cu8: bool = True):
        import scipy.fft
        self._fft = scipy.fft
        self.model, self.t0, self.rate, self.psd_per_k = model, float(t0), float(rate_hz), float(psd_per_k)
        self.seed, self.cu8 = int(seed), bool(cu8)
        self.n = IQ_BLOCK
        self._zeros = np.zeros(self.n)
        self.count = 0                    # samples handed out since t0
        self.count_made = 0               # samples generated since t0 (a retune drops the rest of a batch)
        self._block = 0                   # blocks generated (the spectrum is re-evaluated every IQ_PSD_BLOCKS)
        self._buf = None
        self._events = [e for e in model.events if not isinstance(e, sky.Impulses)]
        self._impulses = [e for e in model.events if isinstance(e, sky.Impulses)]
        self._sstorms = [e for e in self._events if isinstance(e, sky.JovianStorm) and e.params["s_bursts"]]
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
        g = sky.Grid(np.array([t_mid]), self.freq, self._zeros, frame, self.rate / self.n)
        plain = [e for e in self._events if e not in self._sstorms]
        total, background = sky.render(self.model, g, events=plain)
        total = total[0].astype(np.float64)
        self._s_power = 0.0
        for e in self._sstorms:
            if e.r_t0 <= t_mid <= e.r_t1:
                with_s, bg = sky.render(self.model, g, events=[e])
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
            if fc is None or not (isinstance(e, sky.Spur) or e.params.get("line_share", 0) > 0):
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
        y = self._fft.ifft(x, axis=-1, overwrite_x=True, workers=1).reshape(-1)
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
            for tp in times[a:b]:                  # a few pulses per block at most
                i = int((tp - t_start) * self.rate)
                seg = y[i:i + w]
                seg += (rng.standard_normal(seg.size) + 1j * rng.standard_normal(seg.size)).astype(np.complex64) * sigma

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
    model = sky.SkyModel(cfg, start_unix, start_unix + n / rate_hz + 1.0, seed=seed, rfi=rfi,
                         jupiter_schedule=jupiter_schedule, include=include, inject=inject, event_rate=event_rate)
    cadence = float(cfg["spectra"]["cadence_s"])
    calibrate_injections(model, cell_layout(cfg), start_unix, cadence, max(1, math.ceil(n / rate_hz / cadence)))
    gen = IQGenerator(model, start_unix, center_hz, rate_hz, system_psd_per_kelvin(cfg), seed=seed, cu8=cu8)
    return gen.read(n)


def write_sigmf(samples: np.ndarray, path, rate_hz: float, center_hz: float, start_unix: float,
                description: str = "") -> tuple[Path, Path]:
    """A SigMF recording (``path.sigmf-meta`` + ``path.sigmf-data``) of cu8 or complex64 samples."""
    import json

    base = Path(path)
    for suffix in (".sigmf-meta", ".sigmf-data", ".sigmf"):
        if base.name.endswith(suffix):
            base = base.with_name(base.name[: -len(suffix)])
    base.parent.mkdir(parents=True, exist_ok=True)
    meta_p, data_p = base.with_name(base.name + ".sigmf-meta"), base.with_name(base.name + ".sigmf-data")
    dtype = "cu8" if samples.dtype == np.uint8 else "cf32_le"
    data = samples if dtype == "cu8" else np.asarray(samples, dtype=np.complex64).view("<f4")
    data.tofile(data_p)
    meta = {"global": {"core:datatype": dtype, "core:sample_rate": float(rate_hz), "core:version": "1.0.0",
                       "core:recorder": "rxlog simulator", "core:description": description},
            "captures": [{"core:sample_start": 0, "core:frequency": float(center_hz),
                          "core:datetime": iso(start_unix)}],
            "annotations": []}
    meta_p.write_text(json.dumps(meta, indent=2) + "\n", encoding="utf-8")
    return meta_p, data_p


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
        from rxlog import receiver

        self._receiver = receiver
        self.cfg = cfg
        self.start_unix = None if start_unix is None else float(start_unix)
        rx = cfg["receiver"]
        self.seed = int(rx["sim_seed"] if seed is None else seed)
        self.paced, self.cu8 = bool(realtime), bool(cu8)
        self.rfi = sky.check_rfi_category(rx["sim_rfi"] if rfi is None else rfi)
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
                raise self._receiver.EndOfStream("simulation finished")
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
        x = self._receiver.to_complex64(raw, "cu8") if self.cu8 else raw
        self._count += n
        self.samples_received += n
        return self._receiver.SampleBlock(x, t0, self.center_hz, self.rate_hz, self.gain_db, self.segment, 0)

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
        self.segment = self._receiver._segment_id("sim", t, self._n_segments)

    def _model_for(self, t: float) -> None:
        """A sky model for the day ahead from ``t`` (events are planned per UTC day, so
        consecutive models agree where they meet)."""
        span = 86400.0 if self.hours is None else self.hours * 3600.0 + 60.0
        model = sky.SkyModel(self.cfg, t, t + span + 120.0, seed=self.seed, rfi=self.rfi, **self.options)
        cad = float(self.cfg["spectra"]["cadence_s"])
        calibrate_injections(model, cell_layout(self.cfg), self.start_unix, cad,
                             int((t + span - self.start_unix) / cad) + 1)
        psd = system_psd_per_kelvin(self.cfg)
        gen = IQGenerator(model, self.start_unix, self.center_hz, self.rate_hz, psd, seed=self.seed, cu8=self.cu8)
        if self._gen is not None:
            gen.count = gen.count_made = self._gen.count
            gen._block = self._gen._block
        self._gen = gen


def write_simulation(cfg, start_unix: float, hours: float, out, iq: bool = False, seed: int | None = None,
                     rfi: str | None = None, center_hz: float | None = None, progress=None) -> dict:
    """Simulate and write: FITS spectra (one file for ``out`` ending in .fits, else the
    archive's layout under the folder ``out``) or a SigMF recording (``iq``), plus the
    truth CSV beside it. ``progress(done, total)`` is called per chunk. Returns a summary
    (paths, rows or samples, truth rows). ``seed``/``rfi`` default to [receiver] sim_seed/sim_rfi."""
    out = Path(out)
    seed = int(cfg["receiver"]["sim_seed"] if seed is None else seed)
    rfi = sky.check_rfi_category(cfg["receiver"]["sim_rfi"] if rfi is None else rfi)
    if iq:
        return _write_iq(cfg, start_unix, hours, out, seed, rfi, center_hz, progress)
    from rxlog import archive

    station = cfg["station"]
    lossless = cfg["storage"]["lossless"]
    done = 0
    if out.suffix.lower() in (".fits", ".fit", ".fts"):
        spec, truth = simulate_spectra(cfg, start_unix, hours, seed=seed, rfi=rfi)
        path = archive.write_spectrum_fits(spec, out, station, lossless=lossless)
        truth_path = out.with_name(out.stem + ".truth.csv")
        done = spec.n_time
        if progress:
            progress(done, done)
    else:
        path = out
        run = iter_spectra(cfg, start_unix, hours, seed=seed, rfi=rfi)
        with archive.ArchiveWriter(out, station, lossless=lossless) as w:
            for spec in run:
                w.write(spec)
                done += spec.n_time
                if progress:
                    progress(done, run.n_rows)
        truth = run.truth_rows()
        truth_path = out / "truth.csv"
    write_truth_csv(truth, truth_path)
    return {"path": path, "truth_path": truth_path, "rows": done, "truth_rows": len(truth)}


def _write_iq(cfg, start_unix, hours, out, seed, rfi, center_hz, progress):
    rate = float(cfg["receiver"]["sample_rate_hz"])
    sp = cfg["spectra"]
    center = 0.5 * (sp["fmin_mhz"] + sp["fmax_mhz"]) * 1e6 if center_hz is None else float(center_hz)
    total = int(round(hours * 3600 * rate))
    if total <= 0:
        raise RxlogError(f"hours: {hours!r} gives no samples at {rate:.0f} samples/s")
    rx = SimulatedReceiver(cfg, start_unix=start_unix, seed=seed, realtime=False, rfi=rfi, hours=hours)
    rx.center_hz = center
    rx.open()
    gen = rx._gen
    meta_p, data_p = write_sigmf(np.zeros(0, np.uint8), out, rate, center, start_unix,
                                 description=f"rxlog simulator, seed {seed}, rfi {rfi}, station {cfg['station']['name']}")
    done = 0
    with open(data_p, "ab") as fh:
        while done < total:
            n = min(int(rate), total - done)
            gen.read(n).tofile(fh)
            done += n
            rx._count = done
            if progress:
                progress(done, total)
    truth = rx.truth_rows()
    truth_path = meta_p.with_name(meta_p.name[: -len(".sigmf-meta")] + ".truth.csv")
    write_truth_csv(truth, truth_path)
    return {"path": meta_p, "truth_path": truth_path, "samples": done, "truth_rows": len(truth)}
