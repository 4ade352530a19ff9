"""The HDF5 solution store: one self-describing file per solved network.

Layout (every array is a plain HDF5 dataset; strings are fixed-length UTF-8, so any HDF5 tool
reads the file):

* ``/nodes/label``, ``/nodes/voltage`` (V);
* ``/branches/name``, ``kind`` (letters R, V, I), ``from`` and ``to`` (indices into ``/nodes``),
  ``value`` (ohm, V or A by kind), ``current`` (A), ``voltage`` (V), ``power`` (W),
  ``current_determined`` (bool);
* optional, when given: ``/nodes/x``, ``/nodes/y``, ``/nodes/layer`` (node table),
  ``/nodes/net``, ``/nodes/drop`` (V), ``/nodes/held`` and the ``/nets`` group (supply drop, see
  :mod:`ohmgraph.engine.drop`), ``/branches/max_current`` (A) and ``/branches/max_power`` (W)
  (ratings, NaN = none);
* ``/checks``: one entry per check finding (``code``, ``severity``, ``message``, and the node
  and branch indices involved, concatenated with ``*_offsets`` to split them), with the check
  summary as attributes;
* ``/timings``: seconds per stage as attributes;
* optional, with ``--keep-setup``: ``/setup``, the solver's set-up (multigrid levels) with the
  fingerprint of the reduced matrix it was built for (:mod:`ohmgraph.io.setup_store`);
* root attributes: provenance (tool version, input file name and SHA-256, creation time) and
  the evidence of the solve (method, tolerance, iterations, residuals, power balance).

Every array is chunked and carries the Fletcher-32 checksum filter, and the root attribute
``attrs_sha256`` is the SHA-256 of the other root attributes (:mod:`ohmgraph.io.hdf5_integrity`),
so damage after writing is found on reading. Large arrays are also compressed with gzip level 1
plus the shuffle filter. On 2M-element float64 arrays LZF wrote about twice as fast, but LZF is
a filter bundled with h5py, not with the HDF5 library, so other tools could not open the file;
gzip (deflate) and Fletcher-32 ship with every HDF5 build. Files are written through
:func:`ohmgraph.io.atomic.atomic_output`, so a failure never leaves a partial file.

Layout versions: 1 (no checksums, no digest) is still read; 2 adds the checksums and the digest.
"""

from __future__ import annotations

import concurrent.futures
import contextlib
import hashlib
import importlib.metadata
import threading
import time
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path

import h5py
import numpy as np

from ohmgraph.engine.checks import Finding
from ohmgraph.engine.network import KIND_LETTERS, Network, kind_codes
from ohmgraph.engine.solve import Solution
from ohmgraph.io.atomic import atomic_output
from ohmgraph.io.errors import InputError, OutputRefused
from ohmgraph.io.hdf5_integrity import (FILE_OPTIONS, check_attributes, dataset_options,
                                        read_dataset, seal_attributes)
from ohmgraph.io.hdf5_output import create_hdf5
from ohmgraph.io.interrupts import checkpoint
from ohmgraph.io.layout import LAYOUT_VERSION, check_layout_version
from ohmgraph.io.setup_store import write_setup

REQUIRED_DATASETS = (
    "nodes/label", "nodes/voltage",
    "branches/name", "branches/kind", "branches/from", "branches/to", "branches/value",
    "branches/current", "branches/voltage", "branches/power", "branches/current_determined",
)
REQUIRED_ATTRIBUTES = (
    "reference", "method", "rtol", "iterations", "relative_residual", "kcl_max_residual",
    "kcl_worst_node", "power_balance", "power_dissipated",
)
# Optional datasets, stored when a command computed them (``OPTIONAL_DATASETS[name]`` is the
# array the dataset runs along: "nodes", "branches" or "nets").
OPTIONAL_DATASETS = {
    "nodes/x": "nodes", "nodes/y": "nodes", "nodes/layer": "nodes",
    "nodes/net": "nodes", "nodes/drop": "nodes", "nodes/held": "nodes",
    "branches/max_current": "branches", "branches/max_power": "branches",
    "nets/representative": "nets", "nets/nominal": "nets", "nets/size": "nets",
    "nets/worst_node": "nets", "nets/worst_drop": "nets", "nets/over": "nets",
    "nets/threshold": None,
}
TEXT_ATTRIBUTES = ("reference", "method", "kcl_worst_node")
INDEX_DATASETS = ("branches/from", "branches/to")
NUMBER_DATASETS = ("nodes/voltage", "branches/value", "branches/current", "branches/voltage",
                   "branches/power")
