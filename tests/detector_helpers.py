"""Small synthetic dynamic spectra for the detector tests, built from known ingredients.

Power is linear (background units) until the end, when radiometer noise is applied as
a gamma distribution of shape N (the mean of N independent exponential power samples)
and the result is converted to dB. Every burst is drawn at each cell's true sampling
time ``row time + chan_offset_s``, as a sweeping receiver would see it.
"""

import numpy as np

from rxlog.spectrum import DynamicSpectrum, channel_grid

T0 = 1796162400.0          # 2026-12-01T22:00:00Z
CFG = {"station": {"name": "test-station", "latitude_deg": 47.5, "longitude_deg": 8.7, "elevation_m": 450.0},
       "detector": {}, "rfi": {"static_ranges": []}}


def cfg_with(**detector):
    return {**CFG, "detector": dict(detector)}


class Sky:
    """A background with a slope in frequency and a slow drift in time, plus bursts."""

    def __init__(self, seconds, n_chan=256, cadence=1.0, fmin=16.0, fmax=24.0, offsets=None, t0=T0):
        self.cadence = cadence
        self.t0 = t0
        self.n_time = int(round(seconds / cadence))
        self.f_hz = channel_grid(fmin, fmax, n_chan)
        self.f = self.f_hz / 1e6
        self.offsets = np.zeros(n_chan) if offsets is None else np.asarray(offsets, dtype=np.float64)
        self.t_row = np.arange(self.n_time) * cadence
        self.t = self.t_row[:, None] + self.offsets[None, :]          # seconds from t0, true times
        drift_db = 1.0 * np.sin(2 * np.pi * self.t_row / 86164.0 + 0.3)
        self.base_db = (30.0 - 25.0 * np.log10(self.f / 20.0))[None, :] + drift_db[:, None]
        self.extra = np.zeros((self.n_time, n_chan))                   # excess, background units
        self.gain_db = np.zeros((self.n_time, n_chan))                 # multiplicative (fadeouts)

    @staticmethod
    def lin(db):
        return 10.0 ** (db / 10.0) - 1.0

    def type3(self, t_ref, peak_db, f_ref=24.0, width_s=1.0, decay_s=None):
        """A Type III whose peak time at f follows Alvarez & Haddock (1973): a Gaussian rise
        of ``width_s`` and, when ``decay_s`` is given, an exponential decay of
        decay_s x (20 MHz / f) after the peak (decametric Type III decay in seconds, from memory)."""
        tp = t_ref + (self.f ** -0.84 - f_ref ** -0.84) / (0.84 * 0.01)
        x = self.t - tp[None, :]
        prof = np.exp(-0.5 * (x / width_s) ** 2)
        if decay_s is not None:
            tau = decay_s * 20.0 / self.f[None, :]
            prof = np.where(x < 0, prof, np.exp(-np.clip(x, 0, None) / tau))
        self.extra += self.lin(peak_db) * prof
        return tp

    def impulse(self, t_at, peak_db):
        i = int(round(t_at / self.cadence))
        self.extra[i, :] += self.lin(peak_db)

    def carrier(self, f_mhz, db, t_on=0.0, t_off=None):
        c = int(np.argmin(np.abs(self.f - f_mhz)))
        on = (self.t_row >= t_on) & (self.t_row < (t_off if t_off is not None else np.inf))
        self.extra[on, c] += self.lin(db)
        return c

    def chirp(self, t_start, f_start, rate_mhz_s, db):
        """A narrowband sweep: one channel per step at the frequency reached then."""
        fc = f_start + rate_mhz_s * (self.t - t_start)
        df = self.f[1] - self.f[0]
        inside = (np.abs(self.f[None, :] - fc) <= df / 2) & (self.t >= t_start)
        self.extra += inside * self.lin(db)

    def patch(self, t_start, t_end, f_lo, f_hi, peak_db, rise_s=10.0):
        """A smooth enhancement over a time-frequency box (soft edges)."""
        tw = np.clip(np.minimum(self.t - t_start, t_end - self.t) / rise_s, 0, 1)
        fw = np.clip(np.minimum(self.f - f_lo, f_hi - self.f) / 0.2, 0, 1)
        self.extra += self.lin(peak_db) * tw * fw[None, :]

    def pulse_train(self, period_s, peak_db, dwell_s, t_first=0.0):
        """Sub-millisecond pulses every ``period_s`` (an electric fence): each lights the
        channels whose dwell [true time, + dwell_s) holds it, as a sweep sees it."""
        pulses = np.arange(t_first, self.t_row[-1] + self.cadence, period_s)
        n = np.searchsorted(pulses, self.t + dwell_s) - np.searchsorted(pulses, self.t)
        self.extra += n * self.lin(peak_db)

    def storm(self, t_start, t_end, f_lo, f_hi, mean_db, seed=1, rise_s=60.0):
        """A Jovian-like storm: a smooth envelope whose intensity in each cell is drawn
        anew, exponentially distributed with mean 1 (L-bursts of about one time step in
        strong scintillation; a drastic simplification of their shapes)."""
        rng = np.random.default_rng(seed)
        tw = np.clip(np.minimum(self.t - t_start, t_end - self.t) / rise_s, 0, 1)
        fw = np.clip(np.minimum(self.f - f_lo, f_hi - self.f) / 0.2, 0, 1)
        self.extra += self.lin(mean_db) * tw * fw[None, :] * rng.exponential(1.0, self.t.shape)

    def fadeout(self, t_start, depth_db, rise_s=120.0, decay_s=900.0):
        x = self.t - t_start
        env = np.where(x < rise_s, np.clip(x, 0, None) / rise_s, np.exp(-np.clip(x - rise_s, 0, None) / decay_s))
        env = env * (x >= 0)
        self.gain_db -= depth_db * env * (20.0 / self.f[None, :]) ** 2

    def spectrum(self, seed=0, n_avg=1500, segment="seg-1", kurtosis=None) -> DynamicSpectrum:
        rng = np.random.default_rng(seed)
        lin = 10.0 ** ((self.base_db + self.gain_db) / 10.0) * (1.0 + self.extra)
        power = rng.gamma(n_avg, 1.0 / n_avg, size=lin.shape) * lin
        return DynamicSpectrum(power_db=(10.0 * np.log10(power)).astype(np.float32), t0=self.t0,
                               cadence_s=self.cadence, freq_hz=self.f_hz,
                               chan_offset_s=self.offsets.astype(np.float32), segment=segment,
                               kurtosis=kurtosis)


def sun_up(times):
    n = len(times)
    return {"sun_alt_deg": np.full(n, 35.0), "jupiter_alt_deg": np.full(n, -20.0),
            "source_region": np.array(["none"] * n)}


def sun_down(times):
    n = len(times)
    return {"sun_alt_deg": np.full(n, -30.0), "jupiter_alt_deg": np.full(n, -20.0),
            "source_region": np.array(["none"] * n)}


def jupiter_up(times):
    n = len(times)
    return {"sun_alt_deg": np.full(n, -30.0), "jupiter_alt_deg": np.full(n, 40.0),
            "source_region": np.array(["Io-B"] * n), "cml3_deg": np.full(n, 150.0),
            "io_phase_deg": np.full(n, 90.0)}
