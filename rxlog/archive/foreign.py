"""FITS dynamic spectra from elsewhere: checked whole, then read in blocks of rows.

A foreign file is a 2-D image with one FREQ axis and one TIME (or UTC) axis in standard
WCS (``rxlog.archive.wcs``), in either order and either direction. Before it counts it
must be complete (not cut short, also when gzipped), every header card must parse, and
its axes must lie within ``rxlog.validate``'s limits; power in dB (BUNIT 'dB...') or
linear. ``is_own`` tells a file in rxlog's own layout (from a partner station) from one
of elsewhere.
"""

from __future__ import annotations

import contextlib
import gzip
import hashlib
import warnings
import zlib
from pathlib import Path

import numpy as np
from astropy.io import fits
from astropy.utils.exceptions import AstropyUserWarning

from rxlog import validate
from rxlog.archive.layout import FITS_BLOCK, FORMAT, MAX_ABS_POWER_DB, header_text
from rxlog.archive.wcs import (
    FREQ_UNITS,
    axis_scale,
    freq_axis,
    scale_card,
    site_meta,
    time_axis,
)
from rxlog.errors import RxlogError
from rxlog.spectrum import FLAG_GAP, FLAG_UNCOVERED, DynamicSpectrum


def file_digest(path: Path) -> str:
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
        freq_hz = freq_axis(h, self.fi, n_chan, path)
        t = time_axis(h, self.ti, path)
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
        self.segment = f"fits-{file_digest(path)}"
        self.meta = {"source_file": header_text(path.name), "source_bunit": bunit or "(none)",
                     "source_time_origin": t["origin"]}
        for key, name in (("TELESCOP", "source_telescope"), ("INSTRUME", "source_instrument"),
                          ("OBSERVER", "source_observer")):
            if key in h:
                self.meta[name] = str(h[key])
        self.meta.update(site_meta(h, path))
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
    step, f_card, t_card = t["cadence"], scale_card(h, fi), scale_card(h, ti)
    problem = validate.cadence_problem(step)
    if problem:
        raise RxlogError(f"{path}: keyword {t_card}: {problem}")
    if freq_hz.size > 1:
        df = float(freq_hz[1] - freq_hz[0])
    else:                                      # one channel: its width from the card (unit checked already)
        df = axis_scale(h, fi, path) * FREQ_UNITS[str(h.get(f"CUNIT{fi}", "Hz")).strip().upper()]
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
def quiet_astropy():
    """Reading a file from elsewhere, astropy warns about broken cards and short files on
    the way; rxlog's own message says what is wrong, once."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", fits.verify.VerifyWarning)
        warnings.simplefilter("ignore", AstropyUserWarning)
        yield


def check_complete(path: Path) -> None:
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
def open_foreign(path: Path, accepted_bands: list[tuple[float, float]] | None = None):
    try:
        hdul = fits.open(path, memmap=False)              # sections read from the file, scaled
    except (OSError, EOFError, ValueError, zlib.error, fits.VerifyError) as e:
        raise RxlogError(f"{path}: cannot open as FITS ({e})") from None
    try:
        yield _ForeignImage(hdul, path, accepted_bands)
    finally:
        hdul.close()


def is_own(path: Path) -> bool:
    """Is this a file in rxlog's own layout (RXFORMAT in the primary header)?"""
    try:
        with fits.open(path, memmap=True) as hdul:
            return hdul[0].header.get("RXFORMAT") == FORMAT
    except (OSError, EOFError, ValueError, zlib.error, fits.VerifyError) as e:
        raise RxlogError(f"{path}: cannot open as FITS ({e})") from None
