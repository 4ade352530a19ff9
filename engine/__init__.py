"""ohmgraph.engine: pure computation on arrays (no file I/O, no printing).

The network model, well-posedness checks, contraction of sources, the reduced nodal system,
solvers, recovery of branch quantities with residual checks, effective-resistance queries, and
readings against the model (comparison, adjoint sensitivities, single-fault diagnosis).
"""

from ohmgraph.engine.checks import CheckReport, Finding, check
from ohmgraph.engine.network import (CURRENT_SOURCE, KIND_LETTERS, RESISTOR, VOLTAGE_SOURCE,
                                     Network)
from ohmgraph.engine.solve import NetworkNotSolvable, Solution, solve
from ohmgraph.engine.solvers import (DEFAULT_RTOL, SolveInfo, SolverFailed, SPDSolver,
                                     make_solver, solve_spd)
from ohmgraph.engine.measurements import Comparison, ReadingModel, Readings, build_model, compare
from ohmgraph.engine.sensitivity import (MonteCarloSpread, ToleranceSpread,
                                         conductance_sensitivity, monte_carlo,
                                         resistance_sensitivity, tolerance_spread)
from ohmgraph.engine.diagnosis import Diagnosis, Hypothesis, diagnose
from ohmgraph.engine.kron import kron_reduction, reduced_resistances
from ohmgraph.engine.resistance import PairResistances, ResistanceSolver
from ohmgraph.engine.sketch import KirchhoffIndex, ResistorResistances

__all__ = [
    "Network", "RESISTOR", "VOLTAGE_SOURCE", "CURRENT_SOURCE", "KIND_LETTERS",
    "check", "CheckReport", "Finding",
    "solve", "Solution", "NetworkNotSolvable",
    "solve_spd", "make_solver", "SPDSolver", "SolveInfo", "SolverFailed", "DEFAULT_RTOL",
    "Readings", "ReadingModel", "build_model", "compare", "Comparison",
    "conductance_sensitivity", "resistance_sensitivity", "tolerance_spread", "ToleranceSpread",
    "monte_carlo", "MonteCarloSpread", "diagnose", "Diagnosis", "Hypothesis",
    "ResistanceSolver", "PairResistances", "ResistorResistances", "KirchhoffIndex",
    "kron_reduction", "reduced_resistances",
]
