"""Reporting long resistance queries: the plan after a first timed solve, then each block.

A query that solves many right-hand sides first solves ONE of them alone and times it; it then
announces a :class:`Plan` (how many solves, by which method, and the time the rest should take
at that rate) and solves the rest in blocks, reporting each block's size. The engine prints
nothing: the caller passes the two callbacks (``announce(plan)`` and ``progress(count)``), and the
command line turns them into a message and a progress bar.

The estimate is conservative for block solves, which cost less per right-hand side than a single
one (one pass over the factor or the matrix serves the whole block).
"""

from __future__ import annotations

import time
from dataclasses import dataclass


@dataclass(frozen=True)
class Plan:
    """What a query is about to do.

    Attributes
    ----------
    solves : int
        Right-hand sides of the whole query, the first timed one included; the sum of every
        ``progress`` count.
    method : str
        How they are solved (for example ``"pair solves"``, ``"sketch"``).
    seconds_per_solve : float
        Wall time of the first, timed solve.
    """

    solves: int
    method: str
    seconds_per_solve: float

    @property
    def seconds(self) -> float:
        """Estimated wall time of the whole query at the timed rate."""
        return self.solves * self.seconds_per_solve


def first_then_blocks(count: int, step: int):
    """Yield slices over ``range(count)``: one element first (timed), then blocks of ``step``."""
    if count <= 0:
        return
    yield slice(0, 1)
    for begin in range(1, count, step):
        yield slice(begin, min(begin + step, count))


class Tracker:
    """Announces a query's :class:`Plan` after its first block and reports every block.

    Parameters
    ----------
    solves : int
        Right-hand sides planned.
    method : str
    progress : callable, optional
        ``progress(count)`` after each block.
    announce : callable, optional
        ``announce(plan)`` once, after the first (timed) block.
    seconds_per_solve : float, optional
        A rate already measured (then the plan is announced at once, by :meth:`start`).
    """

    def __init__(self, solves: int, method: str, progress=None, announce=None,
                 seconds_per_solve: float | None = None):
        self.solves, self.method = int(solves), method
        self.progress, self.announce = progress, announce
        self.rate = seconds_per_solve
        self.started = time.perf_counter()

    def start(self) -> None:
        """Announce now when the rate is already known (a budgeted sketch timed it)."""
        if self.rate is not None and self.announce is not None:
            self.announce(Plan(self.solves, self.method, self.rate))
            self.announce = None

    def block(self):
        """Restart the clock for the next block."""
        self.started = time.perf_counter()

    def done(self, count: int) -> None:
        """Report ``count`` right-hand sides solved since :meth:`block`."""
        if self.announce is not None:
            seconds = time.perf_counter() - self.started
            self.announce(Plan(self.solves, self.method, seconds / max(count, 1)))
            self.announce = None
        if self.progress is not None:
            self.progress(count)
