"""Telling the user about long work: one-line messages and tqdm progress bars on standard error.

Both appear only when standard error is a terminal and ``--quiet`` was not given, so piped or
redirected runs (and their captured standard error) stay clean. The engine never prints: its
long queries call ``announce(plan)`` after a first timed solve and ``progress(count)`` after each
block (:mod:`ohmgraph.engine.resistance.progress`); :class:`Feedback` turns those calls into a
message with the planned solves and the estimated time, and a bar whose total is the plan's.
"""

from __future__ import annotations

import sys

from tqdm import tqdm

# Queries expected to take less than this many seconds get no message and no bar.
QUIET_BELOW_SECONDS = 2.0
# Networks with at least this many unknowns get a message before the solver's set-up, whose
# length (a factorisation: seconds to minutes) is not known before it ends.
STAGE_UNKNOWNS = 100_000


def stderr_is_terminal() -> bool:
    """Whether standard error is an interactive terminal."""
    try:
        return sys.stderr.isatty()
    except (AttributeError, ValueError):      # replaced or closed stream
        return False


def format_seconds(seconds: float) -> str:
    """A duration in words: ``"8.8 ms"``, ``"0.4 s"``, ``"95 s"``, ``"12 min"``, ``"3.1 h"``."""
    if seconds < 0.1:
        return f"{seconds * 1000:.2g} ms"
    if seconds < 10:
        return f"{seconds:.1f} s"
    if seconds < 120:
        return f"{seconds:.0f} s"
    if seconds < 7200:
        return f"{seconds / 60:.0f} min"
    return f"{seconds / 3600:.1f} h"


def switch_text(why: str) -> str:
    """The line said when ``auto`` switches to a factorisation during a query
    (:attr:`ohmgraph.engine.session.SolveSession.on_switch`)."""
    return f"switching to a factorisation for the remaining solves ({why})"


class Feedback:
    """Messages and progress bars of one command run.

    Parameters
    ----------
    command : str
        Prefix of every message (``"ohmgraph resistance"``).
    quiet : bool
        ``--quiet``: nothing at all.
    """

    def __init__(self, command: str, quiet: bool = False):
        self.command = command
        self.enabled = not quiet and stderr_is_terminal()
        self.bar = None

    def stage(self, text: str, unknowns: int) -> None:
        """Say what a set-up step is doing before it starts, on networks of at least
        :data:`STAGE_UNKNOWNS` unknowns (its length cannot be measured in advance)."""
        if unknowns >= STAGE_UNKNOWNS:
            self.message(text)

    def message(self, text: str) -> None:
        """One line on standard error (when enabled), above any open progress bar."""
        if self.enabled:           # tqdm's write clears and redraws any open bar around it
            tqdm.write(f"{self.command}: {text}", file=sys.stderr)

    def counter(self, what: str, unknowns: int):
        """A bar without a total (count and rate) for work of unknown length, on networks of at
        least :data:`STAGE_UNKNOWNS` unknowns; None when disabled. Close it when done."""
        if not self.enabled or unknowns < STAGE_UNKNOWNS:
            return None
        return tqdm(desc=what, unit="solve", file=sys.stderr, leave=False, dynamic_ncols=True)

    def announce(self, plan) -> None:
        """Say what a query plans (solves, method, estimated time) and open its progress bar."""
        self.close()
        if not self.enabled or plan.seconds < QUIET_BELOW_SECONDS:
            return
        self.message(f"{plan.solves} solves ({plan.method}), about "
                     f"{format_seconds(plan.seconds)} at {format_seconds(plan.seconds_per_solve)}"
                     " per solve")
        self.bar = tqdm(total=plan.solves, unit="solve", file=sys.stderr, leave=False,
                        dynamic_ncols=True)

    def progress(self, count: int) -> None:
        """Advance the open bar by ``count`` solves."""
        if self.bar is not None:
            self.bar.update(count)

    def close(self) -> None:
        """Close the open bar, if any."""
        if self.bar is not None:
            self.bar.close()
            self.bar = None

    def __enter__(self) -> "Feedback":
        return self

    def __exit__(self, *exc) -> None:
        self.close()


def steps(total: int, what: str) -> tqdm:
    """A progress bar of ``total`` steps, silent unless standard error is a terminal."""
    return tqdm(total=total, desc=what, unit="step", file=sys.stderr,
                disable=not stderr_is_terminal(), leave=False)
