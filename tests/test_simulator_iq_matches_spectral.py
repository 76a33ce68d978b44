"""IQ mode through rxlog's channelizer reproduces the spectral mode: background level
within 0.5 dB (rxlog's own consistency check), and the cell scatter the spectral mode's gamma shape
predicts. Also: the SimulatedReceiver source contract and seeded reproducibility."""

import numpy as np
import pytest

from rxlog.receive import channelizer
from rxlog.receive.blocks import EndOfStream
from rxlog.sim.cells import cell_layout
from rxlog.sim.iq import SimulatedReceiver, simulate_iq
from rxlog.sim.spectra import simulate_spectra
from rxlog.station.config import config_from_text
from rxlog.timeutil import parse_iso

T0 = parse_iso("2026-12-01T23:00:00Z")
FC, RATE = 20.0e6, 2.4e6


@pytest.fixture(scope="module")
def cfg(tmp_path_factory):
    return config_from_text(f"""
[station]
name = "iq-test"
latitude_deg = 47.5
longitude_deg = 8.7
[receiver]
gain_db = 40.0          # a quiet site: the gain raised until the noise fills a few ADC steps
[spectra]
channels = 1024
[sweep]
mode = "single"
center_hz = {FC}
kurtosis = true
ring_s = 0
""", tmp_path_factory.mktemp("iq") / "station.toml")


@pytest.fixture(scope="module")
def channelized(cfg):
    x = simulate_iq(cfg, T0, 6.0, FC, RATE, seed=3, include=(), rfi="quiet-rural")
    ch = channelizer.Channelizer(cfg, ring_s=0)
    pieces = ch.feed_samples(x, T0, FC, RATE, 30.0, "sim") + ch.flush()
    iq = pieces[0]
    spec, _ = simulate_spectra(cfg, T0, 6 / 3600, seed=3, include=(), rfi="quiet-rural", noise=False)
    return x, iq, spec


def test_cu8_samples_look_like_a_dongle(channelized):
    x = channelized[0]
    assert x.dtype == np.uint8 and x.size == 2 * 6 * int(RATE)
    comps = x.astype(np.float64) - 127.5
    assert 3 < comps.std() < 40                      # well inside the 8-bit range, not clipped
    assert abs(comps.mean()) < 1.5                   # zero at 127.5, plus the small DC offset


def test_channelized_background_matches_spectral_mode_within_half_a_db(channelized):
    _, iq, spec = channelized
    ok = np.isfinite(iq.power_db).all(axis=0)
    assert ok.sum() > 200
    d = iq.power_db[:5, ok].mean(axis=0) - spec.power_db[:5, ok].mean(axis=0)
    assert abs(np.median(d)) < 0.5
    assert np.percentile(np.abs(d), 95) < 0.5


def test_channelized_scatter_matches_the_spectral_gamma_shape(cfg, channelized):
    _, iq, spec = channelized
    ok = np.isfinite(iq.power_db).all(axis=0)
    k = cell_layout(cfg).samples[ok]
    resid = iq.power_db[:5, ok] - spec.power_db[:5, ok]
    resid -= resid.mean(axis=0)
    expected = 10 / np.log(10) / np.sqrt(k.mean()) * np.sqrt(4 / 5)   # 5 rows, mean removed
    assert abs(resid.std() / expected - 1) < 0.1
    # Gaussian noise: spectral kurtosis near 1 (Nita & Gary 2010)
    assert abs(np.nanmedian(iq.kurtosis[:5, ok]) - 1) < 0.05


def test_same_seed_same_samples(cfg):
    a = simulate_iq(cfg, T0, 0.05, FC, RATE, seed=8)
    b = simulate_iq(cfg, T0, 0.05, FC, RATE, seed=8)
    c = simulate_iq(cfg, T0, 0.05, FC, RATE, seed=9)
    np.testing.assert_array_equal(a, b)
    assert not np.array_equal(a, c)


def test_simulated_receiver_source_contract(cfg):
    waits = []
    now = [1000.0]
    rx = SimulatedReceiver(cfg, start_unix=T0, seed=1, realtime=True, hours=0.5 / 3600,
                           clock=lambda: now[0], sleep=waits.append)
    rx.open()
    b1 = rx.read(240_000)
    assert b1.samples.dtype == np.complex64 and b1.n == 240_000 and b1.t0 == T0
    assert waits and waits[0] == pytest.approx(0.1)           # paced: waits for the wall clock
    seg = b1.segment
    rx.tune(21.0e6)
    b2 = rx.read(240_000)
    assert b2.segment != seg and b2.center_hz == 21.0e6
    assert b2.t0 == pytest.approx(T0 + 0.1)
    rx.read(720_000)
    with pytest.raises(EndOfStream):
        rx.read(1000)
    rx.close()


def test_sweep_plan_over_the_simulated_receiver_matches_spectral_mode(tmp_path):
    # the logger's own path: SimulatedReceiver -> Sweeper (retunes, discards) -> channelizer
    from rxlog.receive import sweep

    cfg = config_from_text("""
[station]
name = "sweep-test"
latitude_deg = 47.5
longitude_deg = 8.7
[receiver]
gain_db = 40.0
[spectra]
channels = 512
[sweep]
ring_s = 0
""", tmp_path / "station.toml")
    rx = SimulatedReceiver(cfg, start_unix=T0, seed=5, realtime=False, rfi="quiet-rural",
                           include=(), hours=8 / 3600)
    plan = sweep.SweepPlan.from_config(cfg)
    with sweep.Sweeper(rx, plan, channelizer.Channelizer(cfg, ring_s=0)) as sw:
        rows = list(sw.spectra())
    got = np.concatenate([r.power_db for r in rows])
    t_first = rows[0].t0
    spec, _ = simulate_spectra(cfg, t_first, got.shape[0] / 3600, seed=5, include=(),
                               rfi="quiet-rural", noise=False)
    np.testing.assert_allclose(rows[0].chan_offset_s, spec.chan_offset_s, atol=1e-6)
    ok = np.isfinite(got).all(axis=0)
    assert ok.mean() > 0.95
    d = got[:, ok].mean(axis=0) - spec.power_db[:, ok].mean(axis=0)
    assert abs(np.median(d)) < 0.5 and np.percentile(np.abs(d), 95) < 0.5
