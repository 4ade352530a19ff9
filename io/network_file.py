"""The HDF5 network file: a checked network that any process can read in slices.

Layout (plain HDF5 datasets, strings as fixed-length UTF-8 like the solution store):

* ``/nodes/label``; ``/nodes/unknown`` (int64: unknown of the node's supernode, numbered in a
  bandwidth-reducing order so contiguous blocks of unknowns are compact regions; -1 where the
  potential is held), ``/nodes/held`` (held potential of the node's supernode, NaN where free),
  ``/nodes/offset`` (``V(node) - U[supernode]``), ``/nodes/supernode`` and ``/nodes/root``;
* ``/branches/name``, ``kind`` (letters R, V, I), ``from``, ``to`` (indices into ``/nodes``),
  ``value``;
* ``/contraction``: ``source_branches``, ``tree``, ``mismatch`` (the contraction of voltage
  sources and ideal connections) and ``undetermined`` (branches whose current a loop of them
  leaves free);
* ``/checks``: the check findings and summary, as in the solution store;
* root attributes: ``layout`` (``ohmgraph network``), ``layout_version``, ``reference``,
  ``allow_floating``, ``unknowns``, provenance (tool version, input name and SHA-256, creation).

Only solvable networks are written, so the contraction is always usable. Every array is chunked
along its length, so reading rows ``start:stop`` touches only the chunks holding them.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path

import h5py
import numpy as np

from ohmgraph.engine.checks import CheckReport
from ohmgraph.engine.formulation import ReducedSystem
from ohmgraph.engine.network import KIND_LETTERS, Network, kind_codes
from ohmgraph.engine.ordering import node_unknowns
from ohmgraph.engine.recovery import undetermined_branches
from ohmgraph.io.atomic import atomic_output
from ohmgraph.io.errors import InputError, OutputRefused
from ohmgraph.io.store import (_put, _read_findings, _write_findings, decode_strings, file_sha256,
                               tool_version)

LAYOUT = "ohmgraph network"
LAYOUT_VERSION = 1
HDF5_SIGNATURE = b"\x89HDF\r\n\x1a\n"
BRANCH_COLUMNS = ("name", "kind", "from", "to", "value")
NODE_COLUMNS = ("label", "unknown", "held", "offset", "supernode", "root")
CONTRACTION_COLUMNS = ("source_branches", "tree", "mismatch", "undetermined")
_UNKNOWN_KIND = 255
_KIND_OF_BYTE = np.full(256, _UNKNOWN_KIND, np.uint8)
for _code, _letter in enumerate(KIND_LETTERS):
    _KIND_OF_BYTE[ord(_letter)] = _KIND_OF_BYTE[ord(_letter.lower())] = _code


def is_hdf5(path) -> bool:
    """True when the file starts with the HDF5 signature (HDF5 File Format Specification, 0)."""
    try:
        with open(path, "rb") as handle:
            return handle.read(len(HDF5_SIGNATURE)) == HDF5_SIGNATURE
    except OSError:
        return False


def write_network_file(path, net: Network, report: CheckReport, system: ReducedSystem, *,
                       allow_floating: bool = False, input_path=None,
                       force: bool = False) -> None:
    """Write a checked, solvable network with its contraction and unknown numbering, atomically.

    Raises
    ------
    OutputRefused
        If ``path`` exists without ``force`` or cannot be written; nothing is left behind.
    """
    numbering = node_unknowns(system)
    contraction = report.contraction
    attrs = {"layout": LAYOUT, "layout_version": LAYOUT_VERSION, "tool_version": tool_version(),
             "created": datetime.now(timezone.utc).isoformat(timespec="seconds"),
             "reference": net.reference_label, "allow_floating": bool(allow_floating),
             "unknowns": int(system.n_unknowns)}
    if input_path is not None:
        attrs["input_file"] = Path(input_path).name
        attrs["input_sha256"] = file_sha256(input_path)
    try:
        with (atomic_output(path, force) as temporary,
              h5py.File(temporary, "w", track_order=True) as h5):
            h5.attrs.update(attrs)
            nodes = h5.create_group("nodes")
            for name, data in (("label", net.node_labels), ("unknown", numbering.unknown),
                               ("held", numbering.held), ("offset", numbering.offset),
                               ("supernode", contraction.supernode),
                               ("root", contraction.root)):
                _put(nodes, name, data)
            branches = h5.create_group("branches")
            for name, data in (("name", net.branch_names),
                               ("kind", np.array(KIND_LETTERS)[net.kind]),
                               ("from", net.from_node), ("to", net.to_node),
                               ("value", net.value)):
                _put(branches, name, data)
            group = h5.create_group("contraction")
            for name, data in (("source_branches", contraction.source_branches),
                               ("tree", contraction.tree), ("mismatch", contraction.mismatch),
                               ("undetermined", undetermined_branches(net, contraction))):
                _put(group, name, data)
            _write_findings(h5.create_group("checks"), report.findings, report.summary)
    except OSError as error:
        raise OutputRefused(f"{path}: cannot be written ({error})") from error


# ---------------------------------------------------------------------------- reading
@dataclass(frozen=True)
class BranchSlice:
    """Rows ``start:stop`` of ``/branches`` (kind as codes)."""

    start: int
    stop: int
    kind: np.ndarray
    from_node: np.ndarray
    to_node: np.ndarray
    value: np.ndarray


class StoredNetwork:
    """An open HDF5 network file, read whole or in slices.

    Raises
    ------
    InputError
        If the file is missing, not HDF5, or not an ohmgraph network file of this layout.
    """

    def __init__(self, path):
        self.path = Path(path)
        if not self.path.is_file():
            raise InputError(f"{path}: " + ("not a file" if self.path.exists() else "no such file"))
        try:
            self._h5 = h5py.File(self.path, "r")
        except OSError as error:
            raise InputError(f"{path}: not an HDF5 file ({error})") from error
        layout = self._h5.attrs.get("layout")
        version = self._h5.attrs.get("layout_version")
        missing = [f"{group}/{name}" for group, names in
                   (("nodes", NODE_COLUMNS), ("branches", BRANCH_COLUMNS),
                    ("contraction", CONTRACTION_COLUMNS)) for name in names
                   if f"{group}/{name}" not in self._h5]
        if layout != LAYOUT or version != LAYOUT_VERSION or missing:
            self.close()
            what = f"missing /{missing[0]}" if missing else f"layout {layout!r} {version!r}"
            raise InputError(f"{path}: not an ohmgraph network file ({what}; write one with "
                             "'ohmgraph convert')")
        self.n_nodes = int(self._h5["nodes/label"].shape[0])
        self.n_branches = int(self._h5["branches/from"].shape[0])
        self.reference_label = str(self._h5.attrs["reference"])
        self.unknowns = int(self._h5.attrs["unknowns"])
        self.allow_floating = bool(self._h5.attrs["allow_floating"])

    def close(self) -> None:
        self._h5.close()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    def column(self, name: str, start: int = 0, stop: int | None = None) -> np.ndarray:
        """Rows ``start:stop`` of one dataset (``group/name``), strings decoded."""
        data = self._h5[name][start:stop]
        return decode_strings(data) if data.dtype.kind == "S" else data

    def rows(self, name: str, indices: np.ndarray) -> np.ndarray:
        """Entries of one dataset at increasing ``indices`` (an HDF5 point selection)."""
        return self._h5[name][np.asarray(indices, np.int64)] if len(indices) else \
            np.empty(0, self._h5[name].dtype)

    def branches(self, start: int, stop: int) -> BranchSlice:
        """Rows ``start:stop`` of the branch table."""
        raw = self._h5["branches/kind"][start:stop]
        if raw.dtype.kind == "S" and raw.dtype.itemsize == 1:
            # One letter per branch: a table lookup, many times faster than text upper-casing.
            kind = _KIND_OF_BYTE[raw.view(np.uint8)]
            bad = np.flatnonzero(kind == _UNKNOWN_KIND)
            if bad.size:
                raise InputError(f"{self.path}: /branches/kind: {bytes(raw[bad[0]])!r} at row "
                                 f"{start + bad[0]} is not a branch kind (R, V or I)")
        else:
            try:
                kind = kind_codes(self.column("branches/kind", start, stop))
            except ValueError as error:
                raise InputError(f"{self.path}: /branches/kind: {error}") from error
        return BranchSlice(start, stop, kind,
                           self.column("branches/from", start, stop).astype(np.int64),
                           self.column("branches/to", start, stop).astype(np.int64),
                           self.column("branches/value", start, stop).astype(np.float64))

    def checks(self) -> tuple[list, dict]:
        """The stored check findings and summary."""
        return _read_findings(self._h5, self.path)

    def network(self, ground: str | None = None) -> Network:
        """The whole network; ``ground`` names another reference node than the stored one."""
        labels = self.column("nodes/label")
        ground = self.reference_label if ground is None else str(ground)
        reference = np.flatnonzero(labels == ground)
        if reference.size == 0:
            raise InputError(f"{self.path}: reference node {ground!r} is not a node of the "
                             "network; name another with --ground")
        part = self.branches(0, self.n_branches)
        try:
            return Network(labels, self.column("branches/name"), part.kind, part.from_node,
                           part.to_node, part.value, int(reference[0]))
        except ValueError as error:
            raise InputError(f"{self.path}: /branches is inconsistent: {error}") from error


def read_stored_network(path, ground: str | None = None) -> Network:
    """The whole network stored in an HDF5 network file."""
    with StoredNetwork(path) as stored:
        return stored.network(ground)
