"""Limits that input from outside is checked against, and the checks themselves.

Config files, recordings (SigMF and raw), FITS dynamic spectra and partner event lists
come from people and from other programs. Each reader checks types, finiteness, ranges
and consistency with these helpers before anything is stored, and raises ``RxlogError``
with one line naming the file, the key or header card, and what was expected. The
limits are wide enough for any honest station and narrow enough to catch a wrong unit,
epoch or clock.
"""

from __future__ import annotations

import datetime as dt
import math
import time

from rxlog.errors import RxlogError

# The receiver era. Digital dynamic spectra from software receivers start well after
# 1990, so an earlier date is a wrong epoch or unit (MJD for JD, days for seconds) or an
# unset clock. The end is a year past now: nights simulated ahead for the coming forecast
# windows are still accepted, a clock or header off by years or decades is not.
ERA_START = dt.datetime(1990, 1, 1, tzinfo=dt.timezone.utc).timestamp()
ERA_AHEAD_S = 366 * 86400.0

# The band rxlog watches: Jupiter's decametric emission and solar bursts seen through the
# ionosphere, 16-24 MHz. Input must overlap it or the station's configured band.
DECAMETRIC_HZ = (16e6, 24e6)

# The band a station may be configured for ([spectra] fmin_mhz, fmax_mhz), and so the
# frequencies of any rxlog event: above 60 MHz no Jovian emission reaches (its cut-off is
# near 40 MHz) and the ionosphere no longer matters; 1 MHz is below any F2-layer
# critical frequency, so nothing from space gets that low.
MIN_BAND_MHZ = 1.0
MAX_BAND_MHZ = 60.0

# Time step of a dynamic spectrum. 0.1 ms is the finest [spectra] cadence_s accepts, ten
# times finer than S-bursts need (~1 ms); one spectrum an hour is the coarsest that still
# shows a burst at all (the archive keeps one file per hour).
MIN_CADENCE_S = 1e-4
MAX_CADENCE_S = 3600.0

# Channel width. A channel wider than 10 MHz spans more than the whole 8-MHz band rxlog
# watches, so nothing spectral is left. The narrow end is set against the cadence:
# a channel df wide cannot give independent values faster than 1/df (the Fourier
# time-bandwidth limit, df * dt >= 1, which every FFT spectrometer meets with equality
# at one frame per row); half of it leaves room for rounding and overlapping filter banks.
MAX_CHANNEL_HZ = 10e6
MIN_TIME_BANDWIDTH = 0.5

# Complex sample rates, as [receiver] sample_rate_hz accepts: 1 kS/s gives 1-Hz bins from
# a 1024-point FFT; 100 MS/s is beyond any receiver of this class (RTL-SDR: 3.2 MS/s).
MIN_RATE_HZ = 1e3
MAX_RATE_HZ = 100e6

# Sky frequency of a tuning: positive, and at most 2 GHz (above any RTL-SDR tuner's
# ~1.77 GHz; the same bound as [sweep] tunings_hz).
MAX_TUNING_HZ = 2e9


def era_end(now: float | None = None) -> float:
    """Latest accepted time: a year past ``now`` (default: the host clock)."""
    return (time.time() if now is None else float(now)) + ERA_AHEAD_S


def when(t: float) -> str:
    """A time for a message: ISO 8601 UTC to the second, or the raw seconds if no calendar date."""
    try:
        d = dt.datetime(1970, 1, 1, tzinfo=dt.timezone.utc) + dt.timedelta(seconds=float(t))
        return d.strftime("%Y-%m-%dT%H:%M:%SZ")
    except (OverflowError, ValueError):
        return f"{t:g} s from 1970"


def era_problem(t0: float, t1: float | None = None) -> str | None:
    """What is wrong with a time span [t0, t1] against the receiver era, or None."""
    t1 = t0 if t1 is None else t1
    if not (math.isfinite(t0) and math.isfinite(t1)):
        return f"time {t0:g}..{t1:g} is not finite"
    end = era_end()
    if t0 < ERA_START or t1 > end:
        bad = t0 if t0 < ERA_START else t1
        return (f"{when(bad)} lies outside the receiver era, {when(ERA_START)[:10]} to {when(end)[:10]} "
                "(a wrong epoch, unit or clock?)")
    return None


def check_era(t0: float, t1: float | None, where: str) -> None:
    """Raise RxlogError naming ``where`` unless [t0, t1] lies within the receiver era."""
    problem = era_problem(t0, t1)
    if problem:
        raise RxlogError(f"{where}: {problem}")


