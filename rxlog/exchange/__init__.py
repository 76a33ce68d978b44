"""rxlog's exchange stage: sharing events with partner stations.

One module per concern; each imports only from those above it (and from lower stages):

    columns      the layouts of event and episode lists: columns, units, UCDs, header
                 keys, format name and version (each its own), the station's header
    export       event and episode lists written as CSV, JSON or VOTable: export_events,
                 write_event_list
    voevent      single events or episodes as VOEvent 2.0 notices: write_voevents
    importer     read_event_list: strict, safe reading of partners' lists (EventList)
    timing       all stations' events as arrays; each event's clock reading and its noise
    matching     candidates, a first guess of the offsets, one-to-one groups
    clocks       robust least squares for the clock offsets, the agreeing reference
    lightcurves  offsets refined from Type III light curves in FITS dynamic spectra
    episodes     episodes confirmed across stations on the corrected clocks
    timeline     the timeline plot
    outputs      matched_events.csv, matched_episodes.csv, stations.csv, summary.txt
    compare      compare_stations and its CompareResult

This file imports nothing.
"""
