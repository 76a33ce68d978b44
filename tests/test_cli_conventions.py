"""One name for one meaning on the command line: --out PATH for what a command writes,
frequencies in MHz with the unit in the option's name, times read one way everywhere
(ISO 8601 with a zone, 'now', or a date meaning the station's night); the older
spellings still work for a while, each with one line on stderr giving the new one."""

import datetime as dt
import time
import zoneinfo

import click
import numpy as np
import pytest
from click.testing import CliRunner
from test_cli_help import all_commands
from test_receiver_ingest import RATE, station, tone_cu8

from rxlog.archive.read import read_archive
from rxlog.cli import main
from rxlog.cli.base import UserError, parse_time_option
from rxlog.timeutil import parse_iso


def visible_options():
    for path in all_commands(main):
        cmd = main
        for name in path:
            cmd = cmd.commands[name]
        for p in cmd.params:
            if isinstance(p, click.Option) and not p.hidden:
                yield " ".join(path), p


def test_outputs_are_out_frequencies_are_mhz_times_read_one_way():
    outs = set()
    for cmd, p in visible_options():
        names = set(p.opts)
        assert not names & {"-o", "--output", "--outdir", "--out-dir"}, (cmd, p.opts)
        if "--out" in names:
            outs.add(cmd)
        if p.metavar in ("HZ", "MHZ") or any(w in p.name for w in ("center", "centre", "freq")):
            assert p.opts[-1].endswith("-mhz") and p.metavar == "MHZ", (cmd, p.opts)
        if names & {"--start", "--end"}:
            assert p.metavar == "TIME", (cmd, p.opts)
        if "--start" in names:
            assert "'now'" in p.help and "Z" in p.help, (cmd, p.help)
    assert {"demo", "service", "simulate", "export", "compare"} <= outs


CFG = {"station": {"timezone": "Australia/Sydney"}}


def test_a_time_is_iso_with_a_zone_now_or_the_nights_date():
    assert parse_time_option("2026-12-01T10:00:00Z", "--start", CFG) == parse_iso("2026-12-01T10:00:00Z")
    assert parse_time_option("2026-12-01T21:00+11:00", "--start", CFG) == parse_iso("2026-12-01T10:00Z")
    before = time.time()
    assert before - 1.0 <= parse_time_option("now", "--start", CFG) <= time.time()
    # a date is local noon at the station, when the night of that date begins
    noon = dt.datetime(2026, 12, 1, 12, tzinfo=zoneinfo.ZoneInfo("Australia/Sydney")).timestamp()
    assert parse_time_option("2026-12-01", "--start", CFG) == noon
    assert parse_time_option(None, "--end", CFG) is None
    with pytest.raises(UserError, match="--end: not an ISO 8601 time, 'now' or a date: 'soon'"):
        parse_time_option("soon", "--end", CFG)


def test_a_time_without_a_zone_is_read_as_utc_with_a_notice(tmp_path):
    cfg = tmp_path / "st.toml"
    cfg.write_text("[station]\nname = 'n'\nlatitude_deg = 47.5\nlongitude_deg = 8.7\ntimezone = 'Europe/Zurich'\n")
    args = ["ephem", "--config", str(cfg), "--format", "json", "--start"]
    naive = CliRunner().invoke(main, args + ["2026-12-01T10:00"])
    zoned = CliRunner().invoke(main, args + ["2026-12-01T10:00Z"])
    assert naive.exit_code == 0 and naive.stdout == zoned.stdout
    assert naive.stderr.strip().splitlines() == [
        "rxlog: --start 2026-12-01T10:00: no zone given, read as UTC; write 2026-12-01T10:00Z "
        "(or an offset such as +01:00)"]
    assert zoned.stderr == ""


def test_ingest_takes_mhz_and_still_reads_the_older_hz_spellings(tmp_path):
    path = tmp_path / "dongle.cu8"
    tone_cu8(2.0, -400e3, seed=1).tofile(path)
    t0 = parse_iso("2026-12-01T23:00:00Z")
    spectra = {}
    for name, freq in (("new", ["--rate-msps", str(RATE / 1e6), "--center-mhz", "21"]),
                       ("old", ["--rate", str(RATE), "--center", "21e6"])):
        cfg = station(tmp_path / name)
        r = CliRunner().invoke(main, ["ingest", "--config", str(cfg.path), str(path), "--format", "cu8", *freq,
                                      "--start", "2026-12-01T23:00:00Z"])
        assert r.exit_code == 0, r.output
        notices = [line for line in r.stderr.splitlines() if line.startswith("rxlog:")]   # not the progress bar
        spectra[name] = (read_archive(cfg.archive_dir, t0, t0 + 10).segments[0], notices)
    new, old = spectra["new"][0], spectra["old"][0]
    assert np.array_equal(new.freq_hz, old.freq_hz) and np.array_equal(new.power_db, old.power_db, equal_nan=True)
    assert spectra["new"][1] == []
    assert sorted(spectra["old"][1]) == [
        "rxlog: --center (Hz) is now spelled --center-mhz 21; the old spelling will go away",
        "rxlog: --rate (samples/s) is now spelled --rate-msps 2.4; the old spelling will go away"]


def test_giving_both_spellings_is_an_error(tmp_path):
    cfg = station(tmp_path)
    r = CliRunner().invoke(main, ["ingest", "--config", str(cfg.path), str(tmp_path / "x.cu8"), "--format", "cu8",
                                  "--center", "21e6", "--center-mhz", "21"])
    assert r.exit_code == 2 and "give only --center-mhz" in r.output