UNITS = {
    "nodes/voltage": "V",
    "branches/value": "ohm|V|A by kind",
    "branches/current": "A",
    "branches/voltage": "V",
    "branches/power": "W",
    "nodes/drop": "V",
    "branches/max_current": "A",
    "branches/max_power": "W",
    "nets/nominal": "V",
    "nets/worst_drop": "V",
}
DESCRIPTIONS = {
    "nodes/label": "unique node label",
    "nodes/voltage": "node potential relative to the reference node",
    "branches/name": "branch name",
    "branches/kind": "R resistor, V voltage source, I current source",
    "branches/from": "index into /nodes of the branch's from node",
    "branches/to": "index into /nodes of the branch's to node",
    "branches/value": "resistance (R), source voltage V(from)-V(to) (V), source current (I)",
    "branches/current": "current through the branch, positive from 'from' to 'to'",
    "branches/voltage": "V(from) - V(to)",
    "branches/power": "power absorbed (negative where a source delivers)",
    "branches/current_determined": "false where a loop of sources/ideal connections leaves the "
                                   "current free (given 0 A on the loop-closing branch)",
    "nodes/x": "x coordinate from the node table (NaN where not given)",
    "nodes/y": "y coordinate from the node table (NaN where not given)",
    "nodes/layer": "layer from the node table (empty where not given)",
    "nodes/net": "index into /nets of the node's net (-1 for the reference node)",
    "nodes/drop": "drop below the net's supply: |nominal| - sign(nominal) * V; |V| on a 0 V net",
    "nodes/held": "true where a voltage source holds the node",
    "branches/max_current": "current rating from the branch table (NaN = none)",
    "branches/max_power": "power rating from the branch table (NaN = none)",
    "nets/representative": "index into /nodes of a node naming the net",
    "nets/nominal": "supply potential of the net (NaN when unknown)",
    "nets/size": "nodes in the net",
    "nets/worst_node": "index into /nodes of the largest drop (-1 if none)",
    "nets/worst_drop": "largest drop, reference and source-held nodes excluded",
    "nets/over": "nodes over each threshold of /nets/threshold (-1: does not apply)",
    "nets/threshold": "drop thresholds of /nets/over",
}


@dataclass
class StoredSolution:
    """A solution read back from its HDF5 file.

    Attributes
    ----------
    network : Network
        Rebuilt from ``/nodes`` and ``/branches``.
    node_voltage, branch_current, branch_voltage, branch_power : ndarray
        Volts, amperes, volts, watts (the branch arrays None when read with
        ``read_solution(path, branch_results=False)``).
    current_determined : ndarray of bool, or None likewise
    extra : dict
        The optional datasets present in the file (``"nodes/x"`` → array), see
        :data:`OPTIONAL_DATASETS`.
    attrs : dict
        Root attributes (provenance and solve evidence) as plain Python values.
    findings : list of Finding
        The check findings stored with the solution.
    check_summary : dict
        The check summary (nested as :func:`ohmgraph.engine.check` returns it).
    timings : dict
        Seconds per stage, including ``read`` and ``store`` when the command line wrote it.
    """

    network: Network
    node_voltage: np.ndarray
    branch_current: np.ndarray
    branch_voltage: np.ndarray
    branch_power: np.ndarray
    current_determined: np.ndarray
    attrs: dict
    extra: dict = field(default_factory=dict)
    findings: list = field(default_factory=list)
    check_summary: dict = field(default_factory=dict)
    timings: dict = field(default_factory=dict)

    @property
    def node_labels(self) -> np.ndarray:
        return self.network.node_labels


