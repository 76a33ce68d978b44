"""Invariant: jovian_s comes only from high-time-resolution spectra (a cutout from the
channelizer's ring), never from 1-s spectra. S-burst drift -5 to -30 MHz/s after Zarka's
reviews of Jovian decametric emission (from memory); the synthetic bursts drift at -15."""

import numpy as np
from detector_helpers import CFG

from rxlog.detect.cutout import refine_with_cutout
from rxlog.spectrum import DynamicSpectrum

T0 = 1796162400.0


def _cutout(cadence, drift=-15.0, n_bursts=6, seconds=3.0, seed=0):
    rng = np.random.default_rng(seed)
    n_t = int(round(seconds / cadence))
    f = 20.0 + (np.arange(128) + 0.5) * (2.4 / 128)          # one 2.4-MHz tuning, MHz
    t = np.arange(n_t) * cadence
    extra = np.zeros((n_t, 128))
    for k in range(n_bursts):
        t_top = 0.3 + k * 0.4                                  # burst at the top of the window
        tf = t_top + (f - f.max()) / drift                     # arrival time at each frequency
        extra += 3.0 * np.exp(-0.5 * ((t[:, None] - tf[None, :]) / 0.002) ** 2)
    p = rng.gamma(40, 1 / 40, size=extra.shape) * (1 + extra)
    return DynamicSpectrum(10 * np.log10(p).astype(np.float32), T0, cadence, f * 1e6, segment="cut")


EVENT = {"station": "test-station", "event_id": "e1", "class": "jovian_l", "confidence": 0.6,
         "reason": "storm", "jupiter_alt_deg": 40.0, "sun_alt_deg": -30.0}


def test_millisecond_cutout_turns_a_storm_into_s_bursts():
    out = refine_with_cutout(CFG, EVENT, _cutout(0.001), path="cutouts/e1.fits")
    assert out["class"] == "jovian_s"
    assert "S-bursts" in out["reason"] and out["cutout_path"] == "cutouts/e1.fits"
    assert EVENT["class"] == "jovian_l"          # the input is not modified


def test_coarse_cutout_or_jupiter_down_leaves_the_class_alone():
    assert refine_with_cutout(CFG, EVENT, _cutout(0.05))["class"] == "jovian_l"
    down = dict(EVENT, jupiter_alt_deg=-10.0)
    assert refine_with_cutout(CFG, down, _cutout(0.001))["class"] == "jovian_l"
