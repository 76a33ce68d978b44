"""rxlog's command line: one module per concern, each adding its commands to ``main``."""

from rxlog.cli.base import main
from rxlog.cli import station  # noqa: F401  (config check, demo)
from rxlog.cli import service  # noqa: F401  (run, status, service)
from rxlog.cli import archive  # noqa: F401  (prune)
from rxlog.cli import detect  # noqa: F401  (detect)
from rxlog.cli import review  # noqa: F401  (review, events, label)
from rxlog.cli import exchange  # noqa: F401  (export, compare)
from rxlog.cli import simulate  # noqa: F401  (simulate)
from rxlog.cli import ephem  # noqa: F401  (ephem, forecast)
from rxlog.cli import ingest  # noqa: F401  (ingest recordings and FITS dynamic spectra)

__all__ = ["main"]
