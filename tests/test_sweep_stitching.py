"""Sweep plan and stitching invariants: a tone appears once, at its frequency, wherever it
sits (overlaps between windows, next to a window's DC cut, at the band edges, drifting
across a boundary); each channel's time offset is when its window was sampled; stale
buffers after a retune never reach the spectrum.

The receiver here is a test stand-in: an ideal receiver (white noise, tones and pulses at
sky frequencies, a perfect anti-alias filter at +-rate/2, times from the sample count),
which after each retune can hand out a few buffers of the old tuning, as a dongle's
queued buffers do.
"""

import numpy as np
import pytest

from rxlog.receive.blocks import SampleBlock
from rxlog.receive.channelizer import Channelizer
from rxlog.receive.sweep import Sweeper, SweepPlan
from rxlog.spectrum import FLAG_UNCOVERED
from rxlog.station.config import ConfigError, config_from_text

RATE = 2_400_000
T0 = 1_796_000_000.123
BASE = "[station]\nname='t'\nlatitude_deg=47\nlongitude_deg=8\n[spectra]\ncadence_s=1.0\n"
# white noise drawn once; reads take stretches at random offsets (fast, still white)
_rng = np.random.default_rng(99)
NOISE = (0.01 * (_rng.normal(size=1 << 21) + 1j * _rng.normal(size=1 << 21))).astype(np.complex64)


class IdealReceiver:
    kind = "test"

    def __init__(self, tones=(), pulses=(), stale_buffers=0, seed=0):
        self.tones = list(tones)           # (f0 Hz, drift Hz/s, amplitude)
        self.pulses = list(pulses)         # (t_start, t_end, amplitude): broadband
        self.stale_buffers = stale_buffers
        self.rng = np.random.default_rng(seed)
        self.rate_hz, self.gain_db = float(RATE), 20.0
        self.center_hz = 20e6
        self._n = 0
        self._seg = 0
        self._stale = 0
        self._old_center = self.center_hz
        self._phasors = {}

    @property
    def segment(self):
        return f"ideal-{self._seg}"

    def open(self):
        self._n = 0

    def close(self):
        pass

    def tune(self, center_hz):
        self._old_center, self.center_hz = self.center_hz, float(center_hz)
        self._seg += 1
        self._stale = self.stale_buffers

    def read(self, n):
        # time since T0 from the count (POSIX float64 seconds would add phase noise to tones)
        tau = (self._n + np.arange(n)) / RATE
        center = self.center_hz
        if self._stale:
            center = self._old_center      # a buffer queued before the retune
            self._stale -= 1
        k = int(self.rng.integers(0, NOISE.size - n))
        x = NOISE[k:k + n].astype(np.complex128)
        for f0, drift, amp in self.tones:
            if drift == 0:                 # steady tone: a cached phasor times the phase at the block start
                if abs(f0 - center) < RATE / 2:
                    key = (f0 - center, n)
                    if key not in self._phasors:
                        self._phasors[key] = np.exp(2j * np.pi * (f0 - center) * np.arange(n) / RATE)
                    x += amp * np.exp(2j * np.pi * ((f0 - center) * tau[0] % 1.0)) * self._phasors[key]
                continue
            inside = np.abs(f0 + drift * tau - center) < RATE / 2
            ph = 2 * np.pi * ((f0 - center) * tau + 0.5 * drift * tau ** 2)
            x += inside * amp * np.exp(1j * ph)
        for a, b, amp in self.pulses:
            on = (tau >= a - T0) & (tau < b - T0)
            if on.any():
                x[on] += amp * (self.rng.normal(size=on.sum()) + 1j * self.rng.normal(size=on.sum()))
        self._n += n
        return SampleBlock(x.astype(np.complex64), T0 + self._n / RATE - n / RATE, self.center_hz, RATE, 20.0,
                           self.segment)


def sweeper(tmp_path, source, extra=""):
    cfg = config_from_text(BASE + "[sweep]\nkurtosis=false\nring_s=0\n" + extra, tmp_path / "s.toml")
    plan = SweepPlan.from_config(cfg)
    sw = Sweeper(source, plan, Channelizer(cfg))
    sw.open()
    return sw, plan


