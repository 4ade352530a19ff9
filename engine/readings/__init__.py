"""Readings of a built network against its model: the readings as linear functionals
(:mod:`.model`), adjoint sensitivities and tolerance spread (:mod:`.sensitivity`), and single-fault
diagnosis (:mod:`.diagnosis`)."""

from .diagnosis import Diagnosis, Hypothesis, diagnose
from .model import Comparison, ReadingModel, Readings, build_model, compare
from .sensitivity import (MonteCarloSpread, ToleranceSpread, conductance_sensitivity,
                          monte_carlo, resistance_sensitivity, tolerance_spread)

__all__ = ["Readings", "ReadingModel", "build_model", "compare", "Comparison",
           "conductance_sensitivity", "resistance_sensitivity", "tolerance_spread",
           "ToleranceSpread", "monte_carlo", "MonteCarloSpread", "diagnose", "Diagnosis",
           "Hypothesis"]
