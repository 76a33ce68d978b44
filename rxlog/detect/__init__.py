"""Stage 6 of rxlog: detection of bursts and long events in dynamic spectra.

One module per concern; see DEVELOPERS.md ("Detector internals") for the map. This
package file imports nothing, so the config can read the detector's settings without
loading the detector.
"""
