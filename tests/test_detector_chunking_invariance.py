"""Invariant: the online detector fed in chunks of any size finds exactly the events of a
one-shot run, and both give the same mask and hourly quality rows."""

import numpy as np
from detector_helpers import Sky, cfg_with, sun_up

from rxlog.detect.online import OnlineDetector, detect_spectrum, latest

# A short slow window so long events also finish inside the test spectrum.
CFG = cfg_with(slow_window_s=1800.0, fast_window_s=180.0)


def _night():
    sky = Sky(5400, n_chan=128)
    sky.type3(400, 1.5)
    sky.type3(460, 0.8)
    sky.impulse(900, 3.0)
    sky.carrier(18.5, 4.0, t_on=1000, t_off=2500)
    sky.chirp(1500, 16.2, 0.1, 8.0)
    sky.patch(2400, 3300, 16.0, 24.0, 0.8, rise_s=120)      # a 15-minute continuum
    sky.fadeout(4200, 1.0, rise_s=60, decay_s=300)
    return sky.spectrum(seed=3)


def _key(events):
    return [tuple(sorted(e.items())) for e in events]


def test_chunked_feed_gives_the_same_events_as_one_shot():
    spec = _night()
    whole = detect_spectrum(CFG, spec, tags_fn=sun_up, chunk_s=1e9)
    assert len(whole.events) >= 6      # the night is not empty: the comparison means something
    classes = {e["class"] for e in whole.events}
    assert {"solar_iii", "rfi"} <= classes

    rng = np.random.default_rng(1)
    det = OnlineDetector(CFG, tags_fn=sun_up)
    chunked, i = [], 0
    while i < spec.n_time:
        n = int(rng.choice([1, 7, 30, 61, 333]))
        chunked += det.feed(spec.slice_rows(i, min(i + n, spec.n_time)))
        i += n
    chunked = latest(chunked + det.flush())
    assert _key(chunked) == _key(whole.events)
    quality = det.pop_quality()
    assert quality == whole.quality_rows


def test_detect_spectrum_does_not_depend_on_its_chunk_size():
    spec = _night()
    a = detect_spectrum(CFG, spec, tags_fn=sun_up, chunk_s=1e9)
    b = detect_spectrum(CFG, spec, tags_fn=sun_up, chunk_s=47.0)
    assert _key(a.events) == _key(b.events)
    assert np.array_equal(a.mask, b.mask)
    assert [e["episode_id"] for e in a.events] == [e["episode_id"] for e in b.events]
