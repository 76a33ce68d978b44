"""Reading FITS dynamic spectra written elsewhere: standard WCS in either axis order, each
Paper VII time origin, linear or dB power, the site from OBSGEO; clear errors otherwise.

References: FITS WCS Paper VII (Rots et al. 2015, A&A 574, A36; FITS Standard 4.0 §9) for
the time keywords; astropy.time (astropy 8.0) computes the expected epochs (MJD, JD, TAI)
and astropy.wcs writes one of the headers, as outside implementations.
"""

import warnings

import numpy as np
import pytest
from astropy import units as u
from astropy.coordinates import EarthLocation
from astropy.io import fits
from astropy.time import Time
from astropy.wcs import WCS

from rxlog.archive.read import read_spectrum_fits
from rxlog.errors import RxlogError
from rxlog.spectrum import FLAG_GAP, FLAG_UNCOVERED

REF = Time("2026-12-01T21:00:00", scale="utc")     # reference epoch of the foreign files
N_TIME, N_CHAN, CADENCE = 40, 24, 0.5
F0_MHZ, DF_MHZ = 18.0, 0.25
START = 1800.0                                       # s from the reference to the first bin's start


def _power_db():
    rng = np.random.default_rng(3)
    return (10.0 + rng.normal(0.0, 1.0, (N_TIME, N_CHAN))).astype(np.float32)


def _write(path, power, time_axis=1, origin="MJDREF", bunit="dB", extension=False, **extra):
    """A foreign file: an image with time on NAXIS``time_axis`` and the given time origin."""
    fa = 3 - time_axis
    h = fits.Header()
    h[f"CTYPE{time_axis}"] = "TIME"
    h[f"CUNIT{time_axis}"] = "s"
    h[f"CRPIX{time_axis}"] = 1.0
    h[f"CRVAL{time_axis}"] = START + CADENCE / 2      # pixel centre = middle of the bin (TIMEPIXR 0.5)
    h[f"CDELT{time_axis}"] = CADENCE
    h[f"CTYPE{fa}"] = "FREQ"
    h[f"CUNIT{fa}"] = "MHz"
    h[f"CRPIX{fa}"] = 1.0
    h[f"CRVAL{fa}"] = F0_MHZ
    h[f"CDELT{fa}"] = DF_MHZ
    h["TIMESYS"] = "UTC"
    if origin == "MJDREF":
        h["MJDREF"] = REF.mjd
    elif origin == "MJDREFI+MJDREFF":
        h["MJDREFI"] = int(REF.mjd)
        h["MJDREFF"] = REF.mjd - int(REF.mjd)
    elif origin == "JDREF":
        h["JDREF"] = REF.jd
    elif origin == "DATEREF":
        h["DATEREF"] = REF.isot
    elif origin == "DATE-OBS":
        h["DATE-OBS"] = REF.isot
    if bunit is not None:
        h["BUNIT"] = bunit
    for k, v in extra.items():
        h[k.replace("_", "-")] = v
    data = power.T if time_axis == 1 else power     # numpy rows are NAXIS2
    hdus = [fits.PrimaryHDU(), fits.ImageHDU(data, header=h)] if extension else [fits.PrimaryHDU(data, header=h)]
    fits.HDUList(hdus).writeto(path)
    return path


def _expected_freq():
    return (F0_MHZ + DF_MHZ * np.arange(N_CHAN)) * 1e6


@pytest.mark.parametrize("origin", ["MJDREF", "MJDREFI+MJDREFF", "JDREF", "DATEREF", "DATE-OBS"])
@pytest.mark.parametrize("time_axis", [1, 2])
def test_axis_orders_and_time_origins(tmp_path, origin, time_axis):
    power = _power_db()
    path = _write(tmp_path / "f.fits", power, time_axis, origin, extension=time_axis == 2)
    spec = read_spectrum_fits(path)
    assert spec.t0 == pytest.approx(REF.unix + START, abs=1e-3)      # astropy.time as reference
    assert spec.cadence_s == pytest.approx(CADENCE)
    assert np.allclose(spec.freq_hz, _expected_freq())
    assert np.allclose(spec.power_db, power)
    assert spec.meta["source_time_origin"] == origin
    assert spec.segment.startswith("fits-")


