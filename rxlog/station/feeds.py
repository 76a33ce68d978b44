"""Where the logger's spectra come from: the receiver through the sweep plan and the
channelizer (``SweepFeed``), or the simulator's sky model straight as spectra
(``SpectraFeed``). Both hand out lists of ``DynamicSpectrum`` rows from ``read()``,
raise ``EndOfStream`` when a finite source runs out, and are opened and closed again
by the logger's feed thread as often as the receiver fails.
"""

from __future__ import annotations

import logging
import math
import time

from rxlog.receive.blocks import EndOfStream
from rxlog.receive.channelizer import Channelizer
from rxlog.receive.sweep import Sweeper, SweepPlan
from rxlog.sim.spectra import iter_spectra
from rxlog.spectrum import DynamicSpectrum
from rxlog.station.clock import Clock
from rxlog.station.sources import open_source

log = logging.getLogger("rxlog")


class SweepFeed:
    """Samples from the configured receiver through the sweep plan (or a single window)
    and the channelizer: rows on the station's channel grid.

    Live receivers read the wall clock through ``clock`` so their sample times follow it
    (and a fake clock step reaches them as a real one would)."""

    def __init__(self, cfg, clock: Clock, realtime_sim: bool = True, sim_hours: float | None = None):
        self.cfg, self.clock = cfg, clock
        self.realtime_sim, self.sim_hours = realtime_sim, sim_hours
        self.sweeper = None
        self.paced = cfg["receiver"]["kind"] != "recording" and (
            cfg["receiver"]["kind"] != "simulated" or realtime_sim)
        self._done = (0, 0)           # sample counts of sources already closed

    def open(self):
        kind = self.cfg["receiver"]["kind"]
        if kind in ("rtlsdr", "rtltcp"):
            source = open_source(self.cfg, monotonic=self.clock.monotonic, realtime=self.clock.realtime)
        elif kind == "simulated":
            source = open_source(self.cfg, realtime=self.realtime_sim, hours=self.sim_hours)
        else:
            source = open_source(self.cfg)
        plan = SweepPlan.from_config(self.cfg, source.rate_hz)
        meta = source.meta() if hasattr(source, "meta") else {"receiver": kind}
        sweeper = Sweeper(source, plan, Channelizer(self.cfg), meta=meta)
        try:
            sweeper.open()
        except BaseException:
            source.close()
            raise
        self.sweeper = sweeper
        log.info("receiver %s open: %s", kind, plan.describe())

    def read(self) -> list[DynamicSpectrum]:
        try:
            return self.sweeper.step()
        except EndOfStream:
            rows = self.sweeper.finish()
            if rows:
                return rows
            raise

    def salvage(self) -> list[DynamicSpectrum]:
        """The row in progress, as far as it got (the sweeper flags what it lacks)."""
        return self.sweeper.finish() if self.sweeper is not None else []

    def close(self):
        if self.sweeper is not None:
            rx, dr = self._done
            self._done = (rx + self.sweeper.samples_received, dr + self.sweeper.samples_dropped)
            sweeper, self.sweeper = self.sweeper, None
            sweeper.close()

    @property
    def ring(self):
        """The sweeper's ring of full-resolution spectra (for event cutouts), or None."""
        return self.sweeper.ring if self.sweeper is not None else None

    @property
    def samples_received(self) -> int:
        return self._done[0] + (self.sweeper.samples_received if self.sweeper else 0)

    @property
    def samples_dropped(self) -> int:
        return self._done[1] + (self.sweeper.samples_dropped if self.sweeper else 0)