@dataclass(frozen=True)
class WarmStart:
    """What a re-solve takes from a stored solution (:func:`read_warm_start`): no branches.

    Attributes
    ----------
    node_labels : ndarray of str
    node_voltage : ndarray, volts
    extra : dict
        The node table datasets present (``nodes/x``, ``nodes/y``, ``nodes/layer``).
    attrs, findings, check_summary
        As in :class:`StoredSolution`.
    """

    node_labels: np.ndarray
    node_voltage: np.ndarray
    extra: dict
    attrs: dict
    findings: list
    check_summary: dict


# ---------------------------------------------------------------------------- strings
def encode_strings(strings: np.ndarray) -> np.ndarray:
    """Fixed-width UTF-8 bytes of a NumPy unicode array, as narrow as the longest entry.

    All-ASCII arrays (the common case) are converted by narrowing the UCS-4 code units to bytes,
    several times faster than a general UTF-8 encode; others go through
    :func:`numpy.strings.encode`.
    """
    strings = np.asarray(strings, dtype=str)
    chars = strings.dtype.itemsize // 4
    codes = strings.view(np.uint32).reshape(strings.size, chars)
    if codes.size and int(codes.max()) > 127:
        encoded = np.strings.encode(strings, "utf-8")
        width = max(1, int(np.strings.str_len(encoded).max()))
        return encoded.astype(f"S{width}")
    width = max(1, int(np.strings.str_len(strings).max(initial=0)))
    narrowed = np.ascontiguousarray(codes[:, :width]).astype(np.uint8)
    return narrowed.view(f"S{width}").reshape(strings.shape)


def decode_strings(raw: np.ndarray) -> np.ndarray:
    """NumPy unicode array from fixed-width UTF-8 bytes (inverse of :func:`encode_strings`)."""
    raw = np.asarray(raw)
    width = raw.dtype.itemsize
    octets = raw.view(np.uint8).reshape(raw.size, width)
    if octets.size and int(octets.max()) > 127:
        return np.strings.decode(raw, "utf-8")
    return octets.astype(np.uint32).view(np.dtype(f"U{width}")).reshape(raw.shape)


# ---------------------------------------------------------------------------- writing
def _put(group: h5py.Group, name: str, data) -> None:
    """Create one dataset: chunked and compressed when large, with units and description."""
    data = np.asarray(data)
    if data.dtype.kind in "US":         # UTF-8 text (bytes are taken as already encoded)
        encoded = encode_strings(data) if data.dtype.kind == "U" else data
        data = encoded.view(h5py.string_dtype("utf-8", encoded.dtype.itemsize))
    dataset = group.create_dataset(name, data=data, **dataset_options(data))
    key = f"{group.name.strip('/')}/{name}"
    if key in UNITS:
        dataset.attrs["units"] = UNITS[key]
    if key in DESCRIPTIONS:
        dataset.attrs["description"] = DESCRIPTIONS[key]


def _string_list(values) -> np.ndarray:
    return np.array([str(v) for v in values], dtype=h5py.string_dtype())


def file_sha256(path) -> str:
    """Hex SHA-256 of a file, read in blocks (never loaded whole).

    Raises
    ------
    InputError
        If the file cannot be read.
    """
    try:
        with open(path, "rb") as handle:
            return hashlib.file_digest(handle, "sha256").hexdigest()
    except OSError as error:
        raise InputError(f"{path}: cannot be read ({error.strerror or error})") from error


def tool_version() -> str:
    """Installed version of the ohmgraph distribution."""
    return importlib.metadata.version("ohmgraph")


def flatten_attrs(values: dict, prefix: str = "") -> dict:
    """Nested dict → flat ``{"a.b": value}`` (None dropped), for HDF5 attributes."""
    flat = {}
    for key, value in values.items():
        if isinstance(value, dict):
            flat.update(flatten_attrs(value, f"{prefix}{key}."))
        elif value is not None:
            flat[f"{prefix}{key}"] = value
    return flat


def _unflatten(flat: dict) -> dict:
    nested = {}
    for key, value in flat.items():
        *parents, leaf = key.split(".")
        target = nested
        for parent in parents:
            target = target.setdefault(parent, {})
        target[leaf] = value
    return nested


