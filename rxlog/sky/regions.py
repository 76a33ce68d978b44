"""Jovian decametric source regions: boxes in the CML III / Io-phase plane, the checks of
a ``[regions] boxes`` table, and the region each (CML, Io phase) point falls in.

Importing this module stays light (numpy only): the config schema uses the table.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from rxlog.errors import RxlogError

# Approximate Io-A..D and non-Io-A boxes in the CML III / Io-phase plane, after Carr,
# Desch & Alexander (1983), "Phenomenology of magnetospheric radio emissions", in
# Physics of the Jovian Magnetosphere (Cambridge UP) -- values from memory, so they are
# configurable. Order is precedence: the first box that contains a point names it; the
# Io-controlled boxes come before non-Io-A, which contains Io-A, and Io-B before Io-D,
# which it touches.
DEFAULT_REGION_BOXES: list[dict] = [
    {"name": "Io-A", "cml": [200.0, 270.0], "io_phase": [195.0, 265.0]},
    {"name": "Io-B", "cml": [105.0, 185.0], "io_phase": [75.0, 105.0]},
    {"name": "Io-C", "cml": [280.0, 360.0], "io_phase": [225.0, 250.0]},
    {"name": "Io-D", "cml": [0.0, 200.0], "io_phase": [95.0, 130.0]},
    {"name": "non-Io-A", "cml": [200.0, 290.0], "io_phase": "any"},
]


@dataclass(frozen=True)
class Region:
    """A box in the CML III / Io-phase plane, degrees, edges included.

    A range whose start is above its end wraps through 0/360 (e.g. 330..30). An Io
    range of None means any Io phase.
    """

    name: str
    cml_from: float
    cml_to: float
    io_from: float | None = None
    io_to: float | None = None

    def contains(self, cml_deg, io_phase_deg) -> np.ndarray:
        inside = _in_range(np.asarray(cml_deg, dtype=np.float64), self.cml_from, self.cml_to)
        if self.io_from is not None:
            inside &= _in_range(np.asarray(io_phase_deg, dtype=np.float64), self.io_from, self.io_to)
        return inside


def _in_range(x: np.ndarray, lo: float, hi: float) -> np.ndarray:
    x = np.mod(x, 360.0)
    if hi - lo >= 360.0:
        return np.ones(x.shape, dtype=bool)
    if lo <= hi:
        # 360 as an upper edge means "up to and including 0/360"
        return ((x >= lo) & (x <= hi)) | ((hi == 360.0) & (x == 0.0))
    return (x >= lo) | (x <= hi)


def wrapped_spans(lo: float, hi: float) -> list[tuple[float, float]]:
    """A degree range on a 0..360 axis as one or two spans that do not wrap: a start above
    the end wraps through 0° into two (330..30 -> 330..360 and 0..30); 360° or more is the
    whole circle."""
    if hi - lo >= 360.0:
        return [(0.0, 360.0)]
    return [(lo, hi)] if lo <= hi else [(lo, 360.0), (0.0, hi)]


def _range_problem(value, what: str, allow_any: bool) -> str | None:
    if allow_any and value == "any":
        return None
    expected = f"{what} = [from, to] in degrees 0-360" + (" or \"any\"" if allow_any else "")
    if (not isinstance(value, list) or len(value) != 2
            or not all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in value)):
        return f"expected {expected}, got {value!r}"
    lo, hi = value
    if not (0 <= lo <= 360 and 0 <= hi <= 360):
        return f"expected {expected}, got {value!r} (outside 0-360)"
    if lo == hi:
        return f"expected {expected} with from != to, got {value!r} (a start above the end wraps through 0)"
    return None


def check_region_boxes(boxes) -> list[str]:
    """Problems with a ``[regions] boxes`` list, one line per bad box ([] when fine)."""
    if not isinstance(boxes, list):
        return [f"expected a list of boxes like {{ name = \"Io-B\", cml = [105, 185], io_phase = [75, 105] }}, got {boxes!r}"]
    problems: list[str] = []
    seen: set[str] = set()
    for n, box in enumerate(boxes, start=1):
        if not isinstance(box, dict):
            problems.append(f"box {n}: expected a table {{ name = ..., cml = [from, to], io_phase = [from, to] or \"any\" }}, got {box!r}")
            continue
        name = box.get("name")
        label = f"box {n}" + (f" ({name!r})" if isinstance(name, str) else "")
        unknown = sorted(set(box) - {"name", "cml", "io_phase"})
        if unknown:
            problems.append(f"{label}: unknown key(s) {', '.join(unknown)} (expected name, cml, io_phase)")
        if not isinstance(name, str) or not name.strip() or name.strip() == "none":
            problems.append(f"{label}: expected name = a non-empty string other than \"none\", got {name!r}")
        elif name in seen:
            problems.append(f"{label}: duplicate name {name!r} (each box needs its own name)")
        else:
            seen.add(name)
        for key, allow_any in (("cml", False), ("io_phase", True)):
            if key not in box:
                problems.append(f"{label}: missing {key}")
                continue
            p = _range_problem(box[key], key, allow_any)
            if p:
                problems.append(f"{label}: {p}")
    return problems


def regions_from_boxes(boxes) -> list[Region]:
    """Region list from ``[regions] boxes`` tables; RxlogError naming each bad box."""
    problems = check_region_boxes(boxes)
    if problems:
        raise RxlogError("[regions] boxes: " + "; ".join(problems))
    out = []
    for box in boxes:
        io = box["io_phase"]
        io_from, io_to = (None, None) if io == "any" else (float(io[0]), float(io[1]))
        out.append(Region(box["name"], float(box["cml"][0]), float(box["cml"][1]), io_from, io_to))
    return out


def regions_from_config(cfg) -> list[Region]:
    """The station's region table (``[regions] boxes``, or the defaults), in order of precedence."""
    boxes = (cfg.get("regions") or {}).get("boxes", DEFAULT_REGION_BOXES)
    return regions_from_boxes(boxes)


def source_region(cml_deg, io_phase_deg, regions=None) -> np.ndarray:
    """Name of the first region containing each (CML, Io phase) point, 'none' outside all.

    ``regions`` is a list of ``Region`` in order of precedence (default: the built-in table).
    """
    regions = regions_from_boxes(DEFAULT_REGION_BOXES) if regions is None else list(regions)
    cml = np.asarray(cml_deg, dtype=np.float64)
    io = np.broadcast_to(np.asarray(io_phase_deg, dtype=np.float64), cml.shape)
    width = max([4] + [len(r.name) for r in regions])
    out = np.full(cml.shape, "none", dtype=f"<U{width}")
    free = np.ones(cml.shape, dtype=bool)
    for r in regions:
        hit = free & r.contains(cml, io)
        out[hit] = r.name
        free &= ~hit
    return out
