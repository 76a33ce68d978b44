"""Simulated dynamic spectra: the mean power of each archive cell, times noise drawn from
the exact distribution of a mean of K independent exponential powers, Gamma(K)/K, where K
comes from the channelizer and the sweep plan (window bin correlation, frame overlap,
the duty cycle of the channel's tuning). Each channel is drawn at its sweep time offset
within the row. Fast: nights and weeks.
"""

from __future__ import annotations

import math
import time

import numpy as np

from rxlog.errors import RxlogError
from rxlog.sim.cells import archive_grid, calibrate_injections, cell_layout
from rxlog.sim.model import SkyModel
from rxlog.sim.render import Grid, render
from rxlog.sim.truth import truth_rows
from rxlog.spectrum import FLAG_UNCOVERED, DynamicSpectrum

NOISE_BLOCK_ROWS = 64       # noise is seeded per block of rows counted from the epoch


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
        self.model = SkyModel(cfg, self.start, self.end, seed=seed, rfi=rfi,
                              jupiter_schedule=jupiter_schedule, include=include, inject=inject,
                              event_rate=event_rate)
        self.layout = cell_layout(cfg)
        self.freq = self.model.freq_hz
        self.df = float(self.freq[1] - self.freq[0])
        self.chunk_rows = max(1, int(round(chunk_s / self.cadence)))
        self.peaks: dict = {}
        self._covered = 0
        self._calibrate_injections()

    def grid(self, i0: int, i1: int) -> Grid:
        return archive_grid(self.model, self.layout, self.start, self.cadence, i0, i1)

    def _calibrate_injections(self):
        calibrate_injections(self.model, self.layout, self.start, self.cadence, self.n_rows)

    def __iter__(self):
        for i0 in range(0, self.n_rows, self.chunk_rows):
            yield self.rows(i0, min(self.n_rows, i0 + self.chunk_rows))

    def rows(self, i0: int, i1: int) -> DynamicSpectrum:
        g = self.grid(i0, i1)
        total, _ = render(self.model, g, self.peaks)
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
                render(self.model, self.grid(i0, i1), self.peaks)
                self._covered = i1
        return truth_rows(self.model, self.peaks, self.start, self.end)


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