def _write_findings(group: h5py.Group, findings: list, summary: dict) -> None:
    for column in ("code", "severity", "message"):
        _put(group, column, np.array([getattr(f, column) for f in findings], dtype=str))
    for members, offsets_name in (("nodes", "node_offsets"), ("branches", "branch_offsets")):
        parts = [np.asarray(getattr(f, members), np.int64) for f in findings]
        offsets = np.cumsum([0] + [part.size for part in parts], dtype=np.int64)
        _put(group, members, np.concatenate(parts) if parts else np.empty(0, np.int64))
        _put(group, offsets_name, offsets)
    group.attrs["description"] = ("check findings; the nodes/branches of finding k are "
                                  "nodes[node_offsets[k]:node_offsets[k+1]] (same for branches)")
    for key, value in flatten_attrs(summary).items():
        group.attrs[key] = value


def _root_attrs(solution: Solution, input_path, input_sha256=None) -> dict:
    net = solution.network
    attrs = {
        "layout": "ohmgraph solution",
        "layout_version": LAYOUT_VERSION,
        "tool_version": tool_version(),
        "created": datetime.now(timezone.utc).isoformat(timespec="seconds"),
        "reference": net.reference_label,
        "method": solution.method,
        "rtol": float(solution.rtol),
        "iterations": int(solution.iterations),
        "relative_residual": float(solution.relative_residual),
        "kcl_max_residual": float(solution.kcl_max_residual),
        "kcl_worst_node": str(net.node_labels[solution.kcl_worst_node]),
        "power_balance": float(solution.power_balance),
        "power_delivered": float(solution.power_delivered),
        "power_absorbed_by_sources": float(solution.power_absorbed_by_sources),
        "power_dissipated": float(solution.power_dissipated),
        "notes": _string_list(solution.notes),
        "method_reason": str(solution.method_reason),
    }
    if solution.unknowns is not None:
        attrs["unknowns"] = int(solution.unknowns)
    if input_path is not None:
        attrs["input_file"] = Path(input_path).name
        attrs["input_sha256"] = (file_sha256(input_path) if input_sha256 is None
                                 else input_sha256.result())
    return attrs


def write_solution(path, solution: Solution, *, input_path=None, force: bool = False,
                   extra: dict | None = None, input_sha256=None, setup=None) -> float:
    """Store a solution in a new HDF5 file, atomically.

    Parameters
    ----------
    path : str or Path
        The file to create.
    solution : Solution
        From :func:`ohmgraph.engine.solve`; its ``timings`` are stored in ``/timings``.
    input_path : str or Path, optional
        The network file the solution came from; its name and SHA-256 are recorded.
    input_sha256 : concurrent.futures.Future, optional
        That file's SHA-256 (:func:`file_sha256`) being computed in another thread since the
        file was read; by default it is computed here.
    force : bool
        Replace an existing file.
    extra : dict, optional
        Optional datasets by name (keys of :data:`OPTIONAL_DATASETS`).
    setup : KeptSetup, optional
        The solver set-up to keep (:meth:`Solution.kept_setup
        <ohmgraph.engine.solve.Solution.kept_setup>`), written as ``/setup``.

    Returns
    -------
    float
        Seconds spent writing, also stored as the ``store`` timing in the file.

    Raises
    ------
    OutputRefused
        If ``path`` exists and ``force`` is false, its folder does not exist, or it cannot be
        written. Nothing is left behind in either case.
    """
    with solution_file(path, solution.network, solution.report, force=force) as output:
        return output.finish(solution, input_path=input_path, extra=extra,
                             input_sha256=input_sha256, setup=setup)


