"""Stage 8 of rxlog: sharing events with partner stations.

One module per concern; each imports only from those above it (and from lower stages):

    columns     the layout of an event list: columns, units, UCDs, header keys, format
                name and version, the station's header
    export      event lists written as CSV, JSON or VOTable: export_events, write_event_list
    voevent     single events as VOEvent 2.0 notices: write_voevents
    importer    read_event_list: strict, safe reading of partners' lists

This file imports nothing.
"""
