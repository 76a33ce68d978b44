"""RFI mask pieces: static ranges with hours, learned carriers, SumThreshold, kurtosis."""

import math

import numpy as np

from rxlog.detect import mask
from rxlog.detect.settings import DEFAULT_STATIC_RANGES, check_static_ranges
from rxlog.station.config import validate


def _sumthreshold_reference(x, chi1, max_run, rho=1.5):
    """SumThreshold written from Offringa et al. 2010 (MNRAS 405, 155), Sect. 3.3, one
    window at a time along each row: flagged samples count as the current threshold."""
    flags = np.zeros(x.shape, bool)
    m = 1
    while m <= max_run:
        chi = chi1 / rho ** math.log2(m)
        new = flags.copy()
        for r in range(x.shape[0]):
            for i in range(x.shape[1] - m + 1):
                win = np.where(flags[r, i:i + m], chi, x[r, i:i + m])
                if win.sum() > m * chi:
                    new[r, i:i + m] = True
        flags = new
        m *= 2
    return flags


def test_sumthreshold_matches_a_direct_reading_of_the_paper():
    rng = np.random.default_rng(0)
    x = rng.normal(size=(6, 80)).astype(np.float32)
    x[1, 10] += 9          # a single strong sample
    x[2, 30:34] += 5.0     # a weak run of four
    x[4, 50:58] += 3.5     # a weaker run of eight
    ours = mask.sum_threshold(x, np.zeros(x.shape, bool), 1, 6.0, 8)
    assert np.array_equal(ours, _sumthreshold_reference(x, 6.0, 8))
    assert ours[1, 10] and ours[2, 30:34].all() and ours[4, 50:58].all()
    # along time (axis 0) is the same operation on the transpose
    along_t = mask.sum_threshold(x.T.copy(), np.zeros(x.T.shape, bool), 0, 6.0, 8)
    assert np.array_equal(along_t, ours.T)


def test_static_mask_ranges_and_hours_across_midnight():
    from rxlog.spectrum import channel_grid
    f = channel_grid(16.0, 24.0, 80)                   # 0.1-MHz channels centred on 16.05, 16.15, ...
    fm = f / 1e6
    hours = np.array([21.5, 23.5, 0.5, 6.5, 12.0]) * 3600 + 1796083200.0
    ranges = [{"fmin_mhz": 17.48, "fmax_mhz": 17.9},
              {"fmin_mhz": 21.92, "fmax_mhz": 22.08, "hours_utc": [22, 6]}]
    m = mask.static_mask(ranges, f, hours)
    always = m.all(axis=0)
    # channels touching 17.48-17.9: centres 17.45 (edge 17.5) ... 17.85 (edge 17.9)
    assert np.array_equal(np.flatnonzero(always), np.flatnonzero((fm + 0.05 > 17.48) & (fm - 0.05 < 17.9)))
    c22 = np.flatnonzero((fm > 21.9) & (fm < 22.1))
    assert m[:, c22].all(axis=1).tolist() == [False, True, True, False, False]
    assert not m[:, fm < 17.3].any()


def test_default_static_ranges_pass_the_config_check_and_bad_ones_do_not():
    assert check_static_ranges(DEFAULT_STATIC_RANGES) == []
    _, problems = validate({"station": {"name": "x", "latitude_deg": 1, "longitude_deg": 2},
                            "rfi": {"static_ranges": [{"fmin_mhz": 18, "fmax_mhz": 17},
                                                      {"fmin_mhz": 19, "fmax_mhz": 20, "hours_utc": [25, 3]},
                                                      {"fmin": 1}]}}, "st.toml")
    text = "\n".join(problems)
    assert "fmin_mhz < fmax_mhz" in text and "hours_utc" in text and "unknown key" in text
    assert all(p.startswith("st.toml") and "static_ranges" in p for p in problems)


def test_carrier_found_against_neighbours_and_remembered_while_it_fades():
    rng = np.random.default_rng(1)
    n = 200
    slope = np.linspace(0, 3, n)                       # a band-pass slope is not a carrier
    mem = mask.Occupancy(n, 30.0, 600.0, 0.5, 7.0)      # memory: 20 blocks
    seen, kept = [], []
    for k in range(90):
        level = slope + rng.normal(0, 0.01, n)
        level[77] += 0.5 if k < 30 else 0.02           # the carrier fades away after 30 blocks
        car = mask.carrier_channels(level, np.full(n, 0.01), 10, 6.0)
        masked = mem.update(car, 30.0 * k)
        seen.append(car[77]); kept.append(masked[77])
        assert masked.sum() <= 2                       # nothing else is called a carrier
    assert all(seen[:30]) and not any(seen[30:])
    # remembered for a while after fading (memory 0.785 after 30 blocks, halves in ~9), then released
    assert all(kept[30:36]) and not any(kept[50:])