@contextlib.contextmanager
def solution_file(path, network: Network, report=None, *, force: bool = False,
                  extra: dict | None = None, after=None):
    """Start writing the solution file of ``network`` before it is solved.

    Yields a :class:`SolutionWriter` that is already storing what the solve does not change
    (labels, names, kinds, endpoints, values, the check findings of ``report`` and the
    ``extra`` datasets given here, such as ratings and the node table) in a thread of its own;
    the block must end with :meth:`SolutionWriter.finish`. Leaving the block by an exception
    (a failed solve, an interrupt) stops the writer after its current dataset and removes the
    temporary file (:func:`ohmgraph.io.atomic.atomic_output`). With ``after`` (a
    :class:`concurrent.futures.Future`, such as the input's SHA-256 being computed) the writer
    starts once it is done, so that the two take turns on one core instead of taking the
    solver's.

    Raises
    ------
    OutputRefused
        As :func:`write_solution`: the file cannot be created or written, or exists without
        ``force``; nothing is left behind.
    """
    try:
        with atomic_output(path, force) as temporary:
            writer = SolutionWriter(temporary, network, report, extra or {}, after)
            try:
                yield writer
            except BaseException:
                writer.abandon()
                raise
            if not writer.finished:
                writer.abandon()
                raise RuntimeError("solution_file: the block ended without finish()")
    except OSError as error:
        raise OutputRefused(f"{path}: cannot be written ({error})") from error


class _Stopped(Exception):
    """The writer was told to stop (the run is being abandoned)."""


class SolutionWriter:
    """A solution file written by a thread of its own: every HDF5 call on it happens there.

    The network's datasets go first, while the caller solves: gzip and the HDF5 library
    release the interpreter lock, so on a multi-core machine they cost the run almost nothing
    (on the 1000 x 1000 lattice of ``benchmarks/bench_vs_script.py``, 0.2 s of the 0.3 s the
    store took after the solve). Signals reach only the main thread, which here never waits
    inside HDF5, so an interrupt during the solve is acted on at once. Made by
    :func:`solution_file`.
    """

    def __init__(self, temporary: Path, network: Network, report, extra: dict, after=None):
        self.network = network
        self.finished = False
        self._stop = threading.Event()
        self._files = contextlib.ExitStack()
        self._thread = ThreadPoolExecutor(1, thread_name_prefix="ohmgraph-store")
        self._h5 = None
        self._begun = self._thread.submit(self._begin, temporary, report, extra, after)

    def _put(self, group: h5py.Group, name: str, data) -> None:
        if self._stop.is_set():
            raise _Stopped
        _put(group, name, data)

    def _begin(self, temporary: Path, report, extra: dict, after) -> None:
        """(writer thread) Create the file; store the network, findings and ``extra``."""
        if after is not None:
            concurrent.futures.wait([after])
        net = self.network
        self._h5 = self._files.enter_context(
            create_hdf5(temporary, track_order=True, **FILE_OPTIONS))
        nodes = self._h5.create_group("nodes")
        self._put(nodes, "label", net.node_labels)
        branches = self._h5.create_group("branches")
        self._put(branches, "name", net.branch_names)
        self._put(branches, "kind", np.array(KIND_LETTERS, "S1")[net.kind])
        self._put(branches, "from", net.from_node)
        self._put(branches, "to", net.to_node)
        self._put(branches, "value", net.value)
        self._put_extra(extra)
        if self._stop.is_set():
            raise _Stopped
        _write_findings(self._h5.create_group("checks"), report.findings if report else [],
                        report.summary if report else {})

    def _put_extra(self, extra: dict) -> None:
        for name, data in extra.items():
            group, dataset = name.split("/")
            self._put(self._h5.require_group(group), dataset, data)

    def _end(self, solution: Solution, extra: dict, setup, root_attrs: dict,
             start: float) -> float:
        """(writer thread) Store the solution's datasets, ``/setup``, timings and provenance."""
        h5 = self._h5
        self._put(h5["nodes"], "voltage", solution.node_voltage)
        branches = h5["branches"]
        self._put(branches, "current", solution.branch_current)
        self._put(branches, "voltage", solution.branch_voltage)
        self._put(branches, "power", solution.branch_power)
        self._put(branches, "current_determined", np.asarray(solution.current_determined, bool))
        self._put_extra(extra)
        if setup is not None:
            write_setup(h5, setup)
        timings = h5.create_group("timings", track_order=True)
        timings.attrs["units"] = "s"
        for stage, seconds in solution.timings.items():
            timings.attrs[stage] = float(seconds)
        elapsed = time.perf_counter() - start
        timings.attrs["store"] = elapsed
        h5.attrs.update(root_attrs)
        seal_attributes(h5)
        return elapsed

    def finish(self, solution: Solution, *, input_path=None, extra: dict | None = None,
               input_sha256=None, setup=None) -> float:
        """Store ``solution`` (of this writer's network) and close the file; the block of
        :func:`solution_file` then publishes it. Arguments as :func:`write_solution`'s.

        Returns
        -------
        float
            Seconds the run spent here (waiting for the network's datasets included), also
            stored as the ``store`` timing in the file.
        """
        if solution.network is not self.network:
            raise ValueError("finish: the solution is of another network than the file's")
        start = time.perf_counter()
        self._begun.result()
        root_attrs = _root_attrs(solution, input_path, input_sha256)
        elapsed = self._thread.submit(self._end, solution, extra or {}, setup, root_attrs,
                                      start).result()
        checkpoint("store")
        self._thread.submit(self._files.close).result()
        self.finished = True
        self._thread.shutdown()
        return elapsed

    def abandon(self) -> None:
        """Stop after the current dataset and close the file, ignoring its errors (the caller
        removes it); nothing to do once :meth:`finish` has closed it."""
        if self.finished:
            return
        self._stop.set()

        def close_quietly():
            with contextlib.suppress(Exception):
                self._files.close()

        self._thread.submit(close_quietly)
        self._thread.shutdown(wait=True)