class SpectraFeed:
    """Dynamic spectra straight from the simulator's sky model (``[service] sim_feed =
    "spectra"``): no samples, no channelizer — for dry runs, the demo and long tests.

    Paced (``realtime``), a chunk is handed out once its last row has passed on the
    monotonic clock and is stamped in UTC with the current wall-minus-monotonic offset,
    as a live receiver's disciplined sample count is; a wall-clock step therefore moves
    the data as it would on a real station. Rows whose time passed while the sky model
    was being planned are skipped, as a receiver opened late has no samples from before.
    Unpaced, chunks come as fast as they can be made, on the simulation's own time line.
    ``hours`` ends the feed; without it the sky is planned ``RUN_HOURS`` at a time.
    """

    RUN_HOURS = 6.0
    PACED_CHUNK_S = 1.0      # a chunk waits for its last row, so this is the feed's latency
    FAST_CHUNK_S = 60.0

    def __init__(self, cfg, clock: Clock, realtime: bool = True, hours: float | None = None,
                 start_unix: float | None = None, seed: int = 0):
        self.cfg, self.clock, self.paced = cfg, clock, bool(realtime)
        self.hours, self.seed = hours, int(seed)
        self.cadence = float(cfg["spectra"]["cadence_s"])
        chunk = self.PACED_CHUNK_S if self.paced else self.FAST_CHUNK_S
        self.chunk_rows = max(1, int(round(chunk / self.cadence)))
        self.start = start_unix
        self.next_t: float | None = None       # simulation time of the next row
        self.end: float | None = None
        self._runs = 0
        self._run = None
        self._i = 0
        self._shift = 0.0
        self.samples_received = self.samples_dropped = 0

    def open(self):
        if self.start is None:
            now = self.clock.realtime()
            self.start = math.ceil(now / self.cadence) * self.cadence
        if self.next_t is None:
            self.next_t = self.start
            self.end = None if self.hours is None else self.start + self.hours * 3600.0
            # The simulation's time line runs on the monotonic clock: sim time t is
            # monotonic time t - offset0, and in UTC t + (offset now - offset0).
            self._offset0 = self.clock.realtime() - self.clock.monotonic()
        self._run = None

    def _sim_now(self) -> float:
        return self.clock.monotonic() + self._offset0

    def _new_run(self):
        hours = self.RUN_HOURS if self.end is None else min(self.RUN_HOURS, (self.end - self.next_t) / 3600.0)
        self._run = iter_spectra(self.cfg, self.next_t, hours, seed=self.seed + self._runs)
        self._runs += 1
        self._i = 0
        if self.paced:
            late = self._sim_now() - self.next_t
            self._i = min(self._run.n_rows, max(0, int(late // self.cadence)))

    def read(self) -> list[DynamicSpectrum]:
        if self.end is not None and self.next_t >= self.end - 0.5 * self.cadence:
            raise EndOfStream("simulation finished")
        if self._run is None or self._i >= self._run.n_rows:
            self._new_run()
            if self._i >= self._run.n_rows:
                self.next_t = self._run.end
                return []
        i1 = min(self._run.n_rows, self._i + self.chunk_rows)
        spec = self._run.rows(self._i, i1)
        self._i = i1
        self.next_t = spec.t_end
        if i1 >= self._run.n_rows:
            self._run = None
        if self.paced:
            while (wait := spec.t_end - self._sim_now()) > 0:
                time.sleep(min(wait, 0.25))
            # The two clocks are read microseconds apart: follow their offset only when it
            # moved by more than that jitter, so consecutive chunks stay on one time line.
            shift = (self.clock.realtime() - self.clock.monotonic()) - self._offset0
            if abs(shift - self._shift) > 1e-3:
                self._shift = shift
            spec.t0 += self._shift
        return [spec]

    def salvage(self) -> list[DynamicSpectrum]:
        return []

    def close(self):
        self._run = None


def open_feed(cfg, clock: Clock, sim_hours: float | None = None):
    """The configured data feed: the receiver through sweep and channelizer, or for a
    simulated receiver with ``[service] sim_feed = "spectra"`` the spectral simulator."""
    svc = cfg["service"]
    if cfg["receiver"]["kind"] == "simulated" and svc["sim_feed"] == "spectra":
        return SpectraFeed(cfg, clock, realtime=svc["sim_realtime"], hours=sim_hours)
    return SweepFeed(cfg, clock, realtime_sim=svc["sim_realtime"], sim_hours=sim_hours)
