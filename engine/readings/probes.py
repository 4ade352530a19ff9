"""Which readings to take: choose K of the candidate readings that best separate single faults.

Every single fault — each resistor open, shorted, or its value changed by ``±change`` — moves
every candidate reading by an exact amount (its *signature*), given by the Sherman–Morrison
update of :mod:`.diagnosis` (``f(dg) q`` with the resistor's own effective resistance ``z``). Two
faults (or a fault and the fault-free network) are *separated* by a set of readings when their
signatures differ by more than ``separation`` standard deviations (default 3) of the combined
spread — instrument and parts, :mod:`.bands` — in at least one reading of the set.

The number of separated pairs is a coverage function of the set of readings (monotone and
submodular), so the greedy choice is within ``1 - 1/e`` of the best set of the same size
(Nemhauser, Wolsey & Fisher, Math. Programming 14, 1978); it is run lazily, re-evaluating a
candidate only when its last known gain could still be the largest (Minoux, 1978).

Only faults that at least one candidate separates from the fault-free network take part (the
others no reading on offer can see; they are reported). After the first reading is chosen, the
pairs it leaves unseparated are listed explicitly (pairs closer than the threshold in one
reading, found by sorting), and each further step counts how many of them a candidate
separates. Faults still joined by unseparated pairs at the end are reported as groups (connected
components) that the chosen readings cannot tell apart.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
from scipy.sparse.csgraph import connected_components

from .bands import part_spread, reading_bands
from .diagnosis import DISCONNECT_TOLERANCE, SHORT_RATIO
from .model import ReadingModel
from .sensitivity import conductance_sensitivity, grounded_self_resistance, resistor_candidates

DEFAULT_CHANGE = 0.2
DEFAULT_SEPARATION = 3.0
FAULT_KINDS = ("open", "short", "high", "low")
CUT_OFF = 1e12            # signature (in thresholds) standing for a reading an open cuts off


@dataclass(frozen=True)
class FaultSignatures:
    """Signatures of every single fault, in units of each reading's separation threshold.

    Attributes
    ----------
    branch : ndarray of int64, shape (F,)
    kind : ndarray of str, shape (F,)
        ``open``, ``short``, ``high`` (value times ``1 + change``), ``low`` (times
        ``1 - change``).
    scaled : ndarray, shape (F, n_readings)
        Change of each reading divided by ``separation x sigma``; ``±CUT_OFF`` where an open
        cuts off what the reading sees.
    sigma : ndarray, shape (n_readings,)
        Combined standard uncertainty of each reading.
    """

    branch: np.ndarray
    kind: np.ndarray
    scaled: np.ndarray
    sigma: np.ndarray


def fault_signatures(model: ReadingModel, tolerance: np.ndarray, *,
                     change: float = DEFAULT_CHANGE, short_ratio: float = SHORT_RATIO,
                     separation: float = DEFAULT_SEPARATION) -> FaultSignatures:
    """Exact signature of every single fault on every (usable) reading of ``model``.

    Parameters
    ----------
    model : ReadingModel
        The candidate readings; ``readings.band`` is each one's instrument accuracy limit.
    tolerance : ndarray, shape (n_branches,)
        Relative part tolerances (they widen each reading's spread).
    change : float
        Relative value change of the ``high`` and ``low`` faults.
    short_ratio : float
        A short is the resistance times ``short_ratio``.
    separation : float
        Standard deviations that separate two signatures.
    """
    net = model.network
    resistors = resistor_candidates(net)
    sigma = reading_bands(model.readings.band, part_spread(model, tolerance)).combined_std
    q = conductance_sensitivity(model, resistors)
    g = 1.0 / net.value[resistors]
    system_of = model.system_of()
    steps = {"open": -g, "short": g * (1.0 / short_ratio - 1.0),
             "high": g * (1.0 / (1.0 + change) - 1.0), "low": g * (1.0 / (1.0 - change) - 1.0)}
    blocks = {kind: np.zeros_like(q) for kind in FAULT_KINDS}
    for name, rs in model.systems.items():
        rows = system_of == name
        z = grounded_self_resistance(rs, net, resistors)
        for kind, dg in steps.items():
            denominator = 1.0 + dg * z
            cut = denominator <= DISCONNECT_TOLERANCE
            factor = np.where(cut, 0.0, dg / np.where(cut, 1.0, denominator))
            block = factor[:, None] * q[:, rows]
            block[cut[:, None] & (q[:, rows] != 0)] = np.inf
            blocks[kind][:, rows] = block
    threshold = separation * sigma
    scaled = np.vstack([blocks[kind] for kind in FAULT_KINDS]) / threshold
    scaled = np.clip(np.nan_to_num(scaled, nan=CUT_OFF, posinf=CUT_OFF, neginf=-CUT_OFF),
                     -CUT_OFF, CUT_OFF)
    scaled[:, ~model.usable] = 0.0
    return FaultSignatures(np.tile(resistors, len(FAULT_KINDS)),
                           np.repeat(np.array(FAULT_KINDS), resistors.size), scaled, sigma)


def _close_pairs(values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """All pairs ``(i, j)``, ``i != j``, with ``|values[i] - values[j]| <= 1`` (by sorting)."""
    order = np.argsort(values, kind="stable")
    ordered = values[order]
    ends = np.searchsorted(ordered, ordered + 1.0, side="right")
    counts = ends - np.arange(ordered.size) - 1
    first = np.repeat(np.arange(ordered.size), counts)
    offsets = np.arange(first.size) - np.repeat(np.cumsum(counts) - counts, counts)
    second = first + 1 + offsets
    return order[first], order[second]


def _close_count(values: np.ndarray) -> int:
    ordered = np.sort(values)
    ends = np.searchsorted(ordered, ordered + 1.0, side="right")
    return int((ends - np.arange(ordered.size) - 1).sum())


def unseparated_pairs(scaled: np.ndarray, chosen) -> int:
    """How many pairs of rows of ``scaled`` no chosen column separates (``|difference| > 1``)."""
    chosen = list(chosen)
    if not chosen:
        return scaled.shape[0] * (scaled.shape[0] - 1) // 2
    first, second = _close_pairs(scaled[:, chosen[0]])
    for column in chosen[1:]:
        keep = np.abs(scaled[first, column] - scaled[second, column]) <= 1.0
        first, second = first[keep], second[keep]
    return int(first.size)


@dataclass(frozen=True)
class ProbePlan:
    """The chosen readings and what they leave unseparated.

    Attributes
    ----------
    chosen : ndarray of int64
        Candidate readings in the order chosen.
    gains : ndarray of int64
        Pairs each choice newly separated.
    faults : FaultSignatures
        Every fault considered (all resistors, four kinds).
    seen : ndarray of int64
        Faults (rows of ``faults``) that some candidate separates from the fault-free network;
        the universe of pairs is these plus the fault-free network.
    total_pairs, separated_pairs : int
    groups : list of ndarray
        Faults (rows of ``faults``; -1 stands for the fault-free network) that the chosen
        readings cannot tell apart, largest group first (singletons omitted).
    """

    chosen: np.ndarray
    gains: np.ndarray
    faults: FaultSignatures
    seen: np.ndarray
    total_pairs: int
    separated_pairs: int
    groups: list

    @property
    def unseen(self) -> np.ndarray:
        """Faults no candidate reading separates from the fault-free network."""
        return np.setdiff1d(np.arange(self.faults.branch.size), self.seen)


def choose_readings(model: ReadingModel, tolerance: np.ndarray, budget: int, *,
                    change: float = DEFAULT_CHANGE, short_ratio: float = SHORT_RATIO,
                    separation: float = DEFAULT_SEPARATION) -> ProbePlan:
    """Greedy (lazy) choice of ``budget`` readings that separate the most pairs of faults.

    Parameters
    ----------
    model : ReadingModel
        The candidate readings (measured values not needed; ``readings.band``: the instrument
        accuracy limit of each).
    tolerance : ndarray, shape (n_branches,)
    budget : int
        Readings to choose (at most the number of usable candidates).
    change, short_ratio, separation
        As in :func:`fault_signatures`.
    """
    faults = fault_signatures(model, tolerance, change=change, short_ratio=short_ratio,
                              separation=separation)
    seen = np.flatnonzero(np.abs(faults.scaled).max(axis=1, initial=0.0) > 1.0)
    # The universe: faults some candidate sees, and the fault-free network (a row of zeros).
    universe = np.vstack([faults.scaled[seen], np.zeros((1, faults.scaled.shape[1]))])
    m = universe.shape[0]
    total = m * (m - 1) // 2
    usable = np.flatnonzero(model.usable)
    budget = min(budget, usable.size)
    gains = {int(c): total - _close_count(universe[:, c]) for c in usable}
    chosen, taken = [], []
    first = second = None
    while len(chosen) < budget and gains:
        # Lazy greedy: re-evaluate the best stale bound until it stays the best.
        while True:
            best = max(gains, key=lambda c: (gains[c], -c))
            if first is None:
                break
            keep = np.abs(universe[first, best] - universe[second, best]) <= 1.0
            fresh = int((~keep).sum())
            stale = gains[best]
            gains[best] = fresh
            if fresh >= stale or fresh >= max((v for c, v in gains.items() if c != best),
                                              default=-1):
                break
        if first is None:
            first, second = _close_pairs(universe[:, best])
            gain = total - first.size
        else:
            keep = np.abs(universe[first, best] - universe[second, best]) <= 1.0
            gain = int((~keep).sum())
            first, second = first[keep], second[keep]
        chosen.append(best)
        taken.append(gain)
        del gains[best]
    unseparated = total if first is None else first.size
    groups = []
    if first is not None and first.size:
        graph = sp.coo_matrix((np.ones(first.size, np.int8), (first, second)), shape=(m, m))
        count, label = connected_components(graph, directed=False)
        sizes = np.bincount(label, minlength=count)
        rows = np.append(seen, -1)
        for group in np.argsort(-sizes, kind="stable"):
            if sizes[group] < 2:
                break
            groups.append(rows[label == group])
    return ProbePlan(np.array(chosen, np.int64), np.array(taken, np.int64), faults, seen,
                     int(total), int(total - unseparated), groups)


__all__ = ["choose_readings", "ProbePlan", "fault_signatures", "FaultSignatures",
           "unseparated_pairs", "FAULT_KINDS", "DEFAULT_CHANGE", "DEFAULT_SEPARATION"]