# ---------------------------------------------------------------------------- reading
def _plain(value):
    if isinstance(value, np.ndarray):
        return [_plain(v) for v in value.tolist()]
    if isinstance(value, bytes):
        return value.decode("utf-8")
    if isinstance(value, np.generic):
        return value.item()
    return value


def _dataset(h5: h5py.File, name: str, path) -> np.ndarray:
    data = read_dataset(h5[name], path)
    if data.dtype.kind == "S":
        return decode_strings(data)
    return data


def _read_findings(h5: h5py.File, path) -> tuple[list, dict]:
    if "checks" not in h5:
        return [], {}
    group = h5["checks"]
    try:
        codes, severities, messages = (_dataset(group, n, path).tolist()
                                       for n in ("code", "severity", "message"))
        nodes, node_offsets, branches, branch_offsets = (
            read_dataset(group[n], path)
            for n in ("nodes", "node_offsets", "branches", "branch_offsets"))
    except KeyError as error:
        raise InputError(f"{path}: /checks is incomplete ({error})") from error
    findings = [Finding(severity, code, message,
                        nodes[node_offsets[k]:node_offsets[k + 1]].astype(np.int64),
                        branches[branch_offsets[k]:branch_offsets[k + 1]].astype(np.int64))
                for k, (code, severity, message) in enumerate(zip(codes, severities, messages))]
    summary = _unflatten({key: _plain(value) for key, value in group.attrs.items()
                          if key != "description"})
    return findings, summary


def _open(path) -> h5py.File:
    if not Path(path).exists():
        raise InputError(f"{path}: no such file")
    if not Path(path).is_file():
        raise InputError(f"{path}: not a file")
    try:
        return h5py.File(path, "r")
    except OSError as error:
        raise InputError(f"{path}: not an HDF5 file ({error})") from error


def _is_number(value) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool)


def _check_types(path, attrs: dict) -> None:
    """Raise :class:`InputError` if a required root attribute has the wrong type."""
    for name in REQUIRED_ATTRIBUTES:
        text = name in TEXT_ATTRIBUTES
        if not (isinstance(attrs[name], str) if text else _is_number(attrs[name])):
            raise InputError(f"{path}: root attribute {name!r} is {attrs[name]!r}, expected "
                             + ("text" if text else "a number"))
    notes = attrs.get("notes", [])
    if not (isinstance(notes, list) and all(isinstance(note, str) for note in notes)):
        raise InputError(f"{path}: root attribute 'notes' is {notes!r}, expected a list of text")


def _check_layout(path, h5: h5py.File, attrs: dict) -> None:
    """Refuse unknown layout versions; from version 2 on, check the attribute digest."""
    if check_layout_version(str(path), attrs) >= 2:
        check_attributes(h5, path)


