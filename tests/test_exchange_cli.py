"""`rxlog export` and `rxlog compare` from the command line: files written, summary printed,
bad input a short message with exit status 2."""

import numpy as np
from click.testing import CliRunner
from exchange_helpers import T0, event, list_header, sky, station_config, station_list

from rxlog.cli import main
from rxlog.exchange.export import write_event_list
from rxlog.store import EventStore


def make_store(tmp_path):
    cfg = station_config(tmp_path)
    store = EventStore(cfg.store_path)
    store.upsert_events([event("st-a", T0 + 100), event("st-a", T0 + 900, cls="rfi"),
                         event("st-a", T0 + 4000, cls="jovian_l")])
    store.close()
    return cfg


def test_export_formats_and_voevents(tmp_path, monkeypatch):
    cfg = make_store(tmp_path)
    run = CliRunner().invoke
    r = run(main, ["export", "--config", str(cfg.path), "--format", "votable", "--out", str(tmp_path / "a.vot"),
                   "--end", "2027-01-15T09:00:00Z"])
    assert r.exit_code == 0, r.output
    assert "wrote 1 events" in r.output and (tmp_path / "a.vot").exists() and r.stderr == ""
    monkeypatch.chdir(tmp_path)
    r = run(main, ["export", "--config", str(cfg.path), "--include-rfi"])
    assert r.exit_code == 0 and (tmp_path / "st-a-events.csv").exists() and "wrote 3 events" in r.output
    ev_id = event("st-a", T0 + 100)["event_id"]
    r = run(main, ["export", "--config", str(cfg.path), "--voevent", str(tmp_path / "n"), ev_id])
    assert r.exit_code == 0, r.output
    assert (tmp_path / "n" / f"{ev_id}.xml").exists()


def test_export_still_takes_the_older_output_spellings_with_a_notice(tmp_path):
    cfg = make_store(tmp_path)
    new = tmp_path / "new.csv"
    r = CliRunner().invoke(main, ["export", "--config", str(cfg.path), "--out", str(new)])
    assert r.exit_code == 0 and r.stderr == "", r.output
    for old in ("-o", "--output"):
        path = tmp_path / f"old{old}.csv"
        r = CliRunner().invoke(main, ["export", "--config", str(cfg.path), old, str(path)])
        assert r.exit_code == 0, r.output
        assert r.stderr.splitlines() == ["rxlog: -o/--output is now spelled --out; the old spelling will go away"]
        rows = lambda p: [x for x in p.read_text().splitlines() if not x.startswith("# exported_utc")]  # noqa: E731
        assert rows(path) == rows(new) and any(x.startswith("st-a,") for x in rows(new))
    r = CliRunner().invoke(main, ["export", "--config", str(cfg.path), "-o", str(new), "--out", str(new)])
    assert r.exit_code == 2 and "give only --out" in r.output


def test_export_mistakes_are_short_errors(tmp_path):
    cfg = make_store(tmp_path)
    run = CliRunner().invoke
    for args, msg in ((["--voevent", str(tmp_path / "n")], "needs one or more EVENT_IDs"),
                      (["some-id"], "only for --voevent"),
                      (["--start", "soon"], "--start: not an ISO 8601 time"),
                      (["--voevent", str(tmp_path / "n"), "nope"], "no event 'nope'")):
        r = run(main, ["export", "--config", str(cfg.path)] + args)
        assert r.exit_code == 2 and msg in r.output, (args, r.output)
        assert "Traceback" not in r.output


def test_compare_prints_offsets_and_writes_outputs(tmp_path):
    rng = np.random.default_rng(8)
    s = sky(rng, days=1.0, n3=20, nl=20, n2=0)
    paths = []
    for name, off, fmt in (("st-a", 0.0, "csv"), ("st-b", 2.0, "json")):
        el = station_list(rng, name, s, off, days=1.0, n_rfi=10)
        paths.append(str(write_event_list(tmp_path / f"{name}.{fmt}", fmt, list_header(name), el.events)))
    out = tmp_path / "cmp"
    r = CliRunner().invoke(main, ["compare", *paths, "--window", "8", "--out", str(out)])
    assert r.exit_code == 0, r.output
    lines = [l for l in r.output.splitlines() if l.strip().startswith(("st-a:", "st-b:"))]
    assert len(lines) == 2 and all("offset" in l and "±" in l for l in lines)
    assert (out / "timeline.png").exists() and (out / "matched_events.csv").exists()


def test_compare_bad_input_is_a_short_error(tmp_path):
    bad = tmp_path / "bad.csv"
    bad.write_bytes(b"\x00\x01garbage")
    good = tmp_path / "good.csv"
    write_event_list(good, "csv", list_header("st-a"), [event("st-a", T0)])
    for args, msg in (([str(good), str(bad)], "binary data"),
                      ([str(good)], "at least two stations"),
                      ([str(good), str(good), "--spectra", "nonsense"], "expected STATION=PATH")):
        r = CliRunner().invoke(main, ["compare", *args])
        assert r.exit_code == 2 and msg in r.output, r.output
        assert "Traceback" not in r.output
