"""Property: whatever a config, SigMF metadata, raw-recording description, FITS header or
partner list holds, its reader raises nothing but rxlog's own errors (ConfigError,
RxlogError), and when it refuses, every file under the storage root is byte for byte as
before. What it accepts lies within rxlog.validate's limits.

Generated inputs mix plausible values with absurd ones (NaN, infinities, huge and tiny
numbers, wrong types, broken dates, cut-short data), so the checks behind the plausible
values are reached too.
"""

import gzip
import json
import math
import string
import tempfile
from pathlib import Path

import hostile_inputs as H
import numpy as np
import pytest
from archive_helpers import T_NIGHT
from hypothesis import HealthCheck, event, given, settings
from hypothesis import strategies as st

from rxlog import validate
from rxlog.archive.ingest import ingest_fits, ingest_recording
from rxlog.archive.read import read_spectrum_fits
from rxlog.errors import RxlogError
from rxlog.exchange.columns import COLUMN_NAMES, HEADER
from rxlog.exchange.importer import read_event_list
from rxlog.receive.channelizer import Channelizer
from rxlog.receive.sweep import SweepPlan
from rxlog.station.config import SCHEMA, ConfigError, load_config
from rxlog.timeutil import parse_iso

SETTINGS = dict(deadline=None, suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])


@pytest.fixture(scope="module")
def cfg(tmp_path_factory):
    """One station with an archive hour and an event store, shared by the examples."""
    return H.station(tmp_path_factory.mktemp("station"))


def refused_without_a_trace(cfg, call, *names):
    """Run ``call``; if it refuses (RxlogError), the message names one of ``names`` and the
    storage root is unchanged; return None then, else what ``call`` returned. Any other
    exception fails the test."""
    before = H.tree_digest(cfg.storage_root)
    try:
        result = call()
    except RxlogError as e:
        assert any(n in str(e) for n in names), str(e)
        assert H.tree_digest(cfg.storage_root) == before, str(e)
        event("refused")
        return None
    event("accepted")
    return result


def within_limits(t0, t_end, cadence_s=None, fmin_hz=None, fmax_hz=None):
    """What a reader accepted lies within rxlog.validate's limits."""
    assert validate.ERA_START <= t0 <= t_end <= validate.era_end() + 60
    if cadence_s is not None:
        assert validate.MIN_CADENCE_S <= cadence_s <= validate.MAX_CADENCE_S
    if fmin_hz is not None:                          # channel centres; the band is 16-24 MHz here
        lo, hi = validate.DECAMETRIC_HZ
        assert fmin_hz < hi + validate.MAX_CHANNEL_HZ / 2 and fmax_hz > lo - validate.MAX_CHANNEL_HZ / 2


# -- values -------------------------------------------------------------------------------

junk = st.one_of(st.none(), st.booleans(), st.integers(-2**70, 2**70), st.floats(), st.text(max_size=12),
                 st.lists(st.integers(), max_size=2), st.dictionaries(st.text(max_size=4), st.integers(), max_size=2))


def numbers(*plausible):
    return st.one_of(st.sampled_from(plausible), st.floats(), st.integers(-10**20, 10**20), junk)


times = st.one_of(st.sampled_from([H.START, "2026-12-01T22:00:00.5+05:00", "1900-01-01T00:00:00Z",
                                   "9999-12-31T23:59:59Z", "0001-01-01T00:00:00-23:59", "2026-13-40", "", "now"]),
                  st.datetimes().map(lambda d: d.isoformat()), st.text(max_size=24))


# -- SigMF and raw recordings -------------------------------------------------------------------

capture = st.fixed_dictionaries({}, optional={
    "core:sample_start": numbers(0, 0, 500, 10**12, -1),
    "core:frequency": numbers(20e6, 20e6, 100e6, 16e6, 0.0),
    "core:datetime": st.one_of(times, junk),
    "core:header_bytes": numbers(0, 16, -4)})
global_info = st.fixed_dictionaries(
    {"core:datatype": st.one_of(st.sampled_from(["cu8", "ci8", "ci16_le", "cf32_le", "cu16", "ri8"]), junk),
     "core:sample_rate": numbers(1000, 1000, 250_000, 1e9)},
    optional={"core:num_channels": numbers(1, 2), "core:trailing_bytes": numbers(0, 3, 10**9)})
