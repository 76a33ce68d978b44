"""Seasons: months of archive re-detected in parallel, and what the station has seen,
normalised by how long it was listening.

Modules, lowest first:

- ``reprocess``: ``rxlog reprocess`` -- a date range re-detected day by day on Dask
  (``dask.distributed``), one writer, resumable, damaged days skipped.
- ``binomial``: Wilson score intervals for occurrence rates from small counts.
- ``exposure``: the season step by step -- share listened with the band unmasked (quality
  rows) and the ephemeris of each step; spans and their merging.
- ``occurrence``: Jovian occurrence over CML III x Io phase, per source region, and the
  network's emission confirmed at two or more stations.
- ``solar``: bursts per type per day and against the Sun's altitude, fadeouts per month.
- ``health``: the uptime calendar with the health log's causes, masked fraction by hour.
- ``plots``: the PNG figures; ``page``: CSV tables and index.html.
- ``report``: ``season_report``, what ``rxlog season`` runs.
"""
