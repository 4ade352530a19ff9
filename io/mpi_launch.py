"""Launches under ``mpiexec``: how many processes, which one this is, and failing together.

The launcher's environment says whether this process is one of several, so the MPI stack is
imported only when it is: a single-process run never loads mpi4py or PETSc. Open MPI sets
``OMPI_COMM_WORLD_SIZE``/``OMPI_COMM_WORLD_RANK``; MPICH's and Intel MPI's Hydra, and Slurm's
PMI, set ``PMI_SIZE``/``PMI_RANK``.

A failure on one process must end every process with the same exit code and one message on the
first (rank 0), never leave the others waiting in a collective call: :func:`agree` is called
after every step that can fail on some processes only.
"""

from __future__ import annotations

import os
import time

from ohmgraph.io.errors import EXIT_BAD_INPUT, UserError

_SIZE_VARIABLES = ("OMPI_COMM_WORLD_SIZE", "PMI_SIZE")
_RANK_VARIABLES = ("OMPI_COMM_WORLD_RANK", "PMI_RANK")


def _first_integer(names, default: int) -> int:
    for name in names:
        try:
            return int(os.environ[name])
        except (KeyError, ValueError):
            continue
    return default


def launched_size() -> int | None:
    """Number of processes ``mpiexec`` started, or None when not started by an MPI launcher."""
    size = _first_integer(_SIZE_VARIABLES, 0)
    return size if size > 0 else None


def launched_rank() -> int:
    """This process's rank according to the launcher (0 outside one)."""
    return _first_integer(_RANK_VARIABLES, 0)


class LaunchError(UserError):
    """The run cannot go on as launched (a missing MPI stack, an input a multi-process run cannot
    read); exit code 2 on every process."""

    exit_code = EXIT_BAD_INPUT


def mpi_world():
    """``mpi4py.MPI.COMM_WORLD``, with PETSc initialised on it.

    Raises
    ------
    LaunchError
        When mpi4py or petsc4py is not installed.
    """
    try:
        from mpi4py import MPI
        from petsc4py import PETSc  # noqa: F401  (initialises PETSc on MPI's world)
    except ImportError as error:
        raise LaunchError(f"a run under mpiexec needs mpi4py and petsc4py ({error}); install "
                          "them with 'make mpi'") from None
    return MPI.COMM_WORLD


def idle_barrier(comm, pause: float = 0.002) -> None:
    """Collective: wait for every process, sleeping between polls.

    A blocking MPI barrier spins on the CPU; a process that waits for another's turn (while the
    first writes the output file) would take a core the working process needs whenever there are
    no more cores than processes. A non-blocking barrier polled every ``pause`` seconds does not.
    """
    request = comm.Ibarrier()
    while not request.Test():
        time.sleep(pause)


def agree(comm, error: UserError | None) -> None:
    """Collective: raise on every process the first error any process met (by rank).

    Parameters
    ----------
    comm : mpi4py.MPI.Comm
    error : UserError or None
        This process's failure, if any.
    """
    idle_barrier(comm)
    found = comm.allgather(None if error is None else (error.exit_code, str(error)))
    failed = [rank for rank, item in enumerate(found) if item is not None]
    if failed:
        code, message = found[failed[0]]
        if len(failed) < len(found):             # say where, when only some processes failed
            message += f" (on process {failed[0]} of {len(found)})"
        failure = UserError(message)
        failure.exit_code = code
        raise failure
