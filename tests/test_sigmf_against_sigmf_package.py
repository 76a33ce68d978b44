"""SigMF recordings written by the reference ``sigmf`` package (PyPI, 1.x) read back by rxlog.

The outside reference writes the metadata and reads the samples; rxlog's own SigMF
reader (which does not use the package) must agree on samples, capture boundaries,
centre frequencies and start times. Scaling: sigmf maps cu8 as (x - 128) / 128, rxlog as
librtlsdr does, (x - 127.5) / 127.5; the comparison converts between the two.
"""

import json

import numpy as np
import pytest
import sigmf

from rxlog.errors import RxlogError
from rxlog.receive.blocks import EndOfStream
from rxlog.receive.recordings import open_recording
from rxlog.receive.replay import spectra_from_recording
from rxlog.station.config import config_from_text
from rxlog.timeutil import parse_iso

DTYPES = {"cu8": np.uint8, "ci8": np.int8, "ci16_le": "<i2", "cf32_le": "<f4"}
RATE = 2_400_000


def write_sigmf(folder, name, comps, datatype, captures, rate=RATE):
    """Write with the sigmf package: captures are (sample_start, frequency, datetime or None)."""
    data = folder / f"{name}.sigmf-data"
    comps.tofile(data)
    meta = sigmf.SigMFFile(data_file=str(data), global_info={"core:datatype": datatype, "core:sample_rate": rate})
    for start, freq, when in captures:
        md = {"core:frequency": freq}
        if when is not None:
            md["core:datetime"] = when
        meta.add_capture(start, metadata=md)
    meta.tofile(folder / f"{name}.sigmf-meta", overwrite=True)
    return folder / f"{name}.sigmf-meta"


def random_comps(datatype, n, rng):
    if datatype == "cf32_le":
        return rng.normal(0, 0.1, 2 * n).astype("<f4")
    info = np.iinfo(np.dtype(DTYPES[datatype]))
    return rng.integers(info.min, info.max + 1, 2 * n).astype(DTYPES[datatype])


def read_all(rec, n=3000):
    blocks = []
    with rec:
        while True:
            try:
                blocks.append(rec.read(n))
            except EndOfStream:
                return blocks


@pytest.mark.parametrize("datatype", list(DTYPES))
def test_samples_and_captures_agree_with_sigmf(tmp_path, datatype):
    rng = np.random.default_rng(1)
    n = 20_000
    comps = random_comps(datatype, n, rng)
    caps = [(0, 20e6, "2026-12-01T22:00:00.000Z"),
            (7_000, 21.5e6, "2026-12-01T22:00:00.500Z"),       # retuned, and a gap before it
            (15_000, 21.5e6, None)]                           # same tuning, time follows on
    meta_path = write_sigmf(tmp_path, "rec", comps, datatype, caps)
    ref = sigmf.sigmffile.fromfile(str(meta_path))
    rec = open_recording(meta_path)
    assert rec.rate_hz == RATE and rec.n_samples == n
    blocks = read_all(rec)
    for i, (start, freq, when) in enumerate(caps):
        want = ref.read_samples_in_capture(i)
        if datatype == "cu8":
            want = (want * 128 + 0.5 * (1 + 1j)) / 127.5     # sigmf's (x-128)/128 -> librtlsdr's (x-127.5)/127.5
        end = caps[i + 1][0] if i + 1 < len(caps) else n
        cap = rec.captures[i]
        assert cap.sample_start == start and cap.n_samples == end - start and cap.center_hz == freq
        mine = np.concatenate([b.samples for b in blocks])[start:end]
        np.testing.assert_allclose(mine, want, rtol=1e-6, atol=1e-7)
        if when is not None:
            assert cap.t0 == parse_iso(when)
    # captures 0 -> 1 change tuning: a new segment; 1 -> 2 keep it; the 0.5-s start of capture 1
    # is later than capture 0's 7000 samples: a gap of the rest
    assert rec.captures[0].segment != rec.captures[1].segment == rec.captures[2].segment
    assert rec.captures[1].dropped_before == round(0.5 * RATE) - 7_000
    assert rec.captures[2].t0 == pytest.approx(rec.captures[1].t0 + 8_000 / RATE)
    # blocks never straddle a capture and carry its time
    for b in blocks:
        cap = [c for c in rec.captures if c.t0 - 1e-6 <= b.t0 < c.t0 + c.n_samples / RATE][0]
        assert b.t0 + b.n / RATE <= cap.t0 + cap.n_samples / RATE + 1e-6


