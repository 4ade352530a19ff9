"""The network model: a directed multigraph of two-terminal branches held as plain arrays.

A :class:`Network` is nothing but arrays (node labels, branch names, kinds, endpoints, values)
and the index of the reference node, so it can be written to HDF5, sliced and sent between
processes. Validation of untrusted input happens at the edge (``ohmgraph.io``); the engine relies
on the structural invariants checked in :meth:`Network.__post_init__` (matching lengths, endpoint
indices in range, known kind codes). Electrical sanity (finite values, non-negative resistance,
solvability) is the business of :func:`ohmgraph.engine.check`.

Sign conventions
----------------
* ``R``: resistance in ohms between ``from`` and ``to``; ``0`` is an ideal connection.
* ``V``: voltage source imposing ``V(from) - V(to) = value`` volts.
* ``I``: current source driving ``value`` amperes through itself from ``from`` to ``to`` (it
  draws the current out of ``from`` and pushes it into ``to``).
* Branch current is positive from ``from`` to ``to`` (through the branch); branch voltage is
  ``V(from) - V(to)``; branch power is voltage times current, absorbed (a delivering source shows
  a negative power).
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property
from typing import Iterable

import numpy as np

RESISTOR = 0
VOLTAGE_SOURCE = 1
CURRENT_SOURCE = 2
KIND_LETTERS = ("R", "V", "I")
KIND_CODE = {letter: code for code, letter in enumerate(KIND_LETTERS)}


def kind_codes(kinds: Iterable[str] | np.ndarray) -> np.ndarray:
    """Translate kind letters (``R``, ``V``, ``I``; case-insensitive) into ``uint8`` codes.

    Raises
    ------
    ValueError
        If a letter is not one of the three kinds.
    """
    kinds = np.asarray(kinds)
    if kinds.dtype in (np.dtype("S1"), np.dtype("U1")):
        # One character each (as stored in HDF5): a table lookup on the character code, 20x
        # faster than the string functions below at 10^6 branches.
        table = np.full(128, 255, np.uint8)
        for letter, code in KIND_CODE.items():
            table[ord(letter)] = table[ord(letter.lower())] = code
        chars = kinds.view(np.uint8 if kinds.dtype.kind == "S" else np.uint32)
        if chars.size == 0 or int(chars.max()) < 128:
            codes = table[chars]
            if not np.any(codes == 255):
                return codes
    letters = np.char.upper(np.char.strip(np.asarray(kinds, dtype=str)))
    codes = np.full(letters.shape, 255, dtype=np.uint8)
    for letter, code in KIND_CODE.items():
        codes[letters == letter] = code
    if np.any(codes == 255):
        bad = letters[codes == 255][0]
        raise ValueError(f"unknown branch kind {bad!r} (expected R, V or I)")
    return codes


@dataclass(frozen=True, eq=False)
class Network:
    """A linear resistive network as plain arrays.

    Parameters
    ----------
    node_labels : ndarray of str, shape (n,)
        Unique label of every node.
    branch_names : ndarray of str, shape (m,)
        Name of every branch (need not be unique; :func:`check` warns about duplicates).
    kind : ndarray of uint8, shape (m,)
        ``RESISTOR`` (0), ``VOLTAGE_SOURCE`` (1) or ``CURRENT_SOURCE`` (2).
    from_node, to_node : ndarray of int64, shape (m,)
        Endpoint node indices.
    value : ndarray of float64, shape (m,)
        Ohms, volts or amperes according to ``kind``.
    reference : int
        Index of the reference (0 V) node.
    """

    node_labels: np.ndarray
    branch_names: np.ndarray
    kind: np.ndarray
    from_node: np.ndarray
    to_node: np.ndarray
    value: np.ndarray
    reference: int

    def __post_init__(self) -> None:
        setter = object.__setattr__.__get__(self)
        setter("node_labels", np.asarray(self.node_labels, dtype=str))
        setter("branch_names", np.asarray(self.branch_names, dtype=str))
        setter("kind", np.asarray(self.kind, dtype=np.uint8))
        setter("from_node", np.asarray(self.from_node, dtype=np.int64))
        setter("to_node", np.asarray(self.to_node, dtype=np.int64))
        setter("value", np.asarray(self.value, dtype=np.float64))
        setter("reference", int(self.reference))
        m = self.kind.shape[0]
        for name in ("branch_names", "from_node", "to_node", "value"):
            if getattr(self, name).shape != (m,):
                raise ValueError(f"{name} has shape {getattr(self, name).shape}, expected ({m},)")
        n = self.node_labels.shape[0]
        if self.node_labels.ndim != 1:
            raise ValueError("node_labels must be one-dimensional")
        if m and (min(self.from_node.min(), self.to_node.min()) < 0
                  or max(self.from_node.max(), self.to_node.max()) >= n):
            raise ValueError("branch endpoint index out of range")
        if m and self.kind.max() > CURRENT_SOURCE:
            raise ValueError("unknown kind code (expected 0=R, 1=V, 2=I)")
        if not 0 <= self.reference < n:
            raise ValueError("reference node index out of range")

    # ------------------------------------------------------------------ construction
    @classmethod
    def from_arrays(cls, from_labels, to_labels, values, kinds=None, names=None,
                    reference="0", node_labels=None) -> "Network":
        """Build a network from endpoint labels.

        Parameters
        ----------
        from_labels, to_labels : array_like of str or int
            Endpoint labels of every branch (integers are converted to their decimal text).
        values : array_like of float
            Ohms, volts or amperes.
        kinds : array_like of str, optional
            Kind letters ``R``/``V``/``I``; default all ``R``.
        names : array_like of str, optional
            Branch names; default the 1-based row number.
        reference : str or None, default ``"0"``
            Label of the reference node; it must be one of the nodes. ``None`` takes the first
            node, for networks used only for queries that need no reference (two-point
            resistances, the Kirchhoff index).
        node_labels : array_like of str, optional
            Extra nodes (for example isolated ones) and the order of node indices; labels used by
            branches but missing here are appended in order of first appearance.

        Raises
        ------
        ValueError
            On mismatched lengths, unknown kinds or a reference label that is not a node.
        TypeError
            When ``reference`` is neither a ``str`` nor None.
        """
        if reference is not None:
            reference = check_labels(reference, "reference")[0]
        from_labels = np.asarray(from_labels).astype(str)
        to_labels = np.asarray(to_labels).astype(str)
        values = np.asarray(values, dtype=np.float64)
        m = from_labels.shape[0]
        if to_labels.shape != (m,) or values.shape != (m,):
            raise ValueError("from, to and value must have the same length")
        kind = np.zeros(m, np.uint8) if kinds is None else kind_codes(kinds)
        if kind.shape != (m,):
            raise ValueError("kinds must have one entry per branch")
        names = (np.arange(1, m + 1).astype(str) if names is None
                 else np.asarray(names).astype(str))
        given = np.empty(0, dtype=str) if node_labels is None else np.asarray(node_labels).astype(str)
        endpoints = np.concatenate([given, from_labels, to_labels])
        labels, first, inverse = np.unique(endpoints, return_index=True, return_inverse=True)
        order = np.argsort(first, kind="stable")          # keep first-appearance order
        rank = np.empty_like(order)
        rank[order] = np.arange(order.size)
        index = rank[inverse.reshape(-1)]
        labels = labels[order]
        k = given.shape[0]
        ref = np.flatnonzero(labels == reference) if reference is not None else np.arange(1)
        if labels.size == 0:
            raise ValueError("the network has no nodes")
        if ref.size == 0:
            raise ValueError(f"reference node {str(reference)!r} is not a node of the network")
        return cls(labels, names, kind, index[k:k + m], index[k + m:], values, int(ref[0]))

    @classmethod
    def from_networkx(cls, graph, reference="0", *, ohms=None, siemens=None) -> "Network":
        """Build a network from a networkx graph, naming the edge attribute that holds the value.

        Every edge becomes a branch. Edge attributes: ``kind`` (``R``/``V``/``I``, default
        ``R``), ``name`` (default the edge's position), and the value: sources always read
        ``value`` (volts or amperes); resistors read the attribute chosen by ``ohms`` or
        ``siemens``, else ``value`` (ohms, as :meth:`to_networkx` writes it). Node labels are
        ``str(node)``; undirected graphs get ``from``/``to`` in edge iteration order.

        Parameters
        ----------
        graph : networkx graph
        reference : node of ``graph``, or None
            The reference node (converted with ``str`` like every node); ``None`` takes the
            first node, for networks that only answer queries needing no reference.
        ohms : str or float, optional
            Name of the edge attribute holding each resistor's resistance in ohms, or one
            number of ohms for every resistor (``ohms=1.0`` for an unweighted graph).
        siemens : str, optional
            Name of the edge attribute holding each resistor's conductance in siemens
            (networkx's ``weight`` usually is one); an infinite conductance is an ideal
            connection.

        Raises
        ------
        ValueError
            When both ``ohms`` and ``siemens`` are given; when no choice was made and an edge
            carries ``weight`` (the message says which keyword to pass); when a resistor lacks
            the chosen attribute (or ``value``), a source lacks ``value``, or a conductance is
            not positive.
        TypeError
            When ``ohms`` or ``siemens`` has the wrong type.
        """
        if ohms is not None and siemens is not None:
            raise ValueError("pass either ohms= or siemens=, not both")
        if siemens is not None and not isinstance(siemens, str):
            raise TypeError(f"siemens must name an edge attribute (a str), not {siemens!r}")
        if ohms is not None and (isinstance(ohms, bool)
                                 or not isinstance(ohms, (str, int, float, np.floating))):
            raise TypeError(f"ohms must name an edge attribute (a str) or be a number of ohms, "
                            f"not {ohms!r}")
        edges = list(graph.edges(data=True))
        if ohms is None and siemens is None and any("weight" in d for _, _, d in edges):
            raise ValueError("the edges carry 'weight' but nothing says what it holds: pass "
                             "ohms='weight' if it is the resistance in ohms or siemens='weight' "
                             "if it is the conductance in siemens")
        kinds = [str(d.get("kind", "R")) for _, _, d in edges]
        vals = [_edge_value(u, v, d, kind, ohms, siemens)
                for (u, v, d), kind in zip(edges, kinds)]
        frm = [str(u) for u, _, _ in edges]
        to = [str(v) for _, v, _ in edges]
        names = [d.get("name", str(i + 1)) for i, (_, _, d) in enumerate(edges)]
        return cls.from_arrays(frm, to, vals, kinds, names,
                               reference=None if reference is None else str(reference),
                               node_labels=[str(v) for v in graph.nodes])

    def to_networkx(self):
        """Return a ``networkx.MultiDiGraph`` with one edge per branch.

        Nodes are the labels; each edge carries ``name``, ``kind`` (letter) and ``value``, and for
        resistors also ``ohms`` and ``conductance`` (``inf`` for an ideal connection).
        """
        import networkx as nx

        graph = nx.MultiDiGraph(reference=str(self.node_labels[self.reference]))
        graph.add_nodes_from(self.node_labels.tolist())
        labels = self.node_labels
        for k in range(self.n_branches):
            attrs = {"name": str(self.branch_names[k]), "kind": KIND_LETTERS[self.kind[k]],
                     "value": float(self.value[k])}
            if self.kind[k] == RESISTOR:
                attrs["ohms"] = attrs["value"]
                attrs["conductance"] = np.inf if attrs["value"] == 0 else 1.0 / attrs["value"]
            graph.add_edge(str(labels[self.from_node[k]]), str(labels[self.to_node[k]]), **attrs)
        return graph

    # ------------------------------------------------------------------ queries
    @property
    def n_nodes(self) -> int:
        return int(self.node_labels.shape[0])

    @property
    def n_branches(self) -> int:
        return int(self.kind.shape[0])

    @property
    def reference_label(self) -> str:
        return str(self.node_labels[self.reference])

    @cached_property
    def label_index(self) -> dict:
        """Mapping from node label to node index (built on first use)."""
        return {label: i for i, label in enumerate(self.node_labels.tolist())}

    def node_index(self, labels) -> np.ndarray:
        """Indices of the given node labels.

        Parameters
        ----------
        labels : str or sequence of str

        Raises
        ------
        TypeError
            When a label is not a ``str`` (an integer is never taken as an index or a label).
        KeyError
            Naming the first label that is not a node.
        """
        table = self.label_index
        out = []
        for label in check_labels(labels):
            if label not in table:
                raise KeyError(f"unknown node {label!r}")
            out.append(table[label])
        return np.asarray(out, dtype=np.int64)

    def branches_of_kind(self, letter: str) -> np.ndarray:
        """Indices of the branches of one kind (``"R"``, ``"V"`` or ``"I"``)."""
        return np.flatnonzero(self.kind == KIND_CODE[letter])

    def counts_by_kind(self) -> dict:
        """Number of branches of each kind letter."""
        counts = np.bincount(self.kind, minlength=3)
        return {letter: int(counts[code]) for code, letter in enumerate(KIND_LETTERS)}

    def with_values(self, value) -> "Network":
        """A copy with new branch values (same topology and kinds)."""
        return Network(self.node_labels, self.branch_names, self.kind, self.from_node,
                       self.to_node, np.asarray(value, dtype=np.float64), self.reference)

    def with_reference(self, label: str) -> "Network":
        """A copy whose reference node is ``label`` (a ``str``; see :meth:`node_index`)."""
        return Network(self.node_labels, self.branch_names, self.kind, self.from_node,
                       self.to_node, self.value, int(self.node_index(label)[0]))

    def passive(self) -> "Network":
        """The network with every independent source zeroed.

        Voltage sources become ideal connections (``R`` of 0 ohm) and current sources are
        removed; node indices are unchanged. This is the network whose effective resistances a
        two-point measurement reads.
        """
        keep = self.kind != CURRENT_SOURCE
        kind = np.zeros(int(keep.sum()), np.uint8)
        value = np.where(self.kind[keep] == VOLTAGE_SOURCE, 0.0, self.value[keep])
        return Network(self.node_labels, self.branch_names[keep], kind, self.from_node[keep],
                       self.to_node[keep], value, self.reference)


def check_labels(labels, what: str = "node label") -> list:
    """``labels`` (one ``str`` or a sequence of them) as a list of ``str``.

    Raises
    ------
    TypeError
        Naming the first element that is not a ``str`` (NumPy string arrays pass).
    """
    if isinstance(labels, str):
        return [labels]
    array = np.asarray(labels)
    if array.dtype.kind == "U":
        return array.reshape(-1).tolist()
    items = array.reshape(-1).tolist() if array.dtype.kind == "O" else None
    if items is not None and all(isinstance(item, str) for item in items):
        return items
    if array.size == 0:
        return []
    first = next((item for item in array.reshape(-1).tolist() if not isinstance(item, str)),
                 labels)
    raise TypeError(f"a {what} must be a str, not {type(first).__name__} ({first!r}); "
                    "index-based access has its own functions (for example pair_by_index)")


def _edge_value(u, v, data: dict, kind: str, ohms, siemens) -> float:
    """The value of one networkx edge (see :meth:`Network.from_networkx`)."""
    where = f"edge ({u!r}, {v!r})"
    if kind.strip().upper() != "R" or (ohms is None and siemens is None):
        if "value" not in data:
            hint = ("" if kind.strip().upper() != "R" else
                    "; pass ohms='ATTRIBUTE' or siemens='ATTRIBUTE' naming the attribute that "
                    "holds it, or ohms=1.0 for 1-ohm resistors")
            raise ValueError(f"{where} has no 'value' attribute{hint}")
        return float(data["value"])
    if ohms is not None and not isinstance(ohms, str):
        return float(ohms)
    name = ohms if ohms is not None else siemens
    if name not in data:
        raise ValueError(f"{where} has no {name!r} attribute")
    value = float(data[name])
    if ohms is not None:
        return value
    if not value > 0:
        raise ValueError(f"{where}: conductance {value!r} S is not positive (an open circuit "
                         "is no edge)")
    return 1.0 / value