def test_header_written_by_astropy_wcs(tmp_path):
    """astropy.wcs writes MJDREFI/MJDREFF beside DATEREF = '1858-11-17': MJDREF takes precedence."""
    w = WCS(naxis=2)
    w.wcs.ctype = ["FREQ", "TIME"]
    w.wcs.cunit = ["MHz", "s"]
    w.wcs.crpix = [1, 1]
    w.wcs.crval = [F0_MHZ, START + CADENCE / 2]
    w.wcs.cdelt = [DF_MHZ, CADENCE]
    w.wcs.mjdref = [int(REF.mjd), REF.mjd - int(REF.mjd)]
    w.wcs.timesys = "UTC"
    header = w.to_header()
    assert header["DATEREF"] == "1858-11-17"
    header["BUNIT"] = "dB"
    power = _power_db()
    fits.PrimaryHDU(power, header=header).writeto(tmp_path / "a.fits")   # time on NAXIS2
    spec = read_spectrum_fits(tmp_path / "a.fits")
    assert spec.t0 == pytest.approx(REF.unix + START, abs=1e-3)
    assert np.allclose(spec.freq_hz, _expected_freq())
    assert np.allclose(spec.power_db, power)


def test_utc_ctype_timepixr_and_timeoffs(tmp_path):
    power = _power_db()
    path = _write(tmp_path / "u.fits", power, 1, "MJDREF", TIMEPIXR=0.0, TIMEOFFS=2.0)
    with fits.open(path, mode="update") as hdul:
        hdul[0].header["CTYPE1"] = "UTC"
        hdul[0].header["CRVAL1"] = START - 2.0          # the bin start (TIMEPIXR 0), minus the offset
    spec = read_spectrum_fits(path)
    assert spec.t0 == pytest.approx(REF.unix + START, abs=1e-3)


def test_tai_time_scale_is_converted_to_utc(tmp_path):
    power = _power_db()
    path = _write(tmp_path / "t.fits", power, 1, "DATEREF")
    ref_tai = REF.tai                                    # astropy.time: TAI - UTC = 37 s in 2026
    with fits.open(path, mode="update") as hdul:
        hdul[0].header["TIMESYS"] = "TAI"
        hdul[0].header["DATEREF"] = ref_tai.isot
    spec = read_spectrum_fits(path)
    assert spec.t0 == pytest.approx(REF.unix + START, abs=1e-3)


def test_linear_power_is_converted_to_db_and_missing_cells_are_flagged(tmp_path):
    power = _power_db()
    linear = 10.0 ** (power.astype(np.float64) / 10.0)
    linear[5, 7] = 0.0                                   # no data in a linear file
    linear[:, 3] = np.nan                                # a channel the instrument did not cover
    path = _write(tmp_path / "lin.fits", linear, 2, "MJDREF", bunit="K")
    spec = read_spectrum_fits(path)
    ok = np.isfinite(linear) & (linear > 0)
    assert np.allclose(spec.power_db[ok], power[ok], atol=1e-4)
    assert np.isnan(spec.power_db[5, 7]) and spec.flags[5, 7] == FLAG_GAP
    assert np.isnan(spec.power_db[:, 3]).all() and (spec.flags[:, 3] == FLAG_UNCOVERED).all()
    assert (spec.flags[ok] == 0).all()
    # without BUNIT the values are linear power too
    path2 = _write(tmp_path / "nounit.fits", linear, 2, "MJDREF", bunit=None)
    assert np.array_equal(read_spectrum_fits(path2).power_db, spec.power_db, equal_nan=True)


def test_scaled_integers_with_blank(tmp_path):
    power = _power_db()
    q = np.round(power / 0.01).astype(np.int16)
    q[2, 2] = -32768
    path = _write(tmp_path / "i.fits", power, 1, "MJDREF")
    with fits.open(path) as hdul:
        h = hdul[0].header.copy()
    hdu = fits.PrimaryHDU(q.T, header=h)
    hdu.header["BSCALE"] = 0.01
    hdu.header["BZERO"] = 0.0
    hdu.header["BLANK"] = -32768
    hdu.writeto(tmp_path / "i2.fits")
    spec = read_spectrum_fits(tmp_path / "i2.fits")
    assert np.isnan(spec.power_db[2, 2]) and spec.flags[2, 2] == FLAG_GAP
    assert np.nanmax(np.abs(spec.power_db - power)) <= 0.005 + 1e-6


