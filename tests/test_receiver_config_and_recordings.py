"""[receiver] and [sweep] validation (one line per problem, naming file, line and key) and
raw recordings (cu8, ci8, ci16_le, cf32_le with explicit format, rate, centre and start)."""

import numpy as np
import pytest

from rxlog.errors import RxlogError
from rxlog.receive.blocks import EndOfStream, to_complex64
from rxlog.receive.recordings import RecordingSource, open_recording
from rxlog.station.config import ConfigError, config_from_text, load_config
from rxlog.station.sources import open_source
from rxlog.timeutil import parse_iso

BASE = "[station]\nname='t'\nlatitude_deg=47\nlongitude_deg=8\n"


def problems(tmp_path, text):
    with pytest.raises(ConfigError) as e:
        config_from_text(BASE + text, tmp_path / "s.toml")
    return e.value.problems


def test_example_config_is_valid():
    cfg = load_config("config/station.example.toml")
    assert cfg["receiver"]["agc"] is False


@pytest.mark.parametrize("text,key,words", [
    ("[receiver]\nagc = true\n", "[receiver] agc", ["refused", "comparable"]),
    ("[receiver]\nkind='rtlsdr'\ndirect_sampling='q'\nsample_rate_hz=600000\n", "[receiver] sample_rate_hz",
     ["225001-300000 or 900001-3200000"]),
    ("[receiver]\nkind='rtltcp'\ndirect_sampling='q'\nsample_rate_hz=3300000\n", "[receiver] sample_rate_hz",
     ["librtlsdr accepts"]),
    ("[receiver]\nkind='rtlsdr'\n", "[receiver] direct_sampling", ["24 MHz", "upconverter_lo_hz"]),
    ("[receiver]\nkind='rtlsdr'\ndirect_sampling='q'\nupconverter_lo_hz=125e6\n", "[receiver] upconverter_lo_hz",
     ["exclude each other"]),
    ("[receiver]\ndirect_sampling='x'\n", "[receiver] direct_sampling", ["'off', 'i', 'q'"]),
    ("[receiver]\nkind='recording'\n", "[receiver] recording_path", ["file to replay"]),
    ("[receiver]\nkind='recording'\nrecording_path='x.cu8'\nrecording_format='cu8'\nrecording_center_hz=20e6\n",
     "[receiver] recording_start_utc", ["UTC time"]),
    ("[sweep]\ncycle_s=0.3\n", "[sweep] cycle_s", ["whole number of sweep cycles"]),
    ("[sweep]\nfft_size=128\n", "[sweep] fft_size", ["wider than", "fft_size >= 512"]),
    ("[sweep]\nfft_size=1000\n", "[sweep] fft_size", ["power of two"]),
    ("[sweep]\nbuffer_samples=1000\n", "[sweep] buffer_samples", ["multiple of 256"]),
    ("[sweep]\ncycle_s=0.05\n[spectra]\ncadence_s=1.0\n", "[sweep] cycle_s", ["no time to dwell"]),
    ("[sweep]\ntunings_hz=[17e6, 19e6]\n", "[sweep] tunings_hz", ["no tuning's usable window"]),
    ("[receiver]\nkind='rtltcp'\ndirect_sampling='q'\n", "[sweep] discard_s", ["rtl_tcp queues", "mode = \"single\""]),
    ("[receiver]\nkind='recording'\nrecording_path='x.sigmf-meta'\n", "[sweep] mode", ["cannot be swept"]),
])
def test_problems_name_the_key_and_what_is_expected(tmp_path, text, key, words):
    found = [p for p in problems(tmp_path, text) if key in p]
    assert found, problems(tmp_path, text)
    line = found[0]
    assert str(tmp_path / "s.toml") in line
    for w in words:
        assert w in line


