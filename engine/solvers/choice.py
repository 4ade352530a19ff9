"""How ``auto`` picks a back end for a matrix and a number of right-hand sides.

The choice is a :class:`Choice`: the method, the reason in words and the numbers behind it, so a
caller can show and store why a method was used.
"""

from __future__ import annotations

from dataclasses import dataclass, field

# ``auto`` picks direct up to this many unknowns for a query of FEW_SOLVES right-hand sides or
# fewer. Set-up plus one solve (benchmarks/README.md): direct wins on lattices below about 40,000
# unknowns and on k-nearest-neighbour graphs up to about 200,000.
AUTO_DIRECT_LIMIT = 100_000
# For more right-hand sides one factorisation pays off up to this many unknowns; it is also the
# largest system the direct fallback takes on.
DIRECT_FALLBACK_LIMIT = 2_000_000
FEW_SOLVES = 2


@dataclass(frozen=True)
class Choice:
    """A back end chosen for one matrix.

    Attributes
    ----------
    method : str
        A key of :data:`ohmgraph.engine.solvers.SOLVERS`.
    reason : str
        Why, in words.
    predicted : dict
        The numbers behind the reason (for example a predicted factor size), for the record.
    """

    method: str
    reason: str
    predicted: dict = field(default_factory=dict)


def choose(matrix, solves: int = 1, memory_budget: float | None = None) -> Choice:
    """Pick ``direct`` or ``amg-cg`` for ``matrix`` and ``solves`` right-hand sides.

    Parameters
    ----------
    matrix : sparse matrix, shape (n, n)
        Symmetric positive definite.
    solves : int
        Right-hand sides the caller expects to solve with one set-up.
    memory_budget : float, optional
        Bytes the set-up may use; None for no limit.
    """
    n = matrix.shape[0]
    if n <= AUTO_DIRECT_LIMIT:
        return Choice("direct", f"{n} unknowns, at most {AUTO_DIRECT_LIMIT}", {"unknowns": n})
    if solves > FEW_SOLVES and n <= DIRECT_FALLBACK_LIMIT:
        return Choice("direct", f"{solves} right-hand sides on {n} unknowns: one factorisation "
                      "pays off", {"unknowns": n})
    return Choice("amg-cg", f"{n} unknowns, over {AUTO_DIRECT_LIMIT}", {"unknowns": n})


def direct_fallback_allowed(matrix, memory_budget: float | None = None) -> tuple[bool, str]:
    """Whether a factorisation may replace an iterative solve that missed its target, and if
    not, why."""
    n = matrix.shape[0]
    if n > DIRECT_FALLBACK_LIMIT:
        return False, f"the system ({n} unknowns) is too large for the direct fallback"
    return True, ""
