"""rxlog's command line: thin click commands over the library, one module per concern,
each adding its commands to ``main``: ``base`` (the group, shared options, errors),
``station`` (config check, demo), ``simulate``, ``ingest``, ``archive`` (prune),
``detect``, ``ephem`` (ephem, forecast), ``review`` (review, events, label),
``exchange`` (export, compare), ``season`` (reprocess, season), ``service`` (run, status,
service).

The commands import the stage they drive when they run, not here, so ``rxlog --help``
and every command start without loading the stages the others need.
"""

from rxlog.cli import (
    archive,  # noqa: F401  (prune)
    detect,  # noqa: F401  (detect)
    ephem,  # noqa: F401  (ephem, forecast)
    exchange,  # noqa: F401  (export, compare)
    ingest,  # noqa: F401  (ingest recordings and FITS dynamic spectra)
    review,  # noqa: F401  (review, events, label)
    season,  # noqa: F401  (reprocess, season)
    service,  # noqa: F401  (run, status, service)
    simulate,  # noqa: F401  (simulate)
    station,  # noqa: F401  (config check, demo)
)
from rxlog.cli.base import main

__all__ = ["main"]
