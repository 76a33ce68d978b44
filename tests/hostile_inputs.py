"""Hostile and absurd inputs, made on the spot: a station with something stored, a digest of
everything under its storage root, and one maker per kind of bad file (SigMF, raw, FITS,
configs, partner lists). Each maker writes its files under a folder and returns the path
to give the command line, any extra arguments, and words its refusal must contain."""

import gzip
import hashlib
import json
from pathlib import Path

import numpy as np
from archive_helpers import T_NIGHT, noisy_spectrum
from astropy.io import fits

from rxlog.archive.write import ArchiveWriter, write_spectrum_fits
from rxlog.station.config import config_from_text
from rxlog.store import EventStore
from rxlog.timeutil import iso

START = "2026-12-01T22:00:00Z"          # T_NIGHT: a night in the past of any test run


def station(folder: Path, extra: str = ""):
    """A station config whose storage root already holds an archive hour and an event store."""
    cfg = config_from_text("[station]\nname = 'hostile-test'\nlatitude_deg = 47.0\nlongitude_deg = 8.0\n"
                           "[sweep]\nmode = 'single'\n" + extra, folder / "station.toml")
    with ArchiveWriter(cfg.archive_dir, cfg["station"]) as w:
        w.write(noisy_spectrum(120, 64, t0=T_NIGHT - 600, segment="earlier"))
    store = EventStore(cfg.store_path)
    store.upsert_events([{"event_id": "e1", "station": "hostile-test", "start_utc": iso(T_NIGHT - 500),
                          "end_utc": iso(T_NIGHT - 490), "peak_utc": iso(T_NIGHT - 495), "fmin_mhz": 18.0,
                          "fmax_mhz": 21.0, "class": "solar_iii"}])
    store.close()
    return cfg


def tree_digest(root: Path) -> dict[str, str]:
    """SHA-256 of every file under ``root``, by relative path."""
    return {str(p.relative_to(root)): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(Path(root).rglob("*")) if p.is_file()}


# -- recordings ---------------------------------------------------------------------------

RATE = 250_000                           # a low rate keeps the files small


def noise_cu8(n_samples: int, seed: int = 0) -> np.ndarray:
    rng = np.random.default_rng(seed)
    return np.clip(np.round(127.5 + 20 * rng.normal(size=2 * n_samples)), 0, 255).astype(np.uint8)


def sigmf(folder: Path, name: str, meta, seconds: float = 2.0) -> Path:
    """``name.sigmf-data`` with ``seconds`` of cu8 noise at RATE beside ``name.sigmf-meta`` holding ``meta``
    (a dict, or text written as is)."""
    noise_cu8(int(seconds * RATE)).tofile(folder / f"{name}.sigmf-data")
    path = folder / f"{name}.sigmf-meta"
    path.write_text(meta if isinstance(meta, str) else json.dumps(meta))
    return path


def good_meta(**capture):
    cap = {"core:sample_start": 0, "core:frequency": 20e6, "core:datetime": START}
    cap.update(capture)
    return {"global": {"core:datatype": "cu8", "core:sample_rate": RATE}, "captures": [cap]}


def sigmf_list(folder):
    return sigmf(folder, "list", "[]"), [], ["list.sigmf-meta", "'global'"]


def sigmf_nan_rate(folder):
    meta = good_meta()
    meta["global"]["core:sample_rate"] = float("nan")         # json writes NaN; Python's json reads it
    return sigmf(folder, "nanrate", meta), [], ["nanrate.sigmf-meta", "core:sample_rate", "nan"]


def sigmf_capture_past_end(folder):
    # five seconds of data (more than one read chunk, so spectra come out before the end is hit)
    meta = good_meta()
    meta["captures"].append({"core:sample_start": 10**12, "core:frequency": 20e6})
    return (sigmf(folder, "pastend", meta, seconds=5.0), [],
            ["pastend.sigmf-meta", "captures[1] core:sample_start", "past the end of the data"])


def sigmf_out_of_band(folder):
    return (sigmf(folder, "oob", good_meta(**{"core:frequency": 100e6})), [],
            ["oob.sigmf-meta", "captures[0] core:frequency", "outside the station band 16-24 MHz"])


def sigmf_dated_1900(folder):
    return (sigmf(folder, "y1900", good_meta(**{"core:datetime": "1900-01-01T00:00:00Z"})), [],
            ["y1900.sigmf-meta", "captures[0] core:datetime", "receiver era"])


def raw_nan_rate(folder):
    path = folder / "dongle.cu8"
    noise_cu8(RATE).tofile(path)
    return (path, ["--format", "cu8", "--rate-msps", "nan", "--center-mhz", "20", "--start", START],
            ["dongle.cu8", "--rate-msps", "nan"])


def raw_half_sample(folder):
    path = folder / "odd.ci16"
    path.write_bytes(b"\0" * 4001)                             # ci16_le samples are 4 bytes
    return (path, ["--format", "ci16_le", "--rate-msps", str(RATE / 1e6), "--center-mhz", "20", "--start", START],
            ["odd.ci16", "whole number of ci16_le samples"])


# -- FITS ------------------------------------------------------------------------------------

