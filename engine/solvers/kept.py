"""A solver set-up kept as plain arrays, so that another process can rebuild it instead of
setting up again, and the fingerprint that ties it to the matrix it was built for.

A back end that can keep its set-up (``SPDSolver.keeps_setup``) exports it with
``export_setup()`` and rebuilds it when constructed with ``kept=``. The fingerprint names the
matrix: its size and number of entries, SHA-256 digests of its sparsity pattern and of its
values, and a digest of what its unknowns stand for (``placement``: for a network, the
free supernodes and the node-to-supernode map), so that a set-up is used only for a matrix of
the same unknowns and pattern (:func:`mismatch`). A matrix whose values differ (a network
with some resistor values changed) may use it as a preconditioner: the solve's residual check
decides whether it served.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field

import numpy as np
import scipy.sparse as sp


@dataclass(frozen=True)
class KeptSetup:
    """A back end's set-up as plain arrays.

    Attributes
    ----------
    method : str
        The back end (a key of :data:`~ohmgraph.engine.solvers.SOLVERS`).
    settings : dict
        The back end's settings the set-up was made with (text and numbers); a back end whose
        settings differ does not use it.
    arrays : dict
        Name → ndarray (names may contain ``/``, as paths).
    fingerprint : dict
        :func:`fingerprint` of the matrix it was built for.
    """

    method: str
    settings: dict
    arrays: dict
    fingerprint: dict = field(default_factory=dict)


def _digest(*arrays) -> str:
    """Hex SHA-256 of the arrays' dtypes, shapes and bytes, in order."""
    digest = hashlib.sha256()
    for array in arrays:
        array = np.ascontiguousarray(array)
        digest.update(f"{array.dtype.str}{array.shape};".encode())
        digest.update(array.view(np.uint8).reshape(-1))
    return digest.hexdigest()


def fingerprint(matrix, placement=()) -> dict:
    """What identifies ``matrix``: ``unknowns``, ``entries``, ``pattern_sha256`` (row
    pointers and column indices as int64), ``values_sha256`` and ``placement_sha256`` (the
    integer arrays of ``placement``, as int64).

    The matrix is taken in canonical CSR form (sorted indices, no duplicates), as
    :func:`~ohmgraph.engine.formulation.assemble` builds it.
    """
    matrix = sp.csr_matrix(matrix)
    if not matrix.has_canonical_format:
        matrix = matrix.copy()
        matrix.sum_duplicates()
    return {
        "unknowns": int(matrix.shape[0]),
        "entries": int(matrix.nnz),
        "pattern_sha256": _digest(matrix.indptr.astype(np.int64, copy=False),
                                  matrix.indices.astype(np.int64, copy=False)),
        "values_sha256": _digest(matrix.data.astype(np.float64, copy=False)),
        "placement_sha256": _digest(*(np.asarray(a).astype(np.int64, copy=False)
                                      for a in placement)),
    }


def mismatch(kept: dict, here: dict) -> str | None:
    """Why a set-up with fingerprint ``kept`` does not fit the matrix of fingerprint
    ``here`` (in words), or None when it fits: same unknowns, entries, pattern and placement.
    Values may differ."""
    built = kept.get("unknowns")
    if built != here["unknowns"]:
        built = f"{built:,}" if isinstance(built, int) else repr(built)
        return f"it was built for {built} unknowns, this system has {here['unknowns']:,}"
    if kept.get("placement_sha256") != here["placement_sha256"]:
        return "its unknowns stand for other nodes (another set of free nodes or supernodes)"
    if (kept.get("entries") != here["entries"]
            or kept.get("pattern_sha256") != here["pattern_sha256"]):
        return "its matrix has another sparsity pattern (other branches)"
    return None