def test_raw_recordings_in_every_format(tmp_path):
    rng = np.random.default_rng(0)
    comps = np.clip(0.3 * rng.normal(size=10_000), -0.99, 0.99)
    x = comps[0::2] + 1j * comps[1::2]
    stored = {"cu8": np.round(comps * 127.5 + 127.5).astype(np.uint8),
              "ci8": np.round(comps * 127).astype(np.int8),
              "ci16_le": np.round(comps * 32767).astype("<i2"),
              "cf32_le": comps.astype("<f4")}
    scale = {"cu8": None, "ci8": 127 / 128, "ci16_le": 32767 / 32768, "cf32_le": 1.0}
    for fmt, data in stored.items():
        path = tmp_path / f"r.{fmt}"
        data.tofile(path)
        rec = open_recording(path, fmt=fmt, rate_hz=250_000, center_hz=19.9e6, start="2026-12-01T22:00:00Z")
        blocks = []
        with rec:
            with pytest.raises(EndOfStream):
                while True:
                    blocks.append(rec.read(1234))
        got = np.concatenate([b.samples for b in blocks])
        want = x if scale[fmt] is None else x * scale[fmt]
        np.testing.assert_allclose(got, want, atol=0.006 if fmt in ("cu8", "ci8") else 1e-4)
        assert blocks[0].t0 == parse_iso("2026-12-01T22:00:00Z")
        assert blocks[1].t0 == pytest.approx(blocks[0].t0 + 1234 / 250_000)
        assert {b.center_hz for b in blocks} == {19.9e6}
        with pytest.raises(RxlogError, match="cannot be retuned"):
            rec.tune(20e6)


def test_raw_recording_needs_its_description(tmp_path):
    path = tmp_path / "night.raw"
    np.zeros(100, np.uint8).tofile(path)
    with pytest.raises(RxlogError) as e:
        open_recording(path, fmt="cu8")
    assert "--rate" in str(e.value) and "--center" in str(e.value) and "--start" in str(e.value)
    with pytest.raises(RxlogError, match="--format 'cs8' not supported"):
        open_recording(path, fmt="cs8", rate_hz=1e6, center_hz=2e7, start="2026-12-01T22:00:00Z")
    with pytest.raises(RxlogError, match="--start"):
        open_recording(path, fmt="cu8", rate_hz=1e6, center_hz=2e7, start="tonight")


def test_recording_kind_replays_the_configured_file(tmp_path):
    data = np.full(4000, 128, np.uint8)
    data.tofile(tmp_path / "night.cu8")
    cfg = config_from_text(BASE + "[receiver]\nkind='recording'\nrecording_path='night.cu8'\nrecording_format='cu8'\n"
                           "recording_center_hz=21e6\nrecording_start_utc='2026-12-01T23:00:00Z'\n"
                           "[sweep]\nmode='single'\n", tmp_path / "s.toml")
    src = open_source(cfg)
    assert isinstance(src, RecordingSource)
    src.open()
    b = src.read(10_000)
    assert b.n == 2000 and b.center_hz == 21e6 and b.t0 == parse_iso("2026-12-01T23:00:00Z")
    np.testing.assert_allclose(b.samples, to_complex64(data, "cu8"))


# -- recordings from elsewhere: each part of the description is checked before a sample is read

GOOD_CAPTURE = {"core:sample_start": 0, "core:frequency": 20e6, "core:datetime": "2026-12-01T22:00:00Z"}


def sigmf_pair(folder, meta, data_bytes=4000):
    import json

    (folder / "r.sigmf-data").write_bytes(b"\x80" * data_bytes)
    (folder / "r.sigmf-meta").write_text(meta if isinstance(meta, str) else json.dumps(meta))
    return folder / "r.sigmf-meta"


def with_global(**g):
    base = {"core:datatype": "cu8", "core:sample_rate": 250_000}
    base.update(g)
    return {"global": base, "captures": [dict(GOOD_CAPTURE)]}


def with_captures(*caps):
    return {"global": {"core:datatype": "cu8", "core:sample_rate": 250_000}, "captures": list(caps)}


