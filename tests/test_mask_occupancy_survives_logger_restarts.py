"""What the RFI mask learned survives a restart of the logger: the pipeline keeps the
detector's occupancy in the event store with each hour's quality rows and at a stop, and
a new logger's detector takes it up before its first spectrum."""

from types import SimpleNamespace

import numpy as np
from detector_helpers import Sky, sun_down
from service_helpers import write_config

from rxlog.detect.online import OnlineDetector
from rxlog.station.config import load_config
from rxlog.station.supervise import Logger
from rxlog.store import EventStore


def _logger(cfg, store):
    return Logger(cfg, feed=SimpleNamespace(ring=None, paced=True), archive_factory=None,
                  detector_factory=lambda: OnlineDetector(cfg, tags_fn=sun_down), store=store)


def test_the_learned_occupancy_is_stored_and_taken_up_after_a_restart(tmp_path):
    cfg = load_config(write_config(tmp_path))
    sky = Sky(5400, n_chan=128)
    c = sky.carrier(19.3, 10.0)                     # a broadcaster on all the time
    spec = sky.spectrum()
    store = EventStore(cfg.store_path)
    try:
        lg = _logger(cfg, store)
        for i in range(0, spec.n_time, 60):
            lg.pipeline.store_events(lg.pipeline.detector.feed(spec.slice_rows(i, min(i + 60, spec.n_time))))
        lg.pipeline.finish()
        learned = lg.pipeline.detector.occupancy_state()
        (stored,) = store.occupancy(cfg["station"]["name"])
        assert stored["recent"][c] > 0.5 and np.allclose(stored["recent"], learned[0]["recent"])
        # masked per hour and per channel group, the carrier's group among the masked
        q = [r for r in store.quality() if r["masked_by_group"]]
        assert q and all(r["masked_by_group"][int((19.3 - r["group_fmin_mhz"]) // r["group_mhz"])] > 0 for r in q)

        again = _logger(cfg, store)
        (taken,) = again.pipeline.detector.occupancy_state()
        assert np.allclose(taken["recent"], stored["recent"]) and np.allclose(taken["by_hour"], stored["by_hour"])
    finally:
        store.close()
