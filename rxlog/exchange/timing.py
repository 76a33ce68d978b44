"""All stations' events as arrays, and the clock reading each event gives: a time and its noise.

An event's clock reading is its peak, or for a drifting burst its peak moved along the
drift to a common frequency; its noise comes from the class of burst (how sharply it
marks a moment that all stations share) and from the station's cadence.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from rxlog.exchange.importer import EventList
from rxlog.store import CLASSES
from rxlog.timeutil import parse_iso

# Class name -> code (its index in rxlog.store.CLASSES); arrays carry the codes.
CLS = {c: i for i, c in enumerate(CLASSES)}
N_CLS = len(CLASSES)

# Timing noise of one event's clock time, seconds, by class (our own estimates from the
# physics of each kind of burst; common practice would be the same order):
# - solar_iii: onset at a common frequency; the emission reaches all stations within
#   ~10 ms, so the limit is how well the detector finds the onset.
# - jovian_l / jovian_s: peak; scintillation shifts the pattern by ~0.3-1 s between
#   stations hundreds of km apart (solar-wind speed over the station baseline).
# - solar_ii, solar_iv, fadeout: slow rises of seconds to minutes.
# rfi is never used as a clock: it is local by nature. Nor is unknown: an event the
# detector could not class is as likely local interference that happened to coincide
# with something at another station, and such chance pairs pulled simulated three-station
# nights' offsets by seconds; it still counts as a confirmation.
CLOCK_SIGMA_S = {"solar_iii": 0.2, "jovian_l": 1.0, "jovian_s": 1.0, "unknown": math.inf,
                 "solar_ii": 2.0, "solar_iv": 10.0, "fadeout": 20.0, "rfi": math.inf}
SIGMA = np.array([CLOCK_SIGMA_S[c] for c in CLASSES])
# A shared, systematic part of the timing error that does not average out over many events:
# the solar wind carries the scintillation pattern across the baseline in one direction
# for hours, so a night's L-bursts at one station are all shifted alike (~0.3-1 s, see
# above). Modelled as an error common to all of a station's events of the class: each
# member's variance grows by n * SYSTEMATIC^2 (n: the station's members of that class),
# so together they never weigh more than one reading of SYSTEMATIC seconds.
CLOCK_SYSTEMATIC_S = {"jovian_l": 0.5, "jovian_s": 0.5}
SYSTEMATIC = np.array([CLOCK_SYSTEMATIC_S.get(c, 0.0) for c in CLASSES])
# Drifting classes, timed at a common frequency along their drift; the rest by their peak.
ONSET_CLASSES = ("solar_iii", "solar_ii", "fadeout")


@dataclass
class Events:
    """All stations' events as flat arrays (index = global event number)."""

    station: np.ndarray     # int
    start: np.ndarray
    end: np.ndarray
    peak: np.ndarray
    fmin: np.ndarray
    fmax: np.ndarray
    drift: np.ndarray
    cls: np.ndarray         # int code of the effective class (the reviewer's label wins)
    snr: np.ndarray
    cadence: np.ndarray     # of the station, per event
    ev: list[dict]


def _effective_class(e: dict) -> str:
    """The reviewer's label where it names a class ("noise" counts as rfi), else the detector's class."""
    label = e.get("label")
    if label in CLS:
        return label
    if label == "noise":
        return "rfi"
    return e["class"]


def event_arrays(lists: list[EventList]) -> Events:
    """The events of all ``lists`` as one Events; station code k is ``lists[k]``."""
    evs, st, cad = [], [], []
    for k, el in enumerate(lists):
        c = el.station.get("cadence_s") or 1.0
        for e in el.events:
            evs.append(e)
            st.append(k)
            cad.append(c)

    def col(name):
        return np.array([np.nan if e.get(name) is None else float(e[name]) for e in evs], dtype=float)

    return Events(
        station=np.array(st, dtype=np.int64),
        start=_times(evs, "start_utc"), end=_times(evs, "end_utc"), peak=_times(evs, "peak_utc"),
        fmin=col("fmin_mhz"), fmax=col("fmax_mhz"), drift=col("drift_mhz_s"),
        cls=np.array([CLS[_effective_class(e)] for e in evs], dtype=np.int64),
        snr=col("snr"), cadence=np.array(cad, dtype=float), ev=evs)


def _times(evs: list[dict], key: str) -> np.ndarray:
    """ISO 8601 UTC strings as the importer leaves them ('...T..:..:..mmmZ') -> POSIX seconds."""
    text = [e[key] for e in evs]
    if all(len(t) == 24 and t[-1] == "Z" for t in text):
        try:  # numpy's ISO 8601 parser, for the 'YYYY-MM-DDTHH:MM:SS.mmm' rxlog writes
            return np.array([t[:-1] for t in text], dtype="datetime64[ms]").astype(np.int64) / 1000.0
        except ValueError:
            pass
    return np.array([parse_iso(t) for t in text], dtype=float)


def _onset_at(start, fmin, fmax, drift, cls, f_ref):
    """Onset time moved to frequency ``f_ref`` along the burst's drift.

    A drifting burst starts at its top frequency and reaches ``f_ref`` below it later.
    A Type III follows the decametric drift law of Alvarez & Haddock (1973, Solar Phys.
    29, 197), df/dt = -0.01 f^1.84 MHz/s, which integrates to a delay of
    (f_ref^-0.84 - fmax^-0.84) / (0.01 * 0.84) s; a measured drift rescales the law
    (its ratio to the law at the burst's mid frequency, kept within 0.5-2) because the
    drift rate itself changes across the band. Other drifting bursts (Type II) move
    linearly at their measured drift.
    """
    f = np.clip(f_ref, fmin, fmax)
    measured = np.isfinite(drift) & (drift < 0)
    with np.errstate(divide="ignore", invalid="ignore"):
        f_mid = 0.5 * (fmin + fmax)
        ratio = np.where(measured, -drift / (0.01 * f_mid ** 1.84), 1.0)
        ratio = np.clip(np.nan_to_num(ratio, nan=1.0), 0.5, 2.0)
        dt_law = (f ** -0.84 - fmax ** -0.84) / (0.01 * 0.84) / ratio
        dt_lin = np.where(measured, (f - fmax) / drift, 0.0)
    dt = np.where(cls == CLS["solar_iii"], dt_law, dt_lin)
    return start + np.where(np.isfinite(dt), dt, 0.0)


def clock_time(E: Events, idx, cls, f_ref):
    """Time of each event (index array ``idx``) that serves as its clock reading.

    Drifting bursts are read at their peak, moved along the drift to the group's common
    frequency like an onset. The listed start is where the detector's threshold was
    crossed, which depends on each station's noise and interference (seen: 3-7 s apart
    between simulated stations for one Type III while the peaks agreed to 0.1 s); the
    peak does not, and the rise from onset to peak is the same burst at every station.
    """
    drifting = np.isin(cls, [CLS[c] for c in ONSET_CLASSES])
    t_on = _onset_at(E.peak[idx], E.fmin[idx], E.fmax[idx], E.drift[idx], cls, f_ref)
    return np.where(drifting, t_on, E.peak[idx])


def member_sigma(E: Events, idx, cls):
    # Clock-reading noise: the class's timing noise and the station's cadence
    # (uniform quantisation: cadence / sqrt(12)).
    return np.sqrt(SIGMA[cls] ** 2 + E.cadence[idx] ** 2 / 12.0)
