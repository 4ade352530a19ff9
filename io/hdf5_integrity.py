"""Damage and hostility checks for the HDF5 files ohmgraph writes and reads.

Writing:

* :func:`dataset_options`: every dataset is chunked and carries HDF5's Fletcher-32 checksum
  filter (part of every HDF5 build), so a changed byte in stored data fails its read; large
  datasets are gzip-compressed when a sample shows it pays (:func:`compresses`);
* :data:`FILE_OPTIONS`: the file format of HDF5 1.8 (``libver="v108"``), whose object headers
  and superblock carry checksums of their own and which every HDF5 since 1.8 reads;
* :func:`seal_attributes`: the root attribute ``attrs_sha256`` is the SHA-256 of all other root
  attributes (names, types and values as read back), so a changed attribute is found too.

Reading:

* :func:`check_attributes` recomputes that digest;
* :func:`check_declared_size` refuses a dataset whose declared size is not backed by stored
  bytes — at most :data:`MAX_EXPANSION` times its stored size, the most deflate can expand data
  (zlib's technical details: "the maximum compression factor is 1032:1") — before anything is
  allocated, so a crafted 10^12-entry dataset is refused at once;
* :func:`read_dataset` reads a dataset and turns a checksum failure into :class:`InputError`;
* :func:`check_file` checks a whole file, chunk by chunk (before ``--append`` adds to it).
"""

from __future__ import annotations

import hashlib
import json
import zlib

import h5py
import numpy as np

from .errors import InputError

DIGEST_ATTRIBUTE = "attrs_sha256"
CHUNK_ELEMENTS = 1 << 18
COMPRESS_FROM = 4096          # arrays shorter than this are chunked but not compressed
GZIP_LEVEL = 1
# gzip pays when a sample of this many leading elements, shuffled, deflates to at most this
# fraction of its size. Measured on the 1000 x 1000 grid's solution: labels, names, kinds,
# indices and resistances deflate to 0.5-1.2 %, so gzip costs little and saves nearly all;
# float64 voltages, currents and powers only to 58-84 %, at 10-40x the write time of the
# uncompressed array (0.14-0.44 s each for 1-3M entries), so they are stored uncompressed.
PROBE_ELEMENTS = 1 << 14
COMPRESS_BELOW = 0.5
MAX_EXPANSION = 1100          # declared bytes per stored byte, above deflate's 1032
FILE_OPTIONS = {"libver": ("v108", "v108")}


def compresses(data: np.ndarray) -> bool:
    """Whether gzip pays for ``data``: its first :data:`PROBE_ELEMENTS` elements, byte-shuffled
    as HDF5's shuffle filter does, deflate to at most :data:`COMPRESS_BELOW` of their size."""
    sample = np.ascontiguousarray(data.reshape(-1)[:PROBE_ELEMENTS])
    shuffled = sample.view(np.uint8).reshape(sample.size, sample.dtype.itemsize).T.tobytes()
    return len(zlib.compress(shuffled, GZIP_LEVEL)) <= COMPRESS_BELOW * len(shuffled)


def dataset_options(data: np.ndarray, probe: bool = True) -> dict:
    """``create_dataset`` options for ``data``: chunked, Fletcher-32, gzip when large and, with
    ``probe``, when :func:`compresses` says it pays (without ``probe`` — for a dataset created
    empty and filled later — whenever large).

    Strings must be fixed-length: HDF5 applies no filter to variable-length data.
    """
    if data.ndim == 0:
        raise ValueError("a scalar dataset cannot be chunked; store it as an attribute")
    options = {"fletcher32": True}
    if data.size == 0:
        options.update(chunks=(1,) * data.ndim, maxshape=(None,) * data.ndim)
    elif data.ndim == 1:
        options["chunks"] = (min(data.size, CHUNK_ELEMENTS),)
    else:
        options["chunks"] = True
    if data.size >= COMPRESS_FROM and (not probe or compresses(data)):
        options.update(compression="gzip", compression_opts=GZIP_LEVEL, shuffle=True)
    return options


def _plain(value):
    if isinstance(value, np.ndarray):
        return [_plain(v) for v in value.tolist()]
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    if isinstance(value, bytes):
        return value.decode("utf-8", "replace")
    if isinstance(value, np.generic):
        return _plain(value.item())
    if isinstance(value, float):
        return repr(value)        # exact, and NaN or infinity stay distinct
    return value


def attributes_digest(attrs) -> str:
    """SHA-256 of every attribute but the digest itself: name, type and value."""
    items = {name: [type(value).__name__, str(getattr(value, "dtype", "")), _plain(value)]
             for name, value in attrs.items() if name != DIGEST_ATTRIBUTE}
    text = json.dumps(items, sort_keys=True, ensure_ascii=True, default=repr)
    return hashlib.sha256(text.encode("ascii")).hexdigest()


def seal_attributes(node: h5py.HLObject) -> None:
    """Add the digest of ``node``'s attributes (call after the last attribute is set)."""
    node.attrs[DIGEST_ATTRIBUTE] = attributes_digest(node.attrs)


def check_attributes(node: h5py.HLObject, path) -> None:
    """Raise :class:`InputError` if ``node``'s attributes do not match their digest."""
    stored = node.attrs.get(DIGEST_ATTRIBUTE)
    if isinstance(stored, bytes):
        stored = stored.decode("ascii", "replace")
    if stored is None:
        raise InputError(f"{path}: damaged: the attribute digest {DIGEST_ATTRIBUTE!r} is missing")
    if attributes_digest(node.attrs) != stored:
        raise InputError(f"{path}: damaged: the attributes of {node.name} do not match their "
                         f"SHA-256 digest (they were changed after the file was written)")


def check_declared_size(dataset: h5py.Dataset, path) -> None:
    """Raise :class:`InputError` if ``dataset`` declares more data than the file can hold."""
    declared = dataset.size * dataset.dtype.itemsize
    stored = dataset.id.get_storage_size()
    if declared > MAX_EXPANSION * stored:
        raise InputError(f"{path}: {dataset.name} declares {dataset.size:,} entries "
                         f"({declared:,} bytes) but stores only {stored:,} bytes: the file is "
                         "damaged or was not written by ohmgraph")


def read_dataset(dataset: h5py.Dataset, path) -> np.ndarray:
    """Read a whole dataset after :func:`check_declared_size`; a failed checksum is an error."""
    check_declared_size(dataset, path)
    try:
        return dataset[()]
    except OSError as error:
        raise InputError(f"{path}: {dataset.name} is damaged: its data fail their checksum "
                         f"or cannot be decoded ({error})") from None


def check_file(h5: h5py.File, path) -> None:
    """Check a whole file written by ohmgraph before adding to it: the root attribute digest
    (when the file has one), and every dataset's declared size and checksums, chunk by chunk."""
    if DIGEST_ATTRIBUTE in h5.attrs:
        check_attributes(h5, path)
    datasets = []
    h5.visititems(lambda name, item: datasets.append(item)
                  if isinstance(item, h5py.Dataset) else None)
    for dataset in datasets:
        check_declared_size(dataset, path)
        try:
            for block in (dataset.iter_chunks() if dataset.chunks and dataset.size else [()]):
                dataset[block]
        except OSError as error:
            raise InputError(f"{path}: {dataset.name} is damaged: its data fail their "
                             f"checksum or cannot be decoded ({error})") from None