def foreign_fits(path: Path, power=None, **cards) -> Path:
    """A partner's 10 minutes at 1 s, 18-24 MHz in 24 channels, dB; ``cards`` override the header."""
    if power is None:
        power = (3.0 + np.random.default_rng(5).normal(0.0, 0.3, (600, 24))).astype(np.float32)
    h = fits.Header()
    h.update({"CTYPE1": "TIME", "CUNIT1": "s", "CRPIX1": 1.0, "CRVAL1": 0.5, "CDELT1": 1.0,
              "CTYPE2": "FREQ", "CUNIT2": "MHz", "CRPIX2": 1.0, "CRVAL2": 18.125, "CDELT2": 0.25,
              "MJDREF": T_NIGHT / 86400.0 + 40587.0, "TIMESYS": "UTC", "BUNIT": "dB"})
    h.update(cards)
    fits.PrimaryHDU(np.ascontiguousarray(power.T), header=h).writeto(path)
    return path


def fits_huge_time_step(folder):
    return foreign_fits(folder / "cdelt.fits", CDELT1=1e15), [], ["cdelt.fits", "CDELT1", "time step"]


def fits_freq_1e30_mhz(folder):
    return (foreign_fits(folder / "f1e30.fits", CRVAL2=1e30), [],
            ["f1e30.fits", "CRVAL2", "do not reach 16-24 MHz"])


def fits_tiny_time_step(folder):
    return foreign_fits(folder / "tiny.fits", CDELT1=1e-300), [], ["tiny.fits", "CDELT1", "time step 1e-300"]


def fits_all_nan(folder):
    return (foreign_fits(folder / "allnan.fits", power=np.full((600, 24), np.nan, np.float32)), [],
            ["allnan.fits", "no usable power value"])


def fits_year_1000(folder):
    # MJD -306,000 is in the year 1021: MJD for JD, or a date typed wrong
    return foreign_fits(folder / "y1000.fits", MJDREF=-306000.0), [], ["y1000.fits", "MJDREF", "receiver era"]


def fits_gz_cut_short(folder):
    """A partner's rxlog hour file, gzipped and cut in half: astropy reads what is left and
    silently finds no spectra in it."""
    whole = write_spectrum_fits(noisy_spectrum(300, 32, t0=T_NIGHT + 60), folder / "partner-hour.fits",
                                {"name": "partner", "latitude_deg": 44.0, "longitude_deg": 5.5})
    packed = gzip.compress(whole.read_bytes())
    whole.unlink()
    path = folder / "partner-hour.fits.gz"
    path.write_bytes(packed[: len(packed) // 2])
    return path, [], ["partner-hour.fits.gz", "cut short"]


def fits_card_unparsable(folder):
    good = foreign_fits(folder / "good.fits").read_bytes()
    i = good.index(b"CDELT2  =")
    path = folder / "card.fits"
    path.write_bytes(good[:i] + b"CDELT2  =                  NaX / spacing".ljust(80) + good[i + 80:])
    return path, [], ["card.fits", "keyword CDELT2", "not a FITS value"]


def fits_cut_short(folder):
    whole = foreign_fits(folder / "cut.fits").read_bytes()
    path = folder / "cut.fits"
    path.write_bytes(whole[: len(whole) // 2])
    return path, [], ["cut.fits", "cut short"]


# -- configs ---------------------------------------------------------------------------------

CONFIG_CASES = {
    "cadence_nan": ("[spectra]\ncadence_s = nan\n", ["[spectra] cadence_s", "finite", "nan"]),
    "ring_huge": ("[sweep]\nring_s = 1e12\n", ["[sweep] ring_s", "out of range"]),
    "longitude_nan": (None, ["[station] longitude_deg", "finite", "nan"]),
    "gain_nan": ("[receiver]\ngain_db = nan\n", ["[receiver] gain_db", "finite"]),
    "root_empty": ("[storage]\nroot = ''\n", ["[storage] root", "empty"]),
    "root_a_file": ("[storage]\nroot = 'station.toml'\n", ["[storage] root", "is a file, not a folder"]),
}


def config_text(case: str) -> str:
    extra, _words = CONFIG_CASES[case]
    if extra is None:
        return "[station]\nname = 't'\nlatitude_deg = 47.0\nlongitude_deg = nan\n"
    return "[station]\nname = 't'\nlatitude_deg = 47.0\nlongitude_deg = 8.0\n" + extra


# -- partner lists ---------------------------------------------------------------------------

def partner_list_absurd(folder: Path) -> Path:
    """A partner's CSV whose only events are dated in the year 1000 or sit at 1e30 MHz."""
    path = folder / "absurd.csv"
    path.write_text("# format: rxlog event list\n# station: far-away\n"
                    "event_id,start_utc,end_utc,peak_utc,fmin_mhz,fmax_mhz,class\n"
                    "a,1000-01-01T00:00:00.000Z,1000-01-01T00:00:10.000Z,1000-01-01T00:00:05.000Z,18,20,solar_iii\n"
                    "b,2026-12-01T22:00:00.000Z,2026-12-01T22:00:10.000Z,2026-12-01T22:00:05.000Z,1e30,2e30,solar_iii\n")
    return path


def partner_list_good(folder: Path, station: str = "near-by") -> Path:
    path = folder / f"{station}.csv"
    path.write_text(f"# format: rxlog event list\n# station: {station}\n"
                    "event_id,start_utc,end_utc,peak_utc,fmin_mhz,fmax_mhz,class\n"
                    "a,2026-12-01T22:00:00.000Z,2026-12-01T22:00:10.000Z,2026-12-01T22:00:05.000Z,18,20,solar_iii\n")
    return path
