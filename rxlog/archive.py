"""The dynamic-spectrum archive: FITS files with standard WCS, one per UTC hour, written crash-safe.

Layout on disk (``root`` is ``cfg.archive_dir``)::

    root/YYYY/MM/DD/<station>_YYYYMMDDTHHZ.fits                 one consolidated hour
    root/YYYY/MM/DD/<station>_YYYYMMDDTHHZ.<pid>-<n>.chunk.fits  at most 60 s, not yet consolidated
    root/YYYY/MM/DD/.<name>.XXXXXX.tmp                            being written (never read)

Every file is a primary HDU (station, rxlog version) followed by one HDU set per run of
spectra: ``POWER`` (image), ``FLAGS`` (image of FLAG_* bits) and ``CHANNELS`` (table of
channel centre frequency and sampling offset), sharing an EXTVER. A run is a stretch of
one segment on one regular time grid; a new segment, channel grid, cadence or receiver
setting starts a new run, never resampled.

The images put TIME along NAXIS1 and FREQ along NAXIS2 with standard WCS (Greisen &
Calabretta 2002, Paper I; Rots et al. 2015, A&A 574, A36, Paper VII, for the time axis):
CTYPE1 'TIME' in s from MJDREFI + MJDREFF (and DATEREF) with TIMESYS 'UTC', CTYPE2 'FREQ'
in Hz, OBSGEO-B/L/H for the site. The pixel centre is the middle of the integration
(TIMEPIXR = 0.5), so row ``i`` of a spectrum (``times[i]`` = start of its integration)
sits at ``times[i] + cadence/2``. Keywords beyond the standard ones start with ``RX``.

Power is stored in dB either quantised (int16 in steps of ``QUANT_STEP_DB`` through
BSCALE, NaN as BLANK, lossless HCOMPRESS of the integers) or, in lossless mode, as
float32 with GZIP_2 byte-shuffle compression. Measured on noise of 0.11 dB per cell at
1024 channels and 1 s, with carriers and impulsive interference (``python -m benchmarks
archive``): ~49 MB/day quantised, ~200 MB/day lossless. Time along NAXIS1 compresses
best because each channel's time series is smooth apart from the radiometer noise.

Crash safety: every file is written under a temporary name, fsynced, renamed and its
directory fsynced, so a reader sees either the old file or the new one. A writer killed
at any instant loses at most the spectra it held in memory (< 60 s); the next writer
removes temporary files and consolidates leftover chunks. Consolidation is idempotent:
rows already in the hour file are recognised by segment and time and not duplicated.
"""

from __future__ import annotations

import contextlib
import datetime as dt
import fcntl
import gzip
import hashlib
import itertools
import math
import os
import re
import shutil
import tempfile
import warnings
import zlib
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from astropy.io import fits

from rxlog import __version__, validate
from rxlog.constants import GPS_MINUS_TAI_S, TT_MINUS_TAI_S
from rxlog.errors import RxlogError
from rxlog.fileio import ensure_dir, fsync_dir, write_atomic
from rxlog.receive.replay import spectra_from_recording
from rxlog.spectrum import FLAG_GAP, FLAG_RETUNE, FLAG_RFI, FLAG_UNCOVERED, DynamicSpectrum

FORMAT = "rxlog-dynspec-1"          # value of RXFORMAT in the primary header of our files
# Quantisation step: the rounding error is at most half a step, 0.01995 dB, plus float32
# rounding of the decoded value (< 3.1e-5 dB below 512 dB): inside the 0.02-dB budget,
# where a 0.04-dB step would sit exactly on it. The int16 range is +-1307 dB.
QUANT_STEP_DB = 0.0399
BLANK = -32768                       # int16 value standing for NaN (FITS BLANK)
# Largest |power| the quantised archive holds: 32767 steps of QUANT_STEP_DB. Power from
# elsewhere beyond it would be clipped without a word; no receiver spans 1300 dB, so such
# values are a wrong BUNIT or broken data and are refused.
MAX_ABS_POWER_DB = 32767 * QUANT_STEP_DB
FITS_BLOCK = 2880                    # FITS Standard 4.0 §3.1: a file is a sequence of 2880-byte blocks
CHUNK_S = 60.0                       # longest stretch of spectra held in memory
DEFAULT_FILL_S = 300.0               # read_archive fills gaps up to this long inside a segment

_MJD_UNIX_EPOCH = 40587              # MJD of 1970-01-01T00:00:00 UTC
_HOUR = 3600.0
_NAME_RE = re.compile(r"^(?P<name>[A-Za-z0-9_-]+)_(?P<date>\d{8})T(?P<hh>\d{2})Z"
                      r"(?:\.(?P<chunk>\d+-\d+)\.chunk)?\.fits$")
_META_KEY_RE = re.compile(r"^[A-Za-z0-9_.-]{1,40}$")
_SITE_KEYS = ("site_latitude_deg", "site_longitude_deg", "site_elevation_m")
_LOCK_NAME = ".rxlog-archive.lock"


@dataclass
class ArchiveRead:
    """What ``read_archive`` found: one spectrum per contiguous run of a segment, and the
    stretches of the requested interval without data, as (start, end) POSIX seconds."""

    segments: list[DynamicSpectrum] = field(default_factory=list)
    gaps: list[tuple[float, float]] = field(default_factory=list)


# --------------------------------------------------------------------------- header layout

def _fits_date(t: float) -> str:
    """POSIX seconds -> FITS date string 'YYYY-MM-DDThh:mm:ss.ssssss' (UTC)."""
    d = dt.datetime(1970, 1, 1) + dt.timedelta(seconds=float(t))
    return d.strftime("%Y-%m-%dT%H:%M:%S.%f")


def _site(station: dict, meta: dict) -> tuple[float, float, float] | None:
    """Observing site (lat, lon, height): from the spectrum's own meta when it came from
    elsewhere (an ingested file), else from the station config."""
    if all(k in meta for k in _SITE_KEYS):
        return tuple(float(meta[k]) for k in _SITE_KEYS)
    if station.get("latitude_deg") is not None and station.get("longitude_deg") is not None:
        return (float(station["latitude_deg"]), float(station["longitude_deg"]),
                float(station.get("elevation_m", 0.0)))
    return None


def _geocentric(lat: float, lon: float, h: float) -> tuple[float, float, float]:
    """WGS84 geodetic -> geocentric metres (NIMA TR8350.2 ellipsoid a = 6378137 m,
    1/f = 298.257223563). Written as OBSGEO-X/Y/Z beside OBSGEO-B/L/H so WCS readers
    need not derive them."""
    a, f = 6378137.0, 1 / 298.257223563
    e2 = f * (2 - f)
    phi, lam = math.radians(lat), math.radians(lon)
    n = a / math.sqrt(1 - e2 * math.sin(phi) ** 2)
    return ((n + h) * math.cos(phi) * math.cos(lam), (n + h) * math.cos(phi) * math.sin(lam),
            (n * (1 - e2) + h) * math.sin(phi))


def _wcs_cards(spec: DynamicSpectrum, site) -> list[tuple]:
    """Standard WCS and time keywords of an image with TIME on axis 1 and FREQ on axis 2."""
    day = math.floor(spec.t0 / 86400.0)
    ref = day * 86400.0
    f = spec.freq_hz
    df = float(f[1] - f[0]) if f.size > 1 else 1.0
    cards = [
        ("WCSAXES", 2, "two world axes"),
        ("CTYPE1", "TIME", "time axis (FITS WCS Paper VII)"),
        ("CUNIT1", "s", ""),
        ("CRPIX1", 1.0, "first row"),
        ("CRVAL1", spec.t0 - ref + 0.5 * spec.cadence_s, "[s] middle of row 1 from MJDREF"),
        ("CDELT1", spec.cadence_s, "[s] cadence"),
        ("CTYPE2", "FREQ", "frequency axis"),
        ("CUNIT2", "Hz", ""),
        ("CRPIX2", 1.0, "first channel"),
        ("CRVAL2", float(f[0]), "[Hz] centre of channel 1"),
        ("CDELT2", df, "[Hz] channel spacing (CHANNELS table is exact)"),
        ("SPECSYS", "TOPOCENT", "frequencies as received"),
        ("TIMESYS", "UTC", "time scale"),
        ("MJDREFI", int(day) + _MJD_UNIX_EPOCH, "[d] reference time: UTC day start, integer part"),
        ("MJDREFF", 0.0, "[d] reference time, fractional part"),
        ("DATEREF", _fits_date(ref), "reference time (same as MJDREFI+MJDREFF)"),
        ("TIMEUNIT", "s", ""),
        ("TIMEPIXR", 0.5, "pixel time is the middle of the integration"),
        ("TIMEDEL", spec.cadence_s, "[s] integration time of a row"),
        ("DATE-BEG", _fits_date(spec.t0), "start of row 1 (UTC)"),
        ("DATE-END", _fits_date(spec.t_end), "end of last row (UTC)"),
        ("DATE-OBS", _fits_date(spec.t0), "same as DATE-BEG"),
        ("MJD-OBS", spec.t0 / 86400.0 + _MJD_UNIX_EPOCH, "[d] same as DATE-BEG"),
    ]
    if site is not None:
        lat, lon, h = site
        x, y, z = _geocentric(lat, lon, h)
        cards += [("OBSGEO-B", lat, "[deg] site latitude (geodetic, WGS84)"),
                  ("OBSGEO-L", lon, "[deg] site longitude, east"),
                  ("OBSGEO-H", h, "[m] site height above the ellipsoid"),
                  ("OBSGEO-X", x, "[m] site, geocentric"),
                  ("OBSGEO-Y", y, "[m]"),
                  ("OBSGEO-Z", z, "[m]")]
    return cards


