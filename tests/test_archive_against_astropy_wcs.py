"""The archive's FITS headers read by an outside WCS implementation.

Reference: astropy.wcs (wcslib) and astropy.time, astropy 8.0. FITS WCS Paper VII
(Rots et al. 2015, A&A 574, A36) for the time axis, Paper III (Greisen et al. 2006) for
the spectral axis. A pixel of the POWER image must map to the UTC time and frequency
the spectrum says it holds.
"""

import warnings

import pytest
from archive_helpers import STATION, T_NIGHT, noisy_spectrum
from astropy import units as u
from astropy.coordinates import EarthLocation
from astropy.io import fits
from astropy.time import Time
from astropy.utils import iers
from astropy.wcs import WCS

from rxlog.archive.write import ArchiveWriter, write_spectrum_fits

# No network at a field site or in CI: astropy must not try to fetch IERS tables.
iers.conf.auto_download = False
iers.conf.auto_max_age = None


def _wcs(header):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")           # wcslib 'datfix'/'obsfix' notes
        return WCS(header)


def _world(w, x, y):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")           # topocentric observer without IERS: not needed here
        return w.pixel_to_world(x, y)


@pytest.mark.parametrize("cadence", [1.0, 0.125])
def test_pixel_maps_to_utc_time_and_frequency(tmp_path, cadence):
    spec = noisy_spectrum(40, 256, t0=T_NIGHT + 1234.5, cadence=cadence)
    path = write_spectrum_fits(spec, tmp_path / "s.fits", STATION)
    with fits.open(path) as hdul:
        header = hdul["POWER"].header
        image = hdul["POWER"].data                 # (n_chan, n_time): TIME along NAXIS1
        assert image.shape == (spec.n_chan, spec.n_time)
        w = _wcs(header)
        row, chan = 17, 200
        t, f = _world(w, row, chan)        # 0-based pixel (x = time, y = frequency)
    assert isinstance(t, Time) and t.scale == "utc"
    # middle of the row's integration (TIMEPIXR = 0.5), as POSIX seconds via astropy.time
    expected = Time(spec.times[row] + cadence / 2, format="unix", scale="utc")
    assert abs((t - expected).to_value(u.s)) < 1e-6
    assert f.to_value(u.Hz) == pytest.approx(spec.freq_hz[chan], abs=1e-3)
    assert image[chan, row] == pytest.approx(spec.power_db[row, chan], abs=0.02)


def test_site_and_reference_time_keywords(tmp_path):
    spec = noisy_spectrum(10, 16)
    path = write_spectrum_fits(spec, tmp_path / "s.fits", STATION)
    with fits.open(path) as hdul:
        header = hdul["POWER"].header
        w = _wcs(header)
    # wcslib's view of the observatory (OBSGEO-B/L/H) and of the reference time
    assert w.wcs.obsgeo[3:] == pytest.approx([STATION["longitude_deg"], STATION["latitude_deg"],
                                              STATION["elevation_m"]])
    # OBSGEO-X/Y/Z written beside them agree with astropy.coordinates.EarthLocation (WGS84)
    loc = EarthLocation.from_geodetic(lon=STATION["longitude_deg"] * u.deg, lat=STATION["latitude_deg"] * u.deg,
                                      height=STATION["elevation_m"] * u.m)
    assert [header[k] for k in ("OBSGEO-X", "OBSGEO-Y", "OBSGEO-Z")] == \
        pytest.approx([c.to_value(u.m) for c in loc.geocentric], abs=1e-3)
    ref = Time(w.wcs.mjdref[0] + w.wcs.mjdref[1], format="mjd", scale="utc")
    assert ref.isot == "2026-12-01T00:00:00.000"
    assert w.wcs.timesys == "UTC"
    assert list(w.wcs.ctype) == ["TIME", "FREQ"] and list(w.wcs.cunit) == [u.s, u.Hz]


def test_hour_file_of_the_writer_maps_each_segment(tmp_path):
    """In an hour file with two segments, each POWER HDU's WCS gives its own times."""
    a = noisy_spectrum(30, 32, t0=T_NIGHT + 60, segment="a")
    b = noisy_spectrum(30, 32, t0=T_NIGHT + 600, segment="b", cadence=0.5)
    with ArchiveWriter(tmp_path, STATION) as wr:
        wr.write(a)
        wr.write(b)
    [hour_file] = tmp_path.rglob("*.fits")
    with fits.open(hour_file) as hdul:
        for ver, spec in ((1, a), (2, b)):
            h = hdul["POWER", ver].header
            assert h["RXSEG"] == spec.segment
            t, _ = _world(_wcs(h), 0, 0)
            assert abs(t.unix - (spec.t0 + spec.cadence_s / 2)) < 1e-6
