"""The RFI mask as the morning reviewer meets it: `rxlog status` names the channel groups
masked most in the last day, and the report draws the masked share over frequency and
hour (and the occupancy the mask learned by hour of day)."""

import datetime as dt
import time

import numpy as np
from click.testing import CliRunner
from PIL import Image
from service_helpers import write_config
from test_report_contents import built  # noqa: F401  (the module's simulated night, built once)

from rxlog.cli import main
from rxlog.review.night import night_starting
from rxlog.review.plots import mask_grid, plot_mask
from rxlog.station.config import load_config
from rxlog.station.status import station_status, worst_channels
from rxlog.store import EventStore
from rxlog.timeutil import iso

T = 1_796_162_400.0        # 2026-12-01T22:00:00Z


def _hour(h, fracs, covered=3600.0, t0=T):
    return {"station": "faulty", "hour_utc": iso(t0 + 3600 * h), "masked_fraction": float(np.nanmean(
        [np.nan if f is None else f for f in fracs])), "gap_s": 0.0, "covered_s": covered,
        "group_fmin_mhz": 16.0, "group_mhz": 0.25, "masked_by_group": fracs}


def test_worst_channels_are_the_groups_masked_most_weighted_by_covered_time():
    q = [_hour(0, [0.0, 0.9, 0.1, None]), _hour(1, [0.0, 0.1, 0.3, 0.2], covered=600.0)]
    worst = worst_channels(q)
    assert [g["fmin_mhz"] for g in worst] == [16.25, 16.75, 16.5]
    assert abs(worst[0]["masked_fraction"] - (0.9 * 3600 + 0.1 * 600) / 4200) < 1e-9
    assert worst[0]["fmax_mhz"] == 16.5


def test_status_names_the_most_masked_channels(tmp_path):
    cfg = load_config(write_config(tmp_path))
    t0 = 3600.0 * (time.time() // 3600 - 3)       # the command reads the last day by the clock
    store = EventStore(cfg.store_path)
    store.record_quality([_hour(0, [0.0, 0.05, 0.8, 0.0], t0=t0), _hour(1, [0.0, 0.0, 0.7, 0.0], t0=t0),
                          _hour(-30, [1.0, 1.0, 1.0, 1.0], t0=t0)])          # older than a day: left out
    store.close()
    st = station_status(cfg, now=t0 + 3 * 3600)
    assert st["worst_channels"][0]["fmin_mhz"] == 16.5
    out = CliRunner().invoke(main, ["status", "--config", str(tmp_path / "station.toml")])
    assert out.exit_code == 0, out.output
    assert "most masked channels (last 24 h): 16.50-16.75 MHz 75 %, 16.25-16.50 MHz 2 %" in out.output


def test_mask_picture_places_each_hour_and_group(tmp_path):
    q = [_hour(0, [0.0, 1.0, 0.0, None]), _hour(2, [0.5, 0.0, 0.0, 0.0])]
    hours, edges, frac = mask_grid(q)
    assert list(hours) == [T, T + 7200] and np.allclose(edges, 16.0 + 0.25 * np.arange(5))
    assert frac[0, 1] == 1.0 and np.isnan(frac[0, 3]) and frac[1, 0] == 0.5
    occ = [{"channels": 64, "fmin_hz": 16e6, "fmax_hz": 17e6, "recent": [0.0] * 64,
            "by_hour": np.where(np.arange(24)[:, None] >= 18, 1.0, 0.0) * np.ones((24, 64))}]
    night = night_starting(load_config(write_config(tmp_path)), dt.date(2026, 12, 1))
    path = plot_mask(tmp_path / "mask.png", night, q, occ)
    img = np.asarray(Image.open(path).convert("L"))
    assert img.std() > 10


def test_the_report_shows_the_mask(built):  # noqa: F811
    cfg, night, events, index = built
    assert (index.parent / "mask.png").is_file()
    assert 'src="mask.png"' in index.read_text(encoding="utf-8")
