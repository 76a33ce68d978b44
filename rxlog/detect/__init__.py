"""rxlog's detect stage: bursts and long events found in dynamic spectra.

One module per step of the path a block of spectra takes; each imports only from
those above it:

    settings    Settings from the config, the default static ranges, the rules' thresholds
    grid        a segment's channels, sweep sub-bands, coarse channels, rows per block
    background  block levels and noise, the fast background, the slow baseline
    mask        static ranges, carriers, SumThreshold, spectral kurtosis, hourly quality
    impulses    impulses, impulse storms, pulse trains
    steps       switched broadband noise: steps of the band's median level
    drift       arrival times from light curves, fit_drift, the Alvarez & Haddock law
    components  the tracker (threshold, label, merge) and the fine, line and slow paths
    features    what is measured on each event
    classify    the rules, each with its reason
    segment     one segment through the stages, block by block
    events      event records and their tags; pieces of long events
    episodes    events of one class grouped
    online      OnlineDetector, latest, detect_spectrum
    rerun       detect_range: archive -> detector -> event store
    cutout      refine_with_cutout: S-bursts in millisecond spectra

This file imports nothing, so the config reads the settings without loading the detector.
"""
