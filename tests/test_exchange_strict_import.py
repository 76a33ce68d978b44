"""Imports are strict and safe: each bad row is reported with file and line and skipped, a file
with nothing usable is refused, unknown columns draw one notice, nothing is evaluated, and XML
with a DOCTYPE or entities is refused before any XML library expands it."""

import io
import json
import pickle
import tempfile
from pathlib import Path

import pytest
from exchange_helpers import T0, event, list_header
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from rxlog.errors import RxlogError
from rxlog.exchange.columns import COLUMN_NAMES
from rxlog.exchange.export import write_event_list
from rxlog.exchange.importer import read_event_list

GOOD = [event("st-a", T0 + 100 * i, cls="solar_iii") for i in range(5)]


def csv_file(tmp_path, text, name="list.csv"):
    p = tmp_path / name
    p.write_bytes(text.encode("utf-8") if isinstance(text, str) else text)
    return p


def good_csv(tmp_path, events=GOOD) -> Path:
    return write_event_list(tmp_path / "good.csv", "csv", list_header("st-a"), events)


def lines_of(path):
    return path.read_text().splitlines()


def one_or_two_lines(msg: str) -> bool:
    return msg.count("\n") <= 1


def test_missing_required_column_refuses_the_file_naming_the_line(tmp_path):
    lines = lines_of(good_csv(tmp_path))
    n = next(i for i, l in enumerate(lines) if l.startswith("station,"))
    lines[n] = lines[n].replace("peak_utc", "peak_time")
    p = csv_file(tmp_path, "\n".join(lines) + "\n")
    with pytest.raises(RxlogError) as e:
        read_event_list(p)
    assert f"{p}:{n + 1}: missing required column(s) peak_utc" in str(e.value)
    assert one_or_two_lines(str(e.value))


def test_unparsable_time_and_wrong_row_length_skip_the_row_with_file_and_line(tmp_path):
    lines = lines_of(good_csv(tmp_path))
    first = next(i for i, l in enumerate(lines) if l.startswith("st-a,"))
    cells = lines[first + 1].split(",")
    cells[2] = "yesterday evening"            # start_utc
    lines[first + 1] = ",".join(cells)
    lines[first + 3] = lines[first + 3] + ",extra"
    p = csv_file(tmp_path, "\n".join(lines) + "\n")
    el = read_event_list(p)
    assert len(el.events) == 3
    assert any(n.startswith(f"{p}:{first + 2}: start_utc: not an ISO 8601 UTC time") and "row skipped" in n
               for n in el.notices), el.notices
    assert any(n.startswith(f"{p}:{first + 4}: {len(COLUMN_NAMES) + 1} fields, expected {len(COLUMN_NAMES)}")
               for n in el.notices), el.notices


def test_unknown_columns_are_ignored_with_one_notice(tmp_path):
    rows = [dict(e, colour="red", antenna_gain=3) for e in GOOD]
    text = "station,event_id,start_utc,end_utc,peak_utc,fmin_mhz,fmax_mhz,class,colour,antenna_gain\n" + "".join(
        f"st-a,{e['event_id']},{e['start_utc']},{e['end_utc']},{e['peak_utc']},18.0,22.0,solar_iii,red,3\n"
        for e in rows)
    el = read_event_list(csv_file(tmp_path, text))
    assert len(el.events) == 5
    unknown = [n for n in el.notices if "unknown column" in n]
    assert len(unknown) == 1 and "colour" in unknown[0] and "antenna_gain" in unknown[0]
    assert all("colour" not in e for e in el.events)
    assert el.station["station"] == "st-a"  # no header: the station column names the station


def test_duplicate_ids_keep_the_first(tmp_path):
    lines = lines_of(good_csv(tmp_path))
    first = next(i for i, l in enumerate(lines) if l.startswith("st-a,"))
    lines.append(lines[first])
    p = csv_file(tmp_path, "\n".join(lines) + "\n")
    el = read_event_list(p)
    assert len(el.events) == 5
    assert any(f"{p}:{len(lines)}: duplicate event_id" in n and f"first at {first + 1}" in n for n in el.notices)