def test_frequency_units_and_descending_axes(tmp_path):
    power = _power_db()
    path = _write(tmp_path / "k.fits", power[::-1, ::-1].copy(), 1, "MJDREF")
    with fits.open(path, mode="update") as hdul:
        h = hdul[0].header
        h["CUNIT2"], h["CRVAL2"], h["CDELT2"] = "kHz", (F0_MHZ + DF_MHZ * (N_CHAN - 1)) * 1e3, -DF_MHZ * 1e3
        h["CRVAL1"], h["CDELT1"] = START + CADENCE * (N_TIME - 1) + CADENCE / 2, -CADENCE
    spec = read_spectrum_fits(path)
    assert np.allclose(spec.freq_hz, _expected_freq())            # increasing
    assert spec.t0 == pytest.approx(REF.unix + START, abs=1e-3) and spec.cadence_s == CADENCE
    assert np.allclose(spec.power_db, power)


def test_site_from_obsgeo(tmp_path):
    power = _power_db()
    spec = read_spectrum_fits(_write(tmp_path / "g.fits", power, 1, "MJDREF",
                                     OBSGEO_B=46.25, OBSGEO_L=-1.5, OBSGEO_H=120.0))
    assert (spec.meta["site_latitude_deg"], spec.meta["site_longitude_deg"], spec.meta["site_elevation_m"]) \
        == (46.25, -1.5, 120.0)
    # geocentric form; astropy.coordinates.EarthLocation (WGS84) makes the X/Y/Z
    loc = EarthLocation.from_geodetic(lon=-1.5 * u.deg, lat=46.25 * u.deg, height=120 * u.m)
    x, y, z = (c.to_value(u.m) for c in loc.geocentric)
    spec = read_spectrum_fits(_write(tmp_path / "xyz.fits", power, 1, "MJDREF",
                                     OBSGEO_X=x, OBSGEO_Y=y, OBSGEO_Z=z))
    assert spec.meta["site_latitude_deg"] == pytest.approx(46.25, abs=1e-9)
    assert spec.meta["site_longitude_deg"] == pytest.approx(-1.5, abs=1e-9)
    assert spec.meta["site_elevation_m"] == pytest.approx(120.0, abs=1e-6)


@pytest.mark.parametrize("change, keyword", [
    ({"MJDREF": None}, "MJDREF"),                   # no time origin at all
    ({"CRVAL1": None}, "CRVAL1"),
    ({"CDELT2": None}, "CDELT2"),
    ({"CRPIX1": None}, "CRPIX1"),
    ({"CTYPE2": None}, "CTYPE2"),
    ({"CTYPE2": "WAVE"}, "CTYPE"),
    ({"CUNIT2": "m"}, "CUNIT2"),
    ({"CUNIT1": "yr"}, "CUNIT1"),
    ({"TIMESYS": "TCB"}, "TIMESYS"),
    ({"CDELT1": 0.0}, "CDELT1"),
    ({"MJDREF": "yesterday"}, "MJDREF"),
    ({"PC1_2": 0.3}, "PC1_2"),
])
def test_missing_or_unusable_keyword_names_file_and_keyword(tmp_path, change, keyword):
    path = _write(tmp_path / "bad.fits", _power_db(), 1, "MJDREF")
    with fits.open(path, mode="update") as hdul:
        for k, v in change.items():
            if v is None:
                del hdul[0].header[k]
            else:
                hdul[0].header[k] = v
    with pytest.raises(RxlogError) as e:
        read_spectrum_fits(path)
    assert "bad.fits" in str(e.value) and keyword in str(e.value)


def test_not_a_2d_image(tmp_path):
    fits.PrimaryHDU(np.zeros((2, 3, 4), np.float32)).writeto(tmp_path / "cube.fits")
    with pytest.raises(RxlogError, match="cube.fits.*NAXIS"):
        read_spectrum_fits(tmp_path / "cube.fits")
    (tmp_path / "junk.fits").write_bytes(b"not fits at all" * 200)
    with pytest.raises(RxlogError, match="junk.fits"):
        read_spectrum_fits(tmp_path / "junk.fits")


