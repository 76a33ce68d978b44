"""The simulator's interference, kind by kind, as the 'site' category plans it: each kind
drawn alone, noise-free, on the archive grid of a 1024-channel station sweeping the
band once a second (7.8-kHz channels, five tunings of ~0.2 s), and the day's plan
itself. Ranges are the simulator's stated ones (common practice, marked in
rxlog/sim/interference_plan.py)."""

import math

import numpy as np
import pytest

from rxlog.sim.events import RFI_KINDS, Site
from rxlog.sim.interference import switched_noise
from rxlog.sim.interference_plan import plan_site_day
from rxlog.sim.render import render
from rxlog.sim.spectra import SpectralRun
from rxlog.sim.truth import interference_share
from rxlog.station.config import config_from_text
from rxlog.timeutil import parse_iso

DAY = parse_iso("2027-01-19T00:00:00Z")
WINTER = parse_iso("2026-12-01T00:00:00Z")
SEED = 1                    # this station's 'site' day then holds every kind (sferics 01-03 h and 19-22 h UTC)


@pytest.fixture(scope="module")
def day(tmp_path_factory):
    cfg = config_from_text("""
[station]
name = "interference-test"
latitude_deg = 47.5
longitude_deg = 8.7
[spectra]
channels = 1024
""", tmp_path_factory.mktemp("rfi") / "station.toml")
    return SpectralRun(cfg, DAY, 24.0, seed=SEED, rfi="site", include=("rfi",), noise=False)


def _drawn(run, e, t0, t1):
    """Excess (dB over the background without it) of event ``e`` alone, rows t0..t1 (POSIX s)."""
    i0, i1 = int((t0 - run.start) / run.cadence), int(math.ceil((t1 - run.start) / run.cadence))
    total, background = render(run.model, run.grid(max(0, i0), min(run.n_rows, i1)), events=[e])
    return 10 * np.log10(total / background), total - background


def _kind(run, kind, what=""):
    out = [e for e in run.model.events if e.rfi_kind == kind and e.reason.startswith(what)
           and run.start <= e.t_start and e.t_end <= run.end]
    assert out, f"no {kind} {what} in the test day"
    return out


def test_a_sferic_stroke_is_one_time_step_of_one_sweep_dwell_at_every_channel_falling_with_frequency(day):
    run = day
    lone = [e for e in _kind(run, "impulse", "sferic")]
    lit = 0
    for e in lone[:20]:
        db, excess = _drawn(run, e, e.t_start - 3, e.t_start + 3)
        rows, cols = np.nonzero(db > 1e-6)
        if rows.size == 0:
            continue                                # fell between two dwells (the retune)
        lit += 1
        assert np.unique(rows).size == 1            # milliseconds long: one time step
        offsets = np.unique(run.layout.start_s[cols])
        assert offsets.size == 1                    # one sweep dwell ...
        assert cols.size == np.count_nonzero(run.layout.start_s == offsets[0])   # ... every channel of it
        f = run.freq[cols]
        p = excess[rows[0], cols] / run.model.bandpass(f)
        slope = np.polyfit(np.log(f), np.log(p), 1)[0]
        assert slope == pytest.approx(-2.0, abs=0.01)   # power falls as f^-2
    assert lit >= 5


def test_sferics_come_in_multiple_stroke_flashes_several_a_minute_mostly_at_night():
    site = Site(16e6, 24e6, 47.5, 8.7)
    flashes = []
    for d in range(60):                              # two winter months
        rng = np.random.default_rng([5, d])
        flashes += [e for e in plan_site_day(rng, WINTER + 86400.0 * d, site, lambda fc, x: 1.0, 1.0)
                    if e.reason.startswith("sferic")]
    starts = np.array([e.t_start for e in flashes])
    local = np.mod(starts / 3600 + 8.7 / 15, 24)
    night = (local >= 19) | (local < 5)
    assert night.mean() > 0.6                                    # mostly at night
    strokes = np.array([len(e.params["times"]) for e in flashes])
    assert np.mean(strokes >= 2) > 0.8                           # most flashes: several strokes ...
    spans = np.array([e.params["times"][-1] - e.params["times"][0] for e in flashes])
    assert np.median(spans[strokes >= 2]) < 1.0 and np.percentile(spans, 95) < 2.0    # ... within 1-2 s
    minute = np.floor(starts / 60)
    _, per_minute = np.unique(minute, return_counts=True)
    assert np.median(per_minute) >= 2                            # active minutes: several flashes
    # energies: mostly faint, a few far above the background (dN/dq ~ q^-1.5 from 0.01 to 30)
    q = np.array([e.params["t_imp"] * e.params["width"] for e in flashes])
    assert 0.02 < np.median(q) < 0.2 and (q > 3).mean() > 0.005


