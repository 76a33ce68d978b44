"""The detector's settings: the ``[detector]`` and ``[rfi]`` keys of the station config
(``Settings``, in physical units so they hold for any channel grid and cadence), the
default static interference ranges, and the fixed thresholds of the detection and
classification rules, each with its source.

Nothing here imports numpy or scipy: the config reads the defaults and the check of
``[rfi] static_ranges`` from this module when it loads.
"""

from __future__ import annotations

from dataclasses import dataclass

# -- static interference ranges ([rfi] static_ranges) -----------------------------------
# Frequency ranges masked always, or only between two UTC hours (``hours_utc = [a, b]``).
# The default masks only what a station always needs masked: the standard-frequency and
# time-signal allocation at 20 MHz (ITU Radio Regulations Article 5, 19.99-20.01 MHz;
# value from memory), whose carriers never leave. Everything else is learned from the
# data (rxlog.detect.mask: carriers now, over the last hour, and by hour of day), so the
# quiet channels between broadcasters stay in the sky a station records.
DEFAULT_STATIC_RANGES = [
    {"fmin_mhz": 19.99, "fmax_mhz": 20.01, "note": "standard frequency and time signals"},
]
# The Article 5 allocations of the broadcasting, amateur, maritime mobile and
# standard-frequency services in and near 16-24 MHz (values from memory: check them
# against the current table for your region). Masking them all throws away 40-45 % of the
# band; config/station.example.toml shows them as an example to opt in to.
ALLOCATION_RANGES = [
    {"fmin_mhz": 15.10, "fmax_mhz": 15.80, "note": "broadcasting (15 MHz band)"},
    {"fmin_mhz": 16.36, "fmax_mhz": 17.41, "note": "maritime mobile"},
    {"fmin_mhz": 17.48, "fmax_mhz": 17.90, "note": "broadcasting (16 m band)"},
    {"fmin_mhz": 18.068, "fmax_mhz": 18.168, "note": "amateur (17 m band)"},
    {"fmin_mhz": 18.90, "fmax_mhz": 19.02, "note": "broadcasting (15 m band)"},
    {"fmin_mhz": 19.99, "fmax_mhz": 20.01, "note": "standard frequency and time signals"},
    {"fmin_mhz": 21.00, "fmax_mhz": 21.45, "note": "amateur (15 m band)"},
    {"fmin_mhz": 21.45, "fmax_mhz": 21.85, "note": "broadcasting (13 m band)"},
    {"fmin_mhz": 22.00, "fmax_mhz": 22.855, "note": "maritime mobile"},
    {"fmin_mhz": 24.89, "fmax_mhz": 24.99, "note": "amateur (12 m band)"},
]


def check_static_ranges(value) -> list[str]:
    """Config check of ``[rfi] static_ranges``: a list of tables, one problem string each."""
    problems = []
    for i, r in enumerate(value):
        where = f"entry {i + 1}"
        if not isinstance(r, dict):
            problems.append(f"{where}: expected a table like {{fmin_mhz = 17.48, fmax_mhz = 17.9}}")
            continue
        unknown = set(r) - {"fmin_mhz", "fmax_mhz", "hours_utc", "note"}
        if unknown:
            problems.append(f"{where}: unknown key(s) {', '.join(sorted(unknown))} "
                            "(expected fmin_mhz, fmax_mhz, hours_utc, note)")
        lo, hi = r.get("fmin_mhz"), r.get("fmax_mhz")
        if not all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in (lo, hi)):
            problems.append(f"{where}: fmin_mhz and fmax_mhz must both be numbers (MHz)")
        elif not lo < hi:
            problems.append(f"{where}: expected fmin_mhz < fmax_mhz, got {lo} >= {hi}")
        hours = r.get("hours_utc")
        if hours is not None:
            if (not isinstance(hours, list) or len(hours) != 2
                    or not all(isinstance(h, (int, float)) and not isinstance(h, bool) and 0 <= h <= 24
                               for h in hours)):
                problems.append(f"{where}: hours_utc must be [start, end] in UTC hours 0-24, "
                                f"e.g. [18, 23] (or [22, 6] across midnight), got {hours!r}")
        if "note" in r and not isinstance(r["note"], str):
            problems.append(f"{where}: note must be a string")
    if not problems:
        problems += _overlaps(value)
    return problems


def _hours_meet(a, b) -> bool:
    """Whether two ``hours_utc`` settings (None: all day) share an hour of the day."""
    if a is None or b is None:
        return True
    def hours(h):
        lo, hi = float(h[0]), float(h[1])
        return {x for x in range(24) if (lo <= x < hi if lo <= hi else (x >= lo or x < hi))}
    return bool(hours(a) & hours(b))


