"""UTC time stamps as POSIX seconds (float64) and ISO 8601 strings.

rxlog's hot paths carry time as float64 POSIX seconds (UTC, leap seconds not counted,
as the host clock does); text and the event store use ISO 8601 UTC with milliseconds.
"""

from __future__ import annotations

import datetime as dt

import numpy as np

UTC = dt.timezone.utc


def iso(t: float) -> str:
    """POSIX seconds -> '2026-12-01T22:10:00.123Z' (millisecond precision)."""
    ms = int(round(float(t) * 1000.0))
    d = dt.datetime(1970, 1, 1, tzinfo=UTC) + dt.timedelta(milliseconds=ms)
    return d.strftime("%Y-%m-%dT%H:%M:%S.") + f"{d.microsecond // 1000:03d}Z"


def parse_iso(text: str) -> float:
    """ISO 8601 text (a date, or a date and time; 'Z' or an offset; naive means UTC) -> POSIX seconds.

    Raises ValueError with the offending text when it cannot be read.
    """
    s = str(text).strip()
    if s.endswith(("Z", "z")):
        s = s[:-1] + "+00:00"
    try:
        d = dt.datetime.fromisoformat(s)
    except ValueError:
        raise ValueError(f"not an ISO 8601 time: {text!r} (expected e.g. 2026-12-01T22:00:00Z)") from None
    if d.tzinfo is None:
        d = d.replace(tzinfo=UTC)
    return d.timestamp()


def to_datetime(t: float) -> dt.datetime:
    """POSIX seconds -> aware UTC datetime."""
    return dt.datetime.fromtimestamp(float(t), tz=UTC)


def unix_to_mjd(t):
    """POSIX seconds (UTC) -> MJD (UTC), array-friendly. MJD 40587 is 1970-01-01."""
    return np.asarray(t, dtype=np.float64) / 86400.0 + 40587.0


def mjd_to_unix(mjd):
    """MJD (UTC) -> POSIX seconds."""
    return (np.asarray(mjd, dtype=np.float64) - 40587.0) * 86400.0
