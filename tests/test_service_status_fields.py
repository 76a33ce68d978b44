"""What `rxlog status` answers in the morning, field by field, from a store and an archive
built here with known contents: the last archived spectrum and its file, the last event,
the logger's uptime and starts, what was dropped in the last day, and days of disk left."""

import math
import os

import pytest
from archive_helpers import noisy_spectrum
from service_helpers import write_config

from rxlog.archive.write import ArchiveWriter
from rxlog.station.config import load_config
from rxlog.station.health import RunLock
from rxlog.station.status import disk_outlook, station_status
from rxlog.store import EventStore
from rxlog.timeutil import iso

T = 1_796_162_400.0        # 2026-12-01T22:00:00Z
HOUR, DAY = 3600.0, 86400.0


@pytest.fixture
def cfg(tmp_path):
    return load_config(write_config(tmp_path))


def _write(cfg, n_rows, t0, cadence=1.0, segment="a", chunk_s=60.0, close=True):
    w = ArchiveWriter(cfg.archive_dir, cfg["station"], chunk_s=chunk_s)
    w.write(noisy_spectrum(n_rows, t0=t0, cadence=cadence, segment=segment))
    if close:
        w.close()
    return w


def test_last_archived_spectrum_is_the_last_row_on_disk_and_names_its_file(cfg):
    _write(cfg, 120, T)                                   # 22:00:00-22:02:00, consolidated at close
    st = station_status(cfg, now=T + 600)
    assert st["last_archived"] == {"time_utc": iso(T + 120),
                                   "path": cfg.archive_dir / "2026/12/01/faulty_20261201T22Z.fits"}

    # A running writer in the next hour: 60 rows reached disk as a chunk, 30 wait in memory.
    w = _write(cfg, 90, T + HOUR + 30, segment="b", close=False)
    assert (w.rows_written, w.rows_buffered) == (60, 30)
    (chunk,) = (cfg.archive_dir / "2026/12/01").glob("faulty_20261201T23Z.*.chunk.fits")
    st = station_status(cfg, now=T + HOUR + 200)
    assert st["last_archived"] == {"time_utc": iso(T + HOUR + 90), "path": chunk}

    # Days later, with nothing recent, the newest file is still found.
    assert station_status(cfg, now=T + 10 * DAY)["last_archived"]["time_utc"] == iso(T + HOUR + 90)


def test_empty_archive_has_no_last_spectrum(cfg):
    assert station_status(cfg, now=T)["last_archived"] is None


def _event(station, peak, cls):
    return {"event_id": f"{station}-{int(peak)}", "station": station, "class": cls,
            "start_utc": iso(peak - 5), "end_utc": iso(peak + 5), "peak_utc": iso(peak),
            "fmin_mhz": 18.0, "fmax_mhz": 22.0}


def test_last_event_is_the_latest_peak_of_this_station(cfg):
    store = EventStore(cfg.store_path)
    try:
        store.upsert_events([_event("faulty", T + 100, "solar_iii"), _event("faulty", T + 50, "jovian_l"),
                             _event("elsewhere", T + 900, "rfi")])
    finally:
        store.close()
    assert station_status(cfg, now=T + 1000)["last_event"] == {
        "event_id": f"faulty-{int(T + 100)}", "class": "solar_iii", "peak_utc": iso(T + 100)}


def _health(store, t, pid=1, note="", station="faulty", **counts):
    row = {"station": station, "time_utc": iso(t), "pid": pid, "note": note, "samples_received": 0,
           "samples_dropped": 0, "spectra_dropped": 0, "spectra_not_archived": 0}
    row.update(counts)
    store.record_health(row)


def test_uptime_counts_from_the_running_loggers_start_row(cfg):
    now = T + 10 * HOUR
    store = EventStore(cfg.store_path)
    try:
        _health(store, now - 30 * HOUR, pid=111, note="logger started")     # more than a day ago
        _health(store, now - 5 * HOUR, pid=333, note="logger started")
        _health(store, now - 2 * HOUR, pid=222, note="logger started")
        _health(store, now - 1 * HOUR, pid=os.getpid(), note="logger started")
        _health(store, now - 60, pid=os.getpid())
        _health(store, now - 600, pid=os.getpid(), note="logger started", station="elsewhere")
    finally:
        store.close()
    st = station_status(cfg, now=now)
    assert st["pid"] is None and st["uptime_s"] is None
    assert st["starts_24h"] == 3

    lock = RunLock(cfg.storage_root)             # this process stands in for the running logger
    assert lock.acquire()
    try:
        st = station_status(cfg, now=now)
    finally:
        lock.release()
    assert st["pid"] == os.getpid()
    assert st["uptime_s"] == pytest.approx(HOUR, abs=1e-3)