def _overlaps(ranges) -> list[str]:
    """Entries that cover the same frequencies at the same hours: one of them is a
    mistake (a typo in an edge, or the same service listed twice)."""
    out = []
    for i, a in enumerate(ranges):
        for k in range(i + 1, len(ranges)):
            b = ranges[k]
            if (a["fmin_mhz"] < b["fmax_mhz"] and b["fmin_mhz"] < a["fmax_mhz"]
                    and _hours_meet(a.get("hours_utc"), b.get("hours_utc"))):
                out.append(f"entry {k + 1} ({b['fmin_mhz']}-{b['fmax_mhz']} MHz) overlaps entry {i + 1} "
                           f"({a['fmin_mhz']}-{a['fmax_mhz']} MHz) at the same hours; merge them or fix an edge")
    return out


def band_problems(ranges, fmin_mhz: float, fmax_mhz: float) -> list[str]:
    """Static ranges that miss the station's band entirely (a typo, or kHz for MHz)."""
    return [f"entry {i + 1} ({r['fmin_mhz']}-{r['fmax_mhz']} MHz) lies outside the band "
            f"{fmin_mhz:g}-{fmax_mhz:g} MHz ([spectra]); it would mask nothing"
            for i, r in enumerate(ranges)
            if isinstance(r, dict) and isinstance(r.get("fmin_mhz"), (int, float))
            and isinstance(r.get("fmax_mhz"), (int, float))
            and (r["fmax_mhz"] <= fmin_mhz or r["fmin_mhz"] >= fmax_mhz)]


# -- fixed thresholds of the rules --------------------------------------------------------
# A measured Type III drift within this factor of the law counts as a match. The
# observed scatter of decametric Type III drifts about the fitted law is roughly a factor
# of two (common practice).
TYPE3_FACTOR = 2.0
# Type II drift at decametric wavelengths: -0.02 to -0.5 MHz/s (common practice); near
# 20 MHz a lane drifts of order -0.01 to -0.1 MHz/s (Nelson & Melrose 1985, in Solar
# Radiophysics, review the lanes; values from memory), its harmonic lane as fast as the
# fundamental at the same frequency. The range takes both, down to -0.005 MHz/s for a slow
# lane of a shock moving along the limb.
TYPE2_DRIFT = (-0.5, -0.005)
# Jovian S-bursts drift at about -5 to -30 MHz/s (Zarka's reviews; from memory) and need
# millisecond resolution: never inferred from spectra coarser than this.
SBURST_DRIFT = (-40.0, -3.0)
SBURST_MAX_CADENCE_S = 0.01
# A Jovian storm is made of seconds-long L-bursts of scintillating intensity
# (../shared/domain.md), which widen the second-to-second scatter of a long event's
# blocks; a steady broadband rise (power-line arcing, a switching supply) keeps it, since
# the noise of a power in dB does not depend on its level. The slow path's "texture" is
# that scatter against the quiet quarter of the slow window. Threshold from rxlog's own
# simulated storms (1.5-2.6) and steady rises (1.0-1.1): a first setting, to check on
# real nights.
STORM_TEXTURE = 1.25
# The slow baseline is carried across a long event it has found (its blocks left out of
# the fit, the window reaching back for quiet blocks before it) for up to this long: a
# Type IV continuum lasts tens of minutes to hours (Dulk 1985, ARA&A 23, 169, reviews the
# types), a Jovian storm minutes to a couple of hours. An "event" longer than this is a
# change of the background (a new noise source, a changed antenna) and the baseline follows it.
BRIDGE_S = 4 * 3600.0
# The extent of a long event is where its excess exceeds this share of its peak (as well
# as the slow path's thresholds): the slow tail of a recovery or a decay is part of the
# background's noise, not of the event (the 10 % level is the usual edge of a decaying
# event's duration; common practice).
LONG_EDGE_FRACTION = 0.1
# A coarse channel already in a long event stays in it down to this share of
# ``slow_grow_db``: a 2-dB continuum's tenth is about that threshold, and its decay would
# otherwise be cut minutes early. rxlog's own setting, from its simulated Type IV decays.
FOLLOW_FRACTION = 2.0 / 3.0
# Narrowband cells masked by SumThreshold are reported as an event once they line up over
# this much of the band (a swept transmitter); less is a signal staying put, only masked.
LINE_MIN_MHZ = 0.5
# An impulse storm whose last pulses (this many, or half of them at least) fit a constant
# period, nine in ten within their own dwell, is a pulse train (an electric fence: about one pulse
# a second, from memory); its next pulses are masked where they fall, whatever surrounds them.
TRAIN_PULSES = 40
# -- interference kinds (rxlog.detect.classify's rfi rules) --
# Single-sideband voice and data take 2.4-3 kHz, a channel or two; Jovian L-bursts are
# hundreds of kHz to MHz wide (../shared/domain.md; common practice). An event no wider
# than this (or three channels) is a narrowband burst, or a carrier once it lasts
# CARRIER_MIN_S (broadcasters keep a frequency for hours; a first setting).
NARROWBAND_MHZ = 0.1
CARRIER_MIN_S = 600.0
# Switched broadband noise (rxlog.detect.steps): the band's median level steps by a
# fraction of a dB to several dB within one time step (domain.md, common practice). A step
# is a change of the median of STEP_HOLD_S of rows against the same before, of STEP_MIN_DB
# and STEP_SIGMA row-noise units at least, STEP_ABRUPT of it within two rows. A Type III
# passes a frequency in seconds, so 20 s of rows after it are back near the level before;
# a Type IV or a fadeout changes by far less than 0.7 of its depth in two steps. Values from
# rxlog's own simulation, a first setting.
STEP_HOLD_S = 20.0
STEP_MIN_DB = 0.1
STEP_SIGMA = 10.0
STEP_ABRUPT = 0.7
# An event with a step up within STEP_NEAR_S of its start or a step down as near its end
# (a long one: both), the step STEP_SHARE of its peak excess or more (a comb of switching
# harmonics peaks far above the band's median: 2-dB teeth over a 0.3-dB median step in
# rxlog's simulation), is switched broadband noise (rxlog's own simulation, a first setting; the slow path's
# blocks are 30 s long, so its edges are known to a block).
STEP_NEAR_S = 3.0
STEP_SHARE = 0.1
# Sferics and fence pulses last one time step at each frequency (a millisecond pulse;
# domain.md): an event whose excess sits for PULSE_SHARE or more in pieces lit for one step
# only at their frequency (the steps either side under PULSE_DARK of it), before any
# smoothing, is a bunch of impulses however the smoothing welds them. The test runs on
# rows of coarse channels (0.25 MHz), whose mean lifts a pulse of a few tenths of a dB
# well out of the noise of each cell. A Jovian L-burst
# lasts seconds at a frequency, a Type III decays over ~2 s at 20 MHz. From rxlog's own
# simulation, a first setting.
PULSE_SHARE = 0.7
PULSE_DARK = 0.3
# A sweeping receiver samples all channels of a dwell at once: a pulse shorter than a dwell
# lights them all, evenly (its f^-2 fall changes it by under 40 % over a 1.6-MHz dwell at
# 16 MHz), and none of the dwells sampled before or after. A row of an event is "in whole
# dwells" when each sub-band is lit (DWELL_LIT of the row's peak or more) or dark (under
# DWELL_DARK) over three quarters of it; an event short enough for a bunch of strokes
# (DWELL_MAX_S; multiple-stroke flashes last a second or two, domain.md) with DWELL_SHARE
# of its rows so is a bunch of pulses unless a Type III drift explains it. From rxlog's
# own simulation, a first setting.
DWELL_LIT = 0.5
DWELL_DARK = 0.3
DWELL_SHARE = 0.8
DWELL_MAX_S = 5.0


