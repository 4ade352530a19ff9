"""The one writer of HDF5 result groups: resistance tables, comparisons, diagnoses, tolerance
analyses. Written atomically, with provenance, stamped with the layout version.

A result is one group (``/resistance``, ``/comparison``, ``/diagnosis`` or ``/tolerance``) of
equal-length column datasets (one row per pair, reading, hypothesis member or observed
quantity), extra matrices where a result has them (``/tolerance/sensitivity``), and attributes:

* on the group: ``layout_version`` (:data:`ohmgraph.io.layout.LAYOUT_VERSION`), provenance —
  ``tool_version``, ``created`` (ISO 8601 UTC), ``command`` and ``command_options`` (the
  command's options as JSON text) and, for every input file, its name and SHA-256
  (``network_file``, ``network_sha256``, ...) — and the result's numbers (summary counts,
  chi-square values, timings in seconds) with dotted names for nested values;
* on every column: ``units`` where it has one.

The group goes either into a new file (whose root also carries the provenance,
``layout_version`` and ``result``, the group name) or, with ``append``, into an existing HDF5
file such as the solution store written by ``ohmgraph solve``. Numbers keep full precision.

Strings are fixed-length UTF-8 (readable by any HDF5 tool). The file goes through
:func:`ohmgraph.io.atomic.atomic_output`: it appears complete or not at all.
"""

from __future__ import annotations

import contextlib
import json
import shutil
from datetime import datetime, timezone
from pathlib import Path

import h5py
import numpy as np

from ohmgraph.io.atomic import atomic_output, exclusive
from ohmgraph.io.errors import InputError, OutputRefused
from ohmgraph.io.hdf5_integrity import (DIGEST_ATTRIBUTE, FILE_OPTIONS, check_attributes,
                                        check_file, dataset_options, read_dataset,
                                        seal_attributes)
from ohmgraph.io.hdf5_output import create_hdf5
from ohmgraph.io.jsonout import jsonable
from ohmgraph.io.layout import LAYOUT_VERSION, check_layout_version
from ohmgraph.io.store import (decode_strings, encode_strings, file_sha256, flatten_attrs,
                               tool_version)

# Defaults the commands set for themselves, not options a user gave.
INTERNAL_ARGUMENTS = ("command_group", "output_formats")


def _plain_array(values) -> np.ndarray:
    data = np.asarray(values)
    if data.dtype.kind in "UO":
        encoded = encode_strings(data.astype(str))
        return encoded.view(h5py.string_dtype("utf-8", encoded.dtype.itemsize))
    return data


def _set_attrs(target, values: dict) -> None:
    for key, value in flatten_attrs(values).items():
        if isinstance(value, (list, tuple)):
            value = _plain_array([str(v) for v in value]) if value else np.empty(0, "S1")
        target.attrs[key] = value


def provenance(sources: dict | None = None, command: str | None = None,
               options: dict | None = None) -> dict:
    """Provenance attributes of a result.

    Parameters
    ----------
    sources : dict of str to path, optional
        Input files by role (``{"network": "net.csv"}``): each gives ``ROLE_file`` (the name)
        and ``ROLE_sha256``.
    command : str, optional
        The command that made the result.
    options : dict, optional
        Its options; stored as JSON text in ``command_options``.

    Returns
    -------
    dict
        ``layout_version``, ``tool_version``, ``created`` and the above.
    """
    attrs = {"layout_version": LAYOUT_VERSION, "tool_version": tool_version(),
             "created": datetime.now(timezone.utc).isoformat(timespec="seconds")}
    if command is not None:
        attrs["command"] = command
    if options is not None:
        attrs["command_options"] = json.dumps(jsonable(options), sort_keys=True)
    for role, source in (sources or {}).items():
        attrs[f"{role}_file"] = Path(source).name
        attrs[f"{role}_sha256"] = file_sha256(source)
    return attrs


def command_options(args) -> dict:
    """The plain options of a parsed command line (functions and internal defaults left out)."""
    return {key: value for key, value in vars(args).items()
            if key not in INTERNAL_ARGUMENTS and not callable(value)
            and isinstance(value, (str, int, float, bool, list, tuple, type(None)))}


def refuse_existing_group(path, name: str, force: bool) -> None:
    """For ``append``: the file must be readable HDF5; an existing group needs ``force``."""
    try:
        if Path(path).is_dir():
            raise OutputRefused(f"{path}: is a folder, not an HDF5 file")
        with h5py.File(path, "r") as h5:
            check_file(h5, path)
            present = name in h5
    except FileNotFoundError:
        raise OutputRefused(f"{path}: does not exist (--append adds to an existing HDF5 "
                            "file)") from None
    except (OSError, RuntimeError, ValueError) as error:
        raise OutputRefused(f"{path}: not a readable HDF5 file ({error})") from None
    if present and not force:
        raise OutputRefused(f"{path}: already holds '/{name}' (use --force to replace it)")


