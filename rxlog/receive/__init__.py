"""rxlog's receive stage: samples in, dynamic spectra out.

One module per concern, lowest first; each imports only from those above it and from
rxlog's core (errors, timeutil, validate, spectrum):

    blocks      SampleBlock, EndOfStream, ReceiverLost, sample formats, to_complex64, segment ids
    clock       ClockDiscipline: UTC times and gaps for counted samples
    devices     the live-source base, RTL-SDR dongles through pyrtlsdr, [receiver] checks
    rtltcp      the rtl_tcp client
    recordings  SigMF and raw recordings: open_recording, RecordingSource
    kurtosis    the spectral kurtosis estimator and its scatter
    ring        the cutout ring of high-time-resolution spectra
    channelizer Channelizer, channel maps, Dwell
    replay      spectra_from_recording: a recording through the channelizer
    sweep       SweepPlan, Sweeper (tunings, discard, stitching), samples_per_cell, [sweep] checks

Storing a recording's spectra in the archive is ``rxlog.archive.ingest.ingest_recording``.
This file imports nothing.
"""
