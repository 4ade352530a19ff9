"""Limit checks of a solution: supply drop, branch ratings and global current and power limits.

Utilisation is the computed value over its limit (1 = at the limit); a branch with both a
current and a power limit takes the larger of the two. A branch's current limit is the smaller
of its own rating (``max_current``) and the global one; global limits apply to resistors only
(sources are the supply and the loads, not parts that heat). Computed values are not a safety
rating: parts' datasheets, derating practice and local codes decide.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .drop import SupplyDrop, Threshold
from .network import RESISTOR, Network

QUANTITIES = ("drop", "current", "power")
UNITS = {"drop": "V", "current": "A", "power": "W"}


@dataclass(frozen=True)
class Violations:
    """Every exceeded limit, worst (largest utilisation) first.

    Attributes
    ----------
    quantity : ndarray of str
        ``"drop"`` (``index`` is a node), ``"current"`` or ``"power"`` (``index`` is a branch).
    index : ndarray of int64
    value : ndarray of float64
        Drop (V), absolute current (A) or absolute power (W).
    limit : ndarray of float64
        In the same unit.
    utilisation : ndarray of float64
        ``value / limit``, above 1.
    """

    quantity: np.ndarray
    index: np.ndarray
    value: np.ndarray
    limit: np.ndarray
    utilisation: np.ndarray

    def __len__(self) -> int:
        return int(self.index.size)

    def count(self, quantity: str) -> int:
        return int(np.count_nonzero(self.quantity == quantity))


def effective_limit(kind: np.ndarray, rating, global_limit: float | None) -> np.ndarray:
    """Per-branch limit: the smaller of the rating (NaN = none) and the global limit
    (resistors only); NaN where neither applies."""
    limit = np.full(kind.shape, np.nan) if rating is None else np.asarray(rating, np.float64).copy()
    if global_limit is not None:
        resistor = kind == RESISTOR
        limit[resistor] = np.fmin(limit[resistor], global_limit)
    return limit


def branch_utilisation(net: Network, current, power, max_current=None, max_power=None, *,
                       global_current: float | None = None,
                       global_power: float | None = None) -> np.ndarray:
    """Largest of ``|I| / current limit`` and ``|P| / power limit`` per branch (NaN where no
    limit applies)."""
    current_limit = effective_limit(net.kind, max_current, global_current)
    power_limit = effective_limit(net.kind, max_power, global_power)
    return np.fmax(np.abs(current) / current_limit, np.abs(power) / power_limit)


def drop_limit(drop: SupplyDrop, max_drop: Threshold) -> np.ndarray:
    """Per-node drop limit in volts (NaN where it does not apply: a percentage on a 0 V net,
    nets without a nominal, the reference and source-held nodes)."""
    per_net = max_drop.volts(drop.nominal)
    limit = np.full(drop.drop.shape, np.nan)
    counted = drop.counted
    limit[counted] = per_net[drop.node_net[counted]]
    return limit


def check_limits(net: Network, drop: SupplyDrop, current, power, *,
                 max_drop: Threshold | None = None, max_current=None, max_power=None,
                 global_current: float | None = None,
                 global_power: float | None = None) -> Violations:
    """Every node over the drop limit and every branch over a current or power limit.

    Parameters
    ----------
    net : Network
    drop : SupplyDrop
    current, power : ndarray
        Branch currents (A) and powers (W).
    max_drop : Threshold, optional
    max_current, max_power : ndarray, optional
        Per-branch ratings (NaN where a branch has none).
    global_current, global_power : float, optional
        Limits for every resistor.
    """
    parts = []
    if max_drop is not None:
        limit = drop_limit(drop, max_drop)
        parts.append(("drop", drop.drop, limit))
    parts.append(("current", np.abs(current), effective_limit(net.kind, max_current,
                                                              global_current)))
    parts.append(("power", np.abs(power), effective_limit(net.kind, max_power, global_power)))
    quantity, index, value, limits = [], [], [], []
    for name, values, limit in parts:
        with np.errstate(invalid="ignore"):
            over = np.flatnonzero(values > limit)
        quantity.append(np.full(over.size, name, dtype="U7"))
        index.append(over)
        value.append(values[over])
        limits.append(limit[over])
    value, limits = np.concatenate(value), np.concatenate(limits)
    utilisation = value / limits
    order = np.argsort(-utilisation, kind="stable")
    return Violations(np.concatenate(quantity)[order], np.concatenate(index)[order],
                      value[order], limits[order], utilisation[order])
