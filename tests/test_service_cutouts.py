"""Event cutouts: the live logger keeps the channelizer ring's full-resolution rows
around each new event as a FITS file the report and the detector can read back."""

from types import SimpleNamespace

import numpy as np
from service_helpers import write_config

from rxlog.archive.read import read_spectrum_fits
from rxlog.receive.ring import Ring
from rxlog.review.cutouts import cutout_file
from rxlog.spectrum import channel_grid
from rxlog.station.config import load_config
from rxlog.station.cutouts import cutout_relpath, prune_cutouts, save_cutout
from rxlog.station.supervise import Logger
from rxlog.store import EventStore
from rxlog.timeutil import iso

T0 = 1_796_162_400.0      # 2026-12-01T22:00:00Z
ROW_S = 0.002


def _ring(seconds=6.0):
    freq = channel_grid(19.92, 20.08, 64)
    ring = Ring(seconds=seconds, row_s=ROW_S, freq_hz=freq, chans=np.arange(64), segment="s1",
                meta={"mode": "single"})
    t = T0 + ROW_S * np.arange(int(seconds / ROW_S))
    rng = np.random.default_rng(1)
    ring.push(t, (10 + 0.3 * rng.standard_normal((t.size, 64))).astype(np.float16))
    return ring


def _event(cls="jovian_l", start=T0 + 2.0, end=T0 + 3.0):
    return {"event_id": f"faulty-{int(start)}-20.000", "station": "faulty", "class": cls,
            "start_utc": iso(start), "end_utc": iso(end), "peak_utc": iso(start + 0.5),
            "fmin_mhz": 19.95, "fmax_mhz": 20.05, "jupiter_alt_deg": 30.0, "sun_alt_deg": -20.0}


def test_cutout_covers_the_event_with_margins_and_reads_back(tmp_path):
    cfg = load_config(write_config(tmp_path))
    ev = save_cutout(cfg, _event(), _ring())
    assert ev["cutout_path"] == str(cutout_relpath(ev)) and not ev["cutout_path"].startswith("/")
    path = cutout_file(cfg, ev)          # where the morning report looks for it
    assert path == cfg.storage_root / ev["cutout_path"] and path.is_file()
    cut = read_spectrum_fits(path)
    assert abs(cut.cadence_s - ROW_S) < 1e-9
    assert abs(cut.t0 - (T0 + 2.0 - 2.0)) < ROW_S and abs(cut.t_end - (T0 + 3.0 + 2.0)) < 2 * ROW_S
    assert np.isfinite(cut.power_db).all()
    # noise only: the detector finds no S-bursts there and keeps the class
    assert ev["class"] == "jovian_l"


def test_no_rows_in_the_ring_no_cutout(tmp_path):
    cfg = load_config(write_config(tmp_path))
    ev = _event(start=T0 + 100, end=T0 + 101)
    assert save_cutout(cfg, ev, _ring()) == ev
    assert not (cfg.storage_root / "cutouts").exists()


def test_logger_skips_interference_and_a_paused_disk(tmp_path):
    cfg = load_config(write_config(tmp_path))
    store = EventStore(cfg.store_path)
    try:
        lg = Logger(cfg, feed=SimpleNamespace(ring=_ring(), paced=True), archive_factory=None,
                    detector_factory=None, store=store)
        rfi, burst = lg.pipeline.with_cutouts([_event("rfi"), _event("solar_iii", T0 + 1, T0 + 2)])
        assert rfi.get("cutout_path") is None and burst["cutout_path"]
        lg.disk.paused = True
        (late,) = lg.pipeline.with_cutouts([_event("solar_iii", T0 + 3, T0 + 4)])
        assert late.get("cutout_path") is None
    finally:
        store.close()


def test_retention_removes_only_old_cutout_days(tmp_path):
    cfg = load_config(write_config(tmp_path))
    old = cfg.storage_root / "cutouts" / "2026" / "10" / "01"
    new = cfg.storage_root / "cutouts" / "2026" / "11" / "30"
    for d in (old, new):
        d.mkdir(parents=True)
        (d / "x.fits").write_bytes(b"")
    (old / "notes.txt").write_text("kept: not a cutout")
    gone = prune_cutouts(cfg, 30, now=T0)
    assert gone == [old / "x.fits"]
    assert (new / "x.fits").exists() and (old / "notes.txt").exists()


def test_default_ring_outlasts_the_detector_latency():
    # A burst leaves the detector half a fast window plus three blocks after it ends
    # (rxlog.detect); with the shipped defaults a minute-long burst is still in the ring.
    from pathlib import Path

    from detector_helpers import Sky, sun_up

    from rxlog.detect.online import OnlineDetector
    from rxlog.station.cutouts import cutout_ring_needed_s

    cfg = load_config(Path(__file__).resolve().parents[1] / "config" / "station.example.toml")
    need = cutout_ring_needed_s(cfg)
    assert cfg["sweep"]["ring_s"] >= need
    # the latency the bound assumes is the detector's own: feed a burst and see when it comes out
    sky = Sky(1200, n_chan=128)
    sky.type3(300, 3.0)
    spec = sky.spectrum(seed=1)
    det = OnlineDetector({**cfg, "rfi": {"static_ranges": []}}, tags_fn=sun_up)
    out_at = None
    for i in range(spec.n_time):
        if det.feed(spec.slice_rows(i, i + 1)) and out_at is None:
            out_at = spec.t0 + (i + 1) * spec.cadence_s
    assert out_at is not None
    burst_end = spec.t0 + 320.0
    assert out_at - burst_end <= need - 60.0
