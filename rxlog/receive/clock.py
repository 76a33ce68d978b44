"""Clock discipline: UTC times and gaps for counted samples from a free-running crystal.

An RTL2832U sends neither timestamps nor sequence numbers and its crystal is off by
1-50 ppm (up to ~4 s a day). Live sources therefore count samples and discipline the
count against the host with ``ClockDiscipline``: the count's rate is tracked against
CLOCK_MONOTONIC (a count falling behind the clock means samples were lost: a gap, given
as ``SampleBlock.dropped_before``, never glued over), and sample times are anchored to
CLOCK_REALTIME (NTP) for UTC.
"""

from __future__ import annotations

import collections
import time

import numpy as np


class ClockDiscipline:
    """Times and gaps for a stream of counted samples from a free-running crystal.

    Call ``push(n, item)`` right after each read of ``n`` samples returns; it reads both
    host clocks. ``pop_ready()`` then hands back ``(item, t0_utc, dropped_before)`` for
    each read whose fate is decided, in order. ``stamp(n)`` does both for a source without
    look-ahead.

    Model. The read of the sample with running index e returns on CLOCK_MONOTONIC at
    ``m = a + e / r + latency`` with latency >= 0 and r the true sample rate (nominal
    ± the crystal error). Every ``fit_interval_s`` of samples the read with the smallest
    ``m - e / r_nominal`` (the least-delayed one) becomes an envelope point; a straight
    line through the envelope points of the last ``fit_span_s`` gives ``a`` and ``r``.
    With 40 ppm and a fit over 10 minutes the rate is known to better than 1 ppm after a
    few minutes, so extrapolation errors stay far below a millisecond.

    Drops. The residual ``d = m - (a + e / r)`` of a read is its latency plus whatever the
    count is missing. A read that returns late but brings contiguous samples (a busy host,
    a stalled network) is followed by reads that catch up, so ``d`` falls back; samples
    that were lost keep every later read late. The decision for a read is therefore made
    on the smallest ``d`` among it and the ``lookahead`` reads after it: above
    ``tolerance_s`` means that many seconds of samples (rounded to whole samples) were
    lost just before it. USB synchronous reads need little look-ahead (the dongle queues
    only a few ms, so a host that falls behind loses samples at the next read); rtl_tcp
    needs more (the server and TCP queue, and the network stalls). A read only a few ms
    late whose successors are later still is taken as late, and the loss put before the
    next read. ``pop_ready(flush=True)`` decides what is pending on the reads there are
    (before a retune, say).

    Steering. The time track (the time of the next sample) follows the fitted line with
    a bounded slew of ``max_slew`` (1000 ppm: a 10 ms correction takes 10 s) so block
    times stay continuous; errors over ``step_s`` are stepped at once.

    UTC. A sample's CLOCK_MONOTONIC time is moved to UTC with the CLOCK_REALTIME minus
    CLOCK_MONOTONIC difference read at the same moment, so NTP's slewing and steps of
    the host clock pass straight through. The constant part of the transport latency
    (USB ~1 ms) is not removed.
    """

    def __init__(self, rate_hz: float, *, monotonic=time.monotonic, realtime=time.time,
                 lookahead: int = 0, tolerance_s: float = 0.004, fit_interval_s: float = 5.0,
                 fit_span_s: float = 600.0, max_slew: float = 1e-3, step_s: float = 0.25):
        self.rate_nominal = float(rate_hz)
        self.monotonic, self.realtime = monotonic, realtime
        self.lookahead = int(lookahead)
        self.tolerance_s = float(tolerance_s)
        self.fit_interval = int(fit_interval_s * rate_hz)
        self.fit_points = max(2, int(round(fit_span_s / fit_interval_s)))
        self.max_slew, self.step_s = float(max_slew), float(step_s)
        self.count = 0                  # running index of the next sample (lost ones included)
        self.dropped_total = 0
        self.received_total = 0
        self.a: float | None = None     # fitted line: mono(e) = a + e * s
        self.s = 1.0 / self.rate_nominal
        self.track: float | None = None  # monotonic time of sample ``count`` as handed out
        self._queue: collections.deque = collections.deque()
        self._points: collections.deque = collections.deque(maxlen=self.fit_points)
        self._bin_end = self.fit_interval
        self._bin_best: tuple[float, int, float] | None = None

    @property
    def rate_hz(self) -> float:
        """Current estimate of the true sample rate (samples per CLOCK_MONOTONIC second)."""
        return 1.0 / self.s

    @property
    def pending_samples(self) -> int:
        """Samples read but not yet handed out (waiting for their look-ahead)."""
        return sum(q[0] for q in self._queue)

    def push(self, n_samples: int, item=None) -> None:
        """Record that a read of ``n_samples`` has just returned (reads both clocks now)."""
        m = self.monotonic()
        off = self.realtime() - m
        self._queue.append((int(n_samples), m, off, item))
        self.received_total += int(n_samples)

    def pop_ready(self, flush: bool = False) -> list[tuple[object, float, int]]:
        """Decided reads, oldest first: (item, UTC of its first sample, samples lost before it)."""
        out = []
        while len(self._queue) > self.lookahead or (flush and self._queue):
            out.append(self._decide())
        return out

    def stamp(self, n_samples: int) -> tuple[float, int]:
        """``push`` then decide at once (look-ahead 0): (UTC of the first sample, samples lost before)."""
        self.push(n_samples)
        _, t0, dropped = self.pop_ready(flush=True)[-1]
        return t0, dropped

    def _decide(self):
        n, m, off, item = self._queue[0]
        if self.a is None:                         # first read: the line passes through it
            self.a = m - (self.count + n) * self.s
            self.track = self.a + self.count * self.s
        # residuals of this read and the look-ahead reads, assuming nothing lost after it
        d, e = [], self.count
        for k, (nk, mk, _, _) in enumerate(self._queue):
            if k > self.lookahead:
                break
            e += nk
            d.append(mk - (self.a + e * self.s))
        excess = min(d)
        # A read a few ms late followed by a loss (later reads later still) is a late read:
        # a host that falls behind loses samples at its *next* read, so the loss goes there.
        if len(d) > 1 and excess == d[0] and excess < 3 * self.tolerance_s and min(d[1:]) - d[0] > self.tolerance_s:
            excess = 0.0
        dropped = 0
        if excess > self.tolerance_s:
            dropped = int(round(excess / self.s))
            self.count += dropped
            self.dropped_total += dropped
            self.track += dropped * self.s
        # steer the track toward the fitted line, slew-limited
        target = self.a + self.count * self.s
        err = target - self.track
        if abs(err) > self.step_s:
            self.track = target
        else:
            self.track += max(-self.max_slew * n * self.s, min(self.max_slew * n * self.s, err))
        t0_mono = self.track
        self.track += n * self.s
        self.count += n
        self._queue.popleft()
        self._envelope(self.count, m)
        return item, t0_mono + off, dropped

    def _envelope(self, e_end: int, m: float) -> None:
        """Keep the least-delayed read of each fit interval; refit the line when one closes."""
        key = m - e_end / self.rate_nominal
        if self._bin_best is None or key < self._bin_best[0]:
            self._bin_best = (key, e_end, m)
        if len(self._points) < 2:           # no line yet: keep it under every read so far
            self.a = min(self.a, m - e_end * self.s)
        if e_end < self._bin_end:
            return
        self._points.append(self._bin_best[1:])
        self._bin_best = None
        self._bin_end = e_end + self.fit_interval
        if len(self._points) >= 2:
            e = np.array([p[0] for p in self._points], dtype=np.float64)
            mm = np.array([p[1] for p in self._points], dtype=np.float64)
            e0, m0 = e.mean(), mm.mean()
            de = e - e0
            s = float(np.dot(de, mm - m0) / np.dot(de, de))
            # a rate more than 1000 ppm from nominal is not a crystal error: keep the old one
            if abs(s * self.rate_nominal - 1.0) < 1e-3:
                self.s = s
            self.a = float(m0 - e0 * self.s)

