"""Classification: a class, a confidence and a one-line reason for each event, by rules.

``classify(features, settings)`` reads the features measured on the event
(rxlog.detect.features) and its sky context (Sun and Jupiter altitude, Io source region).
The rules go from the event's path (line, impulse, slow) through interference
morphology to natural bursts; the first rule that matches decides. The thresholds are
named in rxlog.detect.settings with their sources.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from rxlog.detect.drift import ah_drift
from rxlog.detect.settings import (
    CARRIER_MIN_S,
    DWELL_MAX_S,
    DWELL_SHARE,
    NARROWBAND_MHZ,
    PULSE_SHARE,
    SBURST_DRIFT,
    SBURST_MAX_CADENCE_S,
    STEP_SHARE,
    STORM_TEXTURE,
    TYPE2_DRIFT,
    TYPE3_FACTOR,
    Settings,
)

Verdict = tuple[str, float, str]

# The kinds of interference an ``rfi`` event names (its ``rfi_kind`` and the first word of
# its reason): impulses (sferics, fence and arcing pulses) alone or in trains;
# narrowband bursts (single-sideband voice, data); switched broadband noise (appliances,
# power supplies); swept sounders; carriers; broadband noise that rises without a step;
# and signals flagged only by their spectral kurtosis.
RFI_KINDS = ("impulse", "impulse_train", "narrowband_burst", "switched_broadband", "sweep", "carrier",
             "broadband_noise", "non_gaussian")


@dataclass(frozen=True)
class _Sky:
    """Whether the Sun and Jupiter are up (None: no ephemeris), the Io source region,
    and the words for the reason."""

    sun_up: bool | None
    jup_up: bool | None
    region: str | None
    sun_txt: str
    jup_txt: str


def classify(f: dict, s: Settings) -> Verdict:
    """Rule-based class, confidence (0-1) and a one-line reason from features and context.

    ``f`` holds the measured features (rxlog.detect.features) and the context: sun_alt,
    jupiter_alt, source_region (None when no ephemeris), band_mhz (covered band width)
    and cadence_s. Rules and their thresholds:
    Type III -- resolved negative drift within a factor TYPE3_FACTOR of Alvarez & Haddock
    1973 at the event's centre frequency, seconds at fixed frequency, Sun up;
    Type II -- drift in TYPE2_DRIFT (down to twice its faster end), lasting several time
    steps at fixed frequency, Sun up, from either path; Type IV -- long (10 min or
    more) broadband (half the band or more) positive continuum, Sun up; fadeout --
    band-wide drop with the Sun up; Jovian L -- Jupiter up, the rest of the morphology
    natural (in an Io source region raises the confidence); rfi, with its kind
    (RFI_KINDS, see ``rfi_kind``) -- impulsive (every channel at once for a time step or
    two, or, judged before smoothing, pieces lit for one step only or rows lit in whole
    sweep dwells), switched broadband noise (a step of the band's level at an edge,
    rxlog.detect.steps; tried first on long events too), swept narrowband lines
    (ionosonde chirps, any upward drift), narrowband signals, or persistent non-Gaussian
    spectral kurtosis.
    """
    sky = _sky(f, s)
    if f["path"] == "line":
        return _line(f)
    if f["path"] == "impulse":
        return _impulse(f)
    if f["path"] == "slow":
        return _switched(f) or _long_event(f, sky)
    return _sburst(f, sky) or _man_made(f, s, sky) or _natural_burst(f, sky)


def _sky(f: dict, s: Settings) -> _Sky:
    sun, jup, region = f.get("sun_alt"), f.get("jupiter_alt"), f.get("source_region")
    sun_up = None if sun is None else sun > s.sun_up_deg
    jup_up = None if jup is None else jup > s.jupiter_up_deg
    sun_txt = "" if sun is None else (f"Sun up ({sun:.0f}°)" if sun_up else f"Sun down ({sun:.0f}°)")
    jup_txt = "" if jup is None else (f"Jupiter up ({jup:.0f}°)" if jup_up else f"Jupiter down ({jup:.0f}°)")
    return _Sky(sun_up, jup_up, region, sun_txt, jup_txt)


def _why(*parts) -> str:
    return "; ".join(p for p in parts if p)


def _rfi(kind: str, conf: float, text: str) -> Verdict:
    """An interference verdict; its reason starts with the kind (see ``rfi_kind``)."""
    return "rfi", conf, f"{kind}: {text}"


def rfi_kind(f: dict, verdict: Verdict) -> str | None:
    """The kind of an ``rfi`` verdict (one of RFI_KINDS; None for other classes): the first
    word of its reason, or for a reason that names none, the event's path (a line: a
    sweep; an impulse storm: impulses; a long event, the steady rise of arcing or a
    switching supply: broadband noise)."""
    cls, _, reason = verdict
    if cls != "rfi":
        return None
    head = reason.split(":", 1)[0]
    if head in RFI_KINDS:
        return head
    return {"line": "sweep", "impulse": "impulse_train"}.get(f.get("path"), "broadband_noise")


def _line(f: dict) -> Verdict:
    """Narrowband cells SumThreshold masked, lined up over the band."""
    bw, drift = f["bandwidth_mhz"], f["drift"]
    if f["resolved"]:
        return _rfi("sweep", 0.85, f"swept narrowband line, drift {drift:+.2f} MHz/s over {bw:.1f} MHz "
                                   "(ionosonde-like), masked")
    return _rfi("narrowband_burst", 0.7, f"narrowband signals over {bw:.1f} MHz for {f['span_s']:.0f} s, masked")


def _impulse(f: dict) -> Verdict:
    bw, n = f["bandwidth_mhz"], f["n_impulses"]
    if n == 1:
        return _rfi("impulse", 0.9, f"{bw:.1f} MHz lit for one time step, nothing before or after")
    return _rfi("impulse_train", 0.9, f"impulse storm of {n} impulses over {f['span_s'] / 60:.1f} min "
                                      f"(sferics, power line, fence or appliance)")


# -- long events from the slow path ---------------------------------------------------

def _long_event(f: dict, c: _Sky) -> Verdict:
    bw, band = f["bandwidth_mhz"], max(f["band_mhz"], 1e-6)
    depth = f["peak_excess_db"]
    if f["sign"] < 0:
        return _drop(f, c)
    long_bb = f["span_s"] >= 600.0 and bw >= 0.5 * band
    drift = f["drift"]
    if f["resolved"] and drift is not None and TYPE2_DRIFT[0] * TYPE3_FACTOR <= drift <= TYPE2_DRIFT[1] \
            and not long_bb:
        txt = f"slow drift {drift:.2f} MHz/s over {f['span_s'] / 60:.1f} min (Type II range)"
        if c.sun_up:
            return "solar_ii", 0.65, _why(txt, c.sun_txt)
    if long_bb and c.sun_up and not (f["bursty"] and c.jup_up):
        return "solar_iv", 0.7, _why(f"broadband continuum {depth:.1f} dB over {bw:.1f} MHz "
                                     f"for {f['span_s'] / 60:.0f} min", c.sun_txt)
    tx = f.get("texture")
    if c.jup_up and tx is not None and tx < STORM_TEXTURE and not c.sun_up:
        return "rfi", 0.5, _why(f"steady rise of {depth:.1f} dB over {bw:.1f} MHz for {f['span_s'] / 60:.0f} min "
                                f"without the seconds-long texture of L-bursts (scatter x{tx:.2f}): man-made "
                                "(power-line arcing, a switching supply)", c.jup_txt)
    if c.jup_up:
        conf = 0.75 if c.region else 0.55
        return "jovian_l", conf, _why(f"storm {depth:.1f} dB over {bw:.1f} MHz for {f['span_s'] / 60:.0f} min",
                                      c.jup_txt, f"in {c.region}" if c.region else "outside the Io source regions")
    if long_bb and c.sun_up is None:
        return "solar_iv", 0.35, _why(f"broadband continuum for {f['span_s'] / 60:.0f} min", "no ephemeris")
    return "unknown", 0.4, _why(f"enhancement {depth:.1f} dB over {bw:.1f} MHz for {f['span_s'] / 60:.0f} min",
                                c.sun_txt, c.jup_txt)


def _drop(f: dict, c: _Sky) -> Verdict:
    """Negative excess from the slow path: a fadeout when band-wide by day."""
    bw, band = f["bandwidth_mhz"], max(f["band_mhz"], 1e-6)
    depth = f["peak_excess_db"]
    if bw >= 0.5 * band:
        if c.sun_up:
            return "fadeout", 0.8, _why(f"band-wide drop of {-depth:.1f} dB over {f['span_s'] / 60:.0f} min", c.sun_txt)
        if c.sun_up is None:
            return "fadeout", 0.4, _why(f"band-wide drop of {-depth:.1f} dB over {f['span_s'] / 60:.0f} min",
                                        "Sun altitude unknown")
        return "unknown", 0.5, _why(f"band-wide drop of {-depth:.1f} dB", c.sun_txt, "not a fadeout at night")
    return "unknown", 0.4, _why(f"drop of {-depth:.1f} dB over {bw:.1f} MHz only", "not band-wide")


# -- bursts from the fine path ----------------------------------------------------------

def _sburst(f: dict, c: _Sky) -> Verdict | None:
    drift, run = f["drift"], f["run_s"]
    if (f["cadence_s"] <= SBURST_MAX_CADENCE_S and f["resolved"] and SBURST_DRIFT[0] <= drift <= SBURST_DRIFT[1]
            and run <= 0.05 and c.jup_up is not False):
        return "jovian_s", 0.7 if c.jup_up else 0.4, _why(f"millisecond burst drifting {drift:.1f} MHz/s", c.jup_txt)
    return None


def _man_made(f: dict, s: Settings, c: _Sky) -> Verdict | None:
    """Interference morphology: narrowband, impulsive, swept, caught by the sweep."""
    bw, band = f["bandwidth_mhz"], max(f["band_mhz"], 1e-6)
    cad, drift, run = f["cadence_s"], f["drift"], f["run_s"]
    if f["sk_fraction"] is not None and f["sk_fraction"] >= 0.5 and bw < 0.5 * band:
        return _rfi("non_gaussian", 0.8, f"spectral kurtosis departs from 1 in {100 * f['sk_fraction']:.0f}% of "
                                         f"cells, {bw:.2f} MHz wide")
    if bw <= max(NARROWBAND_MHZ, 3 * f["chan_mhz"]):
        kind = "carrier" if f["span_s"] >= CARRIER_MIN_S else "narrowband_burst"
        return _rfi(kind, 0.8, f"narrowband signal ({1000 * bw:.0f} kHz wide) for {f['span_s']:.0f} s; "
                               "Jovian L-bursts are hundreds of kHz to MHz wide")
    step = _switched(f)
    if step:
        return step
    # An impulse covers every channel of the event at once for a step or two; decide only
    # where a Type III would have been resolved as a drift at this time step.
    ah_spread = bw / abs(float(ah_drift(f["fc_mhz"])))
    if (not f["resolved"] and run <= max(2 * cad, 2.0) and f["full_rows"] >= 0.8
            and bw >= 0.5 * band and ah_spread >= 2 * cad):
        kind = "impulse_train" if f["span_s"] > 3 * cad else "impulse"
        return _rfi(kind, 0.85, f"{bw:.1f} MHz at once, {run:.1f} s at fixed frequency, no drift"
                                + (f", {f['n_rows']} steps over {f['span_s']:.0f} s" if f["span_s"] > 3 * cad else ""))
    if (f["resolved"] and run <= max(2 * cad, 2.0) and abs(drift) <= 0.5
            and f["inst_bw_mhz"] <= max(0.3, 3 * abs(drift) * cad)):
        return _rfi("sweep", 0.85, f"swept narrowband line, drift {drift:+.2f} MHz/s (ionosonde-like)")
    # A narrow signal that moves across much more of the band than its own width, a step or
    # two at each frequency, for several seconds: a swept transmitter (an ionosonde) whose
    # drift the fit could not resolve (it swept up and down). Natural bursts are MHz wide
    # at any moment (a Type II lane too). The frequency smoothing widens what is measured.
    narrow = max(0.3, 3 * f["chan_mhz"]) + s.smooth_freq_mhz
    if (f["inst_bw_mhz"] <= narrow and bw >= 8 * f["inst_bw_mhz"]
            and run <= max(2 * cad, 2.0) and f["span_s"] >= 5.0 and not c.jup_up):
        return _rfi("sweep", 0.6, f"narrow signal ({1000 * f['inst_bw_mhz']:.0f} kHz at a time) moving over "
                                  f"{bw:.1f} MHz in {f['span_s']:.0f} s: a swept transmitter (ionosonde-like)")
    return _caught_by_sweep(f, c)


def _switched(f: dict) -> Verdict | None:
    """Switched broadband noise: the band's level stepped within one time step at the
    event's edge (rxlog.detect.steps) by a good part of the event's excess (STEP_SHARE).

    A burst starts with a step up (a switch-on), or ends with a step down (a switch-off:
    the fast background, centred on each block, already holds the lower level after it,
    so the steps before it stand out). A long event from the slow path starts with the
    step and, when it is a rise, ends with the step back (a Type IV that merely began
    beside an appliance's switch-on keeps its class). A Type IV rises over minutes and a
    fadeout sets in over minutes: neither steps."""
    on, off, depth = f.get("step_on", 0.0), f.get("step_off", 0.0), abs(f["peak_excess_db"])
    if f["bandwidth_mhz"] < 0.5 * max(f["band_mhz"], 1e-6):
        return None
    need = STEP_SHARE * depth
    if f["path"] == "slow":
        ok = on >= need and (f["sign"] < 0 or off >= need)
    else:
        ok = on >= need or off >= need
    if not ok:
        return None
    way = ("rose", "fell") if f["sign"] > 0 else ("fell", "rose")
    edges = [f"{way[0]} by {on:.2f} dB at its start" if on > 0 else "",
             f"{way[1]} by {off:.2f} dB at its end" if off > 0 else ""]
    return _rfi("switched_broadband", 0.8, f"the band's level {' and '.join(e for e in edges if e)}, each within "
                                           "a time step: switched broadband noise (an appliance, a power "
                                           "supply); natural continua rise over minutes")


def _pulses(f: dict) -> Verdict | None:
    """A bunch of impulses the smoothing welded into one shape, told per pulse from the
    unsmoothed excess: most of it sits in pieces lit for one time step only (see
    PULSE_SHARE), or, under a sweep, a short event's rows are lit in whole dwells and
    nothing else (see DWELL_SHARE); and no Type III drift explains it."""
    share, dwell = f.get("pulse_share"), f.get("dwell_rows")
    by_step = share is not None and share >= PULSE_SHARE
    by_dwell = dwell is not None and dwell >= DWELL_SHARE and f["span_s"] <= DWELL_MAX_S
    if not (by_step or by_dwell):
        return None
    if f["resolved"] and f["drift"] is not None and f["drift"] < 0:
        ratio = f["drift"] / float(ah_drift(f["fc_mhz"]))
        if 1 / TYPE3_FACTOR <= ratio <= TYPE3_FACTOR:
            return None
    why = (f"{100 * share:.0f}% of its excess in pieces lit for one time step only" if by_step else
           f"{100 * dwell:.0f}% of its steps lit in whole sweep dwells and nothing else")
    return _rfi("impulse_train" if f["n_rows"] > 2 else "impulse", 0.7,
                f"{why} ({f['bandwidth_mhz']:.1f} MHz, {f['span_s']:.0f} s): pulses (sferics, a fence), "
                "not a burst lasting seconds")


def _caught_by_sweep(f: dict, c: _Sky) -> Verdict | None:
    """Short signals the sweep turns into burst-like shapes, brief flashes, upward drifts."""
    bw, cad, drift, run = f["bandwidth_mhz"], f["cadence_s"], f["drift"], f["run_s"]
    # (A drift fitted inside one dwell over two steps is only the two steps: every channel
    # of a sub-band is sampled at the same moment.)
    if f.get("one_subband") and f["span_s"] <= 3 * cad and run <= 2 * cad:
        return _rfi("impulse", 0.6, "lit inside one sweep sub-band for a step or two: a short signal caught "
                                    "by the sweep")
    if f.get("subband_rows") and run <= 2 * cad:
        return _rfi("impulse_train", 0.6, f"each of {f['n_rows']} steps lit in exactly one sweep sub-band, edge to "
                                          "edge: pulses caught by the sweep, not a burst")
    pulses = _pulses(f)
    if pulses:
        return pulses
    # Narrowness means something only where the event is not cut by the RFI mask.
    if bw < 0.5 and f["span_s"] <= 5.0:
        if not f.get("truncated"):
            return _rfi("narrowband_burst", 0.6, f"brief narrowband flash ({bw:.2f} MHz, {f['span_s']:.0f} s): "
                                                 "no natural burst is that small")
        if not c.jup_up:
            return _rfi("narrowband_burst", 0.5, f"brief flash ({bw:.2f} MHz, {f['span_s']:.0f} s) in a gap of "
                                                 "the RFI mask, seen nowhere else in the band")
    if f.get("n_dwells", 2) < 2 and f["span_s"] <= 10.0 and not c.jup_up:
        return _rfi("impulse", 0.5, f"confined to one sweep dwell ({bw:.1f} MHz) for {f['span_s']:.0f} s: solar "
                                    "bursts are broader, or drift across dwells")
    if f["resolved"] and drift > 0 and not c.jup_up:
        return _rfi("sweep", 0.6, f"upward drift {drift:+.2f} MHz/s: solar bursts drift down, Jupiter is not up")
    return None


def _natural_burst(f: dict, c: _Sky) -> Verdict:
    """Type III and Type II by their drift, Jovian L-bursts with Jupiter up, else unknown."""
    bw, fc, cad, drift, run = f["bandwidth_mhz"], f["fc_mhz"], f["cadence_s"], f["drift"], f["run_s"]
    if f["resolved"] and drift < 0:
        law = float(ah_drift(fc))
        ratio = drift / law
        # A fast drift needs channels sampled at different moments: inside one sweep dwell
        # every channel is sampled at once, and a "drift" there is only the step between rows.
        if 1 / TYPE3_FACTOR <= ratio <= TYPE3_FACTOR and run <= 20.0 and f.get("n_dwells", 2) >= 2:
            match = f"drift {drift:.1f} MHz/s matches Type III law ({law:.1f}) at {fc:.0f} MHz"
            closeness = 1.0 - abs(math.log(ratio)) / math.log(TYPE3_FACTOR)
            if c.sun_up:
                return "solar_iii", round(0.6 + 0.35 * closeness, 2), _why(match, c.sun_txt)
            if c.sun_up is None:
                return "solar_iii", round(0.3 + 0.3 * closeness, 2), _why(match, "no ephemeris")
            if not c.jup_up:
                return "unknown", 0.4, _why(match, c.sun_txt)
        if (TYPE2_DRIFT[0] * TYPE3_FACTOR <= drift <= TYPE2_DRIFT[1] and f["span_s"] >= 10.0
                and run >= 3 * cad):
            txt = f"slow drift {drift:.2f} MHz/s over {f['span_s'] / 60:.1f} min (Type II range)"
            if c.sun_up:
                return "solar_ii", 0.7, _why(txt, c.sun_txt)
            if c.sun_up is None:
                return "solar_ii", 0.35, _why(txt, "no ephemeris")
    if c.jup_up:
        conf = 0.7 if c.region else 0.5
        if c.sun_up:
            conf -= 0.15
        shape = (f"drift {drift:.1f} MHz/s" if f["resolved"] else "no coherent drift")
        return "jovian_l", round(conf, 2), _why(f"{bw:.1f} MHz, {run:.0f} s at fixed frequency, {shape}", c.jup_txt,
                                                f"in {c.region}" if c.region else "outside the Io source regions")
    desc = f"{bw:.1f} MHz, {f['span_s']:.0f} s" + (f", drift {drift:.2f} MHz/s" if f["resolved"] else ", no drift")
    return "unknown", 0.3, _why(desc, c.sun_txt, c.jup_txt)
