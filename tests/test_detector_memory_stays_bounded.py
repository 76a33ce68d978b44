"""Invariant: the online detector's state stays bounded however long it runs (a day of
rows fed minute by minute holds no more than a few minutes of bursts, and coarse block
levels from half a slow window ahead back to the slow baseline's reach across a long event)."""

import numpy as np
from detector_helpers import Sky, cfg_with, sun_up

from rxlog.detect.online import OnlineDetector


def test_state_is_bounded_over_hours_of_feeding():
    cfg = cfg_with(slow_window_s=1800.0, max_event_s=120.0)
    sky = Sky(4 * 3600, n_chan=64, cadence=2.0)
    for t in np.arange(300, 4 * 3600, 900):
        sky.type3(t, 2.0)
        sky.impulse(t + 400, 3.0)
    spec = sky.spectrum(seed=1)
    det = OnlineDetector(cfg, tags_fn=sun_up)
    peak_rows, peak_blocks, peak_coarse, n_events = 0, 0, 0, 0
    for i in range(0, spec.n_time, 30):
        n_events += len(det.feed(spec.slice_rows(i, i + 30)))
        seg = det.seg
        peak_rows = max(peak_rows, seg.fine.tracker.grow.shape[0] + sum(p.n_time for p in seg.pending))
        peak_blocks = max(peak_blocks, len(seg.blocks) + len(seg.fine.blocks))
        peak_coarse = max(peak_coarse, len(seg.background.coarse))
        det.pop_episodes()
        det.pop_quality()
        assert len(det.episodes.open) <= 10      # open episodes only (32 events in all)
    n_events += len(det.flush())
    assert n_events >= 16                            # the bursts were found along the way
    assert peak_rows <= 120 / 2.0 + 2 * seg.grid.rows_per_block     # the longest burst plus a block
    assert peak_blocks <= 2 * (seg.background.W + 4)               # the fast window and its look-ahead
    bg = seg.background
    assert peak_coarse <= bg.back + bg.half_slow + 3                # the slow window and its bridge