@dataclass(frozen=True)
class Settings:
    """Detector and RFI settings in physical units (seconds, MHz, dB, noise sigma)."""

    station: str = "station"
    block_s: float = 30.0
    fast_window_s: float = 240.0
    slow_window_s: float = 7200.0
    slow_freq_mhz: float = 0.25
    smooth_time_s: float = 2.0
    smooth_freq_mhz: float = 0.2
    seed_sigma: float = 6.0
    grow_sigma: float = 3.0
    min_peak_db: float = 0.2
    slow_seed_db: float = 0.3
    slow_grow_db: float = 0.15
    slow_seed_sigma: float = 6.0
    slow_grow_sigma: float = 3.0
    slow_min_s: float = 120.0
    merge_gap_s: float = 2.0
    merge_freq_mhz: float = 0.3
    max_event_s: float = 600.0
    episode_gap_s: float = 600.0
    sun_up_deg: float = 0.0
    jupiter_up_deg: float = 0.0
    # RFI
    static_ranges: tuple = ()
    carrier_width_mhz: float = 0.1
    carrier_sigma: float = 6.0
    carrier_memory_s: float = 3600.0
    carrier_fraction: float = 0.5
    occupancy_days: float = 7.0
    sumthreshold_chi1: float = 7.0
    sumthreshold_max_mhz: float = 0.05
    sumthreshold_max_s: float = 8.0
    kurtosis_sigma: float = 5.0
    impulse_sigma: float = 8.0
    impulse_gap_s: float = 60.0

    @classmethod
    def from_config(cls, cfg) -> "Settings":
        d = dict(cfg.get("detector", {}))
        r = dict(cfg.get("rfi", {}))
        kw = {k: v for k, v in d.items() if k in cls.__dataclass_fields__}
        kw.update({k: v for k, v in r.items() if k in cls.__dataclass_fields__})
        if "static_ranges" in kw:
            kw["static_ranges"] = tuple(dict(x) for x in kw["static_ranges"])
        kw["station"] = cfg.get("station", {}).get("name", "station")
        return cls(**kw)

    def replace(self, **kw) -> "Settings":
        return Settings(**{**self.__dict__, **kw})
