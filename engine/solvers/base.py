"""The solver interface: set up once for a symmetric positive-definite matrix, solve many
right-hand sides.

A solver is built once for a matrix (factorisation or multigrid hierarchy) and then solves any
number of right-hand sides, one vector or a block of columns, returning the solution and a
:class:`SolveInfo` with what it did. Back ends live one per module beside this one and register
in :data:`ohmgraph.engine.solvers.SOLVERS`.

Every back end sets up and solves with the BLAS limited to one thread (threadpoolctl). Conjugate
gradient calls BLAS dot products on vectors of 10^4 to 10^6 entries; OpenBLAS splits each of them
over threads, and on two busy cores that made whole solves 3 to 20 times slower (the core type
OpenBLAS picks made no difference); SuperLU's block solves gain too. Numbers in
``benchmarks/README.md``.

Set-up and solves run in a worker thread while the calling (main) thread waits in short timed
joins (:func:`in_worker`): Python runs signal handlers only in the main thread and only between
bytecodes, so a SIGINT arriving during a factorisation run on the main thread would wait for
the factorisation to end. SuperLU (``splu`` and its solves) and SciPy's sparse products release
the GIL, so with the work elsewhere the main thread acts on the signal within a poll (the
abandoned worker ends with the process). Back ends whose library must stay on the main thread
(``petsc``: MPI) set :attr:`SPDSolver.worker_thread` to False.
"""

from __future__ import annotations

import functools
import threading
import time
from abc import ABC, abstractmethod
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla
from threadpoolctl import ThreadpoolController

from .split_cg import conjugate_gradient

DEFAULT_RTOL = 1e-10
DIRECT_RESIDUAL_LIMIT = 1e-8


@functools.cache
def _blas_threads():
    """One controller of the loaded BLAS libraries (cheap to apply once built)."""
    return ThreadpoolController()


def single_threaded_blas():
    """Context manager that limits every loaded BLAS library to one thread."""
    return _blas_threads().limit(limits=1, user_api="blas")


# Seconds between the main thread's checks on a worker (signal handlers run between them too).
WORKER_POLL = 0.05
# Matrices with fewer unknowns are set up and solved on the calling thread: their calls take
# milliseconds, less than starting a thread would add to each of their many small solves.
WORKER_MIN_UNKNOWNS = 20_000


_UNFINISHED: set = set()          # completion events of workers not finished yet
# Set by the command line (io/interrupts.py): a function returning an exception that must end
# a wait for a worker (an interrupt whose own exception did not end the run), or None.
interrupt_check = None


def in_worker(function, *args):
    """``function(*args)`` run in a daemon thread while the main thread waits in timed waits,
    so that a signal handler raising in the main thread ends the wait at once.

    Off the main thread (nothing to keep responsive) the call is made directly. Exceptions of
    ``function`` are raised here. (The wait is on an event, not ``Thread.join``: a join cut
    short by an exception can mark a running thread as stopped.)
    """
    if threading.current_thread() is not threading.main_thread():
        return function(*args)
    outcome, finished = {}, threading.Event()

    def work():
        try:
            outcome["value"] = function(*args)
        except BaseException as error:          # handed to the waiting thread
            outcome["error"] = error
        finally:
            finished.set()
            _UNFINISHED.discard(finished)

    _UNFINISHED.add(finished)
    threading.Thread(target=work, name="ohmgraph-solver", daemon=True).start()
    while not finished.wait(WORKER_POLL):
        error = interrupt_check() if interrupt_check is not None else None
        if error is not None:
            raise error
    if "error" in outcome:
        raise outcome["error"]
    return outcome["value"]


def workers_unfinished() -> bool:
    """Whether a worker of :func:`in_worker` is still running (its caller was interrupted)."""
    return any(not event.is_set() for event in list(_UNFINISHED))


class SolverFailed(RuntimeError):
    """The solve did not reach the requested accuracy and no fallback applied.

    Attributes
    ----------
    info : SolveInfo or None
        The last solve's record (its residual is the shortfall), when there was one.
    """

    def __init__(self, message: str, info: "SolveInfo | None" = None):
        super().__init__(message)
        self.info = info


@dataclass(frozen=True)
class SolveInfo:
    """What one solve did.

    Attributes
    ----------
    method : str
        ``"direct"`` or ``"amg-cg"``.
    iterations : int
        Conjugate-gradient iterations (the largest over a block); 0 for ``direct``.
    relative_residual : float
        ``max_j ||A x_j - b_j|| / ||b_j||`` measured after the solve.
    converged : bool
        ``relative_residual <= rtol`` (always True for ``direct`` unless the matrix is singular).
    setup_seconds, solve_seconds : float
    """

    method: str
    iterations: int
    relative_residual: float
    converged: bool
    setup_seconds: float
    solve_seconds: float


def shortfall(info: SolveInfo, rtol: float) -> str:
    """Why a solve missed its target, in words: the residual reached, or the overflow that
    left no finite residual (values beyond the double-precision range)."""
    text = (f"{info.method} solve ended at relative residual {info.relative_residual:.3g} "
            f"(rtol {rtol:g})")
    if not np.isfinite(info.relative_residual):
        text += ("; the values overflow double precision (IEEE 754 binary64): rescale them, "
                 "for example to other units")
    return text