def test_an_ssb_burst_is_one_or_two_channels_wide_and_keyed_in_syllables_and_overs(day):
    run = day
    voice = _kind(run, "narrowband_burst", "voice")
    heard = 0
    for e in voice:
        db, _ = _drawn(run, e, e.t_start, min(e.t_end, e.t_start + 600))
        if db.max() < 3:
            continue                                 # its path is closed (night)
        heard += 1
        on = db > 0.1
        assert np.count_nonzero(on.any(axis=0)) in (1, 2)        # 2.4-2.8 kHz: one or two channels
        rows = on.any(axis=1)
        assert 0.1 < rows.mean() < 0.9                           # speech and pauses, overs in turn
        edges = np.flatnonzero(np.diff(rows.astype(int)) != 0)
        assert edges.size >= 10                                  # on and off many times
        if heard >= 3:
            break
    assert heard >= 3
    data = _kind(run, "narrowband_burst", "data")
    assert all(0.5e3 <= e.f_hi - e.f_lo <= 3e3 for e in data)
    inside = [e for e in voice if 18.068e6 <= e.f_lo and e.f_hi <= 18.168e6 or 21.0e6 <= e.f_lo and e.f_hi <= 21.45e6]
    assert 0 < len(voice) - len(inside) < len(inside)            # mostly in the amateur bands, some outside


def test_an_appliance_step_rises_and_falls_within_one_time_step_over_the_whole_band(day):
    run = day
    steps = _kind(run, "switched_broadband")
    for e in steps:
        db, _ = _drawn(run, e, e.t_start - 10, e.t_start + 10)
        rising = db[:, run.layout.covered].mean(axis=1)
        before, after = rising[:5], rising[-5:]
        assert np.all(before == 0) and np.all(after > 0.1)       # off, then on: a fraction of a dB and more
        assert np.count_nonzero((rising > 0) & (rising < after.min() * 0.99)) <= 1   # at most one step between
        assert np.all(db[-1, run.layout.covered] > 0)            # every channel of the band rises
        db, _ = _drawn(run, e, e.t_end - 10, e.t_end + 10)
        assert np.all(db[-5:] == 0)                              # and drops as suddenly
    assert {e.params["f_sw"] is None for e in steps} == {True, False}   # flat ones and combs


def test_a_comb_has_its_teeth_at_the_switching_frequency_harmonics(day):
    run = day
    (e, *_) = [x for x in _kind(run, "switched_broadband") if x.params["f_sw"]]
    db, _ = _drawn(run, e, e.t_start + 60, e.t_start + 62)
    row = db[0]
    f = run.freq
    k = np.round(f / e.params["f_sw"])
    at_tooth = np.abs(f - k * e.params["f_sw"]) < (f[1] - f[0]) / 2
    assert np.median(row[at_tooth]) > 2 * np.median(row[~at_tooth])


def test_a_sounder_sweeps_upward_at_a_tenth_of_a_megahertz_a_second_every_few_minutes(day):
    run = day
    sweeps = _kind(run, "sweep")
    heard = [e for e in sweeps if _drawn(run, e, e.t_start, e.t_end)[0].max() > 3]
    assert heard
    e = heard[0]
    db, _ = _drawn(run, e, e.t_start, e.t_end)
    t = np.arange(db.shape[0]) * run.cadence
    lit = db.max(axis=1) > 1
    f_peak = run.freq[np.argmax(db, axis=1)] / 1e6
    rate = np.polyfit(t[lit], f_peak[lit], 1)[0]
    assert rate == pytest.approx(0.1, rel=0.05)                  # MHz/s, upward
    assert np.median(np.count_nonzero(db > 1, axis=1)[lit]) <= 4  # a narrow track
    starts = np.sort([x.params["t0"] for x in sweeps if x.params["p_khz"] == e.params["p_khz"]])   # its sounder
    gaps = np.unique(np.round(np.diff(starts)))
    assert set(gaps) <= {300.0, 600.0, 900.0, 1800.0}              # each sounder keeps its own repetition


