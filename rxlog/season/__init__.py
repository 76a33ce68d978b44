"""Seasons: months of archive re-detected in parallel, and what the station has seen,
normalised by how long it was listening.

Modules, lowest first:

- ``reprocess``: ``rxlog reprocess`` -- a date range re-detected day by day on Dask
  (``dask.distributed``), one writer, resumable, damaged days skipped.
"""
