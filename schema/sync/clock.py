"""Hybrid logical clock (Kulkarni, Demirbas et al., "Logical Physical Clocks", OPODIS 2014).

A stamp is (wall milliseconds, counter). ``tick`` (a local event or a send) and ``observe`` (a receive) follow
the paper's update rules, with one addition for field tablets whose clocks drift: a stamp never runs more than
``max_ahead_ms`` past this device's own physical clock. A remote stamp beyond that bound is still accepted
(nothing is dropped) but not followed, and ``observe`` reports it so the caller can flag it.
"""

from __future__ import annotations

import time
from dataclasses import dataclass
from typing import Callable, NamedTuple

__all__ = ["MAX_AHEAD_MS", "Clock", "Stamp"]

MAX_AHEAD_MS = 5 * 60 * 1000  # five minutes: "a few minutes past its own physical clock" (DESIGN.md 3)


class Stamp(NamedTuple):
    wall_ms: int
    counter: int


def _now_ms() -> int:
    return time.time_ns() // 1_000_000


@dataclass
class Clock:
    """One device's hybrid logical clock; ``physical`` gives milliseconds (the tablet adds its server offset)."""

    last: Stamp = Stamp(0, 0)
    physical: Callable[[], int] = _now_ms
    max_ahead_ms: int = MAX_AHEAD_MS

    def tick(self) -> Stamp:
        """A local event (an edit) or a send: l' = max(l, pt); c' = c + 1 if l' == l else 0."""
        pt = self.physical()
        wall = max(self.last.wall_ms, pt)
        counter = self.last.counter + 1 if wall == self.last.wall_ms else 0
        self.last = Stamp(wall, counter)
        return self.last

    def observe(self, remote: Stamp) -> bool:
        """A receive: l' = max(l, m.l, pt) with the paper's counter rule. Returns False (and ignores the remote
        wall time) when the remote stamp is more than ``max_ahead_ms`` ahead of this device's clock."""
        pt = self.physical()
        if remote.wall_ms > pt + self.max_ahead_ms:
            return False
        wall = max(self.last.wall_ms, remote.wall_ms, pt)
        if wall == self.last.wall_ms == remote.wall_ms:
            counter = max(self.last.counter, remote.counter) + 1
        elif wall == self.last.wall_ms:
            counter = self.last.counter + 1
        elif wall == remote.wall_ms:
            counter = remote.counter + 1
        else:
            counter = 0
        self.last = Stamp(wall, counter)
        return True

    def ahead_of_physical(self, stamp: Stamp) -> int:
        """How many ms ``stamp`` runs ahead of this device's physical clock (<= 0 when not ahead)."""
        return stamp.wall_ms - self.physical()
