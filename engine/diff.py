"""Differences between two solutions of related networks, on arrays matched beforehand.

The caller matches nodes by label and branches by name; these functions take the matched value
arrays (``a`` the base, ``b`` the variant) and give ``b - a`` statistics and the largest changes.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class ChangeStatistics:
    """Statistics of ``delta = b - a`` over the matched entries with finite values.

    Attributes
    ----------
    count : int
    mean, rms, largest_increase, largest_decrease, largest_magnitude : float
    median_magnitude, p99_magnitude : float
        50th and 99th percentile of ``|delta|``.
    """

    count: int
    mean: float
    rms: float
    largest_increase: float
    largest_decrease: float
    largest_magnitude: float
    median_magnitude: float
    p99_magnitude: float


def change_statistics(a: np.ndarray, b: np.ndarray) -> ChangeStatistics:
    """Statistics of ``b - a`` where both are finite (all zeros when nothing matches)."""
    delta = np.asarray(b, np.float64) - np.asarray(a, np.float64)
    delta = delta[np.isfinite(delta)]
    if delta.size == 0:
        return ChangeStatistics(0, *([0.0] * 7))
    magnitude = np.abs(delta)
    return ChangeStatistics(
        int(delta.size), float(delta.mean()), float(np.sqrt(np.mean(delta ** 2))),
        float(delta.max()), float(delta.min()), float(magnitude.max()),
        float(np.median(magnitude)), float(np.percentile(magnitude, 99)))


def largest_changes(a: np.ndarray, b: np.ndarray, top: int) -> np.ndarray:
    """Indices of the ``top`` entries of largest non-zero ``|b - a|`` (finite ones), largest
    first."""
    delta = np.abs(np.asarray(b, np.float64) - np.asarray(a, np.float64))
    candidates = np.flatnonzero(np.isfinite(delta) & (delta > 0))
    if candidates.size > top:
        candidates = candidates[np.argpartition(-delta[candidates], top - 1)[:top]]
    return candidates[np.argsort(-delta[candidates], kind="stable")]
