"""ohmgraph.engine: pure computation on arrays (no file I/O, no printing).

The network model, well-posedness checks, contraction of sources, the reduced nodal system,
solvers, recovery of branch quantities with residual checks, effective-resistance queries, and
readings against the model (comparison, adjoint sensitivities, single-fault diagnosis).
"""

import importlib
import os

from .numba_cache import ensure_cache_dir

ensure_cache_dir(os.path.dirname(__file__))    # before any kernel is defined (read-only installs)

# ``solve`` is both a module and the function it defines: importing the function here keeps the
# package attribute the function, whatever is imported later.
from .solve import NetworkNotSolvable, Solution, solve

# Public name -> the module (relative to this package) that defines it. Names are imported on
# first use, so a command that needs only the checks does not load the solvers, multigrid or
# scipy.stats (start-up time: benchmarks/README.md).
_EXPORTS = {
    **dict.fromkeys(["Network", "RESISTOR", "VOLTAGE_SOURCE", "CURRENT_SOURCE", "KIND_LETTERS"],
                    ".network"),
    **dict.fromkeys(["check", "CheckReport", "Finding"], ".checks"),
    **dict.fromkeys(["SolveSession", "SessionStats", "solve_spd"], ".session"),
    **dict.fromkeys(["SOLVERS", "SPDSolver", "SolveInfo", "SolverFailed", "DEFAULT_RTOL"],
                    ".solvers"),
    **dict.fromkeys(["Readings", "ReadingModel", "build_model", "compare", "Comparison",
                     "conductance_sensitivity", "resistance_sensitivity", "tolerance_spread",
                     "ToleranceSpread", "monte_carlo", "MonteCarloSpread", "diagnose",
                     "Diagnosis", "Hypothesis"], ".readings"),
    **dict.fromkeys(["ResistanceSolver", "PairResistances", "ResistorResistances",
                     "KirchhoffIndex", "kron_reduction", "reduced_resistances"], ".resistance"),
}

__all__ = ["solve", "Solution", "NetworkNotSolvable", *_EXPORTS]


def __getattr__(name):
    if name not in _EXPORTS:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
    return getattr(importlib.import_module(_EXPORTS[name], __name__), name)


def __dir__():
    return sorted(list(globals()) + __all__)