def test_spectra_of_a_sigmf_recording_put_the_tone_in_its_channel(tmp_path):
    cfg = config_from_text("[station]\nname='t'\nlatitude_deg=47\nlongitude_deg=8\n[sweep]\nmode='single'\n",
                           tmp_path / "s.toml")
    n = int(2.2 * RATE)
    tau = np.arange(n) / RATE
    rng = np.random.default_rng(3)
    f_sky = {0: 20.4e6, 1: 21.9e6}
    centre = {0: 20e6, 1: 21.5e6}
    half = n // 2
    x = 0.03 * (rng.normal(size=n) + 1j * rng.normal(size=n))
    for k, (a, b) in enumerate(((0, half), (half, n))):
        x[a:b] += 0.2 * np.exp(2j * np.pi * (f_sky[k] - centre[k]) * tau[a:b])
    comps = np.clip(np.round(np.stack([x.real, x.imag], 1).ravel() * 127.5 + 127.5), 0, 255).astype(np.uint8)
    meta = write_sigmf(tmp_path, "night", comps, "cu8",
                       [(0, centre[0], "2026-12-01T22:00:00.000Z"),
                        (half, centre[1], "2026-12-01T22:00:01.100Z")])
    seen = []
    out = list(spectra_from_recording(cfg, meta, progress=lambda d, t: seen.append((d, t)),
                                      chunk_samples=300_000))
    assert seen[-1] == (n, n)
    segs = sorted({d.segment for d in out})
    assert len(segs) == 2
    t0 = parse_iso("2026-12-01T22:00:00Z")
    for d in out:
        k = 0 if d.meta["center_hz"] == centre[0] else 1
        assert d.meta["recording"] == "night.sigmf-data"
        for r in range(d.n_time):
            peak = int(np.nanargmax(d.power_db[r]))
            assert abs(d.freq_hz[peak] - f_sky[k]) <= 1.5 * (d.freq_hz[1] - d.freq_hz[0])
        assert d.t0 >= t0 + (0 if k == 0 else 1.0)


def test_sigmf_problems_name_the_file_and_what_is_expected(tmp_path):
    comps = np.zeros(200, np.uint8)
    meta = write_sigmf(tmp_path, "a", comps, "cu8", [(0, 20e6, "2026-12-01T22:00:00Z")])
    good = json.loads(meta.read_text())

    def variant(change):
        doc = json.loads(json.dumps(good))
        change(doc)
        meta.write_text(json.dumps(doc))
        with pytest.raises(RxlogError) as e:
            open_recording(meta)
        assert str(meta) in str(e.value)
        return str(e.value)

    assert "core:datatype" in variant(lambda d: d["global"].update({"core:datatype": "ri16_le"}))
    assert "core:sample_rate" in variant(lambda d: d["global"].pop("core:sample_rate"))
    assert "core:frequency" in variant(lambda d: d["captures"][0].pop("core:frequency"))
    assert "--start" in variant(lambda d: d["captures"][0].pop("core:datetime"))
    assert "ISO 8601" in variant(lambda d: d["captures"][0].update({"core:datetime": "yesterday"}))
    meta.write_text("{not json")
    with pytest.raises(RxlogError, match="unreadable SigMF metadata"):
        open_recording(meta)
    # a start time given by hand stands in for a missing core:datetime
    doc = json.loads(json.dumps(good))
    doc["captures"][0].pop("core:datetime")
    meta.write_text(json.dumps(doc))
    assert open_recording(meta, start="2026-12-01T23:00:00Z").t0 == parse_iso("2026-12-01T23:00:00Z")
