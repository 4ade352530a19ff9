"""SIGINT and SIGTERM end a run cleanly: exit code 128 + signal number, no file left behind.

While :func:`handling` is active the first of these signals raises :class:`Interrupted` in the
main thread, which unwinds through every ``finally`` and
:func:`ohmgraph.io.atomic.atomic_output` block; later signals are only recorded, so clean-up is
never cut short. The signal is also remembered, so a run whose exception was swallowed
somewhere (a library's ``__del__``, for example) still ends as interrupted when it finishes.
Code that must not be cut in half — the publishing of a finished file and the final clean-up —
runs under :func:`deferred`: a signal arriving there is held and raised when the block ends.

Python runs signal handlers between bytecodes of the main thread, so a signal that arrives in
the middle of a long compiled call on that thread takes effect when the call returns. The solver
back ends therefore set up and solve in a worker thread
(:func:`ohmgraph.engine.solvers.base.in_worker`) while the main thread waits in short timed
joins: SuperLU and SciPy's sparse products release the GIL, so the signal is acted on within
a poll. The abandoned worker may still be inside compiled code when the run ends; an
interpreter shutting down around it can crash (freed objects) or fail to flush its streams, so
:func:`end_without_shutdown` ends such a process at once (``os._exit``) once the run's clean-up
is done. Calls that still hold the main thread until they return are listed in the README
("When things go wrong").

:func:`checkpoint` marks the stages of a run for tests: with ``OHMGRAPH_TEST_STAGES`` set it
prints ``ohmgraph: stage NAME`` on standard error, and with ``OHMGRAPH_TEST_PAUSE=NAME`` it
also waits there until its standard input is closed, so a test can send a signal at a known
stage or release two runs together.
"""

from __future__ import annotations

import atexit
import contextlib
import os
import select
import signal
import sys

SIGNALS = (signal.SIGINT, signal.SIGTERM)


class Interrupted(KeyboardInterrupt):
    """SIGINT or SIGTERM arrived; ``exit_code`` is 128 + the signal number (130, 143)."""

    def __init__(self, signum: int):
        self.signum = signum
        self.exit_code = 128 + signum
        super().__init__(signal.Signals(signum).name)


class _State:
    received: int | None = None      # first signal of the run
    deferring: int = 0               # depth of nested deferred() blocks
    raised_again: bool = False       # pending() has handed the interrupt out once more


def _raise_once() -> None:
    """Raise the run's interrupt; later signals are only recorded, so it is raised once."""
    _State.deferring += 1
    raise Interrupted(_State.received)


def _handler(signum, frame) -> None:
    if _State.received is None:
        _State.received = signum
    if not _State.deferring and not _compiler_locks_held():
        _raise_once()


def _compiler_locks_held() -> bool:
    """Whether the main thread holds numba's compiler lock or llvmlite's library lock (it is
    loading or compiling a kernel). An exception raised there can leave the lock held for good
    — between its ``acquire`` and the ``with`` block, or where the library swallows it — and
    every other thread that then loads a kernel waits for ever (seen: a solve's worker and its
    helper thread, with the main thread waiting for them). The signal is then only recorded:
    :func:`pending` hands it to the next wait for a worker, or the run ends as interrupted."""
    try:
        compiler = sys.modules.get("numba.core.compiler_lock")
        if compiler is not None and compiler.global_compiler_lock.is_locked():
            return True
        ffi = sys.modules.get("llvmlite.binding.ffi")
        return bool(ffi is not None and ffi.lib._lock._lock._is_owned())
    except Exception:          # noqa: BLE001 -- another numba or llvmlite: raise as usual
        return False


def pending() -> Interrupted | None:
    """The run's interrupt, once, when a signal arrived but its exception did not end the run
    (it was recorded while a compiler lock was held, or a library swallowed it), for a wait
    that must not go on (:func:`ohmgraph.engine.solvers.base.in_worker`)."""
    if _State.received is None or _State.raised_again:
        return None
    _State.raised_again = True
    _State.deferring += 1           # as for the handler's own raise: clean-up is not cut short
    return Interrupted(_State.received)


def _quiet_unraisable(previous):
    """An ``sys.unraisablehook`` that stays silent about our own interrupt."""
    def hook(unraisable):
        if not isinstance(unraisable.exc_value, KeyboardInterrupt):
            previous(unraisable)
    return hook


@contextlib.contextmanager
def handling():
    """Turn SIGINT and SIGTERM into :class:`Interrupted` inside the block; restore afterwards."""
    _State.received, _State.deferring, _State.raised_again = None, 0, False
    previous = {signum: signal.signal(signum, _handler) for signum in SIGNALS}
    previous_hook = sys.unraisablehook
    sys.unraisablehook = _quiet_unraisable(previous_hook)
    try:
        yield
    finally:
        for signum, handler in previous.items():
            signal.signal(signum, handler)
        sys.unraisablehook = previous_hook
        _connect_workers(None)


def connect_workers() -> None:
    """Let the engine's waits for a worker thread (:func:`ohmgraph.engine.solvers.base.
    in_worker`) end on an interrupt that :func:`pending` still holds, when the engine is
    loaded (it is not imported here: commands that never solve start faster without it)."""
    _connect_workers(pending)


def _connect_workers(check) -> None:
    base = sys.modules.get("ohmgraph.engine.solvers.base")
    if base is not None:
        base.interrupt_check = check


def received() -> Interrupted | None:
    """The interrupt of this run, if a signal arrived (even one whose exception was lost)."""
    return None if _State.received is None else Interrupted(_State.received)


@contextlib.contextmanager
def deferred():
    """Hold SIGINT and SIGTERM for the block; raise :class:`Interrupted` after it if one came."""
    _State.deferring += 1
    try:
        yield
    finally:
        _State.deferring -= 1
    if not _State.deferring and _State.received is not None:
        _raise_once()


def hold() -> None:
    """Hold SIGINT and SIGTERM for the rest of the run (its final clean-up and message)."""
    _State.deferring += 1


def checkpoint(stage: str) -> None:
    """Mark a stage of the run for tests (see the module notes); does nothing otherwise."""
    if "OHMGRAPH_TEST_STAGES" not in os.environ and "OHMGRAPH_TEST_PAUSE" not in os.environ:
        return
    print(f"ohmgraph: stage {stage}", file=sys.stderr, flush=True)
    if os.environ.get("OHMGRAPH_TEST_PAUSE") == stage:
        # Until standard input closes, or until a signal arrives where signals are held (the
        # run then goes on to the end of the held block, as it would have without the pause).
        while not (_State.deferring and _State.received is not None):
            if select.select([sys.stdin], [], [], 0.05)[0]:
                sys.stdin.read()
                return


def end_without_shutdown(code: int) -> None:
    """If a worker thread is still running (abandoned by an interrupt), end the process with
    ``code`` as soon as the interpreter starts to exit, skipping the shutdown that would free
    the objects the worker is using. Call after the run's clean-up."""
    from ohmgraph.engine.solvers.base import workers_unfinished

    if workers_unfinished():
        atexit.register(exit_now, code)


def exit_now(code: int) -> None:
    """End the process with ``code`` at once, standard output and error flushed first, without
    the interpreter's shutdown."""
    for stream in (sys.stdout, sys.stderr):
        with contextlib.suppress(Exception):
            stream.flush()
    os._exit(code)
