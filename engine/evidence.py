"""Recompute a stored solution's evidence from its arrays alone, against stated tolerances.

Every check compares a stored quantity with one recomputed from other stored quantities, row by
row, and passes where ``|error| <= tolerance``. With ε the unit roundoff of binary64
(``1.1e-16``) and ``ρ = max(rtol, relative_residual)`` as stored:

=================  ===============================  =====================================
check              error                            tolerance
=================  ===============================  =====================================
branch voltage     ``v - (V(from) - V(to))``        ``4ε (|V(from)| + |V(to)|)``
Ohm's law, R > 0   ``I·R - v``                      ``4ε |v|``
ideal link, R = 0  ``v``                            ``4ε (|V(from)| + |V(to)|)``
voltage source     ``v - value``                    ``64ε (|V(from)| + |V(to)| + |value|)``
current source     ``I - value``                    ``ε |value|``
branch power       ``p - v·I``                      ``4ε |v·I|``
KCL at node n      ``k(n)``: net current leaving n  ``(d(n) + 4)ε s(n) + (ρ + 64ε) S``
power balance      ``Σ p - Σ V(n) k(n)``            ``2ε [(log2(m+2) + 9) Σ|p| +
                                                    (log2(N+2) + 8) Σ|V(n) k(n)| +
                                                    Σ (d(n) + 1) |V(n)| s(n)]``
=================  ===============================  =====================================

where ``s(n)`` is the sum of ``|I|`` over the ``d(n)`` branches at node ``n``, ``S = Σ|I|``
over all ``m`` branches and ``N`` the number of nodes. The branch rows repeat the engine's own
arithmetic (:func:`ohmgraph.engine.recovery.branch_quantities`: one subtraction, one division,
one product), so a few ε suffice; source voltages are built up along trees of sources, hence
the wider 64ε. A sum of ``d`` terms errs by at most ``(d - 1)ε`` times the sum of their
magnitudes, a pairwise sum by about ``log2(d)ε`` (N. J. Higham, *Accuracy and Stability of
Numerical Algorithms*, 2nd ed., SIAM 2002, §4.2), hence the ``d(n)`` and ``log2`` factors. A
solver stopping at relative residual ρ leaves ``‖Ax - b‖ ≤ ρ‖b‖`` on the reduced system, which
the tree accumulation of source currents carries to single nodes, and ``‖b‖ ≤ S``, hence the KCL
tolerance. The power balance is Tellegen's theorem with a residual: ``Σ_b v_b I_b =
Σ_n V(n) k(n)`` exactly for any currents (B. D. H. Tellegen, Philips Res. Rep. 7, 259–269,
1952), so the stored powers must agree with the stored currents' own KCL residuals.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .network import CURRENT_SOURCE, KIND_LETTERS, RESISTOR, VOLTAGE_SOURCE, Network

EPS = float(np.finfo(np.float64).eps) / 2          # unit roundoff of binary64


@dataclass
class EvidenceCheck:
    """One recomputed relation over nodes or branches.

    Attributes
    ----------
    key : str
        Short identifier (``"branch_voltage"``, ``"ohm"``, ``"kcl"``, ...).
    name : str
        The relation, in words.
    over : {"node", "branch", "network"}
        What a row is.
    rows : ndarray of int
        Rows checked (indices of nodes or branches; ``[0]`` for a whole-network check).
    stored, expected : ndarray
        Per checked row: the stored value and the one recomputed from other stored values.
    tolerance : ndarray
        Per checked row.
    """

    key: str
    name: str
    over: str
    rows: np.ndarray
    stored: np.ndarray
    expected: np.ndarray
    tolerance: np.ndarray

    @property
    def error(self) -> np.ndarray:
        """``stored - expected`` per row."""
        return self.stored - self.expected

    @property
    def failing(self) -> np.ndarray:
        """Positions (into ``rows``) that fail, worst (largest error/tolerance) first."""
        bad = np.flatnonzero(~(np.abs(self.error) <= self.tolerance))
        ratio = np.abs(self.error[bad]) / np.maximum(self.tolerance[bad], np.finfo(float).tiny)
        return bad[np.argsort(-np.nan_to_num(ratio, nan=np.inf), kind="stable")]

    @property
    def passed(self) -> bool:
        return self.failing.size == 0

    @property
    def worst_ratio(self) -> float:
        """Largest ``|error| / tolerance`` (0 when every error is exactly 0)."""
        if self.rows.size == 0:
            return 0.0
        with np.errstate(divide="ignore", invalid="ignore"):
            ratio = np.abs(self.error) / self.tolerance
        ratio = np.where(self.error == 0, 0.0, ratio)
        return float(np.nan_to_num(ratio, nan=np.inf).max())


def _check(key, name, over, rows, stored, expected, tolerance) -> EvidenceCheck:
    return EvidenceCheck(key, name, over, np.asarray(rows), np.asarray(stored, float),
                         np.asarray(expected, float), np.asarray(tolerance, float))


def recompute(net: Network, node_voltage: np.ndarray, branch_current: np.ndarray,
              branch_voltage: np.ndarray, branch_power: np.ndarray, rtol: float,
              relative_residual: float) -> list[EvidenceCheck]:
    """Every check of the module table, in its order.

    Parameters
    ----------
    net : Network
    node_voltage, branch_current, branch_voltage, branch_power : ndarray
        As stored: volts, amperes, volts, watts.
    rtol, relative_residual : float
        The stored solver target and the residual it reached.
    """
    v_from, v_to = node_voltage[net.from_node], node_voltage[net.to_node]
    span = np.abs(v_from) + np.abs(v_to)
    every = np.arange(net.n_branches)
    checks = [_check("branch_voltage", "branch voltage = V(from) - V(to)", "branch", every,
                     branch_voltage, v_from - v_to, 4 * EPS * span)]

    resistor = np.flatnonzero((net.kind == RESISTOR) & (net.value > 0))
    v, current = branch_voltage[resistor], branch_current[resistor]
    checks.append(_check("ohm", "Ohm's law I*R = v", "branch", resistor,
                         current * net.value[resistor], v, 4 * EPS * np.abs(v)))
    link = np.flatnonzero((net.kind == RESISTOR) & (net.value == 0))
    checks.append(_check("ideal_connection", "ideal connection v = 0", "branch", link,
                         branch_voltage[link], np.zeros(link.size), 4 * EPS * span[link]))
    source = np.flatnonzero(net.kind == VOLTAGE_SOURCE)
    checks.append(_check("voltage_source", "voltage source v = value", "branch", source,
                         branch_voltage[source], net.value[source],
                         64 * EPS * (span[source] + np.abs(net.value[source]))))
    feed = np.flatnonzero(net.kind == CURRENT_SOURCE)
    checks.append(_check("current_source", "current source I = value", "branch", feed,
                         branch_current[feed], net.value[feed], EPS * np.abs(net.value[feed])))
    product = branch_voltage * branch_current
    checks.append(_check("branch_power", "branch power p = v*I", "branch", every, branch_power,
                         product, 4 * EPS * np.abs(product)))

    kcl = (np.bincount(net.from_node, branch_current, minlength=net.n_nodes)
           - np.bincount(net.to_node, branch_current, minlength=net.n_nodes))
    magnitude = np.abs(branch_current)
    at_node = (np.bincount(net.from_node, magnitude, minlength=net.n_nodes)
               + np.bincount(net.to_node, magnitude, minlength=net.n_nodes))
    degree = (np.bincount(net.from_node, minlength=net.n_nodes)
              + np.bincount(net.to_node, minlength=net.n_nodes))
    rho = max(float(rtol), float(relative_residual))
    checks.append(_check("kcl", "KCL: net current leaving each node = 0", "node",
                         np.arange(net.n_nodes), kcl, np.zeros(net.n_nodes),
                         (degree + 4) * EPS * at_node + (rho + 64 * EPS) * magnitude.sum()))

    tellegen = node_voltage * kcl
    rounding = 2 * EPS * ((np.log2(net.n_branches + 2) + 9) * np.abs(branch_power).sum()
                          + (np.log2(net.n_nodes + 2) + 8) * np.abs(tellegen).sum()
                          + ((degree + 1) * np.abs(node_voltage) * at_node).sum())
    checks.append(_check("power_balance", "power balance: sum of p = sum of V*KCL residual",
                         "network", [0], [branch_power.sum()], [tellegen.sum()], [rounding]))
    return checks


def claims(checks: list[EvidenceCheck], kcl_max_residual: float,
           power_balance: float) -> list[EvidenceCheck]:
    """The file's own evidence numbers against the recomputed ones (same arithmetic: 4ε)."""
    by_key = {check.key: check for check in checks}
    kcl, balance = by_key["kcl"], by_key["power_balance"]
    largest = float(np.abs(kcl.error).max()) if kcl.error.size else 0.0
    total = float(balance.stored[0])
    return [_check("stored_kcl", "stored KCL max residual", "network", [0], [kcl_max_residual],
                   [largest], [4 * EPS * largest]),
            _check("stored_power_balance", "stored power balance", "network", [0],
                   [power_balance], [total], [4 * EPS * abs(total)])]


def network_differences(stored: Network, given: Network) -> list[str]:
    """Where two networks differ (branch by branch, by name, kind, end labels and value).

    Returns the first few differences as text, empty when the networks are the same.
    """
    if stored.n_branches != given.n_branches:
        return [f"{stored.n_branches} branches stored, {given.n_branches} given"]
    columns = {
        "name": (stored.branch_names, given.branch_names),
        "kind": (np.array(KIND_LETTERS)[stored.kind], np.array(KIND_LETTERS)[given.kind]),
        "from": (stored.node_labels[stored.from_node], given.node_labels[given.from_node]),
        "to": (stored.node_labels[stored.to_node], given.node_labels[given.to_node]),
        "value": (stored.value, given.value),
    }
    differences = []
    for column, (ours, theirs) in columns.items():
        for row in np.flatnonzero(ours != theirs)[:5]:
            differences.append(f"branch {row + 1} ({stored.branch_names[row]}): {column} "
                               f"{ours[row].item()!r} stored, {theirs[row].item()!r} given")
    return differences