def test_truncated_file_keeps_the_whole_rows_and_says_so(tmp_path):
    data = good_csv(tmp_path).read_bytes()
    p = csv_file(tmp_path, data[: len(data) - 40])
    el = read_event_list(p)
    assert len(el.events) == 4
    assert any("row skipped" in n for n in el.notices)
    # The last row is cut short, so it has the wrong number of fields or a bad value.
    assert any(n.startswith(f"{p}:") and "row skipped" in n for n in el.notices)


def test_truncated_json_is_refused_with_its_line(tmp_path):
    data = write_event_list(tmp_path / "a.json", "json", list_header("st-a"), GOOD).read_bytes()
    p = csv_file(tmp_path, data[: len(data) // 2], "cut.json")
    with pytest.raises(RxlogError, match=r"cut\.json:\d+: not valid JSON"):
        read_event_list(p)


def test_a_header_count_that_does_not_match_is_reported(tmp_path):
    p = good_csv(tmp_path)
    lines = [l for l in lines_of(p)][:-2]
    p.write_text("\n".join(lines) + "\n")
    el = read_event_list(p)
    assert any("header says 5 events but the file holds 3 rows (truncated or edited?)" in n for n in el.notices)


def test_wrong_types_in_json_rows_are_skipped_with_their_index(tmp_path):
    doc = json.loads(write_event_list(tmp_path / "a.json", "json", list_header("st-a"), GOOD).read_text())
    doc["events"][0]["fmin_mhz"] = "low"
    doc["events"][1]["class"] = 5
    doc["events"][2]["start_utc"] = 1800000000
    doc["events"][3] = ["not", "an", "object"]
    p = csv_file(tmp_path, json.dumps(doc), "typed.json")
    el = read_event_list(p)
    assert [e["event_id"] for e in el.events] == [GOOD[4]["event_id"]]
    text = "\n".join(el.notices)
    assert f"{p}:events[0]: fmin_mhz: expected a number, got 'low'" in text
    assert f"{p}:events[1]: class: expected text, got 5" in text
    assert f"{p}:events[2]: start_utc: expected text" in text
    assert f"{p}:events[3]: expected an object" in text


def test_values_out_of_their_domain_are_skipped(tmp_path):
    bad = [dict(GOOD[0], event_id="a", **{"class": "ufo"}), dict(GOOD[1], event_id="b", label="maybe"),
           dict(GOOD[2], event_id="c", fmin_mhz=25.0), dict(GOOD[3], event_id="d", end_utc=GOOD[3]["start_utc"]),
           dict(GOOD[4], event_id="e", confidence=1.5)]
    p = tmp_path / "bad.json"
    p.write_text(json.dumps({"header": list_header("st-a"), "events": bad + [dict(GOOD[0])]}))
    el = read_event_list(p)
    assert len(el.events) == 1
    text = "\n".join(el.notices)
    for what in ("unknown class 'ufo'", "unknown label 'maybe'", "expected 0 < fmin <= fmax",
                 "peak_utc", "confidence 1.5"):
        assert what in text, what


def test_times_outside_the_receiver_era_and_numbers_outside_their_range_skip_the_row(tmp_path):
    bad = [dict(GOOD[0], event_id="old", start_utc="1000-01-01T00:00:00.000Z"),
           dict(GOOD[1], event_id="far", end_utc="2999-01-01T00:00:00.000Z"),
           dict(GOOD[2], event_id="hf", fmax_mhz=1e30),
           dict(GOOD[3], event_id="cml", cml3_deg=400.0),
           dict(GOOD[4], event_id="alt", sun_alt_deg=-95.0)]
    p = tmp_path / "absurd.json"
    p.write_text(json.dumps({"header": list_header("st-a"), "events": bad + [dict(GOOD[0])]}))
    el = read_event_list(p)
    assert [e["event_id"] for e in el.events] == [GOOD[0]["event_id"]]
    text = "\n".join(el.notices)
    for what in ("events[0]: start_utc 1000-01-01T00:00:00.000Z: outside the receiver era, 1990-01-01 to",
                 "events[1]: end_utc 2999-01-01T00:00:00.000Z: outside the receiver era",
                 "events[2]: fmax_mhz 1e+30: expected 1 to 60", "events[3]: cml3_deg 400: expected 0 to 360",
                 "events[4]: sun_alt_deg -95: expected -90 to 90"):
        assert what in text, (what, text)


def test_header_values_out_of_range_are_ignored_with_a_notice(tmp_path):
    header = dict(list_header("st-a"), latitude_deg=123.0, cadence_s=1e-9, exported_utc="1900-01-01T00:00:00.000Z")
    p = write_event_list(tmp_path / "h.csv", "csv", header, GOOD)
    el = read_event_list(p)
    assert len(el.events) == 5
    assert not {"latitude_deg", "cadence_s", "exported_utc"} & set(el.station)
    text = "\n".join(el.notices)
    for what in ("header latitude_deg: 123 is out of range, expected -90 to 90; ignored",
                 "header cadence_s: 1e-09 is out of range", "header exported_utc: 1900-01-01T00:00:00.000Z: "):
        assert what in text, (what, text)


def test_nothing_usable_refuses_the_file_with_the_first_problems(tmp_path):
    p = tmp_path / "junk.csv"
    p.write_text("station,event_id,start_utc,end_utc,peak_utc,fmin_mhz,fmax_mhz,class\n"
                 + "st-a,x,never,never,never,a,b,solar_iii\n" * 3)
    with pytest.raises(RxlogError) as e:
        read_event_list(p)
    msg = str(e.value)
    assert msg.startswith(f"{p}: no usable events (3 rows, 3 skipped)") and f"{p}:2: start_utc" in msg


@pytest.mark.parametrize("content, message", [
    (b"", "empty file"),
    (b"\x00\x01\x02binary\x00", "binary data"),
    (bytes(range(128, 256)) * 10, "not UTF-8 text"),
    (pickle.dumps({"events": []}), "binary data"),
    (b"# rxlog event list\n# station: st-a\n", "no column row found"),
    (b"<VOTABLE><RESOURCE>", "not well-formed XML"),
    (b"{\"events\": 3}", "JSON without an \"events\" list"),
    (b"[" * 100000, "JSON"),
])
def test_garbage_gives_a_clear_one_line_error(tmp_path, content, message):
    p = tmp_path / "in.dat"
    p.write_bytes(content)
    with pytest.raises(RxlogError) as e:
        read_event_list(p)
    assert message in str(e.value) and str(p) in str(e.value) and one_or_two_lines(str(e.value))


def test_a_garbage_line_inside_a_good_file_is_skipped(tmp_path):
    lines = good_csv(tmp_path).read_bytes().split(b"\n")
    lines.insert(len(lines) - 3, b"\xff\xfe\x00garbage\x9c")
    p = csv_file(tmp_path, b"\n".join(lines))
    el = read_event_list(p)
    assert len(el.events) == 5 and any("not UTF-8 text" in n for n in el.notices)


def test_a_huge_line_is_skipped_without_reading_it_as_a_row(tmp_path):
    lines = good_csv(tmp_path).read_bytes().split(b"\n")
    lines.insert(len(lines) - 2, b"st-a," + b"9" * 5_000_000)
    p = csv_file(tmp_path, b"\n".join(lines))
    el = read_event_list(p)
    assert len(el.events) == 5 and any("is longer than" in n for n in el.notices)


def test_cells_are_never_evaluated(tmp_path):
    marker = tmp_path / "evaluated"
    payload = f"__import__('pathlib').Path({str(marker)!r}).touch()"
    rows = [dict(GOOD[0], fmin_mhz=payload), dict(GOOD[1], source_region=payload)]
    p = tmp_path / "x.json"
    p.write_text(json.dumps({"events": rows}))
    el = read_event_list(p)
    assert not marker.exists()
    assert len(el.events) == 1 and el.events[0]["source_region"] == payload  # kept as plain text


def test_newer_format_version_is_read_with_a_notice(tmp_path):
    p = good_csv(tmp_path)
    p.write_text(p.read_text().replace("# format_version: 1", "# format_version: 7"))
    el = read_event_list(p)
    assert len(el.events) == 5 and any("format_version 7 is newer" in n for n in el.notices)


def test_rows_of_another_station_or_of_none_are_skipped(tmp_path):
    other = dict(GOOD[1], station="st-b", event_id="other")
    p = write_event_list(tmp_path / "mixed.csv", "csv", list_header("st-a"), [GOOD[0], other])
    el = read_event_list(p)
    assert len(el.events) == 1 and any("differs from the file's station 'st-a'" in n for n in el.notices)
    nameless = tmp_path / "nameless.json"
    nameless.write_text(json.dumps({"events": [dict(GOOD[0], station=None)]}))
    with pytest.raises(RxlogError, match="no station header"):
        read_event_list(nameless)


# -- XML safety --------------------------------------------------------------------------

def votable_with(tmp_path, prolog: str, cell: str = "x") -> Path:
    data = write_event_list(tmp_path / "ok.vot", "votable", list_header("st-a"), GOOD[:1]).read_text()
    head, rest = data.split("\n", 1)
    rest = rest.replace(f"<TD>{GOOD[0]['event_id']}</TD>", f"<TD>{cell}</TD>", 1)
    p = tmp_path / "evil.vot"
    p.write_text(head + "\n" + prolog + rest)
    return p


def test_external_entities_are_refused(tmp_path):
    secret = tmp_path / "secret.txt"
    secret.write_text("do-not-leak")
    p = votable_with(tmp_path, f'<!DOCTYPE VOTABLE [<!ENTITY xxe SYSTEM "file://{secret}">]>\n', "&xxe;")
    with pytest.raises(RxlogError, match="DOCTYPE or entity declarations is refused") as e:
        read_event_list(p)
    assert "do-not-leak" not in str(e.value)


def test_entity_expansion_bombs_are_refused(tmp_path):
    decl = '<!ENTITY a "aaaaaaaaaa">' + "".join(
        f'<!ENTITY {chr(98 + i)} "{("&" + chr(97 + i) + ";") * 10}">' for i in range(8))
    p = votable_with(tmp_path, f"<!DOCTYPE VOTABLE [{decl}]>\n", "&i;")
    with pytest.raises(RxlogError, match="refused"):
        read_event_list(p)


def test_votable_without_required_fields_is_refused(tmp_path):
    p = votable_with(tmp_path, "")
    p.write_text(p.read_text().replace('name="peak_utc"', 'name="peak_time"'))
    with pytest.raises(RxlogError, match="without required column"):
        read_event_list(p)


# -- property-based ------------------------------------------------------------------------

cell = st.one_of(st.text(max_size=30), st.sampled_from(["", "nan", "inf", "-0", "1e999", "2027-01-15T08:00:00Z",
                                                         "solar_iii", "st-a", '"', ",", "\r"]))


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.lists(st.lists(cell, min_size=0, max_size=len(COLUMN_NAMES) + 2), min_size=1, max_size=8))
def test_random_rows_never_crash_the_csv_importer(rows):
    import csv

    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(COLUMN_NAMES)
    w.writerows(rows)
    with tempfile.TemporaryDirectory() as d:
        p = Path(d) / "random.csv"
        p.write_bytes(buf.getvalue().encode("utf-8", errors="replace"))
        try:
            el = read_event_list(p)
        except RxlogError as e:
            assert str(p) in str(e)
            return
        for ev in el.events:
            assert set(ev) == set(COLUMN_NAMES) and ev["class"] and ev["start_utc"] <= ev["end_utc"]
        assert all(str(p) in n for n in el.notices)


finite = st.floats(min_value=-1e6, max_value=1e6, allow_nan=False, allow_infinity=False)


@settings(max_examples=60, deadline=None)
@given(st.lists(st.tuples(st.floats(min_value=0, max_value=2.5e7), st.floats(min_value=0, max_value=1e4),
                          st.floats(min_value=1, max_value=50), st.floats(min_value=0, max_value=10),
                          st.sampled_from(["solar_iii", "jovian_l", "rfi", "unknown"]),
                          st.one_of(st.none(), finite), st.one_of(st.none(), st.text(max_size=20))),
                min_size=1, max_size=10))
def test_valid_random_events_read_back_unchanged(rows):
    events = []
    for i, (t, dur, fmin, bw, cls, drift, region) in enumerate(rows):
        e = event("st-a", T0 + t + dur / 2, fmin=fmin, fmax=fmin + bw, cls=cls, dur=dur, drift_mhz_s=drift,
                  source_region=" ".join(region.split()) or None if region else None)
        e["event_id"] = f"ev-{i}"
        events.append(e)
    with tempfile.TemporaryDirectory() as d:
        p = write_event_list(Path(d) / "v.csv", "csv", list_header("st-a"), events)
        el = read_event_list(p)
    assert el.notices == []
    assert el.events == [{k: e[k] for k in COLUMN_NAMES} for e in events]