def _checked_attrs(h5: h5py.File, path) -> dict:
    """The root attributes of an open solution file, after checking that every required
    dataset and attribute is there, the layout version, the attribute digest and the lengths."""
    missing = [name for name in REQUIRED_DATASETS if name not in h5]
    if missing:
        raise InputError(f"{path}: not an ohmgraph solution file: missing dataset "
                         f"/{missing[0]}" + (f" and {len(missing) - 1} more" if len(missing) > 1
                                              else ""))
    attrs = {key: _plain(value) for key, value in h5.attrs.items()}
    absent = [name for name in REQUIRED_ATTRIBUTES if name not in attrs]
    if absent:
        raise InputError(f"{path}: not an ohmgraph solution file: missing root attribute "
                         f"{absent[0]!r}")
    _check_types(path, attrs)
    _check_layout(path, h5, attrs)
    _check_lengths(path, h5)
    return attrs


def _read_arrays(h5: h5py.File, path, names=REQUIRED_DATASETS) -> tuple:
    """Attributes, arrays (the required ``names``, the optional ones present), findings and
    timings of an open solution file, checked for damage."""
    attrs = _checked_attrs(h5, path)
    data = {name: _dataset(h5, name, path) for name in names}
    extra = {name: _dataset(h5, name, path) for name in OPTIONAL_DATASETS if name in h5}
    findings, check_summary = _read_findings(h5, path)
    timings = ({stage: _plain(seconds) for stage, seconds in h5["timings"].attrs.items()
                if stage != "units"} if "timings" in h5 else {})
    return attrs, data, extra, findings, check_summary, timings


def _check_lengths(path, h5: h5py.File) -> None:
    """Every ``/nodes`` and every ``/branches`` array is one-dimensional, of one length."""
    for group in ("nodes", "branches"):
        names = [name for name in REQUIRED_DATASETS if name.startswith(f"{group}/")]
        shapes = {name: h5[name].shape for name in names}
        first = names[0]
        for name, shape in shapes.items():
            if len(shape) != 1 or shape != shapes[first]:
                raise InputError(f"{path}: /{name} has shape {shape}, but /{first} has "
                                 f"{shapes[first]}: the file is damaged or not ohmgraph's")


BRANCH_RESULTS = ("branches/current", "branches/voltage", "branches/power",
                  "branches/current_determined")


def read_solution(path, branch_results: bool = True) -> StoredSolution:
    """Read a solution written by :func:`write_solution` (any layout version up to
    :data:`~ohmgraph.io.layout.LAYOUT_VERSION`).

    With ``branch_results=False`` the branch currents, voltages, powers and
    ``current_determined`` are not read (they are None): what a re-solve from the stored
    network needs, in about two thirds of the time at 10^6 branches.

    Raises
    ------
    InputError
        If the file is missing, is not HDF5, is damaged (a failed checksum, attributes that do
        not match their digest, sizes its stored bytes cannot hold), lacks a required dataset
        or attribute, or its arrays do not fit together; the message names the file and what
        is wrong.
    """
    with _open(path) as h5:
        try:
            names = [name for name in REQUIRED_DATASETS
                     if branch_results or name not in BRANCH_RESULTS]
            attrs, data, extra, findings, check_summary, timings = _read_arrays(h5, path, names)
        except (OSError, RuntimeError, KeyError, ValueError) as error:
            raise InputError(f"{path}: damaged: HDF5 cannot read its structure ({error})") \
                from None
    for names, kinds, what in ((INDEX_DATASETS, "iu", "integer"),
                               (NUMBER_DATASETS, "iuf", "number")):
        for name in (name for name in names if name in data):
            if data[name].dtype.kind not in kinds:
                raise InputError(f"{path}: /{name} holds {data[name].dtype} values, "
                                 f"expected {what}s")
    if not all(_is_number(seconds) for seconds in timings.values()):
        raise InputError(f"{path}: /timings has an attribute that is not a number")
    labels = data["nodes/label"]
    reference = np.flatnonzero(labels == attrs["reference"])
    if reference.size == 0:
        raise InputError(f"{path}: reference node {attrs['reference']!r} is not in /nodes/label")
    try:
        network = Network(labels, data["branches/name"], kind_codes(data["branches/kind"]),
                          data["branches/from"], data["branches/to"], data["branches/value"],
                          int(reference[0]))
    except ValueError as error:
        raise InputError(f"{path}: /branches is inconsistent: {error}") from error
    _check_extra(path, extra, network)
    results = ({name: data[name].astype(bool if name.endswith("determined") else np.float64)
                for name in BRANCH_RESULTS} if branch_results else dict.fromkeys(BRANCH_RESULTS))
    return StoredSolution(
        network=network, node_voltage=data["nodes/voltage"].astype(np.float64),
        branch_current=results["branches/current"], branch_voltage=results["branches/voltage"],
        branch_power=results["branches/power"],
        current_determined=results["branches/current_determined"],
        attrs=attrs, extra=extra, findings=findings, check_summary=check_summary, timings=timings)