json_any = st.recursive(st.one_of(st.none(), st.booleans(), st.floats(), st.integers(), st.text(max_size=8)),
                        lambda inner: st.one_of(st.lists(inner, max_size=3),
                                                st.dictionaries(st.text(max_size=6), inner, max_size=3)),
                        max_leaves=12)
# Near a good recording (16 kS/s leaves usable bins either side of the DC cut; two seconds
# of cu8 are 64 KB), with one value changed or dropped in the global object and in a capture.
GOOD_GLOBAL = {"core:datatype": "cu8", "core:sample_rate": 16000}
GOOD_CAPTURE = {"core:sample_start": 0, "core:frequency": 20.1e6, "core:datetime": H.START}
GOOD_BYTES = 64000
value = st.one_of(junk, times, numbers(0, 16000, 20e6, 10**9))
near_good = st.builds(lambda g, c, drop: {"global": {**GOOD_GLOBAL, **g},
                                          "captures": [{k: v for k, v in {**GOOD_CAPTURE, **c}.items() if k != drop}]},
                      st.dictionaries(st.sampled_from(sorted(GOOD_GLOBAL) + ["core:num_channels"]), value, max_size=1),
                      st.dictionaries(st.sampled_from(sorted(GOOD_CAPTURE) + ["core:header_bytes"]), value, max_size=1),
                      st.sampled_from([None, *GOOD_CAPTURE]))
sigmf_meta = st.one_of(json_any, near_good, near_good,
                       st.fixed_dictionaries({"global": st.one_of(global_info, junk),
                                              "captures": st.one_of(st.lists(capture, max_size=4), junk)}))


@settings(max_examples=150, **SETTINGS)
@given(meta=sigmf_meta, n_bytes=st.one_of(st.integers(0, 200), st.just(GOOD_BYTES), st.just(GOOD_BYTES)))
def test_sigmf_metadata(cfg, meta, n_bytes):
    with tempfile.TemporaryDirectory() as d:
        path = Path(d) / "gen.sigmf-meta"
        path.write_text(json.dumps(meta))
        (Path(d) / "gen.sigmf-data").write_bytes(np.random.default_rng(0).bytes(n_bytes))
        got = refused_without_a_trace(cfg, lambda: ingest_recording(cfg, path), "gen.sigmf")
    if got is not None:
        within_limits(got.t0, got.t_end)


RAW = {"fmt": st.one_of(st.sampled_from(["cu8", "ci8", "ci16_le", "cf32_le", "cs8", "sigmf", ""]), junk),
       "rate": numbers(1000, 16000, 0, 1e12), "center": numbers(20e6, 100e6, 0),
       "start": st.one_of(times, numbers(T_NIGHT)), "n_bytes": st.integers(0, 100)}
RAW_GOOD = {"fmt": "cu8", "rate": 16000, "center": 20.1e6, "start": H.START, "n_bytes": GOOD_BYTES}
raw_args = st.one_of(st.just(RAW_GOOD), st.fixed_dictionaries(RAW),
                     st.sampled_from(sorted(RAW)).flatmap(lambda k: RAW[k].map(lambda v: {**RAW_GOOD, k: v})))


@settings(max_examples=100, **SETTINGS)
@given(args=raw_args)
def test_raw_recording_description(cfg, args):
    with tempfile.TemporaryDirectory() as d:
        path = Path(d) / "gen.raw"
        path.write_bytes(np.random.default_rng(0).bytes(args["n_bytes"]))
        got = refused_without_a_trace(cfg, lambda: ingest_recording(cfg, path, fmt=args["fmt"], rate_hz=args["rate"],
                                                                    center_hz=args["center"], start=args["start"]),
                                      "gen.raw")
    if got is not None:
        within_limits(got.t0, got.t_end)


# -- FITS ---------------------------------------------------------------------------------------

GOOD_CARDS = {"CTYPE1": "'TIME'", "CUNIT1": "'s'", "CRPIX1": "1.0", "CRVAL1": "0.5", "CDELT1": "1.0",
              "CTYPE2": "'FREQ'", "CUNIT2": "'MHz'", "CRPIX2": "1.0", "CRVAL2": "18.125", "CDELT2": "0.25",
              "MJDREF": repr(T_NIGHT / 86400.0 + 40587.0), "TIMESYS": "'UTC'", "BUNIT": "'dB'"}
OTHER_KEYS = ["MJDREFI", "MJDREFF", "JDREF", "DATEREF", "DATE-OBS", "TIMEPIXR", "TIMEOFFS", "TIMEUNIT", "BSCALE",
              "BZERO", "CD1_1", "CD2_2", "PC1_2", "OBSGEO-B", "OBSGEO-L", "OBSGEO-H", "OBSGEO-X"]


