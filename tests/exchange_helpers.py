"""Shared makers for the exchange and comparison tests: station configs, event lists built
from one invented sky as several stations would report it, and Type III dynamic spectra."""

import numpy as np

from rxlog.exchange.columns import FORMAT_NAME, FORMAT_VERSION
from rxlog.exchange.importer import EventList
from rxlog.spectrum import DynamicSpectrum, channel_grid
from rxlog.station.config import config_from_text
from rxlog.store import make_event_id
from rxlog.timeutil import iso

T0 = 1_800_000_000.0  # 2027-01-15T08:00:00Z

EMPTY = {"label": None, "cml3_deg": None, "io_phase_deg": None, "source_region": None,
         "jupiter_alt_deg": None, "sun_alt_deg": None, "peak_excess_db": 3.0, "confidence": 0.8}


def station_config(tmp_path, name="st-a", lat=47.5, lon=8.7):
    return config_from_text(f"""
[station]
name = "{name}"
latitude_deg = {lat}
longitude_deg = {lon}
elevation_m = 450.0
antenna = "dual dipole, E-W"
operator_contact = "keeper@example.invalid"

[spectra]
fmin_mhz = 16.0
fmax_mhz = 24.0
channels = 1024
cadence_s = 1.0

[storage]
root = "data"
""", tmp_path / name / "station.toml")


def event(station, peak, fmin=18.0, fmax=22.0, cls="solar_iii", dur=6.0, **kw):
    ev = dict(EMPTY, station=station, event_id=make_event_id(station, peak, fmin, fmax),
              start_utc=iso(peak - dur / 2), end_utc=iso(peak + dur / 2), peak_utc=iso(peak),
              fmin_mhz=fmin, fmax_mhz=fmax, snr=12.0, drift_mhz_s=None, **{"class": cls})
    ev.update(kw)
    return ev


def list_header(name, cadence=1.0, band=(16.0, 24.0)):
    return {"format": FORMAT_NAME, "format_version": FORMAT_VERSION, "station": name, "latitude_deg": 45.0,
            "longitude_deg": 7.0, "elevation_m": 100.0, "receiver": "simulated", "clock_sync": "unknown",
            "band_fmin_mhz": band[0], "band_fmax_mhz": band[1], "channels": 1024, "cadence_s": cadence}


def ah_delay(f_top, f):
    """Seconds for a Type III to drift from f_top down to f (MHz) under the decametric drift law
    of Alvarez & Haddock (1973, Solar Phys. 29, 197): df/dt = -0.01 f^1.84 MHz/s."""
    return (f ** -0.84 - f_top ** -0.84) / (0.01 * 0.84)


def sky(rng, days=3.0, n3=60, nl=80, n2=8):
    """Invented sky events: Type III bursts (24 -> 16 MHz), Jovian L-burst stretches, Type II bursts."""
    ev = []
    for t in np.sort(rng.uniform(T0, T0 + days * 86400, n3)):
        ev.append(dict(kind="solar_iii", onset=t, ftop=24.0, fbot=16.0, dur=float(rng.uniform(4, 10))))
    for t in np.sort(rng.uniform(T0, T0 + days * 86400, nl)):
        f0 = float(rng.uniform(16, 19))
        ev.append(dict(kind="jovian_l", onset=t, ftop=f0 + float(rng.uniform(2, 5)), fbot=f0,
                       dur=float(rng.uniform(5, 40))))
    for t in np.sort(rng.uniform(T0, T0 + days * 86400, n2)):
        ev.append(dict(kind="solar_ii", onset=t, ftop=22.0, fbot=17.0, dur=float(rng.uniform(200, 600))))
    return ev