NODE_TABLE_DATASETS = ("nodes/x", "nodes/y", "nodes/layer")


def read_warm_start(path) -> WarmStart:
    """Read what a re-solve starts from — node labels and voltages, node table, attributes,
    check findings and summary — from a solution file, checked as :func:`read_solution` checks
    it (layout, attribute digest, dataset lengths, checksums of what is read) but without
    reading the branch datasets: at 10^6 branches a third of the time of a whole read.

    Raises
    ------
    InputError
        As :func:`read_solution`.
    """
    with _open(path) as h5:
        try:
            attrs = _checked_attrs(h5, path)
            labels = _dataset(h5, "nodes/label", path)
            voltage = _dataset(h5, "nodes/voltage", path)
            extra = {name: _dataset(h5, name, path) for name in NODE_TABLE_DATASETS
                     if name in h5}
            findings, check_summary = _read_findings(h5, path)
        except (OSError, RuntimeError, KeyError, ValueError) as error:
            raise InputError(f"{path}: damaged: HDF5 cannot read its structure ({error})") \
                from None
    if voltage.dtype.kind not in "iuf":
        raise InputError(f"{path}: /nodes/voltage holds {voltage.dtype} values, expected "
                         "numbers")
    for name, data in extra.items():
        if data.shape != labels.shape:
            raise InputError(f"{path}: /{name} has shape {data.shape}, expected "
                             f"{labels.shape}")
    return WarmStart(labels, voltage.astype(np.float64), extra, attrs, findings, check_summary)


def _check_extra(path, extra: dict, network: Network) -> None:
    """Raise :class:`InputError` when an optional dataset does not fit the network."""
    lengths = {"nodes": network.n_nodes, "branches": network.n_branches,
               "nets": extra["nets/nominal"].shape[0] if "nets/nominal" in extra else None}
    for name, data in extra.items():
        along = OPTIONAL_DATASETS[name]
        if along and data.shape[:1] != (lengths[along],):
            raise InputError(f"{path}: /{name} has shape {data.shape}, expected "
                             f"({lengths[along]},...)")
        if name != "nodes/layer" and name != "nets/threshold" and data.dtype.kind not in "iufb":
            raise InputError(f"{path}: /{name} holds {data.dtype} values, expected numbers")


def voltages_by_label(stored: StoredSolution | WarmStart, net: Network) -> tuple[np.ndarray, int]:
    """The stored node voltages of the nodes of ``net`` (NaN where the stored solution has no
    node of that label), and how many nodes matched; for a warm start."""
    import pandas as pd

    stored_labels = stored.node_labels
    if np.array_equal(stored_labels, net.node_labels[:stored_labels.size]):   # the usual case
        voltage = np.full(net.n_nodes, np.nan)
        voltage[:stored_labels.size] = stored.node_voltage
        return voltage, int(stored_labels.size)
    where = pd.Index(stored_labels).get_indexer(net.node_labels)
    voltage = np.full(net.n_nodes, np.nan)
    voltage[where >= 0] = stored.node_voltage[where[where >= 0]]
    return voltage, int(np.count_nonzero(where >= 0))
