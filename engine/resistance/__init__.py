"""Effective resistance: pairs and batches (:mod:`.pairs`), their accuracy (:mod:`.accuracy`),
progress reports (:mod:`.progress`), sparse forward solves from the factor (:mod:`.reach`) and
their bound (:mod:`.factor_bound`), every
resistor and the Kirchhoff index (:mod:`.sketch`), and Kron reduction onto terminals
(:mod:`.kron`)."""

from .kron import kron_reduction, reduced_resistances
from .pairs import PairResistances, ResistanceSolver
from .progress import Plan
from .sketch import KirchhoffIndex, ResistorResistances

__all__ = ["ResistanceSolver", "PairResistances", "Plan", "ResistorResistances", "KirchhoffIndex",
           "kron_reduction", "reduced_resistances"]
