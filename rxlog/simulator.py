"""The simulated station: dynamic spectra and IQ samples from one sky model, with truth.

Two outputs of ``rxlog.sky.SkyModel``:

- **spectral domain** (``iter_spectra``, ``simulate_spectra``): the mean power of each
  archive cell, times noise drawn from the exact distribution of a mean of K independent
  exponential powers, Gamma(K)/K, where K comes from the channelizer and the sweep plan
  (window bin correlation, frame overlap, the duty cycle of the channel's tuning). Each
  channel is drawn at its sweep time offset within the row. Fast: nights and weeks.
- **IQ domain** (``simulate_iq``, ``SimulatedReceiver``): complex Gaussian noise with the
  model's power spectrum, generated block by block in the frequency domain (8192-point
  blocks, the spectrum re-evaluated every 32 blocks), optionally quantised to cu8 like
  an RTL2832U (offset 127.5, clipping at the rails, a DC offset at the tuned centre).

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

from rxlog import sky
from rxlog.errors import RxlogError
from rxlog.spectrum import FLAG_UNCOVERED, DynamicSpectrum
from rxlog.timeutil import iso

SYSTEM_GAIN_DB = 57.0       # antenna to ADC at gain_db 0: a rural band at ~8 counts rms with the default 30 dB
NOISE_BLOCK_ROWS = 64       # noise is seeded per block of rows counted from the run start
TRUTH_FIELDS = ("station", "event_id", "class", "start_utc", "end_utc", "peak_utc", "fmin_mhz", "fmax_mhz",
                "peak_excess_db", "drift_mhz_s", "source_region", "reason")
MIN_TRUTH_DB = 0.01
IQ_BLOCK = 8192             # samples per generated block (frequency-domain synthesis)
IQ_PSD_BLOCKS = 32          # blocks between evaluations of the sky's spectrum (~0.11 s at 2.4 MS/s)
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
    return sky.K_B * 10 ** ((gain + SYSTEM_GAIN_DB) / 10)


# --- spectral domain ---------------------------------------------------------------------

class SpectralRun:
    """A simulated stretch of dynamic spectra, iterated in chunks of ``chunk_s``.

    Iterating yields DynamicSpectrum chunks (identical whatever ``chunk_s``); after a
    full pass ``truth_rows()`` lists what was injected. ``noise=False`` gives the
    noise-free mean power.
    """

    def __init__(self, cfg, start_unix: float, hours: float, seed: int = 0, rfi: str = "rural",
                 jupiter_schedule=None, include=None, inject=None, event_rate: float = 1.0,
                 noise: bool = True, chunk_s: float = 600.0):
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
        t = self.start + self.cadence * np.arange(i0, i1, dtype=np.float64)
        return sky.Grid(t, self.freq, self.layout.mid_s, self.layout.dwell_s, self.df)

    def _calibrate_injections(self):
        """Scale each injected event so its peak excess on this grid is what was asked."""
        for e in self.model.events:
            target = e.params.get("target_db")
            if target is None:
                continue
            i0 = max(0, int(math.floor((e.r_t0 - self.start) / self.cadence)) - 2)
            i1 = min(self.n_rows, int(math.ceil((e.r_t1 - self.start) / self.cadence)) + 2)
            if e.cls == "fadeout":
                ip = int(round((e.params["t0"] + e.params["rise"] - self.start) / self.cadence))
                i0, i1 = max(0, ip - 3), min(self.n_rows, ip + 4)
            if i0 >= i1:
                raise RxlogError(f"inject {e.cls} at {iso(e.t_start)}: outside the simulated span")
            others = [x for x in self.model.events if x.cls == "fadeout" and x is not e]
            if e.cls == "fadeout":
                lo, hi = 0.0, 1.0
                while self._peak(e, i0, i1, hi, others) > target:
                    lo, hi = hi, hi * 2
                for _ in range(50):
                    mid = 0.5 * (lo + hi)
                    lo, hi = (mid, hi) if self._peak(e, i0, i1, mid, others) > target else (lo, mid)
                e.scale = 0.5 * (lo + hi)
            else:
                r = 10 ** (self._peak(e, i0, i1, 1.0, others) / 10) - 1
                if r <= 0:
                    raise RxlogError(f"inject {e.cls} at {iso(e.t_start)}: not visible on the archive grid")
                e.scale = (10 ** (target / 10) - 1) / r

    def _peak(self, e, i0, i1, scale, others):
        e.scale = scale
        peaks: dict = {}
        for a in range(i0, i1, 2048):
            sky.render(self.model, self.grid(a, min(i1, a + 2048)), peaks, events=[e] + others)
        return 10 * math.log10(peaks[id(e)][0]) if id(e) in peaks else -math.inf

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


def truth_rows(model: sky.SkyModel, peaks: dict, start: float, end: float) -> list[dict]:
    rows = []
    for e in model.events:
        pk = peaks.get(id(e))
        if pk is None:
            continue
        db = 10 * math.log10(pk[0])
        if abs(db) < MIN_TRUTH_DB:
            continue
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


def iter_spectra(cfg, start_unix: float, hours: float, seed: int = 0, rfi: str = "rural",
                 jupiter_schedule=None, include=None, inject=None, event_rate: float = 1.0,
                 noise: bool = True, chunk_s: float = 600.0) -> SpectralRun:
    """Simulated dynamic spectra in chunks (bounded memory); see ``SpectralRun``.

    ``rfi``: quiet-rural | rural | residential | city (ITU-R P.372 categories).
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


def simulate_spectra(cfg, start_unix: float, hours: float, seed: int = 0, rfi: str = "rural",
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