def rows(sw, n):
    out = []
    while sum(d.n_time for d in out) < n:
        out += sw.step()
    return out


def clusters(db, above=10.0):
    """Runs of adjacent channels more than ``above`` dB over the median."""
    hot = np.flatnonzero(np.nan_to_num(db, nan=-np.inf) > np.nanmedian(db) + above)
    if hot.size == 0:
        return []
    cuts = np.flatnonzero(np.diff(hot) > 1) + 1
    return np.split(hot, cuts)


def channel_of(f, grid):
    df = grid[1] - grid[0]
    return int(np.floor((f - (grid[0] - df / 2)) / df))


def test_default_plan_covers_the_band_with_windows_on_channel_edges(tmp_path):
    cfg = config_from_text(BASE, tmp_path / "p.toml")
    plan = SweepPlan.from_config(cfg)
    assert plan.n_tunings == 5
    assert (plan.assignment >= 0).all()
    edges = (plan.tunings_hz - 16e6) / (plan.freq_hz[1] - plan.freq_hz[0])
    np.testing.assert_allclose(edges, np.round(edges), atol=1e-9)
    # each channel is taken from one tuning, and tunings own contiguous stretches in order
    assert (np.diff(plan.assignment) >= 0).all()
    assert plan.dwell_s > 0.15 and plan.discard_buffers >= 1


def test_tones_appear_once_at_their_frequencies(tmp_path):
    cfg = config_from_text(BASE, tmp_path / "p.toml")
    plan = SweepPlan.from_config(cfg)
    t = plan.tunings_hz
    tones = [((t[0] + t[1]) / 2 + 1234.0, 0.0, 0.02),   # seen by two windows: must show once
             (t[2] + 6_000.0, 0.0, 0.02),               # just past tuning 2's DC cut
             (t[3] + 0.9e6, 0.0, 0.02),                 # near the usable edge of window 3
             (16.0e6 + 20_000.0, 0.0, 0.02),            # band edges
             (23.98e6, 0.0, 0.02)]
    sw, plan = sweeper(tmp_path, IdealReceiver(tones))
    ds = rows(sw, 2)
    for d in ds:
        for r in range(d.n_time):
            db = d.power_db[r]
            found = clusters(db)
            assert len(found) == len(tones), [c.tolist() for c in found]
            for f, _, _ in tones:
                want = channel_of(f, d.freq_hz)
                hit = [c for c in found if abs(int(c[np.argmax(db[c])]) - want) <= 1]
                assert len(hit) == 1, f"tone at {f / 1e6:.4f} MHz"
                assert hit[0].size <= 3


def test_drifting_tone_crosses_a_tuning_boundary_once(tmp_path):
    cfg = config_from_text(BASE, tmp_path / "p.toml")
    plan = SweepPlan.from_config(cfg)
    boundary = plan.freq_hz[np.flatnonzero(np.diff(plan.assignment))[0]]
    drift = 30e3                                     # Hz/s, across the boundary in ~1.5 s
    f0 = boundary - 45e3
    sw, plan = sweeper(tmp_path, IdealReceiver([(f0, drift, 0.02)]))
    owners = set()
    for d in rows(sw, 4):
        for r in range(d.n_time):
            db = d.power_db[r]
            found = clusters(db)
            assert len(found) == 1
            peak = int(found[0][np.argmax(db[found[0]])])
            # where the tone was when that channel's window was being sampled
            t_mid = d.times[r] + d.chan_offset_s[peak] + plan.dwell_s / 2
            f_then = f0 + drift * (t_mid - T0)
            assert abs(peak - channel_of(f_then, d.freq_hz)) <= 1
            owners.add(int(plan.assignment[peak]))
    assert len(owners) == 2                          # it did cross