def read_capped(path, limit_bytes: int, what: str) -> bytes:
    """The bytes of a file from elsewhere, refused before reading when it is larger than
    ``limit_bytes`` (a mistaken or hostile file must not fill memory). ``what`` names the
    kind of file in the message; an OSError goes to the caller, which knows the context."""
    size = path.stat().st_size
    if size > limit_bytes:
        raise RxlogError(f"{path}: {size / 2**20:.0f} MB is too large for {what} "
                         f"(limit {limit_bytes // 2**20} MB)")
    return path.read_bytes()


def is_number(value) -> bool:
    """An int or float and not a bool (JSON and TOML true/false are not numbers)."""
    return isinstance(value, (int, float)) and not isinstance(value, bool)


def number(value, where: str, lo: float | None = None, hi: float | None = None, what: str = "a number") -> float:
    """``value`` as a finite float within [lo, hi]; RxlogError naming ``where`` otherwise."""
    rng = ("" if lo is None and hi is None else f" from {lo:g} to {hi:g}" if lo is not None and hi is not None
           else f" of at least {lo:g}" if lo is not None else f" of at most {hi:g}")
    if not is_number(value):
        raise RxlogError(f"{where}: expected {what}{rng}, got {_short(value)}")
    try:
        x = float(value)
    except OverflowError:
        x = math.inf
    if not math.isfinite(x) or (lo is not None and x < lo) or (hi is not None and x > hi):
        raise RxlogError(f"{where}: expected {what}{rng}, got {_short(value)}")
    return x


def whole(value, where: str, lo: int = 0, what: str = "a whole number") -> int:
    """``value`` as an int of at least ``lo`` (bools and floats refused)."""
    if not isinstance(value, int) or isinstance(value, bool) or value < lo:
        raise RxlogError(f"{where}: expected {what} of at least {lo}, got {_short(value)}")
    return value


def bands(cfg=None) -> list[tuple[float, float]]:
    """Bands (Hz) an input may overlap: 16-24 MHz, and the station's own if a config is given."""
    out = [DECAMETRIC_HZ]
    if cfg is not None:
        sp = cfg["spectra"]
        out.append((sp["fmin_mhz"] * 1e6, sp["fmax_mhz"] * 1e6))
    return out


def band_problem(lo_hz: float, hi_hz: float, accepted: list[tuple[float, float]]) -> str | None:
    """What is wrong with a frequency span [lo, hi] that overlaps none of ``accepted``, or None."""
    if not (math.isfinite(lo_hz) and math.isfinite(hi_hz)):
        return f"frequencies {lo_hz:g}..{hi_hz:g} Hz are not finite"
    if any(lo_hz < b_hi and hi_hz > b_lo for b_lo, b_hi in accepted):
        return None
    names = " or ".join(f"{a / 1e6:g}-{b / 1e6:g} MHz" for a, b in dict.fromkeys(accepted))
    return f"frequencies {_mhz(lo_hz)} to {_mhz(hi_hz)} MHz do not reach {names}"


def cadence_problem(step_s: float) -> str | None:
    """What is wrong with a time step, or None."""
    if not (math.isfinite(step_s) and MIN_CADENCE_S <= abs(step_s) <= MAX_CADENCE_S):
        return f"time step {step_s:g} s; expected {MIN_CADENCE_S:g} to {MAX_CADENCE_S:g} s"
    return None


def channel_problem(width_hz: float, step_s: float | None) -> str | None:
    """What is wrong with a channel width (given the time step, if known), or None."""
    w = abs(width_hz)
    if not (math.isfinite(w) and 0 < w <= MAX_CHANNEL_HZ):
        return f"channels {width_hz:g} Hz wide; expected up to {MAX_CHANNEL_HZ / 1e6:g} MHz"
    if step_s is not None and w * abs(step_s) < MIN_TIME_BANDWIDTH:
        return (f"channels {w:g} Hz wide sampled every {abs(step_s):g} s; a channel that narrow needs "
                f"at least {MIN_TIME_BANDWIDTH / w:g} s per spectrum (time-bandwidth limit)")
    return None


def _mhz(f_hz: float) -> str:
    return f"{f_hz / 1e6:.6g}"


def _short(v) -> str:
    s = repr(v)
    return s if len(s) <= 40 else s[:37] + "..."
