"""Files meant for partners and people (exports, VOEvents, calendars, comparison outputs)
get the usual mode for the user's umask, written crash-safely: a failed write leaves the
old file and no temporary file behind."""

import os
import stat

import pytest
from exchange_helpers import T0, event, list_header, station_config

from rxlog.errors import RxlogError
from rxlog.exchange.compare import compare_stations
from rxlog.exchange.export import export_events, write_event_list
from rxlog.exchange.voevent import write_voevents
from rxlog.fileio import write_atomic
from rxlog.sky.forecast import forecast_windows, write_ics
from rxlog.store import EventStore


@pytest.fixture
def umask_022():
    old = os.umask(0o022)
    yield
    os.umask(old)


def _mode(p):
    return stat.S_IMODE(os.stat(p).st_mode)


def test_exports_notices_calendars_and_comparisons_are_0644_under_umask_022(tmp_path, umask_022):
    cfg = station_config(tmp_path)
    store = EventStore(cfg.store_path)
    ev = event("st-a", T0 + 100)
    store.upsert_events([ev])
    store.close()
    assert export_events(cfg, tmp_path / "out.csv", "csv") == 1
    written = [tmp_path / "out.csv"]
    written += write_voevents(cfg, tmp_path / "notices", [ev["event_id"]])
    station = {"name": "st-a", "latitude_deg": 47.5, "longitude_deg": 8.7, "elevation_m": 450.0,
               "timezone": "UTC"}
    windows = forecast_windows({"station": station}, T0, 2)
    assert windows
    written.append(write_ics(windows, tmp_path / "f.ics", station))
    b = tmp_path / "b.csv"
    write_event_list(b, "csv", list_header("st-b"), [event("st-b", T0 + 100.5)])
    result = compare_stations([tmp_path / "out.csv", b], outdir=tmp_path / "cmp")
    written += [p for p in (tmp_path / "cmp").iterdir()]
    assert result.rows
    for p in written:
        assert _mode(p) == 0o644, p


def test_the_mode_follows_the_umask(tmp_path):
    old = os.umask(0o027)
    try:
        p = write_atomic(tmp_path / "x.txt", "hello")
    finally:
        os.umask(old)
    assert _mode(p) == 0o640 and p.read_text() == "hello"


def test_a_failed_write_leaves_the_old_file_and_no_temporary(tmp_path):
    target = tmp_path / "keep.txt"
    target.write_text("old")

    def broken(fh):
        fh.write(b"half")
        raise OSError(28, "No space left on device")

    with pytest.raises(RxlogError, match="keep.txt"):
        write_atomic(target, broken)
    assert target.read_text() == "old"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["keep.txt"]
