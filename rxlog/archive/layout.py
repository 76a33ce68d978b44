"""The archive's file layout: FITS files with standard WCS, one per UTC hour.

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

Every file is written crash-safe (``write_hdus``: see ``rxlog.fileio``); writing and
consolidating them is ``rxlog.archive.write``, reading the header cards back into axes
``rxlog.archive.wcs``.
"""

from __future__ import annotations

import datetime as dt
import math
import os
import re
import warnings
from pathlib import Path

import erfa
import numpy as np
from astropy.io import fits

from rxlog import __version__, fileio
from rxlog.archive.wcs import MJD_UNIX_EPOCH, site_meta, time_axis
from rxlog.errors import RxlogError
from rxlog.spectrum import (
    FLAG_GAP,
    FLAG_RETUNE,
    FLAG_RFI,
    FLAG_UNCOVERED,
    DynamicSpectrum,
)

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
HOUR_S = 3600.0                      # one file per UTC hour
_NAME_RE = re.compile(r"^(?P<name>[A-Za-z0-9_-]+)_(?P<date>\d{8})T(?P<hh>\d{2})Z"
                      r"(?:\.(?P<chunk>\d+-\d+)\.chunk)?\.fits$")
_META_KEY_RE = re.compile(r"^[A-Za-z0-9_.-]{1,40}$")
_SITE_KEYS = ("site_latitude_deg", "site_longitude_deg", "site_elevation_m")


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
    """WGS84 geodetic -> geocentric metres (``erfa.gd2gc`` with the WGS84 ellipsoid).
    Written as OBSGEO-X/Y/Z beside OBSGEO-B/L/H so WCS readers need not derive them."""
    xyz = erfa.gd2gc(1, math.radians(lon), math.radians(lat), h)
    return float(xyz[0]), float(xyz[1]), float(xyz[2])


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
        ("MJDREFI", int(day) + MJD_UNIX_EPOCH, "[d] reference time: UTC day start, integer part"),
        ("MJDREFF", 0.0, "[d] reference time, fractional part"),
        ("DATEREF", _fits_date(ref), "reference time (same as MJDREFI+MJDREFF)"),
        ("TIMEUNIT", "s", ""),
        ("TIMEPIXR", 0.5, "pixel time is the middle of the integration"),
        ("TIMEDEL", spec.cadence_s, "[s] integration time of a row"),
        ("DATE-BEG", _fits_date(spec.t0), "start of row 1 (UTC)"),
        ("DATE-END", _fits_date(spec.t_end), "end of last row (UTC)"),
        ("DATE-OBS", _fits_date(spec.t0), "same as DATE-BEG"),
        ("MJD-OBS", spec.t0 / 86400.0 + MJD_UNIX_EPOCH, "[d] same as DATE-BEG"),
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


def hdu_set(spec: DynamicSpectrum, station: dict, lossless: bool, ver: int) -> list:
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
    h["RXSEG"] = (header_text(spec.segment), "data segment id")
    h["RXVERS"] = (__version__, "rxlog version")
    h["RXQSTEP"] = (0.0 if lossless else QUANT_STEP_DB, "[dB] quantisation step, 0 = lossless float32")
    for key, value in spec.meta.items():
        if key in _SITE_KEYS:
            continue                                           # carried by OBSGEO-*
        if not _META_KEY_RE.match(str(key)) or not isinstance(value, (str, int, float, bool)):
            raise ValueError(f"spectrum meta {key!r}={value!r} is not header-safe "
                             "(keys: letters, digits, _ . -; values: str, int, float, bool)")
        h[f"HIERARCH RXMETA {key}"] = header_text(value) if isinstance(value, str) else value

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


def header_text(text: str) -> str:
    """FITS header values are printable ASCII (FITS Standard 4.0 §4.2.1)."""
    return "".join(c if " " <= c <= "~" else "?" for c in str(text))


