"""Night selection invariants: a night runs local noon to noon; the default is the latest complete night with data.

Also holds the nights the other report, review and listing tests build on:
``simulated_night`` (the simulator's sky through the archive and the detector) and
``make_night`` (bursts drawn into noise, events put in the store directly: quick, for
tests of the page and the server rather than of detection).
"""

import datetime as dt
from zoneinfo import ZoneInfo

import numpy as np
import pytest

from rxlog.archive.write import ArchiveWriter
from rxlog.errors import RxlogError
from rxlog.review.data import default_night
from rxlog.review.night import night_events, night_of, night_starting, parse_night
from rxlog.spectrum import DynamicSpectrum, channel_grid
from rxlog.station.config import config_from_text
from rxlog.store import EventStore, make_event_id
from rxlog.timeutil import iso

TZ = "America/Toronto"
NIGHT = dt.date(2027, 2, 3)


def station_config(root, tz=TZ, channels=128, cadence_s=1.0):
    return config_from_text(f"""
[station]
name = "testsite"
latitude_deg = 46.083
longitude_deg = -73.412
elevation_m = 310.0
timezone = "{tz}"

[spectra]
fmin_mhz = 16.0
fmax_mhz = 24.0
channels = {channels}
cadence_s = {cadence_s}

[storage]
root = "data"
""", root / "station.toml")


def _event(peak, dur, fmin, fmax, cls, **kw):
    ev = {"event_id": make_event_id("testsite", peak, fmin, fmax), "station": "testsite",
          "start_utc": iso(peak - dur / 2), "end_utc": iso(peak + dur / 2), "peak_utc": iso(peak),
          "fmin_mhz": fmin, "fmax_mhz": fmax, "peak_excess_db": 4.0, "snr": 15.0, "duration_s": dur,
          "bandwidth_mhz": fmax - fmin, "class": cls, "confidence": 0.8, "reason": "synthetic test burst"}
    ev.update(kw)
    return ev


def simulated_night(root, minutes=45, channels=128):
    """A simulated afternoon with solar bursts and a night stretch with a Jovian storm (Io-B),
    archived and run through the detector. Returns (cfg, night, stored events, truth rows)."""
    from rxlog.detect.rerun import detect_range
    from rxlog.sim.spectra import simulate_spectra

    cfg = station_config(root, channels=channels)
    night = night_starting(cfg, NIGHT)
    tz = ZoneInfo(TZ)
    day = dt.datetime.combine(NIGHT, dt.time(15, 30), tzinfo=tz).timestamp()          # Sun up
    late = dt.datetime.combine(NIGHT + dt.timedelta(days=1), dt.time(2, 0), tzinfo=tz).timestamp()  # Jupiter up
    runs = [(day, [{"class": "solar_iii", "t": day + 300, "peak_excess_db": 8.0},
                   {"class": "solar_ii", "t": day + 1200, "peak_excess_db": 5.0},
                   {"class": "solar_iii", "t": day + 2300, "peak_excess_db": 6.0}]),
            (late, [{"class": "jovian_l", "t": late + 300, "peak_excess_db": 6.0, "duration_s": 1200,
                     "region": "Io-B"}])]
    truth = []
    with ArchiveWriter(cfg.archive_dir, cfg["station"], chunk_s=3600.0) as w:
        for k, (start, inject) in enumerate(runs):
            spec, rows = simulate_spectra(cfg, start, minutes / 60.0, seed=11 + k, inject=inject, event_rate=0.0)
            w.write(spec)
            truth += rows
    detect_range(cfg)
    return cfg, night, night_events(cfg, night), truth


