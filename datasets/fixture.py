"""An invented probe fixture and seeded trials of built copies of it (parts, faults, readings).

The fixture is a square lattice of resistors with standard (E24) values between 100 ohm and
910 ohm, fed from a 5 V supply through a feed resistor at one corner and returned to ground
through three resistors at the other corners: ``side = 40`` gives 1,600 lattice nodes and 3,124
resistors. The values are chosen for the example, not taken from a real fixture.

A *built copy* has every resistor drawn uniformly within its tolerance (the usual reading of a
tolerance as a limit; common practice) and, optionally, one planted fault (open, short, or a
value change). Its readings come from a full re-solve of the built network, never from the
rank-one updates the diagnosis uses, plus instrument errors drawn uniformly within each
reading's accuracy and, optionally, a contact error added to one resistance reading.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ohmgraph.engine.network import CURRENT_SOURCE, Network
from ohmgraph.engine.readings.bands import part_spread, reading_bands
from ohmgraph.engine.readings.gls import diagnose_parts
from ohmgraph.engine.readings.model import Readings, build_model
from ohmgraph.engine.readings.sensitivity import resistor_candidates

E24 = np.array([1.0, 1.1, 1.2, 1.3, 1.5, 1.6, 1.8, 2.0, 2.2, 2.4, 2.7, 3.0, 3.3, 3.6, 3.9, 4.3,
                4.7, 5.1, 5.6, 6.2, 6.8, 7.5, 8.2, 9.1])
SUPPLY_VOLTS = 5.0
FAULT_MODES = ("open", "short", "value")
SHORT_OHMS_RATIO = 1e-6


def probe_fixture(side: int = 40, seed: int = 0) -> Network:
    """The invented fixture: a ``side x side`` lattice of E24 resistors (100-910 ohm), a 5 V
    supply through ``RFEED`` (47 ohm) at node ``N0_0``, returns ``RRET1..3`` at the other
    corners (220, 330, 470 ohm)."""
    rng = np.random.default_rng(seed)
    label = np.array([[f"N{r}_{c}" for c in range(side)] for r in range(side)])
    frm = list(label[:, :-1].ravel()) + list(label[:-1, :].ravel())
    to = list(label[:, 1:].ravel()) + list(label[1:, :].ravel())
    names = ([f"RH{r}_{c}" for r in range(side) for c in range(side - 1)]
             + [f"RV{r}_{c}" for r in range(side - 1) for c in range(side)])
    ohms = list(100.0 * rng.choice(E24, len(frm)))
    corner = side - 1
    frm += ["VIN", "VIN", f"N{corner}_{corner}", f"N0_{corner}", f"N{corner}_0"]
    to += ["0", "N0_0", "0", "0", "0"]
    names += ["VS", "RFEED", "RRET1", "RRET2", "RRET3"]
    ohms += [SUPPLY_VOLTS, 47.0, 220.0, 330.0, 470.0]
    kinds = ["R"] * (2 * side * (side - 1)) + ["V", "R", "R", "R", "R"]
    return Network.from_arrays(frm, to, ohms, kinds, names)


def fixture_readings(net: Network, voltages: int, resistances: int, seed: int = 0) -> Readings:
    """Readings at random lattice nodes: ``voltages`` node voltages against the reference and
    ``resistances`` two-point resistances between random node pairs (values not yet taken)."""
    rng = np.random.default_rng(seed)
    nodes = np.flatnonzero(np.char.startswith(net.node_labels.astype(str), "N"))
    volt_nodes = rng.choice(nodes, voltages, replace=False)
    pairs = np.array([rng.choice(nodes, 2, replace=False) for _ in range(resistances)],
                     np.int64).reshape(-1, 2)
    kind = np.array(["V"] * voltages + ["R"] * resistances)
    node_a = np.concatenate([volt_nodes, pairs[:, 0]])
    node_b = np.concatenate([np.full(voltages, net.reference), pairs[:, 1]])
    count = voltages + resistances
    return Readings(kind, node_a, node_b, np.full(count, -1), np.full(count, np.nan),
                    np.full(count, np.nan))


@dataclass(frozen=True)
class Accuracy:
    """Instrument accuracy ``±(percent of reading + absolute)`` per reading kind."""

    volt_percent: float = 0.05
    volt_absolute: float = 0.5e-3
    ohm_percent: float = 0.1
    ohm_absolute: float = 0.05

    def band(self, kind: np.ndarray, value: np.ndarray) -> np.ndarray:
        volt = kind != "R"
        percent = np.where(volt, self.volt_percent, self.ohm_percent)
        absolute = np.where(volt, self.volt_absolute, self.ohm_absolute)
        return percent / 100.0 * np.abs(value) + absolute


def with_fault(net: Network, branch: int, mode: str, factor: float = 1.0) -> Network:
    """The network with one resistor open (a 0 A current source keeps the indices), shorted
    (``1e-6`` times its value) or multiplied by ``factor``."""
    kind, value = net.kind.copy(), net.value.copy()
    if mode == "open":
        kind[branch], value[branch] = CURRENT_SOURCE, 0.0
    elif mode == "short":
        value[branch] *= SHORT_OHMS_RATIO
    elif mode == "value":
        value[branch] *= factor
    else:
        raise ValueError(f"unknown fault mode {mode!r}")
    return Network(net.node_labels, net.branch_names, kind, net.from_node, net.to_node, value,
                   net.reference)


def scattered(net: Network, tolerance: float, rng: np.random.Generator) -> Network:
    """A built copy: every resistor uniform within ``±tolerance`` of its value."""
    resistors = resistor_candidates(net)
    ohms = net.value.copy()
    ohms[resistors] *= 1.0 + tolerance * rng.uniform(-1.0, 1.0, resistors.size)
    return net.with_values(ohms)


def take_readings(built: Network, template: Readings, accuracy: Accuracy,
                  rng: np.random.Generator) -> Readings:
    """Readings of a built network (full re-solve) with instrument errors uniform within the
    accuracy; the band holds the accuracy limit of each reading."""
    true = build_model(built, template).model_value
    band = accuracy.band(template.kind, true)
    measured = true + band * rng.uniform(-1.0, 1.0, true.size)
    return Readings(template.kind, template.node_a, template.node_b, template.branch,
                    measured, accuracy.band(template.kind, measured))




@dataclass(frozen=True)
class TrialOutcome:
    """One seeded trial of a built copy diagnosed against its model.

    Attributes
    ----------
    branch : int
        The faulty resistor (-1: no fault planted).
    mode : str
        ``open``, ``short``, ``value`` or ``none``.
    detectable : bool
        The fault's signature (full re-solve, nominal parts) exceeds ``3 sigma`` of the
        combined spread in at least one reading.
    contact_reading : int
        Reading given a contact error (-1: none); ``contact_detectable``: the error exceeds
        ``3 sigma`` of that reading.
    rank : int
        1-based rank of the group holding the fault in the final ranking (0: not ranked).
    group_size : int
        Size of that group.
    fault_indicated : bool
    flagged : tuple of int
    """

    branch: int
    mode: str
    detectable: bool
    contact_reading: int
    contact_detectable: bool
    rank: int
    group_size: int
    fault_indicated: bool
    flagged: tuple


def fault_trial(net: Network, template: Readings, nominal: np.ndarray, tolerance: float,
                accuracy: Accuracy, rng: np.random.Generator, mode: str = "none",
                contact_ohms: tuple | None = None, top: int = 3) -> TrialOutcome:
    """Plant a fault (random resistor; ``value`` changes by a factor in [0.3, 0.8] or
    [1.2, 3]), build a copy with parts within tolerance, take the readings (optionally one
    resistance reading with a contact error uniform in ``contact_ohms``) and diagnose them with
    the generalised least-squares ranking (:func:`ohmgraph.engine.readings.gls.diagnose_parts`).
    """
    resistors = resistor_candidates(net)
    branch, faulty = -1, net
    if mode != "none":
        branch = int(rng.choice(resistors))
        factor = rng.uniform(1.2, 3.0) if rng.random() < 0.5 else rng.uniform(0.3, 0.8)
        faulty = with_fault(net, branch, mode, factor)
    readings = take_readings(scattered(faulty, tolerance, rng), template, accuracy, rng)
    contact, error = -1, 0.0
    if contact_ohms is not None:
        contact = int(rng.choice(np.flatnonzero(readings.kind == "R")))
        error = rng.uniform(*contact_ohms)
        measured = readings.measured.copy()
        measured[contact] += error
        readings = Readings(readings.kind, readings.node_a, readings.node_b, readings.branch,
                            measured, readings.band)
    model = build_model(net, readings)
    spread = part_spread(model, np.full(net.n_branches, tolerance), covariance=True)
    bands = reading_bands(readings.band, spread)
    sigma = bands.combined_std
    detectable = False
    if branch >= 0:
        signature = build_model(faulty, template).model_value - nominal
        detectable = bool(np.any(np.nan_to_num(np.abs(signature), nan=np.inf) > 3 * sigma))
    result = diagnose_parts(model, bands, spread.covariance, top=top)
    rank, size = 0, 0
    for position, hypothesis in enumerate(result.ranking.hypotheses, start=1):
        if branch in hypothesis.branches:
            rank, size = position, int(hypothesis.branches.size)
            break
    return TrialOutcome(branch, mode, detectable, contact,
                        bool(contact >= 0 and error > 3 * sigma[contact]), rank, size,
                        result.fault_indicated, tuple(flag.reading for flag in result.flagged))


__all__ = ["probe_fixture", "fixture_readings", "Accuracy", "with_fault", "scattered",
           "take_readings", "fault_trial", "TrialOutcome", "FAULT_MODES"]
