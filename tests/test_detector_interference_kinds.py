"""Each kind of interference ends as an ``rfi`` event that names its kind, never as a burst.

Checks rxlog's own rules on synthetic spectra (tests/detector_helpers.py) built from the
physics of each kind (../shared/domain.md): sferics light every channel of one time step
(one sweep dwell) with power falling with frequency, several within a second or two;
single-sideband bursts are a channel or two wide; switched broadband noise steps on and
off within one time step; a sounder sweeps upward at ~0.1 MHz/s; a carrier stays in one
channel and fades; a steady broadband rise has no L-burst texture; a narrow signal whose
spectral kurtosis departs from 1 is man-made. Jupiter is up (or the Sun, for the kinds a
Type IV or fadeout could be mistaken for), so a burst class is always within reach.
"""

import numpy as np
import pytest
from detector_helpers import Sky, cfg_with, jupiter_up, sun_up

from rxlog.detect.classify import RFI_KINDS
from rxlog.detect.online import detect_spectrum
from rxlog.spectrum import FLAG_RFI

# Five sub-bands of 1.6 MHz, each dwelled 0.2 s in a 1-s cycle (the example station's sweep).
OFFSETS = np.repeat(np.arange(5) * 0.2, 256 // 5 + 1)[:256]
DWELL = 0.19


def _events(sky, tags, seed=0, kurtosis=None):
    return detect_spectrum(cfg_with(), sky.spectrum(seed=seed, kurtosis=kurtosis), tags_fn=tags).events


def _no_burst_and_kind(events, kinds):
    """No event but rfi, each naming one of RFI_KINDS first in its reason, and one of ``kinds`` among them."""
    assert events, "the interference must be reported, not thrown away silently"
    assert all(e["class"] == "rfi" for e in events), [(e["class"], e["reason"]) for e in events if e["class"] != "rfi"]
    assert all(e["rfi_kind"] in RFI_KINDS and e["reason"].startswith(e["rfi_kind"] + ":") for e in events)
    assert {e["rfi_kind"] for e in events} & set(kinds), [(e["rfi_kind"], e["reason"]) for e in events]


def sferic(sky, t, peak_db, sweep=True, dur=0.0):
    """A lightning flash from ``t`` (s) lasting ``dur`` (0: a single stroke under a
    millisecond): it lights the cells whose dwell overlaps it (every channel of the row
    without a sweep); power falling with frequency as f^-2 (common practice: sferic
    spectra fall off above a few MHz)."""
    held = (sky.t <= t + dur) & (t < sky.t + (DWELL if sweep else sky.cadence))
    sky.extra += held * sky.lin(peak_db) * (16.0 / sky.f[None, :]) ** 2


def test_a_lone_sferic_is_an_impulse():
    sky = Sky(900, n_chan=256)
    sferic(sky, 400.3, 6.0, sweep=False)
    _no_burst_and_kind(_events(sky, jupiter_up), {"impulse", "impulse_train"})


@pytest.mark.parametrize("seed", [1, 2])
def test_sferic_bunches_caught_by_a_sweep_stay_impulses_not_jovian_bursts(seed):
    # A thunderstorm's multiple-stroke flashes: every 20-60 s a flash of 2-4 strokes
    # within 1.5 s, 1-12 dB, each landing in whichever dwell the sweep is on.
    rng = np.random.default_rng(seed)
    sky = Sky(1200, offsets=OFFSETS)
    t = 60.0
    while t < 1100:
        for dt in np.sort(rng.uniform(0, 1.5, rng.integers(2, 5))):
            sferic(sky, t + dt, rng.uniform(1.0, 12.0))
        t += rng.uniform(20, 60)
    _no_burst_and_kind(_events(sky, jupiter_up, seed=seed), {"impulse", "impulse_train"})


def test_flashes_a_sweep_cycle_apart_stay_impulses_though_they_light_one_dwell_step_after_step():
    # Flashes of a quarter second (longer than a dwell), about one sweep cycle apart and
    # fading: each lights the same one or two dwells in consecutive steps, so at those
    # channels the bunch looks like a burst lasting three seconds. Row by row each is lit
    # in whole dwells and nothing else, which no natural burst is.
    sky = Sky(900, offsets=OFFSETS)
    for t0 in (200.3, 420.5, 610.1):
        for k, db in enumerate((6.0, 2.0, 0.7)):
            sferic(sky, t0 + 1.07 * k, db, dur=0.25)
    _no_burst_and_kind(_events(sky, jupiter_up), {"impulse", "impulse_train"})


def test_a_single_sideband_burst_is_a_narrowband_burst_not_an_l_burst():
    # A voice over of 40 s, keyed in syllables (on 0.3-1 s, off 0.1-0.5 s), two channels wide.
    rng = np.random.default_rng(3)
    sky = Sky(900, n_chan=1024)
    c = int(np.argmin(np.abs(sky.f - 21.3)))
    t = 300.0
    while t < 340.0:
        on = rng.uniform(0.3, 1.0)
        rows = (sky.t_row >= t) & (sky.t_row < t + on)
        sky.extra[rows, c:c + 2] += sky.lin(rng.uniform(6.0, 12.0))
        t += on + rng.uniform(0.1, 0.5)
    res = detect_spectrum(cfg_with(), sky.spectrum(), tags_fn=jupiter_up)
    # masked where it is (and any event made of it is a narrowband burst), never a burst
    assert all(e["class"] == "rfi" and e["rfi_kind"] == "narrowband_burst" for e in res.events), \
        [(e["class"], e["reason"]) for e in res.events]
    lit = sky.extra[:, c:c + 2] > 1.0
    assert np.mean((res.mask[:, c:c + 2][lit] & FLAG_RFI) != 0) > 0.9


@pytest.mark.parametrize("tags", [sun_up, jupiter_up], ids=["by day", "Jupiter up"])
def test_an_appliance_switched_on_for_a_quarter_hour_is_switched_broadband_not_a_type_iv(tags):
    sky = Sky(3 * 3600, n_chan=128)
    on, off = 4000.4, 4900.7                     # within one time step each way
    comb = 1.0 + 0.5 * np.cos(2 * np.pi * sky.f / 0.3)     # harmonics of the switching frequency
    sky.extra += ((sky.t >= on) & (sky.t < off)) * sky.lin(1.5) * comb[None, :] / comb.mean()
    events = _events(sky, tags)
    _no_burst_and_kind(events, {"switched_broadband"})


def test_a_sounder_sweeping_upward_is_a_sweep():
    sky = Sky(900, n_chan=512)
    sky.chirp(200.0, 16.0, 0.1, 12.0)
    _no_burst_and_kind(_events(sky, jupiter_up), {"sweep"})


def test_a_fading_carrier_is_masked_and_never_a_burst():
    sky = Sky(3600, n_chan=512)
    c = sky.carrier(19.3, 10.0)
    fade = 0.5 + 0.5 * np.cos(2 * np.pi * sky.t_row / 300.0)        # deep, slow fading
    sky.extra[:, c] *= fade
    events = _events(sky, jupiter_up)
    assert all(e["class"] == "rfi" for e in events if e["fmin_mhz"] <= 19.3 <= e["fmax_mhz"]), \
        [(e["class"], e["reason"]) for e in events]


def test_a_steady_broadband_rise_at_night_is_broadband_noise():
    sky = Sky(4 * 3600, n_chan=128)
    sky.patch(7200, 7500, 16.0, 24.0, 1.0, rise_s=60)      # no step, no L-burst texture
    ev = [e for e in _events(sky, jupiter_up) if e["duration_s"] >= 120]
    assert ev and all(e["class"] == "rfi" and e["rfi_kind"] == "broadband_noise" for e in ev), \
        [(e["class"], e["reason"]) for e in ev]


def test_a_narrow_non_gaussian_signal_is_named_by_its_kurtosis():
    # 0.5 MHz of a data signal for 60 s whose spectral kurtosis departs from 1 (Nita & Gary
    # 2010: Gaussian noise gives 1), too wide for a single-sideband burst.
    sky = Sky(900, n_chan=256)
    box = (sky.t_row[:, None] >= 400) & (sky.t_row[:, None] < 460) & (np.abs(sky.f - 20.5) < 0.25)[None, :]
    sky.extra += box * sky.lin(3.0)
    rng = np.random.default_rng(4)
    sk = (1.0 + 0.05 * rng.standard_normal(sky.extra.shape) + 0.8 * box).astype(np.float32)
    _no_burst_and_kind(_events(sky, jupiter_up, kurtosis=sk), {"non_gaussian"})
