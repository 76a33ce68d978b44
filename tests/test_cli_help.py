"""Every command's --help shows a worked example and exits 0; the examples and key lists
say what is true (real event ids, every key the review page handles); a missing
option or argument is one short line and exit status 2, not click's usage block."""

import re

import click
import pytest
from click.testing import CliRunner

from rxlog.cli import main
from rxlog.review.page import LABEL_KEYS, PAGE_JS
from rxlog.store import make_event_id
from rxlog.timeutil import parse_iso


def all_commands(group, prefix=()):
    for name, cmd in group.commands.items():
        path = prefix + (name,)
        if isinstance(cmd, click.Group):
            yield from all_commands(cmd, path)
        else:
            yield path


def help_of(*path):
    r = CliRunner().invoke(main, list(path) + ["--help"])
    assert r.exit_code == 0, r.output
    return r.output


@pytest.mark.parametrize("path", sorted(all_commands(main)), ids=" ".join)
def test_help_has_example(path):
    out = help_of(*path)
    assert "Example" in out and f"rxlog {' '.join(path)}" in out, out


ID_IN_EXAMPLE = re.compile(r"\b([a-z][a-z0-9-]*?)-(\d{8}T\d{6}\.\d)-(\d+\.\d{3})\b")


@pytest.mark.parametrize("path", [("label",), ("export",)], ids=" ".join)
def test_event_ids_in_examples_have_the_form_of_real_ids(path):
    out = help_of(*path)
    example = out[out.index("Example"):]
    ids = re.findall(r"\b[a-z][a-z0-9-]*-\d{8}T[0-9.]+-[0-9.]+\b", example)
    assert ids, example
    for text in ids:
        m = ID_IN_EXAMPLE.fullmatch(text)
        assert m, f"{text} is not station-YYYYMMDDTHHMMSS.s-MHZ"
        station, stamp, mhz = m.groups()
        peak = parse_iso(f"{stamp[:4]}-{stamp[4:6]}-{stamp[6:8]}T{stamp[9:11]}:{stamp[11:13]}:{stamp[13:]}Z")
        assert make_event_id(station, peak, float(mhz), float(mhz)) == text


def test_review_help_lists_every_key_the_page_handles():
    out = help_of("review")
    keys = out[out.index("Keys on the page"):out.index("Example")]
    words = set(re.findall(r"[A-Za-z0-9?]+", keys))
    handled = set(re.findall(r"\b(?:ev\.key|k) === '([^']+)'", PAGE_JS)) | set(LABEL_KEYS.values())
    assert {"u", "j", "k", "n", "?", "ArrowDown", "Escape"} <= handled      # the scan finds the handler
    missing = {k for k in handled if k.removeprefix("Arrow") not in words}
    assert not missing, f"review --help does not list {sorted(missing)}:\n{keys}"


@pytest.mark.parametrize("args, names", [
    (["ephem"], "--start"),
    (["forecast"], "--days"),
    (["simulate", "--start", "now", "--hours", "1"], "--out"),
    (["label"], "ID"),
    (["label", "birchwater-20270202T170756.1-19.543"], "LABEL"),
    (["ingest"], "PATH"),
    (["compare"], "FILE"),
], ids=lambda x: " ".join(x) if isinstance(x, list) else x)
def test_missing_option_or_argument_is_one_short_line(args, names):
    r = CliRunner().invoke(main, args)
    assert r.exit_code == 2, r.output
    lines = r.output.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("rxlog: ") and names in lines[0], r.output
    assert "Usage:" not in r.output and f"rxlog {args[0]} --help" in lines[0]


@pytest.mark.parametrize("args, words", [
    (["ephem", "--strat", "now"], "--strat"),
    (["forecast", "--days", "many"], "--days"),
    (["nosuch"], "nosuch"),
])
def test_other_usage_mistakes_are_one_short_line(args, words):
    r = CliRunner().invoke(main, args)
    assert r.exit_code == 2 and "Usage:" not in r.output, r.output
    lines = r.output.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("rxlog: ") and words in lines[0], r.output


def test_no_arguments_still_shows_the_overview():
    r = CliRunner().invoke(main, [])
    assert "Commands:" in r.output and "forecast" in r.output