def write_results(path, name: str, columns: dict, *, units: dict | None = None,
                  attrs: dict | None = None, matrices: dict | None = None,
                  sources: dict | None = None, command: str | None = None,
                  options: dict | None = None, force: bool = False,
                  append: bool = False) -> None:
    """Write one result group to an HDF5 file, atomically.

    Parameters
    ----------
    path : str or Path
    name : str
        Group name (``resistance``, ``comparison``, ``diagnosis``, ``tolerance``).
    columns : dict of str to array_like
        Equal-length columns.
    units : dict of str to str, optional
        Units of some columns (and matrices).
    attrs : dict, optional
        Group attributes (nested dicts become dotted names; None values are skipped).
    matrices : dict of str to ndarray, optional
        Further datasets of any shape.
    sources, command, options
        Provenance, see :func:`provenance`.
    force : bool
        Overwrite an existing file (or, with ``append``, an existing group of that name).
    append : bool
        Add the group to an existing HDF5 file (such as a stored solution) instead of creating
        a new file: the file is copied, extended and renamed over the original, so it is never
        seen half-written. Appending runs hold the file's lock
        (:func:`ohmgraph.io.atomic.exclusive`) from reading it to publishing it, so two at once
        both land.

    Raises
    ------
    OutputRefused
        If the file exists without ``force`` (or, with ``append``, is missing, is not HDF5 or
        already holds the group without ``force``), or cannot be written.
    """
    units = units or {}
    with exclusive(path) if append else contextlib.nullcontext():
        _write_results(path, name, columns, units, attrs, matrices,
                       provenance(sources, command, options), force, append)


def _write_results(path, name, columns, units, attrs, matrices, stamp, force, append) -> None:
    """The body of :func:`write_results` (under the file's lock when appending)."""
    if append:
        refuse_existing_group(path, name, force)
    try:
        with atomic_output(path, force or append) as temporary:
            if append:
                shutil.copyfile(path, temporary)
            with create_hdf5(temporary, "a" if append else "w", **FILE_OPTIONS) as h5:
                if not append:
                    h5.attrs.update({**stamp, "result": name})
                    seal_attributes(h5)
                if name in h5:
                    del h5[name]
                group = h5.create_group(name)
                for column, values in {**columns, **(matrices or {})}.items():
                    data = _plain_array(values)
                    dataset = group.create_dataset(column, data=data, **dataset_options(data))
                    if column in units:
                        dataset.attrs["units"] = units[column]
                _set_attrs(group, {**stamp, **(attrs or {})})
    except OSError as error:
        raise OutputRefused(f"{path}: cannot be written ({error})") from None


def read_results(path, name: str) -> tuple[dict, dict, dict]:
    """Read back a result group of any layout version up to :data:`LAYOUT_VERSION`.

    Returns
    -------
    (datasets, group attributes, root attributes) : (dict, dict, dict)

    Raises
    ------
    InputError
        If the file is not HDF5, has no such group, was written with a newer layout, or is
        damaged (a failed checksum, root attributes that do not match their digest, a size the
        stored bytes cannot hold).
    """
    try:
        h5 = h5py.File(path, "r")
    except OSError as error:
        raise InputError(f"{path}: not a readable HDF5 file ({error})") from None
    with h5:
        if name not in h5:
            raise InputError(f"{path}: no group '/{name}' (found {', '.join(h5.keys())})")
        check_layout_version(f"{path}: /{name}", h5[name].attrs)
        if DIGEST_ATTRIBUTE in h5.attrs:
            check_attributes(h5, path)
        datasets = {}
        for key, dataset in h5[name].items():
            data = read_dataset(dataset, path)
            datasets[key] = decode_strings(data) if data.dtype.kind == "S" else data
        return datasets, dict(h5[name].attrs), dict(h5.attrs)


RESULT_GROUPS = ("comparison", "diagnosis", "tolerance", "readings_plan")


def result_groups(path) -> list:
    """Names of the result groups an HDF5 file holds (empty when it holds none or is not a
    readable HDF5 file: the solution reader then reports what is wrong)."""
    try:
        with h5py.File(path, "r") as h5:
            return [name for name in RESULT_GROUPS if isinstance(h5.get(name), h5py.Group)]
    except (OSError, ValueError):
        return []


__all__ = ["write_results", "read_results", "refuse_existing_group", "result_groups",
           "RESULT_GROUPS", "provenance", "command_options"]