def _tiles(n_chan: int, n_time: int) -> tuple[int, int]:
    """Compression tiles: up to 1024 channels by the whole run (few tiles keep astropy's
    per-tile cost low and HCOMPRESS measured smallest so; it needs at least 4 pixels along
    each axis of every tile)."""
    rows = min(1024, n_chan)
    if 0 < n_chan % rows < 4:
        rows = n_chan
    return rows, n_time


def _power_tiles(n_chan: int, n_time: int) -> dict:
    """Compression of the quantised power: HCOMPRESS with scale 0 (lossless on the
    integers; White 1992 H-transform, in the FITS tiled-image convention, FITS Standard
    4.0 §10.4), which measured 5 % smaller than RICE_1 on noisy spectra; RICE_1 for images too small
    for HCOMPRESS."""
    if n_chan < 4 or n_time < 4:
        return dict(compression_type="RICE_1")
    return dict(compression_type="HCOMPRESS_1", hcomp_scale=0, tile_shape=_tiles(n_chan, n_time))


def _hdu_set(spec: DynamicSpectrum, station: dict, lossless: bool, ver: int) -> list:
    """POWER, FLAGS and CHANNELS HDUs of one run (EXTVER ``ver``)."""
    site = _site(station, spec.meta)
    wcs = _wcs_cards(spec, site)
    power = np.ascontiguousarray(spec.power_db.T)            # (n_chan, n_time): TIME along NAXIS1
    if lossless:
        hp = fits.CompImageHDU(power.astype(np.float32), compression_type="GZIP_2", quantize_level=0.0,
                               tile_shape=_tiles(*power.shape))
    else:
        q = np.rint(power / np.float32(QUANT_STEP_DB))
        bad = ~np.isfinite(q)
        np.clip(q, BLANK + 1, 32767, out=q)
        q[bad] = BLANK
        hp = fits.CompImageHDU(q.astype(np.int16), **_power_tiles(*power.shape))
        hp.header["BSCALE"] = (QUANT_STEP_DB, "[dB] quantisation step")
        hp.header["BZERO"] = 0.0
        hp.header["BLANK"] = (BLANK, "no data (NaN)")
    h = hp.header
    h["EXTNAME"] = ("POWER", "power in dB, arbitrary reference")
    h["EXTVER"] = ver
    h["BUNIT"] = ("dB", "log power, arbitrary reference")
    for key, value, comment in wcs:
        h[key] = (value, comment)
    h["RXSEG"] = (_ascii(spec.segment), "data segment id")
    h["RXVERS"] = (__version__, "rxlog version")
    h["RXQSTEP"] = (0.0 if lossless else QUANT_STEP_DB, "[dB] quantisation step, 0 = lossless float32")
    for key, value in spec.meta.items():
        if key in _SITE_KEYS:
            continue                                           # carried by OBSGEO-*
        if not _META_KEY_RE.match(str(key)) or not isinstance(value, (str, int, float, bool)):
            raise ValueError(f"spectrum meta {key!r}={value!r} is not header-safe "
                             "(keys: letters, digits, _ . -; values: str, int, float, bool)")
        h[f"HIERARCH RXMETA {key}"] = _ascii(value) if isinstance(value, str) else value

    hf = fits.CompImageHDU(np.ascontiguousarray(spec.flags.T), compression_type="GZIP_2",
                           tile_shape=_tiles(*power.shape))
    h = hf.header
    h["EXTNAME"] = ("FLAGS", "bits of each POWER pixel")
    h["EXTVER"] = ver
    for key, value, comment in wcs:
        h[key] = (value, comment)
    h["RXBIT1"] = (FLAG_RFI, "flag bit: interference")
    h["RXBIT2"] = (FLAG_GAP, "flag bit: no data")
    h["RXBIT4"] = (FLAG_RETUNE, "flag bit: discarded after a retune")
    h["RXBIT8"] = (FLAG_UNCOVERED, "flag bit: channel not covered by the receiver")

    ht = fits.BinTableHDU.from_columns([
        fits.Column(name="FREQ", format="D", unit="Hz", array=spec.freq_hz),
        fits.Column(name="CHAN_OFFSET", format="E", unit="s", array=spec.chan_offset_s),
    ])
    ht.header["EXTNAME"] = ("CHANNELS", "channel centre and sampling offset within a row")
    ht.header["EXTVER"] = ver
    return [hp, hf, ht]


def _ascii(text: str) -> str:
    """FITS header values are printable ASCII (FITS Standard 4.0 §4.2.1)."""
    return "".join(c if " " <= c <= "~" else "?" for c in str(text))


