"""One request's deadline, shared by every part of its work.

A request's ``limits.time_limit_s`` starts one clock when the request is accepted; the
search, the entries, the stability resamples, the outer folds of the optimism estimate and
every group of a grouped request then ask the same :class:`Deadline` how much time is left,
instead of each starting a fresh limit of its own.  The end is an instant of the monotonic
clock (``time.monotonic()``): it never jumps when the wall clock is set, and it is the
system's clock since boot, so worker processes on the same machine read the same deadline
after it has been pickled to them.  A deadline never crosses machines: a batch segment on a
cluster starts its own where it runs.
"""

from __future__ import annotations

import time
from dataclasses import dataclass


@dataclass(frozen=True)
class Deadline:
    """The instant (``time.monotonic()``) at which a request's time limit ends.

    ``limit_s`` is the limit the caller asked for (seconds), kept for messages: a part that
    starts after the end says so in the caller's own number, not in what was left of it.
    """

    at: float
    limit_s: float

    @classmethod
    def after(cls, seconds: float) -> Deadline:
        """A deadline ``seconds`` from now."""
        return cls(time.monotonic() + float(seconds), float(seconds))

    def left(self) -> float:
        """Seconds until the end (negative once it has passed)."""
        return self.at - time.monotonic()

    def passed(self) -> bool:
        return time.monotonic() > self.at

    def sooner(self, seconds: float | None) -> Deadline:
        """This deadline, or an earlier one ``seconds`` from now when that comes first (a part
        of the work with a limit of its own); the caller's ``limit_s`` is kept."""
        if seconds is None:
            return self
        return Deadline(min(self.at, time.monotonic() + float(seconds)), self.limit_s)

    def reserving(self, seconds: float) -> Deadline:
        """An earlier deadline that leaves ``seconds`` before this one's end for the work
        that follows (the listed entries after a search); the caller's ``limit_s`` is
        kept."""
        return Deadline(self.at - max(float(seconds), 0.0), self.limit_s)
