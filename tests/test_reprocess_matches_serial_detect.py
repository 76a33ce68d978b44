"""``rxlog reprocess`` on Dask: the store it leaves is the one `rxlog detect` over each day
in turn leaves, with 1 or 2 workers; a killed run resumes where it stopped; a day with a
damaged archive file is reported and skipped while the others are written."""

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
from click.testing import CliRunner
from season_helpers import END, START, make_archive, station_copy, store_rows

from rxlog.cli import main
from rxlog.detect.rerun import detect_range
from rxlog.season.reprocess import DAY_S, load_state, plan_days, reprocess
from rxlog.store import EventStore
from rxlog.timeutil import iso


@pytest.fixture(scope="module")
def template(tmp_path_factory):
    return make_archive(tmp_path_factory.mktemp("season-archive"))


def _label_one(cfg):
    """A reviewer's label on the first non-rfi event, as the morning review gives it."""
    store = EventStore(cfg.store_path)
    try:
        ev = next(e for e in store.events() if e["class"] != "rfi")
        store.add_label(ev["event_id"], "jovian_l", note="arc", who="keeper")
    finally:
        store.close()


def _serial(template, where):
    """`rxlog detect` over each day of the range in turn, after a first detection and a label."""
    cfg = station_copy(template, where)
    detect_range(cfg, START, END)
    _label_one(cfg)
    for a, b in plan_days(START, END):
        detect_range(cfg, a, b)
    return store_rows(cfg)


@pytest.mark.parametrize("workers", [1, 2])
def test_parallel_reprocess_leaves_the_store_serial_detect_leaves(template, tmp_path, workers):
    serial = _serial(template, tmp_path / "serial")
    assert serial["events"] and serial["quality"] and serial["labels"]
    cfg = station_copy(template, tmp_path / "parallel")
    detect_range(cfg, START, END)
    _label_one(cfg)
    reports = reprocess(cfg, START, END, workers=workers)
    assert [r.error for r in reports] == [None, None, None]
    assert [r.t0 for r in reports] == [START, START + DAY_S, START + 2 * DAY_S]
    assert store_rows(cfg) == serial


def test_killed_reprocess_restarts_where_it_stopped(template, tmp_path):
    serial = _serial(template, tmp_path / "serial")
    cfg = station_copy(template, tmp_path / "killed")
    detect_range(cfg, START, END)
    _label_one(cfg)
    args = [sys.executable, "-m", "rxlog", "reprocess", "--config", str(cfg.path), "--start", iso(START),
            "--end", iso(END), "--workers", "1"]
    env = {**os.environ, "PYTHONPATH": str(Path(__file__).parents[1]) + os.pathsep + os.environ.get("PYTHONPATH", "")}
    proc = subprocess.Popen(args, stderr=subprocess.PIPE, text=True, env=env, start_new_session=True)
    try:
        deadline = time.monotonic() + 300
        for line in proc.stderr:
            if "1/3 days done" in line or time.monotonic() > deadline:
                break
    finally:
        os.killpg(proc.pid, signal.SIGKILL)     # the command and its Dask workers, at once
        proc.wait()
    done = load_state(cfg)["done"]
    assert 1 <= len(done) < 3
    r = CliRunner().invoke(main, ["reprocess", "--config", str(cfg.path), "--start", iso(START), "--end", iso(END),
                                  "--workers", "1"])
    assert r.exit_code == 0, r.output
    assert f"{len(done)} kept from an earlier run" in r.output
    assert store_rows(cfg) == serial


def test_a_damaged_day_is_reported_and_skipped_and_the_rest_go_on(template, tmp_path):
    serial = _serial(template, tmp_path / "serial")
    cfg = station_copy(template, tmp_path / "damaged")
    detect_range(cfg, START, END)
    _label_one(cfg)
    damaged = next(p for p in sorted(cfg.archive_dir.rglob("*.fits")) if "20261203" in p.name.replace("-", ""))
    data = damaged.read_bytes()
    damaged.write_bytes(data[:len(data) // 2])          # cut short, as a full disk leaves it
    r = CliRunner().invoke(main, ["reprocess", "--config", str(cfg.path), "--start", iso(START), "--end", iso(END),
                                  "--workers", "2"])
    assert r.exit_code == 2
    assert "skipped" in r.output and damaged.name in r.output and "Traceback" not in r.output
    assert "2 days re-detected" in r.output and "1 skipped" in r.output
    got = store_rows(cfg)
    cut = iso(START + 2 * DAY_S)
    assert [e for e in got["events"] if e["peak_utc"] < cut] == [e for e in serial["events"] if e["peak_utc"] < cut]
    assert sorted(load_state(cfg)["done"]) == [iso(START), iso(START + DAY_S)]
