"""Man-made interference that a sweeping receiver turns into burst-like shapes.

Checks rxlog's own rules on synthetic spectra (tests/detector_helpers.py): a pulse train
a little slower than the sweep (an electric fence) lands in one dwell at a time and
walks across the sub-bands like a drifting burst; a steady broadband rise (power-line
arcing) looks like a storm in block levels but has none of the seconds-long texture of
L-bursts (../shared/domain.md). Both must end as ``rfi``, never as a Jovian event, while a
textured storm and a slow lane in the same band are still found.
"""

import numpy as np
import pytest
from detector_helpers import Sky, cfg_with, jupiter_up, sun_up

from rxlog.detect.drift import ah_drift
from rxlog.detect.online import detect_spectrum
from rxlog.spectrum import FLAG_RFI
from rxlog.timeutil import parse_iso

# Five sub-bands of 1.6 MHz, each dwelled 0.2 s in a 1-s cycle (the example station's sweep).
OFFSETS = np.repeat(np.arange(5) * 0.2, 256 // 5 + 1)[:256]
DWELL = 0.19


def _run(sky, tags, seed=0):
    return detect_spectrum(cfg_with(), sky.spectrum(seed=seed), tags_fn=tags)


@pytest.mark.parametrize("period_s", [1.04, 1.2, 1.45])
def test_fence_pulse_train_is_one_rfi_storm_not_jovian_bursts(period_s):
    sky = Sky(1800, offsets=OFFSETS)
    sky.pulse_train(period_s, 2.0, DWELL, t_first=0.05)
    res = _run(sky, jupiter_up)
    assert res.events, "the pulses must be reported, not thrown away silently"
    assert all(e["class"] == "rfi" for e in res.events), {e["class"]: e["reason"] for e in res.events}
    storms = [e for e in res.events if "impulse storm" in e["reason"]]
    assert storms and max(s["end_utc"] for s in storms) > min(s["start_utc"] for s in storms)
    # a handful of leftovers at most, not one event per pulse
    assert len(res.events) < 1800 / period_s / 20


def test_fence_does_not_hide_a_storm_in_the_same_night():
    sky = Sky(1800, offsets=OFFSETS)
    sky.pulse_train(1.2, 2.0, DWELL, t_first=0.05)
    sky.storm(600, 900, 18.0, 23.0, 2.0)
    res = _run(sky, jupiter_up)
    jov = [parse_iso(e["peak_utc"]) - sky.t0 for e in res.events if e["class"] == "jovian_l"]
    assert jov and all(590 <= t <= 910 for t in jov)


def test_slow_lane_as_wide_as_a_sub_band_is_not_taken_for_pulses():
    # A Type II-like lane entering across the band's top edge by day: f = 24.5 MHz
    # exp(-t / 600 s) (-0.033 MHz/s at 20 MHz), Gaussian in frequency with sigma 3.5 % of
    # f, about as wide as one 1.6-MHz sub-band. Evenly lit dwells with dark neighbours
    # would make it a pulse train; it must stay one slow-drift burst.
    sky = Sky(1500, offsets=OFFSETS)
    fc = 24.5 * np.exp(-(sky.t - 300.0) / 600.0)
    lane = np.exp(-0.5 * ((sky.f[None, :] - fc) / (0.035 * fc)) ** 2) * ((sky.t > 300) & (sky.t < 900))
    sky.extra += sky.lin(3.0) * lane
    res = _run(sky, sun_up)
    assert not [e for e in res.events if "impulse" in e["reason"]], [e["reason"] for e in res.events]
    assert [e for e in res.events if e["class"] == "solar_ii"]


def test_steady_broadband_rise_at_night_is_rfi_but_a_textured_storm_is_jovian():
    steady = Sky(4 * 3600, n_chan=128)
    # five minutes of arcing that builds up over half a minute (one that steps on within a
    # time step is switched broadband noise: tests/test_detector_interference_kinds.py)
    steady.patch(7200, 7500, 16.0, 24.0, 1.0, rise_s=30)
    ev = [e for e in _run(steady, jupiter_up).events if e["duration_s"] >= 120]
    assert ev and all(e["class"] == "rfi" for e in ev)
    assert "texture" in ev[0]["reason"]

    storm = Sky(4 * 3600, n_chan=128)
    storm.storm(7200, 7500, 16.0, 24.0, 1.0, rise_s=30)
    ev = [e for e in _run(storm, jupiter_up).events if e["duration_s"] >= 120]
    assert ev and all(e["class"] == "jovian_l" for e in ev), [e["reason"] for e in ev]


def test_fence_pulses_under_a_burst_are_masked_where_the_train_says():
    # Under a strong broadband enhancement the neighbours of a pulse's dwell are lit, so
    # the pulse can hardly be told from the burst there (about 92 % of them are, by the
    # dwell test alone); the train's period, learnt from the pulses before, says where
    # each one falls, and all of them are masked. The burst itself is still reported.
    sky = Sky(1500, offsets=OFFSETS)
    sky.pulse_train(1.44, 2.0, DWELL, t_first=0.05)
    pulses = sky.extra > 0
    sky.patch(600, 900, 16.0, 24.0, 6.0, rise_s=5)
    under = pulses & (sky.t > 620) & (sky.t < 880)
    res = _run(sky, sun_up)
    flagged = (res.mask & FLAG_RFI) > 0
    assert flagged[under].mean() > 0.97
    assert [e for e in res.events if e["class"] != "rfi"]


def _type3_drift_errors(offsets, seed=0, peak_db=4.0, width_s=0.7):
    """Type III bursts (Alvarez & Haddock 1973 drift, ``peak_db``, Gaussian rise ``width_s``)
    among fence pulses that land in one dwell after another; relative errors of the
    measured drifts at each event's centre (inf where none was measured)."""
    sky = Sky(1800, offsets=offsets)
    sky.pulse_train(1.45, 3.0, DWELL, t_first=0.05)
    refs = [300.0 + 150.0 * k + 0.37 * k for k in range(9)]
    for t_ref in refs:
        sky.type3(t_ref, peak_db, width_s=width_s, decay_s=2.0)
    res = _run(sky, sun_up, seed=seed)
    errs = []
    for t_ref in refs:
        near = [e for e in res.events if e["class"] == "solar_iii"
                and abs(parse_iso(e["start_utc"]) - sky.t0 - t_ref) < 8]
        if not near:
            errs.append(np.inf)
            continue
        e = max(near, key=lambda x: x["fmax_mhz"] - x["fmin_mhz"])
        law = float(ah_drift(0.5 * (e["fmin_mhz"] + e["fmax_mhz"])))
        errs.append(abs(e["drift_mhz_s"] / law - 1.0) if e["drift_mhz_s"] is not None else np.inf)
    return np.array(errs)


@pytest.mark.parametrize("start_s", [0.0, 0.014])
def test_type3_drift_through_a_fence_is_measured_within_8_percent(start_s):
    # A pulse in a dwell's peak step is masked; the light-curve fit takes it as a missing
    # sample, so the peak is still placed from the rise and the decay around it (a peak
    # picked among the steps left moves by a whole step there). The sweep may also start a
    # little after the step does (the example station: 14 ms), so a pulse late in the last
    # dwell belongs to the step before. The target is 20 %; the peak-step method gave up
    # to 12-16 % here, the fit about 3 %.
    errs = _type3_drift_errors(OFFSETS + start_s)
    assert np.all(errs <= 0.08), np.round(errs, 3)


@pytest.mark.parametrize("seed", [0, 1])
def test_faint_type3_rising_within_a_step_through_a_fence_is_measured_within_20_percent(seed):
    # 1 dB, a rise of 0.35 s (Gaussian sigma): in many bins the peak step is the event's
    # first, and the only sample before it lies outside the event (below threshold). The
    # light-curve fit takes that quiet step as well; without it such bins had no sample
    # before their peak and were left out, and with the fence's holes the rest gave errors
    # up to 40 % and bursts with no drift at all.
    errs = _type3_drift_errors(OFFSETS + 0.014, seed=seed, peak_db=1.0, width_s=0.35)
    assert np.all(errs <= 0.2), np.round(errs, 3)
