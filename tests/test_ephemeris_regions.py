"""Source regions: order of precedence, wrap through 0/360, 'none' outside, config checks."""

import numpy as np
import pytest

from rxlog.errors import RxlogError
from rxlog.sky.regions import (
    DEFAULT_REGION_BOXES,
    Region,
    regions_from_boxes,
    regions_from_config,
    source_region,
)
from rxlog.station.config import ConfigError, load_config

DEFAULTS = regions_from_boxes(DEFAULT_REGION_BOXES)


@pytest.mark.parametrize("cml, io, expected", [
    (230.0, 230.0, "Io-A"),       # inside Io-A and non-Io-A: the Io box wins
    (230.0, 100.0, "non-Io-A"),
    (150.0, 100.0, "Io-B"),       # Io-B and Io-D overlap: Io-B comes first
    (150.0, 120.0, "Io-D"),
    (300.0, 240.0, "Io-C"),
    (10.0, 100.0, "Io-D"),
    (100.0, 300.0, "none"),
    (200.0, 195.0, "Io-A"),       # edges belong to the box
])
def test_default_table_precedence(cml, io, expected):
    assert source_region([cml], [io], DEFAULTS)[0] == expected


def test_order_is_precedence():
    boxes = [dict(b) for b in DEFAULT_REGION_BOXES]
    reordered = regions_from_boxes(boxes[::-1])           # non-Io-A first
    assert source_region([230.0], [230.0], reordered)[0] == "non-Io-A"


def test_cml_range_wraps_through_zero():
    r = [Region("wrap", 330.0, 30.0, None, None)]
    names = source_region([329.9, 330.0, 350.0, 0.0, 15.0, 30.0, 30.1, 180.0], 0.0, r)
    assert names.tolist() == ["none", "wrap", "wrap", "wrap", "wrap", "wrap", "none", "none"]
    io_wrap = [Region("io", 0.0, 360.0, 350.0, 10.0)]
    assert source_region([5.0, 5.0, 5.0], [355.0, 5.0, 20.0], io_wrap).tolist() == ["io", "io", "none"]


def test_upper_edge_360_includes_zero_and_angles_are_taken_mod_360():
    r = [Region("c", 280.0, 360.0, 225.0, 250.0)]
    assert source_region([0.0, 360.0, -60.0, 640.0], [240.0] * 4, r).tolist() == ["c", "c", "c", "c"]


def test_result_is_a_string_array_of_the_input_shape():
    cml = np.full((3, 4), 230.0)
    out = source_region(cml, np.full((3, 4), 230.0), DEFAULTS)
    assert out.shape == (3, 4) and out.dtype.kind == "U" and set(out.ravel()) == {"Io-A"}


def _write(tmp_path, regions_toml):
    p = tmp_path / "station.toml"
    p.write_text('[station]\nname = "t"\nlatitude_deg = 47.5\nlongitude_deg = 8.7\n\n'
                 '[regions]\n' + regions_toml, encoding="utf-8")
    return p


def test_config_boxes_are_read_in_order(tmp_path):
    cfg = load_config(_write(tmp_path, 'boxes = [\n'
                             '  { name = "late", cml = [300, 60], io_phase = "any" },\n'
                             '  { name = "B", cml = [105, 185], io_phase = [75, 105] },\n]\n'))
    regions = regions_from_config(cfg)
    assert [r.name for r in regions] == ["late", "B"]
    assert source_region([10.0, 150.0, 200.0], [90.0, 90.0, 90.0], regions).tolist() == ["late", "B", "none"]


def test_config_without_regions_uses_defaults(tmp_path):
    p = tmp_path / "s.toml"
    p.write_text('[station]\nname = "t"\nlatitude_deg = 1\nlongitude_deg = 2\n', encoding="utf-8")
    assert regions_from_config(load_config(p)) == DEFAULTS


@pytest.mark.parametrize("box, words", [
    ('{ name = "X", cml = [10, 400], io_phase = "any" }', ["box 1", "'X'", "cml", "0-360"]),
    ('{ name = "X", cml = [10], io_phase = "any" }', ["box 1", "cml", "[from, to]"]),
    ('{ name = "X", cml = [10, 20], io_phase = "all" }', ["io_phase", "\"any\""]),
    ('{ name = "X", cml = [10, 20] }', ["missing io_phase"]),
    ('{ cml = [10, 20], io_phase = "any" }', ["name"]),
    ('{ name = "X", cml = [10, 10], io_phase = "any" }', ["from != to"]),
    ('{ name = "X", cml = [1, 2], io_phase = "any", colour = "red" }', ["unknown key", "colour"]),
])
def test_bad_box_gives_one_clear_line_naming_file_key_and_box(tmp_path, box, words):
    p = _write(tmp_path, f"boxes = [\n  {box},\n]\n")
    with pytest.raises(ConfigError) as e:
        load_config(p)
    line = next(x for x in e.value.problems if "[regions] boxes" in x)
    assert str(p) in line and ":7:" in line            # file and the line of `boxes =`
    for w in words:
        assert w in line


def test_duplicate_names_and_second_box_are_reported(tmp_path):
    p = _write(tmp_path, 'boxes = [\n  { name = "A", cml = [1, 2], io_phase = "any" },\n'
                         '  { name = "A", cml = [3, 4], io_phase = [5, 6] },\n]\n')
    with pytest.raises(ConfigError) as e:
        load_config(p)
    assert any("box 2" in x and "duplicate" in x for x in e.value.problems)


def test_library_callers_get_rxlog_error_for_bad_boxes():
    with pytest.raises(RxlogError, match="box 1"):
        regions_from_boxes([{"name": "x", "cml": "all", "io_phase": "any"}])