def test_channel_offsets_say_when_each_window_was_sampled(tmp_path):
    cfg = config_from_text(BASE, tmp_path / "p.toml")
    plan = SweepPlan.from_config(cfg)
    slot = np.ceil(T0) + 1.0                         # the second full cycle
    j = 2
    a = slot + plan.dwell_offsets_s[j] + 0.05         # a 20-ms broadband pulse inside window 2's dwell
    sw, plan = sweeper(tmp_path, IdealReceiver(pulses=[(a, a + 0.02, 0.2)]))
    ds = [d for d in rows(sw, 3)]
    row = [d for d in ds if d.t0 <= slot < d.t_end][0]
    db = row.power_db[int(round((slot - row.t0) / row.cadence_s))]
    hot = np.nan_to_num(db, nan=-np.inf) > np.nanmedian(db) + 3.0
    assert hot.sum() > 100
    np.testing.assert_array_equal(hot, plan.assignment == j)
    off = row.chan_offset_s[hot]
    assert np.all(off <= a - slot) and np.all(a + 0.02 - slot <= off + plan.dwell_s)
    assert np.all(row.chan_offset_s[plan.assignment == 0] < off.min())


@pytest.mark.parametrize("stale", [1, 2])
def test_stale_buffers_after_a_retune_are_discarded(tmp_path, stale):
    # a strong tone seen only from tuning 1; stale buffers handed to tuning 2 would put a
    # ghost of it 1.6 MHz off, in tuning 2's window
    cfg = config_from_text(BASE, tmp_path / "p.toml")
    plan = SweepPlan.from_config(cfg)
    f = plan.tunings_hz[1] - 0.5e6
    sw, plan = sweeper(tmp_path, IdealReceiver([(f, 0.0, 0.05)], stale_buffers=stale))
    assert plan.discard_buffers >= stale
    for d in rows(sw, 2):
        found = clusters(d.power_db[0], above=6.0)
        assert len(found) == 1 and abs(int(found[0][0]) - channel_of(f, d.freq_hz)) <= 2


def test_too_short_a_discard_lets_stale_buffers_through(tmp_path):
    """The check above can fail: with no discard, the ghost appears."""
    cfg = config_from_text(BASE, tmp_path / "p.toml")
    plan = SweepPlan.from_config(cfg)
    f = plan.tunings_hz[1] - 0.5e6
    sw, plan = sweeper(tmp_path, IdealReceiver([(f, 0.0, 0.05)], stale_buffers=2), extra="discard_s=0\n")
    ghosts = [len(clusters(d.power_db[0], above=6.0)) for d in rows(sw, 2)]
    assert max(ghosts) >= 2


def test_single_mode_gives_cutouts_of_millisecond_spectra(tmp_path):
    cfg = config_from_text(BASE + "[sweep]\nmode='single'\ncenter_hz=20e6\nring_s=10\n", tmp_path / "p.toml")
    plan = SweepPlan.from_config(cfg)
    a = np.ceil(T0) + 0.5
    src = IdealReceiver(pulses=[(a, a + 0.005, 0.3)])
    sw = Sweeper(src, plan, Channelizer(cfg))
    sw.open()
    out = rows(sw, 2)
    assert all(d.meta["mode"] == "single" for d in out)
    assert (out[0].flags[0][:300] & FLAG_UNCOVERED).all()       # 16-19 MHz: outside the one window
    cut = sw.ring.cutout(a - 0.05, a + 0.05)
    assert cut.cadence_s <= 0.002
    level = np.nanmedian(cut.power_db, axis=1)
    loud = cut.times[level > np.median(level) + 6]
    assert loud.min() >= a - cut.cadence_s and loud.max() < a + 0.005


def test_a_step_in_the_wrong_unit_is_refused_before_any_table_is_built(tmp_path):
    """step_hz = 1 over 8 MHz would be 8 million tunings (and a tuning x channel table of
    tens of GB); the config check names the key and the expected unit instead."""
    text = ('[station]\nname = "s"\nlatitude_deg = 1\nlongitude_deg = 2\n'
            '[sweep]\nmode = "sweep"\nstep_hz = 1\n')
    with pytest.raises(ConfigError) as e:
        config_from_text(text, tmp_path / "s.toml")
    assert "[sweep]" in str(e.value) and "tunings" in str(e.value) and "in Hz" in str(e.value)
