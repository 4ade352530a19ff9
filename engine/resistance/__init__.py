"""Effective resistance: pairs and batches (:mod:`.pairs`), sparse forward solves from the factor
(:mod:`.reach`), every resistor and the Kirchhoff index (:mod:`.sketch`), and Kron reduction onto
terminals (:mod:`.kron`)."""

from .kron import kron_reduction, reduced_resistances
from .pairs import PairResistances, ResistanceSolver
from .sketch import KirchhoffIndex, ResistorResistances

__all__ = ["ResistanceSolver", "PairResistances", "ResistorResistances", "KirchhoffIndex",
           "kron_reduction", "reduced_resistances"]
