"""Waits that double between attempts, up to a cap: how rxlog retries whatever failed
for a while (a receiver gone, a server unreachable, a disk full).

Doubling keeps a lasting fault cheap (few attempts, few log lines) while a short one is
over after the first, short wait. The caller sleeps, counts and logs; this only says how
long. Nothing here imports from the rest of rxlog, so every stage may use it.
"""

from __future__ import annotations

import math


class DoublingWait:
    """``first_s``, then twice the last wait, never more than ``max_s`` (no cap by default).

    ``s`` is the wait before the next attempt; ``double()`` after a failed attempt,
    ``reset()`` after a success. The first wait is not held to the cap.
    """

    def __init__(self, first_s: float, max_s: float = math.inf):
        self.first_s = float(first_s)
        self.max_s = float(max_s)
        self.s = self.first_s

    def double(self) -> float:
        """Double the wait (up to the cap) and return the new one."""
        self.s = min(2 * self.s, self.max_s)
        return self.s

    def reset(self) -> None:
        self.s = self.first_s