def fits_number(x) -> str:
    return repr(float(x)).upper().replace("NAN", "NaN") if isinstance(x, float) else str(x)


card_value = st.one_of(
    st.sampled_from(["NaN", "INF", "1E999", "-0", "T", "F", "''", "'dB'", "'s'", "'Hz'", "'kHz'", "'TIME'",
                     "'UTC'", "'FREQ'", "'TAI'", "'1858-11-17'", "'2026-12-01T21:00:00'", "1E15", "1E-300",
                     "-1", "0", "0.5", "1E30", "-306000.0"]),
    st.floats().map(fits_number), st.integers(-10**12, 10**12).map(str),
    st.text(alphabet=string.printable[:95], max_size=16).map(lambda t: "'" + t.replace("'", "''") + "'"))


def fits_bytes(cards: dict, bitpix: int, n1: int, n2: int, values: str) -> bytes:
    """A primary HDU written by hand, so any card value can be in it."""
    head = {"SIMPLE": "T", "BITPIX": str(bitpix), "NAXIS": "2", "NAXIS1": str(n1), "NAXIS2": str(n2), **cards}
    text = "".join(f"{k:<8}= {v:>20}"[:80].ljust(80) for k, v in head.items()) + "END".ljust(80)
    text += " " * (-len(text) % 2880)
    rng = np.random.default_rng(0)
    shape = (n2, n1)
    power = {"noise": 3 + rng.normal(0, 0.3, shape), "nan": np.full(shape, np.nan), "huge": np.full(shape, 1e30),
             "zero": np.zeros(shape), "negative": -np.ones(shape), "inf": np.full(shape, np.inf)}[values]
    dtype = {8: ">u1", 16: ">i2", 32: ">i4", -32: ">f4", -64: ">f8"}.get(bitpix, ">f4")
    with np.errstate(all="ignore"):
        data = power.astype(dtype).tobytes()
    return text.encode("ascii") + data + b"\0" * (-len(data) % 2880)


@settings(max_examples=100, **SETTINGS)                 # each example writes, reads and may store a file
@given(changes=st.dictionaries(st.sampled_from(sorted(GOOD_CARDS) + OTHER_KEYS), card_value, max_size=3),
       dropped=st.sets(st.sampled_from(sorted(GOOD_CARDS)), max_size=2),
       bitpix=st.sampled_from([-32, -32, -32, 16, 8, -64, 12]), n1=st.integers(0, 40), n2=st.integers(0, 12),
       values=st.sampled_from(["noise", "noise", "nan", "huge", "zero", "negative", "inf"]),
       cut=st.one_of(st.none(), st.none(), st.floats(0, 1)), packed=st.booleans())
def test_fits_header_and_data(cfg, changes, dropped, bitpix, n1, n2, values, cut, packed):
    cards = {k: v for k, v in {**GOOD_CARDS, **changes}.items() if k not in dropped}
    raw = fits_bytes(cards, bitpix, n1, n2, values)
    if packed:
        raw = gzip.compress(raw)
    if cut is not None:
        raw = raw[: int(len(raw) * cut)]
    with tempfile.TemporaryDirectory() as d:
        path = Path(d) / ("gen.fits.gz" if packed else "gen.fits")
        path.write_bytes(raw)
        stored = refused_without_a_trace(cfg, lambda: ingest_fits(cfg, path), "gen.fits") or []
        read = refused_without_a_trace(cfg, lambda: read_spectrum_fits(path), "gen.fits")
    for s in stored:
        within_limits(s.t0, s.t_end, s.cadence_s, s.fmin_hz, s.fmax_hz)
    if read is not None:
        within_limits(read.t0, read.t_end, read.cadence_s, read.freq_hz[0], read.freq_hz[-1])
        assert np.isfinite(read.power_db).any()


# -- configs ------------------------------------------------------------------------------------

