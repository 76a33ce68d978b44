"""The host's two clocks as the logger sees them, and steps of one against the other.

A clock step (NTP correcting a clock that was far off) is seen as a jump of
CLOCK_REALTIME against CLOCK_MONOTONIC between two looks; the sample counter would mix
steps with drops and crystal drift.
"""

from __future__ import annotations

import os
import time

from rxlog.errors import RxlogError

CLOCK_STEPS_ENV = "RXLOG_FAKE_CLOCK_STEPS"   # test hook, see Clock.from_env


class Clock:
    """The host's wall clock (CLOCK_REALTIME) and monotonic clock (CLOCK_MONOTONIC).

    ``steps`` [(after_s, delta_s), ...] shift the wall clock by delta_s once after_s
    monotonic seconds have passed since the clock was made: a stand-in for an NTP step,
    which a test cannot make on the host's own clock.
    """

    def __init__(self, steps: list[tuple[float, float]] = ()):
        self._origin = time.monotonic()
        self._steps = sorted(steps)

    @classmethod
    def from_env(cls, env=None) -> "Clock":
        """Read ``$RXLOG_FAKE_CLOCK_STEPS`` ('after_s:delta_s,...', e.g. '3:+30,6:-20')."""
        text = (os.environ if env is None else env).get(CLOCK_STEPS_ENV, "").strip()
        steps = []
        for item in filter(None, (s.strip() for s in text.split(","))):
            a, _, d = item.partition(":")
            try:
                steps.append((float(a), float(d)))
            except ValueError:
                raise RxlogError(f"${CLOCK_STEPS_ENV}: {item!r} is not 'after_s:delta_s'") from None
        return cls(steps)

    def monotonic(self) -> float:
        return time.monotonic()

    def realtime(self) -> float:
        t = time.time()
        if self._steps:
            age = time.monotonic() - self._origin
            t += sum(d for a, d in self._steps if age >= a)
        return t


class ClockWatch:
    """Detect steps of the wall clock against the monotonic clock.

    The offset realtime − monotonic stays constant while the wall clock runs freely and
    changes only slowly while NTP slews it (at most 500 ppm, adjtimex(2)); a change of
    more than ``threshold_s`` between two looks is a step.
    """

    def __init__(self, clock: Clock, threshold_s: float):
        self.clock = clock
        self.threshold_s = threshold_s
        self.offset = clock.realtime() - clock.monotonic()

    def check(self) -> float | None:
        """The size of a step since the last look (s, positive = clock moved ahead), or None."""
        offset = self.clock.realtime() - self.clock.monotonic()
        step = offset - self.offset
        self.offset = offset
        return step if abs(step) > self.threshold_s else None
