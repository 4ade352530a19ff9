"""ohmgraph.engine: pure computation on arrays (no file I/O, no printing).

The network model, well-posedness checks, contraction of sources, the reduced nodal system,
solvers, recovery of branch quantities with residual checks, effective-resistance queries, and
readings against the model (comparison, adjoint sensitivities, single-fault diagnosis).
"""

from .checks import CheckReport, Finding, check
from .network import CURRENT_SOURCE, KIND_LETTERS, RESISTOR, VOLTAGE_SOURCE, Network
from .readings import (Comparison, Diagnosis, Hypothesis, MonteCarloSpread, ReadingModel,
                       Readings, ToleranceSpread, build_model, compare, conductance_sensitivity,
                       diagnose, monte_carlo, resistance_sensitivity, tolerance_spread)
from .resistance import (KirchhoffIndex, PairResistances, ResistanceSolver, ResistorResistances,
                         kron_reduction, reduced_resistances)
from .solve import NetworkNotSolvable, Solution, solve
from .session import SessionStats, SolveSession, solve_spd
from .solvers import DEFAULT_RTOL, SOLVERS, SolveInfo, SolverFailed, SPDSolver

__all__ = [
    "Network", "RESISTOR", "VOLTAGE_SOURCE", "CURRENT_SOURCE", "KIND_LETTERS",
    "check", "CheckReport", "Finding",
    "solve", "Solution", "NetworkNotSolvable",
    "SolveSession", "SessionStats", "solve_spd", "SOLVERS", "SPDSolver", "SolveInfo", "SolverFailed", "DEFAULT_RTOL",
    "Readings", "ReadingModel", "build_model", "compare", "Comparison",
    "conductance_sensitivity", "resistance_sensitivity", "tolerance_spread", "ToleranceSpread",
    "monte_carlo", "MonteCarloSpread", "diagnose", "Diagnosis", "Hypothesis",
    "ResistanceSolver", "PairResistances", "ResistorResistances", "KirchhoffIndex",
    "kron_reduction", "reduced_resistances",
]
