"""rxlog's archive stage: dynamic spectra on disk as FITS files with standard WCS.

One module per concern, lowest first; each imports only from those above it, from
rxlog's core and, for ingest, from ``rxlog.receive``:

    wcs      header cards to axes: time origin and scale, time and frequency axes, site
    layout   the file layout: names and UTC hours, HDU sets and their WCS cards, reading one back
    runs     pieces of a segment joined into runs on one time grid
    foreign  FITS from elsewhere: complete, cards and axes checked, read in blocks of rows
    write    ArchiveWriter, chunks, consolidation into hour files, recovery, the archive lock,
             write_spectrum_fits
    read     read_archive, ArchiveRead, gaps, archive_extent, archive_hours, file_spans,
             read_spectrum_fits
    ingest   ingest_fits and ingest_recording: staged, then merged all or nothing
    prune    retention

This file imports nothing.
"""
