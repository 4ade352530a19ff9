"""Deterministic generators of resistive networks for tests, benchmarks and demonstrations.

Every generator is vectorised (endpoint arrays built with NumPy, labels with element-wise string
operations on small digit tables) and returns a :class:`~ohmgraph.engine.network.Network`; a
1000 x 1000 lattice with two million resistors builds in about a second. Random choices come
from ``numpy.random.default_rng(seed)``, so the same arguments give identical arrays.

Supply and loads
----------------
The lattice, mesh and k-nearest-neighbour generators can attach

* *pads*: voltage sources from a pad node to the reference node ``"0"`` (``V(pad) - V(0) =
  supply_volts``), and
* *loads*: current sources from a load node to ``"0"`` (each draws its current out of the
  network and returns it through the reference).

When there is a pad or a load, the extra node ``"0"`` is added and is the reference. A bare
network (no pads, no loads) has no node ``"0"``; its reference is the node named by
``reference`` (default: its first node, a corner of a lattice). Loads without a pad are refused:
their current would have no return path (KCL could not hold).
"""

from __future__ import annotations

import math

import numpy as np
from scipy.spatial import cKDTree

from ohmgraph.engine.network import CURRENT_SOURCE, RESISTOR, VOLTAGE_SOURCE, Network

REFERENCE_LABEL = "0"


# ---------------------------------------------------------------------------- building blocks
def _digits(count: int) -> np.ndarray:
    """Decimal text of ``0 .. count-1`` (a small table that coordinates index into).

    The strings are exactly as wide as the longest one: the default width for integers (21
    characters) would make every later string operation several times slower.
    """
    return np.arange(count).astype(f"U{len(str(max(count - 1, 0)))}")


def _join(parts, separator: str = "_") -> np.ndarray:
    """Element-wise ``separator.join(parts)`` over equally long string arrays."""
    joined = parts[0]
    for part in parts[1:]:
        joined = np.char.add(np.char.add(joined, separator), part)
    return joined