def test_a_broadcaster_heard_every_evening_stays_masked_at_that_hour_while_it_fades_deeply():
    # A channel carrying a broadcaster 18-20 UTC every evening, in deep fades half of the
    # time in the last evening; quiet the rest of the day. After a week of evenings the
    # hour-of-day memory masks it through its fades at 18-20 UTC, and not at night.
    n, block = 60, 30.0
    mem = mask.Occupancy(n, block, 3600.0, 0.5, 3.0)
    for day in range(8):
        for k in range(int(86400 / block)):
            t = 86400.0 * day + block * k
            hour = (t / 3600.0) % 24
            on = 18 <= hour < 20
            faded = day == 7 and on and (k // 20) % 2 == 1        # ten-minute fades on the last day
            car = np.zeros(n, bool)
            car[33] = on and not faded
            got = mem.update(car, t)
            if day == 7 and on and faded:
                assert got[33]                                   # masked through the fade
            if day == 7 and 2 <= hour < 4:
                assert not got[33]                               # free at night
    assert mem.by_hour[19, 33] > 0.5 and mem.by_hour[3, 33] < 0.01 and mem.by_hour[19, 10] == 0


def test_what_the_mask_learned_survives_a_restart():
    n = 40
    a = mask.Occupancy(n, 30.0, 3600.0, 0.5, 7.0)
    car = np.zeros(n, bool); car[5] = True
    for k in range(500):
        a.update(car, 30.0 * k)
    b = mask.Occupancy(n, 30.0, 3600.0, 0.5, 7.0)
    b.load(a.state())
    assert np.allclose(b.recent, a.recent, atol=1e-4) and np.allclose(b.by_hour, a.by_hour, atol=1e-4)
    assert b.update(np.zeros(n, bool), 30.0 * 500)[5]          # still masked after the restart
    other = mask.Occupancy(n + 1, 30.0, 3600.0, 0.5, 7.0)
    other.load(a.state())                                       # another channel grid: ignored
    assert not other.recent.any()


def test_overlapping_and_out_of_band_static_ranges_are_named():
    base = {"station": {"name": "x", "latitude_deg": 1, "longitude_deg": 2}}
    _, problems = validate(dict(base, rfi={"static_ranges": [
        {"fmin_mhz": 17.4, "fmax_mhz": 17.9}, {"fmin_mhz": 17.8, "fmax_mhz": 18.0},
        {"fmin_mhz": 21.0, "fmax_mhz": 21.5, "hours_utc": [6, 12]}, {"fmin_mhz": 21.2, "fmax_mhz": 21.4,
                                                                      "hours_utc": [18, 22]}]}), "st.toml")
    assert len(problems) == 1 and "entry 2" in problems[0] and "overlaps entry 1" in problems[0]
    _, problems = validate(dict(base, rfi={"static_ranges": [{"fmin_mhz": 9.9, "fmax_mhz": 10.1}]}), "st.toml")
    assert len(problems) == 1 and "entry 1" in problems[0] and "outside the band" in problems[0]


def test_kurtosis_flags_non_gaussian_cells_only():
    rng = np.random.default_rng(2)
    sk = 1 + rng.normal(0, 0.05, (30, 50))
    sk[:, 7] = 3.0
    f = mask.kurtosis_flags(sk, np.ones(sk.shape, bool), 5.0)
    assert f[:, 7].all() and f.sum() < 30 + 3


def test_hour_quality_counts_masked_cells_and_gap_rows():
    from rxlog.spectrum import FLAG_GAP, FLAG_RFI
    t = 3600.0 * 10 + np.arange(7200.0)
    flags = np.zeros((7200, 4), np.uint8)
    flags[:100] = FLAG_GAP
    flags[200:300, 1] = FLAG_RFI
    q = mask.hour_quality(t, flags, 1.0)
    first = q[36000.0]
    assert first[0] == 100 and first[1] == (3600 - 100) * 4 and first[2] == 100 and first[3] == 3500
    assert q[39600.0] == [0.0, 3600 * 4, 0.0, 3600.0]