@pytest.mark.parametrize("change, words", [
    ({"TIMEPIXR": 1.5}, ["TIMEPIXR", "0 to 1"]),
    ({"CDELT1": 7200.0}, ["CDELT1", "time step 7200 s"]),
    ({"CRVAL2": 0.5, "CDELT2": 20.0}, ["CDELT2", "channels 2e+07 Hz wide"]),
    ({"CDELT2": 1e-7}, ["CDELT2", "0.1 Hz wide sampled every 0.5 s", "time-bandwidth"]),
    ({"CRVAL2": 40.0}, ["CRVAL2", "do not reach 16-24 MHz"]),
    ({"MJDREF": 40587.0}, ["MJDREF", "receiver era"]),                      # 1970: an unset clock
    ({"CDELT1": True}, ["CDELT1", "not a number"]),
])
def test_axes_outside_the_limits_are_refused_naming_the_card(tmp_path, change, words):
    path = _write(tmp_path / "odd.fits", _power_db(), 1, "MJDREF")
    with fits.open(path, mode="update") as hdul:
        hdul[0].header.update(change)
    with pytest.raises(RxlogError) as e:
        read_spectrum_fits(path)
    assert "odd.fits" in str(e.value)
    for w in words:
        assert w in str(e.value), (w, str(e.value))


@pytest.mark.parametrize("power, bunit, words", [
    (np.full((N_TIME, N_CHAN), 5000.0, np.float32), "dB", ["power of 5000 dB", "BUNIT"]),
    (np.zeros((N_TIME, N_CHAN), np.float32), "K", ["no usable power value", "zero or negative"]),
])
def test_absurd_or_empty_power_is_refused(tmp_path, power, bunit, words):
    path = _write(tmp_path / "p.fits", power, 1, "MJDREF", bunit=bunit)
    with pytest.raises(RxlogError) as e:
        read_spectrum_fits(path)
    for w in words:
        assert w in str(e.value), (w, str(e.value))


def test_unparsable_card_and_bitpix_name_the_keyword(tmp_path):
    good = _write(tmp_path / "g.fits", _power_db(), 1, "MJDREF").read_bytes()
    i = good.index(b"CDELT2  =")
    broken = good[:i] + b"CDELT2  =                  NaX / spacing".ljust(80) + good[i + 80:]
    (tmp_path / "card.fits").write_bytes(broken)
    with warnings.catch_warnings(record=True) as seen:
        warnings.simplefilter("always")
        with pytest.raises(RxlogError, match=r"card.fits: keyword CDELT2: value .*NaX"):
            read_spectrum_fits(tmp_path / "card.fits")
    assert not seen, [str(w.message) for w in seen]        # rxlog's message alone, not astropy's on the way
    small = _write(tmp_path / "s.fits", _power_db()[:10, :5].copy(), 1, "MJDREF").read_bytes()   # one data block
    i = small.index(b"BITPIX  =")
    (tmp_path / "bitpix.fits").write_bytes(small[:i] + b"BITPIX  =                   12".ljust(80) + small[i + 80:])
    with pytest.raises(RxlogError, match="bitpix.fits.*BITPIX"):
        read_spectrum_fits(tmp_path / "bitpix.fits")


def test_cut_short_files_are_refused_plain_and_gzipped(tmp_path):
    import gzip

    whole = _write(tmp_path / "w.fits", _power_db(), 1, "MJDREF").read_bytes()
    (tmp_path / "short.fits").write_bytes(whole[:-2880])                 # a whole block missing
    (tmp_path / "odd.fits").write_bytes(whole[:-100])
    packed = gzip.compress(whole)
    (tmp_path / "short.fits.gz").write_bytes(packed[:-20])
    for name, words in (("short.fits", "declare 3840 bytes of image data.*cut short"),
                        ("odd.fits", "2880-byte FITS blocks"), ("short.fits.gz", "gzip data cut short")):
        with pytest.raises(RxlogError, match=words) as e:
            read_spectrum_fits(tmp_path / name)
        assert name in str(e.value)


def test_tile_compressed_image_is_read_and_refused_when_cut_short(tmp_path):
    power = _power_db()
    plain = _write(tmp_path / "p.fits", power, 1, "MJDREF")
    with fits.open(plain) as hdul:
        h = hdul[0].header.copy()
    fits.HDUList([fits.PrimaryHDU(), fits.CompImageHDU(power.T.copy(), header=h, compression_type="GZIP_2",
                                                        quantize_level=0.0)]).writeto(tmp_path / "tiled.fits")
    assert np.allclose(read_spectrum_fits(tmp_path / "tiled.fits").power_db, power)
    whole = (tmp_path / "tiled.fits").read_bytes()
    (tmp_path / "cut.fits").write_bytes(whole[:-2880])
    with pytest.raises(RxlogError, match="cut.fits: image data unreadable"):
        read_spectrum_fits(tmp_path / "cut.fits")
