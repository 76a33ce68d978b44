"""Every hostile input found so far: refused by the command line with exit status 2 and a
short message naming the file and the key or header card, never a traceback, and every
file under the storage root (archive and event store) byte for byte as before."""

import hostile_inputs as H
import pytest
from click.testing import CliRunner

from rxlog.cli import main

INGEST_CASES = {
    "sigmf metadata a JSON list": H.sigmf_list,
    "sigmf sample rate NaN": H.sigmf_nan_rate,
    "sigmf capture past the end of the data": H.sigmf_capture_past_end,
    "sigmf frequency out of band": H.sigmf_out_of_band,
    "sigmf dated 1900": H.sigmf_dated_1900,
    "raw rate NaN": H.raw_nan_rate,
    "raw half a sample": H.raw_half_sample,
    "fits time step 1e15 s": H.fits_huge_time_step,
    "fits frequency 1e30 MHz": H.fits_freq_1e30_mhz,
    "fits time step 1e-300 s": H.fits_tiny_time_step,
    "fits all NaN": H.fits_all_nan,
    "fits year 1000": H.fits_year_1000,
    "fits.gz cut short": H.fits_gz_cut_short,
    "fits cut short": H.fits_cut_short,
    "fits card value unparsable": H.fits_card_unparsable,
}


def refusal(r, words):
    """The run exited 2 with a message of at most two lines holding every one of ``words``."""
    assert r.exit_code == 2, r.output
    assert "Traceback" not in r.output
    assert r.exception is None or isinstance(r.exception, SystemExit)
    message = r.output[r.output.index("rxlog: "):].strip().splitlines()
    assert len(message) <= 3, r.output                  # "invalid config:" heads config problems
    for w in words:
        assert w in r.output, (w, r.output)


@pytest.mark.parametrize("case", INGEST_CASES)
def test_ingest_refuses_and_leaves_storage_byte_identical(tmp_path, case):
    cfg = H.station(tmp_path)
    inputs = tmp_path / "inputs"
    inputs.mkdir()
    path, args, words = INGEST_CASES[case](inputs)
    before = H.tree_digest(cfg.storage_root)
    assert any(k.endswith(".fits") for k in before) and "events.sqlite" in before
    r = CliRunner().invoke(main, ["ingest", "--config", str(cfg.path), str(path), *args])
    refusal(r, words)
    assert H.tree_digest(cfg.storage_root) == before


@pytest.mark.parametrize("case", H.CONFIG_CASES)
def test_config_check_refuses_naming_the_key(tmp_path, case):
    path = tmp_path / "station.toml"
    path.write_text(H.config_text(case))
    r = CliRunner().invoke(main, ["config", "check", "--config", str(path)])
    refusal(r, [str(path), *H.CONFIG_CASES[case][1]])
    assert sorted(p.name for p in tmp_path.iterdir()) == ["station.toml"]      # nothing made


def test_partner_list_with_only_absurd_events_is_refused_and_nothing_written(tmp_path):
    bad, good = H.partner_list_absurd(tmp_path), H.partner_list_good(tmp_path)
    r = CliRunner().invoke(main, ["compare", str(bad), str(good), "--out", str(tmp_path / "out")])
    refusal(r, ["absurd.csv", "no usable events", "start_utc 1000-01-01", "receiver era"])
    assert not (tmp_path / "out").exists()