def relative_residual(matrix, x: np.ndarray, b: np.ndarray) -> float:
    """``max_j ||A x_j - b_j|| / ||b_j||`` over the columns (0 for a zero right-hand side)."""
    num = np.linalg.norm(matrix @ x - b, axis=0)
    den = np.linalg.norm(b, axis=0)
    ratio = np.where(den > 0, num / np.where(den > 0, den, 1.0), num)
    return float(np.max(ratio)) if np.size(ratio) else 0.0


def column_by_column(solve_column, b: np.ndarray, x0: np.ndarray | None = None
                     ) -> tuple[np.ndarray, int]:
    """Solve a 1-D right-hand side, or each column of a 2-D block in turn, with
    ``solve_column(b, x0) -> (x, iterations)``; return the solution(s) and the most iterations
    any column took (for back ends without a block method)."""
    if b.ndim == 1:
        return solve_column(b, x0)
    columns = [solve_column(np.ascontiguousarray(b[:, j]), None if x0 is None else x0[:, j])
               for j in range(b.shape[1])]
    return (np.column_stack([c[0] for c in columns]),
            max((c[1] for c in columns), default=0))


class SPDSolver(ABC):
    """Set up once for a symmetric positive-definite matrix, solve many right-hand sides."""

    method: str = ""
    worker_thread: bool = True      # set up and solve in a worker thread (module notes)
    # Whether the back end can export its set-up as plain arrays (``export_setup()``) and be
    # rebuilt from them (``kept=``), :mod:`.kept`.
    keeps_setup: bool = False
    settings: dict = {}             # what a kept set-up must have been made with

    def __init__(self, matrix, rtol: float = DEFAULT_RTOL):
        self.matrix = sp.csr_matrix(matrix)
        self.rtol = float(rtol)
        start = time.perf_counter()
        with single_threaded_blas():
            self._run(self._setup)
        self.setup_seconds = time.perf_counter() - start

    def _run(self, function, *args):
        if self.worker_thread and self.matrix.shape[0] >= WORKER_MIN_UNKNOWNS:
            return in_worker(function, *args)
        return function(*args)

    @abstractmethod
    def _setup(self) -> None:
        """Factorise or build the preconditioner."""

    @abstractmethod
    def _solve(self, b: np.ndarray, x0: np.ndarray | None = None) -> tuple[np.ndarray, int]:
        """Solve for a 1-D or 2-D right-hand side (``x0``: an initial guess an iterative back
        end starts from); return the solution and iteration count."""

    @abstractmethod
    def preconditioner(self, matrix=None) -> spla.LinearOperator:
        """This set-up as an approximate inverse of its matrix, or of ``matrix``, a nearby
        matrix of the same size (a back end may fold ``matrix`` in where that is cheap)."""

    def solve(self, b: np.ndarray, x0: np.ndarray | None = None) -> tuple[np.ndarray, SolveInfo]:
        """Solve ``A x = b`` for one column (shape ``(n,)``) or a block (shape ``(n, r)``),
        starting an iterative back end from ``x0`` when given."""
        b = np.asarray(b, dtype=np.float64)
        start = time.perf_counter()
        if self.matrix.shape[0] == 0:
            x, iterations = np.zeros_like(b), 0
        else:
            with single_threaded_blas():
                x, iterations = self._run(self._solve, b, x0)
        elapsed = time.perf_counter() - start
        residual = relative_residual(self.matrix, x, b) if b.size else 0.0
        target = max(self.rtol, DIRECT_RESIDUAL_LIMIT) if self.method == "direct" else self.rtol
        converged = bool(np.isfinite(residual) and residual <= target)
        return x, SolveInfo(self.method, iterations, residual, converged,
                            self.setup_seconds, elapsed)

    def solve_nearby(self, matrix, b: np.ndarray, x0: np.ndarray | None = None,
                     max_iterations: int = 500) -> tuple[np.ndarray, SolveInfo]:
        """Solve ``matrix @ x = b`` for one column by conjugate gradient preconditioned by this
        set-up (made for a nearby matrix of the same size), from ``x0`` when given.

        The returned :class:`SolveInfo` holds the residual measured against ``matrix``; its
        ``converged`` says whether ``rtol`` was met (the caller decides what to do otherwise).
        """
        b = np.asarray(b, dtype=np.float64)
        iterations = 0
        start = time.perf_counter()
        if matrix.shape[0] == 0 or not np.any(b):
            x = np.zeros_like(b)
        else:
            with single_threaded_blas():
                # Half the target, as in amg_cg: CG's recurrence residual drifts from the true one.
                x, iterations = conjugate_gradient(
                    sp.csr_matrix(matrix), b, self.preconditioner(matrix).matvec, x0=x0,
                    target=0.5 * self.rtol * float(np.linalg.norm(b)),
                    max_iterations=max_iterations)
        elapsed = time.perf_counter() - start
        residual = relative_residual(matrix, x, b) if b.size else 0.0
        converged = bool(np.isfinite(residual) and residual <= self.rtol)
        return x, SolveInfo(f"cg preconditioned by {self.method}", iterations, residual, converged,
                            0.0, elapsed)