def primary_hdu(station: dict, kind: str) -> fits.PrimaryHDU:
    p = fits.PrimaryHDU()
    h = p.header
    h["RXFORMAT"] = (FORMAT, "rxlog dynamic spectra: POWER/FLAGS/CHANNELS sets")
    h["RXKIND"] = (kind, "hour, chunk or spectrum")
    h["RXVERS"] = (__version__, "rxlog version")
    h["TELESCOP"] = (header_text(station.get("name", "")), "station")
    h["DATE"] = (dt.datetime.now(dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%S"), "file written (UTC)")
    return p


def write_hdus(path: Path, hdus: list) -> None:
    """Write an HDU list to ``path`` crash-safely (see rxlog.fileio)."""
    def dump(fh):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", fits.verify.VerifyWarning)
            fits.HDUList(hdus).writeto(fh)
    fileio.write_atomic(path, dump, what="archive file")


# --------------------------------------------------------------------------- reading our files

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
        t = time_axis(h, 1, path)
        meta = {k[len("RXMETA "):]: v for k, v in h.items() if k.startswith("RXMETA ")}
        meta.update(site_meta(h, path))
        spec = DynamicSpectrum(power_db=power, t0=t["t0"], cadence_s=t["cadence"],
                               freq_hz=np.array(table["FREQ"], dtype=np.float64),
                               flags=flags, chan_offset_s=np.array(table["CHAN_OFFSET"], dtype=np.float32),
                               segment=str(h.get("RXSEG", "0")), meta=meta)
        out.append((spec, float(h.get("RXQSTEP", QUANT_STEP_DB)) == 0.0))
    return out


def read_file(path: Path) -> list[tuple[DynamicSpectrum, bool]]:
    """(spectrum, lossless) for every set of one of our files; RxlogError naming the file when
    it is not one of ours or cannot be read."""
    try:
        with fits.open(path, memmap=False) as hdul:
            if hdul[0].header.get("RXFORMAT") != FORMAT:
                raise RxlogError(f"{path}: not an rxlog archive file (primary RXFORMAT is not {FORMAT!r})")
            return _own_sets(hdul, path)
    except (OSError, KeyError, ValueError, TypeError, IndexError, fits.VerifyError) as e:
        raise RxlogError(f"{path}: unreadable archive file ({e})") from None


# --------------------------------------------------------------------------- file names and hours

def time_tolerance(cadence: float) -> float:
    """How far two row times on a grid of ``cadence`` may differ and still be the same time
    (float rounding of POSIX seconds)."""
    return max(1e-4 * cadence, 1e-6)


def hour_index(t: float, cadence: float = 0.0) -> int:
    """UTC hour (hours since 1970) of a row starting at t (tolerant of float noise)."""
    return math.floor((t + time_tolerance(cadence) if cadence else t) / HOUR_S)


def hour_stem(name: str, hour: int) -> tuple[Path, str]:
    """Folder (YYYY/MM/DD) and file-name stem of station ``name``'s UTC hour ``hour``."""
    d = dt.datetime(1970, 1, 1) + dt.timedelta(hours=hour)
    return Path(f"{d:%Y}/{d:%m}/{d:%d}"), f"{name}_{d:%Y%m%dT%H}Z"


def parse_name(fname: str):
    """File name -> (station name, hour index, is_chunk) or None if not an archive file."""
    m = _NAME_RE.match(fname)
    if not m:
        return None
    d = dt.datetime.strptime(m["date"] + m["hh"], "%Y%m%d%H")
    hour = int((d - dt.datetime(1970, 1, 1)).total_seconds() // HOUR_S)
    return m["name"], hour, m["chunk"] is not None


def day_dirs(root: Path, day0: int | None = None, day1: int | None = None) -> list[Path]:
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


def archive_files(root: Path, hour0: int | None = None, hour1: int | None = None):
    """(path, name, hour, is_chunk) of archive files, hour files before chunks, by hour."""
    day0 = None if hour0 is None else hour0 // 24
    day1 = None if hour1 is None else hour1 // 24
    found = []
    for d in day_dirs(root, day0, day1):
        for entry in os.scandir(d):
            parsed = parse_name(entry.name)
            if parsed is None:
                continue
            name, hour, chunk = parsed
            if (hour0 is None or hour >= hour0) and (hour1 is None or hour <= hour1):
                found.append((Path(entry.path), name, hour, chunk))
    found.sort(key=lambda f: (f[2], f[3], f[0].name))
    return found
