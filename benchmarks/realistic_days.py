"""The realistic days of the detection-accuracy benchmark: whole days at a club site
where Jupiter is up at night, with every kind of interference at once (the simulator's
'site' category), and a quiet-rural day for the mask.

* realistic-day-1 (tune on it): the example station (47.5 N), 24 h from 05:00 UTC on
  19 January 2027. Jovian storms in the night's source-region passages (non-Io-A in the
  morning, Io-A and Io-C the next night, the Io-A one under a thunderstorm's sferics);
  flare A by day: a group of six Type III bursts, a band-split patchy Type II drifting
  slowly down from 23.5 MHz (fundamental, then harmonic lane), then a 2.5-h Type IV;
  flare B: a 45-min fadeout; three isolated weak Type III bursts. A neighbour's
  appliance raises the band for 14 min just before the flare, a heat pump cycles
  through the day and evening, LED lights burn in the evening.
* realistic-day-2 (held out): a southern site (27.6 S, 152.9 E) in its summer, 24 h from
  19:00 UTC on 8 February 2027 (05 h local): flare C (five Type IIIs, a Type II seen in
  its harmonic lane from 24 MHz down, a 2-h Type IV), flare D (a 1-h fadeout), three
  isolated Type IIIs, an Io-B and a non-Io-A storm; afternoon and evening thunderstorms,
  a 12-min appliance step in the morning.
* quiet-rural-day: the example station, 24 h from 05:00 UTC on 26 January 2027, with
  nothing but quiet-rural interference, an Io-A storm and three Type III bursts.

Region passages, Jupiter above 15 deg and the Sun below -6 deg at the storms, and the
Sun above 10 deg at the solar events, were looked up with rxlog.sky.tags for these
stations and dates. The seeds were picked so that every kind of interference occurs
(the benchmark checks it: ``require_every_kind``).
"""

from __future__ import annotations

from dataclasses import dataclass, field

from rxlog.errors import RxlogError
from rxlog.sim.events import RFI_KINDS
from rxlog.timeutil import parse_iso

SOUTH_SITE = {"name": "south-site", "latitude_deg": -27.6, "longitude_deg": 152.9,
              "timezone": "Australia/Brisbane"}


@dataclass
class Scenario:
    """One simulated stretch: where (``station``: [station] keys to change), when, which
    interference, what is injected, and the seed of everything else."""
    name: str
    start: float
    hours: float
    rfi: str
    inject: list
    seed: int = 3
    station: dict = field(default_factory=dict)


def storm(region: str, t: str, minutes: float, peak_db: float) -> dict:
    return {"class": "jovian_l", "t": t, "duration_s": 60.0 * minutes, "peak_excess_db": peak_db,
            "region": region, "episode": f"{region} storm {t[11:16]}"}


def type3_group(seq: str, t: str, offsets_s, peaks_db) -> list[dict]:
    t0 = parse_iso(t)
    return [{"class": "solar_iii", "t": t0 + dt, "peak_excess_db": p, "episode": f"{seq} Type III group",
             "episode_kind": "type_iii_group", "sequence": seq} for dt, p in zip(offsets_s, peaks_db)]


def isolated(t: str, peak_db: float) -> dict:
    return {"class": "solar_iii", "t": t, "peak_excess_db": peak_db, "episode": f"Type III {t[11:19]}"}


def flare(seq: str, iii: list[dict], ii: dict, iv: dict) -> list[dict]:
    """A flare's sequence: the Type III group, then the Type II, then the Type IV."""
    return iii + [dict(ii, **{"class": "solar_ii", "episode": f"{seq} Type II", "sequence": seq}),
                  dict(iv, **{"class": "solar_iv", "episode": f"{seq} Type IV", "sequence": seq})]


def fadeout(seq: str, t: str, minutes: float, depth_db: float) -> dict:
    return {"class": "fadeout", "t": t, "duration_s": 60.0 * minutes, "peak_excess_db": -depth_db,
            "episode": f"{seq} fadeout", "sequence": seq}


def realistic_days():
    """The realistic days and the quiet-rural day, as Scenarios."""
    day1 = (flare("flare A", type3_group("flare A", "2027-01-19T09:30:00Z", (0, 14, 31, 52, 80, 118), (2, 8, 1, 4, 0.5, 2)),
                  {"t": "2027-01-19T09:33:30Z", "fmax_mhz": 23.5, "drift_mhz_s": -0.025, "duration_s": 900.0,
                   "split_mhz": 0.6, "patchy": True, "peak_excess_db": 4.0},
                  {"t": "2027-01-19T09:42:00Z", "duration_s": 9000.0, "peak_excess_db": 2.0})
            + [fadeout("flare B", "2027-01-19T12:55:00Z", 45, 4.0),
               isolated("2027-01-19T08:50:00Z", 1.0), isolated("2027-01-19T12:25:00Z", 2.0),
               isolated("2027-01-19T14:30:00Z", 0.5),
               storm("non-Io-A", "2027-01-19T05:40:00Z", 45, 2.0), storm("Io-A", "2027-01-20T01:40:00Z", 70, 4.0),
               storm("Io-C", "2027-01-20T03:50:00Z", 35, 1.0)])
    yield Scenario("realistic-day-1", parse_iso("2027-01-19T05:00:00Z"), 24.0, "site", day1, seed=18)
    day2 = (flare("flare C", type3_group("flare C", "2027-02-08T23:10:00Z", (0, 9, 25, 47, 71), (1, 4, 2, 8, 0.5)),
                  {"t": "2027-02-08T23:13:00Z", "fmax_mhz": 12.0, "drift_mhz_s": -0.04, "duration_s": 720.0,
                   "split_mhz": 0.8, "patchy": True, "peak_excess_db": 2.0},
                  {"t": "2027-02-08T23:25:00Z", "duration_s": 7200.0, "peak_excess_db": 4.0})
            + [fadeout("flare D", "2027-02-09T03:00:00Z", 60, 2.0),
               isolated("2027-02-08T21:00:00Z", 4.0), isolated("2027-02-09T02:10:00Z", 0.5),
               isolated("2027-02-09T05:30:00Z", 1.0),
               storm("Io-B", "2027-02-09T15:10:00Z", 90, 8.0), storm("non-Io-A", "2027-02-09T17:45:00Z", 35, 0.5)])
    yield Scenario("realistic-day-2", parse_iso("2027-02-08T19:00:00Z"), 24.0, "site", day2, seed=21,
                   station=SOUTH_SITE)
    quiet = [storm("Io-A", "2027-01-27T02:20:00Z", 90, 2.0), isolated("2027-01-26T09:00:00Z", 1.0),
             isolated("2027-01-26T11:30:00Z", 2.0), isolated("2027-01-26T13:40:00Z", 4.0)]
    yield Scenario("quiet-rural-day", parse_iso("2027-01-26T05:00:00Z"), 24.0, "quiet-rural", quiet, seed=5)


def require_every_kind(name: str, truth: list[dict]) -> None:
    """A 'site' day must hold every kind of interference, or it measures less than it says."""
    missing = set(RFI_KINDS) - {r["rfi_kind"] for r in truth if r["class"] == "rfi"}
    if missing:
        raise RxlogError(f"{name}: no {', '.join(sorted(missing))} interference in the truth; pick another seed")
