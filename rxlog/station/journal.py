"""The logger's log lines: one per message, level first, on stderr, which systemd's
journal keeps with a priority when the logger runs as a service."""

from __future__ import annotations

import logging
import os
import sys

# sd-daemon(3) priority prefixes, understood by journald on a service's stderr.
_SD_PRIORITY = {logging.DEBUG: "<7>", logging.INFO: "<6>", logging.WARNING: "<4>",
                logging.ERROR: "<3>", logging.CRITICAL: "<2>"}


class JournalFormatter(logging.Formatter):
    """One line per message, level first: 'WARNING disk nearly full ...'.

    Under systemd (``$JOURNAL_STREAM`` set) each line also starts with its sd-daemon
    priority prefix, so ``journalctl -p warning`` finds it. Tracebacks are folded into
    the same line.
    """

    def __init__(self, journal: bool):
        super().__init__()
        self.journal = journal

    def format(self, record: logging.LogRecord) -> str:
        text = record.getMessage()
        if record.exc_info:
            text += " | " + self.formatException(record.exc_info)
        text = " | ".join(part for part in text.splitlines() if part.strip())
        line = f"{record.levelname} {text}"
        return (_SD_PRIORITY.get(record.levelno, "<6>") + line) if self.journal else line


def setup_logging(level: str = "info", stream=None) -> logging.Handler:
    """Send rxlog's log to stderr, one line per message; return the handler."""
    handler = logging.StreamHandler(stream or sys.stderr)
    handler.setFormatter(JournalFormatter(journal=bool(os.environ.get("JOURNAL_STREAM"))))
    root = logging.getLogger("rxlog")
    for h in list(root.handlers):
        root.removeHandler(h)
    root.addHandler(handler)
    root.setLevel(level.upper())
    root.propagate = False
    return handler
