"""Invariants of the ephemeris tags: interpolation, chunking, shapes, errors, offline use."""

import logging
import socket

import numpy as np
import pytest

from rxlog.errors import RxlogError
from rxlog.sky import tags as sky_tags
from rxlog.sky import timescales
from rxlog.sky.tags import TAG_KEYS, compute_tags, station_tags

SITE = (47.5, 8.7, 450.0)
NIGHT = 1_796_083_200.0 + np.arange(0.0, 30 * 3600.0, 7.0)     # 2026-12-01, 30 h at 7 s


def _angle(a, b):
    return np.abs((np.asarray(a) - np.asarray(b) + 180.0) % 360.0 - 180.0)


def test_interpolated_tags_match_direct_computation():
    # Ten days at 30 s go through the node grid; one instant every 1.25 days alone
    # (fewer times than the nodes they would need) is computed directly by ERFA.
    days = NIGHT[0] + np.arange(0.0, 10 * 86400.0, 30.0)
    dense = compute_tags(days, *SITE)
    pick = np.arange(0, days.size, 3600)
    direct = compute_tags(days[pick], *SITE)
    for key in ("cml3_deg", "io_phase_deg", "jupiter_az_deg", "sun_az_deg"):
        assert _angle(dense[key][pick], direct[key]).max() < 1e-3, key
    for key in ("jupiter_alt_deg", "sun_alt_deg", "de_deg", "elongation_deg"):
        assert np.abs(dense[key][pick] - direct[key]).max() < 1e-3, key
    assert np.abs(dense["light_time_s"][pick] - direct["light_time_s"]).max() < 1e-3
    assert np.abs(dense["jupiter_distance_au"][pick] - direct["jupiter_distance_au"]).max() < 1e-9
    assert (dense["source_region"][pick] == direct["source_region"]).all()


def test_chunk_size_does_not_change_results(monkeypatch):
    whole = compute_tags(NIGHT, *SITE)
    monkeypatch.setattr(sky_tags, "CHUNK", 1001)
    pieces = compute_tags(NIGHT, *SITE)
    for key in TAG_KEYS:
        if key == "source_region":
            assert (whole[key] == pieces[key]).all()
        else:
            np.testing.assert_allclose(whole[key], pieces[key], rtol=0, atol=1e-9)


def test_results_keep_the_input_shape_and_all_keys():
    t = NIGHT[:12].reshape(3, 4)
    tags = compute_tags(t, *SITE)
    assert set(tags) == set(TAG_KEYS)
    assert all(v.shape == (3, 4) for v in tags.values())
    one = compute_tags(NIGHT[0], *SITE)
    assert one["cml3_deg"].shape == () and str(one["source_region"]) in {"none", "Io-A", "Io-B", "Io-C", "Io-D", "non-Io-A"}
    assert compute_tags(NIGHT[:0], *SITE)["cml3_deg"].shape == (0,)


def test_cml_advances_at_the_system_iii_rate_less_the_light_time_change():
    # Over one hour CML III grows by 870.536/24 deg (IAU rotation) less a few thousandths
    # (light time and Earth's motion); Io phase by ~203.4/24 deg (its synodic rate)
    tags = compute_tags(np.array([NIGHT[0], NIGHT[0] + 3600.0]), *SITE)
    dcml = (tags["cml3_deg"][1] - tags["cml3_deg"][0]) % 360.0
    dio = (tags["io_phase_deg"][1] - tags["io_phase_deg"][0]) % 360.0
    assert abs(dcml - 870.536 / 24.0) < 0.05
    assert abs(dio - 203.4 / 24.0) < 0.2


@pytest.mark.parametrize("times, words", [
    ([np.nan], "finite"),
    ([0.0], "1972"),
    ([5e9], "2099"),
    (["noon"], "POSIX seconds"),
])
def test_bad_times_raise_a_clear_error(times, words):
    with pytest.raises(RxlogError, match=words):
        compute_tags(times, *SITE)


def test_bad_site_raises_a_clear_error():
    with pytest.raises(RxlogError, match="latitude"):
        compute_tags(NIGHT[:2], 95.0, 8.7, 450.0)


def test_station_tags_reads_the_config():
    cfg = {"station": {"latitude_deg": SITE[0], "longitude_deg": SITE[1], "elevation_m": SITE[2]},
           "regions": {"boxes": [{"name": "all", "cml": [0, 360], "io_phase": "any"}]}}
    tags = station_tags(cfg, NIGHT[:5])
    assert (tags["source_region"] == "all").all()
    np.testing.assert_allclose(tags["cml3_deg"], compute_tags(NIGHT[:5], *SITE)["cml3_deg"])


def test_no_network_and_one_warning_line_past_the_earth_orientation_table(monkeypatch, caplog):
    def refuse(*args, **kwargs):
        raise AssertionError("the ephemeris tried to use the network")

    monkeypatch.setattr(socket.socket, "connect", refuse)
    monkeypatch.setattr(socket, "create_connection", refuse)
    timescales._tables.cache_clear()         # load the bundled tables again, offline
    monkeypatch.setattr(timescales, "_warned", set())
    from astropy.utils import iers

    far = 2_051_222_400.0 + np.arange(0.0, 86400.0, 600.0)   # 2035: past the bundled tables
    with caplog.at_level(logging.WARNING, logger="rxlog.sky"):
        a = compute_tags(far, *SITE)
        b = compute_tags(far + 86400.0, *SITE)
    assert iers.conf.auto_download is False and iers.conf.auto_max_age is None
    assert np.isfinite(a["jupiter_alt_deg"]).all() and np.isfinite(b["cml3_deg"]).all()
    eop = [r for r in caplog.records if "IERS" in r.getMessage()]
    assert len(eop) == 1 and "\n" not in eop[0].getMessage()