def make_night(root, hours=2.0, start_local_hour=21, n_bursts=6, seed=7, channels=128):
    """A night with ``hours`` of archived spectra from ``start_local_hour`` and bursts drawn into them.

    Returns (cfg, night, events). The bursts are added to noise in the archive and the
    matching events are put in the store, as detection would.
    """
    cfg = station_config(root, channels=channels)
    night = night_starting(cfg, NIGHT)
    rng = np.random.default_rng(seed)
    t0 = dt.datetime.combine(NIGHT, dt.time(start_local_hour), tzinfo=ZoneInfo(TZ)).timestamp()
    n = int(hours * 3600)
    freq = channel_grid(16.0, 24.0, channels)
    fmhz = freq / 1e6
    power = rng.normal(0.0, 0.3, (n, channels)).astype(np.float32) + 30.0 - 0.4 * (fmhz - 16.0)
    events = []
    kinds = ["solar_iii", "jovian_l", "rfi", "jovian_l", "solar_ii", "unknown"]
    for k in range(n_bursts):
        i = 30 + int((k + 0.5) * (n - 300) / n_bursts)   # room for the longest burst before the end
        cls = kinds[k % len(kinds)]
        if cls == "solar_iii":         # fast drift through the whole band
            f0, f1, dur = 16.0, 24.0, 8.0
            delay = ((24.0 - fmhz) / 2.5).astype(int)
            for c in range(channels):
                power[i + delay[c]:i + delay[c] + 3, c] += 5.0
        elif cls == "jovian_l":       # minutes-long arc in the low half
            f0, f1, dur = 16.5, 20.0, 240.0
            band = (fmhz >= f0) & (fmhz <= f1)
            power[i:i + int(dur), band] += 3.0 * rng.random((int(dur), band.sum())).astype(np.float32)
        else:                          # narrow or short
            f0, f1, dur = 21.5, 21.9, 30.0
            band = (fmhz >= f0) & (fmhz <= f1)
            power[i:i + int(dur), band] += 6.0
        peak = t0 + i + dur / 2
        extra = {}
        if cls.startswith("jovian"):
            extra = {"cml3_deg": 150.0 + 20 * k, "io_phase_deg": 85.0 + 3 * k, "cml3_start_deg": 148.0 + 20 * k,
                     "cml3_end_deg": 152.0 + 20 * k, "io_phase_start_deg": 85.0 + 3 * k,
                     "io_phase_end_deg": 85.2 + 3 * k, "source_region": "Io-B", "jupiter_alt_deg": 35.0}
        events.append(_event(peak, dur, f0, f1, cls, **extra))
    gap = slice(int(0.3 * n), int(0.3 * n) + 400)      # a 400-s receiver dropout
    power[gap] = np.nan
    flags = np.zeros(power.shape, np.uint8)
    flags[gap] = 2
    with ArchiveWriter(cfg.archive_dir, cfg["station"], chunk_s=3600.0) as w:
        w.write(DynamicSpectrum(power, t0, 1.0, freq, flags, segment="seg-1"))
    store = EventStore(cfg.store_path)
    store.upsert_events(events)
    store.close()
    return cfg, night, night_events(cfg, night)


def test_night_runs_local_noon_to_noon(tmp_path):
    cfg = station_config(tmp_path)
    night = night_starting(cfg, NIGHT)
    tz = ZoneInfo(TZ)
    assert dt.datetime.fromtimestamp(night.t0, tz) == dt.datetime(2027, 2, 3, 12, tzinfo=tz)
    assert dt.datetime.fromtimestamp(night.t1, tz) == dt.datetime(2027, 2, 4, 12, tzinfo=tz)
    assert night.name == "2027-02-03"
    # An instant just before noon belongs to the previous night, at noon to the new one.
    assert night_of(cfg, night.t0 - 1).date == dt.date(2027, 2, 2)
    assert night_of(cfg, night.t0).date == NIGHT
    assert night_of(cfg, night.t1 - 1).date == NIGHT


def test_night_across_clock_changes_is_23_or_25_hours(tmp_path):
    cfg = station_config(tmp_path)
    # US clocks go forward on 2027-03-14 and back on 2027-11-07 at 02:00 local.
    spring = night_starting(cfg, dt.date(2027, 3, 13))
    autumn = night_starting(cfg, dt.date(2027, 11, 6))
    assert spring.t1 - spring.t0 == 23 * 3600
    assert autumn.t1 - autumn.t0 == 25 * 3600


def test_bad_night_text_names_the_expected_form(tmp_path):
    cfg = station_config(tmp_path)
    with pytest.raises(RxlogError, match="YYYY-MM-DD"):
        parse_night(cfg, "03/02/2027")


def test_default_night_without_data_says_so(tmp_path):
    cfg = station_config(tmp_path)
    with pytest.raises(RxlogError, match="no data yet"):
        default_night(cfg)


def _store_event_at(cfg, t):
    store = EventStore(cfg.store_path)
    store.upsert_events([_event(t, 10.0, 18.0, 20.0, "solar_iii")])
    store.close()


def test_default_night_is_the_latest_complete_one(tmp_path):
    cfg = station_config(tmp_path)
    n1 = night_starting(cfg, NIGHT)
    n2 = night_starting(cfg, NIGHT + dt.timedelta(days=1))
    _store_event_at(cfg, n1.t0 + 10 * 3600)
    _store_event_at(cfg, n2.t0 + 10 * 3600)   # data still coming in on the second night
    # Wall clock inside the second night: the first one is the latest complete night.
    assert default_night(cfg, now=n2.t0 + 20 * 3600).date == n1.date
    # Once the second night's closing noon has passed, it is the one.
    assert default_night(cfg, now=n2.t1 + 60).date == n2.date


def test_default_night_with_future_data_takes_the_latest_data(tmp_path):
    # Demo nights may lie in the future: then the night holding the latest data is used.
    cfg = station_config(tmp_path)
    n = night_starting(cfg, NIGHT)
    _store_event_at(cfg, n.t0 + 10 * 3600)
    assert default_night(cfg, now=n.t0 - 400 * 86400).date == n.date


def test_default_night_sees_archived_spectra(tmp_path):
    cfg, night, events = make_night(tmp_path, hours=0.2, n_bursts=0)
    assert events == []
    assert default_night(cfg, now=night.t1 + 3600).date == night.date