def _primary(station: dict, kind: str) -> fits.PrimaryHDU:
    p = fits.PrimaryHDU()
    h = p.header
    h["RXFORMAT"] = (FORMAT, "rxlog dynamic spectra: POWER/FLAGS/CHANNELS sets")
    h["RXKIND"] = (kind, "hour, chunk or spectrum")
    h["RXVERS"] = (__version__, "rxlog version")
    h["TELESCOP"] = (_ascii(station.get("name", "")), "station")
    h["DATE"] = (dt.datetime.now(dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%S"), "file written (UTC)")
    return p


# --------------------------------------------------------------------------- atomic files

def _write_atomic(path: Path, hdus: list) -> None:
    """Write an HDU list to ``path`` crash-safely (see rxlog.fileio)."""
    def dump(fh):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", fits.verify.VerifyWarning)
            fits.HDUList(hdus).writeto(fh)
    write_atomic(path, dump, what="archive file")


@contextlib.contextmanager
def _locked(root: Path):
    """Exclusive lock of the archive for writing files (flock, released if the process dies)."""
    ensure_dir(root)
    with open(root / _LOCK_NAME, "a") as fh:
        fcntl.flock(fh, fcntl.LOCK_EX)
        try:
            yield
        finally:
            fcntl.flock(fh, fcntl.LOCK_UN)


# --------------------------------------------------------------------------- reading our files

def _header_float(h, key: str, path) -> float:
    if key not in h:
        raise RxlogError(f"{path}: missing keyword {key}")
    if isinstance(h[key], bool):
        raise RxlogError(f"{path}: keyword {key} = {h[key]!r} is not a number")
    try:
        v = float(h[key])
    except (TypeError, ValueError):
        raise RxlogError(f"{path}: keyword {key} = {h[key]!r} is not a number") from None
    if not math.isfinite(v):
        raise RxlogError(f"{path}: keyword {key} = {h[key]!r} is not a finite number")
    return v


def _own_sets(hdul, path) -> list[tuple[DynamicSpectrum, bool]]:
    """(spectrum, lossless) for every POWER/FLAGS/CHANNELS set of one of our files."""
    out = []
    for hdu in hdul[1:]:
        if hdu.name != "POWER":
            continue
        ver = hdu.ver
        h = hdu.header.copy()                               # before .data strips BSCALE
        power = np.asarray(hdu.data, dtype=np.float32).T.copy()
        flags = np.asarray(hdul["FLAGS", ver].data, dtype=np.uint8).T.copy()
        table = hdul["CHANNELS", ver].data
        t = _time_axis(h, 1, path)
        meta = {k[len("RXMETA "):]: v for k, v in h.items() if k.startswith("RXMETA ")}
        meta.update(_site_meta(h, path))
        spec = DynamicSpectrum(power_db=power, t0=t["t0"], cadence_s=t["cadence"],
                               freq_hz=np.array(table["FREQ"], dtype=np.float64),
                               flags=flags, chan_offset_s=np.array(table["CHAN_OFFSET"], dtype=np.float32),
                               segment=str(h.get("RXSEG", "0")), meta=meta)
        out.append((spec, float(h.get("RXQSTEP", QUANT_STEP_DB)) == 0.0))
    return out


def _read_file(path: Path) -> list[tuple[DynamicSpectrum, bool]]:
    try:
        with fits.open(path, memmap=False) as hdul:
            if hdul[0].header.get("RXFORMAT") != FORMAT:
                raise RxlogError(f"{path}: not an rxlog archive file (primary RXFORMAT is not {FORMAT!r})")
            return _own_sets(hdul, path)
    except (OSError, KeyError, ValueError, TypeError, IndexError, fits.VerifyError) as e:
        raise RxlogError(f"{path}: unreadable archive file ({e})") from None


# --------------------------------------------------------------------------- WCS axes (ours and foreign)

_FREQ_UNITS = {"HZ": 1.0, "KHZ": 1e3, "MHZ": 1e6, "GHZ": 1e9}
_TIME_UNITS = {"S": 1.0, "MIN": 60.0, "H": 3600.0, "D": 86400.0}


def _opt_float(h, key: str, default: float, path) -> float:
    return _header_float(h, key, path) if key in h else default


def _axis_scale(h, i: int, path) -> float:
    """Pixel spacing of axis i: CDi_i, or CDELTi times PCi_i; off-diagonal terms must be 0."""
    j = 3 - i
    if any(k in h for k in (f"CD{i}_{i}", f"CD{i}_{j}", f"CD{j}_{i}", f"CD{j}_{j}")):
        if _opt_float(h, f"CD{i}_{j}", 0.0, path) != 0.0 or _opt_float(h, f"CD{j}_{i}", 0.0, path) != 0.0:
            raise RxlogError(f"{path}: keyword CD{i}_{j}/CD{j}_{i}: rotated axes are not supported; "
                             "expected time and frequency along the image axes")
        scale = _header_float(h, f"CD{i}_{i}", path)
    else:
        if _opt_float(h, f"PC{i}_{j}", 0.0, path) != 0.0 or _opt_float(h, f"PC{j}_{i}", 0.0, path) != 0.0:
            raise RxlogError(f"{path}: keyword PC{i}_{j}/PC{j}_{i}: rotated axes are not supported; "
                             "expected time and frequency along the image axes")
        scale = _header_float(h, f"CDELT{i}", path) * _opt_float(h, f"PC{i}_{i}", 1.0, path)
    if scale == 0.0:
        raise RxlogError(f"{path}: keyword CDELT{i} is 0; expected the pixel spacing")
    return scale


def _parse_date(text, key: str, path) -> float:
    """FITS date string (ISO 8601 'YYYY-MM-DD[Thh:mm:ss[.s...]]', FITS Standard 4.0 §4.4.2.1)
    -> POSIX seconds, the clock reading taken as given (time scale applied by the caller)."""
    s = str(text).strip()
    try:
        d = dt.datetime.fromisoformat(s[:-1] if s.endswith("Z") else s)
    except ValueError:
        raise RxlogError(f"{path}: keyword {key} = {text!r} is not a FITS date "
                         "(expected e.g. '2026-12-01T22:00:00')") from None
    if d.tzinfo is None:
        d = d.replace(tzinfo=dt.timezone.utc)
    return d.timestamp()


def _time_origin(h, path) -> tuple[float, str]:
    """Reference time as POSIX seconds on the clock of TIMESYS, and where it came from.

    Paper VII (Rots et al. 2015, §4.1.2.3; FITS Standard 4.0 §9.2.2) gives the reference
    time as MJDREF (or MJDREFI + MJDREFF), JDREF (or JDREFI + JDREFF) or DATEREF, in that
    order of precedence (the order astropy.io.fits.fitstime also follows). With none of
    them the standard implies MJD 0, which no dynamic spectrum means: rxlog then falls back
    to DATE-OBS as the origin of the time axis (documented in the README), else refuses.
    """
    def num(key):
        return _header_float(h, key, path)

    if "MJDREFI" in h or "MJDREFF" in h:
        i = num("MJDREFI") if "MJDREFI" in h else 0.0
        f = num("MJDREFF") if "MJDREFF" in h else 0.0
        return (i - _MJD_UNIX_EPOCH) * 86400.0 + f * 86400.0, "MJDREFI+MJDREFF"
    if "MJDREF" in h:
        return (num("MJDREF") - _MJD_UNIX_EPOCH) * 86400.0, "MJDREF"
    if "JDREFI" in h or "JDREFF" in h:
        i = num("JDREFI") if "JDREFI" in h else 0.0
        f = num("JDREFF") if "JDREFF" in h else 0.0
        return (i - 2400000.5 - _MJD_UNIX_EPOCH) * 86400.0 + f * 86400.0, "JDREFI+JDREFF"
    if "JDREF" in h:
        return (num("JDREF") - 2400000.5 - _MJD_UNIX_EPOCH) * 86400.0, "JDREF"
    if "DATEREF" in h:
        return _parse_date(h["DATEREF"], "DATEREF", path), "DATEREF"
    if "DATE-OBS" in h:
        return _parse_date(h["DATE-OBS"], "DATE-OBS", path), "DATE-OBS"
    raise RxlogError(f"{path}: missing keyword MJDREF: the time axis needs its origin "
                     "(MJDREF, MJDREFI+MJDREFF, JDREF or DATEREF per FITS WCS Paper VII; or DATE-OBS)")


def _to_utc_offset(scale: str, t_ref: float, path, key: str) -> float:
    """Seconds to add to a reading on ``scale`` to get UTC, at the reference time.

    TAI - UTC from the leap-second table built into ERFA (``erfa.dat``, no download);
    TT = TAI + 32.184 s and GPS = TAI - 19 s by definition (IERS Conventions 2010, ch. 1).
    A file spanning a leap second would be off by 1 s after it: not worth more here.
    """
    if scale in ("UTC", "UT"):
        return 0.0
    shift = {"TAI": 0.0, "TT": TT_MINUS_TAI_S, "TDT": TT_MINUS_TAI_S, "GPS": GPS_MINUS_TAI_S}
    if scale not in shift:
        raise RxlogError(f"{path}: keyword {key} = {scale!r}: time scale not supported; "
                         "expected 'UTC' (or TAI, TT, GPS)")
    import erfa

    try:
        d = dt.datetime(1970, 1, 1) + dt.timedelta(seconds=t_ref)
    except (OverflowError, ValueError):
        raise RxlogError(f"{path}: keyword {key} = {scale!r}: the reference time ({t_ref:g} s from 1970) "
                         "has no calendar date; expected a time origin within the receiver era") from None
    tai_utc = float(erfa.dat(d.year, d.month, d.day, (d.hour * 3600 + d.minute * 60 + d.second) / 86400.0))
    return -(tai_utc + shift[scale])


def _time_axis(h, i: int, path) -> dict:
    """Time axis i of a header -> {'t0': start of the first pixel's bin (POSIX UTC),
    'cadence': s (negative if the axis runs backwards), 'origin': keyword used}."""
    ctype = str(h.get(f"CTYPE{i}", "")).strip().upper()
    unit_name = str(h.get(f"CUNIT{i}", "s")).strip()            # Paper VII: seconds by default
    unit = _TIME_UNITS.get(unit_name.upper())
    if unit is None:
        raise RxlogError(f"{path}: keyword CUNIT{i} = {unit_name!r}: expected 's' for the time axis")
    tunit_name = str(h.get("TIMEUNIT", "s")).strip()
    tunit = _TIME_UNITS.get(tunit_name.upper())
    if tunit is None:
        raise RxlogError(f"{path}: keyword TIMEUNIT = {tunit_name!r}: expected 's'")
    crpix = _header_float(h, f"CRPIX{i}", path)
    crval = _header_float(h, f"CRVAL{i}", path)
    step = _axis_scale(h, i, path) * unit
    ref, origin = _time_origin(h, path)
    offs = _opt_float(h, "TIMEOFFS", 0.0, path) * tunit           # Paper VII clock correction
    scale = ctype if ctype != "TIME" else str(h.get("TIMESYS", "UTC")).strip().upper()
    first = ref + offs + crval * unit + (1.0 - crpix) * step        # world time of pixel 1
    first += _to_utc_offset(scale, ref, path, "TIMESYS" if ctype == "TIME" else f"CTYPE{i}")
    pixr = _opt_float(h, "TIMEPIXR", 0.5, path)                    # where in its bin a pixel's time sits
    if not 0.0 <= pixr <= 1.0:
        raise RxlogError(f"{path}: keyword TIMEPIXR = {pixr:g}: expected 0 to 1 (Paper VII)")
    t0 = first - pixr * abs(step)
    if not (math.isfinite(t0) and math.isfinite(step)):
        raise RxlogError(f"{path}: keywords CRVAL{i}, {_scale_card(h, i)} and {origin}: the time axis "
                         "does not give finite times")
    return {"t0": t0, "cadence": step, "origin": origin}


def _scale_card(h, i: int) -> str:
    """The card that gives axis i's pixel spacing: CDi_i when a CD matrix is used, else CDELTi."""
    return f"CD{i}_{i}" if f"CD{i}_{i}" in h else f"CDELT{i}"


def _freq_axis(h, i: int, n: int, path) -> np.ndarray:
    unit_name = str(h.get(f"CUNIT{i}", "Hz")).strip()
    unit = _FREQ_UNITS.get(unit_name.upper())
    if unit is None:
        raise RxlogError(f"{path}: keyword CUNIT{i} = {unit_name!r}: expected 'Hz', 'kHz' or 'MHz' "
                         "for the frequency axis")
    crpix = _header_float(h, f"CRPIX{i}", path)
    crval = _header_float(h, f"CRVAL{i}", path)
    f = (crval + (np.arange(1, n + 1, dtype=np.float64) - crpix) * _axis_scale(h, i, path)) * unit
    if f.min() <= 0 or (f"CUNIT{i}" not in h and f.max() < 1e3):
        raise RxlogError(f"{path}: keyword CUNIT{i}: frequencies {f.min():g}..{f.max():g} Hz are not "
                         "radio frequencies; give CUNIT as 'Hz', 'kHz' or 'MHz'")
    return f


def _site_meta(h, path) -> dict:
    """The observing site from OBSGEO-B/L/H, else OBSGEO-X/Y/Z (Paper VII §4.1.3)."""
    if all(k in h for k in ("OBSGEO-B", "OBSGEO-L", "OBSGEO-H")):
        return {"site_latitude_deg": _header_float(h, "OBSGEO-B", path),
                "site_longitude_deg": _header_float(h, "OBSGEO-L", path),
                "site_elevation_m": _header_float(h, "OBSGEO-H", path)}
    if all(k in h for k in ("OBSGEO-X", "OBSGEO-Y", "OBSGEO-Z")):
        from astropy import units as u
        from astropy.coordinates import EarthLocation

        loc = EarthLocation.from_geocentric(*(_header_float(h, k, path) for k in ("OBSGEO-X", "OBSGEO-Y", "OBSGEO-Z")),
                                            unit=u.m)
        return {"site_latitude_deg": float(loc.lat.deg), "site_longitude_deg": float(loc.lon.deg),
                "site_elevation_m": float(loc.height.to_value(u.m))}
    return {}


# --------------------------------------------------------------------------- foreign files

def _file_digest(path: Path) -> str:
    """Short content hash: the segment id of a foreign file, the same however often it is read."""
    h = hashlib.sha1()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()[:12]


class _ForeignImage:
    """A 2-D FITS image with a FREQ and a TIME/UTC axis, read in blocks of rows."""

    def __init__(self, hdul, path: Path, accepted_bands: list[tuple[float, float]] | None = None):
        self.path = path
        hdu = next((x for x in hdul if x.is_image and x.header.get("NAXIS", 0) >= 2), None)
        if hdu is None:
            raise RxlogError(f"{path}: no image HDU with NAXIS = 2; expected a 2-D dynamic spectrum")
        h = hdu.header
        _check_cards(h, path)
        if h["NAXIS"] != 2:
            raise RxlogError(f"{path}: keyword NAXIS = {h['NAXIS']}: expected a 2-D image (time x frequency)")
        self.hdu, self.header = hdu, h
        ctypes = [str(h.get(f"CTYPE{i}", "")).strip().upper() for i in (1, 2)]
        freq = [i for i in (1, 2) if ctypes[i - 1] == "FREQ"]
        time = [i for i in (1, 2) if ctypes[i - 1] in ("TIME", "UTC")]
        if len(freq) != 1 or len(time) != 1:
            missing = "CTYPE1" if "CTYPE1" not in h else ("CTYPE2" if "CTYPE2" not in h else "CTYPE1/CTYPE2")
            raise RxlogError(f"{path}: keyword {missing}: expected one axis 'FREQ' and one 'TIME' or 'UTC', "
                             f"got CTYPE1={ctypes[0]!r}, CTYPE2={ctypes[1]!r}")
        self.ti, self.fi = time[0], freq[0]
        self.n_time, n_chan = int(h[f"NAXIS{self.ti}"]), int(h[f"NAXIS{self.fi}"])
        info = hdu.fileinfo() or {}
        size = getattr(info.get("file"), "size", 0)             # 0 for a gzipped file (checked unpacked)
        tiled = isinstance(hdu, fits.CompImageHDU)               # stored size differs; bad tiles fail on reading
        if size and not tiled and info["datLoc"] + hdu.size > size:
            raise RxlogError(f"{path}: keywords BITPIX, NAXIS1, NAXIS2 declare {hdu.size} bytes of image data, "
                             f"but the file ends {size - info['datLoc']} bytes after the header: it is cut short")
        if self.n_time < 1 or n_chan < 1:
            raise RxlogError(f"{path}: keyword NAXIS{self.ti if self.n_time < 1 else self.fi} = 0: "
                             "expected at least one spectrum and one channel")
        freq_hz = _freq_axis(h, self.fi, n_chan, path)
        t = _time_axis(h, self.ti, path)
        cad = t["cadence"]
        _check_axes(h, path, self.ti, self.fi, t, freq_hz, accepted_bands or validate.bands())
        # Rows and channels in increasing order; remember where to read them from.
        self.t_flip = cad < 0
        self.f_flip = bool(freq_hz[-1] < freq_hz[0])
        self.cadence = abs(cad)
        self.t0 = t["t0"] if not self.t_flip else t["t0"] + cad * (self.n_time - 1)
        self.freq_hz = freq_hz[::-1].copy() if self.f_flip else freq_hz
        bunit = str(h.get("BUNIT", "")).strip()
        self.log_power = bunit.lower().startswith("db")
        self.segment = f"fits-{_file_digest(path)}"
        self.meta = {"source_file": _ascii(path.name), "source_bunit": bunit or "(none)",
                     "source_time_origin": t["origin"]}
        for key, name in (("TELESCOP", "source_telescope"), ("INSTRUME", "source_instrument"),
                          ("OBSERVER", "source_observer")):
            if key in h:
                self.meta[name] = str(h[key])
        self.meta.update(_site_meta(h, path))
        self._uncovered = None

    def _power(self, i0: int, i1: int) -> np.ndarray:
        """Rows i0..i1-1 (in increasing time, channels increasing) as float32 dB, NaN where no data."""
        n = self.n_time
        r0, r1 = (n - i1, n - i0) if self.t_flip else (i0, i1)
        try:
            raw = self.hdu.section[:, r0:r1] if self.ti == 1 else self.hdu.section[r0:r1, :]
            img = np.asarray(raw, dtype=np.float64)          # astropy applies BSCALE/BZERO, BLANK -> NaN
        except (OSError, EOFError, ValueError, TypeError, IndexError, KeyError, zlib.error) as e:
            raise RxlogError(f"{self.path}: image data unreadable from spectrum {i0 + 1} on ({str(e)[:80]}); "
                             "is the file cut short?") from None
        if self.ti == 1:
            img = img.T                                       # -> (time, freq)
        if self.t_flip:
            img = img[::-1]
        if self.f_flip:
            img = img[:, ::-1]
        if not self.log_power:
            with np.errstate(divide="ignore", invalid="ignore"):
                img = np.where(img > 0, 10.0 * np.log10(img), np.nan)   # zero/negative: no data
        finite = np.isfinite(img)
        if finite.any() and np.abs(img[finite]).max() > MAX_ABS_POWER_DB:
            peak = np.abs(img[finite]).max()
            raise RxlogError(f"{self.path}: power of {peak:.4g} dB in spectra {i0 + 1}-{i1}; expected at most "
                             f"{MAX_ABS_POWER_DB:.0f} dB (keyword BUNIT: 'dB' for log power, else linear)")
        power = img.astype(np.float32)
        power[~np.isfinite(power)] = np.nan
        return power

    def uncovered(self) -> np.ndarray:
        """Channels without a single usable value in the whole file: not covered by the
        instrument, so flagged UNCOVERED rather than GAP."""
        if self._uncovered is None:
            seen = np.zeros(self.freq_hz.size, dtype=bool)
            step = max(1, 4_000_000 // max(1, self.freq_hz.size))
            for i0 in range(0, self.n_time, step):
                seen |= np.isfinite(self._power(i0, min(self.n_time, i0 + step))).any(axis=0)
            if not seen.any():
                what = "NaN or BLANK" if self.log_power else "NaN, zero or negative (linear power)"
                raise RxlogError(f"{self.path}: no usable power value: every pixel is {what}; "
                                 "expected a dynamic spectrum")
            self._uncovered = ~seen
        return self._uncovered

    def block(self, i0: int, i1: int) -> DynamicSpectrum:
        """Rows i0..i1-1 (in increasing time) as a dynamic spectrum with flags for missing cells."""
        power = self._power(i0, i1)
        flags = np.where(np.isnan(power), FLAG_GAP, 0).astype(np.uint8)
        flags[:, self.uncovered()] = FLAG_UNCOVERED
        return DynamicSpectrum(power_db=power, t0=self.t0 + i0 * self.cadence, cadence_s=self.cadence,
                               freq_hz=self.freq_hz, flags=flags, segment=self.segment, meta=dict(self.meta))


def _check_cards(h, path) -> None:
    """Every card's value must parse (FITS Standard 4.0 §4.2): astropy raises only when a
    broken one is looked at, so look at all of them first."""
    for card in h.cards:
        try:
            card.value
        except fits.VerifyError:
            text = card.image[10:].split(" /")[0].strip()
            raise RxlogError(f"{path}: keyword {card.keyword}: value {text[:30]} is not a FITS value "
                             "(a number, 'quoted text', T or F)") from None
    if h.get("BITPIX") not in (8, 16, 32, 64, -32, -64):          # FITS Standard 4.0 Table 8
        raise RxlogError(f"{path}: keyword BITPIX = {h.get('BITPIX')!r}: expected 8, 16, 32, 64, -32 or -64")


def _check_axes(h, path, ti: int, fi: int, t: dict, freq_hz: np.ndarray, accepted) -> None:
    """Refuse axes no dynamic spectrum of the band has: see rxlog.validate for the limits."""
    step, f_card, t_card = t["cadence"], _scale_card(h, fi), _scale_card(h, ti)
    problem = validate.cadence_problem(step)
    if problem:
        raise RxlogError(f"{path}: keyword {t_card}: {problem}")
    if freq_hz.size > 1:
        df = float(freq_hz[1] - freq_hz[0])
    else:                                      # one channel: its width from the card (unit checked already)
        df = _axis_scale(h, fi, path) * _FREQ_UNITS[str(h.get(f"CUNIT{fi}", "Hz")).strip().upper()]
    problem = validate.band_problem(float(freq_hz.min()) - abs(df) / 2, float(freq_hz.max()) + abs(df) / 2,
                                    accepted)
    if problem:
        raise RxlogError(f"{path}: keywords CRVAL{fi}, {f_card}, CUNIT{fi}: {problem}")
    problem = validate.channel_problem(df, step)
    if problem:
        raise RxlogError(f"{path}: keyword {f_card}: {problem}")
    n_time = int(h[f"NAXIS{ti}"])
    problem = validate.era_problem(min(t["t0"], t["t0"] + step * n_time), max(t["t0"], t["t0"] + step * n_time))
    if problem:
        raise RxlogError(f"{path}: keywords {t['origin']}, CRVAL{ti}, {t_card}: {problem}")


@contextlib.contextmanager
def _quiet_astropy():
    """Reading a file from elsewhere, astropy warns about broken cards and short files on
    the way; rxlog's own message says what is wrong, once."""
    from astropy.utils.exceptions import AstropyUserWarning

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", fits.verify.VerifyWarning)
        warnings.simplefilter("ignore", AstropyUserWarning)
        yield


def _check_complete(path: Path) -> None:
    """Refuse a FITS file (plain or gzip) that is cut short, before astropy reads it: astropy
    silently drops HDUs missing from the end of a truncated .gz."""
    try:
        with open(path, "rb") as fh:
            gz = fh.read(2) == b"\x1f\x8b"                  # gzip magic (RFC 1952 §2.3.1)
        if gz:
            n = 0
            with gzip.open(path, "rb") as g:
                for block in iter(lambda: g.read(1 << 20), b""):
                    n += len(block)
        else:
            n = path.stat().st_size
    except (EOFError, zlib.error, gzip.BadGzipFile) as e:
        raise RxlogError(f"{path}: gzip data cut short or corrupt ({e}); expected a complete .fits.gz") from None
    except OSError as e:
        raise RxlogError(f"{path}: cannot read ({e.strerror or e})") from None
    if n == 0 or n % FITS_BLOCK:
        raise RxlogError(f"{path}: {n} bytes{' once unpacked' if gz else ''} is not a whole number of "
                         f"{FITS_BLOCK}-byte FITS blocks (FITS Standard 4.0 §3.1): the file is cut short")


@contextlib.contextmanager
def _open_foreign(path: Path, accepted_bands: list[tuple[float, float]] | None = None):
    try:
        hdul = fits.open(path, memmap=False)              # sections read from the file, scaled
    except (OSError, EOFError, ValueError, zlib.error, fits.VerifyError) as e:
        raise RxlogError(f"{path}: cannot open as FITS ({e})") from None
    try:
        yield _ForeignImage(hdul, path, accepted_bands)
    finally:
        hdul.close()


# --------------------------------------------------------------------------- single-file API

def _is_own(path: Path) -> bool:
    """Is this a file in rxlog's own layout (RXFORMAT in the primary header)?"""
    try:
        with fits.open(path, memmap=True) as hdul:
            return hdul[0].header.get("RXFORMAT") == FORMAT
    except (OSError, EOFError, ValueError, zlib.error, fits.VerifyError) as e:
        raise RxlogError(f"{path}: cannot open as FITS ({e})") from None


def write_spectrum_fits(spec: DynamicSpectrum, path, station: dict, lossless: bool = False) -> Path:
    """Write one self-contained FITS file with the archive's layout (one POWER/FLAGS/CHANNELS
    set), atomically. ``station`` gives the site and name (``cfg['station']``)."""
    path = Path(path)
    _write_atomic(path, [_primary(station, "spectrum")] + _hdu_set(spec, station, lossless, 1))
    return path


def read_spectrum_fits(path) -> DynamicSpectrum:
    """Read a dynamic spectrum from a FITS file: one of ours, or a foreign 2-D image whose axes
    are standard WCS (one CTYPE 'FREQ' in Hz/kHz/MHz, the other 'TIME' or 'UTC' in s with its
    origin from MJDREF, MJDREFI+MJDREFF, JDREF or DATEREF; DATE-OBS as a fallback), in either
    axis order. BUNIT starting with 'dB' means log power; anything else is linear power and is
    converted to dB (zero or negative values become NaN with FLAG_GAP). OBSGEO-B/L/H (or -X/Y/Z)
    give the site in ``meta``. Raises RxlogError naming the file and keyword when it cannot,
    and for a foreign file whose axes fall outside ``rxlog.validate``'s limits (16-24 MHz not
    reached, time step, channel width, dates outside the receiver era)."""
    path = Path(path)
    _check_complete(path)
    with _quiet_astropy():
        if _is_own(path):
            sets = _read_file(path)
            if len(sets) != 1:
                raise RxlogError(f"{path}: holds {len(sets)} segments; read it with read_archive")
            return sets[0][0]
        with _open_foreign(path) as img:
            return img.block(0, img.n_time)


# --------------------------------------------------------------------------- runs

def _key(spec: DynamicSpectrum) -> tuple:
    """What must not change inside a run: segment, cadence, channels, receiver settings."""
    return (spec.segment, float(spec.cadence_s), spec.freq_hz.tobytes(), spec.chan_offset_s.tobytes(),
            tuple(sorted((k, type(v).__name__, v) for k, v in spec.meta.items())))


def _tol(cadence: float) -> float:
    return max(1e-4 * cadence, 1e-6)


def _aligned(t_a: float, t_b: float, cadence: float) -> bool:
    k = (t_b - t_a) / cadence
    return abs(k - round(k)) * cadence <= _tol(cadence)


def _assemble(pieces: list[DynamicSpectrum]) -> DynamicSpectrum:
    """Pieces of one key on one grid -> one spectrum; rows no piece covers are NaN + FLAG_GAP."""
    first = min(pieces, key=lambda p: p.t0)
    cad, t0 = first.cadence_s, first.t0
    if len(pieces) == 1:
        return first
    end = max(round((p.t_end - t0) / cad) for p in pieces)
    power = np.full((end, first.n_chan), np.nan, dtype=np.float32)
    flags = np.full((end, first.n_chan), FLAG_GAP, dtype=np.uint8)
    for p in sorted(pieces, key=lambda p: p.t0):
        i = round((p.t0 - t0) / cad)
        power[i:i + p.n_time] = p.power_db
        flags[i:i + p.n_time] = p.flags
    return DynamicSpectrum(power_db=power, t0=t0, cadence_s=cad, freq_hz=first.freq_hz, flags=flags,
                           chan_offset_s=first.chan_offset_s, segment=first.segment, meta=dict(first.meta))


def _merge(pieces: list[tuple[DynamicSpectrum, bool]], max_fill_s: float = math.inf) -> list[tuple[DynamicSpectrum, bool]]:
    """Join pieces of the same key lying on one time grid into runs, filling gaps of at
    most ``max_fill_s`` with NaN + FLAG_GAP rows. Rows present in several pieces (a chunk
    already consolidated into its hour file) are taken once."""
    groups: dict[tuple, list] = {}
    for spec, lossless in pieces:
        groups.setdefault(_key(spec), []).append((spec, lossless))
    out = []
    for members in groups.values():
        members.sort(key=lambda m: m[0].t0)
        runs: list[list] = []                                # [pieces, lossless, t_end]
        for spec, lossless in members:
            cad = spec.cadence_s
            for run in runs:
                if _aligned(run[0][0].t0, spec.t0, cad) and spec.t0 - run[2] <= max_fill_s + _tol(cad):
                    run[0].append(spec)
                    run[1] = run[1] or lossless
                    run[2] = max(run[2], spec.t_end)
                    break
            else:
                runs.append([[spec], lossless, spec.t_end])
        out.extend((_assemble(r[0]), r[1]) for r in runs)
    out.sort(key=lambda m: (m[0].t0, m[0].segment))
    return out


def _split_gap_rows(spec: DynamicSpectrum, max_fill_s: float) -> list[DynamicSpectrum]:
    """Trim rows without data at either end and split where more than ``max_fill_s`` of
    them follow each other."""
    empty = (spec.flags & FLAG_GAP).astype(bool).all(axis=1)
    if not empty.any():
        return [spec]
    good = np.flatnonzero(~empty)
    if good.size == 0:
        return []
    breaks = np.flatnonzero(np.diff(good) - 1 > max_fill_s / spec.cadence_s + 1e-9)
    starts = np.concatenate([[good[0]], good[breaks + 1]])
    ends = np.concatenate([good[breaks], [good[-1]]]) + 1
    return [spec.slice_rows(int(a), int(b)) for a, b in zip(starts, ends)]


# --------------------------------------------------------------------------- file names

def _hour_index(t: float, cadence: float = 0.0) -> int:
    """UTC hour (hours since 1970) of a row starting at t (tolerant of float noise)."""
    return math.floor((t + _tol(cadence) if cadence else t) / _HOUR)


def _hour_stem(name: str, hour: int) -> tuple[Path, str]:
    d = dt.datetime(1970, 1, 1) + dt.timedelta(hours=hour)
    return Path(f"{d:%Y}/{d:%m}/{d:%d}"), f"{name}_{d:%Y%m%dT%H}Z"


def _parse_name(fname: str):
    """File name -> (station name, hour index, is_chunk) or None if not an archive file."""
    m = _NAME_RE.match(fname)
    if not m:
        return None
    d = dt.datetime.strptime(m["date"] + m["hh"], "%Y%m%d%H")
    hour = int((d - dt.datetime(1970, 1, 1)).total_seconds() // _HOUR)
    return m["name"], hour, m["chunk"] is not None


def _day_dirs(root: Path, day0: int | None = None, day1: int | None = None) -> list[Path]:
    """Existing root/YYYY/MM/DD folders, in order, between two day indices (inclusive)."""
    out = []
    if day0 is not None and day1 is not None and day1 - day0 < 400:
        for day in range(day0, day1 + 1):
            d = dt.date(1970, 1, 1) + dt.timedelta(days=day)
            p = root / f"{d:%Y}" / f"{d:%m}" / f"{d:%d}"
            if p.is_dir():
                out.append(p)
        return out
    for y in sorted(p for p in root.glob("[0-9][0-9][0-9][0-9]") if p.is_dir()):
        for m in sorted(p for p in y.glob("[0-9][0-9]") if p.is_dir()):
            for d in sorted(p for p in m.glob("[0-9][0-9]") if p.is_dir()):
                try:
                    day = (dt.date(int(y.name), int(m.name), int(d.name)) - dt.date(1970, 1, 1)).days
                except ValueError:
                    continue
                if (day0 is None or day >= day0) and (day1 is None or day <= day1):
                    out.append(d)
    return out


def _archive_files(root: Path, hour0: int | None = None, hour1: int | None = None):
    """(path, name, hour, is_chunk) of archive files, hour files before chunks, by hour."""
    day0 = None if hour0 is None else hour0 // 24
    day1 = None if hour1 is None else hour1 // 24
    found = []
    for d in _day_dirs(root, day0, day1):
        for entry in os.scandir(d):
            parsed = _parse_name(entry.name)
            if parsed is None:
                continue
            name, hour, chunk = parsed
            if (hour0 is None or hour >= hour0) and (hour1 is None or hour <= hour1):
                found.append((Path(entry.path), name, hour, chunk))
    found.sort(key=lambda f: (f[2], f[3], f[0].name))
    return found


# --------------------------------------------------------------------------- consolidation

def _consolidate(root: Path, name: str, hour: int) -> Path | None:
    """Merge the chunks of one hour (and the hour file, if any) into the hour file,
    atomically, then delete the chunks. Call with the archive lock held."""
    sub, stem = _hour_stem(name, hour)
    folder = root / sub
    hour_path = folder / f"{stem}.fits"
    chunks = sorted(folder.glob(f"{stem}.*.chunk.fits")) if folder.is_dir() else []
    if not chunks:
        return None
    pieces = _read_file(hour_path) if hour_path.exists() else []
    for c in chunks:
        try:
            pieces += _read_file(c)
        except RxlogError as e:               # cannot happen for a renamed chunk; keep it aside
            warnings.warn(f"{e}; kept as {c.name}.bad", RuntimeWarning)
            os.replace(c, c.with_name(c.name + ".bad"))
    runs = _merge(pieces)
    station = {"name": name}
    hdus = [_primary(station, "hour")]
    for ver, (spec, lossless) in enumerate(runs, start=1):
        hdus += _hdu_set(spec, station, lossless, ver)
    _write_atomic(hour_path, hdus)
    for c in chunks:
        with contextlib.suppress(FileNotFoundError):
            c.unlink()
    fsync_dir(folder)
    return hour_path


def _recover(root: Path) -> None:
    """Clean up after a writer that was killed: delete temporary files (only a writer
    holding the lock has any, and we hold it now) and consolidate leftover chunks."""
    pending = set()
    for d in _day_dirs(root):
        for entry in os.scandir(d):
            if entry.name.startswith(".") and entry.name.endswith(".tmp"):
                os.unlink(entry.path)
                continue
            parsed = _parse_name(entry.name)
            if parsed and parsed[2]:
                pending.add(parsed[:2])
    for name, hour in sorted(pending):
        _consolidate(root, name, hour)


# --------------------------------------------------------------------------- writer

class ArchiveWriter:
    """Append dynamic spectra to the archive under ``root`` (``cfg.archive_dir``).

    ``write(spec)`` takes rows of any length; at most ``CHUNK_S`` of spectra are held in
    memory, the rest reach disk as chunk files. When the UTC hour changes (and on
    ``close()``) the hour's chunks are consolidated into its hour file. Constructing a
    writer first recovers what a killed writer left behind.
    ``station`` is ``cfg['station']`` (name for file names; site for OBSGEO-*).
    """

    def __init__(self, root, station: dict, lossless: bool = False, chunk_s: float = CHUNK_S):
        self.root = Path(root)
        self.station = dict(station)
        self.name = str(station.get("name") or "station")
        if not re.fullmatch(r"[A-Za-z0-9_-]{1,40}", self.name):
            raise RxlogError(f"station name {self.name!r}: expected 1-40 letters, digits, '-' or '_'")
        self.lossless = bool(lossless)
        self.chunk_s = float(chunk_s)
        self._buf: list[DynamicSpectrum] = []
        self._buf_rows = 0
        self._pending: set[int] = set()     # hours with chunks written by us, not yet consolidated
        self._count = 0
        self.rows_written = 0               # rows this writer has put on disk (chunk or hour files)
        with _locked(self.root):
            _recover(self.root)

    # -- public
    def write(self, spec: DynamicSpectrum) -> None:
        if spec.n_time == 0:
            return
        if not spec.cadence_s > 0:
            raise ValueError(f"cadence_s must be positive, got {spec.cadence_s}")
        for piece in self._split_hours(spec):
            self._append(piece)

    @property
    def rows_buffered(self) -> int:
        """Rows held in memory, not yet on disk (a crash now would lose them)."""
        return self._buf_rows

    def flush(self) -> None:
        """Put everything held in memory on disk now (as a chunk)."""
        self._write_chunk(self._buf_rows)

    def close(self) -> None:
        """Flush and consolidate every hour this writer touched."""
        self._write_chunk(self._buf_rows, hour_done=True)
        self._consolidate(set(self._pending))

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    # -- internals
    def _split_hours(self, spec: DynamicSpectrum):
        cad, i = spec.cadence_s, 0
        while i < spec.n_time:
            hour = _hour_index(spec.t0 + i * cad, cad)
            end = (hour + 1) * _HOUR
            j = min(spec.n_time, max(i + 1, math.ceil((end - spec.t0 - _tol(cad)) / cad)))
            yield spec.slice_rows(i, j) if (i, j) != (0, spec.n_time) else spec
            i = j

    def _append(self, piece: DynamicSpectrum) -> None:
        if self._buf:
            last = self._buf[-1]
            same = _key(last) == _key(piece)
            if same and piece.t0 < last.t_end - _tol(last.cadence_s):
                raise ValueError(f"segment {piece.segment!r}: spectra go back in time "
                                 f"({piece.t0} before {last.t_end})")
            contiguous = same and abs(piece.t0 - last.t_end) <= _tol(last.cadence_s)
            new_hour = _hour_index(piece.t0, piece.cadence_s) != _hour_index(last.t0, last.cadence_s)
            if not contiguous or new_hour:
                self._write_chunk(self._buf_rows, hour_done=new_hour)
        hour = _hour_index(piece.t0, piece.cadence_s)
        done = {h for h in self._pending if h != hour}
        if done:
            self._consolidate(done)
        self._buf.append(piece)
        self._buf_rows += piece.n_time
        rows = max(1, int(self.chunk_s / piece.cadence_s + 1e-9))
        while self._buf_rows >= rows:
            self._write_chunk(rows)

    def _write_chunk(self, rows: int, hour_done: bool = False) -> None:
        """Write the first ``rows`` buffered rows as one chunk file.

        When they are all of an hour that is over and nothing else of that hour is on
        disk (bulk writes with long chunks), they go straight to the hour file instead:
        the same atomic write, without writing and merging a chunk.
        """
        if rows <= 0 or not self._buf:
            return
        spec = self._buf[0] if len(self._buf) == 1 else _concat(self._buf)
        part, rest = spec.slice_rows(0, rows), spec.slice_rows(rows, spec.n_time)
        hour = _hour_index(part.t0, part.cadence_s)
        sub, stem = _hour_stem(self.name, hour)
        folder = self.root / sub
        with _locked(self.root):
            hour_done = hour_done or part.t_end >= (hour + 1) * _HOUR - _tol(part.cadence_s)
            alone = (hour_done and hour not in self._pending
                     and not (folder / f"{stem}.fits").exists()
                     and not (folder.is_dir() and any(folder.glob(f"{stem}.*.chunk.fits"))))
            if alone:
                _write_atomic(folder / f"{stem}.fits",
                              [_primary(self.station, "hour")] + _hdu_set(part, self.station, self.lossless, 1))
            else:
                path = folder / f"{stem}.{os.getpid()}-{self._count:06d}.chunk.fits"
                _write_atomic(path, [_primary(self.station, "chunk")] + _hdu_set(part, self.station, self.lossless, 1))
                self._pending.add(hour)
        self._count += 1
        self.rows_written += part.n_time
        self._buf = [rest] if rest.n_time else []
        self._buf_rows = rest.n_time

    def _consolidate(self, hours: set[int]) -> None:
        with _locked(self.root):
            for hour in sorted(hours):
                _consolidate(self.root, self.name, hour)
                self._pending.discard(hour)


def _concat(pieces: list[DynamicSpectrum]) -> DynamicSpectrum:
    first = pieces[0]
    return DynamicSpectrum(
        power_db=np.concatenate([p.power_db for p in pieces]), t0=first.t0, cadence_s=first.cadence_s,
        freq_hz=first.freq_hz, flags=np.concatenate([p.flags for p in pieces]),
        chan_offset_s=first.chan_offset_s, segment=first.segment, meta=dict(first.meta))


# --------------------------------------------------------------------------- reader

def read_archive(root, t0: float, t1: float, fill_gaps_up_to_s: float = DEFAULT_FILL_S) -> ArchiveRead:
    """Spectra with row start in [t0, t1) from hour files and not yet consolidated chunks.

    Each segment comes back on its own regular grid, never resampled: runs of one segment
    in neighbouring files are joined (across hour boundaries); gaps inside a segment of at
    most ``fill_gaps_up_to_s`` become NaN rows with FLAG_GAP, longer ones split it.
    ``gaps`` lists the stretches of [t0, t1) covered by no row (before, between and after
    the data), ignoring slivers shorter than half a cadence.
    """
    root = Path(root)
    t0, t1 = float(t0), float(t1)
    pieces = []
    for attempt in range(3):                  # a writer may consolidate chunks while we read
        try:
            pieces = []
            last_hour = math.ceil(t1 / _HOUR) - 1           # rows start before t1
            for path, _name, _hour, _chunk in _archive_files(root, _hour_index(t0), last_hour):
                for spec, lossless in _read_file(path):
                    clipped = _clip(spec, t0, t1)
                    if clipped is not None:
                        pieces.append((clipped, lossless))
            break
        except RxlogError:
            if attempt == 2:
                raise
    segments = []
    for spec, _lossless in _merge(pieces, fill_gaps_up_to_s):
        segments += _split_gap_rows(spec, fill_gaps_up_to_s)
    segments.sort(key=lambda s: (s.t0, s.segment))
    return ArchiveRead(segments=segments, gaps=_gaps(segments, t0, t1))


def _clip(spec: DynamicSpectrum, t0: float, t1: float) -> DynamicSpectrum | None:
    tol = _tol(spec.cadence_s)
    i0 = max(0, math.ceil((t0 - spec.t0 - tol) / spec.cadence_s))
    i1 = min(spec.n_time, math.ceil((t1 - spec.t0 - tol) / spec.cadence_s))
    if i1 <= i0:
        return None
    return spec if (i0, i1) == (0, spec.n_time) else spec.slice_rows(i0, i1)


def _gaps(segments: list[DynamicSpectrum], t0: float, t1: float) -> list[tuple[float, float]]:
    spans = []
    for s in segments:
        empty = (s.flags & FLAG_GAP).astype(bool).all(axis=1)
        good = np.flatnonzero(~empty)
        if good.size == 0:
            continue
        breaks = np.flatnonzero(np.diff(good) > 1)
        starts = np.concatenate([[good[0]], good[breaks + 1]])
        ends = np.concatenate([good[breaks], [good[-1]]]) + 1
        spans += [(s.t0 + a * s.cadence_s, s.t0 + b * s.cadence_s, s.cadence_s) for a, b in zip(starts, ends)]
    spans.sort()
    gaps, cursor, cad = [], t0, None
    for a, b, c in spans:
        slack = 0.5 * min(c, cad) if cad else 0.5 * c
        if a - cursor > slack:
            gaps.append((float(cursor), float(min(a, t1))))
        if b > cursor:
            cursor, cad = b, c
    if t1 - cursor > (0.5 * cad if cad else 0.0):
        gaps.append((float(cursor), float(t1)))
    return gaps


def archive_extent(root) -> tuple[float, float] | None:
    """(start of the first row, end of the last row) in the archive, or None if empty."""
    files = _archive_files(Path(root))
    if not files:
        return None
    first_hour, last_hour = files[0][2], files[-1][2]
    starts, ends = [], []
    for path, _n, hour, _c in files:
        if hour not in (first_hour, last_hour):
            continue
        for spec, _l in _read_file(path):
            for part in _split_gap_rows(spec, 0.0):
                starts.append(part.t0)
                ends.append(part.t_end)
    if not starts:
        return None
    return min(starts), max(ends)


def archive_hours(root) -> list[int]:
    """The UTC hours (hours since 1970) that have archive files, oldest first; names only."""
    return sorted({hour for _p, _n, hour, _c in _archive_files(Path(root))})


@dataclass
class FileSpan:
    """One archive file as its headers describe it (no pixels are read)."""
    path: Path
    size_bytes: int
    t0: float          # start of its first row (POSIX s)
    t_end: float       # end of its last row
    data_s: float      # seconds of rows it holds (sum over its runs; NaN rows filling a gap count)


def file_spans(root, hour0: int | None = None, hour1: int | None = None) -> list[FileSpan]:
    """The archive's files of UTC hours ``hour0..hour1`` (hours since 1970; None: no
    limit), hour files before chunks, described from their headers only, so a look at a
    day of files costs milliseconds. Takes no lock: a chunk that a writer consolidates
    while we look is skipped (its rows are then in the hour file)."""
    out = []
    for path, _name, _hour, _chunk in _archive_files(Path(root), hour0, hour1):
        try:
            size = path.stat().st_size
            with fits.open(path, memmap=False) as hdul:
                if hdul[0].header.get("RXFORMAT") != FORMAT:
                    raise RxlogError(f"{path}: not an rxlog archive file (primary RXFORMAT is not {FORMAT!r})")
                runs = []
                for hdu in hdul[1:]:
                    if hdu.name == "POWER":
                        t = _time_axis(hdu.header, 1, path)
                        runs.append((t["t0"], int(hdu.header["NAXIS1"]) * t["cadence"]))
        except FileNotFoundError:
            continue
        except (OSError, KeyError, ValueError, TypeError, IndexError) as e:
            raise RxlogError(f"{path}: unreadable archive file ({e})") from None
        if runs:
            out.append(FileSpan(path=path, size_bytes=size, t0=min(a for a, _ in runs),
                                t_end=max(a + d for a, d in runs), data_s=sum(d for _, d in runs)))
    return out


# --------------------------------------------------------------------------- retention

def prune(root, retention_days: float, now: float | None = None) -> list[Path]:
    """Delete archive files (hour files and chunks) whose whole hour ended more than
    ``retention_days`` ago, and folders left empty. Nothing else under ``root`` or beside
    it (event store, reports) is touched: only names of the archive's own pattern."""
    import time

    root = Path(root)
    if not root.is_dir():
        return []
    cutoff = (time.time() if now is None else float(now)) - float(retention_days) * 86400.0
    last_hour = math.floor(cutoff / _HOUR) - 1            # hours ending at or before the cutoff
    deleted = []
    with _locked(root):
        for path, _name, hour, _chunk in _archive_files(root, None, last_hour):
            path.unlink()
            deleted.append(path)
        for folder in {p.parent for p in deleted}:
            fsync_dir(folder)
            for d in (folder, folder.parent, folder.parent.parent):
                with contextlib.suppress(OSError):
                    d.rmdir()                              # only succeeds when empty
    return deleted


# --------------------------------------------------------------------------- ingest

@dataclass
class IngestSummary:
    """What ``ingest_fits`` stored: one new segment of the archive."""

    path: Path
    segment: str
    t0: float
    t_end: float
    cadence_s: float
    n_time: int
    n_chan: int
    fmin_hz: float
    fmax_hz: float


def ingest_fits(cfg, path, block_s: float = _HOUR) -> list[IngestSummary]:
    """Store a FITS dynamic spectrum from elsewhere in the station archive as a segment of its own.

    It keeps its own channel grid and cadence (never resampled onto the station grid);
    cells without data are NaN with FLAG_GAP and channels without any data in the file are
    flagged FLAG_UNCOVERED, never zero. A foreign file is read in blocks of ``block_s`` so
    memory stays bounded. A file in rxlog's own layout (from a partner station) keeps its
    flags, channel table and segments. Segment ids start with the file's content hash, so
    ingesting a file twice stores it once. Returns one summary per stored segment.

    The file is checked whole before it counts: complete (not cut short), axes within
    ``rxlog.validate``'s limits and reaching 16-24 MHz or the station's band, dates in the
    receiver era, some usable power. It is stored all or nothing (``staged_writer``):
    a refused or failed file leaves the archive byte for byte as it was.
    """
    path = Path(path)
    _check_complete(path)
    with _quiet_astropy():
        return _ingest_checked_fits(cfg, path, block_s)


def _ingest_checked_fits(cfg, path: Path, block_s: float) -> list[IngestSummary]:
    accepted = validate.bands(cfg)
    if _is_own(path):
        digest = _file_digest(path)
        sets = [spec for spec, _l in _read_file(path)]
        if not sets:
            raise RxlogError(f"{path}: an rxlog archive file without a POWER/FLAGS/CHANNELS set; "
                             "expected at least one (is the file cut short?)")
        for k, spec in enumerate(sets, start=1):
            _check_own_set(spec, f"{path}: POWER extension {k}", accepted)
        with staged_writer(cfg) as w:
            for spec in sets:
                spec.segment = f"fits-{digest}:{spec.segment}"
                spec.meta["source_file"] = _ascii(path.name)
                w.write(spec)
        return [_summary(path, s.segment, s.t0, s.cadence_s, s.n_time, s.freq_hz) for s in sets]
    with _open_foreign(path, accepted) as img:
        img.uncovered()                      # reads every pixel once: cut-short data and empty images end here
        rows = max(1, int(block_s / img.cadence))
        with staged_writer(cfg) as w:
            for i0 in range(0, img.n_time, rows):
                w.write(img.block(i0, min(img.n_time, i0 + rows)))
        return [_summary(path, img.segment, img.t0, img.cadence, img.n_time, img.freq_hz)]


def _check_own_set(spec: DynamicSpectrum, where: str, accepted) -> None:
    """The checks of a foreign file's axes (``_check_axes``), for a set in rxlog's own layout."""
    f = spec.freq_hz
    problem = validate.cadence_problem(spec.cadence_s)
    if problem:
        raise RxlogError(f"{where}: keyword CDELT1: {problem}")
    if not np.isfinite(f).all() or (f.size > 1 and not (np.diff(f) > 0).all()):
        raise RxlogError(f"{where}: CHANNELS column FREQ: expected finite, increasing channel frequencies")
    df = float(np.median(np.diff(f))) if f.size > 1 else validate.MAX_CHANNEL_HZ
    problem = (validate.band_problem(float(f[0]) - df / 2, float(f[-1]) + df / 2, accepted)
               or validate.channel_problem(df, spec.cadence_s))
    if problem:
        raise RxlogError(f"{where}: CHANNELS column FREQ: {problem}")
    if not np.isfinite(spec.chan_offset_s).all():
        raise RxlogError(f"{where}: CHANNELS column CHAN_OFFSET: expected finite seconds")
    problem = validate.era_problem(spec.t0, spec.t_end)
    if problem:
        raise RxlogError(f"{where}: keywords MJDREFI, MJDREFF, CRVAL1: {problem}")
    finite = np.isfinite(spec.power_db)
    if not finite.any():
        raise RxlogError(f"{where}: no usable power value (all NaN); expected a dynamic spectrum")
    if np.abs(spec.power_db[finite]).max() > MAX_ABS_POWER_DB:
        raise RxlogError(f"{where}: power beyond {MAX_ABS_POWER_DB:.0f} dB; expected log power in dB")


# --------------------------------------------------------------------------- ingest: all or nothing

_STAGING_PREFIX = ".rxlog-ingest-"


@contextlib.contextmanager
def staged_writer(cfg):
    """An ArchiveWriter for one ingested file, which stores all of it or nothing.

    Spectra go to a private staging archive: in the storage root (the archive's own file
    system) when it exists, else in the temporary folder. Only when the ``with`` block ends
    without an error are its hour files merged into the station archive, under the archive
    lock, each by the crash-safe write (``_commit``); a failure part way puts back every
    hour already merged. A failure before that never touched the archive at all.
    """
    root = cfg.storage_root
    parent = root if root.is_dir() else Path(tempfile.gettempdir())
    _remove_stale_staging(parent)
    try:
        staging = Path(tempfile.mkdtemp(prefix=f"{_STAGING_PREFIX}{os.getpid()}-", dir=parent))
    except OSError as e:
        raise RxlogError(f"{parent}: cannot make a staging folder for the ingest ({e.strerror or e}); "
                         "check free space and permissions") from None
    try:
        with _os_errors_named(staging):
            w = ArchiveWriter(staging / "archive", cfg["station"], lossless=cfg["storage"]["lossless"])
        yield w
        with _os_errors_named(staging):
            w.close()
        with _os_errors_named(cfg.archive_dir):
            _commit(staging, cfg.archive_dir)
    finally:
        shutil.rmtree(staging, ignore_errors=True)


@contextlib.contextmanager
def _os_errors_named(folder: Path):
    """An OSError of the file system (no space, no permission) as an RxlogError naming the folder."""
    try:
        yield
    except OSError as e:
        raise RxlogError(f"{folder}: cannot store the ingested spectra ({e.strerror or e}); "
                         "check free space and permissions; nothing was stored") from None


def _remove_stale_staging(parent: Path) -> None:
    """Delete staging folders of ingests whose process is gone (killed part way)."""
    for entry in parent.glob(f"{_STAGING_PREFIX}*"):
        m = re.match(rf"{re.escape(_STAGING_PREFIX)}(\d+)-", entry.name)
        if not (m and entry.is_dir()):
            continue
        try:
            os.kill(int(m.group(1)), 0)
        except ProcessLookupError:
            shutil.rmtree(entry, ignore_errors=True)
        except (PermissionError, OverflowError):
            pass                               # alive under another user, or not a pid of ours


def _commit(staging: Path, root: Path) -> None:
    """Merge the hour files of a closed staging archive into ``root``, all or nothing.

    Each staged hour is merged with the archive's hour file, if there is one (rows already
    there are taken once, as in consolidation), or copied in. The archive's previous
    version of every hour is kept (a hard link, else a copy) until all hours are in;
    any failure restores them and removes new files and folders.
    """
    staged = [(p, name, hour) for p, name, hour, chunk in _archive_files(staging / "archive") if not chunk]
    if not staged:
        return
    keep = staging / "previous"
    keep.mkdir()
    undo: list[tuple[Path, Path | None, list[Path]]] = []      # (hour file, previous version, new folders)
    with _locked(root):
        try:
            for k, (path, name, hour) in enumerate(staged):
                sub, stem = _hour_stem(name, hour)
                target = root / sub / f"{stem}.fits"
                if target.exists():
                    previous = keep / f"{k}.fits"
                    _keep_copy(target, previous)
                    undo.append((target, previous, []))
                    runs = _merge(_read_file(target) + _read_file(path))
                    station = {"name": name}
                    hdus = [_primary(station, "hour")]
                    for ver, (spec, lossless) in enumerate(runs, start=1):
                        hdus += _hdu_set(spec, station, lossless, ver)
                    _write_atomic(target, hdus)
                else:
                    new = [d for d in (target.parent, target.parent.parent, target.parent.parent.parent)
                           if not d.exists()]
                    undo.append((target, None, new))
                    write_atomic(target, lambda fh, src=path: _copy_file(src, fh), what="archive file")
        except BaseException:
            _undo(undo)
            raise


def _keep_copy(src: Path, dst: Path) -> None:
    try:
        os.link(src, dst)
    except OSError:
        shutil.copy2(src, dst)


def _copy_file(src: Path, fh) -> None:
    with open(src, "rb") as f:
        shutil.copyfileobj(f, fh, 1 << 20)


def _undo(undo: list[tuple[Path, Path | None, list[Path]]]) -> None:
    """Put the archive's hour files back as they were before a failed commit."""
    for target, previous, new_dirs in reversed(undo):
        try:
            if previous is None:
                target.unlink(missing_ok=True)
                for d in new_dirs:                  # deepest first; only empty ones go
                    with contextlib.suppress(OSError):
                        d.rmdir()
            else:
                try:
                    os.replace(previous, target)
                except OSError:                     # another file system: copy the bytes back
                    write_atomic(target, previous.read_bytes(), what="archive file")
            if target.parent.is_dir():
                fsync_dir(target.parent)
        except (OSError, RxlogError) as e:
            warnings.warn(f"{target}: could not be put back after a failed ingest ({e})", RuntimeWarning)


def _summary(path, segment, t0, cadence, n_time, freq_hz) -> IngestSummary:
    return IngestSummary(path=path, segment=segment, t0=t0, t_end=t0 + n_time * cadence, cadence_s=cadence,
                         n_time=n_time, n_chan=freq_hz.size, fmin_hz=float(freq_hz[0]),
                         fmax_hz=float(freq_hz[-1]))


@dataclass
class RecordingSummary:
    """What ``ingest_recording`` stored."""

    path: str
    segments: list
    t0: float
    t_end: float
    rows: int
    duration_s: float


def ingest_recording(cfg, path, progress=None, *, fmt=None, rate_hz=None, center_hz=None, start=None,
                     chunk_samples: int = 1 << 20) -> RecordingSummary:
    """Channelize a recording onto the station grid and append it to the station archive.

    The same channelizer as the live logger (``[sweep]`` FFT settings, ``[spectra]`` grid
    and cadence); each tuning of the recording is a segment of its own. The recording's
    description is checked whole before a sample is read (``open_recording``, and every
    tuning must reach the station band), and the spectra are stored all or nothing
    (``staged_writer``): a refused or failed recording leaves the archive as it was.
    """
    segments, rows, t0, t_end = [], 0, math.inf, -math.inf
    spectra = spectra_from_recording(cfg, path, progress, fmt=fmt, rate_hz=rate_hz, center_hz=center_hz,
                                     start=start, chunk_samples=chunk_samples)
    first = next(spectra, None)          # open and check the recording before staging anything
    if first is None:
        raise RxlogError(f"{path}: too short for one {cfg['spectra']['cadence_s']:g}-s spectrum; nothing stored")
    with staged_writer(cfg) as w:
        for ds in itertools.chain([first], spectra):
            w.write(ds)
            rows += ds.n_time
            t0, t_end = min(t0, ds.t0), max(t_end, ds.t_end)
            if ds.segment not in segments:
                segments.append(ds.segment)
    return RecordingSummary(str(path), segments, t0, t_end, rows, t_end - t0)
