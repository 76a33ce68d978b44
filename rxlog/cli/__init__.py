"""rxlog's command line: one module per concern, each adding its commands to ``main``."""

from rxlog.cli import (
    archive,  # noqa: F401  (prune)
    detect,  # noqa: F401  (detect)
    ephem,  # noqa: F401  (ephem, forecast)
    exchange,  # noqa: F401  (export, compare)
    ingest,  # noqa: F401  (ingest recordings and FITS dynamic spectra)
    review,  # noqa: F401  (review, events, label)
    service,  # noqa: F401  (run, status, service)
    simulate,  # noqa: F401  (simulate)
    station,  # noqa: F401  (config check, demo)
)
from rxlog.cli.base import main

__all__ = ["main"]