def _lattice_edges(shape) -> list:
    """Nearest-neighbour edges of a rectangular lattice with C-order node numbering.

    Returns
    -------
    list of (from, to) ndarray pairs
        One pair per axis; ``to = from + stride`` of that axis.
    """
    index = np.arange(math.prod(shape), dtype=np.int64).reshape(shape)
    edges = []
    for axis, stride in enumerate(index.strides):
        lower = [slice(None)] * len(shape)
        lower[axis] = slice(None, -1)
        start = index[tuple(lower)].ravel()
        edges.append((start, start + stride // index.itemsize))
    return edges


def _lattice_labels(shape, steps=None, prefix: str = "") -> np.ndarray:
    """Labels ``prefix + "x_y[_z]"`` of the nodes of a lattice, in C order.

    ``steps`` multiplies each coordinate (a coarse layer labelled in fine-site coordinates).
    """
    steps = steps or (1,) * len(shape)
    coordinates = np.unravel_index(np.arange(math.prod(shape)), shape)
    tables = [_digits((size - 1) * step + 1) for size, step in zip(shape, steps)]
    parts = [table[coordinate * step]
             for table, coordinate, step in zip(tables, coordinates, steps)]
    labels = _join(parts)
    return np.char.add(prefix, labels) if prefix else labels


def _pick(rng: np.random.Generator, candidates: np.ndarray, count: int, what: str,
          weights=None) -> np.ndarray:
    """``count`` distinct entries of ``candidates`` drawn at random, in ascending order."""
    if count < 0:
        raise ValueError(f"number of {what} must not be negative, got {count}")
    if count > candidates.size:
        raise ValueError(f"{count} {what} asked for but only {candidates.size} nodes can take them")
    return np.sort(rng.choice(candidates, size=count, replace=False, p=weights))


def _require_positive(**values) -> None:
    for name, value in values.items():
        if not np.all(np.asarray(value, dtype=float) > 0):
            raise ValueError(f"{name} must be positive, got {value!r}")


def _require_count(minimum: int = 1, **values) -> None:
    for name, value in values.items():
        if int(value) != value or value < minimum:
            raise ValueError(f"{name} must be an integer of at least {minimum}, got {value!r}")


def _network(labels, names, from_node, to_node, ohms, *, pad_nodes, supply_volts, load_nodes,
             load_amps, reference) -> Network:
    """Assemble resistors plus optional pads and loads into a :class:`Network`.

    See the module docstring for the meaning of pads, loads and the reference node.
    """
    pad_nodes = np.asarray(pad_nodes, dtype=np.int64)
    load_nodes = np.asarray(load_nodes, dtype=np.int64)
    resistors = from_node.size
    if load_nodes.size and not pad_nodes.size:
        raise ValueError("loads need at least one pad: their current has no other return path")
    if not (pad_nodes.size or load_nodes.size):
        if reference is None:
            return Network(labels, names, np.zeros(resistors, np.uint8), from_node, to_node,
                           ohms, 0)
        found = np.flatnonzero(labels == str(reference))
        if not found.size:
            raise ValueError(f"reference {reference!r} is not a node of the network")
        return Network(labels, names, np.zeros(resistors, np.uint8), from_node, to_node, ohms,
                       int(found[0]))
    if reference is not None:
        raise ValueError("with pads or loads the reference is always node '0'; "
                         "do not name another")
    ground = labels.size
    load_amps = np.broadcast_to(np.asarray(load_amps, dtype=np.float64), load_nodes.shape)
    kind = np.concatenate([np.full(resistors, RESISTOR, np.uint8),
                           np.full(pad_nodes.size, VOLTAGE_SOURCE, np.uint8),
                           np.full(load_nodes.size, CURRENT_SOURCE, np.uint8)])
    return Network(
        node_labels=np.append(labels, REFERENCE_LABEL),
        branch_names=np.concatenate([names, np.char.add("Vpad_", labels[pad_nodes]),
                                     np.char.add("Iload_", labels[load_nodes])]),
        kind=kind,
        from_node=np.concatenate([from_node, pad_nodes, load_nodes]),
        to_node=np.concatenate([to_node, np.full(pad_nodes.size + load_nodes.size, ground)]),
        value=np.concatenate([ohms, np.full(pad_nodes.size, float(supply_volts)), load_amps]),
        reference=ground)


def _lattice(shape, ohms, pads, loads, load_amps, supply_volts, seed, reference) -> Network:
    _require_count(**{f"size along axis {axis + 1}": size for axis, size in enumerate(shape)})
    _require_positive(ohms=ohms)
    labels = _lattice_labels(shape)
    edges = _lattice_edges(shape)
    from_node = np.concatenate([start for start, _ in edges])
    to_node = np.concatenate([end for _, end in edges])
    names = np.concatenate([np.char.add(f"R{axis}_", labels[start])
                            for axis, (start, _) in zip("xyz", edges)])
    rng = np.random.default_rng(seed)
    every = np.arange(labels.size)
    pad_nodes = _pick(rng, every, pads, "pads")
    load_nodes = _pick(rng, every, loads, "loads")
    return _network(labels, names, from_node, to_node, np.full(from_node.size, float(ohms)),
                    pad_nodes=pad_nodes, supply_volts=supply_volts, load_nodes=load_nodes,
                    load_amps=load_amps, reference=reference)


# ---------------------------------------------------------------------------- generators
def grid2d(nx: int, ny: int, ohms: float = 1.0, *, pads: int = 0, loads: int = 0,
           load_amps: float = 1e-3, supply_volts: float = 1.0, seed: int = 0,
           reference: str | None = None) -> Network:
    """A square lattice of equal resistors, optionally fed by pads and drawn on by loads.

    Nodes are labelled ``"x_y"`` (``0 <= x < nx``, ``0 <= y < ny``); the resistor from ``x_y``
    to ``(x+1)_y`` is named ``Rx_x_y`` and the one to ``x_(y+1)`` is ``Ry_x_y``. The infinite
    version is the classic lattice whose two-point resistances J. Cserti derives with lattice
    Green's functions (Am. J. Phys. 68, 896 (2000)).

    Parameters
    ----------
    nx, ny : int
        Nodes along each side (at least 1).
    ohms : float
        Resistance of every lattice resistor.
    pads : int
        Number of pad nodes, drawn at random without repetition; each gets a voltage source of
        ``supply_volts`` to the reference ``"0"``.
    loads : int
        Number of load nodes, drawn at random without repetition; each gets a current source
        drawing ``load_amps`` into ``"0"``. Needs ``pads >= 1``.
    load_amps, supply_volts : float
    seed : int
        Seed of the random choice of pad and load nodes.
    reference : str, optional
        Reference node of a bare lattice (default ``"0_0"``, the first corner). Not allowed with
        pads or loads, whose reference is always ``"0"``.

    Returns
    -------
    Network
        ``nx*ny`` nodes (+1 with a supply) and ``nx*(ny-1) + ny*(nx-1)`` resistors, then the
        pads, then the loads.
    """
    return _lattice((nx, ny), ohms, pads, loads, load_amps, supply_volts, seed, reference)


def grid3d(nx: int, ny: int, nz: int, ohms: float = 1.0, *, pads: int = 0, loads: int = 0,
           load_amps: float = 1e-3, supply_volts: float = 1.0, seed: int = 0,
           reference: str | None = None) -> Network:
    """A simple cubic lattice of equal resistors (see :func:`grid2d` for the options).

    Nodes are labelled ``"x_y_z"``; resistors ``Rx_...``, ``Ry_...``, ``Rz_...`` after their
    lower node. ``nx*ny*nz`` nodes and ``(nx-1)*ny*nz + nx*(ny-1)*nz + nx*ny*(nz-1)``
    resistors.
    """
    return _lattice((nx, ny, nz), ohms, pads, loads, load_amps, supply_volts, seed, reference)


def ladder(n: int, series_ohms: float = 1.0, shunt_ohms: float = 1.0,
           source_volts: float | None = None) -> Network:
    """A ladder of ``n`` sections, each a series resistor followed by a shunt resistor.

    Node ``"1"`` is the input; section ``k`` (1-based) is ``Rs{k}`` from ``"k"`` to ``"k+1"``
    and ``Rp{k}`` from ``"k+1"`` to the reference ``"0"``. The input resistance obeys
    ``R_k = Rs + Rp || R_(k-1)`` with ``R_1 = Rs + Rp``, and tends to
    ``(Rs + sqrt(Rs**2 + 4*Rs*Rp)) / 2`` as ``n`` grows.

    Parameters
    ----------
    n : int
        Number of sections (at least 1).
    series_ohms, shunt_ohms : float
    source_volts : float, optional
        When given, a voltage source ``Vin`` from ``"1"`` to ``"0"`` drives the input.

    Returns
    -------
    Network
        ``n + 2`` nodes and ``2 n`` resistors (+1 source).
    """
    _require_count(n=n)
    _require_positive(series_ohms=series_ohms, shunt_ohms=shunt_ohms)
    sections = np.arange(1, n + 1)
    digits = _digits(n + 2)                                  # node k is labelled str(k)
    from_node = np.concatenate([sections, sections + 1])
    to_node = np.concatenate([sections + 1, np.zeros(n, np.int64)])
    names = np.concatenate([np.char.add("Rs", digits[sections]),
                            np.char.add("Rp", digits[sections])])
    value = np.concatenate([np.full(n, float(series_ohms)), np.full(n, float(shunt_ohms))])
    kind = np.zeros(2 * n, np.uint8)
    if source_volts is not None:
        from_node, to_node = np.append(from_node, 1), np.append(to_node, 0)
        names, kind = np.append(names, "Vin"), np.append(kind, np.uint8(VOLTAGE_SOURCE))
        value = np.append(value, float(source_volts))
    return Network(digits, names, kind, from_node, to_node, value, 0)


def layered_mesh(nx: int, ny: int, layers: int = 2, *, pitch=None, sheet_ohms=0.05,
                 via_ohms: float = 0.5, pads: int = 4, loads: int = 100,
                 load_amps: float = 1e-3, load_clusters: int = 0, supply_volts: float = 1.0,
                 seed: int = 0) -> Network:
    """A multi-layer supply mesh: stacked square meshes joined by vias, fed on top, loaded below.

    The board is an ``nx`` x ``ny`` array of sites. Layer ``l`` (0 = top) has a node at every
    site whose coordinates are multiples of ``pitch[l]``, joined to its neighbours on that layer
    by a strip one site wide and ``pitch[l]`` sites long, of resistance
    ``sheet_ohms[l] * pitch[l]`` (ohms per square times squares). Each site present on two
    adjacent layers carries a via of ``via_ohms``; site ``(0, 0)`` is on every layer, so the
    layers are always joined. Pads (voltage sources to ``"0"``) sit on the top layer and loads
    (current sources to ``"0"``) on the bottom layer.

    Nodes are labelled ``"m{l}_{x}_{y}"`` in site coordinates, so a via joins ``m0_4_8`` to
    ``m1_4_8``; branches are ``Rx_``/``Ry_``/``Rvia_`` followed by their first node, then
    ``Vpad_...`` and ``Iload_...``.

    Parameters
    ----------
    nx, ny : int
        Sites along each side.
    layers : int
        Number of layers (at least 1).
    pitch : sequence of int, optional
        Node spacing of each layer in sites; default ``2**(layers-1-l)`` (the top layer is the
        coarsest, the bottom layer has a node at every site).
    sheet_ohms : float or sequence of float
        Sheet resistance of each layer, ohms per square.
    via_ohms : float
        Resistance of one via.
    pads, loads : int
        Number of pad nodes (top layer) and load nodes (bottom layer), distinct and drawn at
        random. Loads need at least one pad.
    load_amps : float
        Mean load current; each load draws ``load_amps * U(0.5, 1.5)``.
    load_clusters : int
        When positive, load nodes are drawn with a probability that is a sum of this many
        Gaussian bumps (random centres, width a twentieth of the board) instead of uniformly,
        giving hot spots.
    supply_volts : float
    seed : int
        Seed of every random choice (pads, loads, load currents, cluster centres).

    Returns
    -------
    Network
        Reference ``"0"``; layer nodes in layer order, then ``"0"``.
    """
    _require_count(nx=nx, ny=ny, layers=layers)
    _require_count(minimum=0, load_clusters=load_clusters)
    pitch = [2 ** (layers - 1 - layer) for layer in range(layers)] if pitch is None else pitch
    pitch = _per_layer(pitch, layers, "pitch")
    for step in pitch:
        _require_count(pitch=step)
    pitch = [int(step) for step in pitch]
    sheet = _per_layer(sheet_ohms, layers, "sheet_ohms")
    _require_positive(sheet_ohms=sheet, via_ohms=via_ohms, load_amps=load_amps)

    shapes = [((nx - 1) // p + 1, (ny - 1) // p + 1) for p in pitch]
    offsets = np.cumsum([0] + [a * b for a, b in shapes])
    labels, names, starts, ends, ohms = [], [], [], [], []
    for layer, (shape, p) in enumerate(zip(shapes, pitch)):
        layer_labels = _lattice_labels(shape, (p, p), prefix=f"m{layer}_")
        for axis, (start, end) in zip("xy", _lattice_edges(shape)):
            names.append(np.char.add(f"R{axis}_", layer_labels[start]))
            starts.append(start + offsets[layer])
            ends.append(end + offsets[layer])
            ohms.append(np.full(start.size, sheet[layer] * p))
        labels.append(layer_labels)
    labels = np.concatenate(labels)
    for upper in range(layers - 1):
        step = math.lcm(pitch[upper], pitch[upper + 1])
        sx, sy = np.meshgrid(np.arange(0, nx, step), np.arange(0, ny, step), indexing="ij")
        sx, sy = sx.ravel(), sy.ravel()
        top = _site_index(sx, sy, shapes[upper], pitch[upper]) + offsets[upper]
        bottom = _site_index(sx, sy, shapes[upper + 1], pitch[upper + 1]) + offsets[upper + 1]
        names.append(np.char.add("Rvia_", labels[top]))
        starts.append(top)
        ends.append(bottom)
        ohms.append(np.full(top.size, float(via_ohms)))

    rng = np.random.default_rng(seed)
    pad_nodes = _pick(rng, np.arange(offsets[0], offsets[1]), pads, "pads")
    bottom_nodes = np.arange(offsets[-2], offsets[-1])
    weights = _cluster_weights(rng, shapes[-1], load_clusters) if load_clusters else None
    load_nodes = _pick(rng, bottom_nodes, loads, "loads", weights)
    load_current = load_amps * rng.uniform(0.5, 1.5, size=load_nodes.size)
    return _network(labels, np.concatenate(names), np.concatenate(starts), np.concatenate(ends),
                    np.concatenate(ohms), pad_nodes=pad_nodes, supply_volts=supply_volts,
                    load_nodes=load_nodes, load_amps=load_current, reference=None)


def _per_layer(values, layers: int, name: str) -> np.ndarray:
    """One value per layer from a scalar or a sequence of 1 or ``layers`` values."""
    values = np.atleast_1d(np.asarray(values, dtype=np.float64))
    if values.ndim != 1 or values.size not in (1, layers):
        raise ValueError(f"{name} needs 1 or {layers} values, got {values.size}")
    return np.broadcast_to(values, (layers,))


def _site_index(sx, sy, shape, pitch) -> np.ndarray:
    """Index within a layer of the nodes at sites ``(sx, sy)`` (multiples of ``pitch``)."""
    return (sx // pitch) * shape[1] + sy // pitch


def _cluster_weights(rng: np.random.Generator, shape, clusters: int) -> np.ndarray:
    """Probabilities over the nodes of a lattice: a sum of equal Gaussian bumps, normalised."""
    centres = rng.uniform(0, 1, size=(clusters, 2)) * (np.asarray(shape) - 1)
    width = max(max(shape) / 20.0, 1.0)
    x, y = np.unravel_index(np.arange(math.prod(shape)), shape)
    density = np.zeros(x.size)
    for cx, cy in centres:
        density += np.exp(-((x - cx) ** 2 + (y - cy) ** 2) / (2 * width ** 2))
    density += 1e-12                                   # every node stays possible
    return density / density.sum()


def _row_ordered(points: np.ndarray) -> np.ndarray:
    """Points sorted into horizontal bands of about ``sqrt(n)`` points, by x within a band.

    Neighbouring points get nearby numbers: the k-d tree queries run several times faster and
    the network's matrices have a narrower profile.
    """
    bands = max(int(math.sqrt(points.shape[0])), 1)
    band = np.floor(points[:, 1] * bands)
    return points[np.lexsort((points[:, 0], band))]


def knn_points(n: int, seed=0) -> np.ndarray:
    """The points :func:`knn_network` joins: ``n`` uniform points in ``[0, 1)^2``, numbered band
    by band (bottom to top, left to right within a band of about ``sqrt(n)`` points).

    Parameters
    ----------
    n : int
    seed : int or numpy.random.Generator
        A generator is used as is (and advanced).

    Returns
    -------
    ndarray, shape (n, 2)
        Point ``i`` is node ``"p{i}"`` of ``knn_network(n, k, seed)``.
    """
    return _row_ordered(np.random.default_rng(seed).random((n, 2)))


def knn_network(n: int, k: int = 4, seed: int = 0, *, ohms_per_unit: float = 1.0,
                pads: int = 0, loads: int = 0, load_amps: float = 1e-3,
                supply_volts: float = 1.0, reference: str | None = None) -> Network:
    """Random points in the unit square, each joined to its ``k`` nearest neighbours.

    The points are those of :func:`knn_points` (uniform, numbered band by band); neighbours
    come from a k-d tree (:class:`scipy.spatial.cKDTree`). A pair found from both ends gives one resistor, of
    ``ohms_per_unit`` times the distance, so every node has at least ``k`` resistors. The network
    is usually but not always connected; :func:`ohmgraph.engine.check` reports any island.

    Parameters
    ----------
    n : int
        Number of points (at least ``k + 1``).
    k : int
        Neighbours per point (at least 1).
    seed : int
        Seed of the points and of the pad and load choice.
    ohms_per_unit : float
    pads, loads, load_amps, supply_volts, reference
        As in :func:`grid2d`; the default reference of a bare network is ``"p0"``.

    Returns
    -------
    Network
        Nodes ``"p0" .. "p{n-1}"``; resistors named ``R{i}_{j}`` with ``i < j``.
    """
    _require_count(k=k)
    _require_count(minimum=k + 1, n=n)
    _require_positive(ohms_per_unit=ohms_per_unit)
    rng = np.random.default_rng(seed)
    points = knn_points(n, rng)
    _, neighbours = cKDTree(points).query(points, k=k + 1)
    first = np.repeat(np.arange(n, dtype=np.int64), k + 1)
    second = neighbours.ravel().astype(np.int64)
    keep = first != second
    low = np.minimum(first[keep], second[keep])
    high = np.maximum(first[keep], second[keep])
    pair = np.sort(low * n + high)
    pair = pair[np.concatenate([[True], pair[1:] != pair[:-1]])]   # each pair once
    low, high = pair // n, pair % n
    distance = np.linalg.norm(points[low] - points[high], axis=1)
    digits = _digits(n)
    labels = np.char.add("p", digits)
    names = _join([np.char.add("R", digits[low]), digits[high]])
    every = np.arange(n)
    pad_nodes = _pick(rng, every, pads, "pads")
    load_nodes = _pick(rng, every, loads, "loads")
    return _network(labels, names, low, high, ohms_per_unit * distance, pad_nodes=pad_nodes,
                    supply_volts=supply_volts, load_nodes=load_nodes, load_amps=load_amps,
                    reference=reference)


def site_coordinates(labels) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Coordinates and layer of nodes labelled by :func:`grid2d` (``"x_y"``) or
    :func:`layered_mesh` (``"m{layer}_{x}_{y}"``), for a node table.

    Returns
    -------
    x, y : ndarray of float64
        Site coordinates; NaN for other labels (such as the reference ``"0"``).
    layer : ndarray of str
        ``"m0"``, ``"m1"``, ... for mesh labels, empty otherwise.
    """
    import pandas as pd

    parts = pd.Series(np.asarray(labels, dtype=str)).str.split("_", expand=True)
    if parts.shape[1] < 2:
        nan = np.full(len(parts), np.nan)
        return nan, nan.copy(), np.full(len(parts), "", dtype=str)
    layered = parts.shape[1] >= 3
    layer = parts[0].where(parts[2].notna(), "") if layered else pd.Series([""] * len(parts))
    xs = parts[1].where(parts[2].notna(), parts[0]) if layered else parts[0]
    ys = parts[2].where(parts[2].notna(), parts[1]) if layered else parts[1]
    x = pd.to_numeric(xs, errors="coerce").to_numpy(np.float64)
    y = pd.to_numeric(ys, errors="coerce").to_numpy(np.float64)
    x[np.isnan(y)] = np.nan
    return x, y, layer.fillna("").to_numpy(dtype=str)


def _graph_network(graph, ohms, pads, loads, load_amps, supply_volts, seed,
                   reference) -> Network:
    """A network of ``ohms`` resistors on the edges of a networkx graph over nodes ``0..n-1``
    (labels ``"p{i}"``; resistors ``R{i}_{j}``, ``i < j``), with pads and loads as
    :func:`grid2d`."""
    _require_positive(ohms=ohms)
    n = graph.number_of_nodes()
    edges = np.array(list(graph.edges()), dtype=np.int64).reshape(-1, 2)
    low, high = edges.min(axis=1), edges.max(axis=1)
    digits = _digits(n)
    labels = np.char.add("p", digits)
    names = _join([np.char.add("R", digits[low]), digits[high]])
    rng = np.random.default_rng(seed)
    every = np.arange(n)
    pad_nodes = _pick(rng, every, pads, "pads")
    load_nodes = _pick(rng, every, loads, "loads")
    return _network(labels, names, low, high, np.full(low.size, float(ohms)),
                    pad_nodes=pad_nodes, supply_volts=supply_volts, load_nodes=load_nodes,
                    load_amps=load_amps, reference=reference)


def small_world(n: int, k: int = 4, p: float = 0.1, seed: int = 0, *, ohms: float = 1.0,
                pads: int = 0, loads: int = 0, load_amps: float = 1e-3,
                supply_volts: float = 1.0, reference: str | None = None) -> Network:
    """A Watts–Strogatz small world (D. J. Watts & S. H. Strogatz, Nature 393, 440, 1998) of
    ``ohms`` resistors: a ring of ``n`` nodes, each joined to its ``k`` nearest, every edge
    rewired with probability ``p`` (:func:`networkx.watts_strogatz_graph`).

    Parameters
    ----------
    n, k : int
        Nodes (more than ``k``) and ring neighbours per node (even, at least 2).
    p : float
        Rewiring probability, 0 to 1.
    seed : int
        Seed of the rewiring and of the pad and load choice.
    ohms, pads, loads, load_amps, supply_volts, reference
        As in :func:`grid2d`; the default reference of a bare network is ``"p0"``.

    Returns
    -------
    Network
        Nodes ``"p0" .. "p{n-1}"``, ``n k / 2`` resistors named ``R{i}_{j}`` with ``i < j``.
    """
    import networkx as nx

    _require_count(minimum=2, k=k)
    _require_count(minimum=k + 1, n=n)
    if k % 2 or not 0 <= p <= 1:
        raise ValueError(f"k must be even and p between 0 and 1, got k={k!r}, p={p!r}")
    graph = nx.watts_strogatz_graph(n, k, p, seed=seed)
    return _graph_network(graph, ohms, pads, loads, load_amps, supply_volts, seed, reference)


def scale_free(n: int, m: int = 2, seed: int = 0, *, ohms: float = 1.0, pads: int = 0,
               loads: int = 0, load_amps: float = 1e-3, supply_volts: float = 1.0,
               reference: str | None = None) -> Network:
    """A Barabási–Albert scale-free graph (A.-L. Barabási & R. Albert, Science 286, 509, 1999)
    of ``ohms`` resistors: nodes join one by one, each with ``m`` edges to existing nodes
    chosen with probability proportional to their degree (:func:`networkx.barabasi_albert_graph`).

    Parameters
    ----------
    n, m : int
        Nodes (more than ``m``) and edges per joining node (at least 1).
    seed : int
        Seed of the attachment and of the pad and load choice.
    ohms, pads, loads, load_amps, supply_volts, reference
        As in :func:`grid2d`; the default reference of a bare network is ``"p0"``.

    Returns
    -------
    Network
        Nodes ``"p0" .. "p{n-1}"``, ``(n - m) m`` resistors named ``R{i}_{j}`` with ``i < j``.
    """
    import networkx as nx

    _require_count(m=m)
    _require_count(minimum=m + 1, n=n)
    graph = nx.barabasi_albert_graph(n, m, seed=seed)
    return _graph_network(graph, ohms, pads, loads, load_amps, supply_volts, seed, reference)
