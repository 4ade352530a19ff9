"""The kept solver set-up in a solution file: the optional ``/setup`` group.

``ohmgraph solve NET -o BASE.h5 --keep-setup`` stores the solver's set-up with the solution
(:class:`~ohmgraph.engine.solvers.kept.KeptSetup`), so that a later run from ``BASE.h5``
(``--start-from``) can rebuild it instead of setting up again. Layout (``amg-cg``, the only
back end that keeps its set-up):

* ``/setup/sizes``: unknowns per multigrid level, finest first;
* ``/setup/A{k}/data``, ``indices``, ``indptr``: the CSR coarse operator of level ``k >= 1``;
* ``/setup/P{k}/data``, ``indices``, ``indptr``: the CSR interpolation from level ``k + 1`` to
  level ``k`` (``sizes[k] x sizes[k+1]``); restriction is its transpose;
* attributes: ``method``, ``layout_version``, ``settings.*`` (what the hierarchy was built
  with), ``fingerprint.*`` (unknowns, entries, and the SHA-256 of the reduced matrix's pattern,
  of its values and of its unknowns' placement, :func:`~ohmgraph.engine.solvers.kept.fingerprint`),
  ``description`` and ``attrs_sha256`` (their digest).

Every dataset is chunked with the Fletcher-32 checksum and gzip where it pays, as in the rest
of the file. A group that cannot be read (damaged, incomplete, another layout) is reported in
a note and not used: the solver then sets up afresh, and nothing else of the file depends on it.
"""

from __future__ import annotations

import h5py
import numpy as np

from ohmgraph.engine.solvers.kept import KeptSetup
from ohmgraph.io.errors import InputError
from ohmgraph.io.hdf5_integrity import (check_attributes, dataset_options, read_dataset,
                                        seal_attributes)
from ohmgraph.io.layout import LAYOUT_VERSION, check_layout_version

GROUP = "setup"
DESCRIPTION = ("solver set-up kept with the solution (--keep-setup): multigrid levels as CSR "
               "arrays, the settings they were built with and the fingerprint of the reduced "
               "matrix they were built for")
FINGERPRINT_KEYS = ("unknowns", "entries", "pattern_sha256", "values_sha256", "placement_sha256")


def write_setup(h5: h5py.File, kept: KeptSetup) -> None:
    """Write ``kept`` as the ``/setup`` group of an open solution file."""
    group = h5.create_group(GROUP)
    for name, data in kept.arrays.items():
        data = np.asarray(data)
        group.create_dataset(name, data=data, **dataset_options(data))
    group.attrs["method"] = kept.method
    group.attrs["layout_version"] = LAYOUT_VERSION
    group.attrs["description"] = DESCRIPTION
    for prefix, values in (("settings", kept.settings), ("fingerprint", kept.fingerprint)):
        for key, value in values.items():
            group.attrs[f"{prefix}.{key}"] = value
    seal_attributes(group)


def _plain(value):
    if isinstance(value, bytes):
        return value.decode("utf-8")
    if isinstance(value, np.generic):
        return value.item()
    return value


def read_setup(path) -> tuple[KeptSetup | None, str | None]:
    """The kept set-up of the solution file ``path``, or None with a note saying why not.

    Never raises for a bad ``/setup`` group: damage, a missing array, a newer layout or
    arrays of the wrong type give None and a note, and the caller sets up afresh. (The file
    itself has been read as a solution before; a file that cannot be opened gives a note too.)
    """
    try:
        with h5py.File(path, "r") as h5:
            if GROUP not in h5:
                return None, (f"{path} holds no kept solver set-up (solve it with --keep-setup "
                              "to keep one)")
            return _read_group(h5[GROUP], path), None
    except (InputError, OSError, KeyError, ValueError, TypeError) as error:
        return None, f"{path}: /{GROUP} not used: {error}"


def _read_group(group, path) -> KeptSetup:
    if not isinstance(group, h5py.Group):
        raise ValueError("it is not a group")
    check_layout_version(f"{path}: /{GROUP}", group.attrs)
    check_attributes(group, path)
    attrs = {key: _plain(value) for key, value in group.attrs.items()}
    settings = {key.split(".", 1)[1]: value for key, value in attrs.items()
                if key.startswith("settings.")}
    fingerprint = {key.split(".", 1)[1]: value for key, value in attrs.items()
                   if key.startswith("fingerprint.")}
    missing = [key for key in FINGERPRINT_KEYS if key not in fingerprint]
    if missing or not isinstance(attrs.get("method"), str):
        raise ValueError(f"its attributes are incomplete (missing {missing or ['method']})")
    arrays = {}

    def take(name, item):
        if isinstance(item, h5py.Dataset):
            data = read_dataset(item, path)
            if data.dtype.kind not in "iuf" or data.ndim != 1:
                raise ValueError(f"/{GROUP}/{name} holds {data.dtype} values of shape "
                                 f"{data.shape}, expected a 1-D array of numbers")
            arrays[name] = data

    group.visititems(take)
    if "sizes" not in arrays:
        raise ValueError("it has no /setup/sizes")
    return KeptSetup(attrs["method"], settings, arrays, fingerprint)