def test_broadcasters_switch_on_the_hour_and_fade_deeply_and_selectively(day):
    run = day
    bc = [e for e in _kind(run, "carrier", "broadcast")]
    assert all(e.t_start % 3600 == 0 and e.t_end % 3600 == 0 for e in bc)
    noon = [e for e in bc if e.t_start <= DAY + 11 * 3600 < e.t_end and e.f_lo < 19.1e6]
    assert noon
    e = noon[0]
    _, p = _drawn(run, e, DAY + 11 * 3600, DAY + 12 * 3600)
    col = int(np.argmax(p.mean(axis=0)))
    x = p[:, col] / p[:, col].mean()
    assert np.mean(x < 0.1) > 0.02                               # deep fades (Rayleigh: 10 % below -10 dB)
    assert 0.6 < x.std() < 1.4                                   # Rayleigh intensity: std / mean = 1
    # selective: two frequencies 3 kHz apart in the signal fade differently
    f = np.array([[e.params["fc"] - 1.5e3, e.params["fc"] + 1.5e3]])
    t = DAY + 11 * 3600 + np.arange(3600.0)[:, None]
    fine = e.shape(np.broadcast_to(t, (3600, 2)), f, 1.0, 500.0)
    assert np.corrcoef(fine[:, 0], fine[:, 1])[0, 1] < 0.8


def test_higher_bands_are_heard_mostly_by_day(day):
    rows = [r for r in day.truth_rows() if r["rfi_kind"] == "carrier" and r["reason"].startswith("broadcast")
            and r["fmin_mhz"] > 21.4]
    hours = [(parse_iso(r["start_utc"]) - DAY) / 3600 for r in rows]
    assert hours and all(7 <= h < 17 for h in hours)             # 08-18 h local in January


def test_local_spurs_are_steady_single_channel_lines(day):
    run = day
    spurs = [e for e in run.model.events if e.rfi_kind == "spur" and run.model.fmin < e.params["fc"] < run.model.fmax]
    assert spurs
    for e in spurs:
        db, _ = _drawn(run, e, DAY + 3600, DAY + 3660)
        cols = np.flatnonzero(db.max(axis=0) > 0)
        assert cols.size == 1
        assert np.ptp(db[:, cols[0]]) < 1e-3                     # steady (the background drifts by less)


def test_every_interference_truth_row_names_its_kind_and_every_sky_row_its_episode(tmp_path, day):
    rows = day.truth_rows()
    assert {r["rfi_kind"] for r in rows if r["class"] == "rfi"} == set(RFI_KINDS)
    inject = [{"class": "solar_iii", "t": DAY + 36000 + k, "peak_excess_db": 3.0, "episode": "group",
               "episode_kind": "type_iii_group", "sequence": "flare"} for k in (0, 20)]
    inject.append({"class": "solar_iv", "t": DAY + 36100, "peak_excess_db": 3.0, "episode": "iv", "sequence": "flare",
                   "duration_s": 7200.0})
    run = SpectralRun(day.cfg, DAY + 35900, 2.5, seed=SEED, rfi="site", include=("rfi",), noise=False,
                      inject=inject)
    sky = [r for r in run.truth_rows() if r["class"] != "rfi"]
    assert sorted((r["class"], r["episode"], r["episode_kind"], r["sequence"], r["rfi_kind"]) for r in sky) == \
        [("solar_iii", "group", "type_iii_group", "flare", "")] * 2 + [("solar_iv", "iv", "type_iv", "flare", "")]
    (iv,) = [r for r in sky if r["class"] == "solar_iv"]
    assert parse_iso(iv["end_utc"]) - parse_iso(iv["start_utc"]) == pytest.approx(7200.0, abs=1.0)


def test_interference_share_counts_the_cells_interference_lifts_by_over_1_db(day):
    run = SpectralRun(day.cfg, DAY + 43200, 1.0, seed=SEED, rfi="quiet-rural", include=(), noise=False)
    assert interference_share(run)["share"] == 0.0                  # the man-made floor is no interference
    site = run.model.site
    # 6 dB over the whole band for the first quarter of the hour
    step = switched_noise("test step", run.start, run.start + 900, run.model.broadband_ref() * 3, 2.5, site)
    run.model.events.append(step)
    got = interference_share(run)
    assert got["share"] == pytest.approx(0.25, abs=1 / 3600)
    assert list(got["hours"]) == [DAY + 43200]
    assert interference_share(run, stride=4)["share"] == pytest.approx(0.25, abs=0.01)