def toml(v) -> str:
    """A TOML value (JSON's string escapes are TOML's basic-string escapes)."""
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, float) and not math.isfinite(v):
        return "nan" if math.isnan(v) else ("inf" if v > 0 else "-inf")
    if isinstance(v, (int, float)):
        return repr(v)
    if isinstance(v, list):
        return "[" + ", ".join(toml(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{" + ", ".join(f"{json.dumps(k)} = {toml(x)}" for k, x in v.items()) + "}"
    return json.dumps(v)


toml_junk = st.recursive(st.one_of(st.booleans(), st.integers(-2**63, 2**63 - 1), st.floats(), st.text(max_size=10)),
                         lambda inner: st.one_of(st.lists(inner, max_size=3),
                                                 st.dictionaries(st.sampled_from(["fmin_mhz", "fmax_mhz", "name",
                                                                                  "cml", "io_phase", "x"]),
                                                                 inner, max_size=3)),
                         max_leaves=8)
section_keys = st.sampled_from([(s, k) for s in SCHEMA for k in SCHEMA[s]] + [("spectrum", "x"), ("station", "bogus")])


@settings(max_examples=200, **SETTINGS)
@given(values=st.dictionaries(section_keys, st.one_of(toml_junk, st.sampled_from(
    [0, 1, -1, 1e12, 1e-12, math.nan, math.inf, "", "data", "/", "~", "..", "station.toml", "q", "single",
     "recording"])), max_size=4))
def test_config(values):
    data = {"station": {"name": "t", "latitude_deg": 47.0, "longitude_deg": 8.0}}
    for (section, key), v in values.items():
        data.setdefault(section, {})[key] = v
    text = "".join(f"[{s}]\n" + "".join(f"{k} = {toml(v)}\n" for k, v in kv.items()) for s, kv in data.items())
    with tempfile.TemporaryDirectory() as d:
        path = Path(d) / "station.toml"
        path.write_text(text, encoding="utf-8", errors="surrogatepass")
        try:
            cfg = load_config(path)
            Channelizer(cfg, ring_s=0)                  # what ingest and the logger build first from it
            SweepPlan.from_config(cfg)
            event("accepted")
            numbers_in = [v for sec in cfg.values() for v in sec.values() if isinstance(v, float)]
            assert all(math.isfinite(v) for v in numbers_in)
            assert cfg["storage"]["root"].strip() and not cfg.storage_root.is_file()
        except (ConfigError, RxlogError) as e:
            assert str(path) in str(e) or "[" in str(e), str(e)
            event("refused")
        assert sorted(p.name for p in Path(d).iterdir()) == ["station.toml"]


# -- partner lists ------------------------------------------------------------------------------

cell = st.one_of(st.sampled_from(["2026-12-01T22:00:00.000Z", "1000-01-01T00:00:00.000Z", "2026-12-01T22:00:05Z",
                                  18.0, 20.0, 1e30, -1.0, float("nan"), "solar_iii", "noise", "e1", "st-a", 400.0]),
                 junk)
event_row = st.dictionaries(st.sampled_from(COLUMN_NAMES + ("extra",)), cell, max_size=len(COLUMN_NAMES) + 1)
header_row = st.dictionaries(st.sampled_from(sorted(HEADER)), cell, max_size=6)


GOOD_EVENT = {"station": "st-a", "event_id": "e1", "start_utc": "2026-12-01T22:00:00.000Z",
              "end_utc": "2026-12-01T22:00:10.000Z", "peak_utc": "2026-12-01T22:00:05.000Z", "fmin_mhz": 18.0,
              "fmax_mhz": 20.0, "class": "solar_iii", "cml3_deg": 120.0, "sun_alt_deg": 30.0}
near_good_event = st.builds(lambda c: {**GOOD_EVENT, **c}, st.dictionaries(st.sampled_from(COLUMN_NAMES), cell,
                                                                            max_size=1))


@settings(max_examples=150, **SETTINGS)
@given(header=header_row, events=st.lists(st.one_of(event_row, near_good_event, near_good_event), max_size=5),
       as_list=st.booleans())
def test_partner_list(cfg, header, events, as_list):
    doc = events if as_list else {"header": header, "events": events}
    with tempfile.TemporaryDirectory() as d:
        path = Path(d) / "gen.json"
        path.write_text(json.dumps(doc))
        got = refused_without_a_trace(cfg, lambda: read_event_list(path), "gen.json")
    if got is None:
        return
    lo, hi = validate.ERA_START, validate.era_end() + 60
    for ev in got.events:
        t = [parse_iso(ev[k]) for k in ("start_utc", "peak_utc", "end_utc")]
        assert lo <= t[0] <= t[1] <= t[2] <= hi
        assert validate.MIN_BAND_MHZ <= ev["fmin_mhz"] <= ev["fmax_mhz"] <= validate.MAX_BAND_MHZ