def test_dropped_in_the_last_day_sums_only_that_day(cfg):
    now = T + 2 * DAY
    store = EventStore(cfg.store_path)
    try:
        _health(store, now - 25 * HOUR, samples_received=9000, samples_dropped=1000, spectra_dropped=50)
        _health(store, now - 23 * HOUR, samples_received=1000, samples_dropped=7, spectra_dropped=2,
                spectra_not_archived=3)
        _health(store, now - HOUR, samples_received=2000, samples_dropped=5, spectra_dropped=1)
        _health(store, now - HOUR, station="elsewhere", samples_dropped=400)
    finally:
        store.close()
    assert station_status(cfg, now=now)["dropped_24h"] == {
        "samples_received": 3000, "samples_dropped": 12, "spectra_dropped": 3, "spectra_not_archived": 3}


def test_growth_rate_is_the_last_days_bytes_over_its_seconds_of_data(cfg):
    cadence = 10.0
    old = T - 3 * DAY                                          # two hours three days back: not in the rate
    _write(cfg, int(2 * HOUR / cadence), old, cadence=cadence, segment="old", chunk_s=HOUR)
    old_files = set(cfg.archive_dir.rglob("*.fits"))
    _write(cfg, int(8 * HOUR / cadence), T, cadence=cadence, segment="new", chunk_s=HOUR)
    recent = [p for p in cfg.archive_dir.rglob("*.fits") if p not in old_files]
    assert len(recent) == 8
    expected = sum(p.stat().st_size for p in recent) / 1e6 / (8 * HOUR) * DAY
    # A running writer's chunk of the hour in progress: not an hour file yet, left out.
    w = _write(cfg, 90, T + 8 * HOUR, cadence=cadence, segment="new", chunk_s=600.0, close=False)
    assert w.rows_written == 60

    st = station_status(cfg, now=T + 8 * HOUR + 960)
    disk = st["disk"]
    assert disk["rate_mb_per_day"] == pytest.approx(expected, rel=1e-9)
    assert disk["data_h"] == pytest.approx(8.0)
    # 30-day retention levels this small archive off long before the test machine's disk fills
    assert disk["level_mb"] == pytest.approx(30 * expected) and math.isinf(disk["days_left"])


def test_growth_rate_unknown_with_too_little_recent_data(cfg):
    _write(cfg, int(2 * HOUR / 10.0), T, cadence=10.0, chunk_s=HOUR)
    disk = station_status(cfg, now=T + 2 * HOUR + 60)["disk"]
    assert disk["rate_mb_per_day"] is None and disk["days_left"] is None
    assert disk["data_h"] == pytest.approx(2.0)


def _outlook(free_mb, age_days=2.0, data_h=24.0, mb_per_day=50.0):
    return disk_outlook(free_mb=free_mb, min_free_mb=500.0, day_bytes=mb_per_day * 1e6 * data_h / 24.0,
                        day_data_s=data_h * HOUR, archive_age_days=age_days, retention_days=30.0)


def test_days_left_count_free_space_above_the_pause_threshold():
    # 1000 MB above the 500-MB threshold at 50 MB a day; the archive would still grow
    # 28 days x 50 MB = 1400 MB before retention levels it off: 20 days.
    assert _outlook(1500.0)["days_left"] == pytest.approx(20.0)
    # Half a day of data written at the same speed gives the same rate (MB per day of logging).
    assert _outlook(1500.0, data_h=12.0)["days_left"] == pytest.approx(20.0)
    assert _outlook(400.0)["days_left"] == 0.0                 # below the threshold: pausing now


def test_retention_that_levels_the_archive_off_first_means_no_end():
    assert math.isinf(_outlook(3000.0)["days_left"])           # 2500 MB usable > 1400 MB still to grow
    assert math.isinf(_outlook(600.0, age_days=45.0)["days_left"])   # already older than retention


def test_days_left_unknown_below_six_hours_of_data():
    out = _outlook(1500.0, data_h=5.9)
    assert out["rate_mb_per_day"] is None and out["days_left"] is None


def test_a_damaged_archive_file_is_named_and_the_rest_still_answers(cfg):
    from click.testing import CliRunner

    from rxlog.cli import main

    _write(cfg, 60, T)
    bad = cfg.archive_dir / "2026/12/01/faulty_20261201T23Z.fits"
    bad.write_bytes(b"not FITS at all")
    st = station_status(cfg, now=T + HOUR + 60)
    assert st["last_archived"] is None and str(bad) in st["archive_error"]
    r = CliRunner().invoke(main, ["status", "--config", str(cfg.path)])
    assert r.exit_code == 0, r.output
    assert f"last archived spectrum: unknown ({bad}" in r.stdout and "last event: none" in r.stdout
