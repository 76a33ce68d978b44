"""The archive grid the simulator draws on: noise statistics, sweep timing and level of
the station's archived cells, from the channelizer and the sweep plan the real station
would run; and the scaling of injected events to the peak excess asked for on it.

Levels: both outputs (spectra and IQ samples) are in the channelizer's units. The
receiver chain gives k_B T x 10^((gain_db + SYSTEM_GAIN_DB) / 10) full-scale^2 per hertz;
the channelizer's power per bin of a white-noise PSD D is D x rate x sum(window^2), and
the spectral mode writes the same number.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from rxlog.constants import K_B
from rxlog.errors import RxlogError
from rxlog.receive import channelizer, sweep
from rxlog.sim.model import SkyModel
from rxlog.sim.render import Grid, render
from rxlog.timeutil import iso

SYSTEM_GAIN_DB = 57.0       # antenna to ADC at gain_db 0: a rural band at ~8 counts rms with the default 30 dB


@dataclass
class CellLayout:
    samples: np.ndarray       # independent power samples per channel (gamma shape; 0 = not covered)
    start_s: np.ndarray       # start of each channel's dwell within its row (DynamicSpectrum.chan_offset_s)
    mid_s: np.ndarray         # middle of that dwell: where the sky is sampled
    dwell_s: float            # integration window of a cell
    db_offset: float          # 10 log10(rate x sum(window^2) x PSD per kelvin): the channelizer's units
    covered: np.ndarray       # channels some tuning covers


def cell_layout(cfg) -> CellLayout:
    """Noise statistics, sweep timing and level of the station's archived cells, from the
    channelizer and the sweep plan the real station would run."""
    rate = float(cfg["receiver"]["sample_rate_hz"])
    ch = channelizer.Channelizer(cfg, ring_s=0)
    plan = sweep.SweepPlan.from_config(cfg, rate)
    n = np.asarray(plan.samples_per_cell(ch), dtype=np.float64)
    if plan.mode == "single":
        dwell = float(cfg["spectra"]["cadence_s"])
        start = np.zeros(n.size)
    else:
        dwell = plan.dwell_s
        start = np.asarray(plan.chan_offset_s, dtype=np.float64)
    sum_w2 = float(np.sum(ch.window ** 2))
    db = 10 * math.log10(rate * sum_w2 * system_psd_per_kelvin(cfg))
    return CellLayout(n, start, start + dwell / 2, dwell, db, n > 0)


def system_psd_per_kelvin(cfg) -> float:
    """Full-scale^2 per hertz per kelvin at the ADC."""
    gain = float(cfg["receiver"].get("gain_db", 30.0))
    return K_B * 10 ** ((gain + SYSTEM_GAIN_DB) / 10)


def archive_grid(model: SkyModel, layout: CellLayout, start: float, cadence: float, i0: int, i1: int) -> Grid:
    """Rows i0..i1 of the archive grid from ``start``: each channel sampled at the middle of its dwell."""
    t = start + cadence * np.arange(i0, i1, dtype=np.float64)
    f = model.freq_hz
    return Grid(t, f, layout.mid_s, layout.dwell_s, float(f[1] - f[0]))


def calibrate_injections(model, layout: CellLayout, start: float, cadence: float, n_rows: int) -> None:
    """Scale each injected event so its peak excess on the archive grid is what was asked."""
    def peak(e, i0, i1, scale, others):
        e.scale = scale
        peaks: dict = {}
        for a in range(i0, i1, 2048):
            render(model, archive_grid(model, layout, start, cadence, a, min(i1, a + 2048)), peaks, events=[e] + others)
        return 10 * math.log10(peaks[id(e)][0]) if id(e) in peaks else -math.inf

    for e in model.events:
        target = e.params.get("target_db")
        if target is None:
            continue
        i0 = max(0, int(math.floor((e.r_t0 - start) / cadence)) - 2)
        i1 = min(n_rows, int(math.ceil((e.r_t1 - start) / cadence)) + 2)
        if e.cls == "fadeout":
            ip = int(round((e.params["t0"] + e.params["rise"] - start) / cadence))
            i0, i1 = max(0, ip - 3), min(n_rows, ip + 4)
        if i0 >= i1:
            raise RxlogError(f"inject {e.cls} at {iso(e.t_start)}: outside the simulated span")
        others = [x for x in model.events if x.cls == "fadeout" and x is not e]
        if e.cls == "fadeout":
            lo, hi = 0.0, 1.0
            while peak(e, i0, i1, hi, others) > target:
                lo, hi = hi, hi * 2
                if hi > 1e4:     # absorption only dims the sky: man-made and receiver noise remain
                    raise RxlogError(f"inject fadeout at {iso(e.t_start)}: a dip of {target} dB is deeper than "
                                     "the sky's share of this background allows; try a quieter rfi category")
            for _ in range(50):
                mid = 0.5 * (lo + hi)
                lo, hi = (mid, hi) if peak(e, i0, i1, mid, others) > target else (lo, mid)
            e.scale = 0.5 * (lo + hi)
        else:
            r = 10 ** (peak(e, i0, i1, 1.0, others) / 10) - 1
            if r <= 0:
                where = {"sun": ": is the Sun up there then?", "jupiter": ": is Jupiter up there then?",
                         "skywave": ": is the path open then (the MUF is low at night)?"}
                raise RxlogError(f"inject {e.cls} at {iso(e.t_start)}: not received on the archive grid"
                                 f"{where.get(e.source, '')}")
            e.scale = (10 ** (target / 10) - 1) / r
