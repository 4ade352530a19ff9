"""The one door for every linear solve: :class:`SolveSession`.

Every solve in the engine (the network solution, effective resistances, Kron reduction, adjoint
solves for readings, sensitivities, diagnosis and tolerance) goes through a session. A session
owns, for one symmetric positive-definite matrix:

* the method choice (``auto`` asks :func:`ohmgraph.engine.solvers.choice.choose`, which knows how
  many right-hand sides are coming, and may switch an iterative set-up to a factorisation when a
  larger query arrives, or during a query when the iterative solves measured so far show a
  factorisation cheaper for the rest of it: :func:`~.solvers.choice.direct_for_the_rest`; a
  block that opens such a query has its first column solved alone, to measure the pace);
* the set-up, done once and reused for every right-hand side;
* the convergence check: every returned vector has a measured relative residual
  ``||A x - b|| / ||b|| <= rtol`` (a factorisation is held to ``max(rtol, 1e-8)``);
* the fallback: an iterative solve that misses its target is redone by a factorisation when the
  choice module allows one; otherwise, and when the factorisation misses too,
  :class:`~ohmgraph.engine.solvers.SolverFailed` is raised with the shortfall;
* the statistics (:class:`SessionStats`), returned to the caller and stored with results.

A session may be given a set-up kept from an earlier run (``kept=``, a
:class:`~ohmgraph.engine.solvers.kept.KeptSetup`, for example read back from a solution
file): it is used for the first set-up when its fingerprint fits the matrix (same unknowns,
free nodes and sparsity pattern; values may differ) and the method asked for allows it, and
otherwise ignored with a note. Its solves are proven like any other; one that misses ``rtol``
sets up afresh (then the usual fallback applies). :meth:`SolveSession.kept_setup` exports the
set-up in use for keeping.

Nothing downstream of a session ever sees an unproven vector.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field

import numpy as np
import scipy.sparse as sp

from .memory import default_memory_budget
from .solvers import DEFAULT_RTOL, SOLVERS, SolveInfo, SolverFailed, SPDSolver, shortfall
from .solvers.choice import choose, direct_fallback_allowed, direct_for_the_rest
from .solvers.kept import KeptSetup, fingerprint, mismatch


@dataclass
class SessionStats:
    """What a session has done so far, accumulated over every solve.

    Attributes
    ----------
    method : str
        The back end now in use (``"not set up"`` before the first solve).
    unknowns : int
    reason : str
        Why that back end (the choice, or the fallback).
    setup_seconds, solve_seconds : float
        Totals over every set-up and every solve.
    solves : int
        Right-hand sides solved.
    max_iterations : int
    max_relative_residual : float
        The largest measured ``||A x - b|| / ||b||`` over every returned solution.
    seed : int or None
        Seed of a randomised back end's preconditioner (``ac-cg``), so the run can be repeated
        exactly; None for a deterministic one.
    predicted : dict
        The numbers behind ``auto``'s choice (:class:`~ohmgraph.engine.solvers.choice.Choice`):
        predicted seconds and bytes of each back end, factor entries and flops, the budget.
    notes : list of str
        Switches and fallbacks, in words.
    """

    method: str
    unknowns: int
    reason: str = ""
    setup_seconds: float = 0.0
    solve_seconds: float = 0.0
    solves: int = 0
    max_iterations: int = 0
    max_relative_residual: float = 0.0
    seed: int | None = None
    predicted: dict = field(default_factory=dict)
    notes: list = field(default_factory=list)


class SolveSession:
    """Method choice, set-up, convergence check, fallback and statistics for one SPD matrix.

    Parameters
    ----------
    matrix : sparse matrix, shape (n, n)
        Symmetric positive definite.
    method : str
        ``"auto"`` or a key of :data:`ohmgraph.engine.solvers.SOLVERS`.
    rtol : float
        Relative residual every returned solution must reach.
    memory_budget : float, optional
        Bytes a set-up may use (``auto`` and the direct fallback keep within it); None for the
        default, half the available memory (:func:`ohmgraph.engine.memory.default_memory_budget`).
    kept : KeptSetup, optional
        A set-up kept from an earlier run, used for the first set-up when it fits (module
        notes); whether it was used, and why not, is in ``stats.notes``.
    placement : tuple of int arrays
        What the unknowns stand for (for a network: free supernodes and the node-to-supernode
        map), part of the fingerprint a kept set-up is matched by and exported with.

    Raises
    ------
    ValueError
        On an unknown method or a non-square matrix.
    """

    def __init__(self, matrix, method: str = "auto", rtol: float = DEFAULT_RTOL, *,
                 memory_budget: float | None = None, kept: KeptSetup | None = None,
                 placement: tuple = ()):
        if method != "auto" and method not in SOLVERS:
            raise ValueError(f"unknown method {method!r} (expected auto, {', '.join(SOLVERS)})")
        self.matrix = sp.csr_matrix(matrix)
        if self.matrix.shape[0] != self.matrix.shape[1]:
            raise ValueError(f"the matrix is not square: {self.matrix.shape}")
        self.requested = method
        self.rtol = float(rtol)
        self.memory_budget = default_memory_budget() if memory_budget is None else memory_budget
        self.stats = SessionStats("not set up", int(self.matrix.shape[0]))
        self.last: SolveInfo | None = None
        # Called with the number of right-hand sides after every proven solve (progress for
        # callers whose query makes many solves of unknown count, such as a fault ranking).
        self.on_solved = None
        self._solver: SPDSolver | None = None
        self._analysis = None     # the symbolic analysis of the factor, once made
        self.placement = placement
        self._kept = None         # the kept set-up, while it fits and has not failed
        self._adopted: KeptSetup | None = None      # the kept set-up the back end was built from
        self._query = 0           # right-hand sides announced by the last expect() ...
        self._query_solved = 0    # ... and solved since
        # Called with the reason when a switch to a factorisation decided during a query (auto)
        # is about to be set up, at the start of the next solve: callers may say so.
        self.on_switch = None
        self._pending_switch: tuple | None = None     # (note, reason, predicted numbers)
        if kept is not None:
            self._consider(kept)

    def _consider(self, kept: KeptSetup) -> None:
        """Keep ``kept`` for the first set-up if it fits this matrix and method; else a note."""
        back_end = SOLVERS.get(kept.method)
        here = fingerprint(self.matrix, self.placement)
        if back_end is None or not back_end.keeps_setup:
            why = f"the {kept.method} back end cannot use a kept set-up here"
        elif self.requested not in ("auto", kept.method):
            why = f"{self.requested} was asked for"
        else:
            why = mismatch(kept.fingerprint, here)
        if why is None and kept.settings != back_end.settings:
            why = "it was made with other settings"
        if why is not None:
            self.stats.notes.append(f"kept {kept.method} set-up not used: {why}")
            return
        self._kept = kept
        self._kept_same_values = kept.fingerprint.get("values_sha256") == here["values_sha256"]

    @property
    def method(self) -> str:
        """The back end in use (``"not set up"`` before the first solve or :meth:`expect`)."""
        return self.stats.method

    @property
    def back_end(self) -> SPDSolver | None:
        """The back end in use, for inspection (its settings); solve through :meth:`solve`."""
        return self._solver

    @property
    def factors(self):
        """The sparse factorisation when the back end is ``direct``, else None (for callers that
        exploit its sparsity, :mod:`ohmgraph.engine.resistance.reach`)."""
        return getattr(self._solver, "factors", None)

    def expect(self, solves: int) -> None:
        """Set up for a query of ``solves`` right-hand sides.

        With ``auto`` the choice may switch an iterative set-up to a factorisation for a larger
        query (never back: a factorisation serves every later query). During the query, ``auto``
        re-decides after every solve from the measured pace (module notes).
        """
        self._query, self._query_solved = max(int(solves), 1), 0
        self._pending_switch = None      # decided for the last query; this one is chosen anew
        if self._solver is None and self._kept is not None:
            self._set_up_kept(solves)
            return
        if self.requested != "auto":
            if self._solver is None:
                self._set_up(self.requested, "asked for")
            return
        if self._solver is not None and self._solver.method == "direct":
            return
        start = time.perf_counter()
        choice = choose(self.matrix, solves, self.memory_budget, self._analysis, self.rtol)
        self.stats.setup_seconds += time.perf_counter() - start
        self._analysis = choice.analysis or self._analysis
        if self._solver is None or choice.method != self._solver.method:
            if self._solver is not None:
                self.stats.notes.append(f"switched to {choice.method} for a query of {solves} "
                                        f"right-hand sides: {choice.reason}")
            self._set_up(choice.method, choice.reason)
            self.stats.predicted = dict(choice.predicted)

    def _set_up(self, method: str, reason: str) -> None:
        self._adopted = None
        start = time.perf_counter()
        if method == "direct" and self._analysis is not None:
            self._solver = SOLVERS[method](self.matrix, self.rtol, order=self._analysis.order)
        else:
            self._solver = SOLVERS[method](self.matrix, self.rtol)
        self.stats.setup_seconds += time.perf_counter() - start
        self.stats.seed = getattr(self._solver, "seed", None)
        if self.stats.seed is not None:          # stored with the reason, so a run can repeat
            reason = f"{reason}; seed {self.stats.seed}"
        if getattr(self._solver, "split", False):  # the two-thread factor is another factor
            reason = f"{reason}; factored in two threads (separator split)"
        self.stats.method, self.stats.reason = method, reason

    def _set_up_kept(self, solves: int) -> None:
        kept, self._kept = self._kept, None
        start = time.perf_counter()
        try:
            self._solver = SOLVERS[kept.method](self.matrix, self.rtol, kept=kept)
        except (ValueError, KeyError, IndexError) as error:
            self.stats.setup_seconds += time.perf_counter() - start
            self.stats.notes.append(f"kept {kept.method} set-up not used: it cannot be rebuilt "
                                    f"({error})")
            self.expect(solves)
            return
        self.stats.setup_seconds += time.perf_counter() - start
        self._adopted = kept
        which = ("built for this very matrix" if self._kept_same_values else
                 "built for a matrix of the same unknowns and pattern, other values; this "
                 "matrix on its finest level")
        self.stats.method = kept.method
        self.stats.reason = f"kept set-up rebuilt ({which})"

    def kept_setup(self) -> KeptSetup | None:
        """The set-up in use as plain arrays with the fingerprint of this matrix (or, when it
        was itself rebuilt from a kept set-up, that one), for a later session to rebuild; None
        when the back end cannot export its set-up (only ``amg-cg`` can) or none is made."""
        if self._adopted is not None:
            return self._adopted
        if self._solver is None or not self._solver.keeps_setup:
            return None
        exported = self._solver.export_setup()
        return KeptSetup(exported.method, exported.settings, exported.arrays,
                         fingerprint(self.matrix, self.placement))

    def solve(self, b: np.ndarray, x0: np.ndarray | None = None) -> np.ndarray:
        """Solve ``A x = b`` for one column (shape ``(n,)``) or a block (shape ``(n, r)``).

        ``x0`` is an initial guess for an iterative back end (ignored by a factorisation).

        Returns
        -------
        ndarray
            A solution whose measured relative residual meets ``rtol`` (see :attr:`last`).

        Raises
        ------
        SolverFailed
            When no allowed back end reaches ``rtol``; the message gives the residual reached.
        """
        b = np.asarray(b, dtype=np.float64)
        self._switch_if_pending()
        if self._solver is None:
            self.expect(1 if b.ndim == 1 else b.shape[1])
        if self._opens_a_long_query(b):
            # auto times one column alone before committing a block to an iterative back end
            parts = [(b[:, :1], x0), (b[:, 1:], x0)]
            if x0 is not None and np.ndim(x0) == 2:
                parts = [(b[:, :1], x0[:, :1]), (b[:, 1:], x0[:, 1:])]
            return np.hstack([self.solve(part, guess) for part, guess in parts])
        x, info = self._solver.solve(b, x0)
        if not info.converged and self._adopted is not None:
            self.stats.notes.append(
                f"the kept set-up reached relative residual {info.relative_residual:.3g} after "
                f"{info.iterations} iterations (rtol {self.rtol:g}); set up afresh")
            self.stats.solve_seconds += info.solve_seconds
            self._solver = self._adopted = None
            self.expect(max(self._query - self._query_solved, 1 if b.ndim == 1 else b.shape[1]))
            x, info = self._solver.solve(b, x0)
        if not info.converged and self._solver.method != "direct":
            allowed, why, self._analysis = direct_fallback_allowed(
                self.matrix, self.memory_budget, self._analysis)
            if not allowed:
                raise SolverFailed(f"{shortfall(info, self.rtol)} after {info.iterations} "
                                   f"iterations; {why}", info)
            self.stats.notes.append(
                f"{info.method} reached relative residual {info.relative_residual:.3g} after "
                f"{info.iterations} iterations (rtol {self.rtol:g}); fell back to direct")
            self.stats.solve_seconds += info.solve_seconds
            self._set_up("direct", f"fallback: {info.method} missed rtol")
            x, info = self._solver.solve(b)
        if not info.converged:
            raise SolverFailed(shortfall(info, self.rtol), info)
        self._record(b, info)
        self._reconsider(1 if b.ndim == 1 else b.shape[1], info.solve_seconds)
        return x

    def _opens_a_long_query(self, b: np.ndarray) -> bool:
        """Whether ``b`` is a block opening a query of several right-hand sides that ``auto``
        has given to an iterative back end: its first column is then solved alone, so that
        :meth:`_reconsider` can weigh the measured pace before the rest."""
        return (self.requested == "auto" and b.ndim == 2 and b.shape[1] > 1
                and self._query_solved == 0 and self._query > 1
                and self._solver.method != "direct")

    def _reconsider(self, columns: int, seconds: float) -> None:
        """With ``auto`` and an iterative back end, decide to switch to a factorisation when the
        rest of the announced query, at the pace just measured, is predicted dearer than
        factorising (:func:`~.solvers.choice.direct_for_the_rest`). The factorisation is set up
        at the start of the next solve, so that this solve's time stays its own (callers time
        their first block to plan) and nothing is factorised for a query that ends here."""
        self._query_solved += columns
        remaining = self._query - self._query_solved
        if self.requested != "auto" or self._solver.method == "direct" or remaining <= 0:
            return
        start = time.perf_counter()
        switch, reason, predicted, self._analysis = direct_for_the_rest(
            self.matrix, seconds / columns * remaining, remaining, self.memory_budget,
            self._analysis)
        self.stats.setup_seconds += time.perf_counter() - start
        if switch:
            self._pending_switch = (f"switched to direct after {self._query_solved} of "
                                    f"{self._query} right-hand sides: {reason}", reason,
                                    predicted)

    @property
    def pending_switch(self) -> str | None:
        """The switch to a factorisation decided after the last solve and made at the start of
        the next one (its note), or None."""
        return None if self._pending_switch is None else self._pending_switch[0]

    def _switch_if_pending(self) -> None:
        """Set up the factorisation :meth:`_reconsider` decided on, if any."""
        if self._pending_switch is None:
            return
        (note, reason, predicted), self._pending_switch = self._pending_switch, None
        self.stats.notes.append(note)
        self.stats.predicted.update(predicted)
        if self.on_switch is not None:
            self.on_switch(reason)
        self._solver = None                  # its memory is free before the factor's
        self._set_up("direct", f"measured pace: {reason}")

    def solve_nearby(self, matrix, b: np.ndarray, x0: np.ndarray | None = None) -> np.ndarray:
        """Solve ``matrix @ x = b`` (one column) for a matrix near this session's one, such as
        the same network with some resistors changed: conjugate gradient preconditioned by this
        session's set-up, started from ``x0``.

        Raises
        ------
        SolverFailed
            When the measured residual ``||matrix x - b|| / ||b||`` misses ``rtol`` (the caller
            then sets up a session for ``matrix``).
        """
        if self._solver is None:
            self.expect(1)
        x, info = self._solver.solve_nearby(sp.csr_matrix(matrix), b, x0)
        if not info.converged:
            raise SolverFailed(shortfall(info, self.rtol), info)
        self._record(b, info)
        return x

    def _record(self, b: np.ndarray, info: SolveInfo) -> None:
        self.last = info
        stats = self.stats
        stats.solves += 1 if b.ndim == 1 else b.shape[1]
        stats.solve_seconds += info.solve_seconds
        stats.max_iterations = max(stats.max_iterations, info.iterations)
        stats.max_relative_residual = max(stats.max_relative_residual, info.relative_residual)
        if self.on_solved is not None:
            self.on_solved(1 if b.ndim == 1 else b.shape[1])


def solve_spd(A, b, rtol: float = DEFAULT_RTOL, method: str = "auto") -> np.ndarray:
    """Solve a symmetric positive-definite sparse system ``A x = b`` through one session.

    The same path :func:`ohmgraph.engine.solve` takes, exposed so benchmarks can compare it with
    other solvers on one matrix.

    Parameters
    ----------
    A : sparse matrix, shape (n, n)
    b : ndarray, shape (n,) or (n, r)
    rtol : float
        Relative residual target ``||A x - b|| / ||b||``.
    method : str
        ``"auto"`` or a key of :data:`ohmgraph.engine.solvers.SOLVERS`.
    """
    return SolveSession(A, method, rtol).solve(b)