@pytest.mark.parametrize("meta, data_bytes, words", [
    ("[]", 4000, ["no 'global' object"]),
    ("[[[[" * 20000, 4000, ["unreadable SigMF metadata"]),                    # nested past the recursion limit
    (with_global(**{"core:datatype": ["cu8"]}), 4000, ["core:datatype ['cu8'] not supported"]),
    (with_global(**{"core:sample_rate": float("inf")}), 4000, ["core:sample_rate", "inf"]),
    (with_global(**{"core:sample_rate": True}), 4000, ["core:sample_rate", "True"]),
    (with_global(**{"core:sample_rate": 1e12}), 4000, ["core:sample_rate", "from 1000 to 1e+08"]),
    (with_global(**{"core:trailing_bytes": "many"}), 4000, ["core:trailing_bytes", "'many'"]),
    (with_global(**{"core:num_channels": 2}), 4000, ["core:num_channels = 2"]),
    (with_captures(dict(GOOD_CAPTURE), 7), 4000, ["captures[1]: expected an object"]),
    (with_captures(dict(GOOD_CAPTURE, **{"core:frequency": "20 MHz"})), 4000, ["captures[0] core:frequency"]),
    (with_captures(dict(GOOD_CAPTURE, **{"core:frequency": -20e6})), 4000, ["captures[0] core:frequency"]),
    (with_captures(dict(GOOD_CAPTURE, **{"core:header_bytes": 1.5})), 4000, ["captures[0] core:header_bytes"]),
    (with_captures(dict(GOOD_CAPTURE), {"core:sample_start": 2000, "core:frequency": 20e6,
                                        "core:datetime": "2026-12-01T21:59:00Z"}), 8000,
     ["captures[1] core:datetime", "before the end of the capture before it"]),
    (with_captures(dict(GOOD_CAPTURE, **{"core:datetime": 1796162400})), 4000, ["captures[0] core:datetime"]),
    (with_captures(dict(GOOD_CAPTURE, **{"core:datetime": "2100-01-01T00:00:00Z"})), 4000, ["receiver era"]),
    (with_captures(dict(GOOD_CAPTURE)), 4001, ["r.sigmf-data: 4001 bytes", "whole number of cu8 samples"]),
    (with_captures(dict(GOOD_CAPTURE, **{"core:header_bytes": 5000})), 4000, ["fewer than the 5000 header"]),
    (with_captures(dict(GOOD_CAPTURE), {"core:sample_start": 2001, "core:frequency": 20e6}), 4000,
     ["captures[1] core:sample_start 2001 lies past the end", "holds 2000 cu8 samples"]),
])
def test_sigmf_description_problems_name_the_key(tmp_path, meta, data_bytes, words):
    path = sigmf_pair(tmp_path, meta, data_bytes)
    with pytest.raises(RxlogError) as e:
        open_recording(path)
    assert "r.sigmf" in str(e.value)
    for w in words:
        assert w in str(e.value), (w, str(e.value))


def test_sigmf_capture_may_start_a_little_before_the_previous_ends(tmp_path):
    """A host-clock stamp up to CAPTURE_OVERLAP_S early is a clock quirk, not captures out of order."""
    late_stamp = {"core:sample_start": 1000, "core:frequency": 20e6, "core:datetime": "2026-12-01T21:59:59.9Z"}
    rec = open_recording(sigmf_pair(tmp_path, with_captures(dict(GOOD_CAPTURE), late_stamp)))
    assert [c.n_samples for c in rec.captures] == [1000, 1000]


def test_oversized_sigmf_metadata_is_refused_unread(tmp_path, monkeypatch):
    from rxlog.receive import recordings

    monkeypatch.setattr(recordings, "MAX_SIGMF_META_BYTES", 100)
    path = sigmf_pair(tmp_path, with_global(**{"note": "x" * 200}))
    with pytest.raises(RxlogError, match="too large for SigMF metadata"):
        open_recording(path)


@pytest.mark.parametrize("kwargs, words", [
    (dict(rate_hz=float("nan")), ["--rate", "nan"]),
    (dict(rate_hz=500.0), ["--rate", "from 1000"]),
    (dict(center_hz=float("inf")), ["--center", "inf"]),
    (dict(center_hz=0.0), ["--center"]),
    (dict(start="1989-12-31T23:59:59Z"), ["--start", "receiver era"]),
    (dict(start=float("nan")), ["--start", "not finite"]),
    (dict(fmt="ci16_le"), ["whole number of ci16_le samples"]),   # 102 bytes, ci16_le samples are 4
])
def test_raw_description_problems_name_the_option(tmp_path, kwargs, words):
    path = tmp_path / "night.raw"
    np.zeros(102, np.uint8).tofile(path)
    args = dict(fmt="cu8", rate_hz=1e6, center_hz=2e7, start="2026-12-01T22:00:00Z")
    args.update(kwargs)
    with pytest.raises(RxlogError) as e:
        open_recording(path, **args)
    assert "night.raw" in str(e.value)
    for w in words:
        assert w in str(e.value), (w, str(e.value))