def station_list(rng, name, sky_events, offset, band=(16.0, 24.0), cadence=1.0, p_detect=0.85,
                 n_rfi=100, days=3.0, onset_noise=0.15, scint=0.6, l_lag=0.0, truth=None):
    """What one station would list for ``sky_events``, by a clock ``offset`` s ahead of true time.

    Each sky event is detected with probability ``p_detect``; times are measured on the
    station's own archive rows (``cadence``, random phase) with ``onset_noise`` (Type III)
    or scintillation jitter ``scint`` plus a common lag ``l_lag`` (L-bursts: the pattern
    reaches stations ~0.3-1 s apart) or 2 s (Type II). ``n_rfi`` local interference events are added. With a
    ``truth`` dict, records which sky event (index) each listed event came from.
    """
    phase = float(rng.uniform(0, cadence))

    def row(t):  # the first archive row at or after t, by the station's clock
        return np.ceil((t - phase) / cadence) * cadence + phase

    listed = []
    for k, s in enumerate(sky_events):
        if rng.random() > p_detect:
            continue
        ftop, fbot = min(s["ftop"], band[1]), max(s["fbot"], band[0])
        if ftop <= fbot:
            continue
        if s["kind"] == "solar_iii":
            t_on = s["onset"] + ah_delay(s["ftop"], ftop) + rng.normal(0, onset_noise)
            drift = -0.01 * ((ftop + fbot) / 2) ** 1.84 * (1 + rng.normal(0, 0.05))
            start = row(t_on + offset)
            end, peak = start + s["dur"] + ah_delay(ftop, fbot), start + 1.0
        elif s["kind"] == "jovian_l":
            start = row(s["onset"] + l_lag + rng.normal(0, scint) + offset)
            end, peak, drift = start + s["dur"], start + s["dur"] / 2, None
        else:
            start = row(s["onset"] + rng.normal(0, 2.0) + offset)
            end, peak, drift = start + s["dur"], start + 60.0, -0.1
        listed.append((start, end, peak, fbot, ftop, s["kind"], drift, k))
    for t in rng.uniform(T0, T0 + days * 86400, n_rfi):
        f, d = float(rng.uniform(*band)), float(rng.uniform(1, 60))
        listed.append((t, t + d, t + d / 2, f, f + 0.05, "rfi" if rng.random() < 0.8 else "unknown", None, -1))
    rows = []
    for start, end, peak, fbot, ftop, kind, drift, k in sorted(listed):
        ev = dict(EMPTY, station=name, event_id=make_event_id(name, peak, fbot, ftop), start_utc=iso(start),
                  end_utc=iso(end), peak_utc=iso(peak), fmin_mhz=round(fbot, 3), fmax_mhz=round(ftop, 3),
                  snr=float(rng.uniform(5, 30)), drift_mhz_s=drift, **{"class": kind})
        rows.append(ev)
        if truth is not None:
            truth[ev["event_id"]] = k
    return EventList(station=list_header(name, cadence, band), events=rows, path=name, format="memory")


def type3_spectrum(rng, onsets, amps, offset, phase, chan_offset_s, hours=1.0, n_chan=256, noise_db=0.1):
    """A station's dynamic spectrum (1-s rows, 16-24 MHz) of Type III bursts with true onsets at 24 MHz.

    Row i of the station's clock starts at T0 + phase + i; channel c is sampled
    ``chan_offset_s[c]`` later (a sweeping receiver). Each burst at frequency f arrives
    ``ah_delay(24, f)`` after its onset, rises in ~0.3 s and decays in 1.5 s.
    """
    f = channel_grid(16.0, 24.0, n_chan)
    n_t = int(hours * 3600)
    t0 = T0 + phase
    clock = t0 + np.arange(n_t)[:, None] + np.asarray(chan_offset_s)[None, :]
    lin = np.ones((n_t, n_chan))
    for onset, amp in zip(onsets, amps):
        i0 = max(int(onset - t0 + offset) - 5, 0)
        i1 = min(i0 + 40, n_t)
        x = clock[i0:i1] - offset - (onset + ah_delay(24.0, f[None, :] / 1e6))
        prof = np.where(x < 0, np.exp(-0.5 * (np.minimum(x, 0) / 0.3) ** 2), np.exp(-np.maximum(x, 0) / 1.5))
        lin[i0:i1] += amp * prof
    p = 10 * np.log10(lin) + rng.normal(0, noise_db, lin.shape)
    return DynamicSpectrum(power_db=p.astype(np.float32), t0=t0, cadence_s=1.0, freq_hz=f,
                           chan_offset_s=np.asarray(chan_offset_s, dtype=np.float32))


def type3_events(rng, name, onsets, offset, phase, onset_noise=0.15):
    """The event list a detector on 1-s rows would give for those bursts (onsets to the row)."""
    rows = []
    for onset in onsets:
        start = np.ceil(onset + offset + rng.normal(0, onset_noise) - phase) + phase
        rows.append(dict(EMPTY, station=name, event_id=make_event_id(name, start + 1, 16, 24), start_utc=iso(start),
                         end_utc=iso(start + 6 + ah_delay(24, 16)), peak_utc=iso(start + 1), fmin_mhz=16.0,
                         fmax_mhz=24.0, snr=20.0, drift_mhz_s=None, **{"class": "solar_iii"}))
    return EventList(station=list_header(name), events=rows, path=name, format="memory")
